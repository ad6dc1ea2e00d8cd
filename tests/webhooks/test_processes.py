"""The webhook worker inside `abate serve` and `abate scheduler` subprocesses; a hanging receiver stalls no request."""

import abate_client
from abate import db
from abate.domain.tokens import create_token
from client.conftest import new_mode, new_study
from conftest import authorised_client, build_app, close_pool
from processes import abate_environment, admin_secret, wait_for
from webhooks.conftest import HANG, close_action, open_action, subscribe

LOOPBACK_RECEIVERS = {"WEBHOOK_ALLOWED_HOSTS": "127.0.0.1"}
# Long enough that the requests below are answered while the worker still waits for the hanging receiver.
HANG_TIMEOUT = 8


def _served_client(processes, env):
    """A served process on env (migrated first) and an admin client of it."""
    secret = admin_secret(env)
    return abate_client.Client(processes.serve(env).base, token=secret, retries=0)


def test_abate_serve_delivers_webhooks_within_seconds_of_a_change(tmp_path, sqlite_url, processes, receiver):
    with _served_client(processes, abate_environment(sqlite_url, tmp_path, **LOOPBACK_RECEIVERS)) as api:
        receiver.secret = api.webhooks.create(receiver.url, ["mode.rerated"]).secret
        mode = new_mode(api, new_study(api), 6, 4, 3, failure_mode="Seal leaks")
        api.modes.update(mode, reason="New seal supplier", occurrence=2)
        assert wait_for(lambda: receiver.requests, seconds=5)
    [request] = receiver.requests
    assert request.verification_error is None and request.payload["type"] == "mode.rerated"
    assert request.payload["data"]["after"] == {"severity": 6, "occurrence": 2, "detection": 3, "rpn": 36}


def test_abate_scheduler_delivers_webhooks_queued_by_another_process(tmp_path, sqlite_url, processes, receiver):
    app = build_app(sqlite_url, tmp_path, **LOOPBACK_RECEIVERS)
    scheduler = processes.start(abate_environment(sqlite_url, tmp_path, **LOOPBACK_RECEIVERS), "scheduler")
    try:
        with db.database.connection_context():
            client = authorised_client(app, create_token("scheduler check", "admin")[1])
        _, _, action = open_action(client)
        subscribe(client, receiver, events=["action.closed"])
        closed = close_action(client, action["id"], occurrence=6)
        assert closed.status_code == 200, closed.get_json()
        assert wait_for(lambda: receiver.requests, seconds=30), scheduler.output
    finally:
        close_pool()
    assert "scheduler stopped" in scheduler.stop()
    assert receiver.types() == ["action.closed"] and receiver.requests[0].verification_error is None


def test_the_api_answers_while_the_served_worker_waits_on_a_hanging_receiver(
    tmp_path, database_url, processes, receiver
):
    # One attempt only: the timed-out delivery is failed for good, not retried while the test reads it.
    env = abate_environment(
        database_url, tmp_path, **LOOPBACK_RECEIVERS, WEBHOOK_TIMEOUT=HANG_TIMEOUT, WEBHOOK_MAX_ATTEMPTS=1
    )
    with _served_client(processes, env) as api:
        subscription = api.webhooks.create(receiver.url, ["mode.rerated"])
        receiver.secret = subscription.secret
        receiver.answer(HANG)
        mode = new_mode(api, new_study(api), 6, 4, 3, failure_mode="Gasket shrinks")
        mode = api.modes.update(mode, reason="First re-rating", occurrence=5)
        assert wait_for(lambda: receiver.requests, seconds=10), "the worker never tried the first delivery"

        # The worker now waits for an answer that never comes; reads and writes are answered all the same.
        for occurrence in (2, 3, 2):
            mode = api.modes.update(mode, reason=f"Trial at occurrence {occurrence}", occurrence=occurrence)
            assert api.modes.get(mode.id).occurrence == occurrence
        hanging = min(api.webhooks.deliveries(subscription.id), key=lambda delivery: delivery.id)
        assert (hanging.status, hanging.attempt_count, hanging.attempts) == ("pending", 1, []), "no longer in flight"

        # After the timeout the worker records the failure and sends what queued up behind it.
        def settled():
            deliveries = sorted(api.webhooks.deliveries(subscription.id), key=lambda delivery: delivery.id)
            return deliveries if all(delivery.status != "pending" for delivery in deliveries) else None

        assert wait_for(lambda: len(receiver.requests) == 4, seconds=HANG_TIMEOUT + 20)
        timed_out, *queued = wait_for(settled, seconds=10)
    [attempt] = timed_out.attempts
    assert timed_out.status == "failed" and attempt.status_code is None and "timed out" in attempt.error.lower()
    assert attempt.duration_ms >= HANG_TIMEOUT * 1000
    assert [(delivery.status, delivery.attempt_count) for delivery in queued] == [("delivered", 1)] * 3
    assert all(request.verification_error is None for request in receiver.requests)
