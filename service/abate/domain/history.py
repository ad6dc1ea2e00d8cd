"""Risk history: the study's state at each interval end, change by cause, per-mode series, as-of state."""

import datetime
import zoneinfo
from dataclasses import dataclass

import peewee as pw

from abate.db import binding_number
from abate.domain.caching import BoundedCache
from abate.domain.clock import utcnow
from abate.domain.events import CAUSES
from abate.errors import ValidationFailed, field_error
from abate.models import CorrectiveAction, RiskEvent

INTERVALS = ("day", "week", "month")
# Kinds that change a mode's ratings or take it out of the study.
RATING_KINDS = ("created", "rerated", "action_closed", "action_reopened", "retired")
# After these action events the action is still to be done; after the others it is finished.
UNFINISHED_AFTER = ("action_created", "action_updated", "action_reopened")
_TICK = datetime.timedelta(microseconds=1)
MAX_POINTS = 1000


@dataclass(frozen=True)
class Period:
    """One interval of local calendar time [start, end), with both ends as naive UTC instants."""

    label: str
    start: datetime.date
    end: datetime.date
    start_utc: datetime.datetime
    end_utc: datetime.datetime


def interval_start(day, interval):
    """The first local date of the interval holding day (ISO 8601 weeks start on Monday)."""
    if interval == "day":
        return day
    if interval == "week":
        return day - datetime.timedelta(days=day.weekday())
    return day.replace(day=1)


def _next_start(start, interval):
    if interval == "day":
        return start + datetime.timedelta(days=1)
    if interval == "week":
        return start + datetime.timedelta(days=7)
    return (start.replace(day=28) + datetime.timedelta(days=4)).replace(day=1)


def _label(start, interval):
    if interval == "day":
        return start.isoformat()
    if interval == "week":
        year, week, _ = start.isocalendar()
        return f"{year}-W{week:02d}"
    return f"{start.year:04d}-{start.month:02d}"


def local_midnight_utc(day, timezone_name):
    """Local midnight at the start of day, as a naive UTC instant (zoneinfo resolves DST)."""
    local = datetime.datetime.combine(day, datetime.time(0), tzinfo=zoneinfo.ZoneInfo(timezone_name))
    return local.astimezone(datetime.UTC).replace(tzinfo=None)


def to_local_date(instant, timezone_name):
    """The local calendar date of a naive UTC instant."""
    return instant.replace(tzinfo=datetime.UTC).astimezone(zoneinfo.ZoneInfo(timezone_name)).date()


def periods(first_day, last_day, interval, timezone_name):
    """The intervals from the one holding first_day to the one holding last_day, in local time."""
    if interval not in INTERVALS:
        raise ValidationFailed("unknown interval", errors=[field_error("interval", "day, week or month", "query")])
    if last_day < first_day:
        raise ValidationFailed("the range is empty", errors=[field_error("to", "must not precede from", "query")])
    found, start = [], interval_start(first_day, interval)
    # One more than a request may hold is enough to refuse it; a longer list would only cost time.
    while start <= last_day and len(found) <= MAX_POINTS:
        end = _next_start(start, interval)
        found.append(
            Period(
                _label(start, interval),
                start,
                end,
                local_midnight_utc(start, timezone_name),
                local_midnight_utc(end, timezone_name),
            )
        )
        start = end
    return found


def point_instants(periods_, now):
    """(period, instant) for every period begun by now: its end, or now for the one in progress."""
    return [(period, min(period.end_utc, now)) for period in periods_ if period.start_utc <= now]


def state_before(study, instant):
    """The study's latest event strictly before instant (None if there is none): one indexed lookup."""
    return (
        RiskEvent.select(
            RiskEvent.study_total_rpn,
            RiskEvent.study_max_rpn,
            RiskEvent.study_needs_action_count,
            RiskEvent.study_open_actions,
            *(getattr(RiskEvent, cause) for cause in CAUSES),
        )
        .where((RiskEvent.study == study) & (RiskEvent.occurred_at < instant))
        .order_by(RiskEvent.occurred_at.desc(), RiskEvent.study_revision.desc())
        .first()
    )


