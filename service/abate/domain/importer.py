"""Worksheet import: CSV, XLSX or an Abate JSON export into a study, every row checked first, then all or nothing."""

from dataclasses import dataclass, field

from abate.db import database
from abate.domain import actions as corrective_actions
from abate.domain import modes
from abate.domain.studies import CAUTION, get_study, require_open_for_changes
from abate.domain.worksheets import (
    HEADER_SEARCH_ROWS,
    CellProblem,
    JsonExport,
    action_kind_value,
    date_value,
    is_blank,
    normalised_title,
    open_upload,
    owner_value,
    rating_value,
    safe_file_name,
    text_value,
)
from abate.errors import ValidationFailed, field_error
from abate.models import RATING_DIMENSIONS, CorrectiveAction

IMPORT_SOURCE = "import"
ACTION_FIELDS = ("action_title", "action_owner", "action_owner_email", "action_due_date", "action_kind")
FIELDS = (*modes.TEXT_FIELDS, *RATING_DIMENSIONS, *ACTION_FIELDS)
REQUIRED_COLUMNS = ("failure_mode", *RATING_DIMENSIONS)
# Recognised without a mapping, compared with case, spaces and punctuation ignored (our own list, common English).
COMMON_TITLES = {
    "item": ("Item", "Component", "Part", "Process step", "Step", "Operation"),
    "function": ("Function", "Requirement", "Function / requirement", "Purpose"),
    "failure_mode": ("Failure mode", "Potential failure mode", "Failure modes", "Mode", "Failure"),
    "effect": ("Effect", "Effects", "Failure effect", "Potential effect", "Effect of failure", "Potential effects"),
    "cause": ("Cause", "Causes", "Failure cause", "Potential cause", "Cause of failure", "Potential causes"),
    "prevention_controls": ("Prevention controls", "Prevention control", "Current prevention controls", "Prevention"),
    "detection_controls": ("Detection controls", "Detection control", "Current detection controls"),
    "severity": ("Severity", "Sev", "S"),
    "occurrence": ("Occurrence", "Occ", "O", "Occurence"),
    "detection": ("Detection", "Det", "D", "Detectability"),
    "action_title": ("Action", "Actions", "Recommended action", "Recommended actions", "Corrective action"),
    "action_owner": ("Owner", "Action owner", "Responsible", "Responsibility", "Assigned to"),
    "action_owner_email": ("Owner e-mail", "Owner email", "E-mail", "Email"),
    "action_due_date": ("Due date", "Due", "Target date", "Due by", "Target completion date"),
    "action_kind": ("Action kind", "Action type"),
}
TITLE_INDEX = {normalised_title(title): name for name, titles in COMMON_TITLES.items() for title in (name, *titles)}


class WorksheetRejected(ValidationFailed):
    """At least one row breaks a rule; errors lists every problem by row and column, and nothing was written."""

    slug = "worksheet-rejected"


def check_mapping(mapping):
    """Raise ValidationFailed unless mapping is {our field: their column title}."""
    if not isinstance(mapping, dict):
        raise ValidationFailed(
            "mapping must be a JSON object", errors=[field_error("mapping", 'e.g. {"severity": "S"}', "query")]
        )
    errors = [
        field_error("mapping", f"{name!r} is not a field; use one of {', '.join(FIELDS)}", "query")
        for name in mapping
        if name not in FIELDS
    ]
    errors += [
        field_error("mapping", f"the title for {name!r} must be a non-empty string", "query")
        for name, title in mapping.items()
        if not isinstance(title, str) or not title.strip()
    ]
    if errors:
        raise ValidationFailed("the column mapping names unknown fields or empty titles", errors=errors)


def _problem(row, column, name, message):
    """One problem of the file: its spreadsheet row (header = row 1 of a plain sheet), column title and field."""
    return {"location": "file", "row": row, "column": column, "field": name or "", "message": message}


