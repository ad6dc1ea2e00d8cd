"""Scale sets: the built-ins, custom sets, and immutability once a study uses one."""

from conftest import BUILTIN_1_5, BUILTIN_1_10, make_study, scale_id_named


def _levels(count, word):
    return [
        {"value": value, "label": f"{word} {value}", "criteria": f"{word} criteria {value}"}
        for value in range(1, count + 1)
    ]


def custom_scale(name="Plant 1-6", severity=6, occurrence=6, detection=6, **extra):
    """A scale set body with the given number of levels per dimension."""
    return {
        "name": name,
        "severity": {"max": severity, "levels": _levels(severity, "S")},
        "occurrence": {"levels": _levels(occurrence, "O")},
        "detection": {"levels": _levels(detection, "D")},
        **extra,
    }


def test_the_two_builtin_sets_cover_one_to_ten_and_one_to_five(client):
    items = {item["name"]: item for item in client.get("/v1/scales").get_json()["items"]}
    general, compact = items[BUILTIN_1_10], items[BUILTIN_1_5]
    for scale_set, top, threshold, severity_threshold in ((general, 10, 100, 9), (compact, 5, 20, 5)):
        assert scale_set["builtin"] and scale_set["in_use"]
        assert scale_set["max_rpn"] == top**3
        assert (scale_set["default_action_threshold"], scale_set["default_severity_threshold"]) == (
            threshold,
            severity_threshold,
        )
        for dimension in ("severity", "occurrence", "detection"):
            levels = scale_set[dimension]["levels"]
            assert scale_set[dimension]["max"] == top
            assert [level["value"] for level in levels] == list(range(1, top + 1))
            assert all(level["label"] and level["criteria"] for level in levels)


def test_a_custom_scale_set_gets_default_thresholds_from_its_size(client):
    response = client.post("/v1/scales", json=custom_scale(detection=4))
    assert response.status_code == 201
    body = response.get_json()
    assert response.headers["Location"] == f"/v1/scales/{body['id']}"
    assert body["max_rpn"] == 6 * 6 * 4
    assert body["default_action_threshold"] == 14  # a tenth of 144, rounded
    assert body["default_severity_threshold"] == 6  # the top fifth of a 1-6 severity scale
    assert body["detection"]["max"] == 4 and not body["in_use"]
    assert client.get(f"/v1/scales/{body['id']}").get_json() == body


def test_a_scale_set_with_a_gap_in_its_levels_is_422(client):
    body = custom_scale()
    body["occurrence"]["levels"] = [level for level in body["occurrence"]["levels"] if level["value"] != 3]
    response = client.post("/v1/scales", json=body)
    assert response.status_code == 422
    assert response.get_json()["errors"][0]["field"] == "occurrence.levels"
    assert len(client.get("/v1/scales").get_json()["items"]) == 2


def test_an_unused_scale_set_can_be_replaced_and_its_version_moves(client):
    created = client.post("/v1/scales", json=custom_scale()).get_json()
    response = client.put(
        f"/v1/scales/{created['id']}", json=custom_scale(name="Plant 1-6 v2", severity=5), headers={"If-Match": '"1"'}
    )
    assert response.status_code == 200
    body = response.get_json()
    assert (body["name"], body["severity"]["max"], body["version"]) == ("Plant 1-6 v2", 5, 2)


def test_a_scale_set_in_use_cannot_change(client):
    created = client.post("/v1/scales", json=custom_scale()).get_json()
    make_study(client, scale_id=created["id"])
    response = client.put(f"/v1/scales/{created['id']}", json=custom_scale(name="Renamed"))
    assert response.status_code == 409
    assert response.get_json()["type"] == "urn:abate:problem:scale-in-use"
    assert client.get(f"/v1/scales/{created['id']}").get_json()["name"] == "Plant 1-6"
    assert client.get(f"/v1/scales/{created['id']}").get_json()["in_use"] is True


def test_study_policy_defaults_come_from_its_scale_set(client):
    compact = make_study(client, scale_id=scale_id_named(client, BUILTIN_1_5))
    assert (compact["action_threshold"], compact["severity_threshold"]) == (20, 5)
    general = make_study(client)
    assert (general["action_threshold"], general["severity_threshold"]) == (100, 9)
