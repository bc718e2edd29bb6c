"""Agreement of two classifications of the same units: statistics of a 2x2 (k x k) table.

Pure estimators over counts and arrays (no study, no findings tables):

- :func:`proportion`: a proportion with the Wilson score interval (Wilson 1927; Newcombe
  1998), labelled as treating units as independent;
- :func:`cohen_kappa`: Cohen's kappa (Cohen 1960) with the asymptotic standard error of
  Fleiss, Cohen & Everitt (1969);
- :func:`mcnemar_test`: McNemar's test of the discordant pairs, exact or chi-square;
- :func:`diagnostic_accuracy`: sensitivity, specificity, PPV, NPV, kappa and McNemar of one
  2x2 table with the reference as truth (rows reference, columns test);
- :func:`accuracy_of_counts`: the same point estimates over arrays of 2x2 counts, vectorised
  (for bootstrap resamples).

Not estimable quantities (e.g. sensitivity without reference positives) are NaN with a note
and a :class:`~cohort.stats.results.NotEstimableWarning`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from cohort.stats.bootstrap import check_options
from cohort.stats.proportions import WILSON
from cohort.stats.proportions import wilson_interval as _wilson
from cohort.stats.results import ConfidenceInterval, Result, warn_not_estimable

PROPORTIONS: tuple[str, ...] = ("sensitivity", "specificity", "ppv", "npv")
"""The proportions of a 2x2 table against a reference, in the order of the tables."""

STATISTICS: tuple[str, ...] = (*PROPORTIONS, "kappa")
"""Every statistic :func:`accuracy_of_counts` gives, in the order of the tables."""

WILSON_METHOD = f"{WILSON}, units treated as independent"
KAPPA_METHOD = "asymptotic SE (Fleiss, Cohen & Everitt 1969)"
MCNEMAR_EXACT = "exact binomial on discordant pairs"

_DENOMINATOR_REASON = {
    "sensitivity": "no reference-positive units",
    "specificity": "no reference-negative units",
    "ppv": "no test-positive units",
    "npv": "no test-negative units",
}


def _check_counts(**counts: object) -> None:
    for name, value in counts.items():
        if isinstance(value, bool) or int(value) != value or value < 0:  # type: ignore[call-overload, operator]
            raise ValueError(f"{name} must be a non-negative integer count, got {value!r}")


# --- a proportion ----------------------------------------------------------------------------


@dataclass(frozen=True, repr=False)
class Proportion(Result):
    """A proportion (sensitivity, ...) of ``successes`` in ``n_units`` with its Wilson
    interval."""

    name: str
    estimate: float
    ci: ConfidenceInterval
    successes: int
    n_units: int
    note: str = ""

    def row(self) -> dict[str, object]:
        return {
            "quantity": self.name,
            "estimate": self.estimate,
            "ci_low": self.ci.low,
            "ci_high": self.ci.high,
            "ci_method": self.ci.method,
            "confidence_level": self.ci.level,
            "successes": self.successes,
            "n_units": self.n_units,
            "note": self.note,
        }

    def to_frame(self) -> pd.DataFrame:
        """One row: quantity, estimate, interval and its method, counts, note."""
        return pd.DataFrame([self.row()])


def proportion(
    successes: int,
    n_units: int,
    confidence_level: float = 0.95,
    *,
    name: str = "proportion",
    empty_reason: str = "no units",
) -> Proportion:
    """``successes / n_units`` with the Wilson score interval, units treated as independent.

    The interval is :func:`cohort.stats.proportions.wilson_interval` (Wilson EB, J Am Stat
    Assoc 1927;22:209-212; Newcombe RG, Stat Med 1998;17:857-872, method 3), labelled
    :data:`WILSON_METHOD`. Validated against Newcombe's Table I and ``statsmodels``
    ``proportion_confint(method="wilson")``. With ``n_units = 0`` the proportion is not
    estimable: NaN, ``empty_reason`` in the note and a ``NotEstimableWarning``.

    Examples
    --------
    >>> p = proportion(81, 263, name="sensitivity")
    >>> print(round(p.estimate, 4), round(p.ci.low, 4), round(p.ci.high, 4))
    0.308 0.2553 0.3662
    """
    check_options(confidence_level, 0)
    _check_counts(successes=successes, n_units=n_units)
    if n_units == 0:
        note = warn_not_estimable(name, empty_reason)
        ci = ConfidenceInterval.not_estimable(empty_reason, confidence_level, WILSON_METHOD)
        return Proportion(name, math.nan, ci, int(successes), 0, note)
    ci = _wilson(successes, n_units, confidence_level, method=WILSON_METHOD)
    return Proportion(name, successes / n_units, ci, int(successes), int(n_units))


# --- Cohen's kappa ---------------------------------------------------------------------------


@dataclass(frozen=True, repr=False)
class Kappa(Result):
    """Cohen's kappa of a k x k agreement table, with its asymptotic interval."""

    estimate: float
    se: float
    ci: ConfidenceInterval
    observed_agreement: float
    chance_agreement: float
    n_units: int
    note: str = ""

    def row(self) -> dict[str, object]:
        return {
            "quantity": "kappa",
            "estimate": self.estimate,
            "se": self.se,
            "ci_low": self.ci.low,
            "ci_high": self.ci.high,
            "ci_method": self.ci.method,
            "confidence_level": self.ci.level,
            "observed_agreement": self.observed_agreement,
            "chance_agreement": self.chance_agreement,
            "n_units": self.n_units,
            "note": self.note,
        }

    def to_frame(self) -> pd.DataFrame:
        """One row: estimate, SE, interval and its method, agreements, units, note."""
        return pd.DataFrame([self.row()])


