"""Throughput of a study's weekly risk history against a bare Flask JSON route on the same server."""

import datetime
import random
import time

from harness import (
    OWNER,
    SEED,
    WRITER,
    Row,
    abate_app,
    bare_app,
    bearer_headers,
    fresh_database,
    new_study,
    progress,
    refresh_statistics,
    served,
    side_by_side_throughput,
)

from abate import db
from abate.domain import actions, modes
from abate.domain.clock import utcnow

FULL = {"modes": 2_000, "rating_events": 50_000, "clients": 8, "seconds": 20.0, "rounds": 4}
QUICK = {"modes": 100, "rating_events": 1_000, "clients": 4, "seconds": 2.0, "rounds": 2}
SPAN = datetime.timedelta(days=730)
# Actions kept open at any time, as a share of the modes; about one rating event in ten is a closure.
OPEN_SHARE, CLOSURE_SHARE = 0.1, 0.1
# A re-rating outside an action lowers a rating a little more often than it raises one.
LOWERING_CHANCE = 0.55
BATCH = 1_000


class StudyGenerator:
    """Writes an invented study's two years of work through the domain functions, in time order."""

    def __init__(self, study, modes_count, rating_events):
        self.study = study
        self.random = random.Random(SEED)
        self.modes_count = modes_count
        self.closures = int((rating_events - modes_count) * CLOSURE_SHARE)
        self.rerates = rating_events - modes_count - self.closures
        self.open_kept = max(1, int(modes_count * OPEN_SHARE))
        self.ratings = {}
        self.open_actions = []
        steps = modes_count + self.open_kept + 2 * self.closures + self.rerates
        start = utcnow() - SPAN
        # Evenly spaced past instants, the last an hour ago, so every event is recorded past work.
        self.instants = iter(start + (SPAN - datetime.timedelta(hours=1)) * step / steps for step in range(steps))

    def run(self):
        """Create the modes, open the first actions, then mix re-ratings and closures (each closure reopens one)."""
        work = [self.create_mode] * self.modes_count + [self.open_action] * self.open_kept
        mixed = [self.rerate] * self.rerates + [self.close_and_open] * self.closures
        self.random.shuffle(mixed)
        work += mixed
        for first in range(0, len(work), BATCH):
            with db.database.atomic():
                for step in work[first : first + BATCH]:
                    step()
            progress(f"{min(first + BATCH, len(work)):,} of {len(work):,} steps written")

    def create_mode(self):
        """A new mode with ratings between 2 and 10."""
        number = len(self.ratings) + 1
        values = {name: self.random.randint(2, 10) for name in ("severity", "occurrence", "detection")}
        mode = modes.create_mode(
            self.study.id,
            {
                "item": f"Assembly {number // 50 + 1}",
                "failure_mode": f"Invented failure mode {number}",
                "effect": "Invented effect",
                "cause": "Invented cause",
                **values,
                "effective_at": next(self.instants),
            },
            **WRITER,
        )
        self.ratings[mode.id] = values

    def open_action(self):
        """An action on a random mode aiming two steps lower on occurrence or detection."""
        mode_id = self.random.choice(list(self.ratings))
        dimension = self.random.choice(("occurrence", "detection"))
        instant = next(self.instants)
        action = actions.create_action(
            mode_id,
            {
                "title": f"Lower {dimension} of mode {mode_id}",
                "kind": "prevention" if dimension == "occurrence" else "detection",
                "owner": OWNER,
                "due_date": instant.date() + datetime.timedelta(days=self.random.randint(14, 120)),
                "target": {dimension: max(1, self.ratings[mode_id][dimension] - 2)},
                "effective_at": instant,
            },
            **WRITER,
        )
        self.open_actions.append(action)

    def close_and_open(self):
        """Close the oldest open action at its target, then open another so the open count stays."""
        action = self.open_actions.pop(0)
        result = {
            name: getattr(action, f"target_{name}")
            for name in ("severity", "occurrence", "detection")
            if getattr(action, f"target_{name}") is not None
        }
        actions.close_action(
            action.id,
            {"result": result, "evidence": "Invented verification record", "effective_at": next(self.instants)},
            **WRITER,
        )
        self.ratings[action.mode_id].update(result)
        self.open_action()

    def rerate(self):
        """Move one rating of a random mode one step, more often down than up."""
        mode_id = self.random.choice(list(self.ratings))
        dimension = self.random.choice(("severity", "occurrence", "occurrence", "detection", "detection"))
        current = self.ratings[mode_id][dimension]
        step = -1 if self.random.random() < LOWERING_CHANCE else 1
        value = current + step if 1 <= current + step <= 10 else current - step
        modes.update_mode(
            mode_id,
            {dimension: value, "reason": "Invented re-assessment", "effective_at": next(self.instants)},
            **WRITER,
        )
        self.ratings[mode_id][dimension] = value


def generate_study(modes_count, rating_events):
    """Create the study and its history; return the study."""
    study = new_study("Benchmark study (invented)", "process")
    StudyGenerator(study, modes_count, rating_events).run()
    return study


def main(database_url=None, quick=False):
    """Generate the study, serve it and the bare app alike, and compare their throughput."""
    size = QUICK if quick else FULL
    with fresh_database(database_url) as url, abate_app(url) as app:
        progress(f"history: generating {size['modes']:,} modes and {size['rating_events']:,} rating events")
        started = time.perf_counter()
        with db.database.connection_context():
            study = generate_study(size["modes"], size["rating_events"])
            refresh_statistics()
            headers = bearer_headers("reader")
        generated_in = time.perf_counter() - started
        with served(app) as abate_url, served(bare_app()) as bare_url:
            progress(
                f"history: {size['clients']} clients, {size['seconds']:.0f} s per route in {size['rounds']} rounds"
            )
            rates = side_by_side_throughput(
                {
                    "bare": f"{bare_url}/bare",
                    "history": f"{abate_url}/v1/studies/{study.id}/history?interval=week",
                },
                size["clients"],
                size["seconds"],
                size["rounds"],
                headers,
            )
    return [
        Row(f"setup: study written through the domain ({size['rating_events']:,} rating events)", generated_in, "s"),
        Row("GET /bare", rates["bare"], "req/s"),
        Row("GET /v1/studies/{id}/history?interval=week", rates["history"], "req/s"),
        Row("history / bare", rates["history"] / rates["bare"], "ratio", (">=", 0.5)),
    ]
