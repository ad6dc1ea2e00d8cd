"""Latency of one action closure over HTTP in a small and in a large study, interleaved in one run."""

import datetime
import random
import statistics
import time

import requests
from harness import (
    OWNER,
    REQUEST_TIMEOUT,
    SEED,
    WRITER,
    Row,
    abate_app,
    bearer_headers,
    fresh_database,
    new_study,
    progress,
    refresh_statistics,
    served,
)

from abate import db
from abate.domain import actions, modes
from abate.domain.clock import utcnow

FULL = {"small": 100, "large": 10_000, "closures": 300}
QUICK = {"small": 100, "large": 1_000, "closures": 20}
# Closures before the measured ones, so that connections and caches are warm for both studies.
WARM_UP = 5
BATCH = 1_000


def prepare_study(modes_count, actions_count, rng):
    """A study of modes_count modes with actions_count open actions spread over them; return action ids."""
    study = new_study(f"Benchmark study of {modes_count} modes (invented)", "design")
    mode_ids = []
    for first in range(0, modes_count, BATCH):
        with db.database.atomic():
            for number in range(first + 1, min(first + BATCH, modes_count) + 1):
                ratings = {name: rng.randint(3, 10) for name in ("severity", "occurrence", "detection")}
                mode = modes.create_mode(
                    study.id,
                    {"item": f"Part {number}", "failure_mode": f"Invented failure mode {number}", **ratings},
                    **WRITER,
                )
                mode_ids.append(mode.id)
    rng.shuffle(mode_ids)
    due = utcnow().date() + datetime.timedelta(days=60)
    action_ids = []
    with db.database.atomic():
        # A small study holds more actions than modes; each mode then has several.
        for index in range(actions_count):
            mode_id = mode_ids[index % modes_count]
            action = actions.create_action(
                mode_id,
                {
                    "title": f"Lower occurrence of mode {mode_id}",
                    "kind": "prevention",
                    "owner": OWNER,
                    "due_date": due,
                    "target": {"occurrence": 2},
                },
                **WRITER,
            )
            action_ids.append(action.id)
    progress(f"close: study of {modes_count:,} modes with {actions_count} open actions ready")
    return action_ids


def close_seconds(session, base_url, action_id):
    """Close one action through the API; return the seconds it took."""
    body = {"result": {"occurrence": 2}, "evidence": "Invented verification record", "verified_by": "Invented Auditor"}
    started = time.perf_counter()
    response = session.post(f"{base_url}/v1/actions/{action_id}/close", json=body, timeout=REQUEST_TIMEOUT)
    elapsed = time.perf_counter() - started
    if response.status_code != 200 or response.json()["status"] != "closed":
        raise RuntimeError(f"closing action {action_id} answered {response.status_code}: {response.text[:500]}")
    return elapsed


def main(database_url=None, quick=False):
    """Prepare both studies, then close their actions in turn, alternating which goes first."""
    size = QUICK if quick else FULL
    rng = random.Random(SEED)
    needed = WARM_UP + size["closures"]
    with fresh_database(database_url) as url, abate_app(url) as app:
        with db.database.connection_context():
            prepared = {name: prepare_study(size[name], needed, rng) for name in ("small", "large")}
            refresh_statistics()
            headers = bearer_headers("editor")
        timings = {"small": [], "large": []}
        with served(app) as base_url, requests.Session() as session:
            session.headers.update(headers)
            progress(f"close: {size['closures']} closures in each study, interleaved")
            for index in range(needed):
                order = ("small", "large") if index % 2 == 0 else ("large", "small")
                for name in order:
                    seconds = close_seconds(session, base_url, prepared[name][index])
                    if index >= WARM_UP:
                        timings[name].append(seconds)
    small_ms, large_ms = (1000 * statistics.mean(timings[name]) for name in ("small", "large"))
    return [
        Row(f"mean POST /v1/actions/{{id}}/close, {size['small']:,} modes", small_ms, "ms"),
        Row(f"mean POST /v1/actions/{{id}}/close, {size['large']:,} modes", large_ms, "ms"),
        Row("large / small", large_ms / small_ms, "ratio", ("<=", 1.5)),
    ]