@dataclass
class _Record:
    """One mode to create, its actions (each with how it finishes, if it is finished) and its retirement."""

    row: int
    mode: dict
    actions: list = field(default_factory=list)
    retire_reason: str = None


class _Checker:
    """Collects a row's problems while its values are converted."""

    def __init__(self, row, columns):
        self.row, self.columns, self.problems = row, columns, []

    def take(self, name, convert, value, *args):
        """convert(value, *args), or None with a problem noted under the column of name."""
        try:
            return convert(value, *args)
        except CellProblem as bad:
            self.problems.append(_problem(self.row, self.columns.get(name, name), name, f"{bad}"))
            return None

    def missing(self, name, message):
        """Note that a required value is absent."""
        self.problems.append(_problem(self.row, self.columns.get(name, name), name, message))


def _mode_data(checker, cells, scale_set):
    mode = {name: checker.take(name, text_value, cells.get(name)) for name in modes.TEXT_FIELDS if name in cells}
    if mode.get("failure_mode") == "":
        checker.missing("failure_mode", "is missing; every row needs a failure mode")
    for name in RATING_DIMENSIONS:
        mode[name] = checker.take(name, rating_value, cells.get(name), scale_set.maximum(name), scale_set.name)
    return mode


# Where an action's values come from: the field (and so the column) each problem is reported under.
SPREADSHEET_ACTION_FIELDS = {
    "title": "action_title",
    "owner": "action_owner",
    "due_date": "action_due_date",
    "kind": "action_kind",
}


def _action_data(checker, cells, names):
    """An action's create data from cells {title, owner, owner_email, due_date, kind}; names: where each came from."""
    title = checker.take(names["title"], text_value, cells.get("title"), CorrectiveAction.title.max_length)
    if title == "":
        checker.missing(names["title"], "is missing; an action needs a title")
    owner = None
    if is_blank(cells.get("owner")) and is_blank(cells.get("owner_email")):
        checker.missing(names["owner"], "is missing; an action needs an owner with an e-mail address")
    else:
        owner = checker.take(names["owner"], owner_value, cells.get("owner"), cells.get("owner_email"))
    due_date = None
    if is_blank(cells.get("due_date")):
        checker.missing(names["due_date"], "is missing; an action needs a due date")
    else:
        due_date = checker.take(names["due_date"], date_value, cells.get("due_date"))
    kind = checker.take(names["kind"], action_kind_value, cells.get("kind"))
    return {"title": title, "owner": owner, "due_date": due_date, "kind": kind}


def _spreadsheet_record(number, values, columns, scale_set):
    """A data row as a record and its problems."""
    cells = {name: values[index] if index < len(values) else None for name, (index, _) in columns.items()}
    titles = {name: title for name, (_, title) in columns.items()}
    checker = _Checker(number, titles)
    record = _Record(number, _mode_data(checker, cells, scale_set))
    if any(not is_blank(cells.get(name)) for name in ACTION_FIELDS):
        action_cells = {name.removeprefix("action_"): cells.get(name) for name in ACTION_FIELDS}
        record.actions.append((_action_data(checker, action_cells, SPREADSHEET_ACTION_FIELDS), None))
    return record, checker.problems


def _match_columns(values, mapping):
    """({field: (index, title)}, ignored titles) of a candidate header row."""
    mapped = {normalised_title(title): name for name, title in mapping.items()}
    columns, ignored = {}, []
    for index, value in enumerate(values):
        if is_blank(value):
            continue
        title = str(value).strip()
        key = normalised_title(title)
        name = mapped.get(key)
        if name is None and TITLE_INDEX.get(key) not in mapping:
            name = TITLE_INDEX.get(key)
        if name is None or name in columns:
            ignored.append(title)
        else:
            columns[name] = (index, title)
    return columns, ignored


