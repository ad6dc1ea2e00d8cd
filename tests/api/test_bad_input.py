"""Every error status the API promises answers with problem details and leaves the data as it was."""

import json
from typing import NamedTuple

import pytest
import requests

from conftest import (
    BUILTIN_1_5,
    BUILTIN_1_10,
    authorised_client,
    build_app,
    close_pool,
    make_mode,
    make_study,
    scale_id_named,
)

UNKNOWN_ID = 999_999
# Larger than any 64-bit integer column can hold.
ID_BEYOND_64_BITS = 10**20
# The largest page the list endpoints promise.
MAX_PAGE_SIZE = 500


def assert_problem(response, status, problem_type="about:blank"):
    """Check that response is RFC 9457 problem details for status and problem_type; return the body."""
    assert response.status_code == status, response.get_data(as_text=True)
    # RFC 9457 section 3: problem details travel as application/problem+json.
    assert response.mimetype == "application/problem+json"
    body = json.loads(response.get_data(as_text=True))
    # RFC 9457 sections 3.1.1-3.1.4: type, status equal to the HTTP status, a title, an optional detail string.
    assert body["type"] == problem_type
    assert body["status"] == status
    assert isinstance(body["title"], str) and body["title"]
    assert isinstance(body.get("detail", ""), str)
    # RFC 9457 section 3.1.5: instance names this occurrence; it is the request id the response echoes.
    assert body["instance"] == f"urn:abate:request:{response.headers['X-Request-Id']}"
    if status in (400, 422):
        assert body["errors"], "a 400 or 422 names what was wrong"
        for entry in body["errors"]:
            assert set(entry) == {"location", "field", "message"}
            assert isinstance(entry["field"], str) and entry["message"]
    return body


def error_fields(body):
    """The (location, field) pairs a problem's errors name."""
    return {(entry["location"], entry["field"]) for entry in body["errors"]}


class StudyRecord(NamedTuple):
    """What a rejected request must leave alone: the study and its ETag, its modes, its risk events."""

    etag: str
    study: dict
    modes: dict
    events: dict


def study_record(client, study_id):
    """Read the study's StudyRecord through the API."""
    study = client.get(f"/v1/studies/{study_id}")
    modes = client.get(f"/v1/studies/{study_id}/modes", query_string={"limit": MAX_PAGE_SIZE})
    events = client.get(f"/v1/studies/{study_id}/events", query_string={"limit": MAX_PAGE_SIZE})
    assert study.status_code == modes.status_code == events.status_code == 200
    return StudyRecord(study.headers["ETag"], study.get_json(), modes.get_json(), events.get_json())


def all_studies(client):
    """Every study, to show that a rejected POST created none."""
    return client.get("/v1/studies", query_string={"limit": MAX_PAGE_SIZE}).get_json()


def study_body(client, **overrides):
    """A valid POST /v1/studies body on the 1-10 scales."""
    return {
        "title": "Valve body casting",
        "kind": "process",
        "owner": {"name": "Rhea Example", "email": "rhea@example.com"},
        "scale_id": scale_id_named(client, BUILTIN_1_10),
        "timezone": "Europe/Berlin",
        **overrides,
    }


def mode_body(**overrides):
    """A valid POST /v1/studies/{id}/modes body."""
    return {"failure_mode": "Porosity in the wall", "severity": 4, "occurrence": 3, "detection": 2, **overrides}


def replacement_scale_body(client, scale_id, name):
    """A valid PUT /v1/scales/{id} body: the set's own levels under a new name."""
    current = client.get(f"/v1/scales/{scale_id}").get_json()
    return {"name": name, **{key: current[key] for key in ("description", "severity", "occurrence", "detection")}}


@pytest.fixture
def study(client):
    """A draft study on the 1-10 scales with one failure mode."""
    created = make_study(client)
    make_mode(client, created["id"])
    return created


@pytest.fixture
def mode(client, study):
    """The study's failure mode."""
    return client.get(f"/v1/studies/{study['id']}/modes").get_json()["items"][0]


@pytest.fixture
def compact_study(client):
    """A study on the built-in 1-5 scales (max RPN 125) with one failure mode."""
    created = make_study(client, scale_id=scale_id_named(client, BUILTIN_1_5))
    make_mode(client, created["id"], severity=3, occurrence=3, detection=3)
    return created


