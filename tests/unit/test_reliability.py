"""Reliability helpers against JEDEC JESD85, MIL-HDBK-338B and scipy.stats.expon."""

import math

import pytest

from abate.domain import reliability as r


def test_one_fpmh_is_one_thousand_fit():
    # FIT = failures per 1e9 h (JEDEC JESD85); FPMH per 1e6 h, so 1 FPMH = 1,000 FIT
    assert r.from_per_hour(r.to_per_hour(1, "per_million_hours"), "fit") == pytest.approx(1000)


def test_mtbf_100000_hours_is_1e_5_per_hour_10_fpmh_10000_fit():
    # ../shared/REFERENCE.md "Reliability arithmetic" [C]; MTBF = 1/lambda (MIL-HDBK-338B)
    rate = 1 / 100_000
    assert r.mtbf_hours(rate) == pytest.approx(100_000)
    assert r.from_per_hour(rate, "per_million_hours") == pytest.approx(10)
    assert r.from_per_hour(rate, "fit") == pytest.approx(10_000)
    assert r.to_per_hour(10_000, "fit") == pytest.approx(1e-5)


def test_reliability_at_1000_hours_and_2e_5_per_hour():
    # R(t) = exp(-lambda t) (MIL-HDBK-338B); 0.980199 from ../shared/REFERENCE.md [C]
    assert r.reliability(2e-5, 1000) == pytest.approx(0.980199, abs=1e-6)
    assert r.mtbf_hours(2e-5) == pytest.approx(50_000)


def test_reliability_matches_scipy_exponential_survival():
    # reference library: scipy.stats.expon(scale=1/lambda).sf(t)
    stats = pytest.importorskip("scipy.stats")
    for rate, hours in [(2e-5, 1000), (1e-3, 10), (5e-6, 250_000)]:
        assert r.reliability(rate, hours) == pytest.approx(stats.expon(scale=1 / rate).sf(hours))


def test_unknown_unit_and_negative_rate_are_rejected():
    with pytest.raises(ValueError):
        r.to_per_hour(1, "per_day")
    with pytest.raises(ValueError):
        r.to_per_hour(-1, "per_hour")
    assert math.isinf(r.mtbf_hours(0))
