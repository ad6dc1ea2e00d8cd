"""/v1/actions and /v1/modes/{id}/actions: corrective actions, their closure and their effect."""

import marshmallow as ma
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.auth import current_actor
from abate.api.common import (
    DATE_RANGE,
    IF_MATCH_PARAMETER,
    REQUEST_SOURCE,
    ExternalRefSchema,
    Id,
    PageArgsSchema,
    Rating,
    ReasonSchema,
    UTCDateTime,
    etag,
    if_match_tags,
    list_schema,
    page_of,
)
from abate.api.criticality import VerifiedRateSchema
from abate.api.studies import OwnerSchema, RatingsSchema
from abate.domain import actions
from abate.domain.references import find_by_reference
from abate.domain.studies import CAUTION
from abate.domain.versions import action_tag
from abate.models import CorrectiveAction

blp = Blueprint("actions", __name__, url_prefix="/v1", description="Corrective actions")


class TargetSchema(ma.Schema):
    """Ratings, any of which may be omitted."""

    severity = Rating(allow_none=True)
    occurrence = Rating(allow_none=True)
    detection = Rating(allow_none=True)


class ActionSchema(ma.Schema):
    """A corrective action on a failure mode."""

    id = ma.fields.Integer(dump_only=True)
    mode_id = ma.fields.Integer(dump_only=True)
    study_id = ma.fields.Integer(dump_only=True)
    title = ma.fields.String(required=True, validate=ma.validate.Length(min=1, max=300))
    description = ma.fields.String(validate=ma.validate.Length(max=10000))
    kind = ma.fields.String(
        required=True,
        validate=ma.validate.OneOf(actions.ACTION_KINDS),
        metadata={
            "description": "prevention (aims at occurrence), detection (aims at detection), "
            "design_change (may lower severity)"
        },
    )
    owner = ma.fields.Nested(OwnerSchema, required=True)
    due_date = ma.fields.Date(required=True, validate=DATE_RANGE)
    original_due_date = ma.fields.Date(dump_only=True)
    due_date_changes = ma.fields.Integer(dump_only=True, metadata={"description": "How often the due date moved"})
    status = ma.fields.String(
        validate=ma.validate.OneOf(actions.ACTION_STATUSES),
        metadata={"description": "open, in_progress, closed or cancelled (close and cancel have their own operations)"},
    )
    overdue = ma.fields.Boolean(
        dump_only=True, metadata={"description": "Unfinished and today (study time zone) is after the due date"}
    )
    days_overdue = ma.fields.Integer(dump_only=True)
    target = ma.fields.Nested(
        TargetSchema, allow_none=True, metadata={"description": "Ratings expected after the action"}
    )
    external_ref = ma.fields.Nested(ExternalRefSchema, allow_none=True)
    result = ma.fields.Nested(
        "ClosureResultSchema",
        dump_only=True,
        allow_none=True,
        metadata={"description": "Verified ratings (and a verified failure rate or mode ratio)"},
    )
    rating_raised = ma.fields.Boolean(dump_only=True, metadata={"description": "The verified result raised a rating"})
    evidence = ma.fields.String(dump_only=True)
    verified_by = ma.fields.String(dump_only=True)
    closed_at = UTCDateTime(dump_only=True, allow_none=True)
    cancelled_at = UTCDateTime(dump_only=True, allow_none=True)
    effective_at = UTCDateTime(
        load_only=True,
        metadata={"description": "When the action was decided, for recording past work; not before the latest event"},
    )
    version = ma.fields.Integer(dump_only=True)
    created_at = UTCDateTime(dump_only=True)
    updated_at = UTCDateTime(dump_only=True)


class ActionPatchSchema(ActionSchema):
    """A change to an unfinished action; every field optional."""

    reason = ma.fields.String(
        validate=ma.validate.Length(max=2000), metadata={"description": "Why, e.g. for a new due date"}
    )
    # Every status is accepted here so that finishing an action by PATCH is the life cycle's 409, not a 422.
    status = ma.fields.String(
        validate=ma.validate.OneOf(actions.ACTION_STATUSES),
        metadata={"description": "open or in_progress; closed and cancelled are reached by their own operations"},
    )

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **{"partial": True, **kwargs})