def _kappa_not_estimable(
    reason: str, confidence_level: float, po: float, pe: float, n_units: int
) -> Kappa:
    note = warn_not_estimable("kappa", reason, stacklevel=3)
    ci = ConfidenceInterval.not_estimable(reason, confidence_level, KAPPA_METHOD)
    return Kappa(math.nan, math.nan, ci, po, pe, n_units, note)


def cohen_kappa(table: ArrayLike, confidence_level: float = 0.95) -> Kappa:
    """Cohen's kappa ``(p_o - p_e) / (1 - p_e)`` of a square table of counts.

    Standard error (not under the null) of Fleiss JL, Cohen J, Everitt BS. Large sample
    standard errors of kappa and weighted kappa. Psychol Bull 1969;72:323-327; the interval is
    ``kappa -/+ z SE``. Cohen J. A coefficient of agreement for nominal scales. Educ Psychol
    Meas 1960;20:37-46. Validated against Cohen's 1960 example and
    ``statsmodels.stats.inter_rater.cohens_kappa``.

    Examples
    --------
    Cohen's (1960) example, proportions times 200:

    >>> k = cohen_kappa([[88, 14, 18], [10, 40, 10], [2, 6, 12]])
    >>> print(round(k.estimate, 4), round(k.observed_agreement, 2), k.n_units)
    0.4915 0.7 200
    """
    check_options(confidence_level, 0)
    t = np.asarray(table, dtype=float)
    if t.ndim != 2 or t.shape[0] != t.shape[1] or t.shape[0] < 2:
        raise ValueError(f"table must be a square k x k table with k >= 2, got shape {t.shape}")
    if (t < 0).any() or not np.isfinite(t).all():
        raise ValueError("table must hold non-negative finite counts")
    n = float(t.sum())
    if n == 0:
        return _kappa_not_estimable("no units", confidence_level, math.nan, math.nan, 0)
    p = t / n
    rows, cols = p.sum(axis=1), p.sum(axis=0)
    po = float(np.trace(p))
    pe = float(rows @ cols)
    if pe >= 1.0:
        reason = "chance agreement is 1 (both methods put every unit in one category)"
        return _kappa_not_estimable(reason, confidence_level, po, pe, int(n))
    kappa = (po - pe) / (1.0 - pe)
    diag = np.diag(p)
    term_a = float(np.sum(diag * (1.0 - (rows + cols) * (1.0 - kappa)) ** 2))
    off = p * (cols[:, None] + rows[None, :]) ** 2  # p_ij (p_.i + p_j.)^2
    np.fill_diagonal(off, 0.0)
    term_b = (1.0 - kappa) ** 2 * float(off.sum())
    term_c = (kappa - pe * (1.0 - kappa)) ** 2
    var = (term_a + term_b - term_c) / ((1.0 - pe) ** 2 * n)
    se = math.sqrt(max(var, 0.0))
    z = float(stats.norm.ppf(0.5 + confidence_level / 2.0))
    ci = ConfidenceInterval(kappa - z * se, kappa + z * se, confidence_level, KAPPA_METHOD)
    return Kappa(kappa, se, ci, po, pe, int(n))


