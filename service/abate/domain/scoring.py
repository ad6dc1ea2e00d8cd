"""Risk scoring: RPN, the S x O criticality index, the needs-action rules and priority bands."""

from dataclasses import dataclass

PRIORITY_BANDS = ("high", "medium", "low")

REASON_RPN = "rpn_at_or_above_threshold"
REASON_SEVERITY = "severity_at_or_above_threshold"


@dataclass(frozen=True)
class Ratings:
    """Severity, occurrence and detection of one failure mode."""

    severity: int
    occurrence: int
    detection: int

    @property
    def rpn(self):
        """Risk priority number, S x O x D (IEC 60812:2018)."""
        return self.severity * self.occurrence * self.detection

    @property
    def criticality(self):
        """The S x O index, which ranks by consequence and likelihood without detection."""
        return self.severity * self.occurrence

    def as_dict(self):
        """The three ratings and their RPN as a plain dict."""
        return {
            "severity": self.severity,
            "occurrence": self.occurrence,
            "detection": self.detection,
            "rpn": self.rpn,
        }


def projected_ratings(current, targets):
    """Each rating at the lowest of its current value and every open action's target for it.

    targets is an iterable of dicts that may omit any rating; a target above the current value
    never raises the projection.
    """
    lowest = {name: getattr(current, name) for name in ("severity", "occurrence", "detection")}
    for target in targets:
        for name, value in target.items():
            if value is not None and value < lowest[name]:
                lowest[name] = value
    return Ratings(**lowest)


@dataclass(frozen=True)
class RiskPolicy:
    """A study's rules: act at or above an RPN, and at or above a severity whatever the RPN."""

    action_threshold: int
    severity_threshold: int


@dataclass(frozen=True)
class Assessment:
    """What the policy says of one set of ratings."""

    needs_action: bool
    reasons: tuple
    priority: str


def needs_action_reasons(ratings, policy):
    """Return the reasons (possibly none) why the policy asks for action on these ratings."""
    reasons = []
    if ratings.rpn >= policy.action_threshold:
        reasons.append(REASON_RPN)
    if ratings.severity >= policy.severity_threshold:
        reasons.append(REASON_SEVERITY)
    return tuple(reasons)


def priority_band(ratings, policy):
    """high: the policy asks for action; medium: RPN at least half the threshold; low: the rest."""
    if needs_action_reasons(ratings, policy):
        return "high"
    if 2 * ratings.rpn >= policy.action_threshold:
        return "medium"
    return "low"


def assess(ratings, policy):
    """Apply the study's policy to one mode's ratings."""
    reasons = needs_action_reasons(ratings, policy)
    return Assessment(needs_action=bool(reasons), reasons=reasons, priority=priority_band(ratings, policy))


def default_severity_threshold(severity_max):
    """The top fifth of a severity scale, at least its top level: 9 on 1-10, 5 on 1-5 (common practice, no source)."""
    return min(severity_max, severity_max - severity_max // 5 + 1)


def default_action_threshold(max_rpn):
    """A tenth of the largest RPN, at least 1: 100 on 1-10 scales (common practice, no source)."""
    return max(1, round(max_rpn / 10))