class ClosureResultSchema(TargetSchema, VerifiedRateSchema):
    """Verified ratings after the action, and (for criticality) a verified failure rate or mode ratio."""


class CloseSchema(ma.Schema):
    """The verified outcome of an action."""

    result = ma.fields.Nested(
        ClosureResultSchema,
        load_default=dict,
        metadata={"description": "Verified ratings after the action; omitted ones stay"},
    )
    evidence = ma.fields.String(required=True, validate=ma.validate.Length(min=1, max=10000))
    verified_by = ma.fields.String(load_default="", validate=ma.validate.Length(max=200))
    effective_at = UTCDateTime(
        metadata={
            "description": "When the closure took effect, for recording past work; not before the study's latest event"
        }
    )


class ActionQueryArgsSchema(PageArgsSchema):
    """Filters and order of the action list."""

    study_id = Id(strict=False)
    mode_id = Id(strict=False)
    status = ma.fields.String(validate=ma.validate.OneOf(actions.ACTION_STATUSES))
    owner_email = ma.fields.String(metadata={"description": "Case-insensitive"})
    overdue = ma.fields.Boolean()
    due_before = ma.fields.Date()
    due_after = ma.fields.Date()
    external_system = ma.fields.String()
    external_key = ma.fields.String()
    sort = ma.fields.String(load_default="due_date", validate=ma.validate.OneOf(tuple(actions.ACTION_SORTS)))


class ActionEffectSchema(ma.Schema):
    """What one closed action planned and achieved."""

    action_id = ma.fields.Integer()
    mode_id = ma.fields.Integer()
    title = ma.fields.String()
    kind = ma.fields.String()
    owner = ma.fields.Nested(OwnerSchema)
    closed_at = UTCDateTime()
    before = ma.fields.Nested(RatingsSchema)
    planned = ma.fields.Nested(RatingsSchema, metadata={"description": "The before ratings with the targets applied"})
    achieved = ma.fields.Nested(RatingsSchema)
    rpn_removed = ma.fields.Integer()
    planned_rpn_removed = ma.fields.Integer()
    met_target = ma.fields.Boolean()
    rating_raised = ma.fields.Boolean()
    data_check = ma.fields.String(
        allow_none=True,
        metadata={
            "description": "For an action meant to lower occurrence: consistent_with_data, not_confirmed_by_data "
            "(observed failures imply a higher occurrence than rated) or no_data; null otherwise"
        },
    )


class ActionEffectListSchema(ma.Schema):
    """Closed actions ranked by risk removed."""

    items = ma.fields.List(ma.fields.Nested(ActionEffectSchema), required=True)
    caution = ma.fields.String()


def _respond(action, status=200):
    view = actions.action_view(action)
    headers = {"ETag": etag(action_tag(action, action.study))}
    if status == 201:
        headers["Location"] = f"/v1/actions/{action.id}"
    return view, status, headers


@blp.route("/modes/<int:mode_id>/actions")
class ModeActions(MethodView):
    """Actions on one failure mode."""

    @blp.arguments(ActionSchema)
    @blp.response(201, ActionSchema)
    @blp.alt_response(409, description="The mode is retired, its study archived, or the external reference taken")
    def post(self, data, mode_id):
        """Open a corrective action on a mode."""
        return _respond(actions.create_action(mode_id, data, actor=current_actor(), source=REQUEST_SOURCE), 201)


@blp.route("/actions")
class Actions(MethodView):
    """All corrective actions."""

    @blp.arguments(ActionQueryArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, list_schema(ActionSchema))
    def get(self, args):
        """List actions by due date; overdue is judged in each study's time zone."""
        query = actions.actions_query(args)
        return page_of(query, actions.ACTION_SORTS[args["sort"]], args, actions.action_views)


