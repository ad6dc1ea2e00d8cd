"""Observed failures of a mode from maintenance and quality systems, the study's observation settings,
and accepting what the data suggests for occurrence."""

import datetime
import json

import peewee as pw

from abate.db import database
from abate.domain import events as risk_events
from abate.domain import modes
from abate.domain.clock import local_today
from abate.domain.observed_rates import ESTIMATES, evaluate, refresh_drift, study_bands
from abate.domain.rate_bands import check_band_table
from abate.domain.studies import get_study
from abate.errors import Conflict, NotFound, ValidationFailed, field_error
from abate.models import FailureMode, Observation

# Facts of the record that a resend under the same source key must repeat exactly.
_IDENTITY = ("failures", "exposure", "exposure_unit", "period_start", "period_end")
OBSERVATIONS_SOURCE = "observations"


def _check(study, data):
    """Refuse a malformed observation (negative count, no exposure, a period backwards or ahead)."""
    errors = []
    if data["failures"] < 0:
        errors.append(field_error("failures", "must not be negative"))
    if not data["exposure"] > 0:
        errors.append(field_error("exposure", "must be greater than zero"))
    elif data.get("exposure_unit") == "units" and data["failures"] > data["exposure"]:
        errors.append(field_error("failures", "cannot exceed the units produced"))
    if data["period_end"] < data["period_start"]:
        errors.append(field_error("period_end", "must not precede period_start"))
    # A day of grace: the sending system's calendar may be a time zone ahead of the study's.
    if data["period_end"] > local_today(study.timezone) + datetime.timedelta(days=1):
        errors.append(field_error("period_end", "lies in the future"))
    if errors:
        raise ValidationFailed("the observation is malformed; nothing was recorded", errors=errors)


def _exposure_unit(study, data):
    bands = study_bands(study)
    given = data.get("exposure_unit")
    if bands is not None and given is not None and given != bands.exposure_unit:
        raise ValidationFailed(
            f"the study's occurrence bands count {bands.exposure_unit}",
            errors=[field_error("exposure_unit", f"must be {bands.exposure_unit} ({bands.basis})")],
        )
    if given is None and bands is None:
        raise ValidationFailed(
            "the study has no occurrence rate bands to take the exposure unit from",
            errors=[field_error("exposure_unit", "required: units or hours")],
        )
    return given or bands.exposure_unit


def _same_record(row, mode, data):
    return row.mode_id == mode.id and all(getattr(row, name) == data[name] for name in _IDENTITY)


def record_observation(mode_id, data, *, actor):
    """Record a count of failures over an exposure; return (observation, created).

    The source system's record key is unique: a resend of the same record returns the stored one,
    the same key with other figures is a Conflict. A new drift is announced in the same transaction.
    """
    with database.atomic():
        study, mode = modes.locked_active_mode(mode_id)
        data = {**data, "exposure_unit": _exposure_unit(study, data)}
        _check(study, data)
        key = (Observation.source_system == data["source_system"]) & (Observation.record_key == data["record_key"])
        existing = Observation.get_or_none(key)
        if existing is None:
            try:
                with database.atomic():
                    observation = Observation.create(
                        mode=mode,
                        study=study,
                        note=data.get("note", ""),
                        recorded_by=actor,
                        source_system=data["source_system"],
                        record_key=data["record_key"],
                        **{name: data[name] for name in _IDENTITY},
                    )
            except pw.IntegrityError:
                existing = Observation.get(key)
            else:
                refresh_drift(study, mode)
                return observation, True
        if not _same_record(existing, mode, data):
            raise Conflict(
                f"{data['source_system']} record {data['record_key']} is already recorded with other figures "
                f"(observation {existing.id}); send a new record key for a correction"
            )
        return existing, False


def get_observation(observation_id):
    """Return the observation with this id or raise NotFound."""
    row = Observation.get_or_none(Observation.id == observation_id)
    if row is None:
        raise NotFound(f"observation {observation_id} does not exist")
    return row


