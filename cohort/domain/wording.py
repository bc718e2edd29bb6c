"""Wording of numbers that recur in every output: the one place for their format.

Manuscript-grade formatting of estimates, intervals and p-values follows in a later change;
what is here is what several parts must say identically.
"""

from __future__ import annotations

import math


def percent_level(level: float) -> str:
    """A confidence level as a percentage, exact to the digit given: ``0.95 -> "95%"``,
    ``0.975 -> "97.5%"``, ``0.999 -> "99.9%"`` (never rounded up to a level not used).

    Examples
    --------
    >>> percent_level(0.95), percent_level(0.975), percent_level(0.999)
    ('95%', '97.5%', '99.9%')
    >>> percent_level(float("nan"))
    Traceback (most recent call last):
    ...
    ValueError: confidence level must be a number between 0 and 1, got nan
    """
    if not isinstance(level, int | float) or not (0 < level < 1) or math.isnan(level):
        raise ValueError(f"confidence level must be a number between 0 and 1, got {level}")
    return f"{round(100 * level, 6):g}%"


def interval_label(level: float | None) -> str:
    """The label of an interval at ``level``: ``"95% CI"``; ``"CI"`` when the level is not
    known (missing or NaN).

    Examples
    --------
    >>> interval_label(0.9), interval_label(None)
    ('90% CI', 'CI')
    """
    if level is None or not isinstance(level, int | float) or math.isnan(level):
        return "CI"
    return f"{percent_level(level)} CI"
