"""/v1/studies/{id}/history and /v1/history: how risk fell over time, and where it is heading."""

import marshmallow as ma
from flask import Response
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.common import DATE_RANGE, UTCDateTime, json_joined, json_pieces, serialized_response
from abate.domain import charts, history, observed_rates
from abate.domain.caching import BoundedCache
from abate.domain.clock import local_today, utcnow
from abate.domain.criticality_report import class_series
from abate.domain.projection import projection
from abate.domain.studies import CAUTION, check_timezone, get_study, studies_query
from abate.errors import ValidationFailed, field_error
from abate.models import FailureMode, Study

blp = Blueprint("history", __name__, url_prefix="/v1", description="Risk history and projection")

_INTERVAL = ma.fields.String(
    load_default="week",
    validate=ma.validate.OneOf(history.INTERVALS),
    metadata={"description": "day, week (ISO 8601, Monday first) or month, in local time"},
)


class RangeArgsSchema(ma.Schema):
    """An interval and a date range."""

    interval = _INTERVAL
    from_ = ma.fields.Date(
        data_key="from", validate=DATE_RANGE, metadata={"description": "First local date (default: the first event)"}
    )
    to = ma.fields.Date(validate=DATE_RANGE, metadata={"description": "Last local date (default: today)"})


class HistoryArgsSchema(RangeArgsSchema):
    """What a study's history should hold."""

    modes = ma.fields.String(metadata={"description": "all, or comma-separated mode ids, for per-mode RPN series"})


class PortfolioArgsSchema(RangeArgsSchema):
    """Which studies a portfolio history sums, and in which time zone its intervals run."""

    tag = ma.fields.String()
    site = ma.fields.String()
    kind = ma.fields.String()
    status = ma.fields.String()
    owner_email = ma.fields.String()
    timezone = ma.fields.String(load_default="UTC", metadata={"description": "IANA zone of the intervals"})


class ChangeSchema(ma.Schema):
    """RPN change since the previous point, by cause."""

    actions = ma.fields.Integer(metadata={"description": "Closed (and reopened) corrective actions"})
    rerating = ma.fields.Integer(metadata={"description": "Re-ratings outside actions"})
    retirements = ma.fields.Integer(metadata={"description": "Modes retired: removed, not reduced"})
    new_modes = ma.fields.Integer(metadata={"description": "Modes added"})


class HistoryPointSchema(ma.Schema):
    """The state at the end of one interval (the last one: now)."""

    at = UTCDateTime()
    period = ma.fields.String(metadata={"description": "e.g. 2026-11-30, 2026-W49 or 2026-12"})
    in_progress = ma.fields.Boolean()
    total_rpn = ma.fields.Integer()
    max_rpn = ma.fields.Integer()
    needs_action_count = ma.fields.Integer()
    open_actions = ma.fields.Integer()
    overdue_actions = ma.fields.Integer()
    change = ma.fields.Nested(ChangeSchema)


class ObservedSeriesSchema(ma.Schema):
    """A mode's occurrence rating beside what its observations showed, at each point."""

    rate_basis = ma.fields.String()
    occurrence = ma.fields.List(ma.fields.Integer(allow_none=True), metadata={"description": "The rating"})
    observed_rate = ma.fields.List(
        ma.fields.Float(allow_none=True),
        metadata={"description": "failures / exposure over the study's window ending then; null without data"},
    )
    implied_occurrence = ma.fields.List(
        ma.fields.Integer(allow_none=True), metadata={"description": "The level the study's estimate implied then"}
    )


class ModeSeriesSchema(ma.Schema):
    """One mode's RPN at each point (null where it was not active)."""

    mode_id = ma.fields.Integer()
    item = ma.fields.String()
    failure_mode = ma.fields.String()
    rpn = ma.fields.List(ma.fields.Integer(allow_none=True))
    observed = ma.fields.Nested(
        ObservedSeriesSchema,
        allow_none=True,
        metadata={"description": "For a mode with observations: occurrence beside the observed rate; else null"},
    )


class ProjectionPointSchema(ma.Schema):
    """Expected state at a future interval end."""

    at = UTCDateTime()
    period = ma.fields.String()
    total_rpn = ma.fields.Integer()
    needs_action_count = ma.fields.Integer()


