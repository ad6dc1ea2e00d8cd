"""Corrective actions: life cycle, closure as a verified re-rating, residual risk, filters and races."""

import datetime
import threading
import zoneinfo

import pytest
import requests

from conftest import make_mode, make_study

EVIDENCE = "Capability run of 500 parts, no defect found"
IN_A_MONTH = (datetime.date.today() + datetime.timedelta(days=30)).isoformat()
INVALID_TRANSITION = "urn:abate:problem:invalid-transition"
CONFLICT = "urn:abate:problem:conflict"


def _action_body(**overrides):
    return {
        "title": "Error-proof the weld fixture",
        "kind": "prevention",
        "owner": {"name": "Kai Berg", "email": "kai.berg@example.com"},
        "due_date": IN_A_MONTH,
        "target": None,
        **overrides,
    }


def make_action(client, mode_id, **overrides):
    """Open an action on a mode through the API; return its JSON."""
    response = client.post(f"/v1/modes/{mode_id}/actions", json=_action_body(**overrides))
    assert response.status_code == 201, response.get_json()
    return response.get_json()


def _weld_mode_with_action(client, study_overrides=None, **action_overrides):
    """A study with one S7 O8 D5 mode (RPN 280) and one open action on it."""
    study = make_study(client, **(study_overrides or {}))
    mode = make_mode(client, study["id"], 7, 8, 5)
    return study, mode, make_action(client, mode["id"], **action_overrides)


def _act(client, action_id, verb, **body):
    return client.post(f"/v1/actions/{action_id}/{verb}", json=body)


def _close(client, action_id, result, **extra):
    return _act(client, action_id, "close", result=result, evidence=EVIDENCE, verified_by="R. Inspector", **extra)


def _read(client, path, **query):
    return client.get(path, query_string=query).get_json()


def _events(client, study_id, **query):
    return _read(client, f"/v1/studies/{study_id}/events", limit=500, **query)["items"]


def _risk(client, study_id):
    return _read(client, f"/v1/studies/{study_id}")["risk"]


def _action_ids(client, **query):
    return [item["id"] for item in _read(client, "/v1/actions", limit=500, **query)["items"]]


def _state(client, action):
    """Everything a refused change must leave as it was."""
    study = _read(client, f"/v1/studies/{action['study_id']}")
    return (
        _read(client, f"/v1/actions/{action['id']}"),
        _read(client, f"/v1/modes/{action['mode_id']}"),
        study["risk"],
        study["risk_revision"],
        _events(client, action["study_id"]),
    )


def _today_in(zone):
    """The calendar date now in an IANA zone, from the stdlib zoneinfo (IANA time zone database)."""
    return datetime.datetime.now(zoneinfo.ZoneInfo(zone)).date()


def _rfc3339(moment):
    return moment.astimezone(datetime.UTC).isoformat().replace("+00:00", "Z")


def test_creating_an_action_returns_it_and_lowers_the_projection(client):
    study = make_study(client)
    weld = make_mode(client, study["id"], 7, 8, 5)
    make_mode(client, study["id"], 9, 2, 2)  # needs action by severity 9, no action on it yet
    body = _action_body(
        description="Fixture with a part-present sensor",
        target={"occurrence": 4},
        external_ref={"system": "tickets", "key": "QA-101"},
    )
    response = client.post(f"/v1/modes/{weld['id']}/actions", json=body)
    assert response.status_code == 201
    action = response.get_json()
    assert response.headers["Location"] == f"/v1/actions/{action['id']}"
    assert response.headers["ETag"] == f'"1.{_today_in("Europe/Berlin").toordinal()}"'
    assert (action["mode_id"], action["study_id"]) == (weld["id"], study["id"])
    assert action["title"] == body["title"] and action["owner"] == body["owner"]
    assert action["due_date"] == action["original_due_date"] == IN_A_MONTH
    assert (action["due_date_changes"], action["status"], action["version"]) == (0, "open", 1)
    assert (action["overdue"], action["days_overdue"], action["result"], action["closed_at"]) == (False, 0, None, None)
    assert action["target"] == {"severity": None, "occurrence": 4, "detection": None}
    assert action["external_ref"] == {"system": "tickets", "key": "QA-101"}
    [event] = _events(client, study["id"], kind="action_created")
    assert (event["action_id"], event["mode_id"], event["study_open_actions"]) == (action["id"], weld["id"], 1)
    assert event["study_total_rpn"] == 280 + 36
    mode = _read(client, f"/v1/modes/{weld['id']}")
    assert mode["projected"] == {"severity": 7, "occurrence": 4, "detection": 5, "rpn": 140}
    assert (mode["rpn"], mode["open_actions"]) == (280, 1)
    risk = _risk(client, study["id"])
    assert (risk["total_rpn"], risk["projected_total_rpn"], risk["open_actions"]) == (316, 140 + 36, 1)
    assert (risk["needs_action_count"], risk["needs_action_with_open_action"]) == (2, 1)
    assert risk["needs_action_covered_percent"] == 50.0


