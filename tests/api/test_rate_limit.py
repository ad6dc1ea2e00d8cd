"""Requests per token are limited with 429 problem details and Retry-After (RFC 6585 section 4)."""

import pytest

from abate import db
from abate.api.ratelimit import TokenBuckets
from abate.domain.tokens import create_token
from conftest import authorised_client, build_app, close_pool

LIMIT = 3


@pytest.fixture
def limited_app(database_url, tmp_path):
    """An app whose tokens may send LIMIT requests a minute."""
    application = build_app(database_url, tmp_path, RATE_LIMIT_PER_MINUTE=LIMIT)
    yield application
    close_pool()


def _secret(role):
    with db.database.connection_context():
        return create_token(f"limited {role}", role)[1]


def test_the_request_over_the_rate_is_429_with_retry_after_and_another_token_goes_on(limited_app):
    dashboard = authorised_client(limited_app, _secret("reader"))
    bridge = authorised_client(limited_app, _secret("editor"))
    assert [dashboard.get("/v1/studies").status_code for _ in range(LIMIT)] == [200] * LIMIT

    refused = dashboard.get("/v1/studies")

    assert refused.status_code == 429
    assert refused.content_type == "application/problem+json"
    # Retry-After as delay-seconds (RFC 9110 section 10.2.3): one request regained per 60 / LIMIT s.
    assert refused.headers["Retry-After"] == "20"
    body = refused.get_json()
    assert (body["status"], body["type"], body["retry_after"]) == (429, "urn:abate:problem:too-many-requests", 20)
    assert bridge.get("/v1/studies").status_code == 200
    assert limited_app.test_client().get("/livez").status_code == 200
    assert limited_app.test_client().get("/v1/studies").status_code == 401  # no token: refused, not counted


def test_zero_switches_the_limit_off(database_url, tmp_path):
    application = build_app(database_url, tmp_path, RATE_LIMIT_PER_MINUTE=0)
    try:
        reader = authorised_client(application, _secret("reader"))
        assert {reader.get("/v1/studies").status_code for _ in range(20)} == {200}
    finally:
        close_pool()


def test_a_bucket_refills_at_its_rate_and_never_beyond_its_size():
    now = [0.0]
    buckets = TokenBuckets(60, clock=lambda: now[0])  # one request a second
    assert [buckets.wait_seconds(7) for _ in range(60)] == [0] * 60
    assert buckets.wait_seconds(7) == 1
    now[0] += 1.0
    assert buckets.wait_seconds(7) == 0
    now[0] += 3600.0  # an idle hour refills to 60 requests, not more
    assert [buckets.wait_seconds(7) for _ in range(61)] == [0] * 60 + [1]
    assert buckets.wait_seconds(8) == 0  # each token has its own bucket
