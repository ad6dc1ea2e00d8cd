"""Observed failures over the API: recording them once, the evidence and suggestion, accepting it, drift.

Check values: the process occurrence rankings tied to failure rates in P. Keller, Six Sigma Demystified
(McGraw-Hill), table "FMEA Occurrence Rankings", citing AIAG 1995: 10 = 1 in 2 or more, 9 = 1 in 3,
8 = 1 in 8, 7 = 1 in 20, 6 = 1 in 80, 5 = 1 in 400, 4 = 1 in 2,000, 3 = 1 in 15,000, 2 = 1 in 150,000,
1 = fewer. Loaded here as a test scale of its own, each rate read as where its level starts.
"""

import datetime
import threading

import pytest
import requests
from scipy.stats import chi2
from test_actions import make_action

from conftest import BUILTIN_1_10, make_mode, make_study, scale_id_named

ONE_IN = {10: 2, 9: 3, 8: 8, 7: 20, 6: 80, 5: 400, 4: 2_000, 3: 15_000, 2: 150_000}
EVIDENCE = "Trial run of 2,000 parts without the fault"
TODAY = datetime.date.today()


def _days_ago(days):
    return (TODAY - datetime.timedelta(days=days)).isoformat()


def _levels(dimension_max, rates=None):
    return [
        {"value": value, "label": f"Level {value}", **({"rate_from": rates[value]} if rates else {})}
        for value in range(1, dimension_max + 1)
    ]


def _keller_scale(client):
    """A scale set whose occurrence bands are the Keller/AIAG table, per thousand units."""
    rates = {1: 0, **{value: 1000 / parts for value, parts in ONE_IN.items()}}
    body = {
        "name": "Keller AIAG process occurrence",
        "severity": {"levels": _levels(10)},
        "occurrence": {"levels": _levels(10, rates)},
        "detection": {"levels": _levels(10)},
        "occurrence_rate_basis": "per_thousand_units",
    }
    response = client.post("/v1/scales", json=body)
    assert response.status_code == 201, response.get_json()
    return response.get_json()


def _observe(client, mode_id, failures, exposure, key, **fields):
    body = {
        "failures": failures,
        "exposure": exposure,
        "period_start": _days_ago(40),
        "period_end": _days_ago(10),
        "source_system": "maint",
        "record_key": key,
        **fields,
    }
    return client.post(f"/v1/modes/{mode_id}/observations", json=body)


def _observed_study(client, estimate="observed"):
    study = make_study(client, scale_id=_keller_scale(client)["id"])
    settings = client.put(f"/v1/studies/{study['id']}/observation-settings", json={"estimate": estimate})
    assert settings.status_code == 200, settings.get_json()
    return study


def test_the_builtin_ten_step_scale_carries_rate_bands_of_its_own(client):
    scale = client.get(f"/v1/scales/{scale_id_named(client, BUILTIN_1_10)}").get_json()
    assert scale["occurrence_rate_basis"] == "per_thousand_units"
    starts = [level["rate_from"] for level in scale["occurrence"]["levels"]]
    assert starts[0] == 0 and starts == sorted(starts) and len(set(starts)) == 10
    assert all("rate_from" not in level for level in scale["severity"]["levels"])


@pytest.mark.parametrize(
    ("failures", "units", "level"),
    [
        (1, 20, 7),  # exactly 1 in 20 lies on level 7's edge: the higher level (our convention)
        (1, 21, 6),  # just below it
        (1, 80, 6),  # exactly 1 in 80
        (1, 81, 5),
        (3, 1_200, 5),  # 1 in 400
        (1, 2, 10),  # 1 in 2
        (1, 150_000, 2),
        (1, 150_001, 1),
    ],
)
def test_an_observed_rate_implies_the_keller_aiag_level(client, failures, units, level):
    study = _observed_study(client)
    mode = make_mode(client, study["id"], 6, 4, 5)
    assert _observe(client, mode["id"], failures, units, f"r-{units}").status_code == 201
    evidence = client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()
    assert evidence["observed_rate"] == pytest.approx(1000 * failures / units)
    assert evidence["implied_occurrence"] == level
    assert evidence["status"] == ("consistent" if level == 4 else "suggests_change")


