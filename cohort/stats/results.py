"""Shared result types: one confidence-interval type and one way to say "not estimable".

Every statistic of the package returns a frozen dataclass that carries its point estimate,
its confidence interval(s) as :class:`ConfidenceInterval` (which says how it was obtained),
a ``to_frame()``, a ``summary()`` and a one-line repr (:class:`Result`). A quantity that
cannot be estimated from the data at hand is NaN *and* its ``note`` says why; a
:class:`NotEstimableWarning` is emitted, so a NaN is never silent.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from cohort.domain.wording import interval_label


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


def _number(value: object) -> str:
    """A number of a summary: 4 significant digits; NaN as "not estimable"."""
    if isinstance(value, float | int | np.floating | np.integer) and not isinstance(value, bool):
        return "not estimable" if math.isnan(value) else f"{value:.4g}"
    return str(value)


def _is_quantity(value: object) -> bool:
    """An estimate with its interval: a float ``estimate`` and a ``ci``."""
    return isinstance(getattr(value, "ci", None), ConfidenceInterval) and isinstance(
        getattr(value, "estimate", None), float | int | np.floating
    )


def _is_test(value: object) -> bool:
    """A test without an estimate: a ``p_value`` and no ``estimate``."""
    return hasattr(value, "p_value") and not hasattr(value, "estimate")


def _interval_text(ci: ConfidenceInterval) -> str:
    """``95% CI low to high``, or ``95% CI not available`` when not estimable."""
    label = interval_label(ci.level)
    if not ci.estimable:
        return f"{label} not available"
    return f"{label} {_number(ci.low)} to {_number(ci.high)}"


def _quantity_line(label: str, value: object, width: int = 22) -> str:
    """One line: label, estimate, interval at its level, the analytic interval beside it
    (a proportion also gives its successes and units)."""
    ci = value.ci  # type: ignore[attr-defined]
    line = f"  {label:<{width}} {_number(value.estimate):>13}   {_interval_text(ci)}"  # type: ignore[attr-defined]
    if hasattr(value, "successes") and hasattr(value, "n_units"):
        line += f"   ({value.successes} of {value.n_units})"
    analytic = getattr(value, "analytic_ci", None)
    if isinstance(analytic, ConfidenceInterval) and analytic != ci:
        if analytic.estimable:
            shown = f"{_number(analytic.low)} to {_number(analytic.high)}"
            if analytic.level != ci.level:
                shown = f"{interval_label(analytic.level)} {shown}"
            line += f"   analytic: {shown}"
        else:
            line += "   analytic: not available"
    return line


def _degrees_of_freedom(test: object) -> str:
    """``df = 2`` or ``df = 2 and 7.9`` (numerator and denominator); "" when none."""
    names = ("df", "df_denominator") if hasattr(test, "df") else ("df1", "df2")
    values = [getattr(test, n, math.nan) for n in names]
    shown = [_number(v) for v in values if v is not None and not math.isnan(v)]
    return f"df = {' and '.join(shown)}" if shown else ""


def describe_test(test: object, label: str = "") -> str:
    """A test in words: ``label: H = 9.75, df = 2, p = 0.0076 (method)``.

    Reads ``statistic`` and ``statistic_name`` (or ``f_value``: an F test), the degrees of
    freedom (``df``, ``df_denominator``; ``df1``, ``df2``), ``p_value``, ``p_adjusted`` and
    ``p_method`` (``p_adjusted_method``) of ``test``, whichever it has.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> t = SimpleNamespace(statistic=9.75, statistic_name="H", df=2, p_value=0.00764,
    ...                     p_method="chi-square approximation")
    >>> describe_test(t, "Kruskal-Wallis")
    'Kruskal-Wallis: H = 9.75, df = 2, p = 0.00764 (chi-square approximation)'
    """
    parts = []
    if hasattr(test, "difference"):
        se = getattr(test, "std_error", math.nan)
        parts.append(f"difference = {_number(test.difference)} (SE {_number(se)})")
    if hasattr(test, "statistic"):
        name = getattr(test, "statistic_name", "") or "statistic"
        parts.append(f"{name} = {_number(test.statistic)}")
    elif hasattr(test, "f_value"):
        parts.append(f"F = {_number(test.f_value)}")
    df = _degrees_of_freedom(test)
    parts += [df] if df else []
    for value, method in (("p_value", "p_method"), ("p_adjusted", "p_adjusted_method")):
        if hasattr(test, value):
            how = getattr(test, method, "")
            words = "p" if value == "p_value" else "adjusted p"
            parts.append(
                f"{words} = {_number(getattr(test, value))}" + (f" ({how})" if how else "")
            )
    text = ", ".join(parts)
    return f"{label}: {text}" if label else text


def _title(result: object) -> str:
    """The first line of a summary: the class, with the procedure or test it names."""
    title = type(result).__name__
    what = next(
        (getattr(result, a) for a in ("procedure", "test", "path") if hasattr(result, a)), ""
    )
    if isinstance(what, str) and what and not _is_quantity(result):
        title += f": {what}"
        comparison = getattr(result, "comparison", "")
        title += f", {comparison}" if isinstance(comparison, str) and comparison else ""
    scale = getattr(result, "scale", "")
    if isinstance(scale, str) and scale:
        title += f", {scale} scale"
    return title


def _single_label(result: object) -> str:
    """The label of a single quantity: its ``name``, else ``procedure``, else the class."""
    for attribute in ("name", "procedure"):
        value = getattr(result, attribute, "")
        if isinstance(value, str) and value:
            return value
    return type(result).__name__


def _fields(result: object) -> list[tuple[str, object]]:
    """The dataclass fields of ``result`` as (name, value), in order."""
    names = getattr(result, "__dataclass_fields__", {})
    return [(n, getattr(result, n)) for n in names]


def _parts(result: object) -> tuple[list[tuple[str, object]], list[tuple[str, object]]]:
    """The quantities and tests a summary shows, each as (label, value).

    A single quantity is itself; otherwise every field holding an estimate (labelled by the
    field's name), a tuple of estimates (each by its ``name``), a nested result (its own
    quantities and tests) or a test (labelled by the field's name).
    """
    if _is_quantity(result):
        label = getattr(result, "_summary_test_label", "test")
        tests = [(label, result)] if hasattr(result, "p_value") else []
        return [(_single_label(result), result)], tests
    if _is_test(result):
        return [], [("", result)]
    quantities: list[tuple[str, object]] = []
    tests: list[tuple[str, object]] = []
    for name, value in _fields(result):
        if _is_quantity(value):
            quantities.append((name, value))
            if hasattr(value, "p_value") and not isinstance(value, Estimate):
                tests.append((name, value))
        elif _is_test(value):
            tests.append((name, value))
        elif isinstance(value, tuple) and value and all(_is_quantity(v) for v in value):
            for item in value:
                quantities.append((_single_label(item), item))
                if hasattr(item, "p_value"):
                    tests.append((_single_label(item), item))
        elif isinstance(value, Result):
            inner_quantities, inner_tests = value._summary_parts()
            quantities += inner_quantities
            tests += inner_tests
    return quantities, tests


def _methods(quantities: list[tuple[str, object]], attribute: str) -> list[tuple[str, list[str]]]:
    """Each distinct interval method with the labels of the quantities that use it."""
    used: dict[str, list[str]] = {}
    for label, value in quantities:
        ci = getattr(value, attribute, None)
        if not isinstance(ci, ConfidenceInterval) or not ci.method:
            continue
        if attribute == "analytic_ci" and ci == value.ci:  # type: ignore[attr-defined]
            continue  # shown as the interval itself
        used.setdefault(ci.method, []).append(label)
    return list(used.items())


def _method_lines(quantities: list[tuple[str, object]]) -> list[str]:
    """``intervals: method`` once per method, naming the quantities when methods differ."""
    lines = []
    for attribute, what in (("ci", "intervals"), ("analytic_ci", "analytic intervals")):
        methods = _methods(quantities, attribute)
        for method, labels in methods:
            which = f" ({', '.join(labels)})" if len(methods) > 1 else ""
            lines.append(f"{what}: {method}{which}")
    return lines


_COUNTS = ("n_subjects", "n_pairs", "n_units", "n_observations", "n_targets", "n_raters")


def _count_line(result: object) -> str:
    """The counts of the result itself, ``n_subjects = 12, n_pairs = 204`` (the attributes
    named by its ``_summary_counts``)."""
    counts = [(c, getattr(result, c, None)) for c in getattr(result, "_summary_counts", _COUNTS)]
    return ", ".join(f"{c} = {v}" for c, v in counts if isinstance(v, int | np.integer))


def _note_lines(result: object, quantities, tests) -> list[str]:
    """The notes, each once: the result's own, then those of its quantities and tests
    (naming which when not all of them carry it)."""
    notes: dict[str, list[str]] = {}
    own = getattr(result, "note", "")
    if isinstance(own, str) and own:
        notes[own] = []
    everything = [*quantities, *((label, t) for label, t in tests if (label, t) not in quantities)]
    for label, value in everything:
        texts = [getattr(value, "note", "")]
        for attribute in ("ci", "analytic_ci"):
            ci = getattr(value, attribute, None)
            texts.append(ci.note if isinstance(ci, ConfidenceInterval) else "")
        for text in _joined_notes(*(t for t in texts if isinstance(t, str))).split("; "):
            if text and text not in notes:
                notes[text] = [label] if label else []
            elif text and label and notes[text] and label not in notes[text]:
                notes[text].append(label)
    lines = []
    labels = [label for label, _ in everything]
    for text, which in notes.items():
        if any(text != other and text in other for other in notes):
            continue  # repeated inside a longer note
        named = which and len(everything) > 1 and set(which) != set(labels)
        listed = ", ".join(which) if len(which) <= 3 else f"{which[0]} to {which[-1]}, {len(which)}"
        lines.append(f"note ({listed}): {text}" if named else f"note: {text}")
    return lines


class Result:
    """What every result of :mod:`cohort.stats` offers, whatever it estimates.

    The vocabulary: a single quantity has ``estimate`` (float) and ``ci``
    (:class:`ConfidenceInterval`: ``low``, ``high``, ``level``, ``method``), with
    ``analytic_ci`` beside it where a textbook interval exists; a result of several quantities
    holds them as named :class:`Estimate` fields (``bias``, ``lower``, ``slope`` ...); a test
    has ``statistic``, degrees of freedom, ``p_value`` and ``p_method``. Counts are
    ``n_subjects`` (clusters) and ``n_pairs`` (paired values), ``n_units`` for classified
    units, ``n_observations`` for values of a model fit; ``note`` says why something is not
    estimable. ``to_frame()`` gives the tidy rows, ``summary()`` a short text in the names of
    the repr, and ``repr`` every field in one line. Subclasses are
    ``@dataclass(frozen=True, repr=False)`` so that this ``repr`` is used.
    """

    def to_frame(self):  # pragma: no cover - every result defines it
        raise NotImplementedError

    def _summary_parts(self) -> tuple[list[tuple[str, object]], list[tuple[str, object]]]:
        """The quantities and tests :meth:`summary` shows, as (label, value) pairs; results
        whose quantities are not fields override it."""
        return _parts(self)

    def summary(self) -> str:
        """A short text from the result's attributes, in the names of its repr.

        One line per quantity (estimate, interval at its level, the analytic interval beside
        it), one line per test (statistic, df, p-value and how it was obtained), then how
        the intervals were obtained (each method once, naming the quantities when they
        differ), the counts and the notes.
        """
        quantities, tests = self._summary_parts()
        lines = [_title(self)]
        width = max([22, *(len(label) for label, _ in quantities)])
        placed = set()
        for label, value in quantities:
            lines.append(_quantity_line(label, value, width))
            for i, (test_label, test) in enumerate(tests):
                if test_label == label:  # the quantity's own test, on the line below it
                    lines.append(f"    {describe_test(test)}")
                    placed.add(i)
        lines += [f"  {describe_test(t, lb)}" for i, (lb, t) in enumerate(tests) if i not in placed]
        lines += _method_lines(quantities)
        counts = _count_line(self)
        lines += [counts] if counts else []
        return "\n".join(lines + _note_lines(self, quantities, tests))

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
      bias                             1.1   95% CI 0.8 to 1.4   analytic: 0.9 to 1.3
    intervals: subject cluster bootstrap
    analytic intervals: t, k-1 df
    n_subjects = 12, n_pairs = 204

    At another level the label says so, exactly; an interval that could not be estimated says
    that instead of "nan to nan":

    >>> lost = ConfidenceInterval.not_estimable("fewer than 2 subjects", 0.975, "t, k-1 df")
    >>> print(Estimate("bias", 1.1, ci, lost, 1, 17).summary().splitlines()[1])
      bias                             1.1   95% CI 0.8 to 1.4   analytic: not available
    >>> print(Estimate("bias", 1.1, lost, lost, 1, 17).summary().splitlines()[1])
      bias                             1.1   97.5% CI not available
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