@pytest.fixture
def small_body_client(database_url, tmp_path):
    """A client of an app configured to accept request bodies of at most 1024 bytes."""
    from abate import db
    from abate.domain.tokens import create_token

    application = build_app(database_url, tmp_path, MAX_BODY_BYTES=1024)
    with db.database.connection_context():
        secret = create_token("small bodies", "admin")[1]
    yield authorised_client(application, secret)
    close_pool()


# 400 Bad Request


def test_malformed_json_body_is_400_and_creates_no_study(client):
    """A body cut off mid-object is refused before any field is looked at."""
    before = all_studies(client)
    response = client.post("/v1/studies", data='{"title": "Valve body casting",', content_type="application/json")
    body = assert_problem(response, 400)
    assert ("json", "") in error_fields(body)
    assert all_studies(client) == before


def test_body_that_is_not_utf8_is_400_and_creates_no_mode(client, study):
    """RFC 8259 section 8.1 requires UTF-8 JSON; a Latin-1 byte is not guessed at."""
    before = study_record(client, study["id"])
    latin1 = json.dumps(mode_body(failure_mode="Crack near the fl\xe4nge"), ensure_ascii=False).encode("latin-1")
    response = client.post(f"/v1/studies/{study['id']}/modes", data=latin1, content_type="application/json")
    body = assert_problem(response, 400)
    assert ("json", "") in error_fields(body)
    assert study_record(client, study["id"]) == before


# 404 Not Found


@pytest.mark.parametrize(
    "path", ["/v1/studies/{id}", "/v1/studies/{id}/modes", "/v1/studies/{id}/events"], ids=["study", "modes", "events"]
)
def test_reading_an_unknown_study_is_404(client, path):
    """Reads under a study that does not exist say which study is missing."""
    body = assert_problem(client.get(path.format(id=UNKNOWN_ID)), 404, "urn:abate:problem:not-found")
    assert str(UNKNOWN_ID) in body["detail"]


@pytest.mark.parametrize(
    "method, path, payload",
    [("post", "/v1/studies/{id}/modes", mode_body()), ("patch", "/v1/studies/{id}", {"title": "Renamed"})],
    ids=["add-mode", "patch-study"],
)
def test_writing_to_an_unknown_study_is_404(client, method, path, payload):
    """A write to a missing study is a 404 like a read, not a server error, and creates nothing."""
    before = all_studies(client)
    response = getattr(client, method)(path.format(id=UNKNOWN_ID), json=payload)
    assert_problem(response, 404, "urn:abate:problem:not-found")
    assert all_studies(client) == before


@pytest.mark.parametrize(
    "method, path, payload",
    [
        ("get", "/v1/modes/{id}", None),
        ("patch", "/v1/modes/{id}", {"item": "Housing"}),
        ("post", "/v1/modes/{id}/retire", {"reason": "Duplicate row"}),
    ],
    ids=["read", "patch", "retire"],
)
def test_unknown_mode_is_404(client, study, method, path, payload):
    """Reads and writes of a missing mode are 404 and touch no other mode."""
    before = study_record(client, study["id"])
    response = getattr(client, method)(path.format(id=UNKNOWN_ID), json=payload)
    body = assert_problem(response, 404, "urn:abate:problem:not-found")
    assert str(UNKNOWN_ID) in body["detail"]
    assert study_record(client, study["id"]) == before


def test_unknown_scale_set_is_404_to_read_and_to_replace(client):
    """PUT on a missing scale set does not create one under that id."""
    scales_before = client.get("/v1/scales").get_json()
    assert_problem(client.get(f"/v1/scales/{UNKNOWN_ID}"), 404, "urn:abate:problem:not-found")
    replacement = replacement_scale_body(client, scale_id_named(client, BUILTIN_1_5), "Plant 1-5")
    assert_problem(client.put(f"/v1/scales/{UNKNOWN_ID}", json=replacement), 404, "urn:abate:problem:not-found")
    assert client.get("/v1/scales").get_json() == scales_before


@pytest.mark.parametrize("path", ["/v1/nowhere", "/v1/studies/not-a-number", "/v2/studies"])
def test_unknown_route_is_404_about_blank(client, path):
    """No route matches: a plain HTTP problem whose title is the status phrase."""
    body = assert_problem(client.get(path), 404)
    # RFC 9457 section 4.2.1: with about:blank the title SHOULD be the HTTP status phrase.
    assert body["title"] == "Not Found"


