"""The Wilson score interval of a proportion: the one implementation used everywhere."""

from __future__ import annotations

import math

from scipy import stats

from cohort.stats.results import ConfidenceInterval

WILSON = "Wilson score (Wilson 1927; Newcombe 1998)"


def wilson_interval(
    successes: int, n: int, confidence_level: float = 0.95, *, method: str = WILSON
) -> ConfidenceInterval:
    """Wilson score interval for a binomial proportion.

    ``(x + z^2/2) / (n + z^2) -/+ z / (n + z^2) * sqrt(x (n - x) / n + z^2 / 4)``.
    Wilson EB. Probable inference, the law of succession, and statistical inference. J Am
    Stat Assoc 1927;22:209-212; Newcombe RG. Two-sided confidence intervals for the single
    proportion: comparison of seven methods. Stat Med 1998;17:857-872 (method 3).
    Validated against Newcombe's Table I and ``statsmodels`` ``proportion_confint``.
    ``method`` is the label written into the interval (callers add their context).

    Examples
    --------
    >>> ci = wilson_interval(8, 10)
    >>> round(ci.low, 3), round(ci.high, 3)
    (0.49, 0.943)
    """
    if not 0.0 < confidence_level < 1.0:
        raise ValueError(f"confidence_level must be in (0, 1), got {confidence_level!r}")
    for name, value in (("successes", successes), ("n", n)):
        if isinstance(value, bool) or int(value) != value or value < 0:
            raise ValueError(f"{name} must be a non-negative integer, got {value!r}")
    if successes > n:
        raise ValueError(f"successes must be between 0 and n, got {successes} of {n}")
    if n == 0:
        return ConfidenceInterval.not_estimable("no units", confidence_level, method)
    z = float(stats.norm.ppf(0.5 + confidence_level / 2.0))
    z2 = z * z
    centre = (successes + z2 / 2.0) / (n + z2)
    half = z / (n + z2) * math.sqrt(successes * (n - successes) / n + z2 / 4.0)
    # the limits are exactly 0 at x = 0 and 1 at x = n (rounding would leave 1e-17)
    low = 0.0 if successes == 0 else max(0.0, centre - half)
    high = 1.0 if successes == n else min(1.0, centre + half)
    return ConfidenceInterval(low, high, confidence_level, method)
