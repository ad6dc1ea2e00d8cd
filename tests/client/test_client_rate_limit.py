"""The client against a real Abate that limits each token's requests: 429 is retried as Retry-After says."""

import pytest
import requests

from abate_client import AbateError
from client.conftest import WaitRecordingClient
from conftest import build_app, close_pool

PER_MINUTE = 4


@pytest.fixture
def app(database_url, tmp_path):
    """The application with a small per-token rate limit."""
    application = build_app(database_url, tmp_path, RATE_LIMIT_PER_MINUTE=PER_MINUTE)
    yield application
    close_pool()


def test_a_token_over_its_rate_waits_as_told_then_gets_the_429(live_server, make_token):
    token = make_token("reader")
    with requests.Session() as session:
        told = []
        session.hooks["response"].append(lambda response, **kwargs: told.append(response.headers.get("Retry-After")))
        with WaitRecordingClient(live_server, token=token, session=session, retries=2) as limited:
            assert [limited.scales.get(1).id for _ in range(PER_MINUTE)] == [1] * PER_MINUTE
            with pytest.raises(AbateError) as caught:
                limited.scales.get(1)
    # 429 Too Many Requests with Retry-After (RFC 6585, section 4).
    assert caught.value.status == 429 and caught.value.problem["type"] == "urn:abate:problem:too-many-requests"
    assert told[:PER_MINUTE] == [None] * PER_MINUTE and len(told) == PER_MINUTE + 3
    assert limited.waits == [float(seconds) for seconds in told[PER_MINUTE : PER_MINUTE + 2]]
    assert all(1 <= wait <= 60 / PER_MINUTE for wait in limited.waits)


def test_another_tokens_requests_are_not_held_back(live_server, make_token):
    with WaitRecordingClient(live_server, token=make_token("reader"), retries=0) as first:
        for _ in range(PER_MINUTE):
            first.scales.get(1)
        with pytest.raises(AbateError):
            first.scales.get(1)
    with WaitRecordingClient(live_server, token=make_token("reader"), retries=0) as second:
        assert second.scales.get(1).id == 1 and second.waits == []
