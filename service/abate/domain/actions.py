"""Corrective actions: their life cycle, and closure as the verified re-rating of a mode."""

import peewee as pw

from abate.db import database
from abate.domain import events as risk_events
from abate.domain import fmeca, observed_rates, reliability
from abate.domain.clock import local_today, utcnow
from abate.domain.modes import apply_ratings, locked_active_mode, ratings_of
from abate.domain.references import reference_view, save_referenced, set_reference
from abate.domain.scales import check_ratings
from abate.domain.scoring import Ratings
from abate.domain.studies import get_study, require_open_for_changes
from abate.domain.versions import action_tag, check_precondition, save_new_version
from abate.errors import InvalidTransition, NotFound, ValidationFailed, field_error
from abate.models import RATING_DIMENSIONS, CorrectiveAction, RiskEvent, Study

ACTION_KINDS = ("prevention", "detection", "design_change")
ACTION_STATUSES = ("open", "in_progress", "closed", "cancelled")
UNFINISHED = ("open", "in_progress")
# What a closure may verify beside the ratings: a new part failure rate or failure mode ratio.
CRITICALITY_RESULTS = ("failure_rate", "failure_rate_unit", "mode_ratio")
_TEXT_FIELDS = ("title", "description", "kind")
ACTION_SORTS = {
    "due_date": [(CorrectiveAction.due_date, False), (CorrectiveAction.id, False)],
    "-due_date": [(CorrectiveAction.due_date, True), (CorrectiveAction.id, True)],
}


def get_action(action_id):
    """Return the action with this id or raise NotFound."""
    action = CorrectiveAction.get_or_none(CorrectiveAction.id == action_id)
    if action is None:
        raise NotFound(f"corrective action {action_id} does not exist")
    return action


def _set_target(action, target):
    for name in RATING_DIMENSIONS:
        setattr(action, f"target_{name}", (target or {}).get(name))


def new_action(mode, study, data, created_at):
    """An unsaved action on the mode from checked create data (no external reference), created at created_at."""
    action = CorrectiveAction(
        mode=mode,
        study=study,
        **{name: data[name] for name in _TEXT_FIELDS if name in data},
        owner_name=data["owner"]["name"],
        owner_email=data["owner"]["email"],
        due_date=data["due_date"],
        original_due_date=data["due_date"],
        status=data.get("status", "open"),
        created_at=created_at,
        updated_at=created_at,
    )
    _set_target(action, data.get("target"))
    return action


def create_action(mode_id, data, *, actor, source, reason=""):
    """Open a corrective action on an active mode."""
    if data.get("status", "open") not in UNFINISHED:
        raise ValidationFailed(
            "a new action is open or in progress", errors=[field_error("status", "open or in_progress")]
        )
    with database.atomic():
        study, mode = locked_active_mode(mode_id)
        check_ratings(study.scale_set, {key: value for key, value in (data.get("target") or {}).items() if value})
        occurred_at = risk_events.resolve_effective_at(study, data.get("effective_at"))
        action = new_action(mode, study, data, occurred_at)
        set_reference(action, data.get("external_ref"))
        save_referenced(action)
        risk_events.record_event(
            study,
            "action_created",
            mode=mode,
            action=action,
            actor=actor,
            source=source,
            reason=reason,
            occurred_at=occurred_at,
        )
    return action


def put_action_by_reference(system, key, data, *, actor, source, expected_tags=None):
    """Create the action carrying system/key (on data's mode_id) or change it; return (action, created)."""
    existing = CorrectiveAction.get_or_none(
        (CorrectiveAction.external_system == system) & (CorrectiveAction.external_key == key)
    )
    changes = {name: value for name, value in data.items() if name != "mode_id"}
    if existing is not None:
        return update_action(existing.id, changes, actor=actor, source=source, expected_tags=expected_tags), False
    missing = [name for name in ("mode_id", "title", "kind", "owner", "due_date") if name not in data]
    if missing:
        raise ValidationFailed(
            f"no action carries {system}/{key} yet; creating one needs {', '.join(missing)}",
            errors=[field_error(name, "required to create the action") for name in missing],
        )
    created = create_action(
        data["mode_id"], {**changes, "external_ref": {"system": system, "key": key}}, actor=actor, source=source
    )
    return created, True


def _locked_action(action_id):
    """Lock the action's study, then return (study, fresh action)."""
    study = risk_events.lock_study(get_action(action_id).study_id)
    return study, CorrectiveAction.get_by_id(action_id)


