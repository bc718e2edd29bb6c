"""Bland-Altman quantities as functions of totals, their textbook intervals, and the
reasons shared by the agreement results (:mod:`cohort.stats.agreement`,
:mod:`cohort.stats.regression_limits`) for not estimating them.

The statistics work on totals over pairs (:class:`cohort.stats.bootstrap.SubjectSums`), so
one function gives the point estimate and every bootstrap resample.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from functools import partial

import numpy as np
from scipy import stats

from cohort.stats.bootstrap import EstimationContext, SubjectSums
from cohort.stats.results import warn_not_estimable

LOA_MULTIPLIER = 1.96
"""Limits of agreement are bias -/+ 1.96 SD (Bland & Altman 1986)."""

MIN_SUBJECTS = 2
"""Subject-level inference needs at least two subjects."""


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


# --- reasons a result is not estimable ------------------------------------------------------


def _proportional_reason(mean_varies: bool, ctx: EstimationContext) -> str:
    if ctx.n_subjects < MIN_SUBJECTS:
        return f"fewer than {MIN_SUBJECTS} subjects (n={ctx.n_subjects})"
    if ctx.n_pairs < 3:
        return f"fewer than 3 pairs (n={ctx.n_pairs})"
    if not mean_varies:
        return "no variation in the mean of the two methods"
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


def cluster_robust_line(sums: SubjectSums, confidence_level: float) -> dict:
    """Cluster-robust (CR1) intervals of the line of difference on mean.

    Sandwich variance with subject clusters, small-sample factor ``G/(G-1) (N-1)/(N-2)`` and
    ``t`` with ``G - 1`` df (Liang KY, Zeger SL. Biometrika 1986;73:13-22 (memory)); the
    per-subject score sums come from the per-subject sums, so no pair-level pass is needed.
    Validated against
    statsmodels OLS with ``cov_type="cluster"`` (tests/stats/test_agreement.py).
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
