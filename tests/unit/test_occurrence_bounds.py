"""Confidence bounds on observed failure rates and the rate-to-level mapping of occurrence bands."""

import math

import pytest
from scipy.stats import chi2, norm

from abate.domain.builtin_scales import BUILTIN_OCCURRENCE_BANDS
from abate.domain.confidence import chi2_quantile, upper_rate_bound
from abate.domain.rate_bands import check_band_table
from abate.errors import ValidationFailed


@pytest.mark.parametrize("failures", [0, 1, 2, 3, 5, 10, 49, 200, 5000])
@pytest.mark.parametrize("confidence", [0.5, 0.6, 0.8, 0.9, 0.95, 0.99])
def test_the_chi_square_quantile_matches_scipy(failures, confidence):
    # Reference: scipy.stats.chi2.ppf (a general-purpose reference library).
    expected = chi2.ppf(confidence, 2 * failures + 2)
    assert chi2_quantile(confidence, 2 * failures + 2) == pytest.approx(expected, rel=1e-9)


def test_zero_failures_in_a_million_hours_bound_the_rate_as_published():
    # lambda_upper = chi2(CL; 2r + 2) / (2T); r = 0, T = 1e6 h: 9.163e-7 /h at 60 % and 2.303e-6 /h at 90 %
    # (check values of the issue, confirmed with scipy.stats.chi2.ppf(0.6, 2) / 2e6 and (0.9, 2) / 2e6).
    # The published figures carry four significant digits.
    assert upper_rate_bound(0, 1e6, 0.6) == pytest.approx(9.163e-7, abs=0.0005e-7)
    assert upper_rate_bound(0, 1e6, 0.9) == pytest.approx(2.303e-6, abs=0.0005e-6)
    # With no failures the bound reduces to -ln(1 - CL) / T (exponential distribution; common practice, no source).
    for confidence in (0.6, 0.9, 0.95):
        assert upper_rate_bound(0, 1e6, confidence) == pytest.approx(-math.log(1 - confidence) / 1e6, rel=1e-12)
        assert upper_rate_bound(0, 1e6, confidence) == pytest.approx(chi2.ppf(confidence, 2) / 2e6, rel=1e-9)


def test_a_bound_with_failures_matches_scipy_per_exposure():
    # Reference: scipy.stats.chi2.ppf(0.9, 8) / (2 * 50_000) for 3 failures in 50,000 units.
    assert upper_rate_bound(3, 50_000, 0.9) == pytest.approx(chi2.ppf(0.9, 8) / 100_000, rel=1e-9)


def _builtin_bands():
    table = BUILTIN_OCCURRENCE_BANDS["General 1-10"]
    return check_band_table(table["rate_basis"], table["starts"], 10, "occurrence")


def test_a_rate_exactly_on_an_edge_belongs_to_the_higher_level_and_just_below_to_the_lower():
    # The convention is ours (README, "Observed failures"): a level starts at its rate, inclusive.
    bands = _builtin_bands()
    starts = BUILTIN_OCCURRENCE_BANDS["General 1-10"]["starts"]
    for value, start in starts.items():
        assert bands.level_for(start) == value
        if value > 1:
            # Within one part in a billion counts as on the edge (floating point); a millionth below does not.
            assert bands.level_for(math.nextafter(start, 0)) == value
            assert bands.level_for(start * (1 - 1e-6)) == value - 1
        assert bands.level_for(start * 1.001 if start else 1e-9) == value
    assert bands.level_for(1e9) == 10
    assert bands.level_for(0) == 1


def test_each_builtin_band_holds_the_typical_rate_its_criteria_name():
    # The built-in criteria say "roughly one in N parts"; each N must fall in its own band (our own table).
    bands = _builtin_bands()
    typical_one_in = {3: 200_000, 4: 30_000, 5: 5_000, 6: 1_000, 7: 300, 8: 80, 9: 25}
    for value, parts in typical_one_in.items():
        assert bands.level_for(1000 / parts) == value


@pytest.mark.parametrize(
    ("starts", "message"),
    [
        ({1: 0, 2: 1, 3: 1}, "rise strictly"),
        ({1: 0.1, 2: 1, 3: 2}, "start at rate 0"),
        ({1: 0, 2: 1}, "missing"),
        ({1: 0, 2: 2, 3: 1}, "rise strictly"),
    ],
)
def test_a_band_table_out_of_order_or_incomplete_is_refused(starts, message):
    with pytest.raises(ValidationFailed) as raised:
        check_band_table("per_thousand_units", starts, 3, "occurrence")
    assert any(message in error["message"] for error in raised.value.errors)


# P. Keller, Six Sigma Demystified (McGraw-Hill), "FMEA Occurrence Rankings", citing AIAG 1995: the rate
# at which each process occurrence ranking starts, as "1 in N" parts (level 1 is anything fewer).
KELLER_ONE_IN = {10: 2, 9: 3, 8: 8, 7: 20, 6: 80, 5: 400, 4: 2_000, 3: 15_000, 2: 150_000}


def test_every_edge_of_the_keller_aiag_table_maps_by_our_convention():
    starts = {1: 0, **{value: 1000 / parts for value, parts in KELLER_ONE_IN.items()}}
    bands = check_band_table("per_thousand_units", starts, 10, "occurrence")
    for value, parts in KELLER_ONE_IN.items():
        # Exactly 1 in N parts, as a rate per unit turned into the basis, is on the edge: the higher level.
        assert bands.level_for(bands.per_basis(1 / parts)) == value
        assert bands.level_for(bands.per_basis(1 / parts) * (1 - 1e-6)) == value - 1
        assert bands.level_for(bands.per_basis(1 / parts) * (1 + 1e-6)) == value
    assert bands.level_for(bands.per_basis(1 / 1_500_000)) == 1
    # The table's rates match 2 * Phi(-3 * Cpk) for a centred process: Cpk 1.00 gives 0.0027 (REFERENCE,
    # checked with scipy.stats.norm), 1 in 370, level 5 (1 in 400 <= rate < 1 in 80).
    assert bands.level_for(bands.per_basis(2 * norm.cdf(-3 * 1.00))) == 5
