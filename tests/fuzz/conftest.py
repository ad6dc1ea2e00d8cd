"""The fuzzed app: a SQLite file of its own per operation, an admin token, and data for small path ids to name."""

from typing import NamedTuple

import pytest

from abate import db
from abate.domain.tokens import create_token
from conftest import authorised_client, build_app, close_pool, make_mode, make_study

# Loopback receivers are refused unless allowed; the seeded subscription points at one nobody serves.
WEBHOOK_HOST = "127.0.0.1"
ACTION_OWNER = "action.owner@example.com"
# Small ids come up often; revoking the fuzzer's own token would turn every later request into a 401.
DECOY_TOKEN_ID, ADMIN_TOKEN_ID = 1, 2
# What the seeded records are called in paths, by path parameter.
SEEDED_PATH_VALUES = {
    "study_id": [1],
    "mode_id": [1, 2],
    "action_id": [1, 2],
    "scale_id": [1, 3],
    "token_id": [DECOY_TOKEN_ID],
    "subscription_id": [1],
    "delivery_id": [1, 3],
    "system": ["tickets"],
    "key": ["T-1", "T-2"],
    "email": [ACTION_OWNER],
}


class FuzzTarget(NamedTuple):
    """The app under fuzzing and the secret of the admin token that every fuzzed request carries."""

    app: object
    secret: str


def _created(response):
    assert response.status_code == 201, response.get_json()
    return response.get_json()


def _action(client, mode_id, title):
    body = {
        "title": title,
        "kind": "detection",
        "owner": {"name": "Action Owner", "email": ACTION_OWNER},
        "due_date": "2030-01-31",
        "target": {"detection": 2},
        "external_ref": {"system": "tickets", "key": title},
    }
    return _created(client.post(f"/v1/modes/{mode_id}/actions", json=body))


def _scale(name):
    def levels(letter):
        return {"levels": [{"value": value, "label": f"{letter}{value}"} for value in (1, 2, 3)]}

    return {"name": name, "severity": levels("S"), "occurrence": levels("O"), "detection": levels("D")}


def seed(client):
    """Subscription 1, unused scale set 3, study 1 with modes 1 and 2, action 1 open and action 2 closed.

    The subscription comes first, so that the actions leave deliveries 1 to 3 in its outbox.
    """
    _created(
        client.post(
            "/v1/webhooks",
            json={"url": f"http://{WEBHOOK_HOST}:9/hooks", "events": ["action.created", "action.closed"]},
        )
    )
    _created(client.post("/v1/scales", json=_scale("Fuzzed 1-3")))
    study = make_study(client, title="Fuzzed study", tags=["fuzz"], external_ref={"system": "plm", "key": "S-1"})
    first = make_mode(client, study["id"], severity=8, occurrence=6, detection=5, item="Seal")
    second = make_mode(client, study["id"], severity=4, occurrence=3, detection=6, item="Label")
    _action(client, first["id"], "T-1")
    closed = _action(client, second["id"], "T-2")
    response = client.post(
        f"/v1/actions/{closed['id']}/close", json={"evidence": "Leak test in place", "result": {"detection": 2}}
    )
    assert response.status_code == 200, response.get_json()


@pytest.fixture
def fuzz_target(sqlite_url, tmp_path):
    """The seeded app; mail goes into a Maildir under tmp_path, never to an SMTP server."""
    # The fuzzer sends thousands of requests a minute with one token; the rate limit has tests of its own.
    app = build_app(sqlite_url, tmp_path, SMTP_HOST="", WEBHOOK_ALLOWED_HOSTS=WEBHOOK_HOST, RATE_LIMIT_PER_MINUTE=0)
    with db.database.connection_context():
        decoy, _ = create_token("decoy reader", "reader")
        token, secret = create_token("fuzz admin", "admin")
    assert (decoy.id, token.id) == (DECOY_TOKEN_ID, ADMIN_TOKEN_ID)
    seed(authorised_client(app, secret))
    yield FuzzTarget(app, secret)
    close_pool()
