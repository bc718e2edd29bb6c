"""Shared result types: one confidence-interval type and one way to say "not estimable".

Every statistic of the package returns a frozen dataclass that carries its point estimate,
its confidence interval(s) as :class:`ConfidenceInterval` (which says how it was obtained),
and a ``to_frame()``. A quantity that cannot be estimated from the data at hand is NaN *and*
carries a :class:`NotEstimable` reason; a :class:`NotEstimableWarning` is emitted, so a NaN is
never silent.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass


class CohortWarning(UserWarning):
    """Base class of the package's own warnings."""


class NotEstimableWarning(CohortWarning):
    """A statistic could not be estimated from the data given (the result says why)."""


@dataclass(frozen=True)
class ConfidenceInterval:
    """A two-sided confidence interval and how it was obtained.

    ``method`` names the construction, e.g. ``"subject cluster bootstrap, percentile,
    B=2000, seed=20261202"`` or ``"Wilson score (Newcombe 1998)"``. ``low``/``high`` are NaN
    only when ``note`` says why.
    """

    low: float
    high: float
    level: float = 0.95
    method: str = ""
    note: str = ""

    @property
    def estimable(self) -> bool:
        return not (math.isnan(self.low) or math.isnan(self.high))

    @classmethod
    def not_estimable(
        cls, reason: str, level: float = 0.95, method: str = ""
    ) -> ConfidenceInterval:
        return cls(math.nan, math.nan, level, method, f"not estimable: {reason}")


@dataclass(frozen=True)
class NotEstimable:
    """The reason a quantity is not estimable, e.g. ``"fewer than 2 subjects"``."""

    reason: str

    def __str__(self) -> str:
        return f"not estimable: {self.reason}"


def warn_not_estimable(what: str, reason: str, stacklevel: int = 2) -> str:
    """Emit a :class:`NotEstimableWarning` and return the note text for the result row."""
    note = f"{what} not estimable: {reason}"
    warnings.warn(note, NotEstimableWarning, stacklevel=stacklevel + 1)
    return note