def test_progress_and_rescheduling_keep_the_original_due_date_and_count_each_move(client):
    study, mode, action = _weld_mode_with_action(client)
    url = f"/v1/actions/{action['id']}"
    started = client.patch(url, json={"status": "in_progress"}, headers={"If-Match": client.get(url).headers["ETag"]})
    assert started.status_code == 200
    assert (started.get_json()["status"], started.get_json()["version"]) == ("in_progress", 2)
    first_move = (datetime.date.fromisoformat(IN_A_MONTH) + datetime.timedelta(days=14)).isoformat()
    second_move = (datetime.date.fromisoformat(IN_A_MONTH) + datetime.timedelta(days=21)).isoformat()
    client.patch(url, json={"due_date": first_move, "reason": "Fixture supplier delivers late"})
    client.patch(url, json={"due_date": second_move})
    unchanged = client.patch(url, json={"due_date": second_move}).get_json()  # the same date is no move
    assert unchanged["due_date"] == second_move and unchanged["original_due_date"] == IN_A_MONTH
    assert unchanged["due_date_changes"] == 2 and unchanged["status"] == "in_progress"
    updates = _events(client, study["id"], kind="action_updated")
    assert [event["reason"] for event in updates] == [
        "status open -> in_progress",
        "Fixture supplier delivers late",
        f"due date {first_move} -> {second_move}",
    ]
    assert {event["action_id"] for event in updates} == {action["id"]}
    assert _risk(client, study["id"])["total_rpn"] == 280  # planning moves no rating


def test_closing_rerates_the_mode_and_records_one_event_in_one_step(client):
    study, mode, action = _weld_mode_with_action(client, target={"occurrence": 6, "detection": 4})
    response = _close(client, action["id"], {"occurrence": 6, "detection": 4})
    assert response.status_code == 200
    closed = response.get_json()
    assert closed["status"] == "closed" and closed["closed_at"].endswith("Z")
    # Severity stays when the result omits it: a prevention action changes occurrence and detection,
    # not the effect (NPTEL, Design for Reliability and Quality, module 5).
    assert closed["result"] == {"severity": 7, "occurrence": 6, "detection": 4}
    assert (closed["evidence"], closed["verified_by"], closed["rating_raised"]) == (EVIDENCE, "R. Inspector", False)
    rerated = _read(client, f"/v1/modes/{mode['id']}")
    assert (rerated["severity"], rerated["occurrence"], rerated["detection"], rerated["rpn"]) == (7, 6, 4, 168)
    assert (rerated["version"], rerated["open_actions"]) == (2, 0)
    assert rerated["projected"]["rpn"] == 168 and rerated["initial"]["rpn"] == 280
    [event] = _events(client, study["id"], kind="action_closed")
    assert (event["action_id"], event["mode_id"], event["reason"]) == (action["id"], mode["id"], EVIDENCE)
    assert event["before"] == {"severity": 7, "occurrence": 8, "detection": 5, "rpn": 280}
    assert event["after"] == {"severity": 7, "occurrence": 6, "detection": 4, "rpn": 168}
    assert event["study_total_rpn"] == 168 and event["occurred_at"] == closed["closed_at"]
    assert event["rating_raised"] is False and event["study_open_actions"] == 0
    risk = _risk(client, study["id"])
    # S7 O8 D5 = 280 re-rated to S7 O6 D4 = 168: 112 points, (280 - 168) / 280 = 40 %
    # (Lovely Professional University, DMGT524 Total Quality Management, Unit 12).
    assert (risk["initial_total_rpn"], risk["total_rpn"], risk["projected_total_rpn"]) == (280, 168, 168)
    assert risk["reduction"] == {"points": 112, "percent": 40.0}
    assert risk["open_actions"] == 0


