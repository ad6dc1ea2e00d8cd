"""/v1/webhooks: subscriptions, the destination guard, deliveries with their attempts, redelivery and roles."""

import base64

import pytest

from abate.domain.webhooks import UnsafeDestination, check_destination, parse_allowed_hosts
from conftest import authorised_client
from webhooks.conftest import close_action, deliver, later, open_action, subscribe


def test_creating_a_subscription_shows_its_secret_once(client, receiver):
    response = client.post(
        "/v1/webhooks",
        json={"url": receiver.url, "events": ["study.risk_changed", "action.closed"], "description": "Ticket bridge"},
    )

    assert response.status_code == 201
    body = response.get_json()
    assert body["secret"].startswith("whsec_") and len(base64.b64decode(body["secret"][6:])) >= 24
    # Kept in the order of the event type list, whatever order they were sent in.
    assert body["events"] == ["action.closed", "study.risk_changed"]
    assert body["active"] is True and body["description"] == "Ticket bridge" and body["url"] == receiver.url
    assert response.headers["Location"] == f"/v1/webhooks/{body['id']}"
    read = client.get(f"/v1/webhooks/{body['id']}")
    assert "secret" not in read.get_json() and read.headers["ETag"] == '"1"'
    listed = client.get("/v1/webhooks").get_json()["items"]
    assert [item["id"] for item in listed] == [body["id"]]
    assert body["secret"] not in read.get_data(as_text=True) + str(listed)


@pytest.mark.parametrize(
    ("body", "field"),
    [
        ({"events": ["action.closed"]}, "url"),
        ({"url": "ftp://127.0.0.1/drop", "events": ["action.closed"]}, "url"),
        ({"url": "http://127.0.0.1/hook", "events": []}, "events"),
        ({"url": "http://127.0.0.1/hook", "events": ["action.deleted"]}, "events.0"),
        ({"url": "http://127.0.0.1/hook", "events": ["action.closed"], "secret": "whsec_mine"}, "secret"),
    ],
    ids=["no url", "ftp", "no events", "unknown event", "own secret"],
)
def test_a_subscription_without_a_usable_url_or_events_is_422(client, body, field):
    response = client.post("/v1/webhooks", json=body)
    assert response.status_code == 422
    assert field in [error["field"] for error in response.get_json()["errors"]]
    assert client.get("/v1/webhooks").get_json()["items"] == []


@pytest.mark.parametrize(
    ("url", "reason"),
    # 169.254.169.254 is the instance-metadata address of the large clouds (from memory); a9fe:a9fe is
    # the same address behind the NAT64 prefix 64:ff9b::/96 (RFC 6052).
    [
        ("http://169.254.169.254/latest/meta-data/", "cloud metadata address"),
        ("http://169.254.10.20/hook", "link-local"),
        ("http://[fe80::1]/hook", "link-local"),
        ("http://[64:ff9b::a9fe:a9fe]/hook", "cloud metadata address"),
        ("http://127.0.0.2:9000/hook", "loopback or private"),
        ("http://10.1.2.3/hook", "loopback or private"),
        ("http://0.0.0.0:8000/hook", "not a unicast address"),
        ("http://receiver.invalid/hook", "does not resolve"),
    ],
)
def test_a_url_reaching_metadata_link_local_or_private_addresses_is_refused_with_422(client, url, reason):
    response = client.post("/v1/webhooks", json={"url": url, "events": ["action.closed"]})

    assert response.status_code == 422
    problem = response.get_json()
    assert problem["type"] == "urn:abate:problem:unsafe-destination"
    assert problem["errors"][0]["field"] == "url" and reason in problem["errors"][0]["message"]
    assert client.get("/v1/webhooks").get_json()["items"] == []


def test_loopback_is_refused_unless_the_allow_list_names_it():
    refused = parse_allowed_hosts("")
    allowed = parse_allowed_hosts(" 127.0.0.1 , Hooks.Example.com., [::1]")
    assert allowed == {"127.0.0.1", "hooks.example.com", "::1"}
    for url in ("http://127.0.0.1:8080/hook", "http://[::1]/hook", "http://[::ffff:127.0.0.1]/hook"):
        with pytest.raises(UnsafeDestination, match="loopback or private"):
            check_destination(url, refused)
        check_destination(url, allowed)


