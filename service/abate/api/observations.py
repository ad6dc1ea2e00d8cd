"""/v1/modes/{id}/observations and the evidence they give: observed failures feeding occurrence."""

import marshmallow as ma
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.auth import current_actor
from abate.api.common import DATE_RANGE, PageArgsSchema, Rating, UTCDateTime, list_schema, page_of
from abate.api.modes import ModeSchema, mode_response
from abate.domain import observations
from abate.domain.observed_rates import ESTIMATES, STATUSES, settings_view
from abate.domain.rate_bands import EXPOSURE_UNITS, RATE_BASES
from abate.domain.references import find_by_reference
from abate.domain.studies import CAUTION, get_study
from abate.models import FailureMode, Observation

blp = Blueprint(
    "observations", __name__, url_prefix="/v1", description="Observed failures and the occurrence they imply"
)

_RATE = {"allow_nan": False, "validate": ma.validate.Range(min=0, max=1e15)}


class ObservationSchema(ma.Schema):
    """Failures of one mode counted by another system over an exposure and a period."""

    id = ma.fields.Integer(dump_only=True)
    mode_id = ma.fields.Integer(dump_only=True)
    study_id = ma.fields.Integer(dump_only=True)
    failures = ma.fields.Integer(
        required=True,
        strict=True,
        validate=ma.validate.Range(min=0, max=10**12),
        metadata={"description": "Failures of this mode observed in the period (0 is a valid count)"},
    )
    exposure = ma.fields.Float(
        required=True,
        allow_nan=False,
        validate=ma.validate.Range(min=0, min_inclusive=False, max=1e15),
        metadata={"description": "Units produced or hours run in the period; greater than zero"},
    )
    exposure_unit = ma.fields.String(
        validate=ma.validate.OneOf(EXPOSURE_UNITS),
        metadata={"description": "units or hours; default: what the study's rate bands count"},
    )
    period_start = ma.fields.Date(required=True, validate=DATE_RANGE)
    period_end = ma.fields.Date(
        required=True, validate=DATE_RANGE, metadata={"description": "Inclusive; the window takes periods ending in it"}
    )
    source_system = ma.fields.String(
        required=True,
        validate=ma.validate.Length(min=1, max=100),
        metadata={"description": "The maintenance or quality system that counted"},
    )
    record_key = ma.fields.String(
        required=True,
        validate=ma.validate.Length(min=1, max=200),
        metadata={"description": "The record's key there; unique per source system, so a resend is harmless"},
    )
    note = ma.fields.String(load_default="", validate=ma.validate.Length(max=4000))
    recorded_by = ma.fields.String(dump_only=True)
    recorded_at = UTCDateTime(dump_only=True)


ObservationListSchema = list_schema(ObservationSchema)


class WindowSchema(ma.Schema):
    """The days whose observations count: periods ending within them."""

    days = ma.fields.Integer()
    first_day = ma.fields.Date()
    last_day = ma.fields.Date()


class BandSchema(ma.Schema):
    """The rate band of an occurrence level."""

    value = ma.fields.Integer()
    rate_from = ma.fields.Float()
    rate_below = ma.fields.Float(allow_none=True, metadata={"description": "Null for the top level"})


class SuggestionSchema(ma.Schema):
    """The occurrence the data implies where it differs from the rating, and why."""

    occurrence = ma.fields.Integer(metadata={"description": "The suggested rating"})
    current = ma.fields.Integer()
    direction = ma.fields.String(metadata={"description": "raise or lower"})
    rate = ma.fields.Float(metadata={"description": "The rate the level was read from (per the rate basis)"})
    observation_ids = ma.fields.List(ma.fields.Integer())
    reason = ma.fields.String(metadata={"description": "The re-rating reason accepting it records"})