@pytest.mark.parametrize("path", ["/v1/studies/{id}", "/v1/modes/{id}", "/v1/scales/{id}"])
def test_an_id_too_large_for_the_database_is_404(client, path):
    """An id no 64-bit column can hold names nothing; it is not a server error."""
    # The path converter accepts ids up to 2**63 - 1, so the route itself does not match.
    assert_problem(client.get(path.format(id=ID_BEYOND_64_BITS)), 404)


# 405 Method Not Allowed


@pytest.mark.parametrize(
    "method, path, allowed",
    [
        ("delete", "/v1/studies/{study}", {"GET", "HEAD", "OPTIONS", "PATCH"}),
        ("put", "/v1/studies", {"GET", "HEAD", "OPTIONS", "POST"}),
        ("delete", "/v1/modes/{mode}", {"GET", "HEAD", "OPTIONS", "PATCH"}),
        ("get", "/v1/modes/{mode}/retire", {"OPTIONS", "POST"}),
        ("delete", "/v1/scales/{scale}", {"GET", "HEAD", "OPTIONS", "PUT"}),
    ],
    ids=["delete-study", "put-studies", "delete-mode", "get-retire", "delete-scale"],
)
def test_unsupported_method_is_405_with_allow_header(client, study, mode, method, path, allowed):
    """Studies and modes are never deleted; the answer says which methods the resource has."""
    before = study_record(client, study["id"])
    target = path.format(study=study["id"], mode=mode["id"], scale=study["scale_id"])
    response = getattr(client, method)(target)
    body = assert_problem(response, 405)
    assert body["title"] == "Method Not Allowed"  # RFC 9457 section 4.2.1: the status phrase
    # RFC 9110 section 15.5.6: a 405 MUST carry Allow listing the target resource's methods.
    assert {part.strip() for part in response.headers["Allow"].split(",")} == allowed
    assert study_record(client, study["id"]) == before


# 409 Conflict


def test_rerating_a_retired_mode_is_409(client, study, mode):
    """A retired mode keeps its last ratings; re-rating it records nothing."""
    assert client.post(f"/v1/modes/{mode['id']}/retire", json={"reason": "Part dropped"}).status_code == 200
    before = study_record(client, study["id"])
    response = client.patch(f"/v1/modes/{mode['id']}", json={"occurrence": 1, "reason": "New supplier"})
    assert "retired" in assert_problem(response, 409, "urn:abate:problem:conflict")["detail"]
    assert study_record(client, study["id"]) == before


def test_retiring_a_retired_mode_is_409(client, study, mode):
    """A second retirement adds no second retirement event."""
    assert client.post(f"/v1/modes/{mode['id']}/retire", json={"reason": "Part dropped"}).status_code == 200
    before = study_record(client, study["id"])
    response = client.post(f"/v1/modes/{mode['id']}/retire", json={"reason": "Again"})
    assert_problem(response, 409, "urn:abate:problem:conflict")
    assert study_record(client, study["id"]) == before
    assert [event["kind"] for event in before.events["items"]] == ["created", "retired"]


def test_adding_or_changing_a_mode_of_an_archived_study_is_409(client, study, mode):
    """An archived study is a closed record: no new modes, no edits to its modes."""
    assert client.patch(f"/v1/studies/{study['id']}", json={"status": "archived"}).status_code == 200
    before = study_record(client, study["id"])
    added = client.post(f"/v1/studies/{study['id']}/modes", json=mode_body())
    assert "archived" in assert_problem(added, 409, "urn:abate:problem:conflict")["detail"]
    changed = client.patch(f"/v1/modes/{mode['id']}", json={"item": "Flange"})
    assert_problem(changed, 409, "urn:abate:problem:conflict")
    assert study_record(client, study["id"]) == before


