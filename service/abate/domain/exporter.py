"""Worksheet export: a study's modes, scores, actions and risk summary as CSV, XLSX or re-importable JSON."""

import csv
import datetime
import io
import json
import re

import openpyxl
from openpyxl.cell import WriteOnlyCell
from openpyxl.styles import Alignment, Font, PatternFill
from openpyxl.utils import get_column_letter

from abate.domain.actions import action_views
from abate.domain.clock import utcnow
from abate.domain.criticality_report import criticality_report
from abate.domain.history import to_local_date
from abate.domain.modes import mode_views
from abate.domain.studies import CAUTION, get_study, study_view
from abate.models import CorrectiveAction, FailureMode, Study

MEDIA_TYPES = {
    "csv": "text/csv; charset=utf-8",
    "xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
    "json": "application/json",
}
EXPORT_FORMAT = "abate-study-export"
EXPORT_FORMAT_VERSION = 1
DATE_FORMAT = "yyyy-mm-dd"
DATETIME_FORMAT = "yyyy-mm-dd hh:mm"
# Header title, column width in characters, and how to get the value from (mode view, action view or None).
COLUMNS = (
    ("Mode ID", 9, lambda mode, action: mode["id"]),
    ("Item", 26, lambda mode, action: mode["item"]),
    ("Function", 30, lambda mode, action: mode["function"]),
    ("Failure mode", 34, lambda mode, action: mode["failure_mode"]),
    ("Effect", 34, lambda mode, action: mode["effect"]),
    ("Cause", 34, lambda mode, action: mode["cause"]),
    ("Prevention controls", 30, lambda mode, action: mode["prevention_controls"]),
    ("Detection controls", 30, lambda mode, action: mode["detection_controls"]),
    ("Initial S", 9, lambda mode, action: mode["initial"]["severity"]),
    ("Initial O", 9, lambda mode, action: mode["initial"]["occurrence"]),
    ("Initial D", 9, lambda mode, action: mode["initial"]["detection"]),
    ("Initial RPN", 11, lambda mode, action: mode["initial"]["rpn"]),
    ("Severity", 9, lambda mode, action: mode["severity"]),
    ("Occurrence", 11, lambda mode, action: mode["occurrence"]),
    ("Detection", 10, lambda mode, action: mode["detection"]),
    ("RPN", 8, lambda mode, action: mode["rpn"]),
    ("Projected S", 11, lambda mode, action: mode["projected"]["severity"]),
    ("Projected O", 11, lambda mode, action: mode["projected"]["occurrence"]),
    ("Projected D", 11, lambda mode, action: mode["projected"]["detection"]),
    ("Projected RPN", 13, lambda mode, action: mode["projected"]["rpn"]),
    ("Needs action", 12, lambda mode, action: "yes" if mode["needs_action"] else "no"),
    ("Priority", 9, lambda mode, action: mode["priority"]),
    ("Mode status", 12, lambda mode, action: mode["status"]),
    ("Action ID", 10, lambda mode, action: action and action["id"]),
    ("Action", 34, lambda mode, action: action and action["title"]),
    ("Action kind", 14, lambda mode, action: action and action["kind"]),
    ("Owner", 20, lambda mode, action: action and action["owner"]["name"]),
    ("Owner e-mail", 28, lambda mode, action: action and action["owner"]["email"]),
    ("Due date", 11, lambda mode, action: action and action["due_date"]),
    ("Action status", 13, lambda mode, action: action and action["status"]),
    ("Overdue", 9, lambda mode, action: action and ("yes" if action["overdue"] else "no")),
    ("Closed on", 11, lambda mode, action: action and action["closed_on"]),
    ("Evidence", 40, lambda mode, action: action and action["evidence"]),
)
# Added after the others while the study has quantitative criticality switched on (MIL-STD-1629A Task 102).
CRITICALITY_COLUMNS = (
    ("Failure rate", 13, lambda mode, action: mode["failure_rate"]),
    ("Rate unit", 18, lambda mode, action: mode["failure_rate_unit"]),
    ("Mode ratio", 11, lambda mode, action: mode["mode_ratio"]),
    ("Effect probability", 12, lambda mode, action: mode["effect_probability"]),
    ("Operating time", 12, lambda mode, action: mode["operating_time"]),
    ("Time unit", 9, lambda mode, action: mode["operating_time_unit"]),
    ("Severity class", 9, lambda mode, action: mode["fmeca"] and mode["fmeca"]["severity_class"]),
    ("Cm", 12, lambda mode, action: mode["fmeca"] and mode["fmeca"]["mode_criticality"]),
    ("Level", 7, lambda mode, action: mode["fmeca"] and mode["fmeca"]["level"]),
)
HEADER_FILL = PatternFill("solid", start_color="DDE4EE")


