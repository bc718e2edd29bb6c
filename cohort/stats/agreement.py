"""Bias and limits of agreement of a test method against a reference, segments within subjects.

All differences are test minus reference (``d = y - x``). Every subject contributes several
segments, so the limits are those of Bland & Altman (2007) for multiple observations per
subject when the true value varies, from the variance components of a one-way analysis of
variance of the differences on subject. The classic limits of Bland & Altman (1986) on the
per-subject mean differences are a secondary result (they describe subject means, not single
segments). Proportional bias is the slope of the difference on the mean of the two methods,
with regression-based limits (Bland & Altman 1999) on request. On the ratio scale the
differences are ``ln(test / reference)`` and results are reported back-transformed (ratios).

Default intervals are subject cluster bootstrap percentile intervals (see
:mod:`cohort.stats.bootstrap`); textbook intervals are reported beside them.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from functools import partial
from typing import Literal

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from cohort.domain.options import DEFAULT_N_BOOT, DEFAULT_SEED
from cohort.stats._agreement_core import (
    LOA_MULTIPLIER,
    MIN_SUBJECTS,
    _all_not_estimable,
    _key,
    _proportional_reason,
    ba2007_analytic,
    ba2007_statistic,
    cluster_robust_line,
    proportional_statistic,
    subject_mean_analytic,
    subject_mean_statistic,
)
from cohort.stats._data import accepts_data
from cohort.stats.bootstrap import (
    Analysis,
    EstimationContext,
    SubjectSums,
    analyse,
)
from cohort.stats.regression_limits import (
    RegressionLimits,
    regression_based_limits,
)
from cohort.stats.results import (
    ConfidenceInterval,
    Estimate,
    Result,
    estimates_frame,
    warn_not_estimable,
)

# Re-exported: the agreement namespace as it was before the split (statistics of totals and
# analytic intervals live in cohort.stats._agreement_core). The regression-based limits are
# imported from their home, cohort.stats.regression_limits.
__all__ = [
    "LOA_MULTIPLIER",
    "MIN_SUBJECTS",
    "PROPORTIONAL",
    "SCALES",
    "LimitsOfAgreement",
    "ProportionalBias",
    "ba2007_analysis",
    "ba2007_analytic",
    "ba2007_statistic",
    "bias",
    "cluster_robust_line",
    "limits_of_agreement",
    "proportional_bias",
    "proportional_statistic",
    "subject_mean_analysis",
    "subject_mean_analytic",
    "subject_mean_limits",
    "subject_mean_statistic",
]

Scale = Literal["difference", "ratio"]
SCALES: tuple[str, ...] = ("difference", "ratio")

_BA2007 = "Bland-Altman 2007 (multiple observations per subject, true value varies)"
_BA1986 = "Bland-Altman 1986 on per-subject mean differences"


def _check_scale(scale: str) -> None:
    if scale not in SCALES:
        raise ValueError(f"scale must be one of {SCALES}, got {scale!r}")


def _names(scale: str) -> dict[str, str]:
    """Estimate names on each scale (the ratio scale reports back-transformed ratios)."""
    if scale == "difference":
        return {
            "bias": "bias",
            "loa_low": "loa_low",
            "loa_high": "loa_high",
            "sd": "sd",
            "sd_within": "sd_within",
            "sd_between": "sd_between",
        }
    return {
        "bias": "ratio_bias",
        "loa_low": "ratio_loa_low",
        "loa_high": "ratio_loa_high",
        "sd": "sd_log",
        "sd_within": "sd_log_within",
        "sd_between": "sd_log_between",
    }


# --- result types ---------------------------------------------------------------------------


@dataclass(frozen=True, repr=False)
class LimitsOfAgreement(Result):
    """Bias and limits of agreement (test minus reference), with intervals.

    On the ratio scale ``bias``, ``lower`` and ``upper`` are ratios test/reference
    (back-transformed from the natural log) and ``sd`` is the SD of the log ratio.
    """

    procedure: str
    scale: str
    bias: Estimate
    lower: Estimate
    upper: Estimate
    sd: Estimate
    components: tuple[Estimate, ...]
    """Within- and between-subject SDs (Bland-Altman 2007 only)."""
    n_subjects: int
    n_pairs: int
    multiplier: float = LOA_MULTIPLIER
    note: str = ""

    def to_frame(self) -> pd.DataFrame:
        """One row per quantity: bias, limits, SD (and components), both intervals."""
        frame = estimates_frame((self.bias, self.lower, self.upper, self.sd, *self.components))
        frame.insert(0, "procedure", self.procedure)
        frame.insert(1, "scale", self.scale)
        frame["multiplier"] = self.multiplier
        return frame


@dataclass(frozen=True, repr=False)
class ProportionalBias(Result):
    """Slope and intercept of the difference on the mean of the two methods."""

    slope: Estimate
    intercept: Estimate
    n_subjects: int
    n_pairs: int
    regression_limits: RegressionLimits | None = None
    note: str = ""

    def to_frame(self) -> pd.DataFrame:
        """Slope and intercept rows (then the regression-based limits' rows, if computed)."""
        frame = estimates_frame((self.slope, self.intercept))
        frame.insert(0, "procedure", "least squares of difference on mean")
        if self.regression_limits is not None:
            frame = pd.concat([frame, self.regression_limits.to_frame()], ignore_index=True)
        return frame


# --- reasons a result is not estimable -------------------------------------------------------


def _loa_reason(sums: SubjectSums, ctx: EstimationContext, scale: str) -> str:
    if ctx.n_subjects < MIN_SUBJECTS:
        return f"fewer than {MIN_SUBJECTS} subjects (n={ctx.n_subjects})"
    if scale == "ratio" and sums.ratio_reason:
        return f"ratio scale: {sums.ratio_reason}"
    return ""


# --- analytic intervals ----------------------------------------------------------------------


def _interval(bounds: tuple[float, float], ctx: EstimationContext, method: str, scale: str):
    low, high = bounds
    if scale == "ratio":
        low, high = math.exp(low), math.exp(high)
    return ConfidenceInterval(float(low), float(high), ctx.confidence_level, method)


# --- builders ---------------------------------------------------------------------------------


_BA2007_METHODS = {
    "bias": "t, k-1 df, on ANOVA variance components (Bland & Altman 2007)",
    "loa_low": "MOVER (Zou 2013) on ANOVA variance components",
    "loa_high": "MOVER (Zou 2013) on ANOVA variance components",
    "sd": "MOVER (Zou 2013) for the total variance",
    "sd_within": "chi-square, N-k df",
}


def _loa_analytic(
    sums: SubjectSums,
    point: Mapping[str, float],
    ctx: EstimationContext,
    *,
    scale: str,
    short: str,
    analytic: str,
) -> tuple[dict, dict[str, str], str]:
    """Analytic intervals of the limits (on the analysed scale), their methods and a note."""
    if short == "ba":
        intervals = ba2007_analytic(sums.observed(), scale, ctx.confidence_level)
        note = ""
        if intervals["truncated"]:
            note = "between-subject variance estimate negative, set to 0 (common practice)"
        if ctx.n_pairs == ctx.n_subjects:
            note = "one pair per subject: within-subject variance not separable"
        return intervals, _BA2007_METHODS, note
    p = point[_key(scale, "sm", "bias")], point[_key(scale, "sm", "sd")]
    intervals = subject_mean_analytic(*p, ctx.n_subjects, ctx.confidence_level, analytic)
    limit_method = (
        "exact, non-central t (Carkeet 2015)"
        if analytic == "exact"
        else "approximate, SE sqrt(3 s^2/n) (Bland & Altman 1986)"
    )
    methods = {
        "bias": "t, k-1 df, on subject means",
        "loa_low": limit_method,
        "loa_high": limit_method,
        "sd": "chi-square, k-1 df, on subject means",
    }
    return intervals, methods, ""


def _loa_build(
    sums: SubjectSums,
    point: Mapping[str, float],
    draws: Mapping[str, np.ndarray] | None,
    ctx: EstimationContext,
    *,
    scale: str,
    procedure: str,
    analytic: str = "exact",
) -> LimitsOfAgreement:
    names = _names(scale)
    short = "ba" if procedure == _BA2007 else "sm"
    quantities = ("bias", "loa_low", "loa_high", "sd")
    if short == "ba":
        quantities += ("sd_within", "sd_between")
    reason = _loa_reason(sums, ctx, scale)
    what = f"{'ratio-scale ' if scale == 'ratio' else ''}limits of agreement ({procedure})"
    if reason:
        estimates, note = _all_not_estimable(ctx, tuple(names[q] for q in quantities), reason, what)
        return LimitsOfAgreement(
            procedure, scale, *estimates[:4], estimates[4:], ctx.n_subjects, ctx.n_pairs, note=note
        )
    back = np.exp if scale == "ratio" else None
    intervals, methods, note = _loa_analytic(
        sums, point, ctx, scale=scale, short=short, analytic=analytic
    )
    estimates = []
    for q in quantities:
        key = _key(scale, short, q)
        value = point[key]
        # SDs stay on the log scale; bias and limits are back-transformed to ratios.
        transform = back if q in ("bias", "loa_low", "loa_high") else None
        if transform is not None:
            value = float(transform(value))
        if q in intervals and q in methods:
            analytic_ci = _interval(intervals[q], ctx, methods[q], scale if transform else "")
        elif q == "sd_within":
            analytic_ci = ctx.analytic_not_available("one pair per subject: no within-subject df")
        else:
            analytic_ci = ctx.analytic_not_available("no analytic interval implemented")
        if not math.isfinite(value):
            reason = note or "undefined for these data"
            warn_not_estimable(f"{names[q]} ({procedure})", reason, stacklevel=3)
            estimates.append(ctx.not_estimable(names[q], reason))
            continue
        estimates.append(
            ctx.estimate(
                names[q],
                value,
                None if draws is None else draws[key],
                analytic_ci,
                transform=transform,
            )
        )
    return LimitsOfAgreement(
        procedure,
        scale,
        *estimates[:4],
        tuple(estimates[4:]),
        ctx.n_subjects,
        ctx.n_pairs,
        note=note,
    )


def ba2007_analysis(scale: str = "difference") -> Analysis:
    """The Bland-Altman 2007 analysis on the given scale (see :func:`limits_of_agreement`)."""
    _check_scale(scale)
    return Analysis(
        partial(ba2007_statistic, scale=scale),
        partial(_loa_build, scale=scale, procedure=_BA2007),
    )


def subject_mean_analysis(scale: str = "difference", analytic: str = "exact") -> Analysis:
    """The per-subject-means analysis (see :func:`subject_mean_limits`)."""
    _check_scale(scale)
    if analytic not in ("exact", "approximate"):
        raise ValueError(f"analytic must be 'exact' or 'approximate', got {analytic!r}")
    return Analysis(
        partial(subject_mean_statistic, scale=scale),
        partial(_loa_build, scale=scale, procedure=_BA1986, analytic=analytic),
    )


@accepts_data
def limits_of_agreement(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    subject: ArrayLike | None = None,
    scale: Scale = "difference",
    confidence_level: float = 0.95,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
) -> LimitsOfAgreement:
    """Bias and 95% limits of agreement for multiple segments per subject (true value varies).

    One-way ANOVA of the differences ``d = test - reference`` on subject gives ``MSB`` and
    ``MSW``; ``s_w^2 = MSW``, ``s_b^2 = (MSB - MSW) / m0`` with ``m0 = (N^2 - sum m_i^2) /
    ((k - 1) N)`` (valid for unequal numbers of segments ``m_i``), set to 0 when negative;
    limits ``mean(d) -/+ 1.96 sqrt(s_b^2 + s_w^2)``. With one pair per subject this reduces to
    Bland & Altman (1986).

    Bland JM, Altman DG. Agreement between methods of measurement with multiple observations
    per individual. J Biopharm Stat 2007;17:571-582. Analytic limits intervals: Zou GY.
    Confidence interval estimation for the Bland-Altman limits of agreement with multiple
    observations per individual. Stat Methods Med Res 2013;22:630-642 (see
    :func:`ba2007_analytic`). Default intervals: subject cluster bootstrap, percentile.

    Validated against a hand computation on a balanced design, a statsmodels MixedLM random
    intercept model (variance components), Giavarina (2015) and statsmodels' mean-difference
    plot (one pair per subject) and Zou's formula on balanced data (tests/stats/test_agreement.py).

    ``scale="ratio"`` analyses ``ln(test / reference)`` and reports the bias and limits as
    ratios; not estimable when any value is <= 0.

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> subj = ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e"]
    >>> loa = limits_of_agreement(ref, new, subject=subj, n_boot=200, seed=1)
    >>> round(loa.bias.estimate, 3), round(loa.lower.estimate, 3), round(loa.upper.estimate, 3)
    (0.45, -0.388, 1.288)
    >>> round(loa.bias.analytic_ci.low, 3), round(loa.bias.analytic_ci.high, 3)
    (0.074, 0.826)

    The same from a DataFrame's columns:

    >>> import pandas as pd
    >>> df = pd.DataFrame({"ref": ref, "new": new, "subject": subj})
    >>> limits_of_agreement(
    ...     data=df, reference="ref", test="new", subject="subject", n_boot=200, seed=1
    ... ) == loa
    True
    """
    return analyse(
        reference,
        test,
        subject,
        ba2007_analysis(scale),
        confidence_level=confidence_level,
        n_boot=n_boot,
        seed=seed,
    )


@accepts_data
def bias(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    subject: ArrayLike | None = None,
    scale: Scale = "difference",
    confidence_level: float = 0.95,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
) -> Estimate:
    """Mean difference test minus reference over all pairs (ratio scale: geometric mean ratio).

    The bias of :func:`limits_of_agreement` (Bland & Altman 2007); see there for references,
    intervals and validation.

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> subj = ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e"]
    >>> b = bias(ref, new, subject=subj, n_boot=200, seed=1)
    >>> b.name, round(b.estimate, 3)
    ('bias', 0.45)
    """
    return limits_of_agreement(
        reference,
        test,
        subject=subject,
        scale=scale,
        confidence_level=confidence_level,
        n_boot=n_boot,
        seed=seed,
    ).bias


@accepts_data
def subject_mean_limits(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    subject: ArrayLike | None = None,
    scale: Scale = "difference",
    analytic: Literal["exact", "approximate"] = "exact",
    confidence_level: float = 0.95,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
) -> LimitsOfAgreement:
    """Classic limits on per-subject mean differences: ``mean -/+ 1.96 SD`` of the k means.

    These describe agreement of subject means, not of single segments (narrower than the
    2007 limits when segments vary within subjects).

    Bland JM, Altman DG. Statistical methods for assessing agreement between two methods of
    clinical measurement. Lancet 1986;i:307-310. Analytic intervals of the limits: exact
    (Carkeet A. Exact parametric confidence intervals for Bland-Altman limits of agreement.
    Optom Vis Sci 2015) or the 1986 approximation, see :func:`subject_mean_analytic`.

    Validated against Giavarina (2015) as given in DOMAIN.md and by a coverage simulation of
    the exact interval (tests/stats/test_agreement.py).

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> subj = ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e"]
    >>> sm = subject_mean_limits(ref, new, subject=subj, n_boot=200, seed=1)
    >>> round(sm.lower.estimate, 3), round(sm.upper.estimate, 3)
    (0.22, 0.68)
    """
    return analyse(
        reference,
        test,
        subject,
        subject_mean_analysis(scale, analytic),
        confidence_level=confidence_level,
        n_boot=n_boot,
        seed=seed,
    )


def _proportional_build(sums, point, draws, ctx) -> ProportionalBias:
    reason = _proportional_reason("mean" not in sums.invariant, ctx)
    if reason:
        (slope, intercept), note = _all_not_estimable(
            ctx, ("prop_slope", "prop_intercept"), reason, "proportional bias"
        )
        return ProportionalBias(slope, intercept, ctx.n_subjects, ctx.n_pairs, note=note)
    robust = cluster_robust_line(sums, ctx.confidence_level)
    method = "cluster-robust sandwich (CR1), t with k-1 df"
    estimates = [
        ctx.estimate(
            f"prop_{q}",
            point[f"prop_{q}"],
            None if draws is None else draws[f"prop_{q}"],
            ConfidenceInterval(*robust[q], ctx.confidence_level, method),
        )
        for q in ("slope", "intercept")
    ]
    return ProportionalBias(*estimates, ctx.n_subjects, ctx.n_pairs)


PROPORTIONAL = Analysis(proportional_statistic, _proportional_build)
"""The proportional-bias analysis (see :func:`proportional_bias`)."""


@accepts_data
def proportional_bias(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    subject: ArrayLike | None = None,
    regression_limits: bool = False,
    confidence_level: float = 0.95,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
) -> ProportionalBias:
    """Proportional bias: least-squares slope of ``test - reference`` on their mean.

    A slope different from 0 means the difference changes with the magnitude measured
    (Bland & Altman 1999, Stat Methods Med Res 8:135-160, section 3). Intervals: subject
    cluster bootstrap (default) and cluster-robust sandwich (:func:`cluster_robust_line`).
    ``regression_limits=True`` adds the regression-based limits of the same paper
    (:func:`regression_based_limits`).

    Validated against statsmodels OLS (slope, cluster-robust SE) in tests/stats/test_agreement.py.

    Examples
    --------
    >>> ref = [10.1, 12.0, 9.8, 11.5, 13.2, 10.9, 12.4, 9.5, 11.1, 12.8]
    >>> new = [10.6, 12.1, 10.5, 11.9, 13.0, 11.8, 12.9, 10.1, 11.3, 13.6]
    >>> subj = ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e"]
    >>> pb = proportional_bias(ref, new, subject=subj, n_boot=200, seed=1)
    >>> round(pb.slope.estimate, 3), round(pb.intercept.estimate, 3)
    (-0.093, 1.526)
    """
    result = analyse(
        reference,
        test,
        subject,
        PROPORTIONAL,
        confidence_level=confidence_level,
        n_boot=n_boot,
        seed=seed,
    )
    if not regression_limits:
        return result
    limits = regression_based_limits(
        reference,
        test,
        subject=subject,
        confidence_level=confidence_level,
        n_boot=n_boot,
        seed=seed,
    )
    return ProportionalBias(
        result.slope, result.intercept, result.n_subjects, result.n_pairs, limits, result.note
    )