def test_moving_an_active_study_back_to_draft_is_409_invalid_transition(client, study):
    """Once started a study cannot be reset to draft; its status and version stay."""
    assert client.patch(f"/v1/studies/{study['id']}", json={"status": "active"}).status_code == 200
    before = study_record(client, study["id"])
    response = client.patch(f"/v1/studies/{study['id']}", json={"status": "draft", "title": "Reset"})
    body = assert_problem(response, 409, "urn:abate:problem:invalid-transition")
    assert "active" in body["detail"] and "draft" in body["detail"]
    assert study_record(client, study["id"]) == before
    assert before.study["status"] == "active"


def test_replacing_a_builtin_scale_set_is_409_scale_in_use(client):
    """Built-in scales never change, even when no study uses them."""
    scale_id = scale_id_named(client, BUILTIN_1_5)
    before = client.get(f"/v1/scales/{scale_id}")
    response = client.put(f"/v1/scales/{scale_id}", json=replacement_scale_body(client, scale_id, "Renamed 1-5"))
    assert_problem(response, 409, "urn:abate:problem:scale-in-use")
    after = client.get(f"/v1/scales/{scale_id}")
    assert (after.get_json(), after.headers["ETag"]) == (before.get_json(), before.headers["ETag"])


def test_replacing_a_scale_set_a_study_uses_is_409_scale_in_use(client):
    """A company scale set becomes fixed once a study is rated on it."""
    compact = scale_id_named(client, BUILTIN_1_5)
    own = client.post("/v1/scales", json=replacement_scale_body(client, compact, "Plant 1-5"))
    assert own.status_code == 201, own.get_json()
    scale_id = own.get_json()["id"]
    make_study(client, scale_id=scale_id)
    before = client.get(f"/v1/scales/{scale_id}").get_json()
    assert before["in_use"] is True
    response = client.put(f"/v1/scales/{scale_id}", json=replacement_scale_body(client, scale_id, "Plant 1-5 v2"))
    assert_problem(response, 409, "urn:abate:problem:scale-in-use")
    assert client.get(f"/v1/scales/{scale_id}").get_json() == before


def test_changing_the_scale_set_of_a_study_with_modes_is_409(client, study):
    """Its modes were rated on the old scales; moving the study would reinterpret them."""
    before = study_record(client, study["id"])
    response = client.patch(f"/v1/studies/{study['id']}", json={"scale_id": scale_id_named(client, BUILTIN_1_5)})
    assert_problem(response, 409, "urn:abate:problem:conflict")
    assert study_record(client, study["id"]) == before


# 412 Precondition Failed


def test_patching_a_mode_with_a_stale_if_match_is_412_and_changes_nothing(client, study, mode):
    """A re-rating based on an old read is refused: ratings, version and risk events stay."""
    stale = client.get(f"/v1/modes/{mode['id']}").headers["ETag"]
    moved_on = client.patch(f"/v1/modes/{mode['id']}", json={"item": "Wall"}, headers={"If-Match": stale})
    assert moved_on.status_code == 200
    before = study_record(client, study["id"])
    response = client.patch(
        f"/v1/modes/{mode['id']}", json={"occurrence": 1, "reason": "New mould"}, headers={"If-Match": stale}
    )
    # RFC 9110 section 13.1.1 (If-Match false: the method is not performed) and 15.5.13 (412).
    assert_problem(response, 412, "urn:abate:problem:precondition-failed")
    assert study_record(client, study["id"]) == before
    current = client.get(f"/v1/modes/{mode['id']}").get_json()
    assert (current["version"], current["occurrence"]) == (mode["version"] + 1, mode["occurrence"])


def test_patching_a_study_with_a_stale_if_match_is_412_and_records_no_policy_event(client, study):
    """A policy change based on an old read is refused: no policy_changed event, version unchanged."""
    stale = client.get(f"/v1/studies/{study['id']}").headers["ETag"]
    renamed = client.patch(f"/v1/studies/{study['id']}", json={"title": "Renamed"}, headers={"If-Match": stale})
    assert renamed.status_code == 200
    before = study_record(client, study["id"])
    response = client.patch(f"/v1/studies/{study['id']}", json={"action_threshold": 80}, headers={"If-Match": stale})
    # RFC 9110 section 13.1.1 and 15.5.13.
    assert_problem(response, 412, "urn:abate:problem:precondition-failed")
    assert study_record(client, study["id"]) == before
    assert before.study["version"] == study["version"] + 1
    assert "policy_changed" not in {event["kind"] for event in before.events["items"]}


