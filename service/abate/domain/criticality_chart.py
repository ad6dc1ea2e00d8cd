"""The criticality matrix of a study's report (severity class against level) as SVG or PNG bytes."""

import textwrap

from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from abate.domain import criticality
from abate.domain.charts import DPI, TITLE_LENGTH, render
from abate.domain.studies import CAUTION

WIDTH_PX, HEIGHT_PX = 1000, 620
# One hue, darker with more modes in a cell; text turns white on the darker cells.
EMPTY_COLOUR, FULL_COLOUR = (0.96, 0.97, 0.98), (0.12, 0.31, 0.47)
IDS_SHOWN = 8


def _shade(count, most):
    weight = 0 if most == 0 else 0.25 + 0.75 * count / most if count else 0
    return tuple(empty + (full - empty) * weight for empty, full in zip(EMPTY_COLOUR, FULL_COLOUR, strict=True))


def _cell_text(cell):
    ids = cell["mode_ids"]
    if not ids:
        return ""
    shown = ", ".join(f"#{mode_id}" for mode_id in ids[:IDS_SHOWN]) + (" …" if len(ids) > IDS_SHOWN else "")
    lines = textwrap.wrap(shown, 22)[:3]
    return "\n".join([f"{len(ids)} mode{'s' if len(ids) > 1 else ''}", *lines, f"Cm {cell['mode_criticality']:.3g}"])


def matrix_chart(report, study_title, image_format):
    """The 4 x 5 matrix: classes I (top) .. IV against levels E (left, least likely) .. A, with each cell's modes."""
    levels = [level["level"] for level in reversed(report["levels"])]
    names = {level["level"]: level["name"] for level in report["levels"]}
    cells = {(cell["severity_class"], cell["level"]): cell for cell in report["matrix"]}
    most = max((len(cell["mode_ids"]) for cell in report["matrix"]), default=0)
    figure = Figure(figsize=(WIDTH_PX / DPI, HEIGHT_PX / DPI), dpi=DPI)
    figure.subplots_adjust(left=0.16, right=0.97, top=0.84, bottom=0.17)
    axes = figure.add_subplot()
    for row, severity_class in enumerate(criticality.SEVERITY_CLASSES):
        for column, level in enumerate(levels):
            cell = cells[(severity_class, level)]
            colour = _shade(len(cell["mode_ids"]), most)
            axes.add_patch(Rectangle((column, row), 1, 1, facecolor=colour, edgecolor="white", linewidth=2))
            text_colour = "white" if sum(colour) < 1.6 else "#222222"
            axes.text(
                column + 0.5, row + 0.5, _cell_text(cell), ha="center", va="center", fontsize=8, color=text_colour
            )
    axes.set_xlim(0, len(levels))
    axes.set_ylim(len(criticality.SEVERITY_CLASSES), 0)
    axes.set_xticks([index + 0.5 for index in range(len(levels))])
    axes.set_xticklabels([f"{level}\n{names[level]}" for level in levels], fontsize=9)
    axes.set_yticks([index + 0.5 for index in range(len(criticality.SEVERITY_CLASSES))])
    axes.set_yticklabels(
        [f"{name}\n{criticality.SEVERITY_CLASS_NAMES[name]}" for name in criticality.SEVERITY_CLASSES], fontsize=9
    )
    axes.set_xlabel("Probability level (share of the item's failure probability)", fontsize=10)
    axes.set_ylabel("Severity class", fontsize=10)
    axes.tick_params(length=0)
    title = textwrap.shorten(study_title, TITLE_LENGTH, placeholder="…")
    figure.suptitle(f"Criticality matrix: {title}", x=0.16, ha="left", fontsize=14, parse_math=False)
    figure.text(0.16, 0.88, "MIL-STD-1629A Task 102; Cm = beta x alpha x lambda_p x t", fontsize=9, color="#444444")
    figure.text(
        0.5, 0.015, CAUTION, ha="center", fontsize=7, color="#555555", parse_math=False, gid="caution", wrap=True
    )
    return render(figure, image_format)
