"""Quantitative criticality over the API: study switch and classes, mode inputs, the matrix, closures, history.

Check values from MIL-STD-1629A (1980), Task 102: Cm = beta * alpha * lambda_p * t and Cr per severity
class = the sum of Cm over the item's modes in that class.
"""

import pytest

from conftest import make_mode, make_study

# Severity ratings of the built-in 1-10 scale grouped into the standard's classes: our own test choice.
CLASSES = {"I": [9, 10], "II": [7, 8], "III": [4, 5, 6], "IV": [1, 2, 3]}
EVIDENCE = "Supplier changed to a qualified part; 2,000 h burn-in without failure"


def _study(client):
    return make_study(client, criticality={"enabled": True, "severity_classes": CLASSES})


def _patch(client, url, body):
    return client.patch(url, json=body, headers={"If-Match": client.get(url).headers["ETag"]})


def _design_change(client, mode_id, title):
    """Open a design-change action on the mode; return its JSON."""
    body = {
        "title": title,
        "kind": "design_change",
        "owner": {"name": "Ola Brandt", "email": "ola@example.com"},
        "due_date": "2030-01-01",
    }
    response = client.post(f"/v1/modes/{mode_id}/actions", json=body)
    assert response.status_code == 201, response.get_json()
    return response.get_json()


def _worked_item(client, study_id):
    """MIL-STD-1629A Task 102 worked item: lambda_p 2e-5 /h, t 100 h; modes (alpha, beta, class)
    (0.5, 1.0, II), (0.3, 0.1, II), (0.2, 0, IV)."""
    common = {"item": "Valve actuator", "failure_rate": 2e-5, "operating_time": 100}
    first = make_mode(
        client, study_id, 8, 4, 3, failure_mode="Fails closed", mode_ratio=0.5, effect_category="actual_loss", **common
    )
    second = make_mode(
        client, study_id, 7, 3, 3, failure_mode="Sticks", mode_ratio=0.3, effect_probability=0.1, **common
    )
    third = make_mode(
        client, study_id, 2, 5, 2, failure_mode="Leaks", mode_ratio=0.2, effect_category="no_effect", **common
    )
    return first, second, third


def test_a_mode_carries_cm_and_the_report_sums_cr_per_class(client):
    study = _study(client)
    first, second, third = _worked_item(client, study["id"])
    assert first["fmeca"]["severity_class"] == "II"
    assert first["effect_probability"] == 1.0
    assert second["effect_category"] == "possible_loss"  # beta 0.10 is possible loss (0 < beta <= 0.10), from memory
    # Cm = 1.0 * 0.5 * 2e-5 * 100 = 1.0e-3 (MIL-STD-1629A Task 102)
    assert first["fmeca"]["mode_criticality"] == pytest.approx(1.0e-3)
    report = client.get(f"/v1/studies/{study['id']}/criticality")
    assert report.status_code == 200, report.get_json()
    body = report.get_json()
    (item,) = body["items"]
    # Cr(II) = 1.0e-3 + 0.1 * 0.3 * 2e-5 * 100 = 1.06e-3; Cr(IV) = 0 (MIL-STD-1629A Task 102 worked values)
    assert item["criticality_by_class"]["II"] == pytest.approx(1.06e-3)
    assert item["criticality_by_class"]["IV"] == 0
    assert item["mode_ratio_sum"] == pytest.approx(1.0)
    assert item["warnings"] == []
    assert body["ranking"]["II"] == [{"item": "Valve actuator", "criticality": pytest.approx(1.06e-3)}]
    assert body["total_by_class"]["II"] == pytest.approx(1.06e-3)
    assert "does not certify" in body["caution"]


def test_the_matrix_places_each_worked_mode_in_its_cell(client):
    study = _study(client)
    first, second, third = _worked_item(client, study["id"])
    cells = {
        (cell["severity_class"], cell["level"]): cell["mode_ids"]
        for cell in client.get(f"/v1/studies/{study['id']}/criticality").get_json()["matrix"]
    }
    assert len(cells) == 20  # four classes against five levels
    # Shares 0.5 and 0.3 are above 0.20 (level A); 0.2 is at B's inclusive upper bound (our stated convention).
    assert cells[("II", "A")] == [first["id"], second["id"]]
    assert cells[("IV", "B")] == [third["id"]]
    assert sum(len(ids) for ids in cells.values()) == 3


def test_ratios_above_one_are_refused_naming_the_item_and_below_one_warn(client):
    study = _study(client)
    common = {"item": "Pump seal", "failure_rate": 10, "failure_rate_unit": "per_million_hours", "operating_time": 500}
    make_mode(client, study["id"], failure_mode="Weeps", mode_ratio=0.5, effect_probability=0.5, **common)
    second = make_mode(client, study["id"], failure_mode="Cracks", mode_ratio=0.3, effect_probability=0.5, **common)
    assert "less than 1" in second["fmeca"]["warnings"][0]
    # alpha 0.5 + 0.3 + 0.3 = 1.1 is rejected (MIL-STD-1629A: the ratios of one item sum to 1)
    refused = client.post(
        f"/v1/studies/{study['id']}/modes",
        json={"failure_mode": "Blows out", "severity": 5, "occurrence": 5, "detection": 5, "mode_ratio": 0.3, **common},
    )
    assert refused.status_code == 422
    problem = refused.get_json()
    assert problem["item"] == "Pump seal" and problem["ratio_sum"] == pytest.approx(1.1)
    assert "Pump seal" in problem["detail"] and "1.1" in problem["detail"]
    assert len(client.get(f"/v1/studies/{study['id']}/modes").get_json()["items"]) == 2