def test_retiring_a_mode_with_a_stale_if_match_is_412(client, study, mode):
    """The mode stays active and no retirement event is written."""
    stale = client.get(f"/v1/modes/{mode['id']}").headers["ETag"]
    assert client.patch(f"/v1/modes/{mode['id']}", json={"cause": "Gas"}).status_code == 200
    before = study_record(client, study["id"])
    response = client.post(f"/v1/modes/{mode['id']}/retire", json={"reason": "Merged"}, headers={"If-Match": stale})
    assert_problem(response, 412, "urn:abate:problem:precondition-failed")
    assert study_record(client, study["id"]) == before


def test_a_weak_etag_in_if_match_never_matches(client, study, mode):
    """RFC 9110 section 13.1.1: If-Match uses the strong comparison, so W/ of the current tag fails."""
    current = client.get(f"/v1/modes/{mode['id']}").headers["ETag"]
    before = study_record(client, study["id"])
    response = client.patch(f"/v1/modes/{mode['id']}", json={"item": "Wall"}, headers={"If-Match": f"W/{current}"})
    assert_problem(response, 412, "urn:abate:problem:precondition-failed")
    assert study_record(client, study["id"]) == before


@pytest.mark.parametrize(
    "path, payload",
    [("/v1/modes/{mode}", {"item": "Wall"}), ("/v1/studies/{study}", {"title": "Renamed"})],
    ids=["mode", "study"],
)
def test_patching_with_the_current_etag_succeeds(client, study, mode, path, payload):
    """The control for the 412 tests: the ETag just read lets the change through once."""
    target = path.format(study=study["id"], mode=mode["id"])
    read = client.get(target)
    response = client.patch(target, json=payload, headers={"If-Match": read.headers["ETag"]})
    assert response.status_code == 200, response.get_json()
    changed = response.get_json()
    assert {key: changed[key] for key in payload} == payload
    assert changed["version"] == read.get_json()["version"] + 1
    assert response.headers["ETag"] != read.headers["ETag"]
    assert client.get(target).get_json() == changed


# 413 Content Too Large


def padded_study_body(client, size):
    """A valid study body of exactly size bytes, padded in its scope."""
    unpadded = len(json.dumps(study_body(client, scope="")).encode())
    return json.dumps(study_body(client, scope="x" * (size - unpadded))).encode()


def test_body_over_the_configured_max_body_bytes_is_413_and_creates_nothing(small_body_client):
    """MAX_BODY_BYTES=1024: 1025 bytes are refused, while the same study in 1024 bytes is created."""
    client = small_body_client
    before = all_studies(client)
    too_large = client.post("/v1/studies", data=padded_study_body(client, 1025), content_type="application/json")
    # RFC 9110 section 15.5.14, 413 Content Too Large (from memory).
    assert_problem(too_large, 413)
    assert all_studies(client) == before
    at_limit = client.post("/v1/studies", data=padded_study_body(client, 1024), content_type="application/json")
    assert at_limit.status_code == 201, at_limit.get_json()
    assert len(all_studies(client)["items"]) == len(before["items"]) + 1


def test_chunked_body_over_the_default_mebibyte_is_413_over_real_http(live_server, client, auth_headers):
    """Without a Content-Length the limit still holds: waitress de-chunks, the app counts."""
    before = all_studies(client)
    payload = padded_study_body(client, 1_048_576 + 1)

    def chunks(size=64 * 1024):
        for start in range(0, len(payload), size):
            yield payload[start : start + size]

    with requests.Session() as session:
        response = session.post(
            f"{live_server}/v1/studies",
            data=chunks(),
            headers={"Content-Type": "application/json", **auth_headers},
            timeout=30,
        )
    assert response.request.headers["Transfer-Encoding"] == "chunked"
    assert response.status_code == 413
    assert response.headers["Content-Type"] == "application/problem+json"
    assert response.json()["type"] == "about:blank" and response.json()["status"] == 413
    assert all_studies(client) == before


# 415 Unsupported Media Type