def columns_of(view):
    """The sheet's columns for this study: the criticality ones too while it has them switched on."""
    return COLUMNS + CRITICALITY_COLUMNS if view["criticality"]["enabled"] else COLUMNS


def _contents(study):
    """The study's view, and its modes (creation order) each with its actions under `actions`."""
    view = study_view(study)
    view["criticality_by_class"] = criticality_report(study)["total_by_class"] if study.criticality_enabled else None
    mode_list = mode_views(FailureMode.select().where(FailureMode.study == study).order_by(FailureMode.id), study)
    actions = (
        CorrectiveAction.select(CorrectiveAction, Study)
        .join(Study)
        .where(CorrectiveAction.study == study)
        .order_by(CorrectiveAction.id)
    )
    by_mode = {mode["id"]: [] for mode in mode_list}
    for action in action_views(actions):
        # The closing day as the study's people saw it, for the spreadsheets' date column.
        closed_on = to_local_date(action["closed_at"], study.timezone) if action["closed_at"] else None
        by_mode[action["mode_id"]].append({**action, "closed_on": closed_on})
    for mode in mode_list:
        mode["actions"] = by_mode[mode["id"]]
    return view, mode_list


def _table_rows(mode_list, columns):
    """One row per mode and action; a mode without actions gets one row with the action columns empty."""
    for mode in mode_list:
        for action in mode["actions"] or [None]:
            yield [value(mode, action) for _, _, value in columns]


def _summary_rows(view, exported_at):
    """(label, value) pairs of the study and its risk summary."""
    risk = view["risk"]
    return [
        ("Study", view["title"]),
        ("Kind", view["kind"]),
        ("Site", view["site"]),
        ("Product line", view["product_line"]),
        ("Owner", f"{view['owner']['name']} <{view['owner']['email']}>"),
        ("Status", view["status"]),
        ("Action at RPN at or above", view["action_threshold"]),
        ("Action at severity at or above", view["severity_threshold"]),
        ("Total RPN", risk["total_rpn"]),
        ("Initial total RPN", risk["initial_total_rpn"]),
        ("Projected total RPN", risk["projected_total_rpn"]),
        ("Reduction (RPN points)", risk["reduction"]["points"]),
        ("Reduction (%)", risk["reduction"]["percent"]),
        ("Highest RPN", risk["max_rpn"]),
        ("Modes needing action", risk["needs_action_count"]),
        ("Needing action with an open action", risk["needs_action_with_open_action"]),
        ("Open actions", risk["open_actions"]),
        ("Overdue actions", risk["overdue_actions"]),
        ("Active modes", risk["mode_count"]),
        ("Retired modes", risk["retired_count"]),
        ("High priority", risk["by_priority"]["high"]),
        ("Medium priority", risk["by_priority"]["medium"]),
        ("Low priority", risk["by_priority"]["low"]),
        *((f"Cr, severity class {name}", value) for name, value in (view["criticality_by_class"] or {}).items()),
        ("Exported at (UTC)", exported_at),
    ]


def _csv(view, mode_list, exported_at):
    buffer = io.StringIO()
    writer = csv.writer(buffer)
    columns = columns_of(view)
    writer.writerow([title for title, _, _ in columns])
    # None is written as an empty cell, dates and times as str() spells them (YYYY-MM-DD, YYYY-MM-DD HH:MM:SS).
    writer.writerows(_table_rows(mode_list, columns))
    writer.writerow([])
    writer.writerows(_summary_rows(view, exported_at))
    writer.writerow([f"Caution: {CAUTION}"])
    # A byte-order mark makes spreadsheet programs read the file as UTF-8 instead of a local code page.
    return buffer.getvalue().encode("utf-8-sig")


def _styled(sheet, value, **style):
    cell = WriteOnlyCell(sheet, value=value)
    for name, setting in style.items():
        setattr(cell, name, setting)
    return cell