def _require_status(action, allowed, verb):
    if action.status not in allowed:
        raise InvalidTransition(f"corrective action {action.id} is {action.status}; it cannot be {verb}")


def update_action(action_id, changes, *, actor, source, expected_tags=None):
    """Change an unfinished action; a new due date is counted, the original kept."""
    with database.atomic():
        study, action = _locked_action(action_id)
        check_precondition(action_tag(action, study), expected_tags)
        _require_status(action, UNFINISHED, "changed")
        require_open_for_changes(study)
        if "status" in changes and changes["status"] not in UNFINISHED:
            raise InvalidTransition("use the close or cancel operation to finish an action")
        tracked_before = _tracked(action)
        if "target" in changes:
            check_ratings(study.scale_set, {key: value for key, value in (changes["target"] or {}).items() if value})
            _set_target(action, changes["target"])
        if "external_ref" in changes:
            set_reference(action, changes["external_ref"])
        for name in _TEXT_FIELDS:
            if name in changes:
                setattr(action, name, changes[name])
        if "owner" in changes:
            action.owner_name = changes["owner"].get("name", action.owner_name)
            action.owner_email = changes["owner"].get("email", action.owner_email)
        if "due_date" in changes and changes["due_date"] != action.due_date:
            action.due_date = changes["due_date"]
            action.due_date_changes += 1
        action.status = changes.get("status", action.status)
        save_new_version(action)
        # Due date, status and target feed the open-action counts and the projection: each move is an event.
        if _tracked(action) != tracked_before:
            reason = changes.get("reason", "") or _describe_change(tracked_before, action)
            risk_events.record_event(
                study, "action_updated", mode=action.mode, action=action, actor=actor, source=source, reason=reason
            )
    return action


def _tracked(action):
    """What of an action the risk record follows: its due date, status and target ratings."""
    return action.due_date, action.status, _target_text(action)


def _target_text(action):
    values = {name: getattr(action, f"target_{name}") for name in RATING_DIMENSIONS}
    return " ".join(f"{name[0].upper()}{value}" for name, value in values.items() if value is not None) or "none"


def _describe_change(tracked_before, action):
    due_before, status_before, target_before = tracked_before
    parts = []
    if action.due_date != due_before:
        parts.append(f"due date {due_before.isoformat()} -> {action.due_date.isoformat()}")
    if action.status != status_before:
        parts.append(f"status {status_before} -> {action.status}")
    if _target_text(action) != target_before:
        parts.append(f"target {target_before} -> {_target_text(action)}")
    return "; ".join(parts)


def close_action(action_id, data, *, actor, source, expected_tags=None):
    """Close with verified result ratings and evidence: the action closes and the mode is re-rated, together."""
    with database.atomic():
        study, action = _locked_action(action_id)
        check_precondition(action_tag(action, study), expected_tags)
        _require_status(action, UNFINISHED, "closed")
        occurred_at = risk_events.resolve_effective_at(study, data.get("effective_at"))
        study, mode = locked_active_mode(action.mode_id)
        result = {name: value for name, value in (data.get("result") or {}).items() if value is not None}
        ratings_result = {name: value for name, value in result.items() if name in RATING_DIMENSIONS}
        check_ratings(study.scale_set, ratings_result)
        before = ratings_of(mode)
        after = Ratings(**{name: ratings_result.get(name, getattr(before, name)) for name in RATING_DIMENSIONS})
        raised = any(getattr(after, name) > getattr(before, name) for name in RATING_DIMENSIONS)
        criticality_before = fmeca.snapshot(mode)
        fmeca.apply_mode_inputs(mode, {name: result[name] for name in CRITICALITY_RESULTS if name in result})
        fmeca.check_item_ratios(study, mode)
        apply_ratings(mode, after)
        save_new_version(mode, occurred_at)
        for name in RATING_DIMENSIONS:
            setattr(action, f"result_{name}", getattr(after, name))
        if "failure_rate" in result:
            action.result_failure_rate, action.result_failure_rate_unit = mode.failure_rate, mode.failure_rate_unit
        action.result_mode_ratio = result.get("mode_ratio")
        action.status = "closed"
        action.evidence = data["evidence"]
        action.verified_by = data.get("verified_by", "")
        action.closed_at = occurred_at
        save_new_version(action)
        risk_events.record_event(
            study,
            "action_closed",
            mode=mode,
            action=action,
            before=before,
            after=after,
            actor=actor,
            source=source,
            reason=data["evidence"],
            occurred_at=occurred_at,
            rating_raised=raised,
            criticality_before=criticality_before,
        )
    return action


