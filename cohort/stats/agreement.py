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
from scipy import stats

from cohort.stats.bootstrap import (
    DEFAULT_N_BOOT,
    DEFAULT_SEED,
    Analysis,
    Estimate,
    EstimationContext,
    SubjectSums,
    analyse,
    check_options,
    context,
    estimates_frame,
    paired_values,
    resample_counts,
)
from cohort.stats.results import ConfidenceInterval, warn_not_estimable

LOA_MULTIPLIER = 1.96
"""Limits of agreement are bias -/+ 1.96 SD (Bland & Altman 1986)."""

MIN_SUBJECTS = 2
"""Subject-level inference needs at least two subjects."""

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


def _key(scale: str, procedure: str, name: str) -> str:
    """Key of a statistic in a bootstrap-draws mapping (unique across procedures and scales)."""
    return f"{'log_' if scale == 'ratio' else ''}{procedure}_{name}"


# --- statistics as functions of totals (vectorised over resamples) -------------------------


def ba2007_statistic(t: Mapping[str, np.ndarray], scale: str = "difference") -> dict:
    """Bias, SD and limits of Bland & Altman (2007) from totals, see :func:`limits_of_agreement`."""
    p = "d" if scale == "difference" else "l"
    if p not in t:
        return {}
    n, k = t["n"], t["one"]
    s, ss, between = t[p], t[p + p], t[f"{p}_sq_n"]
    ssb = np.maximum(between - s * s / n, 0.0)
    ssw = np.maximum(ss - between, 0.0)
    msb = ssb / (k - 1)
    dfw = n - k
    msw = np.where(dfw > 0, ssw / np.where(dfw > 0, dfw, 1.0), np.nan)
    m0 = (n * n - t["n2"]) / ((k - 1) * n)
    var_b = np.where(dfw > 0, np.maximum((msb - msw) / m0, 0.0), np.nan)
    var_total = np.where(dfw > 0, var_b + msw, msb)
    bias = t[f"{p}_offset"] + s / n
    sd = np.sqrt(var_total)
    key = partial(_key, scale, "ba")
    return {
        key("bias"): bias,
        key("sd"): sd,
        key("loa_low"): bias - LOA_MULTIPLIER * sd,
        key("loa_high"): bias + LOA_MULTIPLIER * sd,
        key("sd_within"): np.sqrt(msw),
        key("sd_between"): np.sqrt(var_b),
    }


def subject_mean_statistic(t: Mapping[str, np.ndarray], scale: str = "difference") -> dict:
    """Bland & Altman (1986) limits on per-subject mean differences, from totals."""
    p = "d" if scale == "difference" else "l"
    if p not in t:
        return {}
    k, s, ss = t["one"], t[f"{p}_bar"], t[f"{p}_bar2"]
    bias = t[f"{p}_offset"] + s / k
    sd = np.sqrt(np.maximum(ss - s * s / k, 0.0) / (k - 1))
    key = partial(_key, scale, "sm")
    return {
        key("bias"): bias,
        key("sd"): sd,
        key("loa_low"): bias - LOA_MULTIPLIER * sd,
        key("loa_high"): bias + LOA_MULTIPLIER * sd,
    }


def proportional_statistic(t: Mapping[str, np.ndarray]) -> dict:
    """Least-squares line of the difference on the mean of the methods, from totals."""
    n = t["n"]
    saa = t["aa"] - t["a"] ** 2 / n
    sad = t["ad"] - t["a"] * t["d"] / n
    slope = sad / saa
    intercept = (t["d_offset"] + t["d"] / n) - slope * (t["centre"] + t["a"] / n)
    return {"prop_slope": slope, "prop_intercept": intercept}


# --- result types ---------------------------------------------------------------------------


@dataclass(frozen=True)
class LimitsOfAgreement:
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


@dataclass(frozen=True)
class RegressionLimits:
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

    def to_frame(self) -> pd.DataFrame:
        frame = estimates_frame(
            (
                self.bias_intercept,
                self.bias_slope,
                self.abs_residual_intercept,
                self.abs_residual_slope,
                self.loa_low_intercept,
                self.loa_low_slope,
                self.loa_high_intercept,
                self.loa_high_slope,
            )
        )
        frame.insert(0, "procedure", "Bland-Altman 1999 regression-based limits")
        return frame


@dataclass(frozen=True)
class ProportionalBias:
    """Slope and intercept of the difference on the mean of the two methods."""

    slope: Estimate
    intercept: Estimate
    n_subjects: int
    n_pairs: int
    regression_limits: RegressionLimits | None = None
    note: str = ""

    def to_frame(self) -> pd.DataFrame:
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


def _all_not_estimable(ctx: EstimationContext, names: tuple[str, ...], reason: str, what: str):
    note = warn_not_estimable(what, reason, stacklevel=4)
    return tuple(ctx.not_estimable(n, reason) for n in names), note


# --- analytic intervals ----------------------------------------------------------------------


