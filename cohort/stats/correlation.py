"""Correlation of test and reference values: Pearson, Spearman and repeated-measures.

Correlation measures association, not agreement (Bland & Altman 1986); it is reported
because readers expect it. Pearson and Spearman treat every (subject, segment) pair as an
observation, so their textbook intervals ignore clustering; the default intervals are subject
cluster bootstrap percentile intervals. The repeated-measures correlation removes
between-subject variation by centring each subject's values on the subject's means.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from functools import partial

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from cohort.domain.options import DEFAULT_N_BOOT, DEFAULT_SEED
from cohort.stats._data import accepts_data
from cohort.stats.bootstrap import (
    Analysis,
    EstimationContext,
    SubjectSums,
    analyse,
    centred_moments,
    fisher_z_interval,
)
from cohort.stats.results import ConfidenceInterval, SingleQuantity, warn_not_estimable

PEARSON = "Pearson"
SPEARMAN = "Spearman"
REPEATED_MEASURES = "repeated-measures (Bakdash & Marusich 2017)"
QUANTITIES: dict[str, str] = {
    PEARSON: "pearson_r",
    SPEARMAN: "spearman_rho",
    REPEATED_MEASURES: "rm_corr",
}
"""The quantity of each procedure: its key in the statistics and its agreement-table column."""


def pearson_statistic(t: Mapping[str, np.ndarray]) -> dict:
    """Pearson's r of reference and test from totals."""
    sxx, syy, sxy = centred_moments(t, "x", "y")
    return {QUANTITIES[PEARSON]: sxy / np.sqrt(sxx * syy)}


def spearman_statistic(t: Mapping[str, np.ndarray]) -> dict:
    """Spearman's rho: Pearson's r of the full-sample mid-ranks, from totals."""
    sxx, syy, sxy = centred_moments(t, "rx", "ry")
    return {QUANTITIES[SPEARMAN]: sxy / np.sqrt(sxx * syy)}


def rm_corr_statistic(t: Mapping[str, np.ndarray]) -> dict:
    """Repeated-measures r from the within-subject centred sums of squares and products."""
    return {QUANTITIES[REPEATED_MEASURES]: t["cxy"] / np.sqrt(t["cxx"] * t["cyy"])}


@dataclass(frozen=True, repr=False)
class Correlation(SingleQuantity):
    """A correlation coefficient with its intervals, degrees of freedom and p-value.

    ``estimate`` is the coefficient, ``ci`` its default (subject cluster bootstrap) interval
    and ``analytic_ci`` the Fisher z interval. ``p_value`` tests r = 0 with
    ``t = r sqrt(df / (1 - r^2))`` on ``df`` degrees of freedom (pairs treated as independent
    for Pearson and Spearman, ``df = N - 2``).
    """

    procedure: str
    estimate: float
    ci: ConfidenceInterval
    analytic_ci: ConfidenceInterval
    df: float
    p_value: float
    n_subjects: int
    n_pairs: int
    note: str = ""

    _summary_test_label = "t test of no correlation"

    @property
    def quantity(self) -> str:  # type: ignore[override]
        """``pearson_r``, ``spearman_rho`` or ``rm_corr``."""
        return QUANTITIES[self.procedure]

    def to_frame(self) -> pd.DataFrame:
        """One row: the estimate, both intervals, then ``df`` and ``p_value``."""
        frame = super().to_frame()
        frame["df"] = self.df
        frame["p_value"] = self.p_value
        return frame


def _p_value(r: float, df: float) -> float:
    if abs(r) >= 1.0:
        return 0.0
    t = r * math.sqrt(df / (1.0 - r * r))
    return float(2.0 * stats.t.sf(abs(t), df))


def _reason(sums: SubjectSums, ctx: EstimationContext, procedure: str) -> str:
    if ctx.n_subjects < 2:
        return f"fewer than 2 subjects (n={ctx.n_subjects})"
    if ctx.n_pairs < 3:
        return f"fewer than 3 pairs (n={ctx.n_pairs})"
    within = " within subjects" if procedure == REPEATED_MEASURES else ""
    if procedure == REPEATED_MEASURES:
        df = ctx.n_pairs - ctx.n_subjects - 1
        if df < 2:
            return f"fewer than 2 residual degrees of freedom (N - k - 1 = {df})"
    for which in ("reference", "test"):
        if which + within in sums.invariant:
            return f"no variation in {which} values{within} (all tied)"
    return ""


