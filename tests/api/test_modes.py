"""Failure modes: scoring on creation, re-rating with a reason, retirement and their risk events."""

import threading

import requests

from conftest import BUILTIN_1_5, make_mode, make_study, scale_id_named


def _events(client, study_id, **query):
    params = "&".join(f"{key}={value}" for key, value in query.items())
    return client.get(f"/v1/studies/{study_id}/events?{params}").get_json()["items"]


def _assert_total_is_sum_of_current_rpns(client, study_id):
    modes = client.get(f"/v1/studies/{study_id}/modes?status=active&limit=500").get_json()["items"]
    study = client.get(f"/v1/studies/{study_id}").get_json()
    assert study["risk"]["total_rpn"] == sum(mode["rpn"] for mode in modes)
    events = _events(client, study_id, limit=500)
    if events:
        assert events[-1]["study_total_rpn"] == study["risk"]["total_rpn"]


def test_a_new_mode_is_scored_and_keeps_its_initial_ratings(client):
    study = make_study(client)
    response = client.post(
        f"/v1/studies/{study['id']}/modes",
        json={
            "item": "Weld station 3",
            "function": "Join bracket to frame",
            "failure_mode": "Incomplete weld penetration",
            "effect": "Bracket may detach under load",
            "cause": "Wire feed speed drifts",
            "prevention_controls": "Feed speed interlock",
            "detection_controls": "Visual check of every tenth part",
            "severity": 7,
            "occurrence": 8,
            "detection": 5,
        },
    )
    assert response.status_code == 201
    mode = response.get_json()
    assert response.headers["Location"] == f"/v1/modes/{mode['id']}"
    assert response.headers["ETag"] == f'"1.{study["version"]}"'
    # S7 O8 D5 = 280 (LPU DMGT524, unit 12); S x O = 56.
    assert (mode["rpn"], mode["criticality"]) == (280, 56)
    assert mode["initial"] == {"severity": 7, "occurrence": 8, "detection": 5, "rpn": 280}
    assert mode["needs_action"] and mode["needs_action_reasons"] == ["rpn_at_or_above_threshold"]
    assert mode["priority"] == "high" and mode["status"] == "active"
    [event] = _events(client, study["id"])
    assert event["kind"] == "created" and event["before"] is None
    assert event["after"] == mode["initial"] and event["study_total_rpn"] == 280


def test_rerating_with_a_reason_records_before_and_after_and_moves_the_total(client):
    study = make_study(client)
    mode = make_mode(client, study["id"], 7, 8, 5)
    response = client.patch(
        f"/v1/modes/{mode['id']}",
        json={"occurrence": 6, "detection": 4, "reason": "error-proofed fixture"},
        headers={"If-Match": client.get(f"/v1/modes/{mode['id']}").headers["ETag"]},
    )
    assert response.status_code == 200
    rerated = response.get_json()
    # 280 -> 168, a reduction of 40 % (LPU DMGT524, unit 12). Severity stays: only a design
    # change that alters the mode or its effect changes it (NPTEL, Design for Reliability and Quality, module 5).
    assert (rerated["severity"], rerated["rpn"]) == (7, 168)
    assert (rerated["initial"]["rpn"] - rerated["rpn"]) / rerated["initial"]["rpn"] == 0.4
    assert rerated["version"] == 2
    event = _events(client, study["id"], kind="rerated")[0]
    assert event["before"]["rpn"] == 280 and event["after"]["rpn"] == 168
    assert event["reason"] == "error-proofed fixture" and event["mode_id"] == mode["id"]
    assert event["study_total_rpn"] == 168 and event["study_max_rpn"] == 168
    _assert_total_is_sum_of_current_rpns(client, study["id"])


def test_text_changes_need_no_reason_and_append_no_event(client):
    study = make_study(client)
    mode = make_mode(client, study["id"])
    response = client.patch(f"/v1/modes/{mode['id']}", json={"cause": "Clarified cause"})
    assert response.status_code == 200 and response.get_json()["cause"] == "Clarified cause"
    assert len(_events(client, study["id"])) == 1


def test_retiring_a_mode_takes_it_out_of_the_total_as_a_retirement(client):
    study = make_study(client)
    kept = make_mode(client, study["id"], 5, 5, 5)
    retired = make_mode(client, study["id"], 8, 5, 5)
    response = client.post(f"/v1/modes/{retired['id']}/retire", json={"reason": "product variant discontinued"})
    assert response.status_code == 200
    body = response.get_json()
    assert body["status"] == "retired" and body["retired_at"].endswith("Z")
    assert body["rpn"] == 200  # a retired mode keeps its last ratings on record
    event = _events(client, study["id"], kind="retired")[0]
    assert event["before"]["rpn"] == 200 and event["after"] is None
    assert event["study_total_rpn"] == kept["rpn"]
    assert client.get(f"/v1/modes/{retired['id']}").status_code == 200
    _assert_total_is_sum_of_current_rpns(client, study["id"])