def figures_of(event):
    """The study's totals after an event (zeros before the first) and its running sums by cause."""
    if event is None:
        return {"total_rpn": 0, "max_rpn": 0, "needs_action_count": 0, "open_actions": 0}, dict.fromkeys(CAUSES, 0)
    figures = {
        "total_rpn": event.study_total_rpn,
        "max_rpn": event.study_max_rpn,
        "needs_action_count": event.study_needs_action_count,
        "open_actions": event.study_open_actions,
    }
    return figures, {cause: getattr(event, cause) for cause in CAUSES}


class ActionSweep:
    """Replays a study's action events forward in time, to count overdue actions at each instant."""

    def __init__(self, study):
        self.events = list(
            RiskEvent.select(RiskEvent.action, RiskEvent.kind, RiskEvent.occurred_at, RiskEvent.action_due_date)
            .where((RiskEvent.study == study) & RiskEvent.action.is_null(False))
            .order_by(RiskEvent.study_revision)
            .namedtuples()
        )
        self.position = 0
        self.due_of_unfinished = {}

    def overdue_before(self, instant, local_day):
        """Actions unfinished just before instant whose due date lies before local_day."""
        while self.position < len(self.events) and self.events[self.position].occurred_at < instant:
            event = self.events[self.position]
            if event.kind in UNFINISHED_AFTER:
                self.due_of_unfinished[event.action] = event.action_due_date
            else:
                self.due_of_unfinished.pop(event.action, None)
            self.position += 1
        return sum(1 for due in self.due_of_unfinished.values() if due < local_day)


def mode_series(study, mode_ids, lookups, figure="rpn"):
    """{mode_id: [the figure (rpn, or a rating's name) just before each lookup instant, None where inactive]}.

    mode_ids None means every mode of the study.
    """
    after = getattr(RiskEvent, f"after_{figure}")
    query = (
        RiskEvent.select(RiskEvent.mode, RiskEvent.kind, RiskEvent.occurred_at, after)
        .where((RiskEvent.study == study) & RiskEvent.kind.in_(RATING_KINDS))
        .order_by(RiskEvent.study_revision)
    )
    if mode_ids is not None:
        query = query.where(RiskEvent.mode.in_(list(mode_ids)))
    events = list(query)
    known = list(mode_ids) if mode_ids is not None else sorted({event.mode_id for event in events})
    series = {mode_id: [] for mode_id in known}
    current, position = {}, 0
    for instant in lookups:
        while position < len(events) and events[position].occurred_at < instant:
            event = events[position]
            current[event.mode_id] = None if event.kind == "retired" else getattr(event, after.name)
            position += 1
        for mode_id, values in series.items():
            values.append(current.get(mode_id))
    return series


def _point(period, instant, now, figures, sums, previous_sums):
    return {
        "at": instant,
        "period": period.label,
        "in_progress": instant == now,
        **figures,
        "change": {cause.removeprefix("change_"): sums[cause] - previous_sums[cause] for cause in CAUSES},
    }


def _completed_points(study, completed):
    """Points of periods that have ended, each with the running sums it ended on."""
    sweep = ActionSweep(study)
    _, previous_sums = figures_of(state_before(study, completed[0][0].start_utc))
    points = []
    for period, instant in completed:
        figures, sums = figures_of(state_before(study, instant))
        figures["overdue_actions"] = sweep.overdue_before(instant, to_local_date(instant, study.timezone))
        points.append((_point(period, instant, None, figures, sums, previous_sums), sums))
        previous_sums = sums
    return points


_completed_points_cache = BoundedCache()


def revision_key(study):
    """What names one state of a study's risk record; the creation instant tells apart a study that
    reuses an id (in another database of the same process, or after a deletion)."""
    return binding_number(), study.id, study.created_at, study.risk_revision


def _cached_completed_points(study, completed):
    """Ended periods cannot change without a new event, so the study's revision keys them."""
    key = (revision_key(study), tuple((period.label, period.end_utc) for period, _ in completed))
    return _completed_points_cache.get_or_compute(key, lambda: _completed_points(study, completed))


def overdue_now(study, now):
    """Unfinished actions of the study due before today in its time zone (from the actions themselves)."""
    today = to_local_date(now, study.timezone)
    return (
        CorrectiveAction.select()
        .where((CorrectiveAction.study == study) & CorrectiveAction.unfinished() & (CorrectiveAction.due_date < today))
        .count()
    )


