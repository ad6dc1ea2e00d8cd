"""/v1/scales: the company's rating scale sets."""

import marshmallow as ma
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.common import IF_MATCH_PARAMETER, UTCDateTime, etag, if_match_tags
from abate.domain import scales
from abate.domain.rate_bands import RATE_BASES
from abate.domain.versions import scale_set_tag

blp = Blueprint("scales", __name__, url_prefix="/v1/scales", description="Rating scale sets")


class LevelSchema(ma.Schema):
    """One level of a rating scale."""

    value = ma.fields.Integer(required=True, strict=True, validate=ma.validate.Range(min=1, max=10))
    label = ma.fields.String(required=True, validate=ma.validate.Length(min=1, max=200))
    criteria = ma.fields.String(load_default="", validate=ma.validate.Length(max=4000))
    rate_from = ma.fields.Float(
        allow_none=True,
        allow_nan=False,
        validate=ma.validate.Range(min=0, max=1e12),
        metadata={
            "description": "Occurrence levels only: the failure rate (in the set's occurrence_rate_basis) at which "
            "this level starts; a rate exactly on it belongs to this level. The lowest level starts at 0."
        },
    )


class DimensionSchema(ma.Schema):
    """The levels of one rating (severity, occurrence or detection)."""

    max = ma.fields.Integer(
        strict=True,
        validate=ma.validate.Range(min=2, max=10),
        metadata={"description": "Top value; the levels must cover 1..max. Derived from the levels if omitted."},
    )
    levels = ma.fields.List(ma.fields.Nested(LevelSchema), required=True, validate=ma.validate.Length(min=2, max=10))


class ScaleSetSchema(ma.Schema):
    """A scale set: severity, occurrence and detection levels with labels and criteria."""

    id = ma.fields.Integer(dump_only=True)
    name = ma.fields.String(required=True, validate=ma.validate.Length(min=1, max=200))
    description = ma.fields.String(validate=ma.validate.Length(max=4000))
    severity = ma.fields.Nested(DimensionSchema, required=True)
    occurrence = ma.fields.Nested(DimensionSchema, required=True)
    detection = ma.fields.Nested(DimensionSchema, required=True)
    default_action_threshold = ma.fields.Integer(
        strict=True,
        validate=ma.validate.Range(min=1, max=1000),
        metadata={"description": "New studies act at or above this RPN (default: a tenth of the largest RPN)"},
    )
    default_severity_threshold = ma.fields.Integer(
        strict=True,
        validate=ma.validate.Range(min=1, max=10),
        metadata={
            "description": "Severity at or above which a mode needs action, for new studies (default: the top fifth)"
        },
    )
    occurrence_rate_basis = ma.fields.String(
        allow_none=True,
        validate=ma.validate.OneOf(tuple(RATE_BASES)),
        metadata={
            "description": "What the occurrence levels' rate_from counts: "
            + ", ".join(RATE_BASES)
            + "; null when the levels carry no rate bands"
        },
    )
    builtin = ma.fields.Boolean(dump_only=True)
    max_rpn = ma.fields.Integer(dump_only=True)
    in_use = ma.fields.Boolean(dump_only=True, metadata={"description": "Built in or used by a study: cannot change"})
    version = ma.fields.Integer(dump_only=True)
    created_at = UTCDateTime(dump_only=True)
    updated_at = UTCDateTime(dump_only=True)


class ScaleSetListSchema(ma.Schema):
    """Every scale set (they are few, so the list has one page)."""

    items = ma.fields.List(ma.fields.Nested(ScaleSetSchema), required=True)
    next = ma.fields.String(allow_none=True, required=True)


def _respond(scale_set, status=200):
    view = scales.scale_set_view(scale_set)
    headers = {"ETag": etag(scale_set_tag(scale_set))}
    if status == 201:
        headers["Location"] = f"/v1/scales/{view['id']}"
    return view, status, headers


@blp.route("")
class ScaleSets(MethodView):
    """The collection of scale sets."""

    @blp.response(200, ScaleSetListSchema)
    def get(self):
        """List scale sets."""
        return {"items": scales.list_scale_sets(), "next": None}

    @blp.arguments(ScaleSetSchema)
    @blp.response(201, ScaleSetSchema)
    def post(self, data):
        """Create a scale set."""
        return _respond(scales.create_scale_set(data), 201)


@blp.route("/<int:scale_id>")
class ScaleSetById(MethodView):
    """One scale set."""

    @blp.response(200, ScaleSetSchema)
    def get(self, scale_id):
        """Read a scale set."""
        return _respond(scales.get_scale_set(scale_id))

    @blp.arguments(ScaleSetSchema)
    @blp.response(200, ScaleSetSchema)
    @blp.alt_response(409, description="Built in or used by a study; create a new scale set instead")
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def put(self, data, scale_id):
        """Replace a scale set that no study uses yet."""
        return _respond(scales.replace_scale_set(scale_id, data, if_match_tags()))
