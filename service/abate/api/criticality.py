"""/v1/studies/{id}/criticality: quantitative criticality (MIL-STD-1629A Task 102), and the fields
that studies, modes and closures carry for it."""

import marshmallow as ma
from flask import Response
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.domain import criticality, reliability
from abate.domain.charts import MEDIA_TYPES
from abate.domain.criticality_chart import matrix_chart
from abate.domain.criticality_report import criticality_report
from abate.domain.fmeca import CM_INPUTS, TIME_UNITS
from abate.domain.studies import get_study

blp = Blueprint("criticality", __name__, url_prefix="/v1", description="Quantitative criticality (FMECA)")

_CLASS = ma.fields.String(validate=ma.validate.OneOf(criticality.SEVERITY_CLASSES))
_FRACTION = ma.validate.Range(min=0, max=1)


class CriticalitySettingsSchema(ma.Schema):
    """A study's switch for quantitative criticality and its map from severity ratings to classes."""

    enabled = ma.fields.Boolean(metadata={"description": "Off by default"})
    severity_classes = ma.fields.Dict(
        keys=_CLASS,
        values=ma.fields.List(ma.fields.Integer(strict=True), validate=ma.validate.Length(max=100)),
        allow_none=True,
        metadata={
            "description": "Severity ratings of each class, I catastrophic .. IV minor, e.g. "
            '{"I": [9, 10], "II": [7, 8], "III": [4, 5, 6], "IV": [1, 2, 3]}; every rating in exactly one class'
        },
    )


_RATE = ma.fields.Float(
    allow_none=True,
    allow_nan=False,
    validate=ma.validate.Range(min=0),
    metadata={"description": "The item's part failure rate lambda_p, in failure_rate_unit"},
)
_RATE_UNIT = ma.fields.String(
    allow_none=True,
    validate=ma.validate.OneOf(tuple(reliability.RATE_UNITS)),
    metadata={"description": "per_hour (default), per_million_hours, fit (per 1e9 h), per_cycle, per_million_cycles"},
)
_MODE_RATIO = ma.fields.Float(
    allow_none=True,
    allow_nan=False,
    validate=_FRACTION,
    metadata={"description": "alpha: the share of the item's failures that take this mode (0..1)"},
)


class VerifiedRateSchema(ma.Schema):
    """What a closure may verify beside the ratings: a new part failure rate or failure mode ratio."""

    failure_rate = _RATE
    failure_rate_unit = _RATE_UNIT
    mode_ratio = _MODE_RATIO


class ModeInputsSchema(VerifiedRateSchema):
    """A mode's Task 102 inputs; null clears one."""

    effect_probability = ma.fields.Float(
        allow_none=True,
        allow_nan=False,
        validate=_FRACTION,
        metadata={"description": "beta: the probability that the mode has the stated effect (0..1)"},
    )
    effect_category = ma.fields.String(
        allow_none=True,
        validate=ma.validate.OneOf(criticality.EFFECT_CATEGORIES),
        metadata={"description": "actual_loss (1), probable_loss, possible_loss or no_effect (0); from beta"},
    )
    operating_time = ma.fields.Float(
        allow_none=True,
        allow_nan=False,
        validate=ma.validate.Range(min=0, min_inclusive=False),
        metadata={"description": "t: the operating time, in operating_time_unit"},
    )
    operating_time_unit = ma.fields.String(
        allow_none=True, validate=ma.validate.OneOf(TIME_UNITS), metadata={"description": "hours (default) or cycles"}
    )


class ModeFiguresSchema(ma.Schema):
    """A mode's computed criticality (present while its study has criticality switched on)."""

    severity_class = ma.fields.String(allow_none=True)
    mode_criticality = ma.fields.Float(allow_none=True, metadata={"description": "Cm = beta alpha lambda_p t"})
    share = ma.fields.Float(allow_none=True, metadata={"description": "Share of the item's failure probability"})
    level = ma.fields.String(allow_none=True, metadata={"description": "A (frequent) .. E (extremely unlikely)"})
    reliability = ma.fields.Float(
        allow_none=True, metadata={"description": "R(t) = exp(-lambda_p t): the item surviving the operating time"}
    )
    mean_time_between_failures = ma.fields.Float(
        allow_none=True, metadata={"description": "1 / lambda_p, in the failure rate's basis (hours or cycles)"}
    )
    missing = ma.fields.List(ma.fields.String(), metadata={"description": f"Inputs Cm still needs: {CM_INPUTS}"})
    warnings = ma.fields.List(ma.fields.String())