def test_the_upper_bound_picks_the_level_by_default_and_matches_scipy(client):
    study = make_study(client, scale_id=_keller_scale(client)["id"])
    mode = make_mode(client, study["id"], 6, 2, 5)
    # No failures in 10,000 units: at 90 % the bound is chi2.ppf(0.9, 2) / 20,000 per unit (scipy.stats.chi2),
    # 0.230 per thousand: level 3 on the Keller/AIAG table (1 in 15,000 = 0.0667 <= 0.230 < 1 in 2,000 = 0.5).
    assert _observe(client, mode["id"], 0, 10_000, "zero").status_code == 201
    evidence = client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()
    assert evidence["observed_rate"] == 0
    assert evidence["upper_bound_rate"] == pytest.approx(1000 * chi2.ppf(0.9, 2) / 20_000, rel=1e-9)
    assert evidence["confidence"] == 0.9 and evidence["estimate"] == "upper_bound"
    assert "does not certify" in evidence["caution"]
    assert evidence["implied_occurrence"] == 3
    suggestion = evidence["occurrence_suggestion"]
    assert suggestion["occurrence"] == 3 and suggestion["current"] == 2 and suggestion["direction"] == "raise"
    assert evidence["band"] == {"value": 3, "rate_from": pytest.approx(1000 / 15_000), "rate_below": 0.5}


def test_a_resent_record_is_counted_once_and_other_figures_under_its_key_are_409(client):
    study = _observed_study(client)
    mode = make_mode(client, study["id"], 6, 4, 5)
    first = _observe(client, mode["id"], 2, 1_000, "WO-17")
    again = _observe(client, mode["id"], 2, 1_000, "WO-17")
    assert (first.status_code, again.status_code) == (201, 200)
    assert again.get_json()["id"] == first.get_json()["id"]
    assert first.headers["Location"] == f"/v1/observations/{first.get_json()['id']}"
    changed = _observe(client, mode["id"], 3, 1_000, "WO-17")
    assert changed.status_code == 409
    assert changed.headers["Content-Type"] == "application/problem+json"
    listed = client.get(f"/v1/modes/{mode['id']}/observations").get_json()["items"]
    assert [item["record_key"] for item in listed] == ["WO-17"]
    evidence = client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()
    assert (evidence["failures"], evidence["exposure"]) == (2, 1_000)


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        ({"failures": -1}, "failures"),
        ({"exposure": 0}, "exposure"),
        ({"exposure": -5}, "exposure"),
        ({"period_start": _days_ago(5), "period_end": _days_ago(20)}, "period_end"),
        ({"period_end": _days_ago(-3)}, "period_end"),
        ({"failures": 30, "exposure": 20}, "failures"),
        ({"exposure_unit": "hours"}, "exposure_unit"),
    ],
)
def test_a_malformed_observation_is_422_and_changes_nothing(client, changes, field):
    study = _observed_study(client)
    mode = make_mode(client, study["id"], 6, 4, 5)
    body = {"failures": 1, "exposure": 100, **changes}
    response = _observe(client, mode["id"], body.pop("failures"), body.pop("exposure"), "bad", **body)
    assert response.status_code == 422, response.get_json()
    assert field in {error["field"] for error in response.get_json()["errors"]}
    assert client.get(f"/v1/modes/{mode['id']}/observations").get_json()["items"] == []
    # Nothing was taken: the same key records afterwards with good figures.
    assert _observe(client, mode["id"], 1, 100, "bad").status_code == 201