def test_reopening_restores_only_the_ratings_the_closure_changed(client):
    study, mode, action = _weld_mode_with_action(client)
    _close(client, action["id"], {"occurrence": 6, "detection": 4})
    # A later re-rating of severity is not the closure's doing, so reopening leaves it.
    client.patch(f"/v1/modes/{mode['id']}", json={"severity": 6, "reason": "Guard fitted, effect now milder"})
    response = _act(client, action["id"], "reopen", reason="Defects returned once the fixture wore")
    assert response.status_code == 200
    reopened = response.get_json()
    assert (reopened["status"], reopened["closed_at"], reopened["result"]) == ("open", None, None)
    assert (reopened["evidence"], reopened["verified_by"]) == ("", "")
    restored = _read(client, f"/v1/modes/{mode['id']}")
    assert (restored["severity"], restored["occurrence"], restored["detection"], restored["rpn"]) == (6, 8, 5, 240)
    assert restored["open_actions"] == 1
    history = _events(client, study["id"])
    assert [event["kind"] for event in history] == [
        "created",
        "action_created",
        "action_closed",
        "rerated",
        "action_reopened",
    ]
    last = history[-1]
    assert (last["action_id"], last["reason"]) == (action["id"], "Defects returned once the fixture wore")
    assert last["before"]["rpn"] == 6 * 6 * 4 and last["after"]["rpn"] == 240
    assert last["study_total_rpn"] == _risk(client, study["id"])["total_rpn"] == 240


def test_cancelling_drops_the_action_and_keeps_the_ratings(client):
    study, mode, action = _weld_mode_with_action(client, target={"occurrence": 2})
    assert _read(client, f"/v1/modes/{mode['id']}")["projected"]["rpn"] == 7 * 2 * 5
    response = _act(client, action["id"], "cancel", reason="Superseded by a design change")
    assert response.status_code == 200
    cancelled = response.get_json()
    assert cancelled["status"] == "cancelled" and cancelled["cancelled_at"].endswith("Z")
    after = _read(client, f"/v1/modes/{mode['id']}")
    assert (after["rpn"], after["projected"]["rpn"], after["open_actions"], after["version"]) == (280, 280, 0, 1)
    [event] = _events(client, study["id"], kind="action_cancelled")
    assert (event["action_id"], event["reason"]) == (action["id"], "Superseded by a design change")
    assert event["before"] is None and event["after"] is None and event["study_total_rpn"] == 280
    risk = _risk(client, study["id"])
    assert (risk["total_rpn"], risk["projected_total_rpn"], risk["open_actions"]) == (280, 280, 0)


def _close_it(client, action):
    assert _close(client, action["id"], {"occurrence": 6}).status_code == 200


def _cancel_it(client, action):
    assert _act(client, action["id"], "cancel", reason="No longer needed").status_code == 200


