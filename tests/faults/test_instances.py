"""Two `abate serve --no-scheduler` processes on one PostgreSQL schema, driven at once with abate_client."""

import datetime
import threading

import pytest

import abate_client
from processes import abate_environment, admin_secret

ROUNDS = 10
IN_A_MONTH = (datetime.date.today() + datetime.timedelta(days=30)).isoformat()


def _race(calls):
    """Run the calls together from a barrier; return each one's result or the AbateError it raised."""
    barrier = threading.Barrier(len(calls))
    outcomes = []

    def run(call):
        barrier.wait()
        try:
            outcomes.append(call())
        except abate_client.AbateError as error:
            outcomes.append(error)

    threads = [threading.Thread(target=run, args=(call,)) for call in calls]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    return outcomes


@pytest.fixture
def two_instances(tmp_path, database_url, processes):
    """Clients of two served processes on the same database (PostgreSQL only)."""
    if not database_url.startswith("postgres"):
        pytest.skip("several instances need PostgreSQL; SQLite suits one machine (README, Production shape)")
    env = abate_environment(database_url, tmp_path)
    secret = admin_secret(env)
    clients = [abate_client.Client(processes.serve(env).base, token=secret, retries=0) for _ in range(2)]
    yield clients
    for client in clients:
        client.close()


def test_if_match_patches_through_two_instances_lose_no_update(two_instances):
    first, second = two_instances
    scale = next(iter(first.scales.list()))
    study = first.studies.create(
        title="Shared study",
        kind="process",
        owner={"name": "R. Vik", "email": "r.vik@example.com"},
        scale_id=scale.id,
        timezone="UTC",
    )
    mode = first.modes.create(study.id, failure_mode="Seal leaks", severity=6, occurrence=4, detection=3)
    landed, refused = 0, 0
    for round_number in range(ROUNDS):
        # Both read the same version, then both write with its ETag: at most one may land.
        reads = [client.modes.get(mode.id) for client in two_instances]
        outcomes = _race(
            [
                lambda c=client, r=read, n=index, k=round_number: c.modes.update(r, effect=f"round {k} by {n}")
                for index, (client, read) in enumerate(zip(two_instances, reads, strict=True))
            ]
        )
        landed += sum(isinstance(outcome, abate_client.models.Mode) for outcome in outcomes)
        refused += sum(isinstance(outcome, abate_client.PreconditionFailed) for outcome in outcomes)
    assert landed + refused == 2 * ROUNDS
    assert landed >= ROUNDS  # each round's read version is written by at least one of the two
    assert second.modes.get(mode.id).version == 1 + landed


def test_closes_of_one_action_through_two_instances_succeed_once(two_instances):
    first, second = two_instances
    scale = next(iter(first.scales.list()))
    study = first.studies.create(
        title="Shared closes",
        kind="process",
        owner={"name": "R. Vik", "email": "r.vik@example.com"},
        scale_id=scale.id,
        timezone="UTC",
    )
    mode = first.modes.create(study.id, failure_mode="Bolt loosens", severity=7, occurrence=6, detection=4)
    action = first.actions.create(
        mode.id,
        title="Thread locker",
        kind="prevention",
        owner={"name": "R. Vik", "email": "r.vik@example.com"},
        due_date=IN_A_MONTH,
        target=None,
    )
    read = first.actions.get(action.id)
    calls = [lambda c=client: c.actions.close(read, "torque audit", {"occurrence": 2}) for client in two_instances * 4]
    outcomes = _race(calls)
    closed = [outcome for outcome in outcomes if isinstance(outcome, abate_client.models.Action)]
    # The losers see either the changed ETag (412) or the closed state (409), depending on where they lost.
    losers = [o for o in outcomes if isinstance(o, (abate_client.PreconditionFailed, abate_client.Conflict))]
    assert len(closed) == 1 and len(losers) == len(calls) - 1
    assert second.actions.get(action.id).status == "closed"