@pytest.mark.parametrize(
    "data, content_type",
    [
        ("title=Valve+body&kind=process", "application/x-www-form-urlencoded"),
        ("title: Valve body", "text/plain"),
        (b'{"title": "Valve body"}', None),
    ],
    ids=["form", "text", "untyped"],
)
def test_body_that_is_not_json_is_415_and_creates_nothing(client, data, content_type):
    """RFC 9110 section 15.5.16, 415 (from memory): the body's media type is named in the detail."""
    before = all_studies(client)
    response = client.post("/v1/studies", data=data, content_type=content_type)
    body = assert_problem(response, 415)
    assert (content_type or "untyped") in body["detail"]
    assert all_studies(client) == before


def test_patch_with_a_text_body_is_415_and_changes_nothing(client, study):
    """The media type check guards changes as well as creation."""
    before = study_record(client, study["id"])
    response = client.patch(f"/v1/studies/{study['id']}", data='{"title": "Renamed"}', content_type="text/plain")
    assert_problem(response, 415)
    assert study_record(client, study["id"]) == before


# 422 Unprocessable Content


def test_rating_outside_the_studys_scale_is_422_rating_out_of_scale(client, compact_study):
    """Severity 6 is a valid rating in general but not on the Compact 1-5 scales; errors names the field."""
    before = study_record(client, compact_study["id"])
    added = client.post(f"/v1/studies/{compact_study['id']}/modes", json=mode_body(severity=6))
    body = assert_problem(added, 422, "urn:abate:problem:rating-out-of-scale")
    assert error_fields(body) == {("json", "severity")}
    mode_id = before.modes["items"][0]["id"]
    rerated = client.patch(f"/v1/modes/{mode_id}", json={"detection": 6, "reason": "Audit finding"})
    body = assert_problem(rerated, 422, "urn:abate:problem:rating-out-of-scale")
    assert error_fields(body) == {("json", "detection")}
    assert study_record(client, compact_study["id"]) == before


@pytest.mark.parametrize("dimension", ["severity", "occurrence", "detection"])
@pytest.mark.parametrize("value", [0, 11])
def test_rating_outside_1_to_10_is_422_by_the_schema(client, study, dimension, value):
    """No scale set goes below 1 or above 10, so the schema refuses these before the scale is consulted."""
    before = study_record(client, study["id"])
    response = client.post(f"/v1/studies/{study['id']}/modes", json=mode_body(**{dimension: value}))
    assert error_fields(assert_problem(response, 422)) == {("json", dimension)}
    assert study_record(client, study["id"]) == before


@pytest.mark.parametrize("field", ["colour", "rpn", "id"])
def test_unknown_or_read_only_body_field_is_422(client, study, mode, field):
    """A field the schema does not take (computed ones included) is named, and the valid part not applied."""
    before = study_record(client, study["id"])
    response = client.patch(f"/v1/modes/{mode['id']}", json={"item": "Wall", field: 7})
    assert error_fields(assert_problem(response, 422)) == {("json", field)}
    assert study_record(client, study["id"]) == before


@pytest.mark.parametrize(
    "value",
    [
        "high",
        True,
        None,
        [5],
        "6",
        6.9,
    ],
    ids=["word", "boolean", "null", "list", "numeric-string", "fraction"],
)
def test_rating_of_the_wrong_json_type_is_422(client, study, mode, value):
    """A rating is a JSON integer; anything else is refused, not coerced, and no re-rating is recorded."""
    before = study_record(client, study["id"])
    response = client.patch(f"/v1/modes/{mode['id']}", json={"severity": value, "reason": "Field data"})
    assert error_fields(assert_problem(response, 422)) == {("json", "severity")}
    assert study_record(client, study["id"]) == before


@pytest.mark.parametrize(
    "path, payload, missing",
    [
        ("/v1/studies/{study}/modes", {"severity": 4, "occurrence": 3, "detection": 2}, "failure_mode"),
        ("/v1/studies/{study}/modes", {"failure_mode": "Porosity", "severity": 4, "occurrence": 3}, "detection"),
        ("/v1/modes/{mode}/retire", {}, "reason"),
    ],
    ids=["mode-text", "mode-rating", "retire-reason"],
)
def test_missing_required_field_is_422(client, study, mode, path, payload, missing):
    """The missing field is named and nothing is added or retired."""
    before = study_record(client, study["id"])
    response = client.post(path.format(study=study["id"], mode=mode["id"]), json=payload)
    assert error_fields(assert_problem(response, 422)) == {("json", missing)}
    assert study_record(client, study["id"]) == before


