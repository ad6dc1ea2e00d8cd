"""Access control: every /v1 endpoint but the public ones needs a bearer token of a sufficient role."""

import re

import pytest

from abate.api.auth import ADMIN_ONLY, ADMIN_WRITES, PUBLIC_ENDPOINTS, SAFE_METHODS
from conftest import authorised_client, make_mode, make_study

WRITE_BODY = {"title": "x"}


def _protected_routes(app):
    """(method, url, blueprint) for every method of every /v1 route, ids filled in as 1."""
    routes = []
    for rule in app.url_map.iter_rules():
        if not rule.rule.startswith("/v1") or rule.endpoint in PUBLIC_ENDPOINTS:
            continue
        url = re.sub(r"<(?:\w+:)?(\w+)>", "1", rule.rule)
        blueprint = rule.endpoint.split(".", 1)[0]
        routes += [(method, url, blueprint) for method in sorted(rule.methods - {"HEAD", "OPTIONS"})]
    return routes


def _send(client, method, url):
    return client.open(url, method=method, json=None if method in SAFE_METHODS else WRITE_BODY)


def test_every_v1_endpoint_refuses_a_request_without_a_token(app, anonymous_client):
    # Generated from the URL map, so a new endpoint cannot slip through unguarded.
    routes = _protected_routes(app)
    assert len(routes) > 20
    for method, url, _ in routes:
        response = _send(anonymous_client, method, url)
        assert response.status_code == 401, (method, url)
        assert response.mimetype == "application/problem+json"
        # RFC 6750 section 3: a 401 names the Bearer scheme in WWW-Authenticate.
        assert response.headers["WWW-Authenticate"] == 'Bearer realm="abate"'


def test_an_unknown_or_malformed_token_is_401(app):
    for header in ("Bearer abt_not-a-token", "Basic dXNlcjpwYXNz", "Bearer", "abt_nothing"):
        client = app.test_client()
        client.environ_base["HTTP_AUTHORIZATION"] = header
        assert client.get("/v1/studies").status_code == 401, header


def test_probes_and_the_openapi_document_need_no_token(anonymous_client):
    for path in ("/livez", "/readyz", "/v1/openapi.json"):
        assert anonymous_client.get(path).status_code == 200, path


def test_a_reader_may_read_everything_but_tokens_and_write_nothing(app, make_token, client):
    study = make_study(client)
    make_mode(client, study["id"])
    reader = authorised_client(app, make_token("reader"))
    assert reader.get(f"/v1/studies/{study['id']}").status_code == 200
    assert reader.get(f"/v1/studies/{study['id']}/history").status_code == 200
    for method, url, blueprint in _protected_routes(app):
        if method in SAFE_METHODS and blueprint not in ADMIN_ONLY:
            continue
        response = _send(reader, method, url)
        assert response.status_code == 403, (method, url)
        assert response.get_json()["type"] == "urn:abate:problem:forbidden"
    assert client.get(f"/v1/studies/{study['id']}").get_json()["title"] == "Test study"


def test_an_editor_changes_studies_modes_and_actions_but_not_scales_or_tokens(app, make_token, client):
    editor = authorised_client(app, make_token("editor", name="ticket bridge"))
    study = make_study(editor)
    mode = make_mode(editor, study["id"], 7, 8, 5)
    action = editor.post(
        f"/v1/modes/{mode['id']}/actions",
        json={
            "title": "Fixture",
            "kind": "prevention",
            "owner": {"name": "O", "email": "o@example.com"},
            "due_date": "2030-01-01",
        },
    )
    assert action.status_code == 201
    for method, url, blueprint in _protected_routes(app):
        if blueprint in ADMIN_ONLY or (blueprint in ADMIN_WRITES and method not in SAFE_METHODS):
            assert _send(editor, method, url).status_code == 403, (method, url)


def test_only_an_admin_may_back_date_a_change(app, make_token, client):
    study = make_study(client)
    editor = authorised_client(app, make_token("editor"))
    body = {
        "failure_mode": "Late entry",
        "severity": 2,
        "occurrence": 2,
        "detection": 2,
        "effective_at": "2026-01-01T00:00:00Z",
    }
    refused = editor.post(f"/v1/studies/{study['id']}/modes", json=body)
    assert refused.status_code == 403
    assert client.get(f"/v1/studies/{study['id']}/events").get_json()["items"] == []
    assert client.post(f"/v1/studies/{study['id']}/modes", json=body).status_code == 201


def test_each_write_records_its_token_in_the_risk_events(app, make_token, client):
    editor = authorised_client(app, make_token("editor", name="maintenance bridge"))
    study = make_study(client)
    mode = make_mode(editor, study["id"])
    editor.patch(f"/v1/modes/{mode['id']}", json={"occurrence": 2, "reason": "fix"})
    actors = [event["actor"] for event in client.get(f"/v1/studies/{study['id']}/events").get_json()["items"]]
    assert len(actors) == 2 and all(actor.startswith("maintenance bridge (token ") for actor in actors)


def test_tokens_are_created_once_listed_without_secrets_and_revocable(app, client):
    created = client.post("/v1/tokens", json={"name": "dashboard", "role": "reader"})
    assert created.status_code == 201
    body = created.get_json()
    secret = body["token"]
    assert secret.startswith("abt_") and body["role"] == "reader" and body["last_used_at"] is None
    listed = client.get("/v1/tokens").get_json()["items"]
    assert all("token" not in item for item in listed)
    assert secret not in created.headers.get("Location", "") and secret not in str(listed)

    dashboard = authorised_client(app, secret)
    assert dashboard.get("/v1/studies").status_code == 200
    assert client.get(f"/v1/tokens/{body['id']}").get_json()["last_used_at"] is not None

    revoked = client.post(f"/v1/tokens/{body['id']}/revoke")
    assert revoked.status_code == 200 and revoked.get_json()["revoked_at"]
    assert dashboard.get("/v1/studies").status_code == 401
    assert client.post(f"/v1/tokens/{body['id']}/revoke").status_code == 409


@pytest.mark.parametrize("role", ["owner", ""])
def test_a_token_with_an_unknown_role_is_422(client, role):
    assert client.post("/v1/tokens", json={"name": "x", "role": role}).status_code == 422
