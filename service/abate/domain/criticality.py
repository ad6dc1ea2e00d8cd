"""Quantitative criticality after MIL-STD-1629A Task 102: Cm, Cr per severity class, levels A..E."""

from dataclasses import dataclass

from abate.errors import ValidationFailed

SEVERITY_CLASSES = ("I", "II", "III", "IV")
SEVERITY_CLASS_NAMES = {"I": "catastrophic", "II": "critical", "III": "marginal", "IV": "minor"}
# Named beta categories; ranged ones (probable, possible loss) require the number, so only fixed ones map.
BETA_FIXED = {"actual_loss": 1.0, "no_effect": 0.0}
EFFECT_CATEGORIES = ("actual_loss", "probable_loss", "possible_loss", "no_effect")
LEVEL_NAMES = {
    "A": "frequent",
    "B": "reasonably probable",
    "C": "occasional",
    "D": "remote",
    "E": "extremely unlikely",
}
# Lower bounds of the mode's share of the item failure probability, inclusive; A is > 0.20 (exclusive).
LEVELS = (("A", 0.20), ("B", 0.10), ("C", 0.01), ("D", 0.001))


@dataclass(frozen=True)
class ModeInput:
    """One failure mode's Task 102 inputs."""

    mode_id: int
    alpha: float
    beta: float
    severity_class: str


def mode_criticality(beta: float, alpha: float, rate_per_hour: float, hours: float) -> float:
    """Mode criticality number Cm = beta * alpha * lambda_p * t."""
    return beta * alpha * rate_per_hour * hours


def effect_category(beta: float) -> str:
    """The named category of an effect probability: actual loss 1.00, probable loss 0.10 < beta < 1.00,
    possible loss 0 < beta <= 0.10, no effect 0 (MIL-STD-1629A Task 102; from memory)."""
    if beta >= 1:
        return "actual_loss"
    if beta > 0.10:
        return "probable_loss"
    return "possible_loss" if beta > 0 else "no_effect"


def effect_probability(category: str | None, beta: float | None) -> float:
    """The beta a mode carries from a category, a number or both (ValueError when they disagree)."""
    if beta is None:
        if category not in BETA_FIXED:
            raise ValueError(f"{category} spans a range of probabilities; give effect_probability as a number")
        return BETA_FIXED[category]
    if category is not None and effect_category(beta) != category:
        raise ValueError(f"{beta:g} is not a probability of {category} (it is {effect_category(beta)})")
    return beta


def level_for_share(share: float) -> str:
    """Qualitative level: A > 0.20, B (0.10, 0.20], C (0.01, 0.10], D (0.001, 0.01], E <= 0.001."""
    for level, bound in LEVELS:
        if share > bound:
            return level
    return "E"


def check_alpha_sum(item: str, alphas: list[float]) -> str | None:
    """Reject alpha sums above 1 (ValidationFailed naming the item); return a warning when below 1."""
    total = round(sum(alphas), 12)
    if total > 1:
        raise ValidationFailed(f"failure mode ratios of item {item!r} sum to {total:g}, more than 1")
    return None if total == 1 else f"failure mode ratios of item {item!r} sum to {total:g}, less than 1"


def item_criticality(modes: list[ModeInput], rate_per_hour: float, hours: float) -> dict[str, float]:
    """Item criticality Cr per severity class: the sum of Cm over the item's modes in that class."""
    totals = dict.fromkeys(SEVERITY_CLASSES, 0.0)
    for mode in modes:
        totals[mode.severity_class] += mode_criticality(mode.beta, mode.alpha, rate_per_hour, hours)
    return totals
