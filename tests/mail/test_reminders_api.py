"""The HTTP contract of /v1/reminders and /v1/owners/{email}/preferences."""

import datetime
import zoneinfo

from conftest import authorised_client

KAI, LENA = "kai.berg@example.com", "lena.vogt@example.com"
MORNING = datetime.datetime(2030, 3, 5, 7, 0)


def _yesterday_in_berlin():
    """Yesterday in the studies' zone, from the stdlib zoneinfo (IANA time zone database)."""
    return datetime.datetime.now(zoneinfo.ZoneInfo("Europe/Berlin")).date() - datetime.timedelta(days=1)


def _items(client, **query):
    response = client.get("/v1/reminders", query_string=query)
    assert response.status_code == 200, response.get_json()
    return response.get_json()


def test_the_outbox_list_filters_by_status_and_pages_by_cursor(open_action, run_at, smtp_server, client):
    first = open_action(datetime.date(2030, 3, 1), KAI)
    open_action(datetime.date(2030, 3, 1), LENA, mode={"id": first["mode_id"]})
    run_at(MORNING)
    smtp_server.stop()
    run_at(MORNING + datetime.timedelta(days=1))

    sent = _items(client, status="sent")["items"]
    pending = _items(client, status="pending")["items"]
    assert [(item["recipient"], item["day"], item["status"]) for item in sent] == [
        (KAI, "2030-03-05", "sent"),
        (LENA, "2030-03-05", "sent"),
    ]
    assert [(item["recipient"], item["day"], item["status"]) for item in pending] == [
        (KAI, "2030-03-06", "pending"),
        (LENA, "2030-03-06", "pending"),
    ]
    assert sent[0]["dedup_key"] == f"digest:{KAI}:2030-03-05"
    assert (sent[0]["overdue"], sent[0]["due_soon"], sent[0]["escalated"]) == (1, 0, 0)
    assert sent[0]["sent_at"] == "2030-03-05T07:00:00Z" and sent[0]["next_attempt_at"] is None
    assert _items(client, status="failed")["items"] == []

    page = _items(client, limit=3)
    assert len(page["items"]) == 3 and page["next"]
    rest = client.get(page["next"]).get_json()
    assert rest["next"] is None
    assert [item["id"] for item in page["items"] + rest["items"]] == sorted(item["id"] for item in sent + pending)


def test_the_outbox_list_refuses_an_unknown_status_or_parameter(client):
    for query in ({"status": "lost"}, {"recipient": KAI}):
        response = client.get("/v1/reminders", query_string=query)
        assert response.status_code == 422
        assert response.get_json()["errors"][0]["field"] == next(iter(query))


def test_a_dry_run_reports_what_would_be_sent_and_changes_nothing(open_action, smtp_server, client, mail_app):
    action = open_action(_yesterday_in_berlin(), KAI)

    dry = client.post("/v1/reminders/run", query_string={"dry_run": "true"})
    assert dry.status_code == 200, dry.get_json()
    report = dry.get_json()
    assert report["dry_run"] is True and report["skipped"] is None
    assert [(item["recipient"], item["overdue"], "id" in item) for item in report["recorded"]] == [(KAI, 1, False)]
    assert [item["recipient"] for item in report["sent"]] == [KAI]
    assert smtp_server.received == [] and _items(client)["items"] == []

    real = client.post("/v1/reminders/run").get_json()
    assert real["dry_run"] is False and [item["recipient"] for item in real["sent"]] == [KAI]
    [message] = smtp_server.messages_to(KAI)
    assert f"https://abate.example.com/v1/actions/{action['id']}" in message.get_body(("plain",)).get_content()
    again = client.post("/v1/reminders/run").get_json()
    assert (again["recorded"], again["sent"]) == ([], [])
    assert client.post("/v1/reminders/run", query_string={"dry_run": "true"}).get_json()["sent"] == []
    assert len(smtp_server.received) == 1


def test_running_reminders_needs_an_admin(open_action, smtp_server, client, app, make_token):
    open_action(_yesterday_in_berlin(), KAI)
    editor = authorised_client(app, make_token("editor"))
    response = editor.post("/v1/reminders/run")
    assert response.status_code == 403
    assert smtp_server.received == [] and _items(client)["items"] == []
    assert editor.get("/v1/reminders").status_code == 200


def test_preferences_default_to_every_notice_and_a_put_opts_out_of_due_soon_only(client):
    fresh = client.get(f"/v1/owners/{KAI}/preferences")
    assert fresh.status_code == 200 and fresh.headers["ETag"] == '"0"'
    assert fresh.get_json() == {
        "email": KAI,
        "due_soon_notices": True,
        "overdue_notices": True,
        "version": 0,
        "updated_at": None,
    }

    changed = client.put("/v1/owners/Kai.Berg@Example.com/preferences", json={"due_soon_notices": False})
    assert changed.status_code == 200 and changed.headers["ETag"] == '"1"'
    body = client.get(f"/v1/owners/{KAI}/preferences").get_json()
    assert (body["email"], body["due_soon_notices"], body["overdue_notices"], body["version"]) == (
        KAI,
        False,
        True,
        1,
    )
    back = client.put(f"/v1/owners/{KAI}/preferences", json={"due_soon_notices": True}, headers={"If-Match": '"1"'})
    assert back.status_code == 200 and back.get_json()["version"] == 2


def test_overdue_notices_cannot_be_turned_off(client):
    response = client.put(f"/v1/owners/{KAI}/preferences", json={"due_soon_notices": True, "overdue_notices": False})
    assert response.status_code == 422
    assert [error["field"] for error in response.get_json()["errors"]] == ["overdue_notices"]
    assert client.get(f"/v1/owners/{KAI}/preferences").get_json()["version"] == 0


def test_a_stale_if_match_on_preferences_is_412_and_changes_nothing(client):
    client.put(f"/v1/owners/{KAI}/preferences", json={"due_soon_notices": False})
    response = client.put(f"/v1/owners/{KAI}/preferences", json={"due_soon_notices": True}, headers={"If-Match": '"0"'})
    assert response.status_code == 412
    assert response.get_json()["type"] == "urn:abate:problem:precondition-failed"
    assert client.get(f"/v1/owners/{KAI}/preferences").get_json()["due_soon_notices"] is False


def test_preferences_of_something_that_is_not_an_address_are_422(client):
    for path in ("/v1/owners/nobody/preferences", "/v1/owners/a@b@example.com/preferences"):
        response = client.put(path, json={"due_soon_notices": False})
        assert response.status_code == 422, path
        assert response.get_json()["errors"] == [
            {"location": "path", "field": "email", "message": f"{path.split('/')[3]!r} is not an e-mail address"}
        ]
    assert client.put(f"/v1/owners/{KAI}/preferences", json={}).status_code == 422
