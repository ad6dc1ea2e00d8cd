"""Observed failures through the thin client on a live server: record, resend, evidence, accept."""

import datetime

import pytest
from scipy.stats import chi2

from abate_client import Conflict, ValidationFailed
from client.conftest import TODAY, new_mode, new_study

PERIOD = {"period_start": TODAY - datetime.timedelta(days=30), "period_end": TODAY - datetime.timedelta(days=1)}


def test_a_maintenance_system_reports_failures_and_the_team_accepts_the_suggested_occurrence(api):
    study = new_study(api)
    mode = new_mode(api, study, 7, 2, 5, external_ref={"system": "cmms", "key": "PRESS-4"})
    first = api.observations.record_by_ref(
        "cmms", "PRESS-4", failures=4, exposure=2_000, source_system="cmms", record_key="WO-88", **PERIOD
    )
    again = api.observations.record(
        mode.id, failures=4, exposure=2_000, source_system="cmms", record_key="WO-88", **PERIOD
    )
    assert again.id == first.id and first.exposure_unit == "units" and first.period_end == PERIOD["period_end"]
    assert [row.id for row in api.observations.list(mode.id)] == [first.id]

    evidence = api.observations.evidence(mode.id)
    # 4 failures in 2,000 units: the 90 % upper bound is chi2.ppf(0.9, 10) / 4,000 per unit (scipy.stats.chi2),
    # 2.00 per thousand, which starts level 7 of the built-in bands.
    assert evidence.upper_bound_rate == pytest.approx(1000 * chi2.ppf(0.9, 10) / 4_000, rel=1e-9)
    assert evidence.observed_rate == pytest.approx(2.0)
    suggested = evidence.occurrence_suggestion["occurrence"]
    assert suggested == evidence.implied_occurrence > mode.occurrence
    assert [item.mode_id for item in api.observations.study_evidence(study.id, status="suggests_change")] == [mode.id]

    with pytest.raises(Conflict):
        api.observations.accept(mode.id, suggested + 1)
    rerated = api.observations.accept(mode.id, suggested, reason="Agreed in the weekly review")
    assert rerated.occurrence == suggested
    [event] = api.events.list(study.id, kind="rerated")
    assert event.source == "observations" and event.observation_ids == [first.id]


def test_a_malformed_observation_raises_validation_failed(api):
    mode = new_mode(api, new_study(api), 7, 2, 5)
    with pytest.raises(ValidationFailed) as caught:
        api.observations.record(mode.id, failures=-1, exposure=0, source_system="cmms", record_key="x", **PERIOD)
    assert {error["field"] for error in caught.value.errors} >= {"failures", "exposure"}
