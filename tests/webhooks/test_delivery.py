"""The outbox and its worker against a real receiver: what is sent, retries, 410, timeouts, rollbacks, workers."""

import datetime
import threading
import time

import pytest

from abate import db
from abate.domain import actions, webhooks
from abate.domain.clock import utcnow
from abate.models import WebhookDelivery
from abate.webhook_worker import WebhookWorker
from webhooks.conftest import HANG, STALL_BODY, close_action, deliver, later, open_action, subscribe


def _deliveries(client, subscription_id, **params):
    response = client.get(f"/v1/webhooks/{subscription_id}/deliveries", query_string=params)
    assert response.status_code == 200
    return response.get_json()["items"]


def test_closing_an_action_sends_action_closed_mode_rerated_and_study_risk_changed(client, receiver):
    study, mode, action = open_action(client, 7, 8, 5)
    subscribe(client, receiver)
    assert close_action(client, action["id"], occurrence=6, detection=4).status_code == 200

    deliver(client.application)

    assert sorted(receiver.types()) == ["action.closed", "mode.rerated", "study.risk_changed"]
    # Every delivery verifies with the client's helper (Standard Webhooks 1.0 signature scheme).
    assert [request.verification_error for request in receiver.requests] == [None, None, None]
    for request in receiver.requests:
        assert request.headers["content-type"] == "application/json"
        assert request.headers["webhook-id"].startswith("msg_")
        assert abs(int(request.headers["webhook-timestamp"]) - time.time()) < 60
        data = request.payload["data"]
        assert (data["study_id"], data["mode_id"], data["action_id"]) == (study["id"], mode["id"], action["id"])
        assert data["kind"] == "action_closed" and data["action_status"] == "closed"
        # S7 O8 D5 = 280 re-rated to S7 O6 D4 = 168 (LPU DMGT524, unit 12, worked reduction).
        assert data["before"] == {"severity": 7, "occurrence": 8, "detection": 5, "rpn": 280}
        assert data["after"] == {"severity": 7, "occurrence": 6, "detection": 4, "rpn": 168}
        assert (data["previous_study_total_rpn"], data["study_total_rpn"]) == (280, 168)
        assert request.payload["timestamp"].endswith("Z")
    assert client.get(f"/v1/studies/{study['id']}").get_json()["risk"]["total_rpn"] == 168
    assert len({request.headers["webhook-id"] for request in receiver.requests}) == 3


def test_a_subscription_gets_only_the_event_types_it_named(client, receiver):
    study, mode, action = open_action(client)
    subscribe(client, receiver, events=["action.updated", "action.reopened"])
    close_action(client, action["id"], occurrence=2)
    client.post(f"/v1/actions/{action['id']}/reopen", json={"reason": "Fixture wore out"})
    cancelled = client.post(f"/v1/actions/{action['id']}/cancel", json={"reason": "Line is closing"})
    assert cancelled.status_code == 200

    deliver(client.application)

    assert receiver.types() == ["action.reopened", "action.updated"]
    reopened, cancellation = (request.payload["data"] for request in receiver.requests)
    assert reopened["after"]["occurrence"] == 8 and reopened["action_status"] == "open"
    # A cancellation is an update to status cancelled; the ratings stay.
    assert cancellation["kind"] == "action_cancelled" and cancellation["action_status"] == "cancelled"


def test_a_new_failure_mode_changes_the_studys_risk_but_rerates_nothing(client, receiver):
    study, _, _ = open_action(client)
    subscribe(client, receiver)
    client.post(
        f"/v1/studies/{study['id']}/modes",
        json={"failure_mode": "Burr", "severity": 3, "occurrence": 5, "detection": 4},
    )
    deliver(client.application)
    assert receiver.types() == ["study.risk_changed"]
    assert receiver.requests[0].payload["data"]["study_total_rpn"] == 280 + 60


def test_a_failing_receiver_gets_the_same_webhook_id_and_body_on_the_retry(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver)
    close_action(client, action["id"], occurrence=6)
    receiver.answer(500, 500, 500)

    deliver(client.application)
    assert deliver(client.application) == [], "the retries wait for their backoff"
    pending = _deliveries(client, subscription["id"])
    assert {(item["status"], item["last_status_code"]) for item in pending} == {("pending", 500)}
    for item in pending:
        attempted = datetime.datetime.fromisoformat(item["attempts"][0]["attempted_at"])
        # Half the first backoff fixed, half jittered.
        assert webhooks.FIRST_RETRY / 2 <= datetime.datetime.fromisoformat(item["next_attempt_at"]) - attempted
        assert datetime.datetime.fromisoformat(item["next_attempt_at"]) - attempted <= webhooks.FIRST_RETRY

    deliver(client.application, now=later(minutes=1))

    by_id = {}
    for request in receiver.requests:
        by_id.setdefault(request.headers["webhook-id"], []).append(request)
    assert sorted(first.payload["type"] for first, _ in by_id.values()) == [
        "action.closed",
        "mode.rerated",
        "study.risk_changed",
    ]
    for first, retry in by_id.values():
        assert first.body == retry.body and retry.verification_error is None
    delivered = _deliveries(client, subscription["id"])
    assert {(item["status"], item["attempt_count"]) for item in delivered} == {("delivered", 2)}
    for item in delivered:
        assert [attempt["status_code"] for attempt in item["attempts"]] == [500, 200]
        assert item["attempts"][0]["error"] == "the receiver answered 500"
        assert item["webhook_id"] in by_id