@pytest.mark.parametrize(
    ("prepare", "attempt"),
    [
        pytest.param(_close_it, lambda c, a: _close(c, a["id"], {"detection": 3}), id="close-a-closed-action"),
        pytest.param(_cancel_it, lambda c, a: _close(c, a["id"], {"detection": 3}), id="close-a-cancelled-action"),
        pytest.param(None, lambda c, a: _act(c, a["id"], "reopen", reason="again"), id="reopen-an-open-action"),
        pytest.param(_close_it, lambda c, a: _act(c, a["id"], "cancel", reason="late"), id="cancel-a-closed-action"),
        pytest.param(
            _close_it, lambda c, a: c.patch(f"/v1/actions/{a['id']}", json={"title": "x"}), id="patch-a-closed-action"
        ),
        pytest.param(
            None,
            lambda c, a: c.patch(f"/v1/actions/{a['id']}", json={"status": "closed"}),
            id="patch-status-to-closed",
        ),
    ],
)
def test_an_illegal_transition_is_409_and_changes_nothing(client, prepare, attempt):
    _, _, action = _weld_mode_with_action(client)
    if prepare:
        prepare(client, action)
    before = _state(client, action)
    response = attempt(client, action)
    assert response.status_code == 409 and response.mimetype == "application/problem+json"
    problem = response.get_json()
    assert (problem["type"], problem["status"]) == (INVALID_TRANSITION, 409) and problem["detail"]
    assert _state(client, action) == before


def test_the_projection_takes_per_rating_the_lowest_of_current_and_open_targets(client):
    study = make_study(client)
    mode = make_mode(client, study["id"], 7, 8, 5)
    make_action(client, mode["id"], target={"occurrence": 4})
    # The occurrence target 9 lies above the current 8 and must not raise the projection.
    make_action(client, mode["id"], kind="detection", target={"detection": 3, "occurrence": 9})
    # The issue's rule, arithmetic anyone can redo: S7, min(8, 4, 9) = 4, min(5, 3) = 3 gives 84.
    projected = _read(client, f"/v1/modes/{mode['id']}")
    assert projected["projected"] == {"severity": 7, "occurrence": 4, "detection": 3, "rpn": 84}
    assert projected["open_actions"] == 2 and projected["rpn"] == 280
    assert _risk(client, study["id"])["projected_total_rpn"] == 84


def test_a_result_that_raises_a_rating_is_allowed_and_flagged(client):
    study, mode, action = _weld_mode_with_action(client, kind="detection", target={"detection": 3})
    # The new check revealed escapes the old one missed: detection is worse than believed.
    response = _close(client, action["id"], {"detection": 7})
    assert response.status_code == 200
    closed = response.get_json()
    assert closed["rating_raised"] is True and closed["result"] == {"severity": 7, "occurrence": 8, "detection": 7}
    assert _read(client, f"/v1/modes/{mode['id']}")["rpn"] == 392
    [event] = _events(client, study["id"], kind="action_closed")
    assert event["rating_raised"] is True and event["after"]["rpn"] == 392 and event["study_total_rpn"] == 392
    [effect] = _read(client, f"/v1/studies/{study['id']}/actions/effect")["items"]
    assert (effect["action_id"], effect["rating_raised"]) == (action["id"], True)
    assert (effect["rpn_removed"], effect["met_target"]) == (280 - 392, False)


def test_closing_at_a_time_before_the_latest_event_is_409_and_a_future_one_422(client):
    study, mode, action = _weld_mode_with_action(client)
    latest = _events(client, study["id"])[-1]["occurred_at"]
    before = _state(client, action)
    too_early = datetime.datetime.fromisoformat(latest) - datetime.timedelta(days=1)
    early = _close(client, action["id"], {"occurrence": 6}, effective_at=_rfc3339(too_early))
    assert early.status_code == 409 and early.get_json()["type"] == CONFLICT
    assert "precedes" in early.get_json()["detail"]
    tomorrow = datetime.datetime.now(datetime.UTC) + datetime.timedelta(days=1)
    future = _close(client, action["id"], {"occurrence": 6}, effective_at=_rfc3339(tomorrow))
    assert future.status_code == 422 and future.get_json()["errors"][0]["field"] == "effective_at"
    assert _state(client, action) == before


def test_closing_at_a_past_time_stamps_the_event_and_the_action(client):
    study, mode, action = _weld_mode_with_action(client)
    # The latest event's own instant is the earliest allowed: not before it, so events stay in time order.
    latest = _events(client, study["id"])[-1]["occurred_at"]
    response = _close(client, action["id"], {"occurrence": 6}, effective_at=latest)
    assert response.status_code == 200 and response.get_json()["closed_at"] == latest
    [event] = _events(client, study["id"], kind="action_closed")
    assert event["occurred_at"] == latest and event["recorded_at"] > latest


