"""The Python client against a real server on loopback: reads, lazy pages, If-Match, errors, transport."""

import socket

import pytest
import requests

from abate_client import (
    AbateError,
    Client,
    Conflict,
    Mode,
    NotFound,
    PreconditionFailed,
    Ratings,
    TransportError,
    Unauthorized,
    ValidationFailed,
)
from client.conftest import new_mode, new_study
from conftest import BUILTIN_1_5, BUILTIN_1_10


@pytest.fixture
def recording_session():
    """A real requests session that keeps every request it sent, as it went on the wire."""
    with requests.Session() as session:
        session.sent = []
        session.hooks["response"].append(lambda response, **kwargs: session.sent.append(response.request))
        yield session


def test_created_study_and_mode_read_back_with_their_scores_and_etags(api):
    study = new_study(api, tags=["stamping"])
    assert study.etag and study.status == "draft" and study.tags == ["stamping"]
    assert study.risk.total_rpn == 0 and "does not certify" in study.risk.caution
    assert study.created_at.utcoffset().total_seconds() == 0

    mode = new_mode(api, study, 7, 8, 5, item="Bracket")
    # RPN = S x O x D (IEC 60812:2018); 7 x 8 x 5 = 280 is the worked example of LPU DMGT524, unit 12.
    assert mode.rpn == 280 and mode.initial == Ratings(severity=7, occurrence=8, detection=5, rpn=280)
    assert mode.criticality == 56 and mode.status == "active" and mode.retired_at is None
    assert api.modes.get(mode.id) == mode

    read = api.studies.get(study.id)
    assert read.risk.total_rpn == 280 and read.risk.mode_count == 1
    assert [entry["mode_id"] for entry in read.risk.pareto] == [mode.id]
    assert read.etag != study.etag and read.risk_revision == 1


def test_mode_list_is_in_pareto_order_highest_rpn_first(api):
    study = new_study(api)
    # (10,2,5) and (1,10,10) both give 100 (LPU DMGT524, unit 12); (9,2,2) = 36 ranks below (5,5,5) = 125 [C].
    created = [new_mode(api, study, *ratings) for ratings in [(9, 2, 2), (10, 2, 5), (5, 5, 5), (1, 10, 10), (7, 8, 5)]]
    listed = list(api.modes.list(study.id))
    assert [mode.rpn for mode in listed] == [280, 125, 100, 100, 36]
    assert [mode.id for mode in listed if mode.rpn == 100] == [created[1].id, created[3].id]
    assert [mode.id for mode in listed] == [entry["mode_id"] for entry in api.studies.get(study.id).risk.pareto]
    assert [mode.rpn for mode in api.modes.list(study.id, sort="rpn")] == [36, 100, 100, 125, 280]
    assert [mode.rpn for mode in api.modes.list(study.id, min_rpn=100, sort="rpn")] == [100, 100, 125, 280]
    # Severity 9-10 on a 1-10 scale calls for action whatever the RPN (common practice, no source).
    assert listed[-1].needs_action and listed[-1].needs_action_reasons == ["severity_at_or_above_threshold"]
    assert [mode.rpn for mode in api.modes.list(study.id, needs_action=False)] == []


def test_mode_list_fetches_each_page_only_when_iteration_reaches_it(live_server, admin_token, recording_session):
    with Client(live_server, token=admin_token, session=recording_session) as api:
        study = new_study(api)
        for severity in range(1, 8):
            new_mode(api, study, severity, 4, 3)
        sent = recording_session.sent
        before = len(sent)

        pages = api.modes.list(study.id, page_size=3)
        assert len(sent) == before
        first_page = [next(pages) for _ in range(3)]
        assert len(sent) == before + 1
        rest = list(pages)
        assert len(sent) == before + 3

        modes = first_page + rest
        assert [mode.severity for mode in modes] == [7, 6, 5, 4, 3, 2, 1]
        assert modes == list(api.modes.list(study.id))
    assert "limit=3" in sent[before].url and "cursor=" not in sent[before].url
    assert all("limit=3" in request.url and "cursor=" in request.url for request in sent[before + 1 : before + 3])


def test_study_filters_carry_over_to_every_page(api):
    for title in ("One", "Two", "Three"):
        new_study(api, title=title, tags=["line-a"])
    new_study(api, title="Other line", tags=["line-b"])
    new_study(api, title="Design", kind="design", owner={"name": "D. Owner", "email": "Design@Example.com"})

    assert [study.title for study in api.studies.list(tag="line-a", page_size=2)] == ["One", "Two", "Three"]
    assert [study.title for study in api.studies.list(owner_email="design@example.com", page_size=1)] == ["Design"]
    assert [study.title for study in api.studies.list(kind="design")] == ["Design"]
    assert all(study.etag is None and study.risk.pareto == [] for study in api.studies.list())


def test_study_update_sends_if_match_and_a_stale_copy_is_precondition_failed(api):
    study = new_study(api)
    changed = api.studies.update(study, title="Press line 2", status="active")
    assert changed.title == "Press line 2" and changed.status == "active"
    assert changed.version == study.version + 1 and changed.etag != study.etag

    # If-Match with an outdated ETag is answered 412 and changes nothing (RFC 9110, 13.1.1 and 15.5.13).
    with pytest.raises(PreconditionFailed) as caught:
        api.studies.update(study, title="Lost update")
    assert caught.value.status == 412 and caught.value.problem["type"] == "urn:abate:problem:precondition-failed"
    assert "ETag" in caught.value.detail
    assert api.studies.get(study.id).title == "Press line 2"