def _header(rows, mapping):
    """(row number, columns, ignored titles) of the header: the first row naming every required column."""
    best = None
    for number, values in rows:
        columns, ignored = _match_columns(values, mapping)
        if all(name in columns for name in REQUIRED_COLUMNS):
            missing = [title for name, title in mapping.items() if name not in columns]
            if missing:
                raise WorksheetRejected(
                    "the mapping names columns the header row does not have",
                    errors=[_problem(number, title, "", "no column has this title") for title in missing],
                )
            return number, columns, ignored
        if columns and (best is None or len(columns) > len(best[1])):
            best = (number, columns)
        if number >= HEADER_SEARCH_ROWS:
            break
    if best is None:
        raise WorksheetRejected(
            "no header row found",
            errors=[
                _problem(
                    None,
                    None,
                    "",
                    f"none of the first {HEADER_SEARCH_ROWS} rows names the columns failure mode, severity, "
                    "occurrence and detection (e.g. 'Failure Mode', 'Sev', 'Occ', 'Det'); give a mapping",
                )
            ],
        )
    number, columns = best
    raise WorksheetRejected(
        "the header row lacks required columns",
        errors=[
            _problem(number, None, name, f"no column for {name.replace('_', ' ')}; name one or map it")
            for name in REQUIRED_COLUMNS
            if name not in columns
        ],
    )


@dataclass
class _SpreadsheetPlan:
    """Where a sheet's header is and which columns hold what."""

    sheet: object
    header_row: int
    columns: dict
    ignored: list

    def records(self, scale_set):
        """(record, problems) for every data row under the header; blank rows are skipped."""
        for number, values in self.sheet.rows():
            if number <= self.header_row or all(is_blank(value) for value in values):
                continue
            yield _spreadsheet_record(number, values, self.columns, scale_set)


def _json_action(checker, prefix, action, scale_set):
    """An exported action as (create data, finish), finish being None, ("close", data) or ("cancel", reason)."""
    if not isinstance(action, dict):
        checker.missing(prefix.rstrip("."), "must be an object")
        return None
    owner = action.get("owner") if isinstance(action.get("owner"), dict) else {}
    cells = {
        "title": action.get("title"),
        "owner": owner.get("name"),
        "owner_email": owner.get("email"),
        "due_date": action.get("due_date"),
        "kind": action.get("kind"),
    }
    data = _action_data(checker, cells, {key: prefix + key for key in SPREADSHEET_ACTION_FIELDS})
    data["description"] = checker.take(prefix + "description", text_value, action.get("description"))
    target = action.get("target") or {}
    data["target"] = {
        name: checker.take(
            f"{prefix}target.{name}", rating_value, target[name], scale_set.maximum(name), scale_set.name
        )
        for name in RATING_DIMENSIONS
        if not is_blank(target.get(name))
    }
    status = action.get("status") or "open"
    if status not in corrective_actions.ACTION_STATUSES:
        checker.missing(prefix + "status", f"{status!r} is not an action status")
        return None
    if status in corrective_actions.UNFINISHED:
        return {**data, "status": status}, None
    if status == "cancelled":
        return data, ("cancel", "cancelled in the exported study")
    evidence = checker.take(prefix + "evidence", text_value, action.get("evidence"))
    if not evidence:
        checker.missing(prefix + "evidence", "is missing; a closed action needs its evidence")
    verified_by = checker.take(
        prefix + "verified_by", text_value, action.get("verified_by"), CorrectiveAction.verified_by.max_length
    )
    return data, ("close", {"evidence": evidence, "verified_by": verified_by or ""})


def _json_record(position, item, scale_set):
    """One exported mode as a record and its problems; row is the mode's position in the list."""
    checker = _Checker(position, {})
    if not isinstance(item, dict):
        checker.missing("", "each entry of modes must be an object")
        return _Record(position, {}), checker.problems
    cells = {name: item.get(name) for name in (*modes.TEXT_FIELDS, *RATING_DIMENSIONS)}
    record = _Record(position, _mode_data(checker, cells, scale_set))
    for index, action in enumerate(item.get("actions") or []):
        parsed = _json_action(checker, f"actions[{index}].", action, scale_set)
        if parsed is not None:
            record.actions.append(parsed)
    if item.get("status") == "retired":
        if any(finish is None for _, finish in record.actions):
            checker.missing("status", "a retired mode cannot carry open actions")
        record.retire_reason = "retired in the exported study"
    return record, checker.problems