# --- McNemar's test --------------------------------------------------------------------------


@dataclass(frozen=True, repr=False)
class McNemar(Result):
    """McNemar's test of a paired 2x2 table from its discordant counts ``b`` and ``c``.

    ``statistic_name`` says what ``statistic`` is (``min(b, c)`` for the exact test,
    ``chi-square`` otherwise) and ``p_method`` how the p-value was obtained, as for the
    other tests (:class:`~cohort.stats.group_tests.GroupTest`).
    """

    statistic: float
    statistic_name: str
    p_value: float
    p_method: str
    b: int
    c: int
    note: str = ""

    _summary_counts = ("b", "c")

    def to_frame(self) -> pd.DataFrame:
        """One row: statistic, p-value and its method, discordant counts, note."""
        return pd.DataFrame(
            [
                {
                    "statistic": self.statistic,
                    "statistic_name": self.statistic_name,
                    "p_value": self.p_value,
                    "p_method": self.p_method,
                    "b": self.b,
                    "c": self.c,
                    "note": self.note,
                }
            ]
        )


def mcnemar_test(b: int, c: int, *, exact: bool = True, correction: bool = False) -> McNemar:
    """McNemar's test for paired proportions from the discordant counts ``b`` and ``c``.

    ``exact=True``: two-sided binomial test of ``min(b, c)`` in ``b + c`` trials with p = 1/2,
    ``p = min(1, 2 P(X <= min(b, c)))``; the statistic is ``min(b, c)``. ``exact=False``:
    ``(|b - c| - corr)^2 / (b + c)`` on 1 df, ``corr = 1`` with continuity correction.
    McNemar Q. Note on the sampling error of the difference between correlated proportions or
    percentages. Psychometrika 1947;12:153-157. Validated against
    ``statsmodels.stats.contingency_tables.mcnemar`` and Agresti's presidential approval
    table (Agresti, Categorical Data Analysis; chi-square 17.36, memory).

    Examples
    --------
    >>> print(round(mcnemar_test(150, 86, exact=False).statistic, 2))
    17.36
    >>> print(round(mcnemar_test(0, 7).p_value, 4))  # 2 / 2**7
    0.0156
    """
    _check_counts(b=b, c=c)
    b, c = int(b), int(c)
    m = b + c
    if exact:
        low = min(b, c)
        p = 1.0 if m == 0 else min(1.0, 2.0 * float(stats.binom.cdf(low, m, 0.5)))
        note = "no discordant pairs: p = 1" if m == 0 else ""
        return McNemar(float(low), "min(b, c)", p, MCNEMAR_EXACT, b, c, note)
    method = "chi-square, 1 df" + (", continuity corrected" if correction else "")
    if m == 0:
        note = warn_not_estimable("McNemar chi-square", "no discordant pairs")
        return McNemar(math.nan, "chi-square", math.nan, method, b, c, note)
    stat = (abs(b - c) - (1.0 if correction else 0.0)) ** 2 / m
    return McNemar(stat, "chi-square", float(stats.chi2.sf(stat, 1)), method, b, c)


# --- diagnostic accuracy of a 2x2 table ------------------------------------------------------