class ModeEvidenceSchema(ma.Schema):
    """What a mode's observations in the study's window say about its occurrence rating."""

    mode_id = ma.fields.Integer()
    occurrence = ma.fields.Integer(metadata={"description": "The current rating"})
    status = ma.fields.String(metadata={"description": ", ".join(STATUSES)})
    window = ma.fields.Nested(WindowSchema)
    confidence = ma.fields.Float()
    estimate = ma.fields.String(metadata={"description": "Which rate picks the level: " + ", ".join(ESTIMATES)})
    rate_basis = ma.fields.String(allow_none=True)
    exposure_unit = ma.fields.String(allow_none=True)
    observation_ids = ma.fields.List(ma.fields.Integer(), metadata={"description": "Observations counted"})
    ignored_observation_ids = ma.fields.List(
        ma.fields.Integer(), metadata={"description": "In the window but in another exposure unit than the bands"}
    )
    failures = ma.fields.Integer(allow_none=True)
    exposure = ma.fields.Float(allow_none=True)
    observed_rate = ma.fields.Float(allow_none=True, metadata={"description": "failures / exposure, per rate basis"})
    upper_bound_rate = ma.fields.Float(
        allow_none=True, metadata={"description": "chi2(CL; 2r + 2) / (2T), per rate basis"}
    )
    implied_occurrence = ma.fields.Integer(allow_none=True)
    band = ma.fields.Nested(BandSchema, allow_none=True)
    occurrence_suggestion = ma.fields.Nested(SuggestionSchema, allow_none=True)
    drift = ma.fields.Boolean(
        metadata={"description": "The data points above the rating and a closed action claimed to lower it"}
    )
    drift_since = UTCDateTime(allow_none=True)


class EvidenceSchema(ModeEvidenceSchema):
    """One mode's evidence on its occurrence rating, with the caution every report carries."""

    caution = ma.fields.String()


class EvidenceListSchema(ma.Schema):
    """The evidence of a study's observed modes, suggestions first."""

    items = ma.fields.List(ma.fields.Nested(ModeEvidenceSchema), required=True)
    caution = ma.fields.String()


class EvidenceQueryArgsSchema(ma.Schema):
    """Filter of a study's evidence list."""

    status = ma.fields.String(validate=ma.validate.OneOf(STATUSES))


class AcceptSchema(ma.Schema):
    """Accepting the occurrence the data suggests."""

    occurrence = Rating(required=True, metadata={"description": "The suggested level, as read from the evidence"})
    reason = ma.fields.String(
        load_default="", validate=ma.validate.Length(max=2000), metadata={"description": "Added to the data's reason"}
    )


class BandLevelSchema(ma.Schema):
    """Where one occurrence level starts."""

    value = Rating(required=True)
    rate_from = ma.fields.Float(required=True, **_RATE)


class OccurrenceBandsSchema(ma.Schema):
    """A study's own rate bands for its occurrence scale."""

    rate_basis = ma.fields.String(required=True, validate=ma.validate.OneOf(tuple(RATE_BASES)))
    levels = ma.fields.List(
        ma.fields.Nested(BandLevelSchema), required=True, validate=ma.validate.Length(min=2, max=10)
    )


class ObservationSettingsSchema(ma.Schema):
    """How a study judges observed failures (PUT replaces them; omitted fields take their defaults)."""

    window_days = ma.fields.Integer(
        load_default=365,
        strict=True,
        validate=ma.validate.Range(min=1, max=3650),
        metadata={"description": "Observations whose period ends within this many days up to today count"},
    )
    confidence = ma.fields.Float(
        load_default=0.9,
        allow_nan=False,
        validate=ma.validate.Range(min=0.5, max=0.999),
        metadata={"description": "Confidence of the upper bound on the rate"},
    )
    estimate = ma.fields.String(
        load_default="upper_bound",
        validate=ma.validate.OneOf(ESTIMATES),
        metadata={"description": "upper_bound (cautious with few failures) or observed picks the level"},
    )
    occurrence_bands = ma.fields.Nested(
        OccurrenceBandsSchema,
        load_default=None,
        allow_none=True,
        metadata={"description": "The study's own rate bands; null: those of its scale set"},
    )


def _observation_response(row, created):
    view = observations.observation_view(row)
    return view, 201 if created else 200, {"Location": f"/v1/observations/{row.id}"} if created else {}


