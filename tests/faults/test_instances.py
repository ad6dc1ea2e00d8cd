"""Two `abate serve --no-scheduler` processes and two schedulers on one PostgreSQL schema, driven at once."""

import collections
import concurrent.futures
import datetime
import threading
import time
from dataclasses import dataclass

import pytest

import abate_client
from client.conftest import new_mode, new_study, open_action
from processes import abate_environment, admin_secret, mail_settings, wait_for
from webhooks.conftest import WEBHOOK_SETTINGS

ROUNDS = 10
OWNERS = [f"owner{number:02d}@example.com" for number in range(40)]
# Each served process takes at least this many writes, and more until every digest is out (or time is up).
FEWEST_WRITES = 10
MAILING_SECONDS = 60
RUN_LINE = "reminder job run_reminders"
YESTERDAY_UTC = datetime.datetime.now(datetime.UTC).date() - datetime.timedelta(days=1)


@dataclass
class Instances:
    """Admin clients of two served processes on one database, the environment they run in and a study's mode."""

    clients: list
    env: dict
    study: abate_client.Study
    mode: abate_client.Mode


@pytest.fixture
def instances(tmp_path, postgres_schema_url, processes, smtp_server):
    """Two served processes on one fresh PostgreSQL schema, mailing to smtp_server; SQLite suits one machine only."""
    # Midnight has always passed, so a scheduler started on env runs the day's reminder job at once.
    settings = {**mail_settings(smtp_server), **WEBHOOK_SETTINGS, "REMINDER_TIME": "00:00"}
    env = abate_environment(postgres_schema_url, tmp_path, **settings)
    secret = admin_secret(env)
    clients = [abate_client.Client(processes.serve(env).base, token=secret, retries=0) for _ in range(2)]
    study = new_study(clients[0], title="Shared study", timezone="UTC")
    yield Instances(clients, env, study, new_mode(clients[0], study, 6, 4, 3, failure_mode="Seal leaks"))
    for client in clients:
        client.close()


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


def test_if_match_patches_through_two_instances_lose_no_update(instances):
    landed, refused = 0, 0
    for round_number in range(ROUNDS):
        # Both read the same version, then both write with its ETag: at most one may land.
        reads = [client.modes.get(instances.mode.id) for client in instances.clients]
        outcomes = _race(
            [
                lambda c=client, r=read, n=index, k=round_number: c.modes.update(r, effect=f"round {k} by {n}")
                for index, (client, read) in enumerate(zip(instances.clients, reads, strict=True))
            ]
        )
        landed += sum(isinstance(outcome, abate_client.Mode) for outcome in outcomes)
        refused += sum(isinstance(outcome, abate_client.PreconditionFailed) for outcome in outcomes)
    assert landed + refused == 2 * ROUNDS
    assert landed >= ROUNDS  # each round's read version is written by at least one of the two
    assert instances.clients[1].modes.get(instances.mode.id).version == 1 + landed


def test_closes_of_one_action_through_two_instances_succeed_once(instances):
    read = open_action(instances.clients[0], instances.mode, title="Thread locker")
    calls = [lambda c=client: c.actions.close(read, "torque audit", {"occurrence": 2}) for client in instances.clients]
    outcomes = _race(calls * 4)
    closed = [outcome for outcome in outcomes if isinstance(outcome, abate_client.Action)]
    # The losers see either the changed ETag (412) or the closed state (409), depending on where they lost.
    losers = [o for o in outcomes if isinstance(o, (abate_client.PreconditionFailed, abate_client.Conflict))]
    assert len(closed) == 1 and len(losers) == len(outcomes) - 1
    assert instances.clients[1].actions.get(read.id).status == "closed"


