"""Studies: creating, changing and listing them, their life cycle and risk summary."""

import zoneinfo

import peewee as pw

from abate.db import database
from abate.domain import events as risk_events
from abate.domain import fmeca
from abate.domain.clock import local_today
from abate.domain.references import reference_view, save_referenced, set_reference
from abate.domain.scales import get_scale_set
from abate.domain.scoring import Ratings, RiskPolicy, assess, projected_ratings
from abate.domain.versions import check_precondition, save_new_version, study_tag
from abate.errors import Conflict, InvalidTransition, NotFound, ValidationFailed, field_error
from abate.models import RATING_DIMENSIONS, CorrectiveAction, FailureMode, Study, StudyTag
from abate.prepared import PreparedSelect

STUDY_KINDS = ("design", "process", "system", "other")
STUDY_STATUSES = ("draft", "active", "archived")
# Which status may follow which; an archived study can be taken up again, a started one not reset.
STUDY_TRANSITIONS = {
    "draft": {"active", "archived"},
    "active": {"archived"},
    "archived": {"active"},
}
PARETO_LENGTH = 10
CAUTION = (
    "Abate ranks and tracks risk; it does not certify. Severity of safety or regulatory effects "
    "needs review by qualified people; local codes, the applicable standards and licensed practice govern."
)
_PLAIN_FIELDS = ("title", "kind", "scope", "site", "product_line", "timezone")


_STUDY_BY_ID = PreparedSelect(Study, lambda study_id: Study.select().where(Study.id == study_id))
# The fields that name one state of a study (versions.content_key): all a cached view needs to check.
STATE_FIELDS = (Study.id, Study.created_at, Study.content_revision)
_STUDY_STATE_BY_ID = PreparedSelect(Study, lambda study_id: Study.select(*STATE_FIELDS).where(Study.id == study_id))


def get_study(study_id):
    """Return the study with this id or raise NotFound."""
    study = _STUDY_BY_ID.first(study_id)
    if study is None:
        raise NotFound(f"study {study_id} does not exist")
    return study


def study_state(study_id):
    """The study with only its STATE_FIELDS read, or NotFound: enough to tell whether a cached view is current."""
    state = _STUDY_STATE_BY_ID.first(study_id)
    if state is None:
        raise NotFound(f"study {study_id} does not exist")
    return state


def policy_of(study):
    """The study's risk policy."""
    return RiskPolicy(action_threshold=study.action_threshold, severity_threshold=study.severity_threshold)


def check_timezone(name):
    """Raise ValidationFailed unless name is an IANA time zone."""
    try:
        zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError) as error:
        raise ValidationFailed(
            "unknown time zone", errors=[field_error("timezone", f"{name!r} is not an IANA time zone name")]
        ) from error


def _check_policy(study, scale_set):
    errors = []
    if not 1 <= study.action_threshold <= scale_set.max_rpn:
        errors.append(field_error("action_threshold", f"must be between 1 and {scale_set.max_rpn} on this scale set"))
    if not 1 <= study.severity_threshold <= scale_set.severity_max:
        errors.append(
            field_error("severity_threshold", f"must be between 1 and {scale_set.severity_max} on this scale set")
        )
    if errors:
        raise ValidationFailed("the risk policy lies outside the study's scales", errors=errors)


def _set_tags(study, tags):
    StudyTag.delete().where(StudyTag.study == study).execute()
    if tags:
        StudyTag.insert_many([{"study": study.id, "tag": tag} for tag in sorted(set(tags))]).execute()


def create_study(data):
    """Create a study; thresholds default to the scale set's defaults."""
    scale_set = _scale_set_for(data["scale_id"])
    check_timezone(data["timezone"])
    study = Study(
        **{name: data[name] for name in _PLAIN_FIELDS if name in data},
        owner_name=data["owner"]["name"],
        owner_email=data["owner"]["email"],
        scale_set=scale_set,
        status=data.get("status", "draft"),
        action_threshold=data.get("action_threshold") or scale_set.default_action_threshold,
        severity_threshold=data.get("severity_threshold") or scale_set.default_severity_threshold,
    )
    _check_policy(study, scale_set)
    fmeca.apply_study_settings(study, data.get("criticality") or {}, scale_set)
    set_reference(study, data.get("external_ref"))
    with database.atomic():
        save_referenced(study)
        _set_tags(study, data.get("tags", []))
    return study


def _scale_set_for(scale_id):
    try:
        return get_scale_set(scale_id)
    except NotFound as error:
        raise ValidationFailed(error.detail, errors=[field_error("scale_id", error.detail)]) from error


