"""Throughput of everyday API reads against a bare Flask route, and how reads and closures grow with 10 x the data."""

import random
import statistics
import time

import requests
from bench_close import WARM_UP, close_seconds, prepare_study
from harness import (
    SEED,
    Row,
    abate_app,
    bare_app,
    bearer_headers,
    fresh_database,
    progress,
    refresh_statistics,
    served,
    side_by_side_throughput,
)

from abate import db
from abate.models import CorrectiveAction, FailureMode

FULL = {"small": 1_000, "large": 10_000, "clients": 8, "seconds": 40.0, "rounds": 4, "closures": 200}
QUICK = {"small": 100, "large": 1_000, "clients": 4, "seconds": 5.0, "rounds": 2, "closures": 20}
PAGE = 50


def study_and_middle_mode(action_ids):
    """(study id, id of a mode halfway through it) for the study that holds these actions."""
    study_id = FailureMode.get_by_id(CorrectiveAction.get_by_id(action_ids[0]).mode_id).study_id
    mode_ids = [row.id for row in FailureMode.select(FailureMode.id).where(FailureMode.study == study_id)]
    return study_id, sorted(mode_ids)[len(mode_ids) // 2]


def closure_rate(base_url, headers, prepared, closures):
    """{name: closures per second} with one keep-alive session, alternating the studies (and which goes first)."""
    timings = {name: [] for name in prepared}
    with requests.Session() as session:
        session.headers.update(headers)
        for index in range(WARM_UP + closures):
            names = list(prepared) if index % 2 == 0 else list(reversed(prepared))
            for name in names:
                seconds = close_seconds(session, base_url, prepared[name][index])
                if index >= WARM_UP:
                    timings[name].append(seconds)
    return {name: 1 / statistics.mean(values) for name, values in timings.items()}


def main(database_url=None, quick=False):
    """Prepare a small and a ten times larger study, then measure reads side by side and closures in turn."""
    size = QUICK if quick else FULL
    rng = random.Random(SEED)
    needed = WARM_UP + size["closures"]
    with fresh_database(database_url) as url, abate_app(url) as app:
        started = time.perf_counter()
        with db.database.connection_context():
            prepared = {name: prepare_study(size[name], needed, rng) for name in ("small", "large")}
            chosen = {name: study_and_middle_mode(ids) for name, ids in prepared.items()}
            studies = {name: study_id for name, (study_id, _) in chosen.items()}
            mode_ids = {name: mode_id for name, (_, mode_id) in chosen.items()}
            refresh_statistics()
            # The readers' token is an editor's, so that the closures use the same kind of token.
            headers = bearer_headers("editor")
        written_in = time.perf_counter() - started
        with served(app) as abate_url, served(bare_app()) as bare_url:
            progress(f"api: {size['clients']} clients, {size['seconds']:.0f} s per route in {size['rounds']} rounds")
            rates = side_by_side_throughput(
                {
                    "bare": f"{bare_url}/bare",
                    "mode small": f"{abate_url}/v1/modes/{mode_ids['small']}",
                    "list small": f"{abate_url}/v1/studies/{studies['small']}/modes?limit={PAGE}",
                    "mode large": f"{abate_url}/v1/modes/{mode_ids['large']}",
                    "list large": f"{abate_url}/v1/studies/{studies['large']}/modes?limit={PAGE}",
                },
                size["clients"],
                size["seconds"],
                size["rounds"],
                headers,
            )
            progress(f"api: {size['closures']} closures in each study, interleaved")
            closures = closure_rate(abate_url, headers, prepared, size["closures"])
    small, large = f"{size['small']:,} modes", f"{size['large']:,} modes"
    return [
        Row(f"setup: two studies written through the domain ({small}, {large})", written_in, "s"),
        Row("GET /bare", rates["bare"], "req/s"),
        Row(f"GET /v1/modes/{{id}}, {small}", rates["mode small"], "req/s"),
        Row(f"GET /v1/studies/{{id}}/modes?limit={PAGE}, {small}", rates["list small"], "req/s"),
        Row("mode / bare", rates["mode small"] / rates["bare"], "ratio", (">=", 0.75)),
        Row("list / bare", rates["list small"] / rates["bare"], "ratio", (">=", 0.5)),
        Row(f"GET /v1/modes/{{id}}, {large}", rates["mode large"], "req/s"),
        Row(f"GET /v1/studies/{{id}}/modes?limit={PAGE}, {large}", rates["list large"], "req/s"),
        Row(f"POST /v1/actions/{{id}}/close, {small}", closures["small"], "req/s"),
        Row(f"POST /v1/actions/{{id}}/close, {large}", closures["large"], "req/s"),
        # Throughput ratios: 1.0 is no growth; 0.1 would be cost growing linearly with the data.
        Row("mode: large / small", rates["mode large"] / rates["mode small"], "ratio", (">=", 0.8)),
        Row("list page: large / small", rates["list large"] / rates["list small"], "ratio", (">=", 0.1)),
        Row("close: large / small", closures["large"] / closures["small"], "ratio", (">=", 0.8)),
    ]
