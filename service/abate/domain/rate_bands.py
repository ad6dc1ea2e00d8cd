"""Occurrence rate bands: the failure rate at which each occurrence level starts, and a rate's level.

Convention (stated in the README): a level starts at its rate, inclusive, so a rate exactly on an edge
belongs to the higher level; the lowest level starts at zero. Rates are decimal fractions computed in
binary floating point, so a rate within one part in a billion of an edge counts as on it.
"""

import bisect
from dataclasses import dataclass

from abate.errors import ValidationFailed, field_error

# Each basis: the exposure it counts (units produced or hours run) and how many of them one rate refers to.
RATE_BASES = {
    "per_thousand_units": ("units", 1_000),
    "per_million_units": ("units", 1_000_000),
    "per_thousand_hours": ("hours", 1_000),
}
EXPOSURE_UNITS = ("units", "hours")
# 1 failure in 150,000 units, per thousand, is 1000 / 150000 one way and (1 / 150000) * 1000 the other.
EDGE_TOLERANCE = 1e-9


@dataclass(frozen=True)
class RateBands:
    """An occurrence scale's band table: level values ascending and the rate (in basis) each starts at."""

    basis: str
    values: tuple
    starts: tuple

    @property
    def exposure_unit(self):
        """What the basis counts: units or hours."""
        return RATE_BASES[self.basis][0]

    def per_basis(self, rate_per_exposure):
        """A rate per unit or per hour expressed in the basis (per thousand units, say)."""
        return rate_per_exposure * RATE_BASES[self.basis][1]

    def level_for(self, rate):
        """The occurrence level a rate (in basis) falls in; a rate on an edge takes the higher level."""
        return self.values[bisect.bisect_right(self.starts, rate * (1 + EDGE_TOLERANCE)) - 1]

    def band_of(self, value):
        """{value, rate_from, rate_below} of one level; rate_below is null for the top level."""
        index = self.values.index(value)
        upper = self.starts[index + 1] if index + 1 < len(self.starts) else None
        return {"value": value, "rate_from": self.starts[index], "rate_below": upper}

    def as_dict(self):
        """The table as plain data: {rate_basis, levels: [{value, rate_from}]}."""
        return {
            "rate_basis": self.basis,
            "levels": [{"value": v, "rate_from": s} for v, s in zip(self.values, self.starts, strict=True)],
        }


def check_band_table(basis, starts_by_value, top_value, field):
    """Validate a band table for an occurrence scale 1..top_value; raise ValidationFailed naming field.

    starts_by_value maps each level value to its start rate (in the basis). Every level needs one,
    level 1 starts at 0 and the starts rise strictly with the level.
    """
    errors = []
    if basis not in RATE_BASES:
        errors.append(field_error(f"{field}.rate_basis", f"must be one of {', '.join(RATE_BASES)}"))
    missing = [value for value in range(1, top_value + 1) if starts_by_value.get(value) is None]
    if missing:
        errors.append(field_error(f"{field}.levels", f"every occurrence level needs rate_from; missing for {missing}"))
    elif starts_by_value[1] != 0:
        errors.append(field_error(f"{field}.levels", "the lowest occurrence level must start at rate 0"))
    else:
        starts = [starts_by_value[value] for value in range(1, top_value + 1)]
        if any(later <= earlier for earlier, later in zip(starts, starts[1:], strict=False)):
            errors.append(field_error(f"{field}.levels", "rate_from must rise strictly with the occurrence level"))
    extra = sorted(set(starts_by_value) - set(range(1, top_value + 1)))
    if extra:
        errors.append(field_error(f"{field}.levels", f"levels {extra} lie outside the occurrence scale"))
    if errors:
        raise ValidationFailed("the occurrence rate bands are incomplete or out of order", errors=errors)
    return RateBands(
        basis, tuple(range(1, top_value + 1)), tuple(float(starts_by_value[v]) for v in range(1, top_value + 1))
    )