def _variance_ci(
    components: tuple[tuple[float, float], ...], confidence_level: float
) -> tuple[float, float]:
    """MOVER interval for a sum of variance components ``c`` each with ``df`` (Zou 2013)."""
    alpha = 1.0 - confidence_level
    total = sum(c for c, _ in components)
    low_sq = sum((c * (1 - df / stats.chi2.ppf(1 - alpha / 2, df))) ** 2 for c, df in components)
    high_sq = sum((c * (df / stats.chi2.ppf(alpha / 2, df) - 1)) ** 2 for c, df in components)
    return max(total - math.sqrt(low_sq), 0.0), total + math.sqrt(high_sq)


def _mover_limits(
    bias: float, se_bias: float, sd: float, var_ci: tuple[float, float], confidence_level: float
) -> tuple[tuple[float, float], tuple[float, float]]:
    """MOVER intervals of bias -/+ z SD (Zou 2013): (lower limit CI, upper limit CI)."""
    q = stats.norm.ppf(0.5 + confidence_level / 2)
    z = LOA_MULTIPLIER
    sd_low, sd_high = math.sqrt(var_ci[0]), math.sqrt(var_ci[1])
    shrink = math.sqrt((q * se_bias) ** 2 + (z * (sd - sd_low)) ** 2)
    grow = math.sqrt((q * se_bias) ** 2 + (z * (sd_high - sd)) ** 2)
    lower = (bias - z * sd - grow, bias - z * sd + shrink)
    upper = (bias + z * sd - shrink, bias + z * sd + grow)
    return lower, upper


def ba2007_analytic(t: Mapping[str, float], scale: str, confidence_level: float) -> dict:
    """Textbook intervals of the Bland-Altman 2007 quantities.

    Bias: ``t`` interval with ``k - 1`` df on ``var(mean d) = s_b^2 sum(m_i^2)/N^2 + s_w^2/N``.
    Limits: MOVER of Zou (2013) applied to the ANOVA components, ``s_d^2 = MSB/m0 +
    (1 - 1/m0) MSW`` with ``k - 1`` and ``N - k`` df; this is Zou's formula when every
    subject has the same number of segments (``m0`` = harmonic mean = m) and its analogue
    otherwise; the bias term uses the normal quantile as in Zou (2013). SD: square root of
    the MOVER interval of ``s_d^2``. Within-subject SD: chi-square interval, ``N - k`` df.
    """
    p = "d" if scale == "difference" else "l"
    n, k = t["n"], t["one"]
    s, ss, between = t[p], t[p + p], t[f"{p}_sq_n"]
    bias = t[f"{p}_offset"] + s / n
    msb = max(between - s * s / n, 0.0) / (k - 1)
    dfw = n - k
    alpha = 1.0 - confidence_level
    out: dict[str, object] = {"truncated": False}
    if dfw > 0:
        msw = max(ss - between, 0.0) / dfw
        m0 = (n * n - t["n2"]) / ((k - 1) * n)
        var_b_raw = (msb - msw) / m0
        if var_b_raw < 0:
            out["truncated"] = True
            components = ((msw, dfw),)
            var_b = 0.0
        else:
            components = ((msb / m0, k - 1), ((1 - 1 / m0) * msw, dfw))
            var_b = var_b_raw
        var_bias = var_b * t["n2"] / n**2 + msw / n
        within = (
            math.sqrt(dfw * msw / stats.chi2.ppf(1 - alpha / 2, dfw)),
            math.sqrt(dfw * msw / stats.chi2.ppf(alpha / 2, dfw)),
        )
        out["sd_within"] = within
    else:
        components = ((msb, k - 1),)
        var_bias = msb / n
    var_total = sum(c for c, _ in components)
    sd = math.sqrt(var_total)
    se_bias = math.sqrt(var_bias)
    h = stats.t.ppf(0.5 + confidence_level / 2, k - 1) * se_bias
    var_ci = _variance_ci(components, confidence_level)
    out["bias"] = (bias - h, bias + h)
    out["loa_low"], out["loa_high"] = _mover_limits(bias, se_bias, sd, var_ci, confidence_level)
    out["sd"] = (math.sqrt(var_ci[0]), math.sqrt(var_ci[1]))
    return out


def subject_mean_analytic(
    mean: float, sd: float, k: float, confidence_level: float, analytic: str
) -> dict:
    """Intervals of the per-subject-means limits: Carkeet (2015) exact or BA 1986 approximate.

    Exact: ``mean + sd t'/sqrt(k)`` with ``t'`` quantiles of the non-central t distribution
    with ``k - 1`` df and non-centrality ``1.96 sqrt(k)`` (Carkeet A. Optom Vis Sci 2015;
    92:e71-e80 (memory)); approximate: ``limit -/+ t(k-1) sqrt(3 sd^2 / k)`` (Bland & Altman
    1986). Bias: ``t`` interval; SD: chi-square interval.
    """
    alpha = 1.0 - confidence_level
    z = LOA_MULTIPLIER
    root_k = math.sqrt(k)
    tq = stats.t.ppf(1 - alpha / 2, k - 1)
    if analytic == "exact":
        t_low, t_high = stats.nct.ppf([alpha / 2, 1 - alpha / 2], k - 1, z * root_k)
        upper = (mean + sd * t_low / root_k, mean + sd * t_high / root_k)
        lower = (mean - sd * t_high / root_k, mean - sd * t_low / root_k)
    else:
        h = tq * math.sqrt(3 * sd * sd / k)
        upper = (mean + z * sd - h, mean + z * sd + h)
        lower = (mean - z * sd - h, mean - z * sd + h)
    return {
        "bias": (mean - tq * sd / root_k, mean + tq * sd / root_k),
        "loa_low": lower,
        "loa_high": upper,
        "sd": (
            sd * math.sqrt((k - 1) / stats.chi2.ppf(1 - alpha / 2, k - 1)),
            sd * math.sqrt((k - 1) / stats.chi2.ppf(alpha / 2, k - 1)),
        ),
    }


