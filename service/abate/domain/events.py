"""Risk events: the append-only record of every change to a study's risk, with running totals."""

import datetime
import json

import peewee as pw

from abate import db
from abate.domain import fmeca, observed_rates, webhooks
from abate.domain.clock import utcnow
from abate.domain.scoring import RiskPolicy, needs_action_reasons
from abate.errors import Conflict, NotFound, ValidationFailed, field_error
from abate.models import CorrectiveAction, FailureMode, RiskEvent, Study

# Which running sum of RPN change each kind moves; the other kinds change no rating.
CAUSE_OF_KIND = {
    "created": "change_new_modes",
    "rerated": "change_rerating",
    "action_closed": "change_actions",
    "action_reopened": "change_actions",
    "retired": "change_retirements",
}
CAUSES = ("change_new_modes", "change_rerating", "change_actions", "change_retirements")
EVENT_KINDS = (
    *CAUSE_OF_KIND,
    "policy_changed",
    "criticality_changed",
    "action_created",
    "action_updated",
    "action_cancelled",
)
# record_event's default for the criticality before: unchanged, the same as the mode's now.
UNCHANGED = object()
# A recorded past time may lag the clock of the machine that sends it by this much.
CLOCK_SKEW = datetime.timedelta(minutes=5)


def lock_study(study_id):
    """Re-read the study holding its row lock, so writers to one study never interleave totals.

    Every write to a study's modes and actions begins here, so this is where its content revision moves
    (one UPDATE ... RETURNING, where the database has it, both takes the lock and reads the row); a
    rollback takes the move back.
    """
    bump = Study.update(content_revision=Study.content_revision + 1).where(Study.id == study_id)
    if db.updates_return_rows():
        study = next(iter(bump.returning(*Study._meta.sorted_fields).objects(Study).execute()), None)
    else:
        bump.execute()
        study = Study.select().where(Study.id == study_id).first()
    if study is None:
        raise NotFound(f"study {study_id} does not exist")
    return study


def _active_modes(study):
    return FailureMode.select().where((FailureMode.study == study) & (FailureMode.status == "active"))


def needs_action_condition(study):
    """SQL condition: a mode of this study that its policy asks to act on."""
    return FailureMode.needs_action_expr(study.action_threshold, study.severity_threshold)


def latest_event(study):
    """The study's most recent event, or None."""
    return RiskEvent.select().where(RiskEvent.study == study).order_by(RiskEvent.study_revision.desc()).first()


def resolve_effective_at(study, effective_at):
    """The time a change takes effect: now, or a past time no earlier than the study's latest event.

    Keeping events in time order is what lets a history point be one indexed lookup.
    """
    now = utcnow()
    if effective_at is None:
        return now
    if effective_at > now + CLOCK_SKEW:
        raise ValidationFailed(
            "effective_at lies in the future", errors=[field_error("effective_at", "must not be later than now")]
        )
    previous = latest_event(study)
    # Within the allowed skew a time a little ahead of ours counts as now: no event lies in the future.
    effective_at = min(effective_at, now)
    if previous is not None and effective_at < previous.occurred_at:
        raise Conflict(
            f"effective_at precedes the study's latest event ({previous.occurred_at.isoformat()}Z); "
            "record past work in time order"
        )
    return effective_at


