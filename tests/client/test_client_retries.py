"""Safe retries: the automatic Idempotency-Key, and retrying lost answers, 429 and 503 as Retry-After says."""

import socket
import uuid

import pytest
import requests

from abate.models import IdempotencyRecord
from abate_client import AbateError, Client, TransportError, ValidationFailed
from abate_client.client import BACKOFF_SECONDS, MAX_RETRY_WAIT
from client.conftest import LOSE_ANSWER, WaitRecordingClient, new_study, study_fields

MODE = {"failure_mode": "Crack at the weld toe", "severity": 7, "occurrence": 8, "detection": 5}


@pytest.fixture
def flaky(proxy, admin_token):
    """A client that waits without sleeping, talking to Abate through the scripted proxy."""
    with WaitRecordingClient(proxy.url, token=admin_token, retries=3) as client:
        yield client


def keys_sent(proxy, method="POST"):
    """The Idempotency-Key of each request of this method the proxy saw (None where absent)."""
    return [request.headers.get("Idempotency-Key") for request in proxy.seen if request.method == method]


def test_a_post_whose_answer_was_lost_is_sent_again_with_its_key_and_done_once(api, flaky, proxy, connection):
    study = new_study(api)
    proxy.answer(LOSE_ANSWER)
    mode = flaky.modes.create(study.id, **MODE)

    keys = keys_sent(proxy)
    assert len(keys) == 2 and keys[0] == keys[1]
    assert uuid.UUID(keys[0]).version == 4
    # The first attempt reached Abate; the second was answered from the stored response.
    assert [each.id for each in api.modes.list(study.id)] == [mode.id]
    assert [event.kind for event in api.events.list(study.id)] == ["created"]
    stored = IdempotencyRecord.select().where(IdempotencyRecord.key == keys[0])
    assert [(record.state, record.response_status) for record in stored] == [("done", 201)]
    assert flaky.waits == [BACKOFF_SECONDS]


def test_two_separate_creates_send_two_keys_and_make_two_modes(api, flaky, proxy):
    study = new_study(api)
    first = flaky.modes.create(study.id, **MODE)
    second = flaky.modes.create(study.id, **MODE)
    keys = keys_sent(proxy)
    assert len(set(keys)) == 2 and None not in keys
    assert first.id != second.id
    assert sorted(each.id for each in api.modes.list(study.id)) == [first.id, second.id]


def test_the_same_key_with_another_body_is_validation_failed_and_makes_nothing(api):
    study = new_study(api)
    path = f"/v1/studies/{study.id}/modes"
    api.request("POST", path, json=MODE, idempotency_key="bridge-7")
    with pytest.raises(ValidationFailed) as caught:
        api.request("POST", path, json={**MODE, "severity": 2}, idempotency_key="bridge-7")
    assert [error["field"] for error in caught.value.errors] == ["Idempotency-Key"]
    assert [mode.severity for mode in api.modes.list(study.id)] == [7]


def test_503_and_429_are_retried_after_their_retry_after_with_the_same_key(api, flaky, proxy):
    # Retry-After in delay-seconds form (RFC 9110, section 10.2.3) on 503 and on 429 (RFC 6585, section 4).
    fields = study_fields(api, title="Paint shop")
    proxy.answer((503, {"Retry-After": "2"}), (429, {"Retry-After": "7"}))
    study = flaky.studies.create(**fields)
    assert flaky.waits == [2.0, 7.0]
    keys = keys_sent(proxy)
    assert len(keys) == 3 and len(set(keys)) == 1
    assert [each.id for each in api.studies.list() if each.title == "Paint shop"] == [study.id]


def test_without_retry_after_the_wait_doubles_and_a_get_carries_no_key(flaky, proxy):
    proxy.answer(503, 503)
    assert flaky.scales.get(1).id == 1
    assert flaky.waits == [BACKOFF_SECONDS, 2 * BACKOFF_SECONDS]
    assert keys_sent(proxy, "GET") == [None, None, None]


def test_a_retry_after_date_is_honoured_and_long_waits_are_cut_to_the_cap(flaky, proxy):
    # RFC 9110, section 10.2.3 gives "Fri, 31 Dec 1999 23:59:59 GMT" as its HTTP-date example: long past.
    proxy.answer(
        (503, {"Retry-After": "Fri, 31 Dec 1999 23:59:59 GMT"}),
        (503, {"Retry-After": "Fri, 31 Dec 9999 23:59:59 GMT"}),
        (429, {"Retry-After": "3600"}),
    )
    assert flaky.scales.get(1).id == 1
    assert flaky.waits == [0.0, MAX_RETRY_WAIT, MAX_RETRY_WAIT]


def test_an_unreadable_retry_after_falls_back_to_the_backoff(flaky, proxy):
    proxy.answer((503, {"Retry-After": "soon"}), (503, {"Retry-After": "-5"}))
    assert flaky.scales.get(1).id == 1
    assert flaky.waits == [BACKOFF_SECONDS, 2 * BACKOFF_SECONDS]


def test_when_the_retries_are_used_up_the_last_status_is_raised(admin_token, proxy):
    proxy.answer(503, 503, 503)
    with WaitRecordingClient(proxy.url, token=admin_token, retries=2) as flaky:
        with pytest.raises(AbateError) as caught:
            flaky.scales.get(1)
    assert caught.value.status == 503 and caught.value.title == "scripted answer"
    assert len(proxy.seen) == 3 and len(flaky.waits) == 2


def test_a_patch_whose_answer_was_lost_is_not_sent_again(api, flaky, proxy):
    study = new_study(api, title="Before")
    proxy.answer(LOSE_ANSWER)
    with pytest.raises(TransportError) as caught:
        flaky.studies.update(study, title="After")
    assert isinstance(caught.value.__cause__, requests.ConnectionError)
    assert [request.method for request in proxy.seen] == ["PATCH"] and flaky.waits == []
    # The change did land: a repeat with the old If-Match would be a 412, so the caller reads again instead.
    assert api.studies.get(study.id).title == "After"


def test_refused_connections_are_retried_then_raise_the_clients_transport_error():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    with WaitRecordingClient(f"http://127.0.0.1:{port}", token="abt_none", retries=2) as flaky:
        with pytest.raises(TransportError) as caught:
            flaky.studies.create(title="Nobody listens")
    assert not isinstance(caught.value, requests.RequestException)
    assert isinstance(caught.value.__cause__, requests.ConnectionError)
    assert flaky.waits == [BACKOFF_SECONDS, 2 * BACKOFF_SECONDS]


def test_retries_zero_sends_once(admin_token, proxy):
    proxy.answer(503)
    with Client(proxy.url, token=admin_token, retries=0) as once, pytest.raises(AbateError) as caught:
        once.scales.get(1)
    assert caught.value.status == 503 and len(proxy.seen) == 1
