"""Confidence bounds on a failure rate from a count of failures over an exposure (chi-square, no scipy)."""

import math

_EPSILON = 1e-15
_MAX_TERMS = 100_000
# Bisection halves the bracket each step: 200 steps reach the limit of a double from any start.
_BISECTIONS = 200


def _lower_gamma_series(shape, value):
    """P(shape, value) by its power series; converges quickly for value < shape + 1."""
    term = total = 1.0 / shape
    denominator = shape
    for _ in range(_MAX_TERMS):
        denominator += 1
        term *= value / denominator
        total += term
        if abs(term) < abs(total) * _EPSILON:
            break
    return total * math.exp(-value + shape * math.log(value) - math.lgamma(shape))


def _upper_gamma_fraction(shape, value):
    """Q(shape, value) by its continued fraction (modified Lentz); converges for value >= shape + 1."""
    tiny = 1e-300
    b = value + 1.0 - shape
    c = 1.0 / tiny
    d = 1.0 / b
    fraction = d
    for index in range(1, _MAX_TERMS):
        a = -index * (index - shape)
        b += 2.0
        d = a * d + b
        d = tiny if abs(d) < tiny else d
        c = b + a / c
        c = tiny if abs(c) < tiny else c
        d = 1.0 / d
        step = d * c
        fraction *= step
        if abs(step - 1.0) < _EPSILON:
            break
    return fraction * math.exp(-value + shape * math.log(value) - math.lgamma(shape))


def regularized_lower_gamma(shape, value):
    """P(shape, value), the regularized lower incomplete gamma function."""
    if value <= 0:
        return 0.0
    if value < shape + 1:
        return _lower_gamma_series(shape, value)
    return 1.0 - _upper_gamma_fraction(shape, value)


def chi2_cdf(value, degrees_of_freedom):
    """The chi-square distribution function: P(X <= value) = P(k / 2, value / 2)."""
    return regularized_lower_gamma(degrees_of_freedom / 2, value / 2)


def chi2_quantile(probability, degrees_of_freedom):
    """The value x with P(X <= x) = probability (the inverse of chi2_cdf), found by bisection."""
    if not 0 < probability < 1:
        raise ValueError("probability must lie strictly between 0 and 1")
    low, high = 0.0, float(degrees_of_freedom)
    while chi2_cdf(high, degrees_of_freedom) < probability:
        low, high = high, high * 2
    for _ in range(_BISECTIONS):
        middle = (low + high) / 2
        if chi2_cdf(middle, degrees_of_freedom) < probability:
            low = middle
        else:
            high = middle
        if high - low <= _EPSILON * high:
            break
    return (low + high) / 2


def upper_rate_bound(failures, exposure, confidence):
    """The one-sided upper confidence bound on a constant failure rate: chi2(CL; 2r + 2) / (2T).

    failures r over exposure T (units or hours); the bound is per unit of exposure. With no failures it
    reduces to -ln(1 - CL) / T.
    """
    if failures < 0 or exposure <= 0:
        raise ValueError("failures must be >= 0 and exposure > 0")
    return chi2_quantile(confidence, 2 * failures + 2) / (2 * exposure)