@dataclass
class _JsonPlan:
    """An Abate JSON export: its modes with their actions."""

    modes: list
    sheet: object = None
    header_row: int = None
    columns: dict = field(default_factory=dict)
    ignored: list = field(default_factory=list)

    def records(self, scale_set):
        """(record, problems) for every exported mode, in the export's order."""
        for position, item in enumerate(self.modes, start=1):
            yield _json_record(position, item, scale_set)


def _plan(opened, mapping):
    """What to read: a JSON export as it is, or a sheet once its header row is found."""
    if isinstance(opened, JsonExport):
        return _JsonPlan(opened.modes)
    header_row, columns, ignored = _header(opened.rows(), mapping)
    return _SpreadsheetPlan(opened, header_row, columns, ignored)


def _report(plan, file_name, dry_run):
    sheet = plan.sheet
    return {
        "file": file_name,
        "format": sheet.format if sheet else "json",
        "sheet": sheet.name if sheet else None,
        "header_row": plan.header_row,
        "columns": {name: title for name, (_, title) in plan.columns.items()},
        "ignored_columns": plan.ignored,
        "rows": 0,
        "modes": 0,
        "actions": 0,
        "dry_run": dry_run,
        "imported": False,
        "mode_ids": [],
        "problems": [],
        "caution": CAUTION,
    }


def _write(study_id, record, reason, actor):
    """Create one record's mode and actions through the domain functions; return the mode's id."""
    mode = modes.create_mode(study_id, record.mode, actor=actor, source=IMPORT_SOURCE, reason=reason)
    for data, finish in record.actions:
        action = corrective_actions.create_action(mode.id, data, actor=actor, source=IMPORT_SOURCE)
        if finish and finish[0] == "close":
            # The mode was created at its current ratings, so the closure records the result without a change.
            corrective_actions.close_action(action.id, finish[1], actor=actor, source=IMPORT_SOURCE)
        elif finish:
            corrective_actions.cancel_action(action.id, finish[1], actor=actor, source=IMPORT_SOURCE)
    if record.retire_reason:
        modes.retire_mode(mode.id, record.retire_reason, actor=actor, source=IMPORT_SOURCE)
    return mode.id


def import_worksheet(study_id, stream, file_name, *, actor, mapping=None, sheet=None, dry_run=False):
    """Check every row of an uploaded worksheet, then (unless dry_run) create its modes and actions at once.

    stream is a seekable binary file. Any problem and nothing is written: WorksheetRejected lists them
    all. A dry run returns the same report with the problems and writes nothing.
    """
    mapping = mapping or {}
    check_mapping(mapping)
    file_name = safe_file_name(file_name)
    study = get_study(study_id)
    require_open_for_changes(study)
    scale_set = study.scale_set
    opened, workbook = open_upload(stream, sheet)
    try:
        plan = _plan(opened, mapping)
        report = _report(plan, file_name, dry_run)
        for record, problems in plan.records(scale_set):
            report["rows"] += 1
            report["problems"] += problems
            report["modes"] += 1
            report["actions"] += len(record.actions)
        if dry_run:
            return report
        if report["problems"]:
            raise WorksheetRejected(
                f"{len(report['problems'])} problems in {file_name}; nothing was imported", errors=report["problems"]
            )
        if not report["rows"]:
            raise WorksheetRejected(
                f"{file_name} has no rows under its header",
                errors=[_problem(plan.header_row, None, "", "no data rows")],
            )
        with database.atomic():
            # The second pass reads the same rows again instead of holding them all in memory.
            for record, _ in plan.records(scale_set):
                reason = f"imported from {file_name}, row {record.row}"
                report["mode_ids"].append(_write(study.id, record, reason, actor))
        report["imported"] = True
        return report
    finally:
        if workbook is not None:
            workbook.close()