def test_a_mode_recorded_in_the_past_keeps_its_time_and_later_ones_keep_the_order(client):
    study = make_study(client)
    ten_days_ago = (datetime.datetime.now(datetime.UTC) - datetime.timedelta(days=10)).replace(microsecond=123456)
    mode = make_mode(client, study["id"], 7, 8, 5, effective_at=_rfc3339(ten_days_ago))
    assert mode["created_at"] == _rfc3339(ten_days_ago)
    [created] = _events(client, study["id"])
    assert created["occurred_at"] == _rfc3339(ten_days_ago)
    body = {"failure_mode": "Earlier still", "severity": 5, "occurrence": 5, "detection": 5}
    earlier = client.post(
        f"/v1/studies/{study['id']}/modes",
        json={**body, "effective_at": _rfc3339(ten_days_ago - datetime.timedelta(days=1))},
    )
    assert earlier.status_code == 409 and earlier.get_json()["type"] == CONFLICT
    tomorrow = datetime.datetime.now(datetime.UTC) + datetime.timedelta(days=1)
    future = client.post(f"/v1/studies/{study['id']}/modes", json={**body, "effective_at": _rfc3339(tomorrow)})
    assert future.status_code == 422
    assert _read(client, f"/v1/studies/{study['id']}/modes")["items"] == [_read(client, f"/v1/modes/{mode['id']}")]
    assert _events(client, study["id"]) == [created]


def test_an_action_due_yesterday_in_the_study_time_zone_is_overdue(client):
    study = make_study(client, timezone="America/Chicago")
    mode = make_mode(client, study["id"], 7, 8, 5)
    yesterday = _today_in("America/Chicago") - datetime.timedelta(days=1)
    late = make_action(client, mode["id"], due_date=yesterday.isoformat())
    on_time = make_action(client, mode["id"])
    assert late["overdue"] is True and late["days_overdue"] >= 1
    assert (on_time["overdue"], on_time["days_overdue"]) == (False, 0)
    assert _action_ids(client, overdue="true") == [late["id"]]
    assert _action_ids(client, overdue="false") == [on_time["id"]]
    risk = _risk(client, study["id"])
    assert (risk["overdue_actions"], risk["open_actions"]) == (1, 2)
    closed = _close(client, late["id"], {"occurrence": 6}).get_json()
    assert (closed["overdue"], closed["days_overdue"]) == (False, 0)  # done late is no longer overdue
    assert _action_ids(client, overdue="true") == [] and _risk(client, study["id"])["overdue_actions"] == 0


def test_overdue_is_judged_by_the_date_in_the_study_time_zone(client):
    # Kiritimati is UTC+14 and Pago Pago UTC-11 (IANA time zone database, read through stdlib zoneinfo):
    # from 10:00 UTC on, Kiritimati is a day ahead of UTC while Pago Pago is never ahead, so the same
    # due date can be past in one study and not in the other. Expected values come from zoneinfo.
    due = datetime.datetime.now(datetime.UTC).date()
    expected_overdue = []
    for zone in ("Pacific/Kiritimati", "Pacific/Pago_Pago"):
        study = make_study(client, timezone=zone, title=zone)
        action = make_action(client, make_mode(client, study["id"])["id"], due_date=due.isoformat())
        days = max(0, (_today_in(zone) - due).days)
        assert (action["overdue"], action["days_overdue"]) == (days > 0, days)
        assert _risk(client, study["id"])["overdue_actions"] == (1 if days else 0)
        expected_overdue += [action["id"]] if days else []
    assert days == 0  # Pago Pago's date is never after the UTC date
    assert _action_ids(client, overdue="true") == expected_overdue


