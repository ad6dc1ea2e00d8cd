"""Studies: creation, filters, pagination, life cycle, policy changes and the risk summary."""

from conftest import make_mode, make_study


def test_creating_a_study_returns_201_location_etag_and_an_empty_risk(client):
    response = client.post(
        "/v1/studies",
        json={
            "title": "Press line",
            "kind": "process",
            "scope": "Stamping of brackets",
            "tags": ["stamping", "brackets", "stamping"],
            "site": "Plant North",
            "product_line": "Brackets",
            "owner": {"name": "A. Owner", "email": "a.owner@example.com"},
            "scale_id": 1,
            "timezone": "America/Chicago",
        },
    )
    assert response.status_code == 201
    study = response.get_json()
    assert response.headers["Location"] == f"/v1/studies/{study['id']}"
    assert response.headers["ETag"] == '"1.0"'
    assert study["tags"] == ["brackets", "stamping"]
    assert study["status"] == "draft"
    assert study["created_at"].endswith("Z")
    assert study["risk"]["total_rpn"] == 0 and study["risk"]["pareto"] == []
    assert "does not certify" in study["risk"]["caution"]


def test_study_list_filters_by_status_kind_tag_and_owner_email(client):
    first = make_study(client, title="One", tags=["line-a"], owner={"name": "X", "email": "Quality@Example.com"})
    second = make_study(client, title="Two", kind="design", status="active")
    make_study(client, title="Three", tags=["line-b"])

    def titles(query):
        return [item["title"] for item in client.get(f"/v1/studies?{query}").get_json()["items"]]

    assert titles("tag=line-a") == ["One"]
    assert titles("kind=design") == ["Two"]
    assert titles("status=active") == ["Two"]
    assert titles("owner_email=quality@example.com") == ["One"]
    assert titles("") == ["One", "Two", "Three"]
    assert first["id"] < second["id"]


def test_study_list_pages_by_cursor_until_next_is_null(client):
    for number in range(5):
        make_study(client, title=f"Study {number}")
    seen, url = [], "/v1/studies?limit=2"
    while url:
        page = client.get(url).get_json()
        assert len(page["items"]) <= 2
        seen += [item["title"] for item in page["items"]]
        url = page["next"]
    assert seen == [f"Study {number}" for number in range(5)]


def test_study_life_cycle_allows_only_its_transitions(client):
    study = make_study(client)
    path = f"/v1/studies/{study['id']}"
    assert client.patch(path, json={"status": "active"}).get_json()["status"] == "active"
    refused = client.patch(path, json={"status": "draft"})
    assert refused.status_code == 409
    assert refused.get_json()["type"] == "urn:abate:problem:invalid-transition"
    assert client.patch(path, json={"status": "archived"}).get_json()["status"] == "archived"
    assert client.patch(path, json={"status": "active"}).get_json()["status"] == "active"


def test_patch_changes_only_the_named_fields_and_bumps_the_version(client):
    study = make_study(client, scope="Old scope", tags=["a"])
    response = client.patch(
        f"/v1/studies/{study['id']}", json={"owner": {"email": "new@example.com"}, "tags": ["b", "c"]}
    )
    changed = response.get_json()
    assert response.status_code == 200
    assert changed["owner"] == {"name": "Test Owner", "email": "new@example.com"}
    assert changed["tags"] == ["b", "c"] and changed["scope"] == "Old scope"
    assert changed["version"] == study["version"] + 1
    assert response.headers["ETag"] == f'"{changed["version"]}.0"'


def test_a_new_risk_policy_is_a_risk_event_and_moves_needs_action(client):
    study = make_study(client)
    make_mode(client, study["id"], 4, 5, 4)  # RPN 80
    assert client.get(f"/v1/studies/{study['id']}").get_json()["risk"]["needs_action_count"] == 0
    changed = client.patch(f"/v1/studies/{study['id']}", json={"action_threshold": 80}).get_json()
    assert changed["risk"]["needs_action_count"] == 1
    events = client.get(f"/v1/studies/{study['id']}/events").get_json()["items"]
    assert [event["kind"] for event in events] == ["created", "policy_changed"]
    assert events[-1]["study_needs_action_count"] == 1
    assert events[-1]["study_total_rpn"] == 80
    assert "RPN >= 100" in events[-1]["reason"] and "RPN >= 80" in events[-1]["reason"]


def test_risk_summary_totals_bands_and_pareto(client):
    study = make_study(client)
    sid = study["id"]
    rows = [(7, 8, 5), (9, 2, 2), (5, 5, 2), (2, 2, 2), (4, 5, 5)]  # 280, 36, 50, 8, 100
    created = [make_mode(client, sid, *ratings, failure_mode=f"mode {ratings}") for ratings in rows]
    client.patch(f"/v1/modes/{created[0]['id']}", json={"occurrence": 6, "detection": 4, "reason": "fixture"})
    client.post(f"/v1/modes/{created[3]['id']}/retire", json={"reason": "step removed from the process"})
    risk = client.get(f"/v1/studies/{sid}").get_json()["risk"]
    # 280 -> 168 after the re-rating (LPU DMGT524, unit 12); the retired mode (8) leaves both totals.
    assert risk["total_rpn"] == 168 + 36 + 50 + 100
    assert risk["initial_total_rpn"] == 280 + 36 + 50 + 100
    assert risk["max_rpn"] == 168
    assert risk["needs_action_count"] == 3  # 168 and 100 by RPN, (9,2,2) by severity
    assert risk["by_priority"] == {"high": 3, "medium": 1, "low": 0}
    assert (risk["mode_count"], risk["retired_count"]) == (4, 1)
    assert [entry["rpn"] for entry in risk["pareto"]] == [168, 100, 50, 36]
    assert risk["pareto"][-1]["cumulative_percent"] == 100.0
    assert risk["pareto"][0]["cumulative_percent"] == round(100 * 168 / 354, 1)


def test_the_etag_of_a_study_moves_with_its_risk(client):
    study = make_study(client)
    before = client.get(f"/v1/studies/{study['id']}").headers["ETag"]
    make_mode(client, study["id"])
    after = client.get(f"/v1/studies/{study['id']}")
    assert after.headers["ETag"] != before
    assert client.get(f"/v1/studies/{study['id']}", headers={"If-None-Match": after.headers["ETag"]}).status_code == 304


def test_a_study_etag_from_before_a_risk_event_no_longer_matches(client):
    # If-Match compares whole strong tags (RFC 9110 section 13.1.1): the risk summary changed.
    study = make_study(client)
    etag_before_modes = client.get(f"/v1/studies/{study['id']}").headers["ETag"]
    make_mode(client, study["id"])
    stale = client.patch(
        f"/v1/studies/{study['id']}", json={"title": "Renamed"}, headers={"If-Match": etag_before_modes}
    )
    assert stale.status_code == 412
    current = client.get(f"/v1/studies/{study['id']}").headers["ETag"]
    response = client.patch(f"/v1/studies/{study['id']}", json={"title": "Renamed"}, headers={"If-Match": current})
    assert response.status_code == 200 and response.get_json()["title"] == "Renamed"