def update_study(study_id, changes, *, actor, source, expected_tags=None):
    """Apply a partial change; a new risk policy is recorded as a risk event of its own."""
    with database.atomic():
        study = risk_events.lock_study(study_id)
        check_precondition(study_tag(study), expected_tags)
        old_policy = policy_of(study)
        if "status" in changes and changes["status"] != study.status:
            if changes["status"] not in STUDY_TRANSITIONS[study.status]:
                raise InvalidTransition(f"a study cannot go from {study.status} to {changes['status']}")
            study.status = changes["status"]
        if "scale_id" in changes and changes["scale_id"] != study.scale_set_id:
            if FailureMode.select().where(FailureMode.study == study).exists():
                raise Conflict("the study has failure modes rated on its scale set; it cannot change scales")
            study.scale_set = _scale_set_for(changes["scale_id"])
        if "timezone" in changes:
            check_timezone(changes["timezone"])
        for name in _PLAIN_FIELDS:
            if name in changes:
                setattr(study, name, changes[name])
        if "owner" in changes:
            study.owner_name = changes["owner"].get("name", study.owner_name)
            study.owner_email = changes["owner"].get("email", study.owner_email)
        for name in ("action_threshold", "severity_threshold"):
            if name in changes:
                setattr(study, name, changes[name])
        _check_policy(study, study.scale_set)
        if "criticality" in changes:
            fmeca.apply_study_settings(study, changes["criticality"], study.scale_set)
        if "tags" in changes:
            _set_tags(study, changes["tags"])
        if "external_ref" in changes:
            set_reference(study, changes["external_ref"])
        save_new_version(study)
        if policy_of(study) != old_policy:
            reason = (
                f"risk policy changed from RPN >= {old_policy.action_threshold} or S >= "
                f"{old_policy.severity_threshold} to RPN >= {study.action_threshold} or S >= {study.severity_threshold}"
            )
            risk_events.record_event(study, "policy_changed", actor=actor, source=source, reason=reason)
    return study


def require_open_for_changes(study):
    """An archived study is a closed record; raise Conflict on any change to its modes."""
    if study.status == "archived":
        raise Conflict(f"study {study.id} is archived; make it active again before changing its modes")


def studies_query(status=None, kind=None, tag=None, owner_email=None):
    """Studies matching the filters, for pagination by the caller."""
    query = Study.select()
    if status:
        query = query.where(Study.status == status)
    if kind:
        query = query.where(Study.kind == kind)
    if owner_email:
        query = query.where(pw.fn.LOWER(Study.owner_email) == owner_email.lower())
    if tag:
        query = query.where(Study.id.in_(StudyTag.select(StudyTag.study).where(StudyTag.tag == tag)))
    return query


def _tags_by_study(study_ids):
    tags = {study_id: [] for study_id in study_ids}
    for row in StudyTag.select().where(StudyTag.study.in_(study_ids)).order_by(StudyTag.tag):
        tags[row.study_id].append(row.tag)
    return tags


def risk_summaries(studies):
    """Return {study_id: summary} for the given studies: a few grouped queries, not one per study."""
    ids = [study.id for study in studies]
    summaries = {study.id: _empty_summary() for study in studies}
    if not ids:
        return summaries
    thresholds = (Study.action_threshold, Study.severity_threshold)
    initial_rpn = FailureMode.initial_severity * FailureMode.initial_occurrence * FailureMode.initial_detection
    rows = (
        FailureMode.select(
            FailureMode.study,
            FailureMode.status,
            pw.fn.COUNT(FailureMode.id).alias("modes"),
            pw.fn.SUM(FailureMode.rpn).alias("total"),
            pw.fn.SUM(initial_rpn).alias("initial_total"),
            pw.fn.MAX(FailureMode.rpn).alias("max_rpn"),
            pw.fn.SUM(pw.Case(None, [(FailureMode.priority_expr("high", *thresholds), 1)], 0)).alias("high"),
            pw.fn.SUM(pw.Case(None, [(FailureMode.priority_expr("medium", *thresholds), 1)], 0)).alias("medium"),
        )
        .join(Study, on=(FailureMode.study == Study.id))
        .where(FailureMode.study.in_(ids))
        .group_by(FailureMode.study, FailureMode.status)
        .dicts()
    )
    for row in rows:
        summary = summaries[row["study"]]
        if row["status"] != "active":
            summary["retired_count"] = int(row["modes"])
            continue
        high, medium_count = int(row["high"] or 0), int(row["medium"] or 0)
        summary.update(
            mode_count=int(row["modes"]),
            total_rpn=int(row["total"] or 0),
            initial_total_rpn=int(row["initial_total"] or 0),
            max_rpn=int(row["max_rpn"] or 0),
            needs_action_count=high,
            by_priority={"high": high, "medium": medium_count, "low": int(row["modes"]) - high - medium_count},
        )
    _add_action_figures(studies, summaries)
    for summary in summaries.values():
        reduction = summary["initial_total_rpn"] - summary["total_rpn"]
        summary["reduction"] = {
            "points": reduction,
            "percent": round(100 * reduction / summary["initial_total_rpn"], 1)
            if summary["initial_total_rpn"]
            else 0.0,
        }
    return summaries


