"""Risk events: the append-only record of every change to a study's risk, with running totals."""

import peewee as pw

from abate.db import lock_for_update
from abate.domain.clock import utcnow
from abate.models import FailureMode, RiskEvent, Study

EVENT_KINDS = ("created", "rerated", "retired", "policy_changed")


def lock_study(study_id):
    """Re-read the study holding its row lock, so writers to one study never interleave totals."""
    return lock_for_update(Study.select().where(Study.id == study_id)).get()


def _active_modes(study):
    return FailureMode.select().where((FailureMode.study == study) & (FailureMode.status == "active"))


def needs_action_condition(study):
    """SQL condition: a mode of this study that its policy asks to act on."""
    return FailureMode.needs_action_expr(study.action_threshold, study.severity_threshold)


def record_event(study, kind, *, mode=None, before=None, after=None, actor, source, reason="", occurred_at=None):
    """Append an event; study must be locked and the mode already saved in its new state.

    before/after are Ratings (or None where the mode enters or leaves the study). The
    study's running total moves by the RPN difference and the event keeps the totals after it.
    """
    before_rpn = before.rpn if before else 0
    after_rpn = after.rpn if after else 0
    study.total_rpn += after_rpn - before_rpn
    study.risk_revision += 1
    study.save(only=[Study.total_rpn, Study.risk_revision])
    active = _active_modes(study)
    return RiskEvent.create(
        study=study,
        mode=mode,
        kind=kind,
        occurred_at=occurred_at or utcnow(),
        actor=actor,
        source=source,
        reason=reason or "",
        **_ratings_columns("before", before),
        **_ratings_columns("after", after),
        study_total_rpn=study.total_rpn,
        study_max_rpn=active.select(pw.fn.MAX(FailureMode.rpn)).scalar() or 0,
        study_needs_action_count=active.where(needs_action_condition(study)).count(),
        study_revision=study.risk_revision,
    )


def _ratings_columns(prefix, ratings):
    values = ratings.as_dict() if ratings else dict.fromkeys(("severity", "occurrence", "detection", "rpn"))
    return {f"{prefix}_{name}": value for name, value in values.items()}


def _ratings_view(event, prefix):
    if getattr(event, f"{prefix}_rpn") is None:
        return None
    return {name: getattr(event, f"{prefix}_{name}") for name in ("severity", "occurrence", "detection", "rpn")}


def event_view(event):
    """The event as plain data for the API."""
    return {
        "id": event.id,
        "study_id": event.study_id,
        "mode_id": event.mode_id,
        "kind": event.kind,
        "occurred_at": event.occurred_at,
        "recorded_at": event.recorded_at,
        "actor": event.actor,
        "source": event.source,
        "reason": event.reason,
        "before": _ratings_view(event, "before"),
        "after": _ratings_view(event, "after"),
        "study_total_rpn": event.study_total_rpn,
        "study_max_rpn": event.study_max_rpn,
        "study_needs_action_count": event.study_needs_action_count,
        "study_revision": event.study_revision,
    }


def events_query(study_id, mode_id=None, kind=None):
    """The study's events (optionally of one mode or kind), for pagination by the caller."""
    query = RiskEvent.select().where(RiskEvent.study == study_id)
    if mode_id is not None:
        query = query.where(RiskEvent.mode == mode_id)
    if kind is not None:
        query = query.where(RiskEvent.kind == kind)
    return query