def observations_query(mode_id):
    """A mode's observations, for pagination by the caller."""
    modes.get_mode(mode_id)
    return Observation.select().where(Observation.mode == mode_id)


def observation_view(row):
    """An observation as plain data."""
    return {
        "id": row.id,
        "mode_id": row.mode_id,
        "study_id": row.study_id,
        "failures": row.failures,
        "exposure": row.exposure,
        "exposure_unit": row.exposure_unit,
        "period_start": row.period_start,
        "period_end": row.period_end,
        "source_system": row.source_system,
        "record_key": row.record_key,
        "note": row.note,
        "recorded_by": row.recorded_by,
        "recorded_at": row.recorded_at,
    }


def mode_evidence(mode_id):
    """What the observations in the study's window say about a mode's occurrence."""
    mode = modes.get_mode(mode_id)
    return evaluate(get_study(mode.study_id), mode)


def _observed_modes(study):
    """The study's active modes that have at least one observation, by id."""
    return (
        FailureMode.select()
        .where(
            (FailureMode.study == study)
            & (FailureMode.status == "active")
            & FailureMode.id.in_(Observation.select(Observation.mode).where(Observation.study == study))
        )
        .order_by(FailureMode.id)
    )


def study_evidence(study_id, status=None):
    """The evidence of every active mode with observations in a study, suggestions first."""
    study = get_study(study_id)
    items = [evaluate(study, mode) for mode in _observed_modes(study)]
    if status is not None:
        items = [item for item in items if item["status"] == status]
    return sorted(items, key=lambda item: (item["occurrence_suggestion"] is None, -item["drift"], item["mode_id"]))


def accept_suggestion(mode_id, occurrence, reason, *, actor):
    """Re-rate occurrence to what the data suggests; the event names the observations it rests on.

    occurrence must be the level the suggestion names now: data that moved on since it was read is a Conflict.
    """
    with database.atomic():
        study, mode = modes.locked_active_mode(mode_id)
        evidence = evaluate(study, mode)
        suggestion = evidence["occurrence_suggestion"]
        if suggestion is None:
            raise Conflict(f"the observed data suggests no change to the occurrence of failure mode {mode_id}")
        if suggestion["occurrence"] != occurrence:
            raise Conflict(
                f"the observed data now suggests occurrence {suggestion['occurrence']}, not {occurrence}; "
                "read the evidence again"
            )
        text = f"{reason.strip()} ({suggestion['reason']})" if reason and reason.strip() else suggestion["reason"]
        return modes.update_mode(
            mode_id,
            {"occurrence": occurrence, "reason": text},
            actor=actor,
            source=OBSERVATIONS_SOURCE,
            observation_ids=suggestion["observation_ids"],
        )


def update_settings(study_id, changes):
    """Change a study's observation window, confidence, estimate or own rate bands; re-judge drift."""
    with database.atomic():
        study = risk_events.lock_study(study_id)
        if "window_days" in changes:
            study.observation_window_days = changes["window_days"]
        if "confidence" in changes:
            study.observation_confidence = changes["confidence"]
        if "estimate" in changes:
            if changes["estimate"] not in ESTIMATES:
                raise ValidationFailed("unknown estimate", errors=[field_error("estimate", ", ".join(ESTIMATES))])
            study.observation_estimate = changes["estimate"]
        if "occurrence_bands" in changes:
            study.occurrence_bands = _checked_bands(study, changes["occurrence_bands"])
        study.save(
            only=[
                type(study).observation_window_days,
                type(study).observation_confidence,
                type(study).observation_estimate,
                type(study).occurrence_bands,
            ]
        )
        for mode in _observed_modes(study):
            refresh_drift(study, mode)
    return study


def _checked_bands(study, table):
    if table is None:
        return None
    starts = {level["value"]: level["rate_from"] for level in table["levels"]}
    check_band_table(table["rate_basis"], starts, study.scale_set.occurrence_max, "occurrence_bands")
    return json.dumps(
        {"rate_basis": table["rate_basis"], "levels": [{"value": v, "rate_from": starts[v]} for v in sorted(starts)]}
    )