def _build(sums, point, draws, ctx, *, procedure: str, key: str) -> Correlation:
    reason = _reason(sums, ctx, procedure)
    if reason:
        note = warn_not_estimable(f"{procedure} correlation", reason, stacklevel=3)
        missing = ctx.not_estimable(key, reason)
        return Correlation(
            procedure,
            missing.estimate,
            missing.ci,
            missing.analytic_ci,
            math.nan,
            math.nan,
            ctx.n_subjects,
            ctx.n_pairs,
            note,
        )
    r = point[key]
    n = ctx.n_pairs
    if procedure == REPEATED_MEASURES:
        df = n - ctx.n_subjects - 1
        # Fisher z with n_eff = df + 2, i.e. SE 1/sqrt(df - 1), as in Bakdash & Marusich 2017.
        se = 1.0 / math.sqrt(df - 1)
        method = "Fisher z, SE 1/sqrt(N - k - 2) (Bakdash & Marusich 2017)"
    else:
        df = n - 2
        if n <= 3:
            se = math.nan
        elif procedure == PEARSON:
            se = 1.0 / math.sqrt(n - 3)
        else:
            se = math.sqrt((1.0 + r * r / 2.0) / (n - 3))
        method = (
            "Fisher z, SE 1/sqrt(N - 3), pairs as independent"
            if procedure == PEARSON
            else "Fisher z, SE sqrt((1 + rho^2/2)/(N - 3)) (Bonett & Wright 2000), "
            "pairs as independent"
        )
    analytic = fisher_z_interval(r, se, ctx.confidence_level, method)
    detail = "ranks of the full sample (approximation)" if procedure == SPEARMAN else ""
    e = ctx.estimate(key, r, None if draws is None else draws[key], analytic, detail=detail)
    return Correlation(
        procedure, e.estimate, e.ci, e.analytic_ci, float(df), _p_value(r, df), ctx.n_subjects, n
    )


PEARSON_ANALYSIS = Analysis(
    pearson_statistic, partial(_build, procedure=PEARSON, key=QUANTITIES[PEARSON])
)
SPEARMAN_ANALYSIS = Analysis(
    spearman_statistic, partial(_build, procedure=SPEARMAN, key=QUANTITIES[SPEARMAN])
)
RM_CORR_ANALYSIS = Analysis(
    rm_corr_statistic,
    partial(_build, procedure=REPEATED_MEASURES, key=QUANTITIES[REPEATED_MEASURES]),
)


@accepts_data
def pearson(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    subject: ArrayLike | None = None,
    confidence_level: float = 0.95,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
) -> Correlation:
    """Pearson's product-moment correlation of reference and test over all pairs.

    Analytic interval: Fisher's z, ``tanh(atanh(r) -/+ z / sqrt(N - 3))`` (Fisher RA.
    Biometrika 1915;10:507-521 (memory)), which treats segments as independent; default: subject
    cluster bootstrap. Validated against scipy.stats.pearsonr (r, p and its Fisher interval)
    in tests/stats/test_correlation.py.

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> subj = ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e"]
    >>> r = pearson(ref, new, subject=subj, n_boot=200, seed=1)
    >>> round(r.estimate, 3), r.df, f"{r.p_value:.1e}"
    (0.966, 8.0, '5.7e-06')
    """
    return analyse(
        reference,
        test,
        subject,
        PEARSON_ANALYSIS,
        confidence_level=confidence_level,
        n_boot=n_boot,
        seed=seed,
    )


@accepts_data
def spearman(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    subject: ArrayLike | None = None,
    confidence_level: float = 0.95,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
) -> Correlation:
    """Spearman's rank correlation: Pearson's r of mid-ranks over all pairs.

    Analytic interval: Fisher z with the standard error ``sqrt((1 + rho^2/2) / (N - 3))`` of
    Bonett DG, Wright TA. Sample size requirements for estimating Pearson, Kendall and
    Spearman correlations. Psychometrika 2000;65:23-28 (memory). Bootstrap (an approximation, stated
    in the interval's method): each resample's Pearson r of the *full-sample* mid-ranks of
    its pairs, so that it is a function of per-subject sums; ranks are not recomputed within a
    resample. Validated against scipy.stats.spearmanr in tests/stats/test_correlation.py.

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> subj = ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e"]
    >>> rho = spearman(ref, new, subject=subj, n_boot=200, seed=1)
    >>> round(rho.estimate, 3)
    0.976
    """
    return analyse(
        reference,
        test,
        subject,
        SPEARMAN_ANALYSIS,
        confidence_level=confidence_level,
        n_boot=n_boot,
        seed=seed,
    )


@accepts_data
def repeated_measures_correlation(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    subject: ArrayLike,
    confidence_level: float = 0.95,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
) -> Correlation:
    """Repeated-measures correlation: the common within-subject association.

    ``r_rm = sum_i Sxy_i / sqrt(sum_i Sxx_i sum_i Syy_i)`` with sums of squares and products
    of values centred on each subject's means (equivalent to the analysis of covariance with
    subject as factor), ``df = N - k - 1``; Fisher z interval with ``n_eff = df + 2``.

    Bakdash JZ, Marusich LR. Repeated measures correlation. Front Psychol 2017;8:456 (memory);
    Bland JM, Altman DG. Calculating correlation coefficients with repeated observations:
    Part 1 - correlation within subjects. BMJ 1995;310:446. Computed by centring in numpy
    (pingouin.rm_corr builds a dummy design that runs out of memory at 10,000 subjects).
    Validated against pingouin.rm_corr and the values of DOMAIN.md on pingouin's ``rm_corr``
    dataset (tests/stats/test_correlation.py).

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> subj = ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e"]
    >>> rm = repeated_measures_correlation(ref, new, subject=subj, n_boot=200, seed=1)
    >>> round(rm.estimate, 3), rm.df
    (0.961, 4.0)
    """
    return analyse(
        reference,
        test,
        subject,
        RM_CORR_ANALYSIS,
        confidence_level=confidence_level,
        n_boot=n_boot,
        seed=seed,
    )