def test_a_read_kept_by_one_instance_shows_a_write_made_through_the_other_at_once(instances):
    reader, writer = instances.clients
    study, mode = instances.study, instances.mode
    # Read twice, so that the reader's process serves its kept JSON from then on.
    for _ in range(2):
        kept, listed = reader.modes.get(mode.id), list(reader.modes.list(study.id))
    assert kept.open_actions == 0 and [item.id for item in listed] == [mode.id]
    writer.modes.update(writer.modes.get(mode.id), effect="Seal weeps at the flange")
    open_action(writer, mode, title="Flange torque check", target={"occurrence": 2})
    after = reader.modes.get(mode.id)
    assert after.effect == "Seal weeps at the flange" and after.open_actions == 1 and after.version == kept.version + 1
    [listed_after] = list(reader.modes.list(study.id))
    assert listed_after.open_actions == 1 and listed_after.projected.occurrence == 2


def _rerate_until_mailed(client, mode, smtp_server):
    """Re-rate mode through client until every digest is out; once the first is, run the reminder job here too."""
    deadline = time.monotonic() + MAILING_SECONDS
    writes, ran = 0, False
    while writes < FEWEST_WRITES or (len(smtp_server.received) < len(OWNERS) and time.monotonic() < deadline):
        if smtp_server.received and not ran:
            # A scheduler's run is under way (or done): this one must find it busy or find nothing left to do.
            client.reminders.run()
            ran = True
        mode = client.modes.update(mode, reason=f"Trial {writes}", occurrence=2 + writes % 2)
        writes += 1
    return writes


def test_reminders_and_webhooks_go_out_once_per_key_while_both_instances_take_writes(
    instances, processes, smtp_server, receiver
):
    first, second = instances.clients
    subscription = first.webhooks.create(receiver.url, ["action.overdue", "mode.rerated"])
    receiver.secret = subscription.secret
    overdue_ids = []
    for number, owner in enumerate(OWNERS):
        client = instances.clients[number % 2]
        action = open_action(client, instances.mode, owner={"name": "Owner", "email": owner}, due_date=YESTERDAY_UTC)
        overdue_ids.append(action.id)
    modes = [new_mode(client, instances.study, 5, 5, 5, failure_mode="Rerated") for client in instances.clients]

    # Two schedulers, each with a webhook worker, beside the two served processes' workers; and a reminder run
    # through each served process while it takes writes.
    schedulers = [processes.start(instances.env, "scheduler") for _ in range(2)]

    with concurrent.futures.ThreadPoolExecutor(2) as pool:
        writers = [
            pool.submit(_rerate_until_mailed, client, mode, smtp_server)
            for client, mode in zip(instances.clients, modes, strict=True)
        ]
        rerates = sum(writer.result() for writer in writers)
    expected = len(OWNERS) + rerates
    assert wait_for(lambda: len(receiver.requests) >= expected, seconds=60), (len(receiver.requests), expected)
    assert wait_for(lambda: all(RUN_LINE in scheduler.output for scheduler in schedulers), seconds=30)
    # Give a second sender the time to (wrongly) send anything again.
    time.sleep(2)
    outputs = [scheduler.stop() for scheduler in schedulers]

    assert sorted(address for item in smtp_server.received for address in item.rcpt_tos) == OWNERS, outputs
    assert {(row.status, row.attempts) for row in second.reminders.list()} == {("sent", 1)}
    # Each scheduler ran the day's job; the advisory lock or the outbox keys left one digest per owner.
    assert all(output.count(RUN_LINE) == 1 for output in outputs), outputs

    webhook_ids = [request.headers["webhook-id"] for request in receiver.requests]
    assert len(webhook_ids) == len(set(webhook_ids)) == expected
    assert collections.Counter(receiver.types()) == {"action.overdue": len(OWNERS), "mode.rerated": rerates}
    overdue = [request.payload["data"] for request in receiver.requests if request.payload["type"] == "action.overdue"]
    assert sorted(data["action_id"] for data in overdue) == sorted(overdue_ids)
    assert all(request.verification_error is None for request in receiver.requests)
    deliveries = list(second.webhooks.deliveries(subscription.id))
    assert len(deliveries) == expected
    assert {(delivery.status, delivery.attempt_count) for delivery in deliveries} == {("delivered", 1)}