def test_a_listed_study_has_no_etag_so_update_refuses_it(api):
    new_study(api, title="Listed")
    listed = next(iter(api.studies.list()))
    with pytest.raises(ValueError, match="get"):
        api.studies.update(listed, title="Blind write")
    assert api.studies.get(listed.id).title == "Listed"


def test_rerating_and_retiring_a_mode_need_its_current_etag_and_are_recorded(api):
    study = new_study(api)
    mode = new_mode(api, study, 7, 8, 5)
    # Worked reduction S7 O8 D5 = 280 to S7 O6 D4 = 168, i.e. 40 % (LPU DMGT524, unit 12).
    rerated = api.modes.update(mode, reason="error-proofing fixture added", occurrence=6, detection=4)
    assert rerated.rpn == 168 and rerated.initial.rpn == 280 and rerated.version == mode.version + 1
    risk = api.studies.get(study.id).risk
    assert (risk.total_rpn, risk.initial_total_rpn) == (168, 280)
    assert (risk.initial_total_rpn - risk.total_rpn) / risk.initial_total_rpn == pytest.approx(0.40)

    with pytest.raises(PreconditionFailed):
        api.modes.retire(mode, "duplicate row")
    assert api.modes.get(mode.id).status == "active"

    retired = api.modes.retire(rerated, "merged with another row")
    assert retired.status == "retired" and retired.retired_at is not None
    with pytest.raises(Conflict) as caught:
        api.modes.retire(retired, "again")
    assert caught.value.status == 409 and "retired" in caught.value.detail

    events = list(api.events.list(study.id, page_size=2))
    assert [event.kind for event in events] == ["created", "rerated", "retired"]
    assert events[1].before == Ratings(7, 8, 5, 280) and events[1].after == Ratings(7, 6, 4, 168)
    assert events[1].reason == "error-proofing fixture added"
    assert [event.study_total_rpn for event in events] == [280, 168, 0]
    assert [event.kind for event in api.events.list(study.id, kind="rerated", mode_id=mode.id)] == ["rerated"]


def test_rerating_without_a_reason_is_validation_failed_naming_the_reason(api):
    mode = new_mode(api, new_study(api), 5, 5, 5)
    with pytest.raises(ValidationFailed) as caught:
        api.modes.update(mode, occurrence=2)
    assert [error["field"] for error in caught.value.errors] == ["reason"]
    assert api.modes.get(mode.id).occurrence == 5


def test_a_rating_outside_the_study_scale_is_validation_failed_per_field(api):
    study = new_study(api, scale=BUILTIN_1_5)
    with pytest.raises(ValidationFailed) as caught:
        new_mode(api, study, 7, 3, 6)
    error = caught.value
    assert error.status == 422 and error.problem["type"] == "urn:abate:problem:rating-out-of-scale"
    assert [(item["location"], item["field"]) for item in error.errors] == [("json", "severity"), ("json", "detection")]
    assert all("between 1 and 5" in item["message"] for item in error.errors)
    assert list(api.modes.list(study.id)) == []


def test_an_unknown_list_filter_is_validation_failed_naming_it(api):
    with pytest.raises(ValidationFailed) as caught:
        list(api.studies.list(colour="red"))
    assert [(item["location"], item["field"]) for item in caught.value.errors] == [("query", "colour")]


def test_missing_resources_are_not_found(api):
    with pytest.raises(NotFound) as caught:
        api.studies.get(999999)
    assert caught.value.status == 404 and caught.value.title == "Not found"
    assert caught.value.detail == "study 999999 does not exist"
    assert caught.value.response.headers["Content-Type"] == "application/problem+json"
    with pytest.raises(NotFound):
        api.modes.get(999999)
    pages = api.modes.list(999999)
    with pytest.raises(NotFound):
        next(pages)


def test_models_ignore_keys_a_newer_server_adds(api, live_server):
    mode = new_mode(api, new_study(api), 4, 5, 5)
    response = api.request("GET", f"/v1/modes/{mode.id}")
    body = {**response.json(), "escalation_level": 2}
    assert Mode.from_json(body, etag=response.headers["ETag"]) == api.modes.get(mode.id)


def test_the_token_goes_out_as_a_bearer_header(live_server, admin_token, recording_session):
    with Client(live_server, token=admin_token, session=recording_session) as api:
        assert [scale_set.name for scale_set in api.scales.list()][:2] == [BUILTIN_1_10, BUILTIN_1_5]
    with Client(live_server, session=recording_session) as api, pytest.raises(Unauthorized):
        list(api.scales.list())
    with_token, without_token = recording_session.sent
    assert with_token.headers["Authorization"] == f"Bearer {admin_token}"
    assert "Authorization" not in without_token.headers


def test_nothing_listening_on_the_port_is_a_transport_error():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    with Client(f"http://127.0.0.1:{port}") as api, pytest.raises(TransportError) as caught:
        api.scales.get(1)
    assert isinstance(caught.value, AbateError) and not isinstance(caught.value, requests.RequestException)
    assert isinstance(caught.value.__cause__, requests.ConnectionError)
    assert caught.value.status is None and caught.value.response is None and caught.value.problem == {}


def test_a_server_that_never_answers_is_a_transport_error_after_the_timeout():
    # The kernel accepts the connection into the backlog; nobody ever reads the request.
    with socket.create_server(("127.0.0.1", 0)) as silent:
        with Client(f"http://127.0.0.1:{silent.getsockname()[1]}", timeout=0.3) as api:
            with pytest.raises(TransportError) as caught:
                api.studies.get(1)
    assert isinstance(caught.value.__cause__, requests.Timeout)
