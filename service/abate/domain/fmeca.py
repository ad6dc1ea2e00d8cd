"""A study's quantitative criticality (MIL-STD-1629A Task 102): severity classes, the modes' inputs and
their Cm, share and level, snapshots for risk events, and the checks on an item's failure mode ratios."""

import json
import math

from abate.domain import criticality, reliability
from abate.errors import ValidationFailed, field_error
from abate.models import FailureMode

TIME_UNITS = ("hours", "cycles")
# The columns a snapshot keeps; the failure rate is stored per hour or per cycle, the unit is for display.
STORED_FIELDS = (
    "failure_rate",
    "failure_rate_unit",
    "mode_ratio",
    "effect_probability",
    "operating_time",
    "operating_time_unit",
)
# What Cm = beta * alpha * lambda_p * t needs, by the names the API uses.
CM_INPUTS = ("failure_rate", "mode_ratio", "effect_probability", "operating_time")
SIGNIFICANT_DIGITS = 12


def rounded(value):
    """A converted figure without the float noise of the unit conversion (12 significant digits)."""
    if value is None or value == 0 or not math.isfinite(value):
        return value
    return round(value, SIGNIFICANT_DIGITS - 1 - math.floor(math.log10(abs(value))))


# --- severity classes -------------------------------------------------------------------------------


def severity_classes_of(study):
    """{"I": [ratings...], ...} as the study defines them, or None."""
    return json.loads(study.severity_classes) if study.severity_classes else None


def class_by_rating(study):
    """{severity rating: class} from the study's map (empty when it has none)."""
    return {rating: name for name, ratings in (severity_classes_of(study) or {}).items() for rating in ratings}


def _checked_classes(mapping, scale_set):
    """The map in canonical JSON; every severity rating of the scale must fall in exactly one class."""
    field = "criticality.severity_classes"
    unknown = sorted(set(mapping) - set(criticality.SEVERITY_CLASSES))
    if unknown:
        raise ValidationFailed(
            "unknown severity classes", errors=[field_error(field, f"classes are I..IV, not {', '.join(unknown)}")]
        )
    seen, problems = {}, []
    for name in criticality.SEVERITY_CLASSES:
        for rating in mapping.get(name, []):
            if not 1 <= rating <= scale_set.severity_max:
                problems.append(f"{rating} is not a severity on this scale (1..{scale_set.severity_max})")
            elif rating in seen:
                problems.append(f"severity {rating} is in both class {seen[rating]} and class {name}")
            seen.setdefault(rating, name)
    missing = [rating for rating in range(1, scale_set.severity_max + 1) if rating not in seen]
    if missing:
        problems.append(f"severities {missing} belong to no class; every severity needs one")
    if problems:
        raise ValidationFailed(
            "the severity classes must cover the severity scale once",
            errors=[field_error(field, problem) for problem in problems],
        )
    canonical = {name: sorted(mapping[name]) for name in criticality.SEVERITY_CLASSES if mapping.get(name)}
    return json.dumps(canonical, separators=(",", ":"))


def apply_study_settings(study, settings, scale_set):
    """Set the study's switch and severity classes from {"enabled"?, "severity_classes"?} (unsaved)."""
    if settings.get("severity_classes") is not None:
        study.severity_classes = _checked_classes(settings["severity_classes"], scale_set)
    elif "severity_classes" in settings:
        study.severity_classes = None
    if "enabled" in settings:
        study.criticality_enabled = settings["enabled"]
    if study.criticality_enabled and not study.severity_classes:
        raise ValidationFailed(
            "quantitative criticality needs the study's map from severity ratings to classes I..IV",
            errors=[field_error("criticality.severity_classes", "required while criticality is enabled")],
        )


def study_settings_view(study):
    """The study's criticality switch and severity classes as plain data."""
    return {"enabled": study.criticality_enabled, "severity_classes": severity_classes_of(study)}


# --- a mode's inputs --------------------------------------------------------------------------------


def _set_failure_rate(mode, data, errors):
    unit = data.get("failure_rate_unit") or mode.failure_rate_unit or "per_hour"
    if "failure_rate" in data:
        value = data["failure_rate"]
        mode.failure_rate = None if value is None else reliability.to_per_hour(value, unit)
    elif (
        mode.failure_rate is not None and reliability.RATE_BASIS[unit] != reliability.RATE_BASIS[mode.failure_rate_unit]
    ):
        errors.append(field_error("failure_rate_unit", "a change between hours and cycles needs a new failure_rate"))
    mode.failure_rate_unit = None if mode.failure_rate is None else unit


def _set_effect_probability(mode, data, errors):
    category, beta = data.get("effect_category"), data.get("effect_probability")
    if category is None and beta is None:
        mode.effect_probability = None
        return
    try:
        mode.effect_probability = criticality.effect_probability(category, beta)
    except ValueError as error:
        errors.append(field_error("effect_probability", str(error)))


def _set_operating_time(mode, data):
    unit = data.get("operating_time_unit") or mode.operating_time_unit or "hours"
    if "operating_time" in data:
        mode.operating_time = data["operating_time"]
    mode.operating_time_unit = None if mode.operating_time is None else unit


