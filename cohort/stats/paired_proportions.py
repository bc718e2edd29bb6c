"""Two correlated proportions on the same units, units clustered in subjects.

Two methods classify the same units (e.g. the reference-positive segments of a cohort, for
their sensitivities); each unit is a success or a failure for each method, and units are
clustered in subjects. :func:`clustered_paired_proportions` compares the two proportions
with the test of Obuchowski (1998), which takes its variance from the subjects (the ratio
estimator of a clustered proportion) instead of treating units as independent, and gives the
exact McNemar test of the discordant units beside it (which does treat units as
independent).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from cohort.stats._data import subject_labels
from cohort.stats.bootstrap import check_options
from cohort.stats.classification import McNemar, mcnemar_test
from cohort.stats.results import ConfidenceInterval, Result, warn_not_estimable

__all__ = [
    "OBUCHOWSKI_CI_METHOD",
    "OBUCHOWSKI_P_METHOD",
    "PairedProportions",
    "clustered_paired_proportions",
]

OBUCHOWSKI = "Obuchowski (1998), ratio-estimator variance over subjects"
OBUCHOWSKI_P_METHOD = f"two-sided normal approximation, {OBUCHOWSKI}"
"""How the p-value of :func:`clustered_paired_proportions` is obtained."""
OBUCHOWSKI_CI_METHOD = f"Wald, {OBUCHOWSKI}"
"""How its interval of the difference is obtained."""


@dataclass(frozen=True, repr=False)
class PairedProportions(Result):
    """Difference of two correlated proportions, ``first - second``, on the same units.

    ``estimate`` (also :attr:`difference`) is ``p1 - p2`` and ``ci`` its Wald interval from
    the clustered variance ``variance_first + variance_second - 2 covariance``;
    ``statistic`` is ``z = estimate / std_error`` with its two-sided ``p_value``;
    ``mcnemar`` is the exact McNemar test of the discordant units (units as independent).
    ``n_subjects`` counts the subjects (clusters) with at least one unit, ``n_units`` the
    units.
    """

    estimate: float
    ci: ConfidenceInterval
    first: float
    second: float
    variance_first: float
    variance_second: float
    covariance: float
    std_error: float
    statistic: float
    p_value: float
    mcnemar: McNemar
    n_subjects: int
    n_units: int
    note: str = ""

    name = "difference"
    procedure = "clustered paired proportions (Obuchowski 1998)"
    statistic_name = "z"
    p_method = OBUCHOWSKI_P_METHOD

    @property
    def difference(self) -> float:
        """``first - second`` (the ``estimate``)."""
        return self.estimate

    def _summary_parts(self) -> tuple[list[tuple[str, object]], list[tuple[str, object]]]:
        return [("difference", self)], [("difference", self), ("exact McNemar", self.mcnemar)]

    def to_frame(self) -> pd.DataFrame:
        """One row: both proportions, the difference with its interval, z and p-values."""
        return pd.DataFrame(
            [
                {
                    "first": self.first,
                    "second": self.second,
                    "difference": self.estimate,
                    "ci_low": self.ci.low,
                    "ci_high": self.ci.high,
                    "ci_method": self.ci.method,
                    "confidence_level": self.ci.level,
                    "std_error": self.std_error,
                    "statistic": self.statistic,
                    "p_value": self.p_value,
                    "p_method": self.p_method,
                    "mcnemar_p": self.mcnemar.p_value,
                    "mcnemar_p_method": self.mcnemar.p_method,
                    "n_subjects": self.n_subjects,
                    "n_units": self.n_units,
                    "note": self.note,
                }
            ]
        )


def _successes(values: ArrayLike, name: str) -> np.ndarray:
    """A one-dimensional array of successes (booleans, or 0/1), checked."""
    array = np.asarray(values)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {array.shape}")
    if array.dtype == bool:
        return array
    if pd.isna(array).any():
        raise ValueError(f"{name} must not be missing, got {int(pd.isna(array).sum())} missing")
    numbers = array.astype(float)
    if not np.all((numbers == 0) | (numbers == 1)):
        bad = numbers[(numbers != 0) & (numbers != 1)][:3].tolist()
        raise ValueError(f"{name} must hold successes as booleans or 0/1, got {bad}")
    return numbers == 1


def _not_estimable(
    reason: str, p1: float, p2: float, mcnemar: McNemar, k: int, n: int, level: float
) -> PairedProportions:
    note = warn_not_estimable("clustered paired-proportions test", reason, stacklevel=3)
    ci = ConfidenceInterval.not_estimable(reason, level, OBUCHOWSKI_CI_METHOD)
    nan = math.nan
    return PairedProportions(p1 - p2, ci, p1, p2, nan, nan, nan, nan, nan, nan, mcnemar, k, n, note)


# Long: the formula, its references and what it was validated against (the body is ~45 lines)
def clustered_paired_proportions(
    first: ArrayLike,
    second: ArrayLike,
    *,
    subject: ArrayLike | None = None,
    confidence_level: float = 0.95,
) -> PairedProportions:
    """Compare two correlated proportions whose units are clustered in subjects.

    With ``n_i`` units of subject ``i`` (``K`` subjects, ``N = sum n_i`` units) and ``x_i``,
    ``y_i`` successes of the first and second method among them: ``p1 = sum x_i / N``,
    ``p2 = sum y_i / N``;
    ``var(p1) = K/(K-1) sum (x_i - p1 n_i)^2 / N^2``, ``var(p2)`` likewise,
    ``cov = K/(K-1) sum (x_i - p1 n_i)(y_i - p2 n_i) / N^2``;
    ``z = (p1 - p2) / sqrt(var(p1) + var(p2) - 2 cov)``, two-sided p from the standard
    normal, and the Wald interval ``p1 - p2 -/+ z_(1-alpha/2) se``.
    Obuchowski NA. On the comparison of correlated proportions for clustered data. Stat Med
    1998;17:1495-1507 (equations (1)-(4) and (6), memory).

    With one unit per subject the variance is ``K/(K-1)`` times the Wald variance of a
    paired difference, ``[(b + c)/K - ((b - c)/K)^2] / K`` with ``b``, ``c`` the discordant
    units (Agresti A. Categorical Data Analysis, 2nd ed. 2002, section 10.1 (memory)), the
    unclustered McNemar-type form. The exact McNemar test (:func:`mcnemar_test`) of the
    discordant units is returned beside it. Validated against a worked example by hand,
    that reduction, the cluster-robust (CR1) standard error of the mean unit difference
    from statsmodels OLS, and ``scipy.stats.norm`` (tests/stats/test_paired_proportions.py).

    Parameters
    ----------
    first, second
        Success (True or 1) of each method on each unit; the same units in the same order.
    subject
        Subject label of each unit; None: every unit is its own subject (no clustering).
    confidence_level
        Of the Wald interval.

    Returns
    -------
    PairedProportions
        Not estimable (NaN variance, z, p and interval, with a note and a
        :class:`~cohort.stats.results.NotEstimableWarning`): no units, fewer than 2
        subjects, or zero variance of the difference (every subject's difference of
        successes equals ``(p1 - p2) n_i``, e.g. the methods agree on every unit).

    Examples
    --------
    Four subjects with 3, 2, 4 and 1 units:

    >>> first = [1, 1, 0, 1, 1, 0, 1, 1, 0, 1]
    >>> second = [1, 0, 0, 1, 1, 1, 0, 0, 0, 0]
    >>> subject = list("aaabbccccd")
    >>> result = clustered_paired_proportions(first, second, subject=subject)
    >>> print(round(result.difference, 3), round(result.std_error ** 2, 4),
    ...       round(result.p_value, 4), round(result.mcnemar.p_value, 3))
    0.3 0.012 0.0062 0.375
    """
    check_options(confidence_level, 0)
    x_unit = _successes(first, "first")
    y_unit = _successes(second, "second")
    if x_unit.size != y_unit.size:
        raise ValueError(
            f"first and second must have the same length, got {x_unit.size} and {y_unit.size}"
        )
    n = int(x_unit.size)
    if subject is None:
        codes = np.arange(n)
    else:
        _, codes = np.unique(subject_labels(subject, n), return_inverse=True)
        codes = codes.reshape(-1)
    k = int(codes.max()) + 1 if n else 0
    b = int(np.sum(x_unit & ~y_unit))
    c = int(np.sum(~x_unit & y_unit))
    mcnemar = mcnemar_test(b, c)
    if n == 0:
        return _not_estimable("no units", math.nan, math.nan, mcnemar, 0, 0, confidence_level)
    sizes = np.bincount(codes, minlength=k).astype(float)
    x = np.bincount(codes, weights=x_unit.astype(float), minlength=k)
    y = np.bincount(codes, weights=y_unit.astype(float), minlength=k)
    p1, p2 = float(x.sum() / n), float(y.sum() / n)
    if k < 2:
        reason = f"fewer than 2 subjects (n={k})"
        return _not_estimable(reason, p1, p2, mcnemar, k, n, confidence_level)
    e1, e2 = x - p1 * sizes, y - p2 * sizes
    factor = k / (k - 1) / n**2
    var1, var2 = factor * float(e1 @ e1), factor * float(e2 @ e2)
    cov = factor * float(e1 @ e2)
    # the same variance without the cancellation of var1 + var2 - 2 cov
    spread = float((e1 - e2) @ (e1 - e2))
    # e1 - e2 = (N (x_i - y_i) - (X - Y) n_i) / N: a non-zero value is at least 1/N in size,
    # so a sum below 0.5 / N^2 is zero up to rounding
    if spread < 0.5 / n**2:
        reason = "zero variance of the difference (e.g. the methods agree on every unit)"
        return _not_estimable(reason, p1, p2, mcnemar, k, n, confidence_level)
    se = math.sqrt(factor * spread)
    d = p1 - p2
    z = d / se
    p = float(2.0 * stats.norm.sf(abs(z)))
    q = float(stats.norm.ppf(0.5 + confidence_level / 2.0))
    ci = ConfidenceInterval(d - q * se, d + q * se, confidence_level, OBUCHOWSKI_CI_METHOD)
    return PairedProportions(d, ci, p1, p2, var1, var2, cov, se, z, p, mcnemar, k, n)
