"""The client's webhooks group on a live server: subscriptions, their secret, deliveries and redelivery."""

import base64

import pytest

from abate_client import (
    Client,
    Delivery,
    Forbidden,
    PreconditionFailed,
    ValidationFailed,
    Webhook,
    verify_signature,
)
from client.conftest import new_mode, new_study, open_action
from conftest import build_app, close_pool
from webhooks.conftest import WEBHOOK_SETTINGS, Receiver, deliver


@pytest.fixture
def app(database_url, tmp_path):
    """The application with loopback receivers allowed and short delivery timeouts."""
    application = build_app(database_url, tmp_path, **WEBHOOK_SETTINGS)
    yield application
    close_pool()


@pytest.fixture
def receiver():
    """A running webhook receiver on loopback (the webhook tests' own), stopped afterwards."""
    server = Receiver()
    server.thread.start()
    yield server
    server.release.set()
    server.server.shutdown()
    server.server.server_close()


def test_a_new_subscription_shows_its_secret_once(api, receiver):
    created = api.webhooks.create(receiver.url, ["action.created", "action.closed"], description="Ticket bridge")
    assert isinstance(created, Webhook) and created.etag
    assert (created.url, created.events, created.description, created.active) == (
        receiver.url,
        ["action.created", "action.closed"],
        "Ticket bridge",
        True,
    )
    # Standard Webhooks 1.0: the secret is "whsec_" and the base64 of the signing key.
    assert created.secret.startswith("whsec_") and base64.b64decode(created.secret.removeprefix("whsec_"))

    read = api.webhooks.get(created.id)
    assert read.secret is None and read.id == created.id and read.etag == created.etag
    assert [(each.id, each.secret) for each in api.webhooks.list()] == [(created.id, None)]


def test_deactivating_a_subscription_needs_its_current_etag(api, receiver):
    created = api.webhooks.create(receiver.url, ["action.created"])
    paused = api.webhooks.update(created, active=False, description="paused for maintenance")
    assert (paused.active, paused.description, paused.version) == (False, "paused for maintenance", created.version + 1)
    with pytest.raises(PreconditionFailed):
        api.webhooks.update(created, active=True)
    assert api.webhooks.get(created.id).active is False


def test_an_unknown_event_type_or_a_metadata_address_is_validation_failed(api, receiver):
    with pytest.raises(ValidationFailed) as caught:
        api.webhooks.create(receiver.url, ["action.exploded"])
    assert [error["field"] for error in caught.value.errors] == ["events.0"]
    # 169.254.169.254 is link-local (RFC 3927), where cloud metadata services answer.
    with pytest.raises(ValidationFailed) as caught:
        api.webhooks.create("http://169.254.169.254/latest", ["action.created"])
    assert caught.value.problem["type"] == "urn:abate:problem:unsafe-destination"
    assert list(api.webhooks.list()) == []


def test_deliveries_list_each_signed_attempt_and_redelivery_keeps_the_webhook_id(api, app, receiver):
    subscription = api.webhooks.create(receiver.url, ["action.created"])
    receiver.secret = subscription.secret
    action = open_action(api, new_mode(api, new_study(api), 7, 8, 5))
    deliver(app)

    [received] = receiver.requests
    assert received.verification_error is None
    assert verify_signature(subscription.secret, received.headers, received.body) == received.payload
    [delivery] = api.webhooks.deliveries(subscription.id)
    assert isinstance(delivery, Delivery)
    assert (delivery.event_type, delivery.status, delivery.attempt_count) == ("action.created", "delivered", 1)
    assert delivery.webhook_id == received.headers["webhook-id"] and delivery.payload == received.payload
    assert delivery.payload["type"] == "action.created" and delivery.payload["data"]["action_id"] == action.id
    assert [attempt.status_code for attempt in delivery.attempts] == [200]
    assert list(api.webhooks.deliveries(subscription.id, status="failed")) == []

    queued = api.webhooks.redeliver(delivery.id)
    assert (queued.id, queued.status, queued.webhook_id) == (delivery.id, "pending", delivery.webhook_id)
    deliver(app)
    assert [request.headers["webhook-id"] for request in receiver.requests] == [delivery.webhook_id] * 2
    assert [each.status for each in api.webhooks.deliveries(subscription.id)] == ["delivered"]


def test_webhooks_are_for_admins_only(api, live_server, make_token, receiver):
    api.webhooks.create(receiver.url, ["action.created"])
    with Client(live_server, token=make_token("editor")) as editor:
        with pytest.raises(Forbidden) as caught:
            list(editor.webhooks.list())
    assert caught.value.status == 403
