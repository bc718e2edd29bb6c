"""Regression-based limits of agreement (Bland & Altman 1999, section 3.2).

The limits follow the mean of the two methods when the differences grow or shrink with it;
see :func:`regression_based_limits`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from cohort.domain.options import DEFAULT_N_BOOT, DEFAULT_SEED
from cohort.stats._agreement_core import (
    LOA_MULTIPLIER,
    MIN_SUBJECTS,
    _all_not_estimable,
    _proportional_reason,
)
from cohort.stats._data import accepts_data
from cohort.stats.bootstrap import (
    check_options,
    context,
    paired_values,
    resample_counts,
)
from cohort.stats.results import Estimate, Result, estimates_frame

REGRESSION_LIMIT_NAMES: tuple[str, ...] = (
    "bias_intercept",
    "bias_slope",
    "abs_residual_intercept",
    "abs_residual_slope",
    "loa_low_intercept",
    "loa_low_slope",
    "loa_high_intercept",
    "loa_high_slope",
)
"""The line coefficients of :class:`RegressionLimits`, in order (its fields and the names of
its estimates)."""


@dataclass(frozen=True, repr=False)
class RegressionLimits(Result):
    """Regression-based limits of agreement (Bland & Altman 1999, section 3.2).

    ``D = b0 + b1 A`` is the mean difference at mean ``A`` of the two methods, and the limits
    are ``b0 + b1 A -/+ 1.96 sqrt(pi/2) (c0 + c1 A)`` where ``c0 + c1 A`` is the regression of
    the absolute residuals on ``A`` (the mean absolute residual is ``sqrt(2/pi)`` SD for
    normal residuals).
    """

    bias_intercept: Estimate
    bias_slope: Estimate
    abs_residual_intercept: Estimate
    abs_residual_slope: Estimate
    loa_low_intercept: Estimate
    loa_low_slope: Estimate
    loa_high_intercept: Estimate
    loa_high_slope: Estimate
    n_subjects: int
    n_pairs: int
    note: str = ""

    def at(self, mean: ArrayLike) -> pd.DataFrame:
        """Mean difference and limits at the given means of the two methods."""
        a = np.asarray(mean, dtype=float)
        return pd.DataFrame(
            {
                "mean": a,
                "bias": self.bias_intercept.estimate + self.bias_slope.estimate * a,
                "loa_low": self.loa_low_intercept.estimate + self.loa_low_slope.estimate * a,
                "loa_high": self.loa_high_intercept.estimate + self.loa_high_slope.estimate * a,
            }
        )

    @property
    def estimates(self) -> tuple[Estimate, ...]:
        """The eight line coefficients in the order of :data:`REGRESSION_LIMIT_NAMES`."""
        return tuple(getattr(self, name) for name in REGRESSION_LIMIT_NAMES)

    def to_frame(self) -> pd.DataFrame:
        """One row per line coefficient, with its intervals."""
        frame = estimates_frame(self.estimates)
        frame.insert(0, "procedure", "Bland-Altman 1999 regression-based limits")
        return frame


def _weighted_line(w: np.ndarray, a: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Weighted least-squares lines of ``v`` (1-D, or 2-D by resample) on ``a``, rows of ``w``."""
    sw = w.sum(axis=1)
    sa = w @ a
    saa = w @ (a * a)
    if v.ndim == 1:
        sv, sav = w @ v, w @ (a * v)
    else:
        wv = w * v
        sv, sav = wv.sum(axis=1), wv @ a
    slope = (sav - sa * sv / sw) / (saa - sa * sa / sw)
    return (sv - slope * sa) / sw, slope


@accepts_data
def regression_based_limits(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    subject: ArrayLike | None = None,
    confidence_level: float = 0.95,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
) -> RegressionLimits:
    """Regression-based limits of agreement (Bland & Altman 1999, section 3.2).

    Regress ``D = test - reference`` on ``A = (test + reference)/2``, then the absolute
    residuals on ``A``; limits ``b0 + b1 A -/+ 1.96 sqrt(pi/2) (c0 + c1 A)``.

    Bland JM, Altman DG. Measuring agreement in method comparison studies. Stat Methods Med
    Res 1999;8:135-160. Intervals: subject cluster bootstrap, percentile, on the same resamples
    as the other statistics (the absolute residuals depend on each resample's line, so this
    bootstrap works on pair weights rather than per-subject sums). No analytic interval.
    Validated against numpy least squares in tests/stats/test_agreement.py.

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> subj = ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e"]
    >>> lines = regression_based_limits(ref, new, subject=subj, n_boot=200, seed=1)
    >>> print(lines.at([10.0, 13.0]).round(3).to_string(index=False))
    mean  bias  loa_low  loa_high
    10.0 0.595    0.429     0.761
    13.0 0.315   -0.673     1.304
    """
    check_options(confidence_level, n_boot)
    data = paired_values(reference, test, subject)
    ctx = context(data, confidence_level, n_boot, seed)
    names = REGRESSION_LIMIT_NAMES
    a = 0.5 * (data.reference + data.test)
    reason = _proportional_reason(bool(a.size) and not np.all(a == a[0]), ctx)
    if reason:
        estimates, note = _all_not_estimable(ctx, names, reason, "regression-based limits")
        return RegressionLimits(*estimates, ctx.n_subjects, ctx.n_pairs, note=note)
    d = data.test - data.reference
    centre = a.mean()
    ac = a - centre
    factor = LOA_MULTIPLIER * math.sqrt(math.pi / 2)

    def lines(w: np.ndarray) -> np.ndarray:
        b0, b1 = _weighted_line(w, ac, d)
        resid = np.abs(d[None, :] - b0[:, None] - b1[:, None] * ac[None, :])
        c0, c1 = _weighted_line(w, ac, resid)
        # Back to the uncentred mean A: intercept - slope * centre.
        b0, c0 = b0 - b1 * centre, c0 - c1 * centre
        return np.column_stack(
            [b0, b1, c0, c1, b0 - factor * c0, b1 - factor * c1, b0 + factor * c0, b1 + factor * c1]
        )

    point = lines(np.ones((1, data.n_pairs)))[0]
    draws = None
    if n_boot and ctx.n_subjects >= MIN_SUBJECTS:
        with np.errstate(invalid="ignore", divide="ignore"):
            draws = np.concatenate(
                [
                    lines(counts[:, data.codes])
                    for counts in resample_counts(
                        data.n_subjects, n_boot, seed, row_size=data.n_pairs
                    )
                ]
            )
    missing = ctx.analytic_not_available("no analytic interval implemented")
    estimates = [
        ctx.estimate(name, float(point[j]), None if draws is None else draws[:, j], missing)
        for j, name in enumerate(names)
    ]
    return RegressionLimits(*estimates, ctx.n_subjects, ctx.n_pairs)
