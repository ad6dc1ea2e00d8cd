"""/v1/studies: FMEA studies with their risk summary, and their risk events."""

import marshmallow as ma
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.auth import current_actor
from abate.api.common import (
    IF_MATCH_PARAMETER,
    REQUEST_SOURCE,
    AsOf,
    ExternalRefSchema,
    Id,
    PageArgsSchema,
    UTCDateTime,
    etag,
    if_match_tags,
    list_schema,
    page_of,
)
from abate.api.criticality import CriticalitySettingsSchema
from abate.domain import events as risk_events
from abate.domain import history, studies
from abate.domain.events import EVENT_KINDS
from abate.domain.references import reference_filter
from abate.domain.versions import study_tag
from abate.models import RiskEvent, Study

blp = Blueprint("studies", __name__, url_prefix="/v1/studies", description="FMEA studies")


class OwnerSchema(ma.Schema):
    """The person answerable for a study."""

    name = ma.fields.String(required=True, validate=ma.validate.Length(min=1, max=200))
    email = ma.fields.Email(required=True, validate=ma.validate.Length(max=320))


class PriorityCountsSchema(ma.Schema):
    """Active modes per priority band."""

    high = ma.fields.Integer()
    medium = ma.fields.Integer()
    low = ma.fields.Integer()


class ParetoEntrySchema(ma.Schema):
    """One mode in the Pareto ranking."""

    rank = ma.fields.Integer()
    mode_id = ma.fields.Integer()
    item = ma.fields.String()
    failure_mode = ma.fields.String()
    rpn = ma.fields.Integer()
    cumulative_percent = ma.fields.Float(metadata={"description": "Share of the total RPN down to this rank"})


class ReductionSchema(ma.Schema):
    """Risk removed so far."""

    points = ma.fields.Integer(metadata={"description": "initial_total_rpn - total_rpn"})
    percent = ma.fields.Float(metadata={"description": "(initial - current) / initial x 100, one decimal"})


class RiskSummarySchema(ma.Schema):
    """A study's risk now, over its active modes."""

    total_rpn = ma.fields.Integer(metadata={"description": "Sum of current RPN over active modes"})
    initial_total_rpn = ma.fields.Integer(metadata={"description": "Sum of the same modes' RPN at creation"})
    projected_total_rpn = ma.fields.Integer(
        metadata={"description": "Total if every open action meets its target (per rating, the lowest)"}
    )
    reduction = ma.fields.Nested(ReductionSchema, metadata={"description": "initial minus current"})
    max_rpn = ma.fields.Integer()
    needs_action_count = ma.fields.Integer()
    needs_action_with_open_action = ma.fields.Integer()
    needs_action_covered_percent = ma.fields.Float(
        metadata={"description": "Share of needs-action modes with an open action (100 when none needs action)"}
    )
    open_actions = ma.fields.Integer()
    overdue_actions = ma.fields.Integer()
    mode_count = ma.fields.Integer(metadata={"description": "Active modes"})
    retired_count = ma.fields.Integer()
    by_priority = ma.fields.Nested(PriorityCountsSchema)
    as_of = UTCDateTime(metadata={"description": "The moment an as_of read describes"})
    change_by_cause = ma.fields.Dict(
        keys=ma.fields.String(), values=ma.fields.Integer(), metadata={"description": "as_of reads: running change"}
    )
    pareto = ma.fields.List(
        ma.fields.Nested(ParetoEntrySchema),
        metadata={"description": "Highest-RPN modes first (single-study reads only)"},
    )
    caution = ma.fields.String()


_KIND = ma.validate.OneOf(studies.STUDY_KINDS)
_STATUS = ma.validate.OneOf(studies.STUDY_STATUSES)


class StudySchema(ma.Schema):
    """An FMEA study."""

    id = ma.fields.Integer(dump_only=True)
    title = ma.fields.String(required=True, validate=ma.validate.Length(min=1, max=300))
    kind = ma.fields.String(required=True, validate=_KIND, metadata={"description": "design, process, system or other"})
    scope = ma.fields.String(validate=ma.validate.Length(max=10000))
    tags = ma.fields.List(
        ma.fields.String(validate=ma.validate.Length(min=1, max=100)), validate=ma.validate.Length(max=50)
    )
    site = ma.fields.String(validate=ma.validate.Length(max=200))
    product_line = ma.fields.String(validate=ma.validate.Length(max=200))
    owner = ma.fields.Nested(OwnerSchema, required=True)
    scale_id = Id(required=True)
    timezone = ma.fields.String(required=True, metadata={"description": "IANA time zone, e.g. Europe/Berlin"})
    status = ma.fields.String(validate=_STATUS, metadata={"description": "draft (default), active or archived"})
    action_threshold = ma.fields.Integer(
        strict=True,
        validate=ma.validate.Range(min=1, max=1000),
        metadata={"description": "A mode with RPN at or above this needs action"},
    )
    severity_threshold = ma.fields.Integer(
        strict=True,
        validate=ma.validate.Range(min=1, max=10),
        metadata={"description": "A mode with severity at or above this needs action whatever its RPN"},
    )
    external_ref = ma.fields.Nested(ExternalRefSchema, allow_none=True)
    criticality = ma.fields.Nested(
        CriticalitySettingsSchema,
        metadata={"description": "Quantitative criticality (MIL-STD-1629A Task 102): switch and severity classes"},
    )
    risk = ma.fields.Nested(RiskSummarySchema, dump_only=True)
    version = ma.fields.Integer(dump_only=True)
    risk_revision = ma.fields.Integer(dump_only=True, metadata={"description": "Risk events so far"})
    created_at = UTCDateTime(dump_only=True)
    updated_at = UTCDateTime(dump_only=True)