def record_event(
    study,
    kind,
    *,
    mode=None,
    action=None,
    before=None,
    after=None,
    actor,
    source,
    reason="",
    occurred_at=None,
    rating_raised=False,
    criticality_before=UNCHANGED,
    observation_ids=None,
):
    """Append an event; study must be locked and the mode/action already saved in their new state.

    before/after are Ratings (or None where the mode enters or leaves the study). The
    study's running total moves by the RPN difference and the event keeps the totals after it.
    criticality_before is the mode's fmeca.snapshot before the change, where the change touched it;
    observation_ids names the observed data a re-rating rests on.
    """
    delta = (after.rpn if after else 0) - (before.rpn if before else 0)
    previous = latest_event(study)
    sums = {cause: getattr(previous, cause) if previous else 0 for cause in CAUSES}
    if kind in CAUSE_OF_KIND:
        sums[CAUSE_OF_KIND[kind]] += delta
    # Events stay in time order even if two machines' clocks disagree a little.
    occurred_at = max(occurred_at or utcnow(), previous.occurred_at) if previous else (occurred_at or utcnow())
    study.total_rpn += delta
    study.risk_revision += 1
    study.save(only=[Study.total_rpn, Study.risk_revision])
    active = _active_modes(study)
    event = RiskEvent.create(
        study=study,
        mode=mode,
        action=action,
        kind=kind,
        occurred_at=occurred_at,
        actor=actor,
        source=source,
        reason=reason or "",
        **_criticality_columns(kind, mode, criticality_before),
        **_ratings_columns("before", before),
        **_ratings_columns("after", after),
        study_total_rpn=study.total_rpn,
        study_max_rpn=active.select(pw.fn.MAX(FailureMode.rpn)).scalar() or 0,
        study_needs_action_count=_needs_action_count_after(study, kind, previous, before, after, active),
        study_revision=study.risk_revision,
        study_open_actions=CorrectiveAction.select()
        .where((CorrectiveAction.study == study) & CorrectiveAction.unfinished())
        .count(),
        action_due_date=action.due_date if action is not None else None,
        rating_raised=rating_raised,
        observation_ids=json.dumps(observation_ids) if observation_ids is not None else None,
        **sums,
    )
    # Queued in the change's own transaction: a change that rolls back sends no webhook.
    webhooks.enqueue_risk_event(
        event_view(event), event_view(previous) if previous else None, action.status if action is not None else None
    )
    if mode is not None and kind in webhooks.RERATING_KINDS:
        observed_rates.refresh_drift(study, mode, occurred_at)
    return event


def _needs_action_count_after(study, kind, previous, before, after, active):
    """Moved by the one mode that changed, so the cost does not grow with the study; recounted on a new policy."""
    if previous is None or kind == "policy_changed":
        return active.where(needs_action_condition(study)).count()
    policy = RiskPolicy(study.action_threshold, study.severity_threshold)

    def needs(ratings):
        return int(ratings is not None and bool(needs_action_reasons(ratings, policy)))

    return previous.study_needs_action_count + needs(after) - needs(before)


def _criticality_columns(kind, mode, criticality_before):
    """The mode's criticality snapshots before and after (a mode entering has none before, leaving none after)."""
    now = fmeca.snapshot(mode)
    if kind == "retired":
        return {"before_criticality": now, "after_criticality": None}
    before = None if kind == "created" else now if criticality_before is UNCHANGED else criticality_before
    return {"before_criticality": before, "after_criticality": now}


def _criticality_view(stored):
    return json.loads(stored) if stored else None


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
        "action_id": event.action_id,
        "kind": event.kind,
        "occurred_at": event.occurred_at,
        "recorded_at": event.recorded_at,
        "actor": event.actor,
        "source": event.source,
        "reason": event.reason,
        "before": _ratings_view(event, "before"),
        "after": _ratings_view(event, "after"),
        "criticality_before": _criticality_view(event.before_criticality),
        "criticality_after": _criticality_view(event.after_criticality),
        "study_total_rpn": event.study_total_rpn,
        "study_max_rpn": event.study_max_rpn,
        "study_needs_action_count": event.study_needs_action_count,
        "study_revision": event.study_revision,
        "study_open_actions": event.study_open_actions,
        "rating_raised": event.rating_raised,
        "observation_ids": json.loads(event.observation_ids) if event.observation_ids else None,
        "change_by_cause": {cause.removeprefix("change_"): getattr(event, cause) for cause in CAUSES},
    }


def events_query(study_id, mode_id=None, kind=None, action_id=None):
    """The study's events (optionally of one mode, action or kind), for pagination by the caller."""
    query = RiskEvent.select().where(RiskEvent.study == study_id)
    if mode_id is not None:
        query = query.where(RiskEvent.mode == mode_id)
    if action_id is not None:
        query = query.where(RiskEvent.action == action_id)
    if kind is not None:
        query = query.where(RiskEvent.kind == kind)
    return query