class ReportModeSchema(ModeInputsSchema, ModeFiguresSchema):
    """One active mode in the report."""

    mode_id = ma.fields.Integer()
    item = ma.fields.String()
    failure_mode = ma.fields.String()
    severity = ma.fields.Integer()


class ProbabilityLevelSchema(ma.Schema):
    """A level's bounds on the share: above share_above (exclusive), up to share_at_most (inclusive)."""

    level = ma.fields.String()
    name = ma.fields.String()
    share_above = ma.fields.Float(allow_none=True)
    share_at_most = ma.fields.Float(allow_none=True)


class MatrixCellSchema(ma.Schema):
    """The modes of one severity class at one level."""

    severity_class = ma.fields.String()
    level = ma.fields.String()
    mode_ids = ma.fields.List(ma.fields.Integer())
    mode_criticality = ma.fields.Float(metadata={"description": "Sum of Cm in the cell"})


class CriticalityItemSchema(ma.Schema):
    """An item (modes whose item texts agree) with its criticality numbers Cr per class."""

    item = ma.fields.String()
    mode_ids = ma.fields.List(ma.fields.Integer())
    mode_ratio_sum = ma.fields.Float(allow_none=True)
    criticality_by_class = ma.fields.Dict(keys=ma.fields.String(), values=ma.fields.Float())
    warnings = ma.fields.List(ma.fields.String())


class RankedCriticalityItemSchema(ma.Schema):
    """An item's Cr in one class."""

    item = ma.fields.String()
    criticality = ma.fields.Float()


class CriticalityReportSchema(ma.Schema):
    """The criticality matrix, the modes' figures and the items ranked by Cr per severity class."""

    study_id = ma.fields.Integer()
    severity_classes = ma.fields.Dict(keys=ma.fields.String(), values=ma.fields.List(ma.fields.Integer()))
    levels = ma.fields.List(ma.fields.Nested(ProbabilityLevelSchema))
    matrix = ma.fields.List(ma.fields.Nested(MatrixCellSchema))
    modes = ma.fields.List(ma.fields.Nested(ReportModeSchema))
    items = ma.fields.List(ma.fields.Nested(CriticalityItemSchema))
    ranking = ma.fields.Dict(
        keys=ma.fields.String(), values=ma.fields.List(ma.fields.Nested(RankedCriticalityItemSchema))
    )
    total_by_class = ma.fields.Dict(keys=ma.fields.String(), values=ma.fields.Float())
    incomplete_mode_ids = ma.fields.List(ma.fields.Integer())
    caution = ma.fields.String()


@blp.route("/studies/<int:study_id>/criticality")
class StudyCriticality(MethodView):
    """A study's quantitative criticality."""

    @blp.response(200, CriticalityReportSchema)
    @blp.alt_response(404, description="No study with this id")
    @blp.alt_response(409, description="The study has quantitative criticality switched off")
    def get(self, study_id):
        """The matrix of severity class against level, items ranked by Cr per class (409 while switched off)."""
        return criticality_report(get_study(study_id))


def _matrix_response(study_id, image_format):
    study = get_study(study_id)
    image = matrix_chart(criticality_report(study), study.title, image_format)
    return Response(image, mimetype=MEDIA_TYPES[image_format])


@blp.route("/studies/<int:study_id>/criticality.svg")
class StudyCriticalitySvg(MethodView):
    """The criticality matrix as an SVG image."""

    @blp.response(
        200,
        {"type": "string", "contentMediaType": "image/svg+xml"},
        content_type="image/svg+xml",
        description="Severity class against probability level, with each cell's modes (SVG 1.1)",
    )
    @blp.alt_response(404, description="No study with this id")
    @blp.alt_response(409, description="The study has quantitative criticality switched off")
    def get(self, study_id):
        """The matrix as SVG (409 while the study's criticality is switched off)."""
        return _matrix_response(study_id, "svg")


@blp.route("/studies/<int:study_id>/criticality.png")
class StudyCriticalityPng(MethodView):
    """The criticality matrix as a PNG image."""

    @blp.response(
        200,
        {"type": "string", "contentMediaType": "image/png"},
        content_type="image/png",
        description="Severity class against probability level, for pasting into a report",
    )
    @blp.alt_response(404, description="No study with this id")
    @blp.alt_response(409, description="The study has quantitative criticality switched off")
    def get(self, study_id):
        """The matrix as PNG (409 while the study's criticality is switched off)."""
        return _matrix_response(study_id, "png")
