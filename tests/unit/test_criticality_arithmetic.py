"""Criticality numbers against the MIL-STD-1629A Task 102 worked values."""

import pytest

from abate.domain import criticality as c
from abate.errors import ValidationFailed


def test_mode_criticality_worked_value():
    # Cm = beta alpha lambda_p t (MIL-STD-1629A, Task 102): 0.5 * 0.4 * 5e-6 * 1000 = 1.0e-3
    assert c.mode_criticality(0.5, 0.4, 5e-6, 1000) == pytest.approx(1.0e-3)


def test_item_criticality_per_class_worked_item():
    # MIL-STD-1629A Task 102; lambda_p 2e-5/h, t 100 h: Cr(II) = 1e-3 + 6e-5 = 1.06e-3, Cr(IV) = 0
    modes = [
        c.ModeInput(1, alpha=0.5, beta=1.0, severity_class="II"),
        c.ModeInput(2, alpha=0.3, beta=0.1, severity_class="II"),
        c.ModeInput(3, alpha=0.2, beta=0.0, severity_class="IV"),
    ]
    cr = c.item_criticality(modes, 2e-5, 100)
    assert cr["II"] == pytest.approx(1.06e-3)
    assert cr["IV"] == 0
    assert cr["I"] == cr["III"] == 0


def test_alpha_sum_above_one_is_rejected_naming_item_and_sum():
    # MIL-STD-1629A Task 102: the mode ratios of one item sum to at most 1
    with pytest.raises(ValidationFailed) as caught:
        c.check_alpha_sum("pump", [0.5, 0.3, 0.3])
    assert "pump" in caught.value.detail and "1.1" in caught.value.detail


def test_alpha_sum_below_one_warns_and_exactly_one_does_not():
    assert "less than 1" in c.check_alpha_sum("pump", [0.5, 0.3])
    assert c.check_alpha_sum("pump", [0.5, 0.3, 0.2]) is None


def test_level_bounds_are_exclusive_below_inclusive_above():
    # bands from MIL-STD-1629A Task 102 [from memory]; boundary convention is ours (README)
    assert [c.level_for_share(s) for s in (0.5, 0.2, 0.1, 0.01, 0.001, 0.0)] == ["A", "B", "C", "D", "E", "E"]