def _interval(bounds: tuple[float, float], ctx: EstimationContext, method: str, scale: str):
    low, high = bounds
    if scale == "ratio":
        low, high = math.exp(low), math.exp(high)
    return ConfidenceInterval(float(low), float(high), ctx.confidence_level, method)


# --- builders ---------------------------------------------------------------------------------


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
    note = ""
    if short == "ba":
        intervals = ba2007_analytic(sums.observed(), scale, ctx.confidence_level)
        methods = {
            "bias": "t, k-1 df, on ANOVA variance components (Bland & Altman 2007)",
            "loa_low": "MOVER (Zou 2013) on ANOVA variance components",
            "loa_high": "MOVER (Zou 2013) on ANOVA variance components",
            "sd": "MOVER (Zou 2013) for the total variance",
            "sd_within": "chi-square, N-k df",
        }
        if intervals["truncated"]:
            note = "between-subject variance estimate negative, set to 0 (common practice)"
        if ctx.n_pairs == ctx.n_subjects:
            note = "one pair per subject: within-subject variance not separable"
    else:
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
    plot (one pair per subject) and Zou's formula on balanced data (tests/test_agreement.py).

    ``scale="ratio"`` analyses ``ln(test / reference)`` and reports the bias and limits as
    ratios; not estimable when any value is <= 0.
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
    the exact interval (tests/test_agreement.py).
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


def cluster_robust_line(sums: SubjectSums, confidence_level: float) -> dict:
    """Cluster-robust (CR1) intervals of the line of difference on mean.

    Sandwich variance with subject clusters, small-sample factor ``G/(G-1) (N-1)/(N-2)`` and
    ``t`` with ``G - 1`` df (Liang KY, Zeger SL. Biometrika 1986;73:13-22 (memory)); the
    per-subject score sums come from the per-subject sums, so no pair-level pass is needed.
    Validated against
    statsmodels OLS with ``cov_type="cluster"`` (tests/test_agreement.py).
    """
    m, sa, saa = sums.column("n"), sums.column("a"), sums.column("aa")
    sd_, sad = sums.column("d"), sums.column("ad")
    n, g = m.sum(), m.size
    xtx = np.array([[n, sa.sum()], [sa.sum(), saa.sum()]])
    slope = (sad.sum() - sa.sum() * sd_.sum() / n) / (saa.sum() - sa.sum() ** 2 / n)
    b0 = (sd_.sum() - slope * sa.sum()) / n
    scores = np.column_stack([sd_ - b0 * m - slope * sa, sad - b0 * sa - slope * saa])
    bread = np.linalg.inv(xtx)
    factor = g / (g - 1) * (n - 1) / (n - 2)
    cov = factor * bread @ (scores.T @ scores) @ bread
    c = sums.constants["centre"]
    # Intercept on the original scale: d_offset + b0 - slope * centre.
    grad = np.array([1.0, -c])
    var_intercept = grad @ cov @ grad
    q = stats.t.ppf(0.5 + confidence_level / 2, g - 1)
    se_slope, se_int = math.sqrt(cov[1, 1]), math.sqrt(max(var_intercept, 0.0))
    intercept = sums.constants["d_offset"] + b0 - slope * c
    return {
        "slope": (slope - q * se_slope, slope + q * se_slope),
        "intercept": (intercept - q * se_int, intercept + q * se_int),
        "se_slope": se_slope,
        "se_intercept": se_int,
    }


def _proportional_reason(mean_varies: bool, ctx: EstimationContext) -> str:
    if ctx.n_subjects < MIN_SUBJECTS:
        return f"fewer than {MIN_SUBJECTS} subjects (n={ctx.n_subjects})"
    if ctx.n_pairs < 3:
        return f"fewer than 3 pairs (n={ctx.n_pairs})"
    if not mean_varies:
        return "no variation in the mean of the two methods"
    return ""


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

    Validated against statsmodels OLS (slope, cluster-robust SE) in tests/test_agreement.py.
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
    Validated against numpy least squares in tests/test_agreement.py.
    """
    check_options(confidence_level, n_boot)
    data = paired_values(reference, test, subject)
    ctx = context(data, confidence_level, n_boot, seed)
    names = (
        "bias_intercept",
        "bias_slope",
        "abs_residual_intercept",
        "abs_residual_slope",
        "loa_low_intercept",
        "loa_low_slope",
        "loa_high_intercept",
        "loa_high_slope",
    )
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