class ProjectionSchema(ma.Schema):
    """Where risk heads if people keep their dates."""

    points = ma.fields.List(ma.fields.Nested(ProjectionPointSchema))
    done_date = ma.fields.Date(allow_none=True, metadata={"description": "First day with no mode needing action"})
    assumption = ma.fields.String()


class StudyHistorySchema(ma.Schema):
    """A study's risk over time."""

    study_id = ma.fields.Integer()
    interval = ma.fields.String()
    timezone = ma.fields.String()
    points = ma.fields.List(ma.fields.Nested(HistoryPointSchema))
    modes = ma.fields.List(ma.fields.Nested(ModeSeriesSchema))
    criticality_by_class = ma.fields.Dict(
        keys=ma.fields.String(),
        values=ma.fields.List(ma.fields.Float()),
        allow_none=True,
        metadata={"description": "Total Cm per severity class I..IV at each point; null while criticality is off"},
    )
    projection = ma.fields.Nested(ProjectionSchema)
    caution = ma.fields.String()


class PortfolioHistorySchema(ma.Schema):
    """Risk over time summed across studies."""

    interval = ma.fields.String()
    timezone = ma.fields.String()
    study_ids = ma.fields.List(ma.fields.Integer())
    points = ma.fields.List(ma.fields.Nested(HistoryPointSchema))
    caution = ma.fields.String()


def _mode_ids(value, study):
    if not value:
        return ()
    if value == "all":
        return None
    try:
        ids = [int(part) for part in value.split(",") if part.strip()]
    except ValueError as error:
        raise ValidationFailed(
            "modes must be all or a list of ids", errors=[field_error("modes", "all, or e.g. 3,7,12", "query")]
        ) from error
    found = {
        mode.id
        for mode in FailureMode.select(FailureMode.id).where(FailureMode.id.in_(ids) & (FailureMode.study == study))
    }
    missing = [mode_id for mode_id in ids if mode_id not in found]
    if missing:
        raise ValidationFailed(
            "unknown modes", errors=[field_error("modes", f"not modes of this study: {missing}", "query")]
        )
    return ids


def study_history(study, args, now):
    """The whole history document of one study at now (shared by the JSON and chart views)."""
    first = args.get("from_") or history.first_event_day(study)
    last = args.get("to") or local_today(study.timezone, now)
    periods_ = history.periods(first, last, args["interval"], study.timezone)
    history.check_point_count(periods_)
    points, lookups = history.history_points(study, periods_, now)
    wanted = _mode_ids(args.get("modes"), study)
    series = []
    if wanted != ():
        by_mode = history.mode_series(study, wanted, lookups)
        names = {mode.id: mode for mode in FailureMode.select().where(FailureMode.id.in_(list(by_mode)))}
        observed = observed_rates.observed_series(study, list(by_mode), lookups)
        occurrence = history.mode_series(study, list(observed), lookups, "occurrence") if observed else {}
        series = [
            {
                "mode_id": mode_id,
                "item": names[mode_id].item,
                "failure_mode": names[mode_id].failure_mode,
                "rpn": values,
                "observed": {**observed[mode_id], "occurrence": occurrence[mode_id]} if mode_id in observed else None,
            }
            for mode_id, values in by_mode.items()
        ]
    return {
        "study_id": study.id,
        "interval": args["interval"],
        "timezone": study.timezone,
        "points": points,
        "modes": series,
        "criticality_by_class": class_series(study, lookups) if study.criticality_enabled else None,
        "projection": projection(study, args["interval"], now),
        "caution": CAUTION,
    }


# Serialized documents without mode series. A study's revision moves with every event and its version with
# every change of its own fields, so they, the arguments and the local day decide the whole document but
# for the two instants stamped now; the document is kept as its JSON cut where those instants go.
_serialized_documents = BoundedCache()
_NOW_FIELD = UTCDateTime()
# Stands in for the instants stamped now while the document is serialized; no document holds this text.
_NOW_MARK = "\x00now\x00"


def _document_key(study, args, now):
    window = (args["interval"], args.get("from_"), args.get("to"))
    return (history.revision_key(study), study.version, window, local_today(study.timezone, now))