class StudyPatchSchema(StudySchema):
    """A partial change to a study; every field, the owner's too, is optional."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **{"partial": True, **kwargs})


class StudyReadArgsSchema(ma.Schema):
    """Options of a single-study read."""

    as_of = AsOf(metadata={"description": "Risk at a past moment: a date (end of that local day) or a timestamp"})


class StudyQueryArgsSchema(PageArgsSchema):
    """Filters for the study list."""

    status = ma.fields.String(validate=_STATUS)
    kind = ma.fields.String(validate=_KIND)
    tag = ma.fields.String()
    owner_email = ma.fields.String(metadata={"description": "Owner e-mail, case-insensitive"})
    external_system = ma.fields.String()
    external_key = ma.fields.String()


class RatingsSchema(ma.Schema):
    """Ratings and their RPN."""

    severity = ma.fields.Integer()
    occurrence = ma.fields.Integer()
    detection = ma.fields.Integer()
    rpn = ma.fields.Integer()


class RiskEventSchema(ma.Schema):
    """One change to a study's risk, with the study's totals after it."""

    id = ma.fields.Integer()
    study_id = ma.fields.Integer()
    mode_id = ma.fields.Integer(allow_none=True)
    action_id = ma.fields.Integer(allow_none=True)
    kind = ma.fields.String(metadata={"description": ", ".join(EVENT_KINDS)})
    occurred_at = UTCDateTime()
    recorded_at = UTCDateTime()
    actor = ma.fields.String()
    source = ma.fields.String()
    reason = ma.fields.String()
    before = ma.fields.Nested(RatingsSchema, allow_none=True)
    after = ma.fields.Nested(RatingsSchema, allow_none=True)
    criticality_before = ma.fields.Dict(
        allow_none=True, metadata={"description": "The mode's stored criticality inputs and Cm before"}
    )
    criticality_after = ma.fields.Dict(allow_none=True, metadata={"description": "... and after"})
    study_total_rpn = ma.fields.Integer()
    study_max_rpn = ma.fields.Integer()
    study_needs_action_count = ma.fields.Integer()
    study_revision = ma.fields.Integer()
    study_open_actions = ma.fields.Integer()
    rating_raised = ma.fields.Boolean(metadata={"description": "A closure whose verified result raised a rating"})
    observation_ids = ma.fields.List(
        ma.fields.Integer(),
        allow_none=True,
        metadata={"description": "The observations a re-rating from observed data rests on (null otherwise)"},
    )
    change_by_cause = ma.fields.Dict(
        keys=ma.fields.String(),
        values=ma.fields.Integer(),
        metadata={"description": "Running RPN change since the study began: new_modes, rerating, actions, retirements"},
    )


class RiskEventQueryArgsSchema(PageArgsSchema):
    """Filters for a study's risk events."""

    mode_id = Id(strict=False)
    action_id = Id(strict=False)
    kind = ma.fields.String(validate=ma.validate.OneOf(EVENT_KINDS))


def _respond(study, status=200):
    headers = {"ETag": etag(study_tag(study))}
    if status == 201:
        headers["Location"] = f"/v1/studies/{study.id}"
    return studies.study_view(study), status, headers


@blp.route("")
class Studies(MethodView):
    """The collection of studies."""

    @blp.arguments(StudyQueryArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, list_schema(StudySchema))
    def get(self, args):
        """List studies, oldest first."""
        query = studies.studies_query(args.get("status"), args.get("kind"), args.get("tag"), args.get("owner_email"))
        query = reference_filter(query, Study, args.get("external_system"), args.get("external_key"))
        return page_of(query, [(Study.id, False)], args, studies.study_views)

    @blp.arguments(StudySchema)
    @blp.response(201, StudySchema)
    def post(self, data):
        """Create a study."""
        return _respond(studies.create_study(data), 201)


@blp.route("/<int:study_id>")
class StudyById(MethodView):
    """One study."""

    @blp.arguments(StudyReadArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, StudySchema)
    def get(self, args, study_id):
        """Read a study with its risk summary and Pareto ranking, or its risk at a past moment (as_of)."""
        study = studies.get_study(study_id)
        if "as_of" not in args:
            return _respond(study)
        view = studies.study_views([study])[0]
        view["risk"] = {**history.study_risk_as_of(study, args["as_of"]), "caution": studies.CAUTION}
        return view

    @blp.arguments(StudyPatchSchema)
    @blp.response(200, StudySchema)
    @blp.alt_response(409, description="Invalid status change, or a scale change for a study with modes")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def patch(self, changes, study_id):
        """Change a study; If-Match must name its current ETag, which moves with every risk event."""
        study = studies.update_study(
            study_id, changes, actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags(required=True)
        )
        return _respond(study)


@blp.route("/<int:study_id>/events")
class StudyEvents(MethodView):
    """The study's risk events, oldest first."""

    @blp.arguments(RiskEventQueryArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, list_schema(RiskEventSchema))
    def get(self, args, study_id):
        """List the study's risk events."""
        studies.get_study(study_id)
        query = risk_events.events_query(study_id, args.get("mode_id"), args.get("kind"), args.get("action_id"))
        order = [(RiskEvent.study_revision, False)]
        return page_of(query, order, args, lambda rows: [risk_events.event_view(row) for row in rows])