def test_the_action_list_filters_by_study_mode_status_owner_dates_and_reference(client):
    first, second = make_study(client, title="Press line"), make_study(client, title="Paint shop")
    weld, seal = make_mode(client, first["id"]), make_mode(client, first["id"])
    spray = make_mode(client, second["id"])
    start = datetime.date.fromisoformat(IN_A_MONTH)

    def due(days):
        return (start + datetime.timedelta(days=days)).isoformat()

    ana = make_action(
        client,
        weld["id"],
        due_date=due(0),
        owner={"name": "Ana Lopez", "email": "Ana.Lopez@Example.com"},
        external_ref={"system": "tickets", "key": "QA-101"},
    )
    ben = make_action(client, weld["id"], due_date=due(5), owner={"name": "Ben Okafor", "email": "ben@example.com"})
    seal_action = make_action(client, seal["id"], due_date=due(10), external_ref={"system": "cmms", "key": "QA-101"})
    spray_action = make_action(client, spray["id"], due_date=due(15))
    client.patch(f"/v1/actions/{ben['id']}", json={"status": "in_progress"})
    a, b, c, d = (action["id"] for action in (ana, ben, seal_action, spray_action))
    assert _action_ids(client) == [a, b, c, d]
    assert _action_ids(client, sort="-due_date") == [d, c, b, a]
    assert _action_ids(client, study_id=first["id"]) == [a, b, c]
    assert _action_ids(client, mode_id=weld["id"]) == [a, b]
    assert _action_ids(client, status="in_progress") == [b]
    assert _action_ids(client, status="open", study_id=first["id"]) == [a, c]
    assert _action_ids(client, owner_email="ANA.LOPEZ@example.COM") == [a]
    assert _action_ids(client, due_before=due(10)) == [a, b]
    assert _action_ids(client, due_after=due(5)) == [c, d]
    assert _action_ids(client, due_after=due(0), due_before=due(15)) == [b, c]
    assert _action_ids(client, external_system="tickets", external_key="QA-101") == [a]
    assert _action_ids(client, external_system="cmms", external_key="QA-101") == [c]


@pytest.mark.parametrize("sort", ["due_date", "-due_date"])
def test_action_pages_follow_the_due_date_order_without_repeats(client, sort):
    study = make_study(client)
    mode = make_mode(client, study["id"])
    start = datetime.date.fromisoformat(IN_A_MONTH)
    created = [
        make_action(client, mode["id"], due_date=(start + datetime.timedelta(days=days)).isoformat())
        for days in (3, 1, 1, 2, 1)  # ties on the due date are broken by id
    ]
    expected = [a["id"] for a in sorted(created, key=lambda a: (a["due_date"], a["id"]), reverse=sort != "due_date")]
    seen, url = [], f"/v1/actions?limit=2&sort={sort}"
    while url:
        page = client.get(url)
        assert page.status_code == 200, page.get_json()
        seen += [item["id"] for item in page.get_json()["items"]]
        url = page.get_json()["next"]
    assert seen == expected


def test_an_external_reference_is_unique_per_system(client):
    reference = {"system": "tickets", "key": "QA-7"}
    study, mode, first = _weld_mode_with_action(client, external_ref=reference)
    duplicate = client.post(f"/v1/modes/{mode['id']}/actions", json=_action_body(external_ref=reference))
    assert duplicate.status_code == 409 and duplicate.get_json()["type"] == CONFLICT
    assert _action_ids(client, external_system="tickets", external_key="QA-7") == [first["id"]]
    other = make_action(client, mode["id"], external_ref={"system": "cmms", "key": "QA-7"})
    assert other["external_ref"] == {"system": "cmms", "key": "QA-7"}
    assert len(_events(client, study["id"], kind="action_created")) == 2


def test_a_mode_with_an_open_action_is_retired_only_after_the_action_is_cancelled(client):
    study, mode, action = _weld_mode_with_action(client)
    refused = client.post(f"/v1/modes/{mode['id']}/retire", json={"reason": "Variant discontinued"})
    assert refused.status_code == 409 and refused.get_json()["type"] == CONFLICT
    assert _read(client, f"/v1/modes/{mode['id']}")["status"] == "active"
    assert _events(client, study["id"], kind="retired") == []
    _act(client, action["id"], "cancel", reason="Variant discontinued")
    retired = client.post(f"/v1/modes/{mode['id']}/retire", json={"reason": "Variant discontinued"})
    assert retired.status_code == 200 and retired.get_json()["status"] == "retired"
    assert _risk(client, study["id"])["total_rpn"] == 0


