"""Where risk is heading: the total if every open action closes on its due date with its target."""

from abate.domain.clock import local_today, utcnow
from abate.domain.history import local_midnight_utc, periods
from abate.domain.scoring import Ratings, assess, projected_ratings
from abate.domain.studies import policy_of
from abate.models import RATING_DIMENSIONS, CorrectiveAction, FailureMode

ASSUMPTION = (
    "every open action closes on its due date (an overdue one today) and its mode reaches the action's target ratings"
)


def _closings(study, today):
    """[(date it is assumed to close, mode_id, target)] for the study's unfinished actions, in date order."""
    actions = (
        CorrectiveAction.select()
        .join(FailureMode)
        .where((CorrectiveAction.study == study) & CorrectiveAction.unfinished() & (FailureMode.status == "active"))
    )
    closings = [
        (
            max(action.due_date, today),
            action.mode_id,
            {name: getattr(action, f"target_{name}") for name in RATING_DIMENSIONS},
        )
        for action in actions
    ]
    return sorted(closings, key=lambda closing: (closing[0], closing[1]))


def projection(study, interval, now=None):
    """{"points", "done_date", "assumption"}: projected totals at each future interval end from now."""
    now = now or utcnow()
    today = local_today(study.timezone, now)
    policy = policy_of(study)
    ratings = {
        mode.id: Ratings(mode.severity, mode.occurrence, mode.detection)
        for mode in FailureMode.select().where((FailureMode.study == study) & (FailureMode.status == "active"))
    }

    def needing():
        return sum(1 for current in ratings.values() if assess(current, policy).needs_action)

    closings = _closings(study, today)
    last_day = closings[-1][0] if closings else today
    points = [{"at": now, "total_rpn": sum(r.rpn for r in ratings.values()), "needs_action_count": needing()}]
    done_date = today if points[0]["needs_action_count"] == 0 else None
    position = 0
    for period in periods(today, last_day, interval, study.timezone):
        # An action due on a day counts as closed by the end of that day.
        while position < len(closings) and closings[position][0] < period.end:
            day, mode_id, target = closings[position]
            ratings[mode_id] = projected_ratings(ratings[mode_id], [target])
            position += 1
            # Targets only ever lower ratings, so the first day with nothing left to act on is final.
            if done_date is None and needing() == 0:
                done_date = day
        points.append(
            {
                "at": local_midnight_utc(period.end, study.timezone),
                "period": period.label,
                "total_rpn": sum(r.rpn for r in ratings.values()),
                "needs_action_count": needing(),
            }
        )
    return {"points": points, "done_date": done_date, "assumption": ASSUMPTION}