def _add_action_figures(studies, summaries):
    """Projected totals, open and overdue action counts, and how many needs-action modes are covered."""
    by_id = {study.id: study for study in studies}
    unfinished = (
        CorrectiveAction.select(CorrectiveAction, FailureMode)
        .join(FailureMode)
        .where(
            CorrectiveAction.study.in_(list(by_id)) & CorrectiveAction.unfinished() & (FailureMode.status == "active")
        )
    )
    targets_by_mode, mode_of = {}, {}
    for action in unfinished:
        study = by_id[action.study_id]
        summary = summaries[study.id]
        summary["open_actions"] += 1
        if action.due_date < local_today(study.timezone):
            summary["overdue_actions"] += 1
        mode_of[action.mode_id] = action.mode
        targets_by_mode.setdefault(action.mode_id, []).append(
            {name: getattr(action, f"target_{name}") for name in RATING_DIMENSIONS}
        )
    for summary in summaries.values():
        summary["projected_total_rpn"] = summary["total_rpn"]
    for mode_id, targets in targets_by_mode.items():
        mode = mode_of[mode_id]
        current = Ratings(mode.severity, mode.occurrence, mode.detection)
        summary = summaries[mode.study_id]
        summary["projected_total_rpn"] -= current.rpn - projected_ratings(current, targets).rpn
        if assess(current, policy_of(by_id[mode.study_id])).needs_action:
            summary["needs_action_with_open_action"] += 1
    for summary in summaries.values():
        needing = summary["needs_action_count"]
        summary["needs_action_covered_percent"] = (
            round(100 * summary["needs_action_with_open_action"] / needing, 1) if needing else 100.0
        )


def _empty_summary():
    return {
        "total_rpn": 0,
        "initial_total_rpn": 0,
        "projected_total_rpn": 0,
        "max_rpn": 0,
        "needs_action_count": 0,
        "needs_action_with_open_action": 0,
        "mode_count": 0,
        "retired_count": 0,
        "open_actions": 0,
        "overdue_actions": 0,
        "by_priority": {"high": 0, "medium": 0, "low": 0},
        "caution": CAUTION,
    }


def pareto(study, length=PARETO_LENGTH):
    """The highest-RPN active modes with their cumulative share of the study's total RPN."""
    modes = (
        FailureMode.select()
        .where((FailureMode.study == study) & (FailureMode.status == "active"))
        .order_by(FailureMode.rpn.desc(), FailureMode.id)
        .limit(length)
    )
    ranking, running = [], 0
    for rank, mode in enumerate(modes, start=1):
        running += mode.rpn
        ranking.append(
            {
                "rank": rank,
                "mode_id": mode.id,
                "item": mode.item,
                "failure_mode": mode.failure_mode,
                "rpn": mode.rpn,
                "cumulative_percent": round(100 * running / study.total_rpn, 1) if study.total_rpn else 0.0,
            }
        )
    return ranking


def study_views(studies, with_pareto=False):
    """The studies as plain data for the API, their risk summaries included."""
    summaries = risk_summaries(studies)
    tags = _tags_by_study([study.id for study in studies])
    views = []
    for study in studies:
        risk = summaries[study.id]
        if with_pareto:
            risk["pareto"] = pareto(study)
        views.append(
            {
                "id": study.id,
                **{name: getattr(study, name) for name in _PLAIN_FIELDS},
                "tags": tags[study.id],
                "owner": {"name": study.owner_name, "email": study.owner_email},
                "scale_id": study.scale_set_id,
                "external_ref": reference_view(study),
                "status": study.status,
                "action_threshold": study.action_threshold,
                "severity_threshold": study.severity_threshold,
                "criticality": fmeca.study_settings_view(study),
                "risk": risk,
                "version": study.version,
                "risk_revision": study.risk_revision,
                "created_at": study.created_at,
                "updated_at": study.updated_at,
            }
        )
    return views


def study_view(study):
    """One study as plain data, with its Pareto ranking."""
    return study_views([study], with_pareto=True)[0]