def test_accepting_the_suggestion_re_rates_with_an_event_naming_the_observations(client):
    study = _observed_study(client)
    mode = make_mode(client, study["id"], 6, 4, 5)
    ids = [_observe(client, mode["id"], 1, 40, key).get_json()["id"] for key in ("a", "b")]
    # 2 failures in 80 units = 1 in 40 = 25 per thousand: level 6 (12.5 <= 25 < 50) on Keller/AIAG.
    wrong = client.post(f"/v1/modes/{mode['id']}/occurrence-suggestion/accept", json={"occurrence": 7})
    assert wrong.status_code == 409
    accepted = client.post(
        f"/v1/modes/{mode['id']}/occurrence-suggestion/accept", json={"occurrence": 6, "reason": "Reviewed in the cell"}
    )
    assert accepted.status_code == 200, accepted.get_json()
    assert accepted.get_json()["occurrence"] == 6 and accepted.get_json()["rpn"] == 6 * 6 * 5
    [event] = client.get(f"/v1/studies/{study['id']}/events?kind=rerated").get_json()["items"]
    assert event["source"] == "observations"
    assert event["observation_ids"] == ids
    assert event["reason"].startswith("Reviewed in the cell (Occurrence from observed data: 2 failures in 80 units")
    assert (event["before"]["occurrence"], event["after"]["occurrence"]) == (4, 6)
    evidence = client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()
    assert evidence["status"] == "consistent" and evidence["occurrence_suggestion"] is None
    again = client.post(f"/v1/modes/{mode['id']}/occurrence-suggestion/accept", json={"occurrence": 6})
    assert again.status_code == 409


def test_data_against_a_closed_prevention_action_marks_its_effect_not_confirmed(client):
    study = _observed_study(client)
    mode = make_mode(client, study["id"], 6, 6, 5)
    owner = {"name": "Ines Moreau", "email": "ines@example.com"}
    action = make_action(client, mode["id"], title="Add a guide pin", owner=owner, due_date="2030-01-01")
    closed = client.post(f"/v1/actions/{action['id']}/close", json={"result": {"occurrence": 3}, "evidence": EVIDENCE})
    assert closed.status_code == 200, closed.get_json()
    effect_url = f"/v1/studies/{study['id']}/actions/effect"
    assert client.get(effect_url).get_json()["items"][0]["data_check"] == "no_data"
    # 1 failure in 100 units = 10 per thousand: level 5 on Keller/AIAG, above the claimed 3.
    assert _observe(client, mode["id"], 1, 100, "after-fix").status_code == 201
    evidence = client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()
    assert evidence["drift"] is True and evidence["drift_since"] is not None
    assert evidence["occurrence_suggestion"]["direction"] == "raise"
    assert client.get(effect_url).get_json()["items"][0]["data_check"] == "not_confirmed_by_data"
    listed = client.get(f"/v1/studies/{study['id']}/occurrence-evidence").get_json()
    assert [item["mode_id"] for item in listed["items"]] == [mode["id"]]
    assert "qualified people" in listed["caution"]
    accepted = client.post(f"/v1/modes/{mode['id']}/occurrence-suggestion/accept", json={"occurrence": 5})
    assert accepted.status_code == 200
    evidence = client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()
    assert evidence["drift"] is False and evidence["drift_since"] is None
    assert client.get(effect_url).get_json()["items"][0]["data_check"] == "consistent_with_data"


def test_observations_by_the_modes_external_reference(client):
    study = _observed_study(client)
    mode = make_mode(client, study["id"], 6, 4, 5, external_ref={"system": "cmms", "key": "ASSET-9"})
    body = {
        "failures": 0,
        "exposure": 500,
        "period_start": _days_ago(40),
        "period_end": _days_ago(10),
        "source_system": "cmms",
        "record_key": "M-1",
    }
    response = client.post("/v1/modes/by-ref/cmms/ASSET-9/observations", json=body)
    assert response.status_code == 201, response.get_json()
    assert response.get_json()["mode_id"] == mode["id"]
    listed = client.get("/v1/modes/by-ref/cmms/ASSET-9/observations").get_json()["items"]
    assert [item["id"] for item in listed] == [response.get_json()["id"]]
    assert client.post("/v1/modes/by-ref/cmms/NOPE/observations", json=body).status_code == 404


