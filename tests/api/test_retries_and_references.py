"""Safe retries (Idempotency-Key, If-Match) and external references, as integrations use them."""

import threading

import requests

from conftest import authorised_client, make_mode, make_study

ACTION = {
    "title": "Fixture",
    "kind": "prevention",
    "owner": {"name": "O", "email": "o@example.com"},
    "due_date": "2030-01-01",
}


def _events(client, study_id):
    return client.get(f"/v1/studies/{study_id}/events").get_json()["items"]


def test_a_patch_without_if_match_is_428_and_changes_nothing(client):
    # RFC 6585 section 3: 428 Precondition Required.
    study = make_study(client)
    mode = make_mode(client, study["id"])
    for path, body in ((f"/v1/studies/{study['id']}", {"title": "x"}), (f"/v1/modes/{mode['id']}", {"cause": "x"})):
        response = client.patch(path, json=body, headers={"If-Match": None})
        assert response.status_code == 428, path
        assert response.get_json()["type"] == "urn:abate:problem:precondition-required"
    assert client.get(f"/v1/studies/{study['id']}").get_json()["title"] == "Test study"
    assert client.get(f"/v1/modes/{mode['id']}").get_json()["cause"] == ""
    # An unknown resource stays a 404, whatever the headers.
    assert client.patch("/v1/modes/999999", json={"cause": "x"}, headers={"If-Match": None}).status_code == 404


def test_a_repeated_post_with_the_same_key_returns_the_stored_response_once_created(client):
    # draft-ietf-httpapi-idempotency-key-header: a replay returns the stored result.
    study = make_study(client)
    body = {"failure_mode": "Crack", "severity": 7, "occurrence": 8, "detection": 5}
    headers = {"Idempotency-Key": "bridge-42"}
    first = client.post(f"/v1/studies/{study['id']}/modes", json=body, headers=headers)
    again = client.post(f"/v1/studies/{study['id']}/modes", json=body, headers=headers)
    assert first.status_code == again.status_code == 201
    assert again.get_json() == first.get_json()
    assert again.headers["Location"] == first.headers["Location"] and again.headers["Idempotent-Replayed"] == "true"
    assert len(client.get(f"/v1/studies/{study['id']}/modes").get_json()["items"]) == 1
    assert [event["kind"] for event in _events(client, study["id"])] == ["created"]


def test_the_same_key_with_another_body_is_422(client):
    study = make_study(client)
    path = f"/v1/studies/{study['id']}/modes"
    client.post(
        path,
        json={"failure_mode": "A", "severity": 2, "occurrence": 2, "detection": 2},
        headers={"Idempotency-Key": "k"},
    )
    other = client.post(
        path,
        json={"failure_mode": "B", "severity": 2, "occurrence": 2, "detection": 2},
        headers={"Idempotency-Key": "k"},
    )
    assert other.status_code == 422
    assert other.get_json()["errors"][0]["field"] == "Idempotency-Key"
    assert [mode["failure_mode"] for mode in client.get(f"{path}").get_json()["items"]] == ["A"]


def test_a_failed_request_stores_nothing_and_frees_its_key(client):
    study = make_study(client)
    path = f"/v1/studies/{study['id']}/modes"
    bad = client.post(
        path,
        json={"failure_mode": "A", "severity": 11, "occurrence": 2, "detection": 2},
        headers={"Idempotency-Key": "k2"},
    )
    assert bad.status_code == 422
    action_close = client.post("/v1/actions/999999/close", json={"evidence": "x"}, headers={"Idempotency-Key": "k3"})
    assert action_close.status_code == 404
    good = client.post(
        path,
        json={"failure_mode": "A", "severity": 2, "occurrence": 2, "detection": 2},
        headers={"Idempotency-Key": "k2"},
    )
    assert good.status_code == 201 and "Idempotent-Replayed" not in good.headers


def test_keys_are_scoped_per_token(app, client, make_token):
    study = make_study(client)
    path = f"/v1/studies/{study['id']}/modes"
    body = {"failure_mode": "A", "severity": 2, "occurrence": 2, "detection": 2}
    other = authorised_client(app, make_token("editor"))
    assert client.post(path, json=body, headers={"Idempotency-Key": "shared"}).status_code == 201
    second = other.post(path, json=body, headers={"Idempotency-Key": "shared"})
    assert second.status_code == 201 and "Idempotent-Replayed" not in second.headers
    assert len(client.get(path).get_json()["items"]) == 2


