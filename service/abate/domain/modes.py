"""Failure modes: creating, describing, re-rating and retiring them, each rating change an event."""

from abate.db import database
from abate.domain import events as risk_events
from abate.domain import fmeca
from abate.domain.clock import utcnow
from abate.domain.history import as_of_lookup, ratings_as_of
from abate.domain.references import reference_view, set_reference
from abate.domain.scales import check_ratings
from abate.domain.scoring import Ratings, assess, projected_ratings
from abate.domain.studies import STATE_FIELDS, get_study, policy_of, require_open_for_changes
from abate.domain.versions import check_precondition, mode_tag, save_new_version
from abate.errors import Conflict, NotFound, ValidationFailed, field_error
from abate.models import RATING_DIMENSIONS, CorrectiveAction, FailureMode, Study
from abate.prepared import PreparedSelect

TEXT_FIELDS = (
    "item",
    "function",
    "failure_mode",
    "effect",
    "cause",
    "prevention_controls",
    "detection_controls",
)
MODE_SORTS = {
    "-rpn": [(FailureMode.rpn, True), (FailureMode.id, False)],
    "rpn": [(FailureMode.rpn, False), (FailureMode.id, False)],
    "created_at": [(FailureMode.created_at, False), (FailureMode.id, False)],
}


_MODE_BY_ID = PreparedSelect(FailureMode, lambda mode_id: FailureMode.select().where(FailureMode.id == mode_id))
_STUDY_STATE_OF_MODE = PreparedSelect(
    Study,
    lambda mode_id: Study.select(*STATE_FIELDS).where(
        Study.id == FailureMode.select(FailureMode.study).where(FailureMode.id == mode_id)
    ),
)
_UNFINISHED_ACTIONS_OF_MODES = PreparedSelect(
    CorrectiveAction,
    lambda *mode_ids: CorrectiveAction.select().where(
        CorrectiveAction.mode.in_(mode_ids) & CorrectiveAction.unfinished()
    ),
)


def get_mode(mode_id):
    """Return the failure mode with this id or raise NotFound."""
    mode = _MODE_BY_ID.first(mode_id)
    if mode is None:
        raise NotFound(f"failure mode {mode_id} does not exist")
    return mode


def study_state_of_mode(mode_id):
    """The state of the study holding this mode (studies.study_state), in one lookup; NotFound for the mode."""
    state = _STUDY_STATE_OF_MODE.first(mode_id)
    if state is None:
        raise NotFound(f"failure mode {mode_id} does not exist")
    return state


def ratings_of(mode):
    """The mode's current ratings."""
    return Ratings(mode.severity, mode.occurrence, mode.detection)


def initial_ratings_of(mode):
    """The ratings the mode was created with."""
    return Ratings(mode.initial_severity, mode.initial_occurrence, mode.initial_detection)


def apply_ratings(mode, ratings):
    """Set the mode's three ratings and its stored RPN (unsaved)."""
    mode.severity, mode.occurrence, mode.detection = ratings.severity, ratings.occurrence, ratings.detection
    mode.rpn = ratings.rpn


def new_mode(study, data, created_at):
    """An unsaved mode of the study from checked create data (no external reference), at its initial ratings."""
    ratings = Ratings(data["severity"], data["occurrence"], data["detection"])
    mode = FailureMode(
        study=study,
        created_at=created_at,
        updated_at=created_at,
        **{name: data[name] for name in TEXT_FIELDS if name in data},
    )
    apply_ratings(mode, ratings)
    mode.initial_severity, mode.initial_occurrence, mode.initial_detection = (
        ratings.severity,
        ratings.occurrence,
        ratings.detection,
    )
    return mode


def create_mode(study_id, data, *, actor, source, reason=""):
    """Add a failure mode to a study and record its creation event (at data's effective_at, if any)."""
    with database.atomic():
        study = risk_events.lock_study(study_id)
        require_open_for_changes(study)
        check_ratings(study.scale_set, data)
        occurred_at = risk_events.resolve_effective_at(study, data.get("effective_at"))
        mode = new_mode(study, data, occurred_at)
        fmeca.apply_mode_inputs(mode, data)
        fmeca.check_item_ratios(study, mode)
        set_reference(mode, data.get("external_ref"))
        mode.save()
        risk_events.record_event(
            study,
            "created",
            mode=mode,
            after=ratings_of(mode),
            actor=actor,
            source=source,
            reason=reason,
            occurred_at=occurred_at,
        )
    return mode


def locked_active_mode(mode_id):
    """Lock the mode's study, then return (study, mode); a retired mode or archived study is a Conflict."""
    study = risk_events.lock_study(get_mode(mode_id).study_id)
    mode = FailureMode.get_by_id(mode_id)
    require_open_for_changes(study)
    if mode.status != "active":
        raise Conflict(f"failure mode {mode_id} is retired; retired modes keep their last ratings")
    return study, mode


