"""Rating scale sets: creating, reading and guarding them, and checking ratings against them."""

from abate.db import database
from abate.domain import scoring
from abate.domain.rate_bands import RateBands, check_band_table
from abate.domain.versions import check_precondition, save_new_version, scale_set_tag
from abate.errors import NotFound, RatingOutOfScale, ScaleInUse, ValidationFailed, field_error
from abate.models import RATING_DIMENSIONS, ScaleLevel, ScaleSet, Study

MIN_LEVELS, MAX_LEVELS = 2, 10


def get_scale_set(scale_id):
    """Return the scale set with this id or raise NotFound."""
    scale_set = ScaleSet.get_or_none(ScaleSet.id == scale_id)
    if scale_set is None:
        raise NotFound(f"scale set {scale_id} does not exist")
    return scale_set


def find_scale_set_by_name(name):
    """Return the scale set with this name or raise NotFound."""
    scale_set = ScaleSet.get_or_none(ScaleSet.name == name)
    if scale_set is None:
        raise NotFound(f"no scale set is named {name!r}")
    return scale_set


def _check_levels(data):
    """Each dimension needs levels 1..max, each value once, with 2 <= max <= 10."""
    errors = []
    for dimension in RATING_DIMENSIONS:
        levels = data[dimension]["levels"]
        values = sorted(level["value"] for level in levels)
        declared_max = data[dimension].get("max", values[-1] if values else 0)
        if not MIN_LEVELS <= declared_max <= MAX_LEVELS:
            errors.append(field_error(f"{dimension}.max", f"must be between {MIN_LEVELS} and {MAX_LEVELS}"))
        elif values != list(range(1, declared_max + 1)):
            errors.append(
                field_error(f"{dimension}.levels", f"needs exactly one level for every value 1..{declared_max}")
            )
    if errors:
        raise ValidationFailed("the scale set's levels are incomplete or out of range", errors=errors)


def _check_defaults(scale_set):
    errors = []
    if not 1 <= scale_set.default_action_threshold <= scale_set.max_rpn:
        errors.append(field_error("default_action_threshold", f"must be between 1 and {scale_set.max_rpn}"))
    if not 1 <= scale_set.default_severity_threshold <= scale_set.severity_max:
        errors.append(field_error("default_severity_threshold", f"must be between 1 and {scale_set.severity_max}"))
    if errors:
        raise ValidationFailed("the scale set's default policy lies outside its scales", errors=errors)


def _check_rate_bands(data):
    """Only occurrence levels carry rate_from, all of them exactly when the set names a rate basis."""
    stray = [
        field_error(f"{dimension}.levels", "only occurrence levels carry rate_from")
        for dimension in ("severity", "detection")
        if any(level.get("rate_from") is not None for level in data[dimension]["levels"])
    ]
    if stray:
        raise ValidationFailed("rate bands belong to the occurrence scale", errors=stray)
    starts = {level["value"]: level.get("rate_from") for level in data["occurrence"]["levels"]}
    basis = data.get("occurrence_rate_basis")
    if basis is None:
        if any(start is not None for start in starts.values()):
            raise ValidationFailed(
                "occurrence levels carry rate_from but the scale set names no rate basis",
                errors=[field_error("occurrence_rate_basis", "required when occurrence levels carry rate_from")],
            )
        return
    check_band_table(basis, starts, max(starts), "occurrence")


def rate_bands_of(scale_set):
    """The scale set's occurrence rate bands, or None when it has none."""
    if scale_set.occurrence_rate_basis is None:
        return None
    levels = scale_set.levels.where(ScaleLevel.dimension == "occurrence").order_by(ScaleLevel.value)
    return RateBands(
        scale_set.occurrence_rate_basis,
        tuple(level.value for level in levels),
        tuple(level.rate_from for level in levels),
    )


def _apply(scale_set, data):
    """Copy validated fields onto scale_set (unsaved) and return its levels as unsaved rows."""
    _check_levels(data)
    _check_rate_bands(data)
    scale_set.occurrence_rate_basis = data.get("occurrence_rate_basis")
    scale_set.name = data["name"]
    scale_set.description = data.get("description", scale_set.description or "")
    for dimension in RATING_DIMENSIONS:
        setattr(scale_set, f"{dimension}_max", max(level["value"] for level in data[dimension]["levels"]))
    scale_set.default_action_threshold = data.get("default_action_threshold") or scoring.default_action_threshold(
        scale_set.max_rpn
    )
    scale_set.default_severity_threshold = data.get("default_severity_threshold") or scoring.default_severity_threshold(
        scale_set.severity_max
    )
    _check_defaults(scale_set)
    return [
        ScaleLevel(
            dimension=dimension,
            value=level["value"],
            label=level["label"],
            criteria=level.get("criteria", ""),
            rate_from=level.get("rate_from"),
        )
        for dimension in RATING_DIMENSIONS
        for level in sorted(data[dimension]["levels"], key=lambda level: level["value"])
    ]


