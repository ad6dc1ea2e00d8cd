"""What observed failures say about a mode's occurrence: the rate over the study's window, its upper
confidence bound, the level it implies, a suggestion where that differs, and drift against closed actions."""

import datetime
import json

from abate.domain import webhooks
from abate.domain.clock import local_today, utcnow
from abate.domain.confidence import upper_rate_bound
from abate.domain.rate_bands import check_band_table
from abate.domain.scales import rate_bands_of
from abate.models import CorrectiveAction, DriftNotice, Observation

ESTIMATES = ("upper_bound", "observed")
STATUSES = ("no_rate_bands", "no_observations", "consistent", "suggests_change")
DATA_CHECKS = ("consistent_with_data", "not_confirmed_by_data", "no_data")


def study_bands(study):
    """The rate bands a study judges occurrence by: its own table, else its scale set's, else None."""
    if study.occurrence_bands:
        table = json.loads(study.occurrence_bands)
        starts = {level["value"]: level["rate_from"] for level in table["levels"]}
        return check_band_table(table["rate_basis"], starts, study.scale_set.occurrence_max, "occurrence_bands")
    return rate_bands_of(study.scale_set)


def settings_view(study):
    """The study's observation settings as plain data."""
    return {
        "window_days": study.observation_window_days,
        "confidence": study.observation_confidence,
        "estimate": study.observation_estimate,
        "occurrence_bands": json.loads(study.occurrence_bands) if study.occurrence_bands else None,
    }


def window_of(study, today=None):
    """(first, last) local dates of the study's observation window ending today: periods ending in it count."""
    today = today or local_today(study.timezone)
    return today - datetime.timedelta(days=study.observation_window_days - 1), today


def observations_in_window(mode, first, last):
    """The mode's observations whose period ends within [first, last], oldest first."""
    return list(
        Observation.select()
        .where((Observation.mode == mode) & (Observation.period_end >= first) & (Observation.period_end <= last))
        .order_by(Observation.period_end, Observation.id)
    )


def claims_occurrence_effect(action):
    """A closed action that was meant to lower occurrence, or whose verified result rated it."""
    return action.status == "closed" and (action.kind == "prevention" or action.result_occurrence is not None)


def _occurrence_claims(mode):
    actions = CorrectiveAction.select().where((CorrectiveAction.mode == mode) & (CorrectiveAction.status == "closed"))
    return [action for action in actions.order_by(CorrectiveAction.id) if claims_occurrence_effect(action)]


def rate_figures(bands, observations, confidence):
    """Failures, exposure, observed rate and upper bound (rates in the bands' basis) of some observations."""
    failures = sum(row.failures for row in observations)
    exposure = sum(row.exposure for row in observations)
    return {
        "failures": failures,
        "exposure": exposure,
        "observed_rate": bands.per_basis(failures / exposure),
        "upper_bound_rate": bands.per_basis(upper_rate_bound(failures, exposure, confidence)),
    }


def evaluate(study, mode, today=None):
    """The evidence on a mode's occurrence from its observations in the study's window, as plain data."""
    first, last = window_of(study, today)
    bands = study_bands(study)
    evidence = {
        "mode_id": mode.id,
        "occurrence": mode.occurrence,
        "window": {"days": study.observation_window_days, "first_day": first, "last_day": last},
        "confidence": study.observation_confidence,
        "estimate": study.observation_estimate,
        "rate_basis": bands.basis if bands else None,
        "exposure_unit": bands.exposure_unit if bands else None,
        "observation_ids": [],
        "ignored_observation_ids": [],
        "failures": None,
        "exposure": None,
        "observed_rate": None,
        "upper_bound_rate": None,
        "implied_occurrence": None,
        "band": None,
        "occurrence_suggestion": None,
        "drift": False,
        "drift_since": mode.occurrence_drift_since,
    }
    if bands is None:
        return {**evidence, "status": "no_rate_bands"}
    rows = observations_in_window(mode, first, last)
    counted = [row for row in rows if row.exposure_unit == bands.exposure_unit]
    evidence["observation_ids"] = [row.id for row in counted]
    evidence["ignored_observation_ids"] = [row.id for row in rows if row.exposure_unit != bands.exposure_unit]
    if not counted:
        return {**evidence, "status": "no_observations"}
    figures = rate_figures(bands, counted, study.observation_confidence)
    rate = figures["upper_bound_rate" if study.observation_estimate == "upper_bound" else "observed_rate"]
    implied = bands.level_for(rate)
    evidence.update(figures, implied_occurrence=implied, band=bands.band_of(implied))
    if implied == mode.occurrence:
        return {**evidence, "status": "consistent"}
    direction = "raise" if implied > mode.occurrence else "lower"
    evidence["occurrence_suggestion"] = {
        "occurrence": implied,
        "current": mode.occurrence,
        "direction": direction,
        "rate": rate,
        "observation_ids": evidence["observation_ids"],
        "reason": suggestion_reason(evidence, rate, implied),
    }
    evidence["drift"] = direction == "raise" and bool(_occurrence_claims(mode))
    return {**evidence, "status": "suggests_change"}


