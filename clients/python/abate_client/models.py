"""Frozen views of the server's JSON under its field names; a resource read alone keeps its ETag."""

import dataclasses
import datetime
from typing import Any, ClassVar


def _timestamp(value):
    return None if value is None else datetime.datetime.fromisoformat(value)


def _ratings(value):
    return None if value is None else Ratings.from_json(value)


class _FromJson:
    """Builds a dataclass from a JSON object; keys it does not know (a newer server's) are ignored."""

    converters: ClassVar[dict] = {}

    @classmethod
    def from_json(cls, data, **extra):
        """Build the object from a decoded JSON object plus what the body does not carry (the etag)."""
        known = {field.name for field in dataclasses.fields(cls)}
        values = {name: value for name, value in data.items() if name in known}
        for name, convert in cls.converters.items():
            if name in values:
                values[name] = convert(values[name])
        return cls(**values, **extra)


_TIMESTAMPS = {"created_at": _timestamp, "updated_at": _timestamp}


@dataclasses.dataclass(frozen=True)
class Ratings(_FromJson):
    """Severity, occurrence and detection with their RPN (S x O x D)."""

    severity: int
    occurrence: int
    detection: int
    rpn: int


@dataclasses.dataclass(frozen=True)
class ScaleSet(_FromJson):
    """A rating scale set; each dimension is {"max": int, "levels": [{"value", "label", "criteria"}]}."""

    converters: ClassVar[dict] = _TIMESTAMPS

    id: int
    name: str
    description: str
    severity: dict[str, Any]
    occurrence: dict[str, Any]
    detection: dict[str, Any]
    default_action_threshold: int
    default_severity_threshold: int
    builtin: bool
    max_rpn: int
    in_use: bool
    version: int
    created_at: datetime.datetime
    updated_at: datetime.datetime
    etag: str | None = None
    occurrence_rate_basis: str | None = None


@dataclasses.dataclass(frozen=True)
class RiskSummary(_FromJson):
    """A study's risk over its active modes; `pareto` is filled on single-study reads only."""

    total_rpn: int
    initial_total_rpn: int
    max_rpn: int
    needs_action_count: int
    mode_count: int
    retired_count: int
    by_priority: dict[str, int]
    caution: str
    pareto: list[dict[str, Any]] = dataclasses.field(default_factory=list)


@dataclasses.dataclass(frozen=True)
class Study(_FromJson):
    """An FMEA study with its risk summary; `owner` is {"name", "email"}."""

    converters: ClassVar[dict] = {**_TIMESTAMPS, "risk": RiskSummary.from_json}

    id: int
    title: str
    kind: str
    scope: str
    tags: list[str]
    site: str
    product_line: str
    owner: dict[str, str]
    scale_id: int
    timezone: str
    status: str
    action_threshold: int
    severity_threshold: int
    risk: RiskSummary
    version: int
    risk_revision: int
    created_at: datetime.datetime
    updated_at: datetime.datetime
    etag: str | None = None


@dataclasses.dataclass(frozen=True)
class Mode(_FromJson):
    """A failure mode with its current ratings, scores and the ratings it was created with."""

    converters: ClassVar[dict] = {
        **_TIMESTAMPS,
        "retired_at": _timestamp,
        "initial": Ratings.from_json,
        "projected": lambda value: None if value is None else Ratings.from_json(value),
    }

    id: int
    study_id: int
    item: str
    function: str
    failure_mode: str
    effect: str
    cause: str
    prevention_controls: str
    detection_controls: str
    severity: int
    occurrence: int
    detection: int
    rpn: int
    criticality: int
    initial: Ratings
    needs_action: bool
    needs_action_reasons: list[str]
    priority: str
    status: str
    version: int
    created_at: datetime.datetime
    updated_at: datetime.datetime
    retired_at: datetime.datetime | None
    # Per rating the lowest of current and the open actions' targets, and how many actions are open
    # (None in a list of how the modes stood at a past moment).
    projected: Ratings | None = None
    open_actions: int | None = None
    etag: str | None = None


@dataclasses.dataclass(frozen=True)
class RiskEvent(_FromJson):
    """One change to a study's risk, with the ratings before and after and the study's totals after it."""

    converters: ClassVar[dict] = {
        "occurred_at": _timestamp,
        "recorded_at": _timestamp,
        "before": _ratings,
        "after": _ratings,
    }

    id: int
    study_id: int
    mode_id: int | None
    kind: str
    occurred_at: datetime.datetime
    recorded_at: datetime.datetime
    actor: str
    source: str
    reason: str
    before: Ratings | None
    after: Ratings | None
    study_total_rpn: int
    study_max_rpn: int
    study_needs_action_count: int
    study_revision: int
    observation_ids: list[int] | None = None


def _date(value):
    return None if value is None else datetime.date.fromisoformat(value)


@dataclasses.dataclass(frozen=True)
class Action(_FromJson):
    """A corrective action on a failure mode; `target` and `result` are ratings dicts (any may be None)."""

    converters: ClassVar[dict] = {
        **_TIMESTAMPS,
        "closed_at": _timestamp,
        "cancelled_at": _timestamp,
        "due_date": _date,
        "original_due_date": _date,
    }

    id: int
    mode_id: int
    study_id: int
    title: str
    description: str
    kind: str
    owner: dict[str, str]
    due_date: datetime.date
    original_due_date: datetime.date
    due_date_changes: int
    status: str
    overdue: bool
    days_overdue: int
    target: dict[str, int | None] | None
    external_ref: dict[str, str] | None
    result: dict[str, int | None] | None
    rating_raised: bool
    evidence: str
    verified_by: str
    closed_at: datetime.datetime | None
    cancelled_at: datetime.datetime | None
    version: int
    created_at: datetime.datetime
    updated_at: datetime.datetime
    etag: str | None = None