@dataclass(frozen=True, repr=False)
class DiagnosticAccuracy(Result):
    """Accuracy of a test classification against the reference from one 2x2 table."""

    tp: int
    fp: int
    fn: int
    tn: int
    sensitivity: Proportion
    specificity: Proportion
    ppv: Proportion
    npv: Proportion
    kappa: Kappa
    mcnemar: McNemar

    _summary_counts = ("n_units", "tp", "fp", "fn", "tn")

    @property
    def n_units(self) -> int:
        """Units classified by both methods: ``tp + fp + fn + tn``."""
        return self.tp + self.fp + self.fn + self.tn

    def to_frame(self) -> pd.DataFrame:
        """One row per statistic: quantity, estimate, interval and its method, units, note."""
        columns = ["quantity", "estimate", "ci_low", "ci_high", "ci_method", "n_units", "note"]
        parts = (self.sensitivity, self.specificity, self.ppv, self.npv, self.kappa)
        return pd.DataFrame([{c: part.row()[c] for c in columns} for part in parts])


def diagnostic_accuracy(
    tp: int, fp: int, fn: int, tn: int, confidence_level: float = 0.95
) -> DiagnosticAccuracy:
    """Sensitivity, specificity, PPV, NPV (Wilson intervals), kappa and exact McNemar of a 2x2.

    The reference is truth: ``tp`` both positive, ``fn`` reference only, ``fp`` test only.
    References as :func:`proportion`, :func:`cohen_kappa`, :func:`mcnemar_test`; validated
    against ``statsmodels`` (``proportion_confint``, ``cohens_kappa``, ``mcnemar``).

    Examples
    --------
    >>> acc = diagnostic_accuracy(tp=4, fp=2, fn=3, tn=126)
    >>> print(round(acc.sensitivity.estimate, 3), round(acc.specificity.estimate, 3))
    0.571 0.984
    >>> print(round(acc.kappa.estimate, 3), round(acc.mcnemar.p_value, 3), acc.n_units)
    0.596 1.0 135
    """
    check_options(confidence_level, 0)
    _check_counts(tp=tp, fp=fp, fn=fn, tn=tn)
    tp, fp, fn, tn = (int(v) for v in (tp, fp, fn, tn))
    parts = {
        "sensitivity": (tp, tp + fn),
        "specificity": (tn, tn + fp),
        "ppv": (tp, tp + fp),
        "npv": (tn, tn + fn),
    }
    props = {
        name: proportion(x, n, confidence_level, name=name, empty_reason=_DENOMINATOR_REASON[name])
        for name, (x, n) in parts.items()
    }
    kappa = cohen_kappa([[tp, fn], [fp, tn]], confidence_level)
    return DiagnosticAccuracy(tp, fp, fn, tn, **props, kappa=kappa, mcnemar=mcnemar_test(fn, fp))


def accuracy_of_counts(
    tp: ArrayLike, fp: ArrayLike, fn: ArrayLike, tn: ArrayLike
) -> dict[str, np.ndarray]:
    """Point estimates of :data:`STATISTICS` over arrays of 2x2 counts (vectorised).

    The formulas of :func:`diagnostic_accuracy` without intervals or warnings: a quantity
    that is not estimable (zero denominator, chance agreement 1) is NaN. Used for bootstrap
    resamples; checked against :func:`diagnostic_accuracy` in the tests.

    Examples
    --------
    >>> out = accuracy_of_counts([4, 0], [2, 1], [3, 0], [126, 9])
    >>> print([round(float(v), 3) for v in out["sensitivity"]])
    [0.571, nan]
    >>> print(round(float(out["kappa"][0]), 3))
    0.596
    """
    tp, fp, fn, tn = (np.asarray(v, dtype=float) for v in (tp, fp, fn, tn))
    n = tp + fp + fn + tn
    with np.errstate(invalid="ignore", divide="ignore"):
        po = (tp + tn) / n
        pe = ((tp + fn) * (tp + fp) + (fp + tn) * (fn + tn)) / (n * n)
        kappa = np.where(pe < 1.0, (po - pe) / (1.0 - pe), np.nan)
        return {
            "sensitivity": tp / (tp + fn),
            "specificity": tn / (tn + fp),
            "ppv": tp / (tp + fp),
            "npv": tn / (tn + fn),
            "kappa": kappa,
        }