def _now_marked(dumped):
    """A copy of a dumped document whose in-progress point and projection start hold _NOW_MARK."""
    points = list(dumped["points"])
    if points and points[-1]["in_progress"]:
        points[-1] = {**points[-1], "at": _NOW_MARK}
    future = dumped["projection"]["points"]
    projected = {**dumped["projection"], "points": [{**future[0], "at": _NOW_MARK}, *future[1:]]}
    return {**dumped, "points": points, "projection": projected}


def _serialized_pieces(study, args, now):
    """The document's JSON as jsonify writes it, in byte pieces between which now is stamped."""
    dumped = StudyHistorySchema().dump(study_history(study, args, now))
    return json_pieces(_now_marked(dumped), _NOW_MARK)


def history_json(study, args, now):
    """The study's history without mode series as JSON bytes: serialized once per revision and day, stamped now."""
    pieces = _serialized_documents.get_or_compute(
        _document_key(study, args, now), lambda: _serialized_pieces(study, args, now)
    )
    return json_joined(pieces, _NOW_FIELD.serialize("at", {"at": now}))


def history_response(study_id, args):
    """The history document; without mode series it is served from its serialized form (history_json)."""
    study = get_study(study_id)
    now = utcnow()
    if args.get("modes"):
        return study_history(study, args, now)
    return serialized_response(history_json(study, args, now))


@blp.route("/studies/<int:study_id>/history")
class StudyHistory(MethodView):
    """A study's risk burn-down."""

    # One schema instance for every request: building one per request costs more than the cached answer.
    @blp.arguments(HistoryArgsSchema(), location="query", unknown=ma.RAISE)
    @blp.response(200, StudyHistorySchema)
    def get(self, args, study_id):
        """Totals at each interval end in the study's time zone, change by cause, projection."""
        return history_response(study_id, args)


@blp.route("/history")
class PortfolioHistory(MethodView):
    """Risk across many studies, for the quality manager's view."""

    @blp.arguments(PortfolioArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, PortfolioHistorySchema)
    def get(self, args):
        """Totals summed over the studies that match the filters."""
        check_timezone(args["timezone"])
        query = studies_query(args.get("status"), args.get("kind"), args.get("tag"), args.get("owner_email"))
        if args.get("site"):
            query = query.where(Study.site == args["site"])
        studies = list(query.order_by(Study.id))
        first = args.get("from_") or min(
            (history.first_event_day(study) for study in studies), default=local_today(args["timezone"])
        )
        last = args.get("to") or local_today(args["timezone"])
        periods_ = history.periods(first, last, args["interval"], args["timezone"])
        history.check_point_count(periods_)
        return {
            "interval": args["interval"],
            "timezone": args["timezone"],
            "study_ids": [study.id for study in studies],
            "points": history.portfolio_points(studies, periods_),
            "caution": CAUTION,
        }


def chart_response(study_id, args, image_format):
    """The burn-down chart of a study's history over the requested range, as an image response."""
    study = get_study(study_id)
    document = study_history(study, args, utcnow())
    closures = charts.closure_instants(document, args.get("from_"))
    image = charts.burn_down_chart(document, study.title, closures, image_format)
    return Response(image, mimetype=charts.MEDIA_TYPES[image_format])


@blp.route("/studies/<int:study_id>/history.svg")
class StudyHistorySvg(MethodView):
    """A study's risk burn-down as an SVG chart."""

    @blp.arguments(RangeArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(
        200,
        {"type": "string", "contentMediaType": "image/svg+xml"},
        content_type="image/svg+xml",
        description="Total RPN, its projection, modes needing action and action closures (SVG 1.1)",
    )
    @blp.alt_response(404, description="No study with this id")
    def get(self, args, study_id):
        """The risk burn-down as an SVG image, the same bytes for the same history."""
        return chart_response(study_id, args, "svg")


@blp.route("/studies/<int:study_id>/history.png")
class StudyHistoryPng(MethodView):
    """A study's risk burn-down as a PNG chart."""

    @blp.arguments(RangeArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(
        200,
        {"type": "string", "contentMediaType": "image/png"},
        content_type="image/png",
        description=f"The burn-down at {charts.WIDTH_PX} x {charts.HEIGHT_PX} pixels",
    )
    @blp.alt_response(404, description="No study with this id")
    def get(self, args, study_id):
        """The risk burn-down as a PNG image, for pasting into a report."""
        return chart_response(study_id, args, "png")