def test_concurrent_repeats_of_one_key_create_one_mode(client, live_server, auth_headers):
    # While the first is running a repeat is 409 (the draft); after it, a repeat is a replay.
    study = make_study(client)
    url = f"{live_server}/v1/studies/{study['id']}/modes"
    body = {"failure_mode": "Raced", "severity": 3, "occurrence": 3, "detection": 3}
    barrier, statuses = threading.Barrier(6), []

    def send():
        barrier.wait()
        answer = requests.post(url, json=body, headers={**auth_headers, "Idempotency-Key": "race-1"}, timeout=30)
        statuses.append(answer.status_code)

    threads = [threading.Thread(target=send) for _ in range(6)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert set(statuses) <= {201, 409} and 201 in statuses
    assert len(client.get(f"/v1/studies/{study['id']}/modes").get_json()["items"]) == 1
    replay = requests.post(url, json=body, headers={**auth_headers, "Idempotency-Key": "race-1"}, timeout=30)
    assert replay.status_code == 201 and replay.headers["Idempotent-Replayed"] == "true"


def test_external_references_are_unique_per_system_for_studies_and_modes(client):
    study = make_study(client, external_ref={"system": "plm", "key": "FMEA-7"})
    assert study["external_ref"] == {"system": "plm", "key": "FMEA-7"}
    clash = client.post(
        "/v1/studies",
        json={
            **{k: study[k] for k in ("title", "kind", "owner", "scale_id", "timezone")},
            "external_ref": {"system": "plm", "key": "FMEA-7"},
        },
    )
    assert clash.status_code == 409
    assert make_study(client, external_ref={"system": "erp", "key": "FMEA-7"})["external_ref"]["system"] == "erp"
    found = client.get("/v1/studies?external_system=plm&external_key=FMEA-7").get_json()["items"]
    assert [item["id"] for item in found] == [study["id"]]
    mode = make_mode(client, study["id"], external_ref={"system": "plm", "key": "ROW-1"})
    assert mode["external_ref"]["key"] == "ROW-1"
    second = client.post(
        f"/v1/studies/{study['id']}/modes",
        json={
            "failure_mode": "y",
            "severity": 2,
            "occurrence": 2,
            "detection": 2,
            "external_ref": {"system": "plm", "key": "ROW-1"},
        },
    )
    assert second.status_code == 409


def test_a_reference_with_a_slash_is_422_because_no_by_ref_path_could_reach_it(client):
    study = make_study(client)
    mode = make_mode(client, study["id"])
    body = {
        "title": "Check the seal",
        "kind": "detection",
        "owner": {"name": "Ida Brandt", "email": "ida.brandt@example.com"},
        "due_date": "2030-01-15",
    }
    for ref in ({"system": "tickets", "key": "PROJ/42"}, {"system": "a/b", "key": "42"}):
        refused = client.post(f"/v1/modes/{mode['id']}/actions", json={**body, "external_ref": ref})
        assert refused.status_code == 422
        field = "key" if "/" in ref["key"] else "system"
        assert any(error["field"].endswith(field) for error in refused.get_json()["errors"])
    assert client.get(f"/v1/actions?mode_id={mode['id']}").get_json()["items"] == []


def test_a_ticketing_system_creates_updates_and_closes_an_action_by_its_key(client):
    study = make_study(client)
    mode = make_mode(client, study["id"], 7, 8, 5)
    path = "/v1/actions/by-ref/tickets/TCK-9"
    missing = client.put(path, json={"title": "No mode named"})
    assert missing.status_code == 422 and {e["field"] for e in missing.get_json()["errors"]} >= {"mode_id"}
    created = client.put(path, json={**ACTION, "mode_id": mode["id"], "target": {"occurrence": 4}})
    assert created.status_code == 201
    action = created.get_json()
    assert action["external_ref"] == {"system": "tickets", "key": "TCK-9"} and action["mode_id"] == mode["id"]
    updated = client.put(path, json={"due_date": "2030-02-01", "status": "in_progress"})
    assert updated.status_code == 200
    assert (updated.get_json()["id"], updated.get_json()["due_date_changes"]) == (action["id"], 1)
    found = client.get("/v1/actions?external_system=tickets&external_key=TCK-9").get_json()["items"]
    assert [item["id"] for item in found] == [action["id"]]
    closed = client.post(f"{path}/close", json={"result": {"occurrence": 4}, "evidence": "ticket TCK-9 resolved"})
    assert closed.status_code == 200 and closed.get_json()["status"] == "closed"
    assert client.get(f"/v1/modes/{mode['id']}").get_json()["rpn"] == 7 * 4 * 5
    assert client.post(f"{path}/close", json={"evidence": "again"}).status_code == 409
    assert client.get("/v1/actions/by-ref/tickets/NOPE").status_code == 404