def test_the_allow_list_never_admits_link_local_or_metadata_addresses():
    allowed = parse_allowed_hosts("169.254.169.254,169.254.10.20,fe80::1")
    for url, reason in [
        ("http://169.254.169.254/", "cloud metadata"),
        ("http://[::ffff:169.254.169.254]/", "cloud metadata"),
        ("http://169.254.10.20/", "link-local"),
        ("http://[fe80::1]/", "link-local"),
    ]:
        with pytest.raises(UnsafeDestination, match=reason):
            check_destination(url, allowed)


def test_a_url_that_became_unsafe_is_refused_again_at_delivery(app, client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed"])
    close_action(client, action["id"], occurrence=6)
    app.config["WEBHOOK_ALLOWED_HOSTS"] = ""

    deliver(app)

    assert receiver.requests == []
    [delivery] = client.get(f"/v1/webhooks/{subscription['id']}/deliveries").get_json()["items"]
    assert delivery["status"] == "pending" and "loopback or private" in delivery["last_error"]
    assert delivery["attempts"][0]["status_code"] is None


def test_patch_changes_events_description_and_active_and_needs_if_match(client, receiver):
    subscription = subscribe(client, receiver, events=["action.closed"])
    url = f"/v1/webhooks/{subscription['id']}"

    changed = client.patch(
        url, json={"events": ["mode.rerated"], "description": "Rerating feed"}, headers={"If-Match": '"1"'}
    )
    assert changed.status_code == 200
    assert changed.get_json()["events"] == ["mode.rerated"] and changed.headers["ETag"] == '"2"'
    stale = client.patch(url, json={"description": "Lost update"}, headers={"If-Match": '"1"'})
    # RFC 9110 section 13.1.1: If-Match naming an older version is 412, and nothing changes.
    assert stale.status_code == 412
    # RFC 6585 section 3: a PATCH without If-Match is 428 Precondition Required.
    unconditional = client.patch(url, json={"active": False}, headers={"If-Match": None})
    assert unconditional.status_code == 428
    assert client.patch(url, json={"active": False}).status_code == 200
    current = client.get(url).get_json()
    assert current["description"] == "Rerating feed" and current["active"] is False
    assert current["disabled_reason"] == "deactivated by an admin" and current["version"] == 3
    assert client.patch(url, json={"url": "http://127.0.0.1/elsewhere"}).status_code == 422
    assert client.patch("/v1/webhooks/999999", json={"active": True}, headers={"If-Match": None}).status_code == 404


def test_a_deactivated_subscription_queues_nothing_until_it_is_active_again(client, receiver):
    _, mode, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed", "action.reopened"])
    url = f"/v1/webhooks/{subscription['id']}"
    close_action(client, action["id"], occurrence=6)
    client.patch(url, json={"active": False})
    client.post(f"/v1/actions/{action['id']}/reopen", json={"reason": "Fixture wore out"})
    deliver(client.application)
    assert receiver.requests == []
    deliveries = client.get(f"{url}/deliveries").get_json()["items"]
    assert [(item["event_type"], item["status"]) for item in deliveries] == [("action.closed", "disabled")]

    client.patch(url, json={"active": True})
    close_action(client, action["id"], occurrence=5)
    deliver(client.application)
    assert receiver.types() == ["action.closed"]
    assert client.get(url).get_json()["disabled_reason"] == ""


def test_subscriptions_and_deliveries_are_listed_page_by_page(client, receiver):
    for number in range(3):
        subscribe(client, receiver, events=["action.closed"], description=f"feed {number}")
    first = client.get("/v1/webhooks?limit=2").get_json()
    second = client.get(first["next"]).get_json()
    assert [item["description"] for item in first["items"] + second["items"]] == ["feed 0", "feed 1", "feed 2"]
    assert second["next"] is None

    _, mode, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed", "action.reopened"])
    close_action(client, action["id"], occurrence=6)
    client.post(f"/v1/actions/{action['id']}/reopen", json={"reason": "Fixture wore out"})
    url = f"/v1/webhooks/{subscription['id']}/deliveries"
    newest = client.get(f"{url}?limit=1").get_json()
    older = client.get(newest["next"]).get_json()
    assert [item["event_type"] for item in newest["items"] + older["items"]] == ["action.reopened", "action.closed"]
    assert client.get(f"{url}?status=pending").get_json()["items"][0]["status"] == "pending"
    assert client.get(f"{url}?status=sent").status_code == 422
    assert client.get("/v1/webhooks/999999/deliveries").status_code == 404


def test_a_delivery_shows_its_payload_and_every_attempt(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed"])
    close_action(client, action["id"], occurrence=6)
    receiver.answer((500, {"Content-Type": "text/plain"}))
    deliver(client.application)
    deliver(client.application, now=later(minutes=1))

    [delivery] = client.get(f"/v1/webhooks/{subscription['id']}/deliveries").get_json()["items"]

    assert delivery["payload"] == receiver.requests[0].payload
    assert delivery["payload"]["data"]["action_id"] == action["id"]
    assert delivery["webhook_id"] == receiver.requests[0].headers["webhook-id"]
    assert [(item["status_code"], item["response_excerpt"]) for item in delivery["attempts"]] == [
        (500, "received"),
        (200, "received"),
    ]
    assert delivery["status"] == "delivered" and delivery["delivered_at"] == delivery["attempts"][1]["attempted_at"]


def test_redeliver_sends_a_delivered_message_again_with_the_same_webhook_id(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed"])
    close_action(client, action["id"], occurrence=6)
    deliver(client.application)
    [delivery] = client.get(f"/v1/webhooks/{subscription['id']}/deliveries").get_json()["items"]

    redelivered = client.post(f"/v1/webhooks/deliveries/{delivery['id']}/redeliver")

    assert redelivered.status_code == 202
    assert redelivered.get_json()["status"] == "pending" and redelivered.get_json()["attempt_count"] == 0
    assert client.post(f"/v1/webhooks/deliveries/{delivery['id']}/redeliver").status_code == 409
    deliver(client.application)
    first, again = receiver.requests
    assert first.headers["webhook-id"] == again.headers["webhook-id"] and first.body == again.body
    assert again.verification_error is None
    [after] = client.get(f"/v1/webhooks/{subscription['id']}/deliveries").get_json()["items"]
    assert after["status"] == "delivered" and len(after["attempts"]) == 2 and after["attempt_count"] == 1


def test_redeliver_to_a_disabled_subscription_is_409_and_an_unknown_delivery_404(client, receiver):
    _, _, action = open_action(client)
    subscription = subscribe(client, receiver, events=["action.closed"])
    close_action(client, action["id"], occurrence=6)
    receiver.answer(410)
    deliver(client.application)
    [delivery] = client.get(f"/v1/webhooks/{subscription['id']}/deliveries").get_json()["items"]

    refused = client.post(f"/v1/webhooks/deliveries/{delivery['id']}/redeliver")

    assert refused.status_code == 409 and "activate it first" in refused.get_json()["detail"]
    assert client.post("/v1/webhooks/deliveries/999999/redeliver").status_code == 404
    client.patch(f"/v1/webhooks/{subscription['id']}", json={"active": True})
    assert client.post(f"/v1/webhooks/deliveries/{delivery['id']}/redeliver").status_code == 202
    deliver(client.application)
    assert len(receiver.requests) == 2 and receiver.requests[1].verification_error is None


@pytest.mark.parametrize("role", ["reader", "editor"])
def test_readers_and_editors_get_403_on_every_webhook_endpoint(app, make_token, client, receiver, role):
    subscription = subscribe(client, receiver, events=["action.closed"])
    other = authorised_client(app, make_token(role))
    calls = [
        ("GET", "/v1/webhooks", None),
        ("POST", "/v1/webhooks", {"url": receiver.url, "events": ["action.closed"]}),
        ("GET", f"/v1/webhooks/{subscription['id']}", None),
        ("PATCH", f"/v1/webhooks/{subscription['id']}", {"active": False}),
        ("GET", f"/v1/webhooks/{subscription['id']}/deliveries", None),
        ("POST", "/v1/webhooks/deliveries/1/redeliver", None),
    ]
    for method, url, body in calls:
        response = other.open(url, method=method, json=body, headers={"If-Match": None})
        assert response.status_code == 403, (method, url)
        assert response.get_json()["type"] == "urn:abate:problem:forbidden"
    assert [item["id"] for item in client.get("/v1/webhooks").get_json()["items"]] == [subscription["id"]]
    assert client.get(f"/v1/webhooks/{subscription['id']}").get_json()["active"] is True