def suggestion_reason(evidence, rate, implied):
    """The re-rating reason an accepted suggestion records: the data and the level it implies."""
    estimate = (
        f"upper {evidence['confidence']:.0%} bound {rate:.4g}"
        if evidence["estimate"] == "upper_bound"
        else f"observed rate {rate:.4g}"
    )
    ids = ", ".join(str(identifier) for identifier in evidence["observation_ids"])
    return (
        f"Occurrence from observed data: {evidence['failures']} failures in {evidence['exposure']:g} "
        f"{evidence['exposure_unit']} ({evidence['window']['first_day']} to {evidence['window']['last_day']}), "
        f"{estimate} {evidence['rate_basis'].replace('_', ' ')} implies level {implied}; observations {ids}"
    )


def data_check(evidence):
    """How a closed action's claimed occurrence effect stands against the mode's evidence."""
    if evidence["status"] in ("no_rate_bands", "no_observations"):
        return "no_data"
    return (
        "not_confirmed_by_data" if evidence["implied_occurrence"] > evidence["occurrence"] else "consistent_with_data"
    )


def refresh_drift(study, mode, now=None):
    """Re-judge a mode's drift after its ratings or observations changed; announce a new drift once.

    A new drift queues the mode.occurrence_drift webhook and a notice for each claiming action's owner's
    next digest, in the caller's transaction.
    """
    if not Observation.select().where(Observation.mode == mode).exists():
        if mode.occurrence_drift_since is not None:
            _set_drift(mode, None)
        return
    evidence = evaluate(study, mode)
    if evidence["drift"] == (mode.occurrence_drift_since is not None):
        return
    if not evidence["drift"]:
        _set_drift(mode, None)
        return
    now = now or utcnow()
    _set_drift(mode, now)
    claims = _occurrence_claims(mode)
    webhooks.enqueue_event("mode.occurrence_drift", drift_payload(study, mode, evidence, claims), occurred_at=now)
    _raise_notices(study, mode, evidence, claims, now)


def _set_drift(mode, since):
    mode.occurrence_drift_since = since
    mode.save(only=[type(mode).occurrence_drift_since])


def drift_payload(study, mode, evidence, claims):
    """The webhook data of a drift: the mode, the actions whose effect the data does not confirm, the evidence."""
    return {
        "study_id": study.id,
        "mode_id": mode.id,
        "failure_mode": mode.failure_mode,
        "occurrence": mode.occurrence,
        "implied_occurrence": evidence["implied_occurrence"],
        "rate_basis": evidence["rate_basis"],
        "observed_rate": evidence["observed_rate"],
        "upper_bound_rate": evidence["upper_bound_rate"],
        "confidence": evidence["confidence"],
        "observation_ids": evidence["observation_ids"],
        "action_ids": [action.id for action in claims],
    }


def _raise_notices(study, mode, evidence, claims, now):
    for action in claims:
        line = {
            "action_id": action.id,
            "title": action.title,
            "study_id": study.id,
            "study_title": study.title,
            "mode_id": mode.id,
            "failure_mode": mode.failure_mode,
            "occurrence": mode.occurrence,
            "implied_occurrence": evidence["implied_occurrence"],
            "rate": evidence["upper_bound_rate" if evidence["estimate"] == "upper_bound" else "observed_rate"],
            "rate_basis": evidence["rate_basis"],
            "rpn": mode.rpn,
        }
        DriftNotice.create(
            mode=mode,
            action=action,
            recipient=action.owner_email.strip().lower(),
            name=action.owner_name,
            payload=json.dumps(line),
            raised_at=now,
        )


def observed_series(study, mode_ids, lookups):
    """{mode_id: {rate_basis, observed_rate: [...], implied_occurrence: [...]}} at each lookup instant.

    Only modes among mode_ids with observations in the bands' unit appear; at each instant the window
    ends on the local day just before it, and a point without counted data is None.
    """
    bands = study_bands(study)
    if bands is None or not mode_ids:
        return {}
    rows = (
        Observation.select()
        .where(Observation.mode.in_(list(mode_ids)) & (Observation.exposure_unit == bands.exposure_unit))
        .order_by(Observation.period_end, Observation.id)
    )
    by_mode = {}
    for row in rows:
        by_mode.setdefault(row.mode_id, []).append(row)
    series = {}
    for mode_id, observed in by_mode.items():
        rates, levels = [], []
        for instant in lookups:
            last = local_today(study.timezone, instant - datetime.timedelta(microseconds=1))
            first = last - datetime.timedelta(days=study.observation_window_days - 1)
            counted = [row for row in observed if first <= row.period_end <= last]
            if not counted:
                rates.append(None)
                levels.append(None)
                continue
            figures = rate_figures(bands, counted, study.observation_confidence)
            rates.append(figures["observed_rate"])
            chosen = figures["upper_bound_rate" if study.observation_estimate == "upper_bound" else "observed_rate"]
            levels.append(bands.level_for(chosen))
        series[mode_id] = {"rate_basis": bands.basis, "observed_rate": rates, "implied_occurrence": levels}
    return series
