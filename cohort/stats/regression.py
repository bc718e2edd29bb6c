"""Method-comparison regression of the test method (y) on the reference method (x).

Two procedures, each returning a :class:`MethodRegression`:

* :func:`passing_bablok`: the shifted median of the pairwise slopes (Passing & Bablok 1983),
  computed without enumerating the n(n-1)/2 slopes so that a cohort of 10^5 subjects x 17
  segments (1.7 million pairs) fits in memory and in seconds.
* :func:`deming`: the closed-form Deming (1943) estimator with a known ratio of error
  variances.

x is always the reference method and y the test method (data contract). Intervals are, as
for every paired estimator, subject-cluster bootstrap percentile intervals by default
(``n_boot=DEFAULT_N_BOOT``, ``seed=DEFAULT_SEED`` of :mod:`cohort.domain.options`; Field &
Welsh, J R Stat Soc B 2007), because segments of one subject are not independent; the
analytic interval, which treats pairs as independent, is beside them (``analytic_ci``) and is
the interval itself with ``n_boot=0``.

The Passing-Bablok machinery lives in private modules: :mod:`cohort.stats._pb_fit` (point fit
and rank-based interval), :mod:`cohort.stats._slopes` (slope order statistics with or without
enumeration), :mod:`cohort.stats._inversions` (inversion counts) and
:mod:`cohort.stats._pb_bootstrap` (the weighted-slope cluster bootstrap).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from functools import partial

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from cohort.domain.options import DEFAULT_N_BOOT, DEFAULT_SEED
from cohort.stats import _pb_bootstrap
from cohort.stats._data import accepts_data, paired_arrays, subject_labels
from cohort.stats._inversions import ragged_ranges
from cohort.stats._pb_fit import PBFit, pb_fit, pb_point
from cohort.stats.bootstrap import ResampleCounts, check_options
from cohort.stats.results import (
    ConfidenceInterval,
    Estimate,
    Result,
    estimates_frame,
    warn_not_estimable,
)

__all__ = [
    "PB_BOOTSTRAP_MIN_B",
    "PB_BOOTSTRAP_PAIR_BUDGET",
    "PB_WEIGHTED_MAX_N",
    "MethodRegression",
    "deming",
    "passing_bablok",
]

#: Largest n_pairs x B (pairs re-fitted over all bootstrap resamples) that a Passing-Bablok
#: cluster bootstrap may cost. Measured by benchmarks/regression_speed.py on a shared 2-core
#: machine: one resample of 170,000 pairs takes 0.5-0.6 s, so 2e8 pair fits (B = 1176 at
#: 170,000 pairs) take 10-12 minutes there, and B = 2000 would take 17-21. Above the budget
#: fewer resamples are run and the CI says how many; at 1.7 million pairs only 117 fit.
PB_BOOTSTRAP_PAIR_BUDGET = 200_000_000

#: Up to this many pairs the Passing-Bablok cluster bootstrap enumerates the slopes once and
#: weights them per resample (``_pb_weighted_draws``: each slope between a point of subject s
#: and one of subject t counts c_s c_t times when s is drawn c_s times), instead of refitting:
#: B = 2000 takes about 1 s at 800 pairs; memory O(n^2) for the slopes (about 0.2 GB at
#: the limit).
PB_WEIGHTED_MAX_N = 4000

#: Fewest resamples for which a 95 % percentile interval is still reported; below it the
#: bootstrap is not run at all and the analytic interval is returned with a note.
PB_BOOTSTRAP_MIN_B = 200

_PB = "Passing-Bablok"
_DEMING = "Deming"
_PB_SLOPE_METHOD = "rank-based (Passing & Bablok 1983), pairs treated as independent"
_PB_INTERCEPT_METHOD = "from the slope limits (Passing & Bablok 1983), pairs treated as independent"
_JACKKNIFE = "jackknife SE (Linnet 1990), t on n-2 df, pairs treated as independent"


@dataclass(frozen=True, repr=False)
class MethodRegression(Result):
    """Slope and intercept of test = intercept + slope x reference, with their intervals.

    ``slope`` and ``intercept`` are :class:`~cohort.stats.results.Estimate` objects: ``ci`` is
    the interval the function reports (the cluster bootstrap with ``n_boot > 0``, else the
    analytic one), ``analytic_ci`` the textbook interval (rank-based for Passing-Bablok,
    jackknife for Deming), which treats pairs as independent.
    """

    procedure: str  # "Passing-Bablok" or "Deming"
    slope: Estimate
    intercept: Estimate
    n_subjects: int
    n_pairs: int
    note: str = ""

    def to_frame(self) -> pd.DataFrame:
        """One row each for slope and intercept (the columns of ``Estimate.to_frame``)."""
        frame = estimates_frame((self.slope, self.intercept))
        frame.insert(0, "procedure", self.procedure)
        return frame


# --------------------------------------------------------------------------- input checks


def _paired(reference: ArrayLike, test: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    x, y = paired_arrays(reference, test)
    # -0.0 + 0.0 == +0.0: one zero, so x_j - x_i of tied zeros is always +0.0
    return x + 0.0, y + 0.0


def _check_common(confidence_level: float, n_boot: int, subject, n: int) -> np.ndarray | None:
    """Check the options and the subject labels (the shared check,
    :func:`cohort.stats._data.subject_labels`); subject codes in order of first appearance
    (None without)."""
    check_options(confidence_level, n_boot)
    if subject is None:
        return None
    labels = subject_labels(subject, n)
    return pd.factorize(labels.astype(object), use_na_sentinel=True)[0]


def _n_subjects(codes: np.ndarray | None, n: int) -> int:
    """Clusters of the bootstrap: the subjects, or every pair without ``subject``."""
    if codes is None or codes.size == 0:
        return n
    return int(codes.max()) + 1


def _result(
    procedure: str,
    values: tuple[float, float],
    cis: tuple[ConfidenceInterval, ConfidenceInterval],
    analytic: tuple[ConfidenceInterval, ConfidenceInterval],
    counts: tuple[int, int],
    note: str = "",
) -> MethodRegression:
    """A MethodRegression from (slope, intercept) values, intervals and (subjects, pairs)."""
    slope, intercept = (
        Estimate(name, value, ci, a_ci, *counts)
        for name, value, ci, a_ci in zip(("slope", "intercept"), values, cis, analytic, strict=True)
    )
    return MethodRegression(procedure, slope, intercept, *counts, note)


def _nan_result(procedure: str, counts: tuple[int, int], reason: str, cl: float, method: str):
    note = warn_not_estimable(procedure, reason, stacklevel=3)
    ci = ConfidenceInterval.not_estimable(reason, cl, method)
    slope, intercept = (
        Estimate(name, math.nan, ci, ci, *counts, f"not estimable: {reason}")
        for name in ("slope", "intercept")
    )
    return MethodRegression(procedure, slope, intercept, *counts, note)


# -------------------------------------------------------------------------- Passing-Bablok


@accepts_data
def passing_bablok(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    confidence_level: float = 0.95,
    subject: ArrayLike | None = None,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
    max_pair_resamples: int = PB_BOOTSTRAP_PAIR_BUDGET,
) -> MethodRegression:
    """Passing-Bablok regression of test (y) on reference (x).

    Slope b = shifted median of the pairwise slopes S_ij = (y_j - y_i) / (x_j - x_i),
    i < j: pairs of identical points are ignored, S_ij = -1 is discarded, a vertical pair
    (x_i = x_j) has S_ij = +inf or -inf by the sign of y_j - y_i in the order given; with N
    slopes, K of them below -1, b = S_((N+1)/2+K) (N odd) or the mean of S_(N/2+K) and
    S_(N/2+1+K). Intercept a = median(y_i - b x_i). Rank-based interval: C = z_(1-alpha/2)
    sqrt(n(n-1)(2n+5)/18), M1 = round((N - C)/2) (half up), M2 = N - M1 + 1, slope limits
    S_(M1+K), S_(M2+K); intercept limits median(y - b_U x), median(y - b_L x).

    Reference: Passing H, Bablok W. A new biometrical procedure for testing the equality of
    measurements from two different analytical methods. J Clin Chem Clin Biochem
    1983;21:709-720.

    Algorithm: up to :data:`cohort.stats._pb_fit.PB_DIRECT_MAX_N` pairs all slopes are
    sorted; above, the order statistics are selected exactly without enumerating them
    (:mod:`cohort.stats._slopes`). Memory O(n); on a shared 2-core machine about 0.04 s at
    1,700 pairs, 1 s at 170,000 and 16 s at 1.7 million, slope and interval together.

    Intervals: by default (``n_boot > 0``) the percentile interval of a bootstrap that
    resamples subjects with replacement (``subject``; without it every pair is its own
    cluster), ``default_rng(seed)``; the rank-based interval, which treats pairs as
    independent, is ``analytic_ci`` (and the interval itself with ``n_boot=0``). If n_pairs
    x n_boot exceeds ``max_pair_resamples`` only as many resamples as fit are run (the
    ``method`` gives the B run, a note says so); below ``PB_BOOTSTRAP_MIN_B`` resamples the
    analytic interval is returned with a note (default budget: B up to 1176 at 170,000
    pairs; none at 1.7 million). Raise ``max_pair_resamples`` to run more, knowingly.

    Validated against: an independent O(n^2) computation with ties, vertical slopes and
    slopes of -1 (exact equality, also for the selection algorithm); the creatinine example
    of the R package mcr as printed by Wicklin (2022) (slope, intercept, lower slope and upper
    intercept limits; mcr's other two limits follow its own documented interpolated-rank
    rule, which the tests reproduce); and the invariants of an exact line, swapping x and y,
    and a common shift.

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> fit = passing_bablok(ref, new)
    >>> round(fit.slope.estimate, 3), round(fit.intercept.estimate, 3)
    (0.9, 1.55)
    >>> round(fit.slope.analytic_ci.low, 3), round(fit.slope.analytic_ci.high, 3)
    (0.735, 1.214)
    >>> fit.slope.ci.method  # the default interval: every pair its own cluster here
    'pair bootstrap (no subject given), percentile, B=2000, seed=20261202'
    """
    x, y = _paired(reference, test)
    codes = _check_common(confidence_level, n_boot, subject, x.size)
    if not isinstance(max_pair_resamples, int | np.integer) or max_pair_resamples < 0:
        raise ValueError(
            f"max_pair_resamples must be a non-negative integer, got {max_pair_resamples!r}"
        )
    cl = float(confidence_level)
    fit = pb_fit(x, y, cl)
    n = int(x.size)
    counts = (_n_subjects(codes, n), n)
    if fit.reason:
        return _nan_result(_PB, counts, fit.reason, cl, _PB_SLOPE_METHOD)
    notes = list(fit.notes)
    values = (fit.slope, fit.intercept)
    boot, boot_notes = _pb_cluster_intervals(x, y, codes, int(n_boot), seed, cl, max_pair_resamples)
    notes += boot_notes
    if boot is not None:
        analytic = _pb_analytic(fit, cl, warn=False)
        return _result(_PB, values, boot, analytic, counts, "; ".join(notes))
    if n_boot == 0 and codes is not None:
        notes.append("rank-based interval ignores the clustering of segments in subjects")
    analytic = _pb_analytic(fit, cl, warn=True)
    return _result(_PB, values, analytic, analytic, counts, "; ".join(notes))


def _pb_cluster_intervals(
    x: np.ndarray,
    y: np.ndarray,
    codes: np.ndarray | None,
    n_boot: int,
    seed: int | None,
    cl: float,
    max_pair_resamples: int,
) -> tuple[tuple[ConfidenceInterval, ConfidenceInterval] | None, list[str]]:
    """The cluster bootstrap intervals of the fit (None when not run) and notes on them.

    Up to ``PB_WEIGHTED_MAX_N`` pairs by weighted slopes; above, by refitting within the
    budget of ``max_pair_resamples`` pair fits, and not at all below ``PB_BOOTSTRAP_MIN_B``
    resamples.
    """
    n = x.size
    if n_boot == 0:
        return None, []
    if n <= PB_WEIGHTED_MAX_N:
        return _bootstrap(x, y, codes, n_boot, seed, cl, _weighted_pb_resamples), []
    b_fit = max(0, int(max_pair_resamples) // max(n, 1))
    b_run = min(n_boot, b_fit)
    if b_run >= PB_BOOTSTRAP_MIN_B or b_run == n_boot:
        notes = []
        if b_run < n_boot:
            notes.append(
                f"bootstrap reduced from B={n_boot} to B={b_run}: {n} pairs x {n_boot} "
                f"resamples exceeds the budget of {max_pair_resamples} pair fits"
            )
        refit = partial(_refit_resamples, refit=pb_point)
        return _bootstrap(x, y, codes, b_run, seed, cl, refit), notes
    budget = (
        f"more than {PB_WEIGHTED_MAX_N} pairs and no refit budget"
        if max_pair_resamples == 0
        else f"{n} pairs allow only B={b_run} resamples within the budget of "
        f"{max_pair_resamples} pair fits (minimum {PB_BOOTSTRAP_MIN_B})"
    )
    note = (
        f"cluster bootstrap not run ({budget}); the rank-based interval ignores the "
        "clustering of segments in subjects"
    )
    return None, [note]


def _pb_analytic(
    fit: PBFit, cl: float, *, warn: bool
) -> tuple[ConfidenceInterval, ConfidenceInterval]:
    """The rank-based intervals of slope and intercept; ``warn``: a NotEstimableWarning
    for each that is not estimable (when they are the intervals reported)."""
    if fit.slope_ci is None:
        s_ci = ConfidenceInterval.not_estimable(fit.ci_reason, cl, _PB_SLOPE_METHOD)
        if warn:
            warn_not_estimable(f"{_PB} slope interval", fit.ci_reason, stacklevel=3)
    else:
        s_ci = ConfidenceInterval(*fit.slope_ci, cl, _PB_SLOPE_METHOD)
    if fit.intercept_ci is None:
        reason = fit.ci_reason or "slope interval not estimable"
        a_ci = ConfidenceInterval.not_estimable(reason, cl, _PB_INTERCEPT_METHOD)
        if warn and fit.slope_ci is not None:
            warn_not_estimable(f"{_PB} intercept interval", reason, stacklevel=3)
    else:
        a_ci = ConfidenceInterval(*fit.intercept_ci, cl, _PB_INTERCEPT_METHOD)
    return s_ci, a_ci


# ------------------------------------------------------------------------------- Deming


def _deming_slope(sxx, syy, sxy, ratio: float):
    """Closed-form Deming slope from (co)variances; arrays broadcast. NaN where sxy == 0.

    Root of sxy b^2 + (ratio sxx - syy) b - ratio sxy = 0 with the sign of sxy, written in
    the form that avoids cancellation (the two roots multiply to -ratio).
    """
    sxx, syy, sxy = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (sxx, syy, sxy)))
    d = syy - ratio * sxx
    root = np.sqrt(d * d + 4.0 * ratio * sxy * sxy)
    with np.errstate(divide="ignore", invalid="ignore"):
        b = np.where(d >= 0, (d + root) / (2.0 * sxy), 2.0 * ratio * sxy / (root - d))
    return np.where(sxy == 0, np.nan, b)


@accepts_data
def deming(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    error_ratio: float = 1.0,
    confidence_level: float = 0.95,
    subject: ArrayLike | None = None,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
    resample_counts: ResampleCounts | None = None,
) -> MethodRegression:
    """Deming regression of test (y) on reference (x) with a known error-variance ratio.

    Model x_i = X_i + d_i, y_i = a + b X_i + e_i; ``error_ratio`` = var(e) / var(d), the test
    method's error variance over the reference's (some software uses the reciprocal).
    Default 1: orthogonal regression. Closed form:
    b = [s_yy - r s_xx + sqrt((s_yy - r s_xx)^2 + 4 r s_xy^2)] / (2 s_xy), a = ybar - b xbar.
    As r -> infinity (all error in y) b tends to the OLS slope of y on x, s_xy / s_xx; as
    r -> 0 (all error in x) to the inverse of the OLS slope of x on y, s_yy / s_xy.

    Interval: by default (``n_boot > 0``) the subject-cluster bootstrap percentile interval,
    numpy ``default_rng(seed)``, from per-subject sums (without ``subject`` every pair is its
    own cluster); ``analytic_ci`` is the jackknife interval, standard errors with a t
    quantile on n - 2 df, pairs treated as independent (Linnet 1990, 1993; see
    :func:`_deming_jackknife`), and the interval itself with ``n_boot=0``; ``resample_counts`` (a
    :class:`cohort.stats.bootstrap.ResampleCounts` of the same ``n_boot`` and ``seed``)
    reuses subject counts drawn for other statistics: the very resamples this function would
    draw, so the interval is the same.

    Reference: Deming WE. Statistical adjustment of data. Wiley, 1943.

    Validated against: an independent closed-form computation and a leave-one-out loop, the
    first principal component (numpy SVD) after scaling y by 1/sqrt(error_ratio), scipy.odr
    while it still imports, and the two OLS limits (tests).

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> fit = deming(ref, new, n_boot=0)  # the jackknife interval only
    >>> round(fit.slope.estimate, 3), round(fit.intercept.estimate, 3)
    (0.91, 1.475)
    >>> round(fit.slope.ci.low, 3), round(fit.slope.ci.high, 3)
    (0.657, 1.162)
    """
    x, y = _paired(reference, test)
    codes = _check_common(confidence_level, n_boot, subject, x.size)
    if not (isinstance(error_ratio, int | float) and 0.0 < error_ratio < math.inf):
        raise ValueError(f"error_ratio must be positive and finite, got {error_ratio!r}")
    ratio = float(error_ratio)
    cl = float(confidence_level)
    n = int(x.size)
    counts = (_n_subjects(codes, n), n)
    if n < 3:
        return _nan_result(_DEMING, counts, f"fewer than 3 pairs (n={n})", cl, _JACKKNIFE)
    if np.all(x == x[0]):
        return _nan_result(_DEMING, counts, "all reference values identical", cl, _JACKKNIFE)
    xbar, ybar = x.mean(), y.mean()
    dx, dy = x - xbar, y - ybar
    sxx, syy, sxy = float(dx @ dx), float(dy @ dy), float(dx @ dy)
    if sxy == 0.0:
        reason = "zero covariance between the methods, so the slope is undetermined"
        return _nan_result(_DEMING, counts, reason, cl, _JACKKNIFE)
    slope = float(_deming_slope(sxx, syy, sxy, ratio))
    intercept = float(ybar - slope * xbar)
    moments = (xbar, ybar, dx, dy, sxx, syy, sxy)
    analytic = _deming_jackknife(moments, (slope, intercept), ratio, cl, warn=n_boot == 0)
    if n_boot > 0:
        shared = _usable_counts(resample_counts, int(n_boot), seed, codes, subject)
        resampler = partial(_deming_resamples, ratio=ratio, shared_counts=shared)
        cis = _bootstrap(x, y, codes, int(n_boot), seed, cl, resampler)
        return _result(_DEMING, (slope, intercept), cis, analytic, counts)
    note = ""
    if codes is not None:
        note = "jackknife interval ignores the clustering of segments in subjects"
    return _result(_DEMING, (slope, intercept), analytic, analytic, counts, note)


def _usable_counts(
    counts: ResampleCounts | None, n_boot: int, seed: int | None, codes, subject
) -> ResampleCounts | None:
    """``counts`` when they are this bootstrap's own draws: same ``n_boot`` and ``seed``,
    subjects numbered 0..k-1 in order as the shared counts number them; else None."""
    if (
        counts is not None
        and seed is not None
        and (counts.n_boot, counts.seed) == (n_boot, seed)
        and np.array_equal(codes, np.asarray(subject))
    ):
        return counts
    return None


def _deming_jackknife(
    moments: tuple, fit: tuple[float, float], ratio: float, cl: float, *, warn: bool
) -> tuple[ConfidenceInterval, ConfidenceInterval]:
    """Jackknife t intervals of slope and intercept; ``warn``: a NotEstimableWarning for each
    that is not estimable.

    Leave one pair out with closed-form updates of the sums (O(n)), standard errors with a t
    quantile on n - 2 degrees of freedom (Linnet K. Estimation of the linear relationship
    between the measurements of two methods with proportional errors. Stat Med
    1990;9:1463-1473; Linnet K. Evaluation of regression procedures for methods comparison
    studies. Clin Chem 1993;39:424-432; bibliographic details from memory; the n - 2 df are
    our choice).
    """
    xbar, ybar, dx, dy, sxx, syy, sxy = moments
    n = dx.size
    # leave-one-out sums: S_(i) = S - n/(n-1) d_i d_i, means shift by -d_i/(n-1)
    f = n / (n - 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        b_i = _deming_slope(sxx - f * dx * dx, syy - f * dy * dy, sxy - f * dx * dy, ratio)
        a_i = (ybar - dy / (n - 1.0)) - b_i * (xbar - dx / (n - 1.0))
    tq = stats.t.ppf(0.5 + cl / 2.0, n - 2)
    cis = []
    for est, loo, what in ((fit[0], b_i, "slope"), (fit[1], a_i, "intercept")):
        if not np.all(np.isfinite(loo)):
            reason = "a leave-one-out slope is undefined (zero covariance without one pair)"
            if warn:
                warn_not_estimable(f"{_DEMING} {what} interval", reason, stacklevel=3)
            cis.append(ConfidenceInterval.not_estimable(reason, cl, _JACKKNIFE))
            continue
        se = math.sqrt((n - 1.0) / n * float(np.sum((loo - loo.mean()) ** 2)))
        low, high = float(est - tq * se), float(est + tq * se)
        cis.append(ConfidenceInterval(low, high, cl, _JACKKNIFE))
    return cis[0], cis[1]


# ---------------------------------------------------------------------------- bootstrap

Resampler = Callable[
    [np.ndarray, np.ndarray, np.ndarray, int, int, np.random.Generator], np.ndarray
]
"""(x, y, codes, n_clusters, n_boot, rng) -> (slope, intercept) of each resample, (n_boot, 2)."""


def _bootstrap(
    x: np.ndarray,
    y: np.ndarray,
    codes: np.ndarray | None,
    n_boot: int,
    seed: int | None,
    cl: float,
    resampler: Resampler,
) -> tuple[ConfidenceInterval, ConfidenceInterval]:
    """Cluster bootstrap percentile intervals for (slope, intercept).

    Each resample draws as many clusters as there are, with replacement
    (``rng.integers(0, n_clusters, n_clusters)``), and ``resampler`` fits it. Percentiles
    by ``numpy.quantile`` (linear interpolation); non-estimable resamples are left out and
    counted in the note.
    """
    if seed is None:
        seed = int(np.random.SeedSequence().entropy)  # recorded, so the run can be repeated
    if codes is None:
        codes = np.arange(x.size)
        kind = "pair bootstrap (no subject given)"
    else:
        kind = "subject cluster bootstrap"
    method = f"{kind}, percentile, B={n_boot}, seed={seed}"
    n_clusters = int(codes.max()) + 1
    if n_clusters < 2:
        reason = "fewer than 2 subjects for the cluster bootstrap"
        warn_not_estimable("bootstrap interval", reason, stacklevel=3)
        ci = ConfidenceInterval.not_estimable(reason, cl, method)
        return ci, ci
    boot = resampler(x, y, codes, n_clusters, n_boot, np.random.default_rng(seed))
    ok = np.all(np.isfinite(boot), axis=1)
    n_bad = int(n_boot - ok.sum())
    note = f"{n_bad} of {n_boot} resamples not estimable and left out" if n_bad else ""
    if ok.sum() < 2:
        reason = f"only {int(ok.sum())} estimable resamples"
        warn_not_estimable("bootstrap interval", reason, stacklevel=3)
        ci = ConfidenceInterval.not_estimable(reason, cl, method)
        return ci, ci
    alpha = 1.0 - cl
    lo, hi = np.quantile(boot[ok], [alpha / 2.0, 1.0 - alpha / 2.0], axis=0)
    return (
        ConfidenceInterval(float(lo[0]), float(hi[0]), cl, method, note),
        ConfidenceInterval(float(lo[1]), float(hi[1]), cl, method, note),
    )


def _deming_resamples(x, y, codes, n_clusters, n_boot, rng, *, ratio, shared_counts):
    """Deming from per-cluster sums of centred values: O(clusters) per resample."""
    xc, yc = x - x.mean(), y - y.mean()
    sums = np.stack(
        [
            np.bincount(codes, weights=w, minlength=n_clusters)
            for w in (np.ones_like(xc), xc, yc, xc * xc, yc * yc, xc * yc)
        ],
        axis=1,
    )
    if shared_counts is not None:
        draws = shared_counts.rows(n_clusters)  # the same draws as below, made once
    else:
        draws = (
            np.bincount(rng.integers(0, n_clusters, n_clusters), minlength=n_clusters)
            for _ in range(n_boot)
        )
    totals = np.empty((n_boot, 6))
    for b, counts in enumerate(draws):
        totals[b] = counts @ sums  # one product per resample, as the sums were validated
    m, sx, sy, sxx, syy, sxy = totals.T
    boot = np.empty((n_boot, 2))
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = _deming_slope(sxx - sx * sx / m, syy - sy * sy / m, sxy - sx * sy / m, ratio)
        boot[:, 0] = slope
        boot[:, 1] = (y.mean() + sy / m) - slope * (x.mean() + sx / m)
    return boot


def _weighted_pb_resamples(x, y, codes, n_clusters, n_boot, rng):
    """Passing-Bablok of every resample by weighted slopes (:mod:`cohort.stats._pb_bootstrap`)."""
    draws = np.stack(
        [np.bincount(rng.integers(0, n_clusters, n_clusters), minlength=n_clusters)
         for _ in range(n_boot)]
    )  # fmt: skip
    return _pb_bootstrap.pb_weighted_draws(x, y, codes, draws)


def _refit_resamples(x, y, codes, n_clusters, n_boot, rng, *, refit):
    """``refit`` on all the pairs of each resample's drawn clusters."""
    boot = np.empty((n_boot, 2))
    order = np.argsort(codes, kind="stable")
    size = np.bincount(codes, minlength=n_clusters)
    start = np.cumsum(size) - size
    for b in range(n_boot):
        draw = rng.integers(0, n_clusters, n_clusters)
        idx = order[ragged_ranges(start[draw], size[draw])]
        boot[b] = refit(x[idx], y[idx])
    return boot