def test_study_without_an_owner_email_is_422_naming_the_nested_field(client):
    """Nested fields are named by their dotted path."""
    before = all_studies(client)
    response = client.post("/v1/studies", json=study_body(client, owner={"name": "Rhea Example"}))
    assert error_fields(assert_problem(response, 422)) == {("json", "owner.email")}
    assert all_studies(client) == before


@pytest.mark.parametrize("reason", [None, "", "   "], ids=["absent", "empty", "blank"])
def test_rerating_without_a_reason_is_422(client, study, mode, reason):
    """Every rating change is explained; without a reason the ratings and the events stay."""
    before = study_record(client, study["id"])
    payload = {"occurrence": 2} if reason is None else {"occurrence": 2, "reason": reason}
    response = client.patch(f"/v1/modes/{mode['id']}", json=payload)
    body = assert_problem(response, 422, "urn:abate:problem:validation-failed")
    assert error_fields(body) == {("json", "reason")}
    assert study_record(client, study["id"]) == before


def test_unknown_time_zone_is_422_on_create_and_on_change(client, study):
    """Time zones are IANA names as zoneinfo knows them."""
    studies_before = all_studies(client)
    created = client.post("/v1/studies", json=study_body(client, timezone="Mars/Olympus_Mons"))
    body = assert_problem(created, 422, "urn:abate:problem:validation-failed")
    assert error_fields(body) == {("json", "timezone")}
    assert all_studies(client) == studies_before
    before = study_record(client, study["id"])
    changed = client.patch(f"/v1/studies/{study['id']}", json={"timezone": "Europe/Atlantis", "title": "Moved"})
    assert error_fields(assert_problem(changed, 422, "urn:abate:problem:validation-failed")) == {("json", "timezone")}
    assert study_record(client, study["id"]) == before


def test_action_threshold_beyond_the_scales_max_rpn_is_422(client, compact_study):
    """On 1-5 scales the largest RPN is 5 x 5 x 5 = 125 (arithmetic): 126 is refused, 125 accepted."""
    before = study_record(client, compact_study["id"])
    response = client.patch(f"/v1/studies/{compact_study['id']}", json={"action_threshold": 126})
    body = assert_problem(response, 422, "urn:abate:problem:validation-failed")
    assert error_fields(body) == {("json", "action_threshold")}
    assert study_record(client, compact_study["id"]) == before
    at_max = client.patch(f"/v1/studies/{compact_study['id']}", json={"action_threshold": 125})
    assert at_max.status_code == 200 and at_max.get_json()["action_threshold"] == 125
    events = client.get(f"/v1/studies/{compact_study['id']}/events").get_json()["items"]
    assert [event["kind"] for event in events] == ["created", "policy_changed"]


def test_new_study_with_action_threshold_beyond_max_rpn_is_422_and_not_created(client):
    """The policy is checked against the chosen scale set before the study is stored."""
    before = all_studies(client)
    compact = scale_id_named(client, BUILTIN_1_5)
    response = client.post("/v1/studies", json=study_body(client, scale_id=compact, action_threshold=126))
    assert error_fields(assert_problem(response, 422, "urn:abate:problem:validation-failed")) == {
        ("json", "action_threshold")
    }
    assert all_studies(client) == before


def test_new_study_on_an_unknown_scale_set_is_422_naming_scale_id(client):
    """A missing scale set in the body is a field error, not a missing resource."""
    before = all_studies(client)
    response = client.post("/v1/studies", json=study_body(client, scale_id=UNKNOWN_ID))
    assert error_fields(assert_problem(response, 422, "urn:abate:problem:validation-failed")) == {("json", "scale_id")}
    assert all_studies(client) == before


@pytest.mark.parametrize(
    "path",
    ["/v1/studies", "/v1/studies/{study}/modes", "/v1/studies/{study}/events"],
    ids=["studies", "modes", "events"],
)
def test_unknown_query_parameter_is_422(client, study, path):
    """A misspelt filter is refused rather than silently ignored (which would return the unfiltered list)."""
    response = client.get(path.format(study=study["id"]), query_string={"stauts": "active"})
    assert error_fields(assert_problem(response, 422)) == {("query", "stauts")}