@blp.route("/actions/<int:action_id>")
class ActionById(MethodView):
    """One corrective action."""

    @blp.response(200, ActionSchema)
    def get(self, action_id):
        """Read an action."""
        return _respond(actions.get_action(action_id))

    @blp.arguments(ActionPatchSchema)
    @blp.response(200, ActionSchema)
    @blp.alt_response(409, description="The action is closed or cancelled")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def patch(self, changes, action_id):
        """Change an unfinished action: owner, due date (counted), status open/in_progress, target."""
        action = actions.update_action(
            action_id, changes, actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags(required=True)
        )
        return _respond(action)


@blp.route("/actions/<int:action_id>/close")
class ActionClosure(MethodView):
    """Closing an action with its verified result."""

    @blp.arguments(CloseSchema)
    @blp.response(200, ActionSchema)
    @blp.alt_response(409, description="Already closed or cancelled, or effective_at precedes the latest event")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def post(self, data, action_id):
        """Close: the action closes and its mode is re-rated to the result, in one transaction."""
        action = actions.close_action(
            action_id, data, actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags()
        )
        return _respond(action)


@blp.route("/actions/<int:action_id>/reopen")
class ActionReopening(MethodView):
    """Reopening a closed action."""

    @blp.arguments(ReasonSchema)
    @blp.response(200, ActionSchema)
    @blp.alt_response(409, description="The action is not closed")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def post(self, data, action_id):
        """Reopen: the ratings the closure changed go back to their values before it."""
        action = actions.reopen_action(
            action_id, data["reason"], actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags()
        )
        return _respond(action)


@blp.route("/actions/<int:action_id>/cancel")
class ActionCancellation(MethodView):
    """Cancelling an unfinished action."""

    @blp.arguments(ReasonSchema)
    @blp.response(200, ActionSchema)
    @blp.alt_response(409, description="The action is closed or cancelled")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def post(self, data, action_id):
        """Cancel: the action is dropped and the ratings stay."""
        action = actions.cancel_action(
            action_id, data["reason"], actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags()
        )
        return _respond(action)


@blp.route("/studies/<int:study_id>/actions/effect")
class ActionEffects(MethodView):
    """What the study's closed actions achieved."""

    @blp.response(200, ActionEffectListSchema)
    def get(self, study_id):
        """Closed actions ranked by risk removed, planned (target) against achieved (result)."""
        return {"items": actions.action_effects(study_id), "caution": CAUTION}


class ActionByReferenceSchema(ActionPatchSchema):
    """An action as another system knows it; mode_id names the mode when the action is new."""

    mode_id = Id(metadata={"description": "Required when no action carries the reference yet"})


@blp.route("/actions/by-ref/<string:system>/<string:key>")
class ActionByReference(MethodView):
    """An action addressed by its key in another system: how a ticketing system keeps in sync."""

    @blp.response(200, ActionSchema)
    def get(self, system, key):
        """Read the action carrying this reference."""
        return _respond(find_by_reference(CorrectiveAction, system, key))

    @blp.arguments(ActionByReferenceSchema)
    @blp.response(200, ActionSchema)
    @blp.alt_response(201, schema=ActionSchema, description="Created: no action carried the reference")
    @blp.alt_response(409, description="The action is closed or cancelled")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def put(self, data, system, key):
        """Create the action with this reference, or change it (If-Match optional)."""
        action, created = actions.put_action_by_reference(
            system, key, data, actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags()
        )
        return _respond(action, 201 if created else 200)


@blp.route("/actions/by-ref/<string:system>/<string:key>/close")
class ActionClosureByReference(MethodView):
    """Closing an action addressed by its external reference."""

    @blp.arguments(CloseSchema)
    @blp.response(200, ActionSchema)
    @blp.alt_response(409, description="Already closed or cancelled")
    def post(self, data, system, key):
        """Close the action carrying this reference, with its verified result."""
        action = find_by_reference(CorrectiveAction, system, key)
        closed = actions.close_action(
            action.id, data, actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags()
        )
        return _respond(closed)
