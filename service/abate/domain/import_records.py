"""Import rows as records: each worksheet row or exported mode converted and checked, its problems by row and column."""

from dataclasses import dataclass, field

from abate.domain import actions as corrective_actions
from abate.domain import modes
from abate.domain.worksheets import (
    CellProblem,
    action_kind_value,
    date_value,
    is_blank,
    owner_value,
    rating_value,
    text_value,
)
from abate.models import RATING_DIMENSIONS, CorrectiveAction

ACTION_FIELDS = ("action_title", "action_owner", "action_owner_email", "action_due_date", "action_kind")


def problem(row, column, name, message):
    """One problem of the file: its spreadsheet row (header = row 1 of a plain sheet), column title and field."""
    return {"location": "file", "row": row, "column": column, "field": name or "", "message": message}


@dataclass
class ImportRecord:
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
            self.problems.append(problem(self.row, self.columns.get(name, name), name, f"{bad}"))
            return None

    def missing(self, name, message):
        """Note that a required value is absent."""
        self.problems.append(problem(self.row, self.columns.get(name, name), name, message))


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


def spreadsheet_record(number, values, columns, scale_set):
    """A data row as a record and its problems."""
    cells = {name: values[index] if index < len(values) else None for name, (index, _) in columns.items()}
    titles = {name: title for name, (_, title) in columns.items()}
    checker = _Checker(number, titles)
    record = ImportRecord(number, _mode_data(checker, cells, scale_set))
    if any(not is_blank(cells.get(name)) for name in ACTION_FIELDS):
        action_cells = {name.removeprefix("action_"): cells.get(name) for name in ACTION_FIELDS}
        record.actions.append((_action_data(checker, action_cells, SPREADSHEET_ACTION_FIELDS), None))
    return record, checker.problems


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


def json_record(position, item, scale_set):
    """One exported mode as a record and its problems; row is the mode's position in the list."""
    checker = _Checker(position, {})
    if not isinstance(item, dict):
        checker.missing("", "each entry of modes must be an object")
        return ImportRecord(position, {}), checker.problems
    cells = {name: item.get(name) for name in (*modes.TEXT_FIELDS, *RATING_DIMENSIONS)}
    record = ImportRecord(position, _mode_data(checker, cells, scale_set))
    for index, action in enumerate(item.get("actions") or []):
        parsed = _json_action(checker, f"actions[{index}].", action, scale_set)
        if parsed is not None:
            record.actions.append(parsed)
    if item.get("status") == "retired":
        if any(finish is None for _, finish in record.actions):
            checker.missing("status", "a retired mode cannot carry open actions")
        record.retire_reason = "retired in the exported study"
    return record, checker.problems