def test_a_delivery_fails_for_good_after_the_last_attempt(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed"])
    close_action(client, action["id"], occurrence=6)
    receiver.answer(500, 502, 503, 200)

    for hours in (0, 1, 24, 48):
        deliver(client.application, now=utcnow() + datetime.timedelta(hours=hours))

    # WEBHOOK_MAX_ATTEMPTS is 3 in these tests; the fourth answer is never asked for.
    assert len(receiver.requests) == 3
    [failed] = _deliveries(client, subscription["id"])
    assert failed["status"] == "failed" and failed["next_attempt_at"] is None
    assert [attempt["status_code"] for attempt in failed["attempts"]] == [500, 502, 503]


def test_retry_after_from_the_receiver_postpones_the_next_attempt(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed"])
    close_action(client, action["id"], occurrence=6)
    receiver.answer((503, {"Retry-After": "3600"}))

    deliver(client.application)
    deliver(client.application, now=later(minutes=30))

    assert len(receiver.requests) == 1
    [pending] = _deliveries(client, subscription["id"])
    attempted = datetime.datetime.fromisoformat(pending["attempts"][0]["attempted_at"])
    assert datetime.datetime.fromisoformat(pending["next_attempt_at"]) - attempted >= datetime.timedelta(hours=1)


def test_410_gone_disables_the_subscription_and_its_queued_deliveries(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver)
    close_action(client, action["id"], occurrence=6)
    receiver.answer(410)

    deliver(client.application)

    # Standard Webhooks 1.0, "Delivery success and failure": 410 Gone means disable the endpoint.
    assert len(receiver.requests) == 1
    current = client.get(f"/v1/webhooks/{subscription['id']}").get_json()
    assert current["active"] is False and "410" in current["disabled_reason"] and current["version"] == 2
    assert {delivery["status"] for delivery in _deliveries(client, subscription["id"])} == {"disabled"}
    client.post(f"/v1/actions/{action['id']}/reopen", json={"reason": "Fixture wore out"})
    deliver(client.application, now=later(minutes=60))
    assert len(receiver.requests) == 1
    assert len(_deliveries(client, subscription["id"])) == 3


def test_a_hanging_receiver_is_cut_off_by_the_timeout(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed"])
    close_action(client, action["id"], occurrence=6)
    receiver.answer(HANG)

    started = time.monotonic()
    deliver(client.application)
    elapsed = time.monotonic() - started

    # WEBHOOK_TIMEOUT is 1 s in these tests.
    assert 1 <= elapsed < 5
    [pending] = _deliveries(client, subscription["id"])
    assert pending["status"] == "pending" and pending["last_status_code"] is None
    assert "timed out" in pending["last_error"].lower()
    assert pending["attempts"][0]["duration_ms"] >= 1000


def test_a_2xx_answer_counts_as_delivered_even_if_its_body_never_comes(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed"])
    close_action(client, action["id"], occurrence=6)
    receiver.answer(STALL_BODY)

    started = time.monotonic()
    deliver(client.application)

    # Standard Webhooks 1.0, "Delivery success and failure": a 2xx status is a success.
    assert time.monotonic() - started < 5
    [delivered] = _deliveries(client, subscription["id"])
    assert delivered["status"] == "delivered" and delivered["last_status_code"] == 200
    assert delivered["attempts"][0]["response_excerpt"].startswith("(the body could not be read")


def test_a_close_refused_with_409_sends_nothing(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver)
    close_action(client, action["id"], occurrence=6)
    deliver(client.application)
    sent = len(receiver.requests)

    again = close_action(client, action["id"], occurrence=2)

    assert again.status_code == 409
    deliver(client.application)
    assert len(receiver.requests) == sent == 3
    assert len(_deliveries(client, subscription["id"])) == 3


def test_a_change_rolled_back_after_its_event_was_recorded_sends_nothing(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver)

    with db.database.connection_context():
        with pytest.raises(RuntimeError, match="after the event"):
            with db.database.atomic():
                actions.close_action(
                    action["id"], {"result": {"occurrence": 2}, "evidence": "x"}, actor="test", source="test"
                )
                assert WebhookDelivery.select().count() == 3, "queued inside the transaction"
                raise RuntimeError("a failure after the event, inside the same transaction")
        assert WebhookDelivery.select().count() == 0

    deliver(client.application)
    assert receiver.requests == []
    assert _deliveries(client, subscription["id"]) == []
    assert client.get(f"/v1/actions/{action['id']}").get_json()["status"] == "open"


def test_enqueue_event_sends_an_event_once_per_dedup_key(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.overdue"])

    with db.database.connection_context(), db.database.atomic():
        for _ in range(2):
            webhooks.enqueue_event(
                "action.overdue",
                {"action_id": action["id"], "due_date": datetime.date(2030, 1, 31), "days_overdue": 3},
                dedup_key=f"action.overdue:{action['id']}:2030-02-03",
            )
        with pytest.raises(ValueError, match="unknown webhook event type"):
            webhooks.enqueue_event("action.forgotten", {})
    deliver(client.application)

    [request] = receiver.requests
    assert request.verification_error is None
    assert request.payload["type"] == "action.overdue"
    assert request.payload["data"] == {"action_id": action["id"], "due_date": "2030-01-31", "days_overdue": 3}
    assert len(_deliveries(client, subscription["id"])) == 1


def _wait_for_requests(receiver, count, seconds):
    deadline = time.monotonic() + seconds
    while len(receiver.requests) < count and time.monotonic() < deadline:
        time.sleep(0.05)


def test_the_worker_thread_delivers_within_seconds_of_the_commit_and_stops_cleanly(app, client, receiver):
    _, mode, action = open_action(client)
    subscribe(client, receiver, events=["action.closed"])
    worker = WebhookWorker(app.config, poll_interval=0.2)
    worker.start()
    try:
        close_action(client, action["id"], occurrence=6)
        _wait_for_requests(receiver, 1, seconds=5)
    finally:
        worker.stop(timeout=5)
    assert receiver.types() == ["action.closed"]
    assert receiver.requests[0].verification_error is None

    second = client.post(
        f"/v1/modes/{mode['id']}/actions",
        json={
            "title": "Second",
            "kind": "detection",
            "owner": {"name": "B", "email": "b@example.com"},
            "due_date": "2030-03-01",
        },
    ).get_json()
    close_action(client, second["id"], detection=3)
    _wait_for_requests(receiver, 2, seconds=1)
    assert len(receiver.requests) == 1, "a stopped worker sends nothing"


def test_two_workers_at_once_never_deliver_the_same_message_twice(app, client, receiver):
    subscribe(client, receiver, events=["action.overdue"])
    # Slow answers keep both workers busy at the same time.
    receiver.delay = 0.05
    with db.database.connection_context(), db.database.atomic():
        for number in range(12):
            webhooks.enqueue_event("action.overdue", {"action_id": number})
    results, start = [], threading.Barrier(2)

    def work():
        start.wait()
        results.append(deliver(app))

    workers = [threading.Thread(target=work) for _ in range(2)]
    for thread in workers:
        thread.start()
    for thread in workers:
        thread.join(timeout=30)

    ids = [request.headers["webhook-id"] for request in receiver.requests]
    assert len(ids) == len(set(ids)) == 12
    assert sorted(len(batch) > 0 for batch in results) == [True, True], "both workers delivered some"
    assert sum(len(batch) for batch in results) == 12
    with db.database.connection_context():
        assert {row.status for row in WebhookDelivery.select()} == {"delivered"}


def test_the_reminder_run_announces_each_overdue_action_once_a_day(client, receiver, tmp_path):
    from abate.jobs import run_reminders

    study, mode, action = open_action(client)
    subscribe(client, receiver, events=["action.overdue"])
    app = client.application
    app.config["MAILDIR"] = str(tmp_path / "maildir")
    # The action is due 2030-01-31: three days later (noon UTC) it is overdue in the study's time zone.
    after_due = datetime.datetime(2030, 2, 3, 12, 0)
    with db.database.connection_context():
        run_reminders(app.config, clock=lambda: after_due)
        run_reminders(app.config, clock=lambda: after_due + datetime.timedelta(hours=1))
    deliver(app, now=after_due + datetime.timedelta(hours=2))
    assert receiver.types() == ["action.overdue"]
    data = receiver.requests[0].payload["data"]
    assert (data["action_id"], data["days_overdue"]) == (action["id"], 3)
    with db.database.connection_context():
        run_reminders(app.config, clock=lambda: after_due + datetime.timedelta(days=1))
    deliver(app, now=after_due + datetime.timedelta(days=1, hours=1))
    assert receiver.types() == ["action.overdue", "action.overdue"]
