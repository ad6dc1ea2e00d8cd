"""/v1/studies/{id}/modes and /v1/modes/{id}: failure modes, their ratings and retirement."""

import marshmallow as ma
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.auth import current_actor
from abate.api.common import (
    IF_MATCH_PARAMETER,
    REQUEST_SOURCE,
    AsOf,
    ExternalRefSchema,
    PageArgsSchema,
    Rating,
    ReasonSchema,
    UTCDateTime,
    etag,
    if_match_tags,
    json_bytes,
    json_joined,
    json_pieces,
    list_schema,
    next_page_url,
    page_of,
    serialized_response,
)
from abate.api.criticality import ModeFiguresSchema, ModeInputsSchema
from abate.api.dumping import PlannedDump
from abate.api.studies import RatingsSchema
from abate.domain import modes
from abate.domain.caching import BoundedCache
from abate.domain.pagination import paginate
from abate.domain.scoring import PRIORITY_BANDS
from abate.domain.studies import get_study, study_state
from abate.domain.versions import content_key, mode_tag
from abate.errors import ValidationFailed, field_error

blp = Blueprint("modes", __name__, url_prefix="/v1", description="Failure modes")

_TEXT = ma.validate.Length(max=10000)


class ModeSchema(PlannedDump, ModeInputsSchema):
    """One failure mode (an analysis row) with its scores (and its Task 102 inputs, for criticality)."""

    id = ma.fields.Integer(dump_only=True)
    study_id = ma.fields.Integer(dump_only=True)
    item = ma.fields.String(validate=_TEXT, metadata={"description": "Item, or process step"})
    function = ma.fields.String(validate=_TEXT, metadata={"description": "Function or requirement"})
    failure_mode = ma.fields.String(required=True, validate=ma.validate.Length(min=1, max=10000))
    effect = ma.fields.String(validate=_TEXT)
    cause = ma.fields.String(validate=_TEXT)
    prevention_controls = ma.fields.String(validate=_TEXT)
    detection_controls = ma.fields.String(validate=_TEXT)
    severity = Rating(required=True, metadata={"description": "On the study's scale"})
    occurrence = Rating(required=True, metadata={"description": "On the study's scale"})
    detection = Rating(required=True, metadata={"description": "On the study's scale"})
    rpn = ma.fields.Integer(dump_only=True, metadata={"description": "S x O x D"})
    criticality = ma.fields.Integer(dump_only=True, metadata={"description": "S x O"})
    initial = ma.fields.Nested(RatingsSchema, dump_only=True, metadata={"description": "Ratings at creation"})
    projected = ma.fields.Nested(
        RatingsSchema,
        dump_only=True,
        metadata={"description": "Per rating, the lowest of current and the open actions' targets"},
    )
    open_actions = ma.fields.Integer(dump_only=True, metadata={"description": "Open or in-progress actions"})
    needs_action = ma.fields.Boolean(dump_only=True)
    needs_action_reasons = ma.fields.List(
        ma.fields.String(),
        dump_only=True,
        metadata={"description": "rpn_at_or_above_threshold and/or severity_at_or_above_threshold"},
    )
    priority = ma.fields.String(dump_only=True, metadata={"description": ", ".join(PRIORITY_BANDS)})
    status = ma.fields.String(dump_only=True, metadata={"description": "active or retired"})
    external_ref = ma.fields.Nested(ExternalRefSchema, allow_none=True)
    version = ma.fields.Integer(dump_only=True)
    created_at = UTCDateTime(dump_only=True)
    updated_at = UTCDateTime(dump_only=True)
    retired_at = UTCDateTime(dump_only=True, allow_none=True)
    fmeca = ma.fields.Nested(
        ModeFiguresSchema,
        dump_only=True,
        allow_none=True,
        metadata={"description": "Severity class, Cm, share and level; null while the study's criticality is off"},
    )
    effective_at = UTCDateTime(
        load_only=True,
        metadata={
            "description": "When the change took effect, for recording past work; not before the study's latest event"
        },
    )


class ModePatchSchema(ModeSchema):
    """A change to a mode's text or ratings; a rating change needs a reason."""

    reason = ma.fields.String(
        validate=ma.validate.Length(max=2000), metadata={"description": "Why the ratings change (required then)"}
    )

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **{"partial": True, **kwargs})


class ModeQueryArgsSchema(PageArgsSchema):
    """Filters and order of a study's mode list."""

    status = ma.fields.String(validate=ma.validate.OneOf(("active", "retired")))
    needs_action = ma.fields.Boolean()
    priority = ma.fields.String(validate=ma.validate.OneOf(PRIORITY_BANDS))
    min_rpn = ma.fields.Integer(validate=ma.validate.Range(min=1, max=1000))
    as_of = AsOf(metadata={"description": "List the modes as they were then (creation order, no other filters)"})
    sort = ma.fields.String(
        validate=ma.validate.OneOf(tuple(modes.MODE_SORTS)),
        metadata={"description": "-rpn (Pareto order, default), rpn or created_at"},
    )


ModeListSchema = list_schema(ModeSchema)
_MODE_SCHEMA, _MODE_LIST_SCHEMA = ModeSchema(), ModeListSchema()

