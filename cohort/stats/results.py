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


# --- the shared vocabulary of results --------------------------------------------------------


def _short(value: object) -> str:
    """A field value as ``repr`` shows it: numbers to 4 significant digits, intervals as
    ``[low, high]``, nested results by their estimate, tables by their shape."""
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, float):
        return f"{value:.4g}"
    if isinstance(value, ConfidenceInterval):
        return f"[{value.low:.4g}, {value.high:.4g}]"
    if hasattr(value, "estimate") and hasattr(value, "ci"):
        return f"{_short(value.estimate)} {_short(value.ci)}"
    if hasattr(value, "shape"):
        return f"<{type(value).__name__} {getattr(value, 'shape', '')}>"
    if isinstance(value, tuple) and len(value) > 3:
        return f"<{len(value)} items>"
    return repr(value)


class Result:
    """What every result of :mod:`cohort.stats` offers, whatever it estimates.

    The vocabulary: a single quantity has ``estimate`` (float) and ``ci``
    (:class:`ConfidenceInterval`: ``low``, ``high``, ``level``, ``method``), with
    ``analytic_ci`` beside it where a textbook interval exists; a result of several quantities
    holds them as named :class:`~cohort.stats.bootstrap.Estimate` fields (``bias``, ``lower``,
    ``slope`` ...). Counts are ``n_subjects`` (clusters) and ``n_pairs`` (paired values), or
    ``n_units`` for classified units; ``note`` says why something is not estimable.
    ``to_frame()`` gives the tidy rows, ``summary()`` the same as text, and ``repr`` every
    field in one line. Subclasses are ``@dataclass(frozen=True, repr=False)`` so that this
    ``repr`` is used.
    """

    def to_frame(self):  # pragma: no cover - every result defines it
        raise NotImplementedError

    def summary(self) -> str:
        """The rows of :meth:`to_frame` as aligned text, with the note below when there is one."""
        frame = self.to_frame()
        text = frame.to_string(index=False)
        note = getattr(self, "note", "")
        return f"{text}\nnote: {note}" if note else text

    def __repr__(self) -> str:
        values = {n: getattr(self, n) for n in getattr(self, "__dataclass_fields__", {})}
        shown = {n: v for n, v in values.items() if not (isinstance(v, str) and not v)}
        parts = [f"{n}={_short(v)}" for n, v in shown.items()]
        return f"{type(self).__name__}({', '.join(parts)})"