def _ensure_unique_name(name, own_id=None):
    query = ScaleSet.select().where(ScaleSet.name == name)
    if own_id is not None:
        query = query.where(ScaleSet.id != own_id)
    if query.exists():
        raise ValidationFailed("another scale set has this name", errors=[field_error("name", "already taken")])


def create_scale_set(data, builtin=False):
    """Create a scale set from {name, description?, severity/occurrence/detection: {max?, levels}}."""
    with database.atomic():
        scale_set = ScaleSet(builtin=builtin)
        levels = _apply(scale_set, data)
        _ensure_unique_name(scale_set.name)
        scale_set.save()
        for level in levels:
            level.scale_set = scale_set
        ScaleLevel.bulk_create(levels)
    return scale_set


def replace_scale_set(scale_id, data, expected_tags=None):
    """Rewrite a scale set that no study uses yet; one in use raises ScaleInUse."""
    with database.atomic():
        scale_set = get_scale_set(scale_id)
        check_precondition(scale_set_tag(scale_set), expected_tags)
        if scale_set.builtin or Study.select().where(Study.scale_set == scale_set).exists():
            raise ScaleInUse(
                "this scale set is built in or used by a study; create a new scale set instead, "
                "so that the studies' history keeps the scales it was rated on"
            )
        levels = _apply(scale_set, data)
        _ensure_unique_name(scale_set.name, own_id=scale_set.id)
        save_new_version(scale_set)
        ScaleLevel.delete().where(ScaleLevel.scale_set == scale_set).execute()
        for level in levels:
            level.scale_set = scale_set
        ScaleLevel.bulk_create(levels)
    return scale_set


def scale_set_view(scale_set, in_use=None):
    """The scale set as plain data for the API and exports."""
    if in_use is None:
        in_use = scale_set.builtin or bool(ScaleSet.in_use_ids([scale_set.id]))
    levels = {dimension: [] for dimension in RATING_DIMENSIONS}
    for level in scale_set.levels.order_by(ScaleLevel.dimension, ScaleLevel.value):
        entry = {"value": level.value, "label": level.label, "criteria": level.criteria}
        if level.dimension == "occurrence":
            entry["rate_from"] = level.rate_from
        levels[level.dimension].append(entry)
    view = {
        "id": scale_set.id,
        "name": scale_set.name,
        "description": scale_set.description,
        "builtin": scale_set.builtin,
        "default_action_threshold": scale_set.default_action_threshold,
        "default_severity_threshold": scale_set.default_severity_threshold,
        "max_rpn": scale_set.max_rpn,
        "occurrence_rate_basis": scale_set.occurrence_rate_basis,
        "in_use": in_use,
        "version": scale_set.version,
        "created_at": scale_set.created_at,
        "updated_at": scale_set.updated_at,
    }
    for dimension in RATING_DIMENSIONS:
        view[dimension] = {"max": scale_set.maximum(dimension), "levels": levels[dimension]}
    return view


def list_scale_sets():
    """Every scale set, oldest first, as views (scale sets are few; no pagination needed)."""
    scale_sets = list(ScaleSet.select().order_by(ScaleSet.id))
    used = ScaleSet.in_use_ids(scale_set.id for scale_set in scale_sets)
    return [scale_set_view(s, in_use=s.builtin or s.id in used) for s in scale_sets]


def check_ratings(scale_set, ratings):
    """Raise RatingOutOfScale naming each rating in ratings (a dict) outside the scale set."""
    errors = [
        field_error(dimension, f"must be between 1 and {scale_set.maximum(dimension)} on scale set {scale_set.name!r}")
        for dimension in RATING_DIMENSIONS
        if dimension in ratings and not 1 <= ratings[dimension] <= scale_set.maximum(dimension)
    ]
    if errors:
        raise RatingOutOfScale("a rating lies outside the study's scale", errors=errors)
