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

import pandas as pd


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


def _summary_lines(frame, note: str) -> list[str]:
    """The lines of :meth:`Result.summary` for rows with ``estimate, ci_low, ci_high``."""
    name = "quantity" if "quantity" in frame.columns else None
    lines = []
    for i, row in enumerate(frame.to_dict("records")):
        label = str(row[name]) if name else f"row {i + 1}"
        level = row.get("confidence_level", math.nan)
        ci = f"{level:.0%} CI" if isinstance(level, float) and not math.isnan(level) else "CI"
        line = f"  {label:<22} {row['estimate']:>10.4g}   {ci} {row['ci_low']:.4g} to "
        line += f"{row['ci_high']:.4g}"
        if "analytic_ci_low" in row:
            line += f"   (analytic {row['analytic_ci_low']:.4g} to {row['analytic_ci_high']:.4g})"
        lines.append(line)
    for column, what in (("ci_method", "intervals"), ("analytic_ci_method", "analytic")):
        methods = [m for m in dict.fromkeys(frame.get(column, ())) if isinstance(m, str) and m]
        lines += [f"{what}: {m}" for m in methods]
    counts = [
        f"{c} = {frame[c].iloc[0]}" for c in ("n_subjects", "n_pairs", "n_units") if c in frame
    ]
    if counts:
        lines.append(", ".join(counts))
    notes = [n for n in dict.fromkeys([note, *frame.get("note", ())]) if isinstance(n, str) and n]
    return lines + [f"note: {n}" for n in notes]


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
        """A short text: one line per quantity with its estimate and interval, then how the
        intervals were obtained, the counts and the note.

        Results without estimates and intervals (a test) show the rows of :meth:`to_frame`.
        """
        frame = self.to_frame()
        note = getattr(self, "note", "")
        if not {"estimate", "ci_low", "ci_high"} <= set(frame.columns):
            text = frame.to_string(index=False)
            return f"{text}\nnote: {note}" if note else text
        return "\n".join([type(self).__name__, *_summary_lines(frame, note)])

    def __repr__(self) -> str:
        values = {n: getattr(self, n) for n in getattr(self, "__dataclass_fields__", {})}
        shown = {n: v for n, v in values.items() if not (isinstance(v, str) and not v)}
        parts = [f"{n}={_short(v)}" for n, v in shown.items()]
        return f"{type(self).__name__}({', '.join(parts)})"


@dataclass(frozen=True, repr=False)
class Estimate(Result):
    """A point estimate with its default (subject cluster bootstrap) and analytic intervals.

    ``analytic_ci`` is the textbook interval where one exists (its ``method`` names it); it is
    reported beside the bootstrap interval so a reader sees how much an interval that treats
    segments as independent understates uncertainty.

    Examples
    --------
    >>> ci = ConfidenceInterval(0.8, 1.4, 0.95, "subject cluster bootstrap")
    >>> analytic = ConfidenceInterval(0.9, 1.3, 0.95, "t, k-1 df")
    >>> e = Estimate("bias", 1.1, ci, analytic, n_subjects=12, n_pairs=204)
    >>> e
    Estimate(name='bias', estimate=1.1, ci=[0.8, 1.4], analytic_ci=[0.9, 1.3], n_subjects=12,
    n_pairs=204)
    >>> print(e.summary())
    Estimate
      bias                          1.1   95% CI 0.8 to 1.4   (analytic 0.9 to 1.3)
    intervals: subject cluster bootstrap
    analytic: t, k-1 df
    n_subjects = 12, n_pairs = 204
    """

    name: str
    estimate: float
    ci: ConfidenceInterval
    analytic_ci: ConfidenceInterval
    n_subjects: int
    n_pairs: int
    note: str = ""

    def to_frame(self) -> pd.DataFrame:
        """One row: name, estimate, both intervals with their methods, counts, note."""
        return pd.DataFrame([self.row()])

    def row(self) -> dict[str, object]:
        """The row of :meth:`to_frame` as a mapping (column name to value)."""
        return {
            "quantity": self.name,
            "estimate": self.estimate,
            "ci_low": self.ci.low,
            "ci_high": self.ci.high,
            "ci_method": self.ci.method,
            "analytic_ci_low": self.analytic_ci.low,
            "analytic_ci_high": self.analytic_ci.high,
            "analytic_ci_method": self.analytic_ci.method,
            "confidence_level": self.ci.level,
            "n_subjects": self.n_subjects,
            "n_pairs": self.n_pairs,
            "note": _joined_notes(self.note, self.ci.note, self.analytic_ci.note),
        }


def _joined_notes(*notes: str) -> str:
    """Distinct notes joined by "; ", leaving out one repeated inside another."""
    kept = list(dict.fromkeys(n for n in notes if n))
    return "; ".join(n for n in kept if not any(n != m and n in m for m in kept))


def estimates_frame(estimates: tuple[Estimate, ...]) -> pd.DataFrame:
    """Tidy frame of several estimates, one row each."""
    return pd.DataFrame([e.row() for e in estimates])


class SingleQuantity(Result):
    """A result of one quantity: ``estimate`` (float), ``ci`` and ``analytic_ci`` directly.

    Subclasses are dataclasses with the fields ``estimate``, ``ci``, ``analytic_ci``,
    ``n_subjects``, ``n_pairs`` and ``note``, and name their quantity (``quantity``, the
    column name of the agreement table, e.g. ``"ccc"``) and ``procedure``.
    """

    quantity: str
    procedure: str

    def as_estimate(self) -> Estimate:
        """The quantity as an :class:`Estimate` named :attr:`quantity`."""
        return Estimate(
            self.quantity,
            self.estimate,
            self.ci,
            self.analytic_ci,
            self.n_subjects,
            self.n_pairs,
            self.note,
        )

    def to_frame(self) -> pd.DataFrame:
        """One row: the procedure, then the columns of :meth:`Estimate.to_frame`."""
        frame = self.as_estimate().to_frame()
        frame.insert(0, "procedure", self.procedure)
        return frame