def closing_event(action):
    """The event of the action's latest closure, or None."""
    return (
        RiskEvent.select()
        .where((RiskEvent.action == action) & (RiskEvent.kind == "action_closed"))
        .order_by(RiskEvent.study_revision.desc())
        .first()
    )


def reopen_action(action_id, reason, *, actor, source, expected_tags=None):
    """Undo a closure: each rating that closure changed goes back to its value before it."""
    with database.atomic():
        study, action = _locked_action(action_id)
        check_precondition(action_tag(action, study), expected_tags)
        _require_status(action, ("closed",), "reopened")
        study, mode = locked_active_mode(action.mode_id)
        closure = closing_event(action)
        before = ratings_of(mode)
        restored = {
            name: getattr(closure, f"before_{name}")
            if getattr(closure, f"before_{name}") != getattr(closure, f"after_{name}")
            else getattr(before, name)
            for name in RATING_DIMENSIONS
        }
        after = Ratings(**restored)
        criticality_before = fmeca.snapshot(mode)
        if closure.before_criticality != closure.after_criticality:
            fmeca.restore(mode, closure.before_criticality)
        apply_ratings(mode, after)
        save_new_version(mode)
        for name in (*RATING_DIMENSIONS, *CRITICALITY_RESULTS):
            setattr(action, f"result_{name}", None)
        action.status, action.closed_at, action.evidence, action.verified_by = "open", None, "", ""
        save_new_version(action)
        risk_events.record_event(
            study,
            "action_reopened",
            mode=mode,
            action=action,
            before=before,
            after=after,
            actor=actor,
            source=source,
            reason=reason,
            criticality_before=criticality_before,
        )
    return action


def cancel_action(action_id, reason, *, actor, source, expected_tags=None):
    """Drop an unfinished action; the mode's ratings stay as they are."""
    with database.atomic():
        study, action = _locked_action(action_id)
        check_precondition(action_tag(action, study), expected_tags)
        _require_status(action, UNFINISHED, "cancelled")
        require_open_for_changes(study)
        action.status = "cancelled"
        action.cancelled_at = utcnow()
        save_new_version(action, action.cancelled_at)
        risk_events.record_event(
            study, "action_cancelled", mode=action.mode, action=action, actor=actor, source=source, reason=reason
        )
    return action


def _overdue_condition(today_by_timezone):
    """SQL: unfinished and due before today in the study's own time zone."""
    condition = None
    for timezone_name, today in today_by_timezone.items():
        step = (Study.timezone == timezone_name) & (CorrectiveAction.due_date < today)
        condition = step if condition is None else condition | step
    return CorrectiveAction.unfinished() & condition if condition is not None else CorrectiveAction.id.is_null()


def todays_by_timezone():
    """{timezone: today there} for every time zone a study uses."""
    zones = [row.timezone for row in Study.select(Study.timezone).distinct()]
    return {zone: local_today(zone) for zone in zones}


def actions_query(filters):
    """Actions matching the API's filters, joined to their study, for pagination by the caller."""
    query = CorrectiveAction.select(CorrectiveAction, Study).join(Study)
    equal = {
        "study_id": CorrectiveAction.study,
        "mode_id": CorrectiveAction.mode,
        "status": CorrectiveAction.status,
        "external_system": CorrectiveAction.external_system,
        "external_key": CorrectiveAction.external_key,
    }
    for name, column in equal.items():
        if filters.get(name) is not None:
            query = query.where(column == filters[name])
    if filters.get("owner_email"):
        query = query.where(pw.fn.LOWER(CorrectiveAction.owner_email) == filters["owner_email"].lower())
    if filters.get("due_before"):
        query = query.where(CorrectiveAction.due_date < filters["due_before"])
    if filters.get("due_after"):
        query = query.where(CorrectiveAction.due_date > filters["due_after"])
    if filters.get("overdue") is not None:
        overdue = _overdue_condition(todays_by_timezone())
        query = query.where(overdue if filters["overdue"] else ~overdue)
    return query


def days_overdue(action, today):
    """Whole days past the due date for an unfinished action, else 0."""
    if action.status not in UNFINISHED or today <= action.due_date:
        return 0
    return (today - action.due_date).days