def test_a_studys_window_and_own_bands_decide_what_counts(client):
    study = make_study(client)
    mode = make_mode(client, study["id"], 6, 4, 5)
    # On the built-in scale the bands count units: hours are refused until the study sets bands of its own.
    assert _observe(client, mode["id"], 1, 100, "h1", exposure_unit="hours").status_code == 422
    own = {
        "rate_basis": "per_thousand_hours",
        "levels": [
            {"value": value, "rate_from": 0 if value == 1 else 0.01 * 2 ** (value - 2)} for value in range(1, 11)
        ],
    }
    settings_url = f"/v1/studies/{study['id']}/observation-settings"
    response = client.put(settings_url, json={"window_days": 30, "occurrence_bands": own})
    assert response.status_code == 200, response.get_json()
    assert response.get_json()["occurrence_bands"]["rate_basis"] == "per_thousand_hours"
    old = _observe(
        client, mode["id"], 5, 100, "old", exposure_unit="hours", period_start=_days_ago(90), period_end=_days_ago(31)
    )
    recent = _observe(client, mode["id"], 0, 10_000, "recent", period_start=_days_ago(20), period_end=_days_ago(1))
    assert (old.status_code, recent.status_code) == (201, 201)
    assert recent.get_json()["exposure_unit"] == "hours"
    evidence = client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()
    assert evidence["observation_ids"] == [recent.get_json()["id"]]
    assert evidence["window"]["days"] == 30
    assert evidence["rate_basis"] == "per_thousand_hours"
    bad = {"rate_basis": "per_thousand_hours", "levels": [{"value": 1, "rate_from": 0}, {"value": 2, "rate_from": 1}]}
    refused = client.put(settings_url, json={"occurrence_bands": bad})
    assert refused.status_code == 422
    assert client.get(settings_url).get_json()["window_days"] == 30


def test_a_scale_set_with_rate_from_but_no_basis_is_422(client):
    body = {
        "name": "Half banded",
        "severity": {"levels": _levels(3)},
        "occurrence": {"levels": _levels(3, {1: 0, 2: 1, 3: 2})},
        "detection": {"levels": _levels(3)},
    }
    response = client.post("/v1/scales", json=body)
    assert response.status_code == 422
    assert response.get_json()["errors"][0]["field"] == "occurrence_rate_basis"


def test_the_history_shows_the_observed_rate_beside_the_occurrence_rating(client):
    study = _observed_study(client)
    mode = make_mode(client, study["id"], 6, 4, 5)
    plain = make_mode(client, study["id"], 3, 3, 3, failure_mode="Never observed")
    # 1 failure in 100 units over the last weeks: 10 per thousand, level 5 on Keller/AIAG (2.5 <= 10 < 12.5).
    _observe(client, mode["id"], 1, 100, "w1", period_start=_days_ago(3), period_end=_days_ago(1))
    history = client.get(f"/v1/studies/{study['id']}/history", query_string={"interval": "day", "modes": "all"})
    assert history.status_code == 200, history.get_json()
    series = {item["mode_id"]: item for item in history.get_json()["modes"]}
    observed = series[mode["id"]]["observed"]
    assert series[plain["id"]]["observed"] is None
    assert observed["rate_basis"] == "per_thousand_units"
    assert observed["occurrence"][-1] == 4
    assert observed["observed_rate"][-1] == pytest.approx(10.0)
    assert observed["implied_occurrence"][-1] == 5
    assert len(observed["observed_rate"]) == len(series[mode["id"]]["rpn"])


def test_of_six_concurrent_sends_of_one_record_one_is_recorded_and_the_rest_see_it(client, live_server, auth_headers):
    study = _observed_study(client)
    mode = make_mode(client, study["id"], 6, 4, 5)
    url = f"{live_server}/v1/modes/{mode['id']}/observations"
    body = {
        "failures": 2,
        "exposure": 500,
        "period_start": _days_ago(30),
        "period_end": _days_ago(1),
        "source_system": "maint",
        "record_key": "race",
    }
    barrier, answers = threading.Barrier(6), []

    def send():
        barrier.wait()
        answer = requests.post(url, json=body, headers=auth_headers, timeout=30)
        answers.append((answer.status_code, answer.json()["id"]))

    threads = [threading.Thread(target=send) for _ in range(6)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert sorted(status for status, _ in answers) == [200] * 5 + [201]
    assert len({identifier for _, identifier in answers}) == 1
    evidence = client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()
    assert (evidence["failures"], evidence["exposure"]) == (2, 500)
