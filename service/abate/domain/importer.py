"""Worksheet import: CSV, XLSX or an Abate JSON export into a study, every row checked, then all or nothing."""

from dataclasses import dataclass, field

from abate.db import database
from abate.domain import modes
from abate.domain.import_records import ACTION_FIELDS, json_record, problem, spreadsheet_record
from abate.domain.import_writer import ImportWriter
from abate.domain.studies import CAUTION, get_study, require_open_for_changes
from abate.domain.worksheets import (
    HEADER_SEARCH_ROWS,
    JsonExport,
    is_blank,
    normalised_title,
    open_upload,
    safe_file_name,
)
from abate.errors import ValidationFailed, field_error
from abate.models import RATING_DIMENSIONS

FIELDS = ("action_title", "action_owner", "action_owner_email", "action_due_date", "action_kind")
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
                    errors=[problem(number, title, "", "no column has this title") for title in missing],
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
                problem(
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
            problem(number, None, name, f"no column for {name.replace('_', ' ')}; name one or map it")
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
            yield spreadsheet_record(number, values, self.columns, scale_set)


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
            yield json_record(position, item, scale_set)


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


def _read(plan, scale_set, report, writer=None):
    """Check and count every record; hand each to writer while the file has shown no problem."""
    for record, problems in plan.records(scale_set):
        report["rows"] += 1
        report["problems"] += problems
        report["modes"] += 1
        report["actions"] += len(record.actions)
        if writer is not None and not report["problems"]:
            writer.add(record)


def _refuse_unless_complete(report, plan, file_name):
    """Raise WorksheetRejected if any row has a problem or there is no row at all."""
    if report["problems"]:
        raise WorksheetRejected(
            f"{len(report['problems'])} problems in {file_name}; nothing was imported", errors=report["problems"]
        )
    if not report["rows"]:
        raise WorksheetRejected(
            f"{file_name} has no rows under its header",
            errors=[problem(plan.header_row, None, "", "no data rows")],
        )


def import_worksheet(study_id, stream, file_name, *, actor, mapping=None, sheet=None, dry_run=False):
    """Check every row of an uploaded worksheet and (unless dry_run) create its modes and actions at once.

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
        if dry_run:
            _read(plan, scale_set, report)
            return report
        # Rows are written as they are checked, in one transaction that any problem rolls back: the file is
        # read once, and a second reading would cost as much as the first.
        with database.atomic():
            writer = ImportWriter(study.id, file_name, actor=actor)
            _read(plan, scale_set, report, writer)
            _refuse_unless_complete(report, plan, file_name)
            report["mode_ids"] = writer.finish()
        report["imported"] = True
        return report
    finally:
        if workbook is not None:
            workbook.close()