def test_mode_list_sorts_in_pareto_order_and_filters(client):
    study = make_study(client)
    sid = study["id"]
    for ratings in [(2, 2, 2), (7, 8, 5), (9, 2, 2), (5, 5, 2), (5, 5, 5)]:
        make_mode(client, sid, *ratings)

    def rpns(query):
        return [mode["rpn"] for mode in client.get(f"/v1/studies/{sid}/modes?{query}").get_json()["items"]]

    assert rpns("") == [280, 125, 50, 36, 8]
    assert rpns("sort=rpn") == [8, 36, 50, 125, 280]
    assert rpns("sort=created_at") == [8, 280, 36, 50, 125]
    assert rpns("needs_action=true") == [280, 125, 36]
    assert rpns("priority=medium") == [50]
    assert rpns("priority=low") == [8]
    assert rpns("min_rpn=100") == [280, 125]


def test_pareto_pages_do_not_repeat_or_skip_modes_with_equal_rpn(client):
    study = make_study(client)
    ids = [make_mode(client, study["id"], 4, 5, 5)["id"] for _ in range(5)]  # five modes at RPN 100
    ids += [make_mode(client, study["id"], 2, 2, 2)["id"]]
    seen, url = [], f"/v1/studies/{study['id']}/modes?limit=2&sort=-rpn"
    while url:
        page = client.get(url).get_json()
        seen += [mode["id"] for mode in page["items"]]
        url = page["next"]
    assert seen == ids


def test_ratings_follow_the_study_scale_not_the_widest_one(client):
    compact = make_study(client, scale_id=scale_id_named(client, BUILTIN_1_5))
    mode = make_mode(client, compact["id"], 5, 2, 1)  # RPN 10
    assert mode["needs_action_reasons"] == ["severity_at_or_above_threshold"]
    response = client.patch(f"/v1/modes/{mode['id']}", json={"occurrence": 6, "reason": "worse"})
    assert response.status_code == 422
    assert client.get(f"/v1/modes/{mode['id']}").get_json()["occurrence"] == 2


def test_a_mode_etag_changes_when_the_study_policy_changes(client):
    study = make_study(client)
    mode = make_mode(client, study["id"], 4, 5, 4)
    before = client.get(f"/v1/modes/{mode['id']}")
    client.patch(f"/v1/studies/{study['id']}", json={"action_threshold": 80})
    after = client.get(f"/v1/modes/{mode['id']}")
    assert after.headers["ETag"] != before.headers["ETag"]
    assert (before.get_json()["needs_action"], after.get_json()["needs_action"]) == (False, True)


def test_concurrent_patches_with_if_match_lose_no_update(live_server, auth_headers):
    session = requests.Session()
    session.headers.update(auth_headers)
    study = session.post(
        f"{live_server}/v1/studies",
        json={
            "title": "Race",
            "kind": "design",
            "owner": {"name": "R", "email": "r@example.com"},
            "scale_id": 1,
            "timezone": "UTC",
        },
        timeout=10,
    ).json()
    mode_url = None
    response = session.post(
        f"{live_server}/v1/studies/{study['id']}/modes",
        json={"failure_mode": "shared", "severity": 5, "occurrence": 5, "detection": 5},
        timeout=10,
    )
    mode_url = f"{live_server}{response.headers['Location']}"
    etag = response.headers["ETag"]
    outcomes = []
    barrier = threading.Barrier(8)

    def writer(occurrence):
        barrier.wait()
        answer = requests.patch(
            mode_url,
            json={"occurrence": occurrence, "reason": f"writer {occurrence}"},
            headers={"If-Match": etag, **auth_headers},
            timeout=30,
        )
        outcomes.append((answer.status_code, occurrence))

    # Every writer asks for a new occurrence (the mode starts at 5), so the winner re-rates.
    threads = [threading.Thread(target=writer, args=(value,)) for value in (1, 2, 3, 4, 6, 7, 8, 9)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    statuses = sorted(status for status, _ in outcomes)
    # Every write either lands or gets 412 (RFC 9110 section 13.1.1); exactly one lands from one ETag.
    assert statuses == [200] + [412] * 7
    winner = next(occurrence for status, occurrence in outcomes if status == 200)
    final = session.get(mode_url, timeout=10).json()
    assert final["occurrence"] == winner and final["version"] == 2
    events = session.get(f"{live_server}/v1/studies/{study['id']}/events", timeout=10).json()["items"]
    assert [event["kind"] for event in events] == ["created", "rerated"]
    assert events[-1]["study_total_rpn"] == final["rpn"]