def _observations_page(mode_id, args):
    order = [(Observation.period_end, False), (Observation.id, False)]
    return page_of(
        observations.observations_query(mode_id),
        order,
        args,
        lambda rows: [observations.observation_view(row) for row in rows],
    )


@blp.route("/modes/<int:mode_id>/observations")
class ModeObservations(MethodView):
    """A mode's observed failures."""

    @blp.arguments(PageArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, ObservationListSchema)
    def get(self, args, mode_id):
        """List a mode's observations, oldest period first."""
        return _observations_page(mode_id, args)

    @blp.arguments(ObservationSchema)
    @blp.response(201, ObservationSchema)
    @blp.alt_response(200, schema=ObservationSchema, description="A resend of a recorded record: nothing new")
    @blp.alt_response(409, description="The record key names other figures, or the mode is retired")
    def post(self, data, mode_id):
        """Record observed failures of a mode (a resend with the same source record is harmless)."""
        return _observation_response(*observations.record_observation(mode_id, data, actor=current_actor()))


@blp.route("/modes/by-ref/<string:system>/<string:key>/observations")
class ModeObservationsByReference(MethodView):
    """Observations of a mode addressed by its key in another system: how a maintenance system reports."""

    @blp.arguments(PageArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, ObservationListSchema)
    def get(self, args, system, key):
        """List the observations of the mode carrying this reference."""
        return _observations_page(find_by_reference(FailureMode, system, key).id, args)

    @blp.arguments(ObservationSchema)
    @blp.response(201, ObservationSchema)
    @blp.alt_response(200, schema=ObservationSchema, description="A resend of a recorded record: nothing new")
    @blp.alt_response(409, description="The record key names other figures, or the mode is retired")
    def post(self, data, system, key):
        """Record observed failures of the mode carrying this reference."""
        mode = find_by_reference(FailureMode, system, key)
        return _observation_response(*observations.record_observation(mode.id, data, actor=current_actor()))


@blp.route("/observations/<int:observation_id>")
class ObservationById(MethodView):
    """One observation."""

    @blp.response(200, ObservationSchema)
    def get(self, observation_id):
        """Read an observation."""
        return observations.observation_view(observations.get_observation(observation_id))


@blp.route("/modes/<int:mode_id>/occurrence-evidence")
class ModeEvidence(MethodView):
    """What a mode's observations say about its occurrence rating."""

    @blp.response(200, EvidenceSchema)
    def get(self, mode_id):
        """The observed rate, its upper bound, the level they imply and a suggestion where it differs."""
        return {**observations.mode_evidence(mode_id), "caution": CAUTION}


@blp.route("/modes/<int:mode_id>/occurrence-suggestion/accept")
class SuggestionAcceptance(MethodView):
    """Accepting the occurrence the data suggests: a re-rating whose event names the observations."""

    @blp.arguments(AcceptSchema)
    @blp.response(200, ModeSchema)
    @blp.alt_response(409, description="No suggestion, or it now names another level; the mode is retired")
    def post(self, data, mode_id):
        """Re-rate occurrence to the suggested level."""
        mode = observations.accept_suggestion(mode_id, data["occurrence"], data["reason"], actor=current_actor())
        return mode_response(mode)


@blp.route("/studies/<int:study_id>/occurrence-evidence")
class StudyEvidence(MethodView):
    """The evidence of every observed mode of a study: the review list for occurrence."""

    @blp.arguments(EvidenceQueryArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, EvidenceListSchema)
    def get(self, args, study_id):
        """Every active mode with observations, suggestions and drift first."""
        return {"items": observations.study_evidence(study_id, args.get("status")), "caution": CAUTION}


@blp.route("/studies/<int:study_id>/observation-settings")
class ObservationSettings(MethodView):
    """How a study judges observed failures."""

    @blp.response(200, ObservationSettingsSchema)
    def get(self, study_id):
        """Read the window, confidence, estimate and the study's own rate bands."""
        return settings_view(get_study(study_id))

    @blp.arguments(ObservationSettingsSchema)
    @blp.response(200, ObservationSettingsSchema)
    def put(self, data, study_id):
        """Replace the settings; every observed mode's drift is judged again."""
        return settings_view(observations.update_settings(study_id, data))