def _ratings_or_none(action, prefix):
    values = {name: getattr(action, f"{prefix}_{name}") for name in RATING_DIMENSIONS}
    return values if any(value is not None for value in values.values()) else None


def _result_view(action):
    """The verified ratings and, where the closure verified them, the new failure rate and mode ratio."""
    result = _ratings_or_none(action, "result")
    if result is None:
        return None
    if action.result_failure_rate is not None:
        rate = reliability.from_per_hour(action.result_failure_rate, action.result_failure_rate_unit)
        result.update(failure_rate=fmeca.rounded(rate), failure_rate_unit=action.result_failure_rate_unit)
    if action.result_mode_ratio is not None:
        result["mode_ratio"] = action.result_mode_ratio
    return result


def action_views(actions):
    """The actions as plain data for the API; overdue is judged in each study's time zone."""
    actions = list(actions)
    zones = {}
    views = []
    for action in actions:
        study = action.study
        today = zones.setdefault(study.timezone, local_today(study.timezone))
        closure = closing_event(action) if action.status == "closed" else None
        views.append(
            {
                "id": action.id,
                "mode_id": action.mode_id,
                "study_id": action.study_id,
                **{name: getattr(action, name) for name in _TEXT_FIELDS},
                "owner": {"name": action.owner_name, "email": action.owner_email},
                "due_date": action.due_date,
                "original_due_date": action.original_due_date,
                "due_date_changes": action.due_date_changes,
                "status": action.status,
                "overdue": days_overdue(action, today) > 0,
                "days_overdue": days_overdue(action, today),
                "target": _ratings_or_none(action, "target"),
                "external_ref": reference_view(action),
                "result": _result_view(action),
                "rating_raised": bool(closure and closure.rating_raised),
                "evidence": action.evidence,
                "verified_by": action.verified_by,
                "closed_at": action.closed_at,
                "cancelled_at": action.cancelled_at,
                "version": action.version,
                "created_at": action.created_at,
                "updated_at": action.updated_at,
            }
        )
    return views


def action_view(action):
    """One action as plain data."""
    return action_views([action])[0]


def _data_check(study, action, evidence_of_mode):
    """The observed-data check of a closed action's occurrence effect (null where it claimed none)."""
    if not observed_rates.claims_occurrence_effect(action):
        return None
    if action.mode_id not in evidence_of_mode:
        evidence_of_mode[action.mode_id] = observed_rates.evaluate(study, action.mode)
    return observed_rates.data_check(evidence_of_mode[action.mode_id])


def action_effects(study_id):
    """Closed actions of a study ranked by risk removed, with planned (target) against achieved.

    An action meant to lower occurrence also shows whether the mode's observed failures bear it out.
    """
    study = get_study(study_id)
    evidence_of_mode = {}
    closures = (
        RiskEvent.select(RiskEvent, CorrectiveAction)
        .join(CorrectiveAction)
        .where(
            (RiskEvent.study == study_id) & (RiskEvent.kind == "action_closed") & (CorrectiveAction.status == "closed")
        )
        .order_by(RiskEvent.study_revision)
    )
    latest = {}
    for event in closures:
        latest[event.action_id] = event
    effects = []
    for event in latest.values():
        action = event.action
        before = Ratings(event.before_severity, event.before_occurrence, event.before_detection)
        target = _ratings_or_none(action, "target") or {}
        planned = Ratings(**{name: target.get(name) or getattr(before, name) for name in RATING_DIMENSIONS})
        effects.append(
            {
                "action_id": action.id,
                "mode_id": event.mode_id,
                "title": action.title,
                "kind": action.kind,
                "owner": {"name": action.owner_name, "email": action.owner_email},
                "closed_at": action.closed_at,
                "before": before.as_dict(),
                "planned": planned.as_dict(),
                "achieved": {name: getattr(event, f"after_{name}") for name in (*RATING_DIMENSIONS, "rpn")},
                "rpn_removed": event.before_rpn - event.after_rpn,
                "planned_rpn_removed": before.rpn - planned.rpn,
                "met_target": event.after_rpn <= planned.rpn,
                "rating_raised": event.rating_raised,
                "data_check": _data_check(study, action, evidence_of_mode),
            }
        )
    return sorted(effects, key=lambda effect: (-effect["rpn_removed"], effect["action_id"]))