def test_rates_are_stored_in_one_unit_and_shown_in_the_one_entered(client):
    study = _study(client)
    # 10 FPMH = 10,000 FIT = 1e-5 per hour (JEDEC JESD85 defines FIT per 1e9 device-hours)
    mode = make_mode(
        client,
        study["id"],
        failure_rate=10000,
        failure_rate_unit="fit",
        mode_ratio=1,
        effect_probability=1,
        operating_time=1000,
    )
    assert mode["failure_rate"] == 10000 and mode["failure_rate_unit"] == "fit"
    assert mode["fmeca"]["mode_criticality"] == pytest.approx(1e-5 * 1000)
    url = f"/v1/modes/{mode['id']}"
    shown = _patch(client, url, {"failure_rate_unit": "per_million_hours"}).get_json()
    assert shown["failure_rate"] == pytest.approx(10) and shown["fmeca"]["mode_criticality"] == pytest.approx(1e-2)


@pytest.mark.parametrize(
    ("body", "field"),
    [
        ({"effect_category": "probable_loss"}, "effect_probability"),  # a ranged category needs a number
        ({"effect_category": "actual_loss", "effect_probability": 0.5}, "effect_probability"),
        ({"failure_rate": 1e-6, "failure_rate_unit": "per_cycle", "operating_time": 10}, "operating_time_unit"),
        ({"mode_ratio": 1.5}, "mode_ratio"),
        ({"failure_rate": -1}, "failure_rate"),
    ],
)
def test_inputs_that_do_not_fit_are_422(client, body, field):
    study = _study(client)
    response = client.post(
        f"/v1/studies/{study['id']}/modes",
        json={"failure_mode": "Bad input", "severity": 5, "occurrence": 5, "detection": 5, **body},
    )
    assert response.status_code == 422
    assert field in str(response.get_json())


def test_enabling_needs_classes_that_cover_the_severity_scale_once(client):
    assert client.post("/v1/studies", json={**_study_body(client), "criticality": {"enabled": True}}).status_code == 422
    gaps = {"I": [9, 10], "II": [7, 8], "IV": [1, 2, 3]}
    response = client.post(
        "/v1/studies", json={**_study_body(client), "criticality": {"enabled": True, "severity_classes": gaps}}
    )
    assert response.status_code == 422 and "[4, 5, 6]" in str(response.get_json())
    overlap = {**CLASSES, "III": [3, 4, 5, 6]}
    response = client.post(
        "/v1/studies", json={**_study_body(client), "criticality": {"enabled": True, "severity_classes": overlap}}
    )
    assert response.status_code == 422


def _study_body(client):
    study = make_study(client)
    return {key: study[key] for key in ("title", "kind", "owner", "scale_id", "timezone")}


def test_the_report_is_409_while_switched_off_and_modes_show_no_figures(client):
    study = make_study(client)
    mode = make_mode(client, study["id"], mode_ratio=0.5)
    assert mode["fmeca"] is None and mode["mode_ratio"] == 0.5
    assert client.get(f"/v1/studies/{study['id']}/criticality").status_code == 409
    assert client.get(f"/v1/studies/{study['id']}").get_json()["criticality"] == {
        "enabled": False,
        "severity_classes": None,
    }


def test_a_closure_with_a_new_rate_recomputes_cm_and_reopen_restores_it(client):
    study = _study(client)
    first, _, _ = _worked_item(client, study["id"])
    action = _design_change(client, first["id"], "Qualified part")
    closed = client.post(
        f"/v1/actions/{action['id']}/close",
        json={"result": {"occurrence": 2, "failure_rate": 5e-6}, "evidence": EVIDENCE, "verified_by": "Quality lab"},
    )
    assert closed.status_code == 200, closed.get_json()
    mode = client.get(f"/v1/modes/{first['id']}").get_json()
    # 1.0 * 0.5 * 5e-6 * 100 = 2.5e-4 (MIL-STD-1629A Task 102)
    assert mode["fmeca"]["mode_criticality"] == pytest.approx(2.5e-4) and mode["occurrence"] == 2
    events = client.get(f"/v1/studies/{study['id']}/events?action_id={action['id']}&kind=action_closed").get_json()[
        "items"
    ]
    assert events[0]["criticality_before"]["mode_criticality"] == pytest.approx(1e-3)
    assert events[0]["criticality_after"]["mode_criticality"] == pytest.approx(2.5e-4)
    reopened = client.post(f"/v1/actions/{action['id']}/reopen", json={"reason": "Part recalled"})
    assert reopened.status_code == 200, reopened.get_json()
    mode = client.get(f"/v1/modes/{first['id']}").get_json()
    assert mode["failure_rate"] == pytest.approx(2e-5) and mode["fmeca"]["mode_criticality"] == pytest.approx(1e-3)