# Reads are served from JSON serialized once per state of the study: nothing a mode's view shows can change
# without moving the study's content key (domain.versions.content_key), which one lookup reads. A view
# computed after a write that raced the lookup is newer than its key, never older.
_serialized_modes = BoundedCache(entries=4096)
_serialized_pages = BoundedCache(entries=256)
# Stands in for the next page's URL, which depends on the request's own URL, while a page is serialized.
_NEXT_MARK = "\x00next\x00"


def _serialized_mode(mode_id, study_id):
    study, mode = get_study(study_id), modes.get_mode(mode_id)
    return json_bytes(_MODE_SCHEMA.dump(modes.mode_views([mode], study)[0])), etag(mode_tag(mode, study))


def mode_read_response(mode_id):
    """GET of one mode: its serialized view and ETag, after one lookup of its study's state when it is known."""
    state = modes.study_state_of_mode(mode_id)
    body, tag = _serialized_modes.get_or_compute(
        (mode_id, content_key(state)), lambda: _serialized_mode(mode_id, state.id)
    )
    return serialized_response(body, {"ETag": tag})


def _serialized_page(study_id, filters, order, args):
    study = get_study(study_id)
    page = paginate(modes.modes_query(study, *filters), order, args["limit"], args.get("cursor"))
    dumped = _MODE_LIST_SCHEMA.dump({"items": modes.mode_views(page.rows, study), "next": _NEXT_MARK})
    return json_pieces(dumped, _NEXT_MARK), page.next_cursor


def mode_list_response(study_id, args):
    """A page of a study's current modes, serialized once per state of the study and page arguments."""
    state = study_state(study_id)
    filters = tuple(args.get(name) for name in ("status", "needs_action", "priority", "min_rpn"))
    sort = args.get("sort", "-rpn")
    key = (content_key(state), filters, sort, args["limit"], args.get("cursor"))
    pieces, next_cursor = _serialized_pages.get_or_compute(
        key, lambda: _serialized_page(study_id, filters, modes.MODE_SORTS[sort], args)
    )
    return serialized_response(json_joined(pieces, next_page_url(next_cursor)))


def mode_response(mode, status=200):
    """The mode's view, status and ETag (and Location when created)."""
    study = get_study(mode.study_id)
    view = modes.mode_views([mode], study)[0]
    headers = {"ETag": etag(mode_tag(mode, study))}
    if status == 201:
        headers["Location"] = f"/v1/modes/{mode.id}"
    return view, status, headers


def _modes_as_of(study_id, args):
    narrowing = [name for name in ("status", "needs_action", "priority", "min_rpn") if name in args]
    if narrowing or args.get("sort", "created_at") != "created_at":
        raise ValidationFailed(
            "as_of lists every mode of that moment in creation order",
            errors=[field_error(name, "not combinable with as_of", "query") for name in narrowing or ["sort"]],
        )
    study = get_study(study_id)
    query, lookup = modes.modes_as_of_query(study, args["as_of"])
    return page_of(
        query, modes.MODE_SORTS["created_at"], args, lambda rows: modes.mode_views_as_of(rows, study, lookup)
    )


@blp.route("/studies/<int:study_id>/modes")
class StudyModes(MethodView):
    """A study's failure modes."""

    # One schema instance for every request: building one per request costs more than a served page.
    @blp.arguments(ModeQueryArgsSchema(), location="query", unknown=ma.RAISE)
    @blp.response(200, ModeListSchema)
    def get(self, args, study_id):
        """List a study's modes, highest RPN first unless sort says otherwise; as_of lists them as they were."""
        if "as_of" in args:
            return _modes_as_of(study_id, args)
        return mode_list_response(study_id, args)

    @blp.arguments(ModeSchema)
    @blp.response(201, ModeSchema)
    @blp.alt_response(409, description="The study is archived")
    def post(self, data, study_id):
        """Add a failure mode; its ratings must lie on the study's scale."""
        return mode_response(modes.create_mode(study_id, data, actor=current_actor(), source=REQUEST_SOURCE), 201)


@blp.route("/modes/<int:mode_id>")
class ModeById(MethodView):
    """One failure mode."""

    @blp.response(200, ModeSchema)
    def get(self, mode_id):
        """Read a mode."""
        return mode_read_response(mode_id)

    @blp.arguments(ModePatchSchema)
    @blp.response(200, ModeSchema)
    @blp.alt_response(409, description="The mode is retired or its study archived")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def patch(self, changes, mode_id):
        """Change a mode's text, or re-rate it with a reason (appends a risk event)."""
        mode = modes.update_mode(
            mode_id, changes, actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags(required=True)
        )
        return mode_response(mode)


@blp.route("/modes/<int:mode_id>/retire")
class ModeRetirement(MethodView):
    """Retiring a mode: it leaves the study's risk but stays on record."""

    @blp.arguments(ReasonSchema)
    @blp.response(200, ModeSchema)
    @blp.alt_response(409, description="Already retired, or the study is archived")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def post(self, data, mode_id):
        """Retire a mode (a retirement event, not a risk reduction)."""
        mode = modes.retire_mode(
            mode_id, data["reason"], actor=current_actor(), source=REQUEST_SOURCE, expected_tags=if_match_tags()
        )
        return mode_response(mode)