def history_points(study, periods_, now=None):
    """One point per period begun (the one in progress stamped now), with change by cause since the last.

    Returns (points, lookups): lookups are the instants the points describe the state just before.
    """
    now = now or utcnow()
    pairs = point_instants(periods_, now)
    if not pairs:
        return [], []
    completed = [(period, instant) for period, instant in pairs if instant < now]
    done = _cached_completed_points(study, completed) if completed else []
    points = [dict(point, change=dict(point["change"])) for point, _ in done]
    lookups = [instant for _, instant in completed]
    if len(pairs) > len(completed):
        period, _ = pairs[-1]
        if done:
            previous_sums = done[-1][1]
        else:
            previous_sums = figures_of(state_before(study, period.start_utc))[1]
        figures, sums = figures_of(state_before(study, now + _TICK))
        figures["overdue_actions"] = overdue_now(study, now)
        points.append(_point(period, now, now, figures, sums, previous_sums))
        lookups.append(now + _TICK)
    return points, lookups


def first_event_day(study):
    """The local date of the study's first event, or of its creation if it has none."""
    first = RiskEvent.select().where(RiskEvent.study == study).order_by(RiskEvent.study_revision).first()
    return to_local_date(first.occurred_at if first else study.created_at, study.timezone)


def risk_as_of(study, lookup):
    """The study's risk figures just before lookup, from its events."""
    figures, sums = figures_of(state_before(study, lookup))
    figures["overdue_actions"] = ActionSweep(study).overdue_before(lookup, to_local_date(lookup, study.timezone))
    figures["change_by_cause"] = {cause.removeprefix("change_"): value for cause, value in sums.items()}
    return figures


def ratings_as_of(mode_ids, lookup):
    """{mode_id: (kind, severity, occurrence, detection)} of each mode's last rating event before lookup."""
    latest = (
        RiskEvent.select(RiskEvent.mode, pw.fn.MAX(RiskEvent.study_revision).alias("revision"))
        .where(RiskEvent.mode.in_(list(mode_ids)) & (RiskEvent.occurred_at < lookup) & RiskEvent.kind.in_(RATING_KINDS))
        .group_by(RiskEvent.mode)
    )
    revisions = {row.mode_id: row.revision for row in latest}
    if not revisions:
        return {}
    events = RiskEvent.select().where(
        RiskEvent.mode.in_(list(revisions)) & RiskEvent.study_revision.in_(list(revisions.values()))
    )
    found = {}
    for event in events:
        if revisions.get(event.mode_id) == event.study_revision:
            prefix = "before" if event.kind == "retired" else "after"
            found[event.mode_id] = (
                event.kind,
                *(getattr(event, f"{prefix}_{name}") for name in ("severity", "occurrence", "detection")),
            )
    return found


def study_risk_as_of(study, value):
    """The study's risk figures at a past moment (a date means the end of that local day)."""
    lookup = as_of_lookup(value, study.timezone)
    return {**risk_as_of(study, lookup), "as_of": lookup - _TICK}


def as_of_lookup(value, timezone_name):
    """The instant an as_of query names: a date means the end of that local day."""
    if isinstance(value, datetime.datetime):
        return value + _TICK
    return local_midnight_utc(value + datetime.timedelta(days=1), timezone_name)


def check_point_count(periods_):
    """Refuse ranges that would answer with more than MAX_POINTS points."""
    if len(periods_) > MAX_POINTS:
        raise ValidationFailed(
            f"the range holds more than {MAX_POINTS} intervals, the most one request answers",
            errors=[field_error("interval", "choose a longer interval or a shorter range", "query")],
        )


def portfolio_points(studies, periods_, now=None):
    """Totals across studies at each period end (in the portfolio's time zone)."""
    now = now or utcnow()
    summed = []
    for study in studies:
        points, _ = history_points(study, periods_, now)
        for index, point in enumerate(points):
            if index == len(summed):
                summed.append({**point, "change": dict(point["change"])})
                continue
            total = summed[index]
            for name in ("total_rpn", "needs_action_count", "open_actions", "overdue_actions"):
                total[name] += point[name]
            total["max_rpn"] = max(total["max_rpn"], point["max_rpn"])
            for cause, value in point["change"].items():
                total["change"][cause] += value
    if not summed:
        summed = [
            {
                "at": instant,
                "period": period.label,
                "in_progress": instant == now,
                **figures_of(None)[0],
                "overdue_actions": 0,
                "change": {cause.removeprefix("change_"): 0 for cause in CAUSES},
            }
            for period, instant in point_instants(periods_, now)
        ]
    return summed