def test_the_effect_view_ranks_closed_actions_by_risk_removed_against_their_plan(client):
    study = make_study(client)
    weld, seal, label = (make_mode(client, study["id"], *ratings) for ratings in ((7, 8, 5), (5, 5, 5), (4, 4, 4)))
    missed = make_action(client, weld["id"], target={"occurrence": 4, "detection": 3})
    met = make_action(client, seal["id"], kind="detection", title="Leak test", target={"detection": 2})
    reopened = make_action(client, label["id"], target={"occurrence": 2})
    _close(client, missed["id"], {"occurrence": 6, "detection": 4})  # 280 -> 168 against a plan of 84
    _close(client, met["id"], {"detection": 1})  # 125 -> 25 against a plan of 50
    _close(client, reopened["id"], {"occurrence": 2})
    _act(client, reopened["id"], "reopen", reason="Labels peel again")  # no longer a closed action
    body = _read(client, f"/v1/studies/{study['id']}/actions/effect")
    assert [item["action_id"] for item in body["items"]] == [missed["id"], met["id"]]
    first, second = body["items"]
    assert first["before"] == {"severity": 7, "occurrence": 8, "detection": 5, "rpn": 280}
    assert first["planned"] == {"severity": 7, "occurrence": 4, "detection": 3, "rpn": 84}
    assert first["achieved"] == {"severity": 7, "occurrence": 6, "detection": 4, "rpn": 168}
    assert (first["rpn_removed"], first["planned_rpn_removed"], first["met_target"]) == (112, 196, False)
    assert (first["mode_id"], first["owner"], first["rating_raised"]) == (weld["id"], missed["owner"], False)
    assert second["planned"] == {"severity": 5, "occurrence": 5, "detection": 2, "rpn": 50}
    assert second["achieved"] == {"severity": 5, "occurrence": 5, "detection": 1, "rpn": 25}
    assert (second["rpn_removed"], second["met_target"], second["title"]) == (100, True, "Leak test")
    assert second["closed_at"] == _read(client, f"/v1/actions/{met['id']}")["closed_at"]
    assert "does not certify" in body["caution"]


def test_of_eight_concurrent_closes_of_one_action_exactly_one_succeeds(client, live_server, auth_headers):
    study, mode, action = _weld_mode_with_action(client)
    make_mode(client, study["id"], 5, 5, 5)  # a second mode, so the total is a real sum
    url = f"{live_server}/v1/actions/{action['id']}/close"
    barrier = threading.Barrier(8)
    outcomes = []

    def closer(occurrence):
        barrier.wait()
        answer = requests.post(
            url, json={"result": {"occurrence": occurrence}, "evidence": "race"}, headers=auth_headers, timeout=30
        )
        outcomes.append((answer.status_code, occurrence, answer.json()))

    threads = [threading.Thread(target=closer, args=(value,)) for value in (1, 2, 3, 4, 5, 6, 7, 9)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert sorted(status for status, _, _ in outcomes) == [200] + [409] * 7
    assert {body["type"] for status, _, body in outcomes if status == 409} == {INVALID_TRANSITION}
    winner = next(occurrence for status, occurrence, _ in outcomes if status == 200)
    rerated = _read(client, f"/v1/modes/{mode['id']}")
    assert (rerated["occurrence"], rerated["version"]) == (winner, 2)
    [closure] = _events(client, study["id"], kind="action_closed")
    assert closure["action_id"] == action["id"] and closure["after"]["occurrence"] == winner
    modes = _read(client, f"/v1/studies/{study['id']}/modes", status="active")["items"]
    total = _risk(client, study["id"])["total_rpn"]
    assert total == sum(item["rpn"] for item in modes) == 7 * winner * 5 + 125
    assert _events(client, study["id"])[-1]["study_total_rpn"] == total