@dataclasses.dataclass(frozen=True)
class HistoryPoint(_FromJson):
    """A study's (or the portfolio's) state at the end of one interval; `change` is RPN change by cause."""

    converters: ClassVar[dict] = {"at": _timestamp}

    at: datetime.datetime
    period: str
    in_progress: bool
    total_rpn: int
    max_rpn: int
    needs_action_count: int
    open_actions: int
    overdue_actions: int
    change: dict[str, int]


def _points(values):
    return [HistoryPoint.from_json(value) for value in values]


@dataclasses.dataclass(frozen=True)
class StudyHistory(_FromJson):
    """A study's risk over time: points per interval, optional per-mode series, and the projection ahead."""

    converters: ClassVar[dict] = {"points": _points}

    study_id: int
    interval: str
    timezone: str
    points: list[HistoryPoint]
    modes: list[dict[str, Any]]
    projection: dict[str, Any]
    caution: str


@dataclasses.dataclass(frozen=True)
class PortfolioHistory(_FromJson):
    """Risk over time summed over the studies that matched the filters."""

    converters: ClassVar[dict] = {"points": _points}

    interval: str
    timezone: str
    study_ids: list[int]
    points: list[HistoryPoint]
    caution: str


@dataclasses.dataclass(frozen=True)
class Reminder(_FromJson):
    """One digest e-mail of the outbox; a run's report leaves out what the outbox has not decided yet."""

    converters: ClassVar[dict] = {
        "day": _date,
        "next_attempt_at": _timestamp,
        "sent_at": _timestamp,
        "created_at": _timestamp,
    }

    dedup_key: str
    recipient: str
    day: datetime.date
    overdue: int
    due_soon: int
    escalated: int
    id: int | None = None
    status: str | None = None
    attempts: int | None = None
    last_error: str | None = None
    next_attempt_at: datetime.datetime | None = None
    sent_at: datetime.datetime | None = None
    created_at: datetime.datetime | None = None


def _reminders(values):
    return [Reminder.from_json(value) for value in values]


@dataclasses.dataclass(frozen=True)
class ReminderRun(_FromJson):
    """What one run of the reminder job did (with dry_run: would do); skipped is weekend, busy or None."""

    converters: ClassVar[dict] = {
        "day": _date,
        "recorded": _reminders,
        "sent": _reminders,
        "retrying": _reminders,
        "failed": _reminders,
    }

    day: datetime.date
    dry_run: bool
    skipped: str | None
    recorded: list[Reminder]
    sent: list[Reminder]
    retrying: list[Reminder]
    failed: list[Reminder]


@dataclasses.dataclass(frozen=True)
class Webhook(_FromJson):
    """A webhook subscription; `secret` is set only on the object that create() returned."""

    converters: ClassVar[dict] = _TIMESTAMPS

    id: int
    url: str
    events: list[str]
    description: str
    active: bool
    disabled_reason: str
    version: int
    created_at: datetime.datetime
    updated_at: datetime.datetime
    secret: str | None = None
    etag: str | None = None


@dataclasses.dataclass(frozen=True)
class DeliveryAttempt(_FromJson):
    """One HTTP attempt at a delivery; status_code is None when no answer came."""

    converters: ClassVar[dict] = {"attempted_at": _timestamp}

    attempted_at: datetime.datetime
    status_code: int | None
    error: str
    response_excerpt: str
    duration_ms: int


def _attempts(values):
    return [DeliveryAttempt.from_json(value) for value in values]


@dataclasses.dataclass(frozen=True)
class Delivery(_FromJson):
    """One event for one subscription: its fixed payload, its stable webhook_id and every attempt."""

    converters: ClassVar[dict] = {
        "next_attempt_at": _timestamp,
        "delivered_at": _timestamp,
        "created_at": _timestamp,
        "attempts": _attempts,
    }

    id: int
    subscription_id: int
    webhook_id: str
    event_type: str
    status: str
    attempt_count: int
    next_attempt_at: datetime.datetime | None
    last_status_code: int | None
    last_error: str
    delivered_at: datetime.datetime | None
    created_at: datetime.datetime
    payload: dict[str, Any]
    attempts: list[DeliveryAttempt]


@dataclasses.dataclass(frozen=True)
class Observation(_FromJson):
    """Failures of one mode counted by another system over an exposure (units or hours) and a period."""

    converters: ClassVar[dict] = {
        "period_start": _date,
        "period_end": _date,
        "recorded_at": _timestamp,
    }

    id: int
    mode_id: int
    study_id: int
    failures: int
    exposure: float
    exposure_unit: str
    period_start: datetime.date
    period_end: datetime.date
    source_system: str
    record_key: str
    note: str
    recorded_by: str
    recorded_at: datetime.datetime
    etag: str | None = None


@dataclasses.dataclass(frozen=True)
class OccurrenceEvidence(_FromJson):
    """What a mode's observations say about its occurrence: rates per the basis, the implied level, a suggestion."""

    converters: ClassVar[dict] = {"drift_since": _timestamp}

    mode_id: int
    occurrence: int
    status: str
    window: dict[str, Any]
    confidence: float
    estimate: str
    rate_basis: str | None
    exposure_unit: str | None
    observation_ids: list[int]
    ignored_observation_ids: list[int]
    failures: int | None
    exposure: float | None
    observed_rate: float | None
    upper_bound_rate: float | None
    implied_occurrence: int | None
    band: dict[str, Any] | None
    occurrence_suggestion: dict[str, Any] | None
    drift: bool
    drift_since: datetime.datetime | None
