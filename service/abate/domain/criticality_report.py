"""A study's criticality report (MIL-STD-1629A Task 102): the matrix of severity class against level,
items ranked by Cr per class, and the history of total Cr per class."""

import json
from types import SimpleNamespace

from abate.domain import criticality, fmeca
from abate.domain.studies import CAUTION
from abate.errors import Conflict
from abate.models import FailureMode, RiskEvent

LEVEL_BOUNDS = (
    # (level, share above, share at most): lower bound exclusive, upper bound inclusive.
    ("A", 0.20, None),
    ("B", 0.10, 0.20),
    ("C", 0.01, 0.10),
    ("D", 0.001, 0.01),
    ("E", None, 0.001),
)


def require_enabled(study):
    """Raise Conflict unless the study has quantitative criticality switched on."""
    if not study.criticality_enabled:
        raise Conflict(f"study {study.id} has quantitative criticality switched off; enable it first")


def _mode_rows(study):
    classes = fmeca.class_by_rating(study)
    sums = fmeca.ratio_sums(study)
    modes = FailureMode.select().where((FailureMode.study == study) & (FailureMode.status == "active"))
    rows = []
    for mode in modes.order_by(FailureMode.id):
        rows.append(
            {
                "mode_id": mode.id,
                "item": fmeca.item_key(mode.item),
                "failure_mode": mode.failure_mode,
                "severity": mode.severity,
                **fmeca.inputs_view(mode),
                **fmeca.mode_figures(mode, classes, sums),
                "_rate_and_time": (mode.failure_rate, mode.operating_time),
            }
        )
    return rows


def _matrix(rows):
    cells = []
    for severity_class in criticality.SEVERITY_CLASSES:
        for level, _, _ in LEVEL_BOUNDS:
            placed = [row for row in rows if row["severity_class"] == severity_class and row["level"] == level]
            cells.append(
                {
                    "severity_class": severity_class,
                    "level": level,
                    "mode_ids": [row["mode_id"] for row in placed],
                    "mode_criticality": sum(row["mode_criticality"] or 0.0 for row in placed),
                }
            )
    return cells


def _items(rows):
    grouped = {}
    for row in rows:
        grouped.setdefault(row["item"], []).append(row)
    items = []
    for item, members in grouped.items():
        by_class = dict.fromkeys(criticality.SEVERITY_CLASSES, 0.0)
        for row in members:
            if row["mode_criticality"] is not None and row["severity_class"]:
                by_class[row["severity_class"]] += row["mode_criticality"]
        ratios = [row["mode_ratio"] for row in members if row["mode_ratio"] is not None]
        warnings = [fmeca.ratio_warning(item, sum(ratios))] if ratios else []
        if len({row["_rate_and_time"] for row in members if None not in row["_rate_and_time"]}) > 1:
            warnings.append(f"the modes of item {item!r} carry different part failure rates or operating times")
        items.append(
            {
                "item": item,
                "mode_ids": [row["mode_id"] for row in members],
                "mode_ratio_sum": round(sum(ratios), 12) if ratios else None,
                "criticality_by_class": by_class,
                "warnings": [warning for warning in warnings if warning],
            }
        )
    return items


def _ranking(items):
    """Per class, the items with modes in it, highest Cr first (ties by item name)."""
    ranking = {}
    for severity_class in criticality.SEVERITY_CLASSES:
        ranked = [item for item in items if item["criticality_by_class"][severity_class] > 0]
        ranked.sort(key=lambda item: (-item["criticality_by_class"][severity_class], item["item"]))
        ranking[severity_class] = [
            {"item": item["item"], "criticality": item["criticality_by_class"][severity_class]} for item in ranked
        ]
    return ranking


def criticality_report(study):
    """The study's criticality matrix, its modes' figures, items ranked by Cr per class and totals."""
    require_enabled(study)
    rows = _mode_rows(study)
    items = _items(rows)
    for row in rows:
        del row["_rate_and_time"]
    totals = dict.fromkeys(criticality.SEVERITY_CLASSES, 0.0)
    for item in items:
        for severity_class, value in item["criticality_by_class"].items():
            totals[severity_class] += value
    return {
        "study_id": study.id,
        "severity_classes": fmeca.severity_classes_of(study),
        "levels": [
            {"level": level, "name": criticality.LEVEL_NAMES[level], "share_above": above, "share_at_most": most}
            for level, above, most in LEVEL_BOUNDS
        ],
        "matrix": _matrix(rows),
        "modes": rows,
        "items": items,
        "ranking": _ranking(items),
        "total_by_class": totals,
        "incomplete_mode_ids": [row["mode_id"] for row in rows if row["missing"]],
        "caution": CAUTION,
    }


def class_series(study, lookups):
    """{class: [total Cm of the active modes in that class just before each lookup]}.

    Each event keeps the mode's Cm after it; the class comes from the severity after it, read with the
    study's present map.
    """
    classes = fmeca.class_by_rating(study)
    events = (
        RiskEvent.select(RiskEvent.mode, RiskEvent.occurred_at, RiskEvent.after_severity, RiskEvent.after_criticality)
        .where(
            (RiskEvent.study == study)
            & RiskEvent.mode.is_null(False)
            & (RiskEvent.after_criticality.is_null(False) | RiskEvent.before_criticality.is_null(False))
        )
        .order_by(RiskEvent.study_revision)
        .namedtuples()
    )
    events = list(events)
    series = {name: [] for name in criticality.SEVERITY_CLASSES}
    current, position = {}, 0
    for instant in lookups:
        while position < len(events) and events[position].occurred_at < instant:
            event = events[position]
            values = SimpleNamespace(**json.loads(event.after_criticality)) if event.after_criticality else None
            value = fmeca.mode_criticality_of(values) if values else None
            current[event.mode] = (classes.get(event.after_severity), value) if value is not None else None
            position += 1
        totals = dict.fromkeys(criticality.SEVERITY_CLASSES, 0.0)
        for entry in current.values():
            if entry is not None and entry[0] is not None:
                totals[entry[0]] += entry[1]
        for name, values in series.items():
            values.append(totals[name])
    return series
