"""Constant-failure-rate reliability arithmetic: R(t), MTBF and failure-rate unit conversions."""

import math

# Hours (or cycles) per unit of each accepted failure-rate unit: FPMH is per 1e6 h, FIT per 1e9 h (JEDEC JESD85).
RATE_UNITS = {"per_hour": 1.0, "per_million_hours": 1e6, "fit": 1e9, "per_cycle": 1.0, "per_million_cycles": 1e6}
# What each unit counts failures against; an operating time must be given in the same basis.
RATE_BASIS = {
    "per_hour": "hours",
    "per_million_hours": "hours",
    "fit": "hours",
    "per_cycle": "cycles",
    "per_million_cycles": "cycles",
}


def to_per_hour(value: float, unit: str) -> float:
    """Convert a failure rate given in `unit` (a RATE_UNITS key) to failures per hour (per cycle for
    the cycle units)."""
    if unit not in RATE_UNITS:
        raise ValueError(f"unknown failure-rate unit {unit!r}; use one of {sorted(RATE_UNITS)}")
    if value < 0:
        raise ValueError("a failure rate cannot be negative")
    return value / RATE_UNITS[unit]


def from_per_hour(rate_per_hour: float, unit: str) -> float:
    """Express a per-hour (or per-cycle) failure rate in `unit` (a RATE_UNITS key)."""
    if unit not in RATE_UNITS:
        raise ValueError(f"unknown failure-rate unit {unit!r}; use one of {sorted(RATE_UNITS)}")
    return rate_per_hour * RATE_UNITS[unit]


def reliability(rate_per_hour: float, hours: float) -> float:
    """Probability of surviving `hours` at a constant failure rate: R(t) = exp(-lambda t)."""
    return math.exp(-rate_per_hour * hours)


def mtbf_hours(rate_per_hour: float) -> float:
    """Mean time between failures for a constant failure rate: MTBF = 1/lambda (inf when lambda is 0)."""
    return math.inf if rate_per_hour == 0 else 1.0 / rate_per_hour