def apply_mode_inputs(mode, data):
    """Set the Task 102 inputs that data names (None clears one) on the mode, unsaved.

    Ranges are the schema's to check; here: a named effect category must fit its number, and the
    failure rate and operating time must count the same thing (hours or cycles).
    """
    errors = []
    if "failure_rate" in data or "failure_rate_unit" in data:
        _set_failure_rate(mode, data, errors)
    if "mode_ratio" in data:
        mode.mode_ratio = data["mode_ratio"]
    if "effect_probability" in data or "effect_category" in data:
        _set_effect_probability(mode, data, errors)
    if "operating_time" in data or "operating_time_unit" in data:
        _set_operating_time(mode, data)
    if mode.failure_rate is not None and mode.operating_time is not None:
        basis = reliability.RATE_BASIS[mode.failure_rate_unit]
        if basis != mode.operating_time_unit:
            errors.append(
                field_error("operating_time_unit", f"the failure rate counts failures per {basis[:-1]}; give {basis}")
            )
    if errors:
        raise ValidationFailed("the criticality inputs do not fit together", errors=errors)


def has_inputs(mode):
    """True when the mode carries any Task 102 input."""
    return any(getattr(mode, name) is not None for name in CM_INPUTS)


def mode_criticality_of(values):
    """Cm from stored values (a mode, or a snapshot's namespace); None while an input is missing."""
    inputs = [getattr(values, name) for name in CM_INPUTS]
    if any(value is None for value in inputs):
        return None
    rate, alpha, beta, hours = inputs
    return criticality.mode_criticality(beta, alpha, rate, hours)


def snapshot(mode):
    """The mode's stored inputs and Cm as JSON for a risk event, or None when it has no input."""
    if mode is None or not has_inputs(mode):
        return None
    values = {name: getattr(mode, name) for name in STORED_FIELDS}
    values["mode_criticality"] = mode_criticality_of(mode)
    return json.dumps(values, separators=(",", ":"))


def restore(mode, stored):
    """Put a snapshot's inputs (None: no inputs) back on the mode, unsaved."""
    values = json.loads(stored) if stored else {}
    for name in STORED_FIELDS:
        setattr(mode, name, values.get(name))


def inputs_view(mode):
    """The mode's inputs as the API shows them: the failure rate in the unit it was entered in."""
    rate = mode.failure_rate
    return {
        "failure_rate": None if rate is None else rounded(reliability.from_per_hour(rate, mode.failure_rate_unit)),
        "failure_rate_unit": mode.failure_rate_unit,
        "mode_ratio": mode.mode_ratio,
        "effect_probability": mode.effect_probability,
        "effect_category": (
            None if mode.effect_probability is None else criticality.effect_category(mode.effect_probability)
        ),
        "operating_time": mode.operating_time,
        "operating_time_unit": mode.operating_time_unit,
    }


# --- items and their failure mode ratios --------------------------------------------------------------


def item_key(text):
    """Modes belong to one item when their item texts agree but for surrounding spaces."""
    return (text or "").strip()


def ratio_sums(study, leave_out=None):
    """{item: sum of the failure mode ratios of its active modes}, without the mode leave_out."""
    query = FailureMode.select(FailureMode.id, FailureMode.item, FailureMode.mode_ratio).where(
        (FailureMode.study == study) & (FailureMode.status == "active") & FailureMode.mode_ratio.is_null(False)
    )
    sums = {}
    for row in query.namedtuples():
        if row.id != leave_out:
            sums[item_key(row.item)] = sums.get(item_key(row.item), 0.0) + row.mode_ratio
    return sums


def ratio_warning(item, total):
    """The warning for an item whose ratios sum to less than 1 (None when they sum to 1)."""
    try:
        return criticality.check_alpha_sum(item, [total])
    except ValidationFailed:
        return None


def check_item_ratios(study, mode):
    """Refuse a mode whose ratio would take its item's sum above 1 (422 naming the item and the sum)."""
    if mode.mode_ratio is None or mode.status != "active":
        return
    item = item_key(mode.item)
    others = ratio_sums(study, leave_out=mode.id).get(item, 0.0)
    try:
        criticality.check_alpha_sum(item, [others, mode.mode_ratio])
    except ValidationFailed as error:
        raise ValidationFailed(
            error.detail,
            errors=[field_error("mode_ratio", error.detail)],
            item=item,
            ratio_sum=others + mode.mode_ratio,
        ) from error


def _reliability_figures(mode):
    """The item's survival probability over the operating time, R(t) = exp(-lambda t), and its mean
    time (hours or cycles) between failures, 1/lambda, for a constant failure rate."""
    rate, time = mode.failure_rate, mode.operating_time
    usable = (
        rate is not None
        and time is not None
        and reliability.RATE_BASIS[mode.failure_rate_unit] == mode.operating_time_unit
    )
    return {
        "reliability": reliability.reliability(rate, time) if usable else None,
        "mean_time_between_failures": None if rate in (None, 0) else reliability.mtbf_hours(rate),
    }


def mode_figures(mode, classes, sums):
    """A mode's severity class, Cm, share and level (classes: class_by_rating; sums: ratio_sums)."""
    alpha = mode.mode_ratio
    total = sums.get(item_key(mode.item)) if mode.status == "active" else None
    warning = ratio_warning(item_key(mode.item), total) if alpha is not None and total is not None else None
    return {
        "severity_class": classes.get(mode.severity),
        "mode_criticality": mode_criticality_of(mode),
        # The mode's share of the item's failure probability is its failure mode ratio (Task 102).
        "share": alpha,
        "level": None if alpha is None else criticality.level_for_share(alpha),
        **_reliability_figures(mode),
        "missing": [name for name in CM_INPUTS if getattr(mode, name) is None],
        "warnings": [warning] if warning else [],
    }