def _data_cell(sheet, value):
    if isinstance(value, datetime.datetime):
        return _styled(sheet, value, number_format=DATETIME_FORMAT)
    if isinstance(value, datetime.date):
        return _styled(sheet, value, number_format=DATE_FORMAT)
    return value


def _xlsx(view, mode_list, exported_at):
    # Write-only mode streams rows to the file instead of holding every cell in memory.
    workbook = openpyxl.Workbook(write_only=True)
    modes_sheet = workbook.create_sheet("Modes")
    columns = columns_of(view)
    for index, (_, width, _) in enumerate(columns, start=1):
        modes_sheet.column_dimensions[get_column_letter(index)].width = width
    # Row 1 the title, row 2 the header; the panes keep both and the ID and item columns in view.
    modes_sheet.freeze_panes = "C3"
    modes_sheet.append([_styled(modes_sheet, f"{view['title']} - FMEA worksheet", font=Font(bold=True, size=14))])
    header_style = {"font": Font(bold=True), "fill": HEADER_FILL, "alignment": Alignment(wrap_text=True)}
    modes_sheet.append([_styled(modes_sheet, title, **header_style) for title, _, _ in columns])
    last_row = 2
    for row in _table_rows(mode_list, columns):
        modes_sheet.append([_data_cell(modes_sheet, value) for value in row])
        last_row += 1
    modes_sheet.auto_filter.ref = f"A2:{get_column_letter(len(columns))}{last_row}"
    modes_sheet.append([])
    modes_sheet.append([_styled(modes_sheet, f"Caution: {CAUTION}", font=Font(italic=True))])

    summary_sheet = workbook.create_sheet("Summary")
    summary_sheet.column_dimensions["A"].width = 36
    summary_sheet.column_dimensions["B"].width = 60
    for label, value in _summary_rows(view, exported_at):
        summary_sheet.append([_styled(summary_sheet, label, font=Font(bold=True)), _data_cell(summary_sheet, value)])
    summary_sheet.append([])
    summary_sheet.append([_styled(summary_sheet, f"Caution: {CAUTION}", font=Font(italic=True))])
    buffer = io.BytesIO()
    workbook.save(buffer)
    return buffer.getvalue()


def _json_value(value):
    if isinstance(value, datetime.datetime):
        return value.replace(tzinfo=datetime.UTC).isoformat().replace("+00:00", "Z")
    if isinstance(value, datetime.date):
        return value.isoformat()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def export_document(view, mode_list, exported_at):
    """The JSON export: study, risk summary, and every mode with its actions; it re-imports as it is."""
    study_fields = ("id", "title", "kind", "scope", "site", "product_line", "tags", "owner", "scale_id", "timezone")
    policy_fields = ("status", "action_threshold", "severity_threshold", "criticality")
    return {
        "format": EXPORT_FORMAT,
        "format_version": EXPORT_FORMAT_VERSION,
        "exported_at": exported_at,
        "study": {name: view[name] for name in (*study_fields, *policy_fields)},
        "risk": view["risk"],
        "criticality_by_class": view["criticality_by_class"],
        "modes": [
            {
                **{name: value for name, value in mode.items() if name not in ("study_id", "actions")},
                "actions": [
                    {name: value for name, value in action.items() if name not in ("study_id", "mode_id", "closed_on")}
                    for action in mode["actions"]
                ],
            }
            for mode in mode_list
        ],
        "caution": CAUTION,
    }


def _json(view, mode_list, exported_at):
    text = json.dumps(export_document(view, mode_list, exported_at), default=_json_value, ensure_ascii=False, indent=1)
    return text.encode("utf-8")


WRITERS = {"csv": _csv, "xlsx": _xlsx, "json": _json}


def export_file_name(study, file_format):
    """abate-study-<id>-<title in lower-case ASCII words>.<format>: safe in a Content-Disposition header."""
    words = re.sub(r"[^a-z0-9]+", "-", study.title.lower()).strip("-")[:60].rstrip("-")
    return f"abate-study-{study.id}{'-' + words if words else ''}.{file_format}"


def export_study(study_id, file_format, now=None):
    """(bytes, media type, file name) of the study exported as csv, xlsx or json."""
    study = get_study(study_id)
    view, mode_list = _contents(study)
    exported_at = (now or utcnow()).replace(microsecond=0)
    content = WRITERS[file_format](view, mode_list, exported_at)
    return content, MEDIA_TYPES[file_format], export_file_name(study, file_format)