def update_mode(mode_id, changes, *, actor, source, expected_tags=None, observation_ids=None):
    """Change a mode's text and/or ratings; a rating change needs a reason and appends an event.

    observation_ids names the observed data a re-rating rests on, for its event.
    """
    with database.atomic():
        study, mode = locked_active_mode(mode_id)
        check_precondition(mode_tag(mode, study), expected_tags)
        before = ratings_of(mode)
        rating_changes = {name: changes[name] for name in RATING_DIMENSIONS if name in changes}
        check_ratings(study.scale_set, rating_changes)
        after = Ratings(**{name: rating_changes.get(name, getattr(before, name)) for name in RATING_DIMENSIONS})
        if after != before and not changes.get("reason", "").strip():
            raise ValidationFailed(
                "a re-rating needs a reason", errors=[field_error("reason", "required when a rating changes")]
            )
        occurred_at = risk_events.resolve_effective_at(study, changes.get("effective_at"))
        for name in TEXT_FIELDS:
            if name in changes:
                setattr(mode, name, changes[name])
        if "external_ref" in changes:
            set_reference(mode, changes["external_ref"])
        criticality_before = fmeca.snapshot(mode)
        fmeca.apply_mode_inputs(mode, changes)
        fmeca.check_item_ratios(study, mode)
        apply_ratings(mode, after)
        save_new_version(mode)
        criticality_changed = fmeca.snapshot(mode) != criticality_before
        if after != before or criticality_changed:
            risk_events.record_event(
                study,
                "rerated" if after != before else "criticality_changed",
                mode=mode,
                before=before,
                after=after,
                actor=actor,
                source=source,
                reason=changes.get("reason", "").strip(),
                occurred_at=occurred_at,
                criticality_before=criticality_before,
                observation_ids=observation_ids,
            )
    return mode


def retire_mode(mode_id, reason, *, actor, source, expected_tags=None):
    """Take a mode out of the study's risk (never deleted); its event is a retirement, not a reduction."""
    with database.atomic():
        study, mode = locked_active_mode(mode_id)
        check_precondition(mode_tag(mode, study), expected_tags)
        if CorrectiveAction.select().where((CorrectiveAction.mode == mode) & CorrectiveAction.unfinished()).exists():
            raise Conflict(
                f"failure mode {mode_id} has open corrective actions; close or cancel them before retiring it"
            )
        mode.status = "retired"
        mode.retired_at = utcnow()
        save_new_version(mode, mode.retired_at)
        risk_events.record_event(
            study, "retired", mode=mode, before=ratings_of(mode), actor=actor, source=source, reason=reason
        )
    return mode


def modes_as_of_query(study, value):
    """The study's modes that existed at a past moment, and the lookup instant for their ratings."""
    lookup = as_of_lookup(value, study.timezone)
    return FailureMode.select().where((FailureMode.study == study) & (FailureMode.created_at < lookup)), lookup


def modes_query(study, status=None, needs_action=None, priority=None, min_rpn=None):
    """A study's modes matching the filters, for pagination by the caller."""
    query = FailureMode.select().where(FailureMode.study == study)
    if status:
        query = query.where(FailureMode.status == status)
    if min_rpn is not None:
        query = query.where(FailureMode.rpn >= min_rpn)
    if needs_action is not None:
        needs = risk_events.needs_action_condition(study)
        query = query.where(needs if needs_action else ~needs)
    if priority:
        query = query.where(FailureMode.priority_expr(priority, study.action_threshold, study.severity_threshold))
    return query


def unfinished_targets(mode_ids):
    """{mode_id: [target dicts of its open or in-progress actions]} for the given modes."""
    targets = {mode_id: [] for mode_id in mode_ids}
    for action in _UNFINISHED_ACTIONS_OF_MODES.rows(*mode_ids) if mode_ids else ():
        targets[action.mode_id].append({name: getattr(action, f"target_{name}") for name in RATING_DIMENSIONS})
    return targets


def projected_of(mode, targets):
    """The mode's ratings if its open actions meet their targets (a retired mode projects nothing)."""
    if mode.status != "active":
        return ratings_of(mode)
    return projected_ratings(ratings_of(mode), targets)


def mode_views(modes, study=None):
    """The modes as plain data for the API, scored by their study's policy."""
    modes = list(modes)
    targets = unfinished_targets([mode.id for mode in modes])
    studies, quantitative = {}, {}
    views = []
    for mode in modes:
        if study is None or study.id != mode.study_id:
            study = studies.get(mode.study_id) or get_study(mode.study_id)
            studies[study.id] = study
        if study.criticality_enabled and study.id not in quantitative:
            quantitative[study.id] = (fmeca.class_by_rating(study), fmeca.ratio_sums(study))
        current = ratings_of(mode)
        assessment = assess(current, policy_of(study))
        views.append(
            {
                "id": mode.id,
                "study_id": mode.study_id,
                **{name: getattr(mode, name) for name in TEXT_FIELDS},
                **current.as_dict(),
                "criticality": current.criticality,
                "initial": initial_ratings_of(mode).as_dict(),
                "projected": projected_of(mode, targets[mode.id]).as_dict(),
                "open_actions": len(targets[mode.id]),
                "needs_action": assessment.needs_action,
                "needs_action_reasons": list(assessment.reasons),
                "priority": assessment.priority,
                "status": mode.status,
                "external_ref": reference_view(mode),
                "version": mode.version,
                "created_at": mode.created_at,
                "updated_at": mode.updated_at,
                "retired_at": mode.retired_at,
                **fmeca.inputs_view(mode),
                "fmeca": fmeca.mode_figures(mode, *quantitative[study.id]) if study.id in quantitative else None,
            }
        )
    return views


def mode_views_as_of(modes, study, lookup):
    """The modes as they stood just before lookup, scored by the study's current policy."""
    modes = list(modes)
    past = ratings_as_of([mode.id for mode in modes], lookup)
    views = []
    for mode, view in zip(modes, mode_views(modes, study), strict=True):
        kind, *values = past[mode.id]
        then = Ratings(*values)
        assessment = assess(then, policy_of(study))
        view.update(
            then.as_dict(),
            criticality=then.criticality,
            needs_action=assessment.needs_action,
            needs_action_reasons=list(assessment.reasons),
            priority=assessment.priority,
            status="retired" if kind == "retired" else "active",
            projected=None,
            open_actions=None,
        )
        views.append(view)
    return views


def mode_view(mode):
    """One mode as plain data."""
    return mode_views([mode])[0]
