"""Where risk is heading: the total if every open action closes on its due date with its target."""

from abate.domain.clock import local_today, utcnow
from abate.domain.events import needs_action_condition
from abate.domain.history import local_midnight_utc, periods
from abate.domain.scoring import Ratings, needs_action_reasons, projected_ratings
from abate.domain.studies import policy_of
from abate.models import RATING_DIMENSIONS, CorrectiveAction, FailureMode

ASSUMPTION = (
    "every open action closes on its due date (an overdue one today) and its mode reaches the action's target ratings"
)


def _closings(study, today):
    """The study's unfinished actions as [(day assumed closed, mode_id, target)] in date order, and
    {mode_id: current Ratings} of their modes, from one joined query of plain tuples."""
    rows = (
        CorrectiveAction.select(
            CorrectiveAction.due_date,
            CorrectiveAction.mode,
            *(getattr(CorrectiveAction, f"target_{name}") for name in RATING_DIMENSIONS),
            *(getattr(FailureMode, name) for name in RATING_DIMENSIONS),
        )
        .join(FailureMode)
        .where((CorrectiveAction.study == study) & CorrectiveAction.unfinished() & (FailureMode.status == "active"))
        .tuples()
    )
    closings, ratings = [], {}
    for due_date, mode_id, *values in rows:
        target = dict(zip(RATING_DIMENSIONS, values[:3], strict=True))
        closings.append((max(due_date, today), mode_id, target))
        ratings[mode_id] = Ratings(*values[3:])
    return sorted(closings, key=lambda closing: (closing[0], closing[1])), ratings


def projection(study, interval, now=None):
    """{"points", "done_date", "assumption"}: projected totals at each future interval end from now.

    Only the modes with open actions are read; the totals move by each assumed closing's change.
    """
    now = now or utcnow()
    today = local_today(study.timezone, now)
    policy = policy_of(study)
    closings, ratings = _closings(study, today)

    def needs(current):
        return int(bool(needs_action_reasons(current, policy)))

    total = study.total_rpn
    needing = (
        FailureMode.select()
        .where((FailureMode.study == study) & (FailureMode.status == "active") & needs_action_condition(study))
        .count()
    )
    points = [{"at": now, "total_rpn": total, "needs_action_count": needing}]
    done_date = today if needing == 0 else None
    last_day = closings[-1][0] if closings else today
    position = 0
    for period in periods(today, last_day, interval, study.timezone):
        # An action due on a day counts as closed by the end of that day.
        while position < len(closings) and closings[position][0] < period.end:
            day, mode_id, target = closings[position]
            before = ratings[mode_id]
            ratings[mode_id] = after = projected_ratings(before, [target])
            total += after.rpn - before.rpn
            needing += needs(after) - needs(before)
            position += 1
            # Targets only ever lower ratings, so the first day with nothing left to act on is final.
            if done_date is None and needing == 0:
                done_date = day
        points.append(
            {
                "at": local_midnight_utc(period.end, study.timezone),
                "period": period.label,
                "total_rpn": total,
                "needs_action_count": needing,
            }
        )
    return {"points": points, "done_date": done_date, "assumption": ASSUMPTION}