def test_history_carries_total_cr_per_class_and_an_input_change_is_an_event(client):
    study = _study(client)
    first, _, _ = _worked_item(client, study["id"])
    history = client.get(f"/v1/studies/{study['id']}/history?interval=day").get_json()
    assert history["criticality_by_class"]["II"][-1] == pytest.approx(1.06e-3)
    changed = _patch(client, f"/v1/modes/{first['id']}", {"operating_time": 50, "reason": "Mission shortened"})
    assert changed.status_code == 200, changed.get_json()
    kinds = [event["kind"] for event in client.get(f"/v1/studies/{study['id']}/events").get_json()["items"]]
    assert "criticality_changed" in kinds
    history = client.get(f"/v1/studies/{study['id']}/history?interval=day").get_json()
    # Cr(II) = 1.0 * 0.5 * 2e-5 * 50 + 0.1 * 0.3 * 2e-5 * 100 = 5.6e-4
    assert history["criticality_by_class"]["II"][-1] == pytest.approx(5.6e-4)
    assert (
        make_study(client)["id"]
        and client.get(f"/v1/studies/{make_study(client)['id']}/history").get_json()["criticality_by_class"] is None
    )


def test_exports_carry_cm_and_cr_per_class(client):
    import csv
    import io

    import openpyxl

    study = _study(client)
    first, _, _ = _worked_item(client, study["id"])
    rows = list(
        csv.DictReader(io.StringIO(client.get(f"/v1/studies/{study['id']}/export?format=csv").data.decode("utf-8-sig")))
    )
    by_id = {int(row["Mode ID"]): row for row in rows if row["Mode ID"].isdigit()}
    assert float(by_id[first["id"]]["Cm"]) == pytest.approx(1.0e-3)  # MIL-STD-1629A Task 102 worked value
    assert by_id[first["id"]]["Severity class"] == "II" and by_id[first["id"]]["Level"] == "A"
    document = client.get(f"/v1/studies/{study['id']}/export?format=json").get_json()
    assert document["criticality_by_class"]["II"] == pytest.approx(1.06e-3)
    workbook = openpyxl.load_workbook(io.BytesIO(client.get(f"/v1/studies/{study['id']}/export?format=xlsx").data))
    labels = {
        row[0]: row[1] for sheet in workbook.worksheets for row in sheet.iter_rows(values_only=True) if row and row[0]
    }
    assert labels["Cr, severity class II"] == pytest.approx(1.06e-3)


def test_the_matrix_is_drawn_as_svg_and_png(client):
    import io
    import xml.etree.ElementTree as ElementTree

    from PIL import Image

    study = _study(client)
    _worked_item(client, study["id"])
    svg = client.get(f"/v1/studies/{study['id']}/criticality.svg")
    assert svg.status_code == 200 and svg.mimetype == "image/svg+xml"
    text = "".join(ElementTree.fromstring(svg.data).itertext())  # well-formed XML (stdlib parser)
    assert "2 modes" in text and "catastrophic" in text and "does not certify" in text
    png = client.get(f"/v1/studies/{study['id']}/criticality.png")
    assert png.status_code == 200 and Image.open(io.BytesIO(png.data)).format == "PNG"
    assert client.get(f"/v1/studies/{make_study(client)['id']}/criticality.svg").status_code == 409


def test_the_closed_action_shows_the_verified_rate_and_ratio(client):
    study = _study(client)
    first, _, _ = _worked_item(client, study["id"])
    action = _design_change(client, first["id"], "Derate the coil")
    result = {"failure_rate": 8, "failure_rate_unit": "per_million_hours", "mode_ratio": 0.4}
    closed = client.post(f"/v1/actions/{action['id']}/close", json={"result": result, "evidence": EVIDENCE})
    assert closed.status_code == 200, closed.get_json()
    shown = closed.get_json()["result"]
    assert shown["failure_rate"] == 8 and shown["failure_rate_unit"] == "per_million_hours"
    assert shown["mode_ratio"] == 0.4
    mode = client.get(f"/v1/modes/{first['id']}").get_json()
    # 1.0 * 0.4 * 8e-6 * 100 = 3.2e-4 (MIL-STD-1629A Task 102)
    assert mode["fmeca"]["mode_criticality"] == pytest.approx(3.2e-4)


def test_a_mode_shows_its_reliability_and_mtbf(client):
    study = _study(client)
    mode = make_mode(client, study["id"], failure_rate=2e-5, operating_time=1000)
    # lambda 2e-5 /h: R(1000 h) = exp(-0.02) = 0.980199 and MTBF 50,000 h (MIL-HDBK-338B, constant rate)
    assert mode["fmeca"]["reliability"] == pytest.approx(0.980199, abs=1e-6)
    assert mode["fmeca"]["mean_time_between_failures"] == pytest.approx(50_000)
    assert mode["fmeca"]["mode_criticality"] is None and mode["fmeca"]["missing"] == [
        "mode_ratio",
        "effect_probability",
    ]