@pytest.mark.parametrize(
    "path, cursor",
    [
        pytest.param("/v1/studies", "not base64!", id="not-base64"),
        pytest.param("/v1/studies", "e30", id="not-a-list"),  # base64 of {}
        pytest.param("/v1/studies", "WyJ4Il0", id="text-for-an-id"),  # base64 of ["x"]
        pytest.param("/v1/studies/{study}/modes", "WzFd", id="too-short"),  # [1]; the mode order has two keys
        pytest.param("/v1/studies", "WzFlOTk5XQ", id="infinite-number"),  # [1e999]: json.loads reads infinity
    ],
)
def test_cursor_not_handed_out_by_the_list_is_422(client, study, path, cursor):
    """Cursors are opaque; a forged or damaged one is named as the query's cursor field."""
    response = client.get(path.format(study=study["id"]), query_string={"cursor": cursor})
    body = assert_problem(response, 422, "urn:abate:problem:validation-failed")
    assert error_fields(body) == {("query", "cursor")}


@pytest.mark.parametrize("limit", ["0", str(MAX_PAGE_SIZE + 1), "ten"])
def test_limit_outside_1_to_500_is_422(client, study, limit):
    """Pages hold 1 to 500 items; 500 itself is accepted."""
    response = client.get("/v1/studies", query_string={"limit": limit})
    assert error_fields(assert_problem(response, 422)) == {("query", "limit")}
    assert client.get("/v1/studies", query_string={"limit": MAX_PAGE_SIZE}).status_code == 200


def test_invalid_owner_email_is_422_on_create_and_on_change(client, study):
    """The owner's e-mail must be an address; a change to it alone is checked too."""
    studies_before = all_studies(client)
    owner = {"name": "Rhea Example", "email": "rhea.example.com"}
    created = client.post("/v1/studies", json=study_body(client, owner=owner))
    assert error_fields(assert_problem(created, 422)) == {("json", "owner.email")}
    assert all_studies(client) == studies_before
    before = study_record(client, study["id"])
    changed = client.patch(f"/v1/studies/{study['id']}", json={"owner": {"email": "rhea@"}})
    assert error_fields(assert_problem(changed, 422)) == {("json", "owner.email")}
    assert study_record(client, study["id"]) == before


@pytest.mark.parametrize(
    ("method", "path", "body"),
    [
        ("get", "/v1/studies?tag=%00", None),
        ("get", "/v1/actions/by-ref/tickets/a%00b", None),
        ("post", "/v1/tokens", {"name": "a\u0000", "role": "reader"}),
        ("post", "/v1/tokens", {"name": "a\ud800", "role": "reader"}),
    ],
    ids=["nul-in-query", "nul-in-path", "nul-in-json", "lone-surrogate-in-json"],
)
def test_text_no_database_stores_alike_is_422_and_stores_nothing(client, method, path, body):
    """NUL (PostgreSQL refuses it) and unpaired surrogates (not UTF-8) are refused on every database."""
    before = client.get("/v1/tokens").get_json()["items"]
    body_text = None if body is None else json.dumps(body)  # json.dumps escapes the surrogate as \\ud800
    response = getattr(client, method)(path, data=body_text, content_type="application/json" if body else None)
    problem = assert_problem(response, 422, "urn:abate:problem:validation-failed")
    assert problem["errors"][0]["message"] == "NUL or an unpaired surrogate"
    assert client.get("/v1/tokens").get_json()["items"] == before


@pytest.mark.parametrize(
    "query",
    ["?from=0001-01-01", "?from=9999-12-01&to=9999-12-31&interval=month", "?to=9001-01-01"],
)
def test_history_dates_outside_the_calendar_the_service_reasons_about_are_422(client, study, query):
    assert_problem(client.get(f"/v1/studies/{study['id']}/history{query}"), 422)


def test_an_as_of_or_due_date_at_the_end_of_the_calendar_is_422(client, study, mode):
    assert_problem(client.get(f"/v1/studies/{study['id']}?as_of=9999-12-31"), 422)
    response = client.post(
        f"/v1/modes/{mode['id']}/actions",
        json={
            "title": "t",
            "kind": "prevention",
            "owner": {"name": "o", "email": "o@example.com"},
            "due_date": "9999-12-31",
        },
    )
    assert_problem(response, 422)
    assert client.get(f"/v1/studies/{study['id']}/history").status_code == 200
