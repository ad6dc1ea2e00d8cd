"""The risk burn-down chart of a history document, drawn with matplotlib as SVG or PNG bytes."""

import datetime
import io
import textwrap
import zoneinfo

import matplotlib
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.dates import AutoDateLocator, ConciseDateFormatter
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator

from abate.domain.history import interval_start, local_midnight_utc
from abate.domain.studies import CAUTION
from abate.models import RiskEvent

MEDIA_TYPES = {"svg": "image/svg+xml", "png": "image/png"}
WIDTH_PX, HEIGHT_PX, DPI = 1000, 560, 100
TITLE_LENGTH = 90
TOTAL_COLOUR, NEEDS_ACTION_COLOUR, CLOSURE_COLOUR, PROJECTION_COLOUR = "#1f4e79", "#c55a11", "#2e7d32", "#666666"
INTERVAL_WORDS = {"day": "Daily", "week": "Weekly (ISO 8601 weeks)", "month": "Monthly"}

# matplotlib salts the ids inside an SVG with a random value unless this is set, and it reads the value
# from its process-wide settings: set once here, before any thread draws, so equal charts are equal bytes.
matplotlib.rcParams["svg.hashsalt"] = "abate-burn-down"
# Text as <text> elements rather than glyph outlines: searchable, selectable and readable by screen readers.
matplotlib.rcParams["svg.fonttype"] = "none"


def closure_instants(document, from_day=None):
    """When the study's corrective actions closed within the document's range, as naive UTC instants."""
    points = document["points"]
    if not points:
        return []
    last = points[-1]
    # The same bounds as the points: the one in progress includes now, an interval end excludes itself.
    before_last = RiskEvent.occurred_at <= last["at"] if last["in_progress"] else RiskEvent.occurred_at < last["at"]
    query = RiskEvent.select(RiskEvent.occurred_at).where(
        (RiskEvent.study == document["study_id"]) & (RiskEvent.kind == "action_closed") & before_last
    )
    if from_day is not None:
        since = local_midnight_utc(interval_start(from_day, document["interval"]), document["timezone"])
        query = query.where(RiskEvent.occurred_at >= since)
    return [event.occurred_at for event in query.order_by(RiskEvent.occurred_at)]


def burn_down_chart(document, study_title, closures, image_format):
    """SVG or PNG bytes of total RPN over time, its projection, the needs-action count and action closures.

    The projection is drawn only when the history reaches now, where it begins.
    """
    zone = zoneinfo.ZoneInfo(document["timezone"])
    figure = Figure(figsize=(WIDTH_PX / DPI, HEIGHT_PX / DPI), dpi=DPI)
    figure.subplots_adjust(left=0.08, right=0.91, top=0.86, bottom=0.3)
    total_axes = figure.add_subplot()
    count_axes = total_axes.twinx()
    _draw_series(total_axes, count_axes, document, closures, zone)
    _label(figure, total_axes, count_axes, document, study_title)
    return render(figure, image_format)


def _reaches_now(document):
    """Whether the history ends with the interval in progress, where the projection begins."""
    return bool(document["points"]) and document["points"][-1]["in_progress"]


def _local(instant, zone):
    return instant.replace(tzinfo=datetime.UTC).astimezone(zone)


