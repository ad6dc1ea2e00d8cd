"""Print how much risk (RPN) a study's work removed each week, from GET /v1/studies/{id}/history?interval=week.

The reduction of a week is what closed corrective actions and re-ratings took off the total RPN;
modes added or retired change the total too, but are not work that lowered a risk.

    export ABATE_TOKEN=...           # a reader token is enough
    python weekly_reduction.py --base-url http://127.0.0.1:8000 --study 3
"""

import argparse
import dataclasses
import os
import sys

from abate_client import AbateError, Client

IN_PROGRESS_NOTE = "* the week in progress, so far"
HEADER = ("week", "total RPN", "by actions", "by re-rating", "reduction", "share", "cumulative")


@dataclasses.dataclass(frozen=True)
class Week:
    """One week of a study's history: its closing total and the RPN its work removed."""

    period: str
    total_rpn: int
    start_rpn: int
    by_actions: int
    by_rerating: int
    in_progress: bool

    @property
    def reduction(self):
        """RPN removed by actions and re-ratings (negative when reopened actions put risk back)."""
        return self.by_actions + self.by_rerating

    @property
    def share(self):
        """The reduction as a fraction of the total the week began with; None for a week that began at 0."""
        return self.reduction / self.start_rpn if self.start_rpn else None


def weekly_reduction(client, study_id, from_=None):
    """The study's weeks (from its first event, or from_) and the caution that goes with any report of them."""
    history = client.history.study(study_id, interval="week", from_=from_)
    weeks, start = [], 0
    for point in history.points:
        weeks.append(
            Week(
                period=point.period,
                total_rpn=point.total_rpn,
                start_rpn=start,
                by_actions=-point.change["actions"],
                by_rerating=-point.change["rerating"],
                in_progress=point.in_progress,
            )
        )
        start = point.total_rpn
    return weeks, history.caution


def report_lines(weeks, caution):
    """The table as text lines: one row per week, a note on the week in progress, then the caution."""
    rows, cumulative = [HEADER], 0
    for week in weeks:
        cumulative += week.reduction
        share = "-" if week.share is None else f"{week.share:.0%}"
        period = week.period + ("*" if week.in_progress else "")
        rows.append((period, week.total_rpn, week.by_actions, week.by_rerating, week.reduction, share, cumulative))
    widths = [max(len(str(row[column])) for row in rows) for column in range(len(HEADER))]
    lines = ["  ".join(str(cell).rjust(width) for cell, width in zip(row, widths, strict=True)) for row in rows]
    notes = [IN_PROGRESS_NOTE] if any(week.in_progress for week in weeks) else []
    return [*lines, *notes, "", caution]


def main(argv=None):
    """The command line: print the table for one study."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--base-url", default=os.environ.get("ABATE_URL", "http://127.0.0.1:8000"))
    parser.add_argument("--study", type=int, required=True, help="the study's id")
    parser.add_argument("--from", dest="from_", help="first local date, YYYY-MM-DD (default: the first event)")
    args = parser.parse_args(argv)
    token = os.environ.get("ABATE_TOKEN")
    if not token:
        parser.error("set ABATE_TOKEN to an API token")
    try:
        with Client(args.base_url, token=token) as client:
            weeks, caution = weekly_reduction(client, args.study, args.from_)
    except AbateError as error:
        print(f"weekly reduction: {error}", file=sys.stderr)
        return 1
    print("\n".join(report_lines(weeks, caution)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