def _draw_series(total_axes, count_axes, document, closures, zone):
    points = document["points"]
    times = [_local(point["at"], zone) for point in points]
    totals = [point["total_rpn"] for point in points]
    counts = [point["needs_action_count"] for point in points]
    total_axes.plot(times, totals, color=TOTAL_COLOUR, linewidth=2, marker="o", markersize=4, gid="total-rpn")
    count_axes.step(times, counts, where="post", color=NEEDS_ACTION_COLOUR, linewidth=1.5, gid="needs-action")
    if _reaches_now(document):
        projected = document["projection"]["points"]
        projected_times = [_local(point["at"], zone) for point in projected]
        projected_totals = [point["total_rpn"] for point in projected]
        projected_counts = [point["needs_action_count"] for point in projected]
        total_axes.plot(
            projected_times, projected_totals, color=TOTAL_COLOUR, linewidth=2, linestyle="--", gid="projection"
        )
        count_axes.step(
            projected_times,
            projected_counts,
            where="post",
            color=NEEDS_ACTION_COLOUR,
            linewidth=1.5,
            linestyle="--",
            gid="projected-needs-action",
        )
        totals, counts = totals + projected_totals, counts + projected_counts
    if closures:
        total_axes.vlines(
            [_local(instant, zone) for instant in closures],
            0,
            1,
            transform=total_axes.get_xaxis_transform(),
            color=CLOSURE_COLOUR,
            linewidth=1,
            alpha=0.7,
            gid="action-closures",
        )
    # Zero at the bottom and whole numbers on both axes; a flat zero history still gets a readable scale.
    total_axes.set_ylim(0, max(totals, default=0) * 1.1 or 1)
    count_axes.set_ylim(0, max(counts, default=0) * 1.1 or 1)
    for axes in (total_axes, count_axes):
        axes.yaxis.set_major_locator(MaxNLocator(integer=True))
    if points:
        locator = AutoDateLocator(tz=zone)
        total_axes.xaxis.set_major_locator(locator)
        total_axes.xaxis.set_major_formatter(ConciseDateFormatter(locator, tz=zone))
    else:
        total_axes.set_xticks([])
        total_axes.text(0.5, 0.5, "No history in this range", transform=total_axes.transAxes, ha="center")


def _label(figure, total_axes, count_axes, document, study_title):
    title = textwrap.shorten(study_title, TITLE_LENGTH, placeholder="…")
    figure.suptitle(f"Risk burn-down: {title}", x=0.08, ha="left", fontsize=15, parse_math=False)
    figure.text(0.08, 0.89, _subtitle(document), fontsize=10, color="#444444", parse_math=False)
    total_axes.set_xlabel(f"Date ({document['timezone']})", fontsize=11, parse_math=False)
    total_axes.set_ylabel("Total RPN (sum of S × O × D)", color=TOTAL_COLOUR, fontsize=11)
    count_axes.set_ylabel("Modes needing action (count)", color=NEEDS_ACTION_COLOUR, fontsize=11)
    total_axes.grid(True, axis="y", color="#dddddd", linewidth=0.8)
    total_axes.set_axisbelow(True)
    legend = [
        Line2D([], [], color=TOTAL_COLOUR, linewidth=2, marker="o", markersize=4, label="Total RPN"),
        Line2D([], [], color=NEEDS_ACTION_COLOUR, linewidth=1.5, label="Modes needing action"),
        Line2D([], [], color=CLOSURE_COLOUR, linewidth=1, alpha=0.7, label="Corrective action closed"),
        Line2D(
            [],
            [],
            color=PROJECTION_COLOUR,
            linewidth=1.5,
            linestyle="--",
            label="Projection if open actions close when due",
        ),
    ]
    figure.legend(handles=legend, loc="upper center", bbox_to_anchor=(0.5, 0.165), ncols=4, fontsize=9, frameon=False)
    figure.text(0.5, 0.015, CAUTION, ha="center", fontsize=7, color="#555555", parse_math=False, gid="caution")


def _subtitle(document):
    subtitle = f"{INTERVAL_WORDS[document['interval']]} study totals, local time {document['timezone']}"
    done_date = document["projection"]["done_date"]
    if done_date is None or not _reaches_now(document):
        return subtitle
    return f"{subtitle}; projected: no mode needing action from {done_date.isoformat()}"


def render(figure, image_format):
    """The figure as SVG (no creation date, so equal figures are equal bytes) or PNG bytes."""
    buffer = io.BytesIO()
    if image_format == "svg":
        # No creation date in the metadata, so the same history gives the same bytes.
        FigureCanvasSVG(figure).print_svg(buffer, metadata={"Date": None})
    else:
        FigureCanvasAgg(figure).print_png(buffer)
    return buffer.getvalue()
