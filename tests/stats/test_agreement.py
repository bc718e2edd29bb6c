"""Tests of cohort.stats.agreement against published values, registry libraries and definitions."""

from __future__ import annotations

import math
import warnings

import matplotlib
import numpy as np
import pandas as pd
import pingouin as pg
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats

from cohort.stats.agreement import (
    bias,
    limits_of_agreement,
    proportional_bias,
    subject_mean_limits,
)
from cohort.stats.regression_limits import regression_based_limits
from cohort.stats.results import NotEstimableWarning

matplotlib.use("Agg")
import matplotlib.pyplot as plt


def clustered(n_subjects=20, seed=0, balanced=False, m_max=17):
    """Invented clustered pairs: a random subject effect in the differences (tests only)."""
    rng = np.random.default_rng(seed)
    m = np.full(n_subjects, m_max) if balanced else rng.integers(3, m_max + 1, n_subjects)
    subject = np.repeat([f"S{i:03d}" for i in range(n_subjects)], m)
    reference = np.repeat(rng.normal(40.0, 8.0, n_subjects), m) + rng.normal(0, 5.0, m.sum())
    d = 1.5 + np.repeat(rng.normal(0, 2.0, n_subjects), m) + rng.normal(0, 1.5, m.sum())
    return reference, reference + d, subject


# --- Giavarina 2015 and statsmodels: one pair per subject ---------------------------------


def test_bias_and_limits_on_giavarina_example():
    # Giavarina D. Understanding Bland Altman analysis. Biochem Med 2015;25:141-151, data as
    # pingouin.read_dataset("blandaltman"); values of DOMAIN.md: differences A - B give bias
    # -27.1667, SD 34.8059, limits -95.3863 / 41.0530 (published about -27.2, -95.4 to 41.1,
    # memory).
    data = pg.read_dataset("blandaltman")
    with pytest.warns(NotEstimableWarning):  # within-subject SD: one pair per subject
        result = limits_of_agreement(data["B"], data["A"], n_boot=200)
    assert result.bias.estimate == pytest.approx(-27.1667, abs=1e-4)
    assert result.sd.estimate == pytest.approx(34.8059, abs=1e-4)
    assert result.lower.estimate == pytest.approx(-95.3863, abs=1e-4)
    assert result.upper.estimate == pytest.approx(41.0530, abs=1e-4)
    assert "one pair per subject" in result.note
    classic = subject_mean_limits(data["B"], data["A"], n_boot=200)
    assert classic.lower.estimate == pytest.approx(-95.3863, abs=1e-4)
    assert classic.upper.estimate == pytest.approx(41.0530, abs=1e-4)


def test_sd_relates_to_statsmodels_mean_diff_plot_ddof0():
    # statsmodels.graphics.mean_diff_plot draws mean +/- 1.96 SD with np.std (ddof=0);
    # read the drawn horizontal lines and compare with our SD * sqrt((n-1)/n).
    data = pg.read_dataset("blandaltman")
    n = len(data)
    with pytest.warns(NotEstimableWarning, match="one pair per subject"):
        result = limits_of_agreement(data["B"], data["A"], n_boot=0)
    _, ax = plt.subplots()
    sm.graphics.mean_diff_plot(data["A"].to_numpy(), data["B"].to_numpy(), ax=ax)
    drawn = sorted(line.get_ydata()[0] for line in ax.lines)
    plt.close("all")
    sd0 = result.sd.estimate * math.sqrt((n - 1) / n)
    b = result.bias.estimate
    expected = [b - 1.96 * sd0, b, b + 1.96 * sd0]
    np.testing.assert_allclose(drawn, expected, rtol=1e-12)


# --- Bland & Altman 2007 ---------------------------------------------------------------------


def test_ba2007_hand_computation_balanced():
    # Hand computation, three subjects x three differences:
    # S1 1, 2, 3 (mean 2); S2 4, 5, 6 (mean 5); S3 2, 2, 5 (mean 3); grand mean 30/9.
    # SSW = 2 + 2 + 6 = 10, MSW = 10/6; SSB = 3[(2-10/3)^2 + (5-10/3)^2 + (3-10/3)^2] = 14,
    # MSB = 7; m0 = (81 - 27)/(2 * 9) = 3; s_b^2 = (7 - 10/6)/3 = 16/9;
    # s_d^2 = 16/9 + 10/6 = 31/9; limits 10/3 -/+ 1.96 sqrt(31/9).
    d = np.array([1, 2, 3, 4, 5, 6, 2, 2, 5], dtype=float)
    reference = np.array([10, 12, 9, 20, 18, 22, 15, 14, 16], dtype=float)
    subject = np.repeat(["S1", "S2", "S3"], 3)
    result = limits_of_agreement(reference, reference + d, subject=subject, n_boot=0)
    within, between = result.components
    assert result.bias.estimate == pytest.approx(10 / 3, rel=1e-12)
    assert within.estimate == pytest.approx(math.sqrt(10 / 6), rel=1e-12)
    assert between.estimate == pytest.approx(math.sqrt(16 / 9), rel=1e-12)
    assert result.sd.estimate == pytest.approx(math.sqrt(31 / 9), rel=1e-12)
    assert result.lower.estimate == pytest.approx(10 / 3 - 1.96 * math.sqrt(31 / 9), rel=1e-12)
    assert result.upper.estimate == pytest.approx(10 / 3 + 1.96 * math.sqrt(31 / 9), rel=1e-12)


@pytest.mark.parametrize(
    ("balanced", "n_subjects", "rel_between"),
    [(True, 30, 1e-3), (False, 150, 0.1)],
)
def test_ba2007_components_agree_with_statsmodels_mixedlm(balanced, n_subjects, rel_between):
    # statsmodels MixedLM, random intercept per subject, REML. For balanced designs the ANOVA
    # estimator is the REML estimate (when positive); unbalanced, both are consistent and
    # agree within sampling tolerance.
    reference, test, subject = clustered(n_subjects, seed=4, balanced=balanced)
    d = test - reference
    fit = smf.mixedlm("d ~ 1", pd.DataFrame({"d": d, "s": subject}), groups="s").fit(reml=True)
    within, between = limits_of_agreement(reference, test, subject=subject, n_boot=0).components
    assert within.estimate**2 == pytest.approx(fit.scale, rel=1e-3 if balanced else 0.01)
    assert between.estimate**2 == pytest.approx(float(fit.cov_re.iloc[0, 0]), rel=rel_between)


def zou_nested_intervals(d, subject, confidence_level=0.95):
    """Zou (2013) MOVER limits for the case where the true value varies, from the paper's
    formulas: subject means, their variance s2_mean, pooled within-subject variance s2_w,
    harmonic mean m_h; s2_total = s2_mean + (1 - 1/m_h) s2_w."""
    frame = pd.DataFrame({"d": d, "s": subject})
    g = frame.groupby("s")["d"]
    means, m, variances = g.mean(), g.size(), g.var(ddof=1)
    n, big_n = len(means), len(frame)
    alpha = 1 - confidence_level
    s2_mean = means.var(ddof=1)
    s2_w = ((m - 1) * variances).sum() / (big_n - n)
    m_h = n / (1 / m).sum()
    total = s2_mean + (1 - 1 / m_h) * s2_w
    a, b = s2_mean, (1 - 1 / m_h) * s2_w
    df_a, df_b = n - 1, big_n - n
    low = total - math.sqrt(
        (a * (1 - df_a / stats.chi2.ppf(1 - alpha / 2, df_a))) ** 2
        + (b * (1 - df_b / stats.chi2.ppf(1 - alpha / 2, df_b))) ** 2
    )
    high = total + math.sqrt(
        (a * (df_a / stats.chi2.ppf(alpha / 2, df_a) - 1)) ** 2
        + (b * (df_b / stats.chi2.ppf(alpha / 2, df_b) - 1)) ** 2
    )
    z, q = 1.96, stats.norm.ppf(1 - alpha / 2)
    mean, sd = means.mean(), math.sqrt(total)
    lme = math.sqrt(q**2 * s2_mean / n + z**2 * (math.sqrt(high) - sd) ** 2)
    rme = math.sqrt(q**2 * s2_mean / n + z**2 * (sd - math.sqrt(low)) ** 2)
    return (mean - z * sd - lme, mean - z * sd + rme), (mean + z * sd - rme, mean + z * sd + lme)


def test_limits_intervals_equal_zou_2013_on_a_balanced_design():
    # Zou GY. Stat Methods Med Res 2013;22:630-642, MOVER for the limits when the true value
    # varies (formulas recomputed independently above, from the paper (memory)).
    reference, test, subject = clustered(25, seed=7, balanced=True)
    result = limits_of_agreement(reference, test, subject=subject, n_boot=0)
    lower, upper = zou_nested_intervals(test - reference, subject)
    got_lower = (result.lower.analytic_ci.low, result.lower.analytic_ci.high)
    got_upper = (result.upper.analytic_ci.low, result.upper.analytic_ci.high)
    np.testing.assert_allclose(got_lower, lower, rtol=1e-10)
    np.testing.assert_allclose(got_upper, upper, rtol=1e-10)
    assert "Zou 2013" in result.lower.analytic_ci.method


def test_limits_intervals_close_to_zou_2013_when_unbalanced():
    # Unbalanced: the ANOVA components (our analogue) and Zou's subject-mean components
    # estimate the same quantities; the intervals differ only slightly.
    reference, test, subject = clustered(40, seed=9)
    result = limits_of_agreement(reference, test, subject=subject, n_boot=0)
    lower, upper = zou_nested_intervals(test - reference, subject)
    assert result.upper.analytic_ci.high == pytest.approx(upper[1], rel=0.1)
    assert result.lower.analytic_ci.low == pytest.approx(lower[0], rel=0.1)


def test_cluster_bootstrap_limits_wider_than_ignoring_subjects():
    # Aarts et al. 2014 (DOMAIN.md): ignoring nesting understates uncertainty. The bias CI of
    # the subject cluster bootstrap must be wider than the naive t interval over pairs.
    reference, test, subject = clustered(30, seed=2)
    result = limits_of_agreement(reference, test, subject=subject, n_boot=400, seed=3)
    d = test - reference
    naive_half = stats.t.ppf(0.975, d.size - 1) * d.std(ddof=1) / math.sqrt(d.size)
    assert result.bias.ci.high - result.bias.ci.low > 2.5 * naive_half
    # And comparable with the analytic interval that respects subjects (same estimand).
    width = result.bias.ci.high - result.bias.ci.low
    analytic = result.bias.analytic_ci.high - result.bias.analytic_ci.low
    assert width == pytest.approx(analytic, rel=0.3)


# --- Bland & Altman 1986 on subject means; Carkeet 2015 ------------------------------------------


def test_exact_limit_interval_has_nominal_coverage():
    # Carkeet A. Optom Vis Sci 2015: the non-central t interval of mean + 1.96 SD is exact
    # under normality. The interval is mean + SD * c / sqrt(n) with constants c that depend on
    # n only: read them from two samples, then check Monte Carlo coverage over 20,000 normal
    # samples of n = 10 (95% +/- 0.5%).
    rng = np.random.default_rng(12)
    n, reps = 10, 20_000
    samples = rng.normal(0.0, 1.0, (reps, n))
    mean, sd = samples.mean(axis=1), samples.std(axis=1, ddof=1)
    constants = []
    for i in range(2):
        limits = subject_mean_limits(np.zeros(n), samples[i], n_boot=0)
        assert limits.upper.estimate == pytest.approx(mean[i] + 1.96 * sd[i])
        ci = limits.upper.analytic_ci
        constants.append(
            ((ci.low - mean[i]) * math.sqrt(n) / sd[i], (ci.high - mean[i]) * math.sqrt(n) / sd[i])
        )
    np.testing.assert_allclose(constants[0], constants[1], rtol=1e-9)
    c_low, c_high = constants[0]
    low, high = mean + sd * c_low / math.sqrt(n), mean + sd * c_high / math.sqrt(n)
    coverage = np.mean((low <= 1.96) & (1.96 <= high))
    assert coverage == pytest.approx(0.95, abs=0.005)


def test_exact_and_approximate_limit_intervals_agree_for_large_n():
    # Bland & Altman 1986: SE of a limit about sqrt(3 s^2 / n); close to exact for large n.
    rng = np.random.default_rng(1)
    d = rng.normal(2.0, 3.0, 400)
    exact = subject_mean_limits(np.zeros(400), d, n_boot=0).upper.analytic_ci
    approx = subject_mean_limits(np.zeros(400), d, n_boot=0, analytic="approximate")
    approx_ci = approx.upper.analytic_ci
    assert exact.low == pytest.approx(approx_ci.low, rel=0.01)
    assert exact.high == pytest.approx(approx_ci.high, rel=0.01)
    assert "Carkeet 2015" in exact.method and "Bland & Altman 1986" in approx_ci.method


def test_subject_mean_limits_use_one_mean_per_subject():
    reference, test, subject = clustered(15, seed=3)
    means = pd.Series(test - reference).groupby(subject).mean()
    result = subject_mean_limits(reference, test, subject=subject, n_boot=0)
    assert result.bias.estimate == pytest.approx(means.mean())
    assert result.sd.estimate == pytest.approx(means.std(ddof=1))


# --- proportional bias and regression-based limits ----------------------------------------------


def test_proportional_bias_matches_statsmodels_cluster_robust_ols():
    # statsmodels OLS of difference on mean, cov_type="cluster" (groups = subject, use_t):
    # same slope, intercept, standard errors and t interval with k - 1 df.
    reference, test, subject = clustered(25, seed=5)
    test = test + 0.08 * (reference - 40)
    a, d = (reference + test) / 2, test - reference
    codes = pd.factorize(subject)[0]
    fit = sm.OLS(d, sm.add_constant(a)).fit(
        cov_type="cluster", cov_kwds={"groups": codes}, use_t=True
    )
    result = proportional_bias(reference, test, subject=subject, n_boot=200)
    assert result.slope.estimate == pytest.approx(fit.params[1], rel=1e-10)
    assert result.intercept.estimate == pytest.approx(fit.params[0], rel=1e-10)
    low, high = fit.conf_int()[1]
    assert result.slope.analytic_ci.low == pytest.approx(low, rel=1e-8)
    assert result.slope.analytic_ci.high == pytest.approx(high, rel=1e-8)
    low, high = fit.conf_int()[0]
    assert result.intercept.analytic_ci.low == pytest.approx(low, rel=1e-8)
    assert result.slope.ci.low < result.slope.estimate < result.slope.ci.high


def test_regression_based_limits_match_least_squares_of_bland_altman_1999():
    # Bland & Altman 1999 section 3.2: D on A, then |residuals| on A; limits
    # b0 + b1 A -/+ 1.96 sqrt(pi/2) (c0 + c1 A). Recomputed with numpy.polyfit.
    reference, test, subject = clustered(20, seed=6)
    test = test + 0.05 * reference + np.random.default_rng(1).normal(0, 0.02 * reference)
    a, d = (reference + test) / 2, test - reference
    b1, b0 = np.polyfit(a, d, 1)
    c1, c0 = np.polyfit(a, np.abs(d - b0 - b1 * a), 1)
    k = 1.96 * math.sqrt(math.pi / 2)
    lines = regression_based_limits(reference, test, subject=subject, n_boot=100)
    assert lines.bias_slope.estimate == pytest.approx(b1, rel=1e-9)
    assert lines.abs_residual_slope.estimate == pytest.approx(c1, rel=1e-9)
    assert lines.loa_high_intercept.estimate == pytest.approx(b0 + k * c0, rel=1e-9)
    assert lines.loa_low_slope.estimate == pytest.approx(b1 - k * c1, rel=1e-9)
    at = lines.at([30.0])
    assert at["loa_high"].iloc[0] == pytest.approx(b0 + b1 * 30 + k * (c0 + c1 * 30), rel=1e-9)
    assert lines.bias_slope.ci.low < b1 < lines.bias_slope.ci.high
    with_limits = proportional_bias(
        reference, test, subject=subject, n_boot=100, regression_limits=True
    )
    assert with_limits.regression_limits == lines
    assert len(with_limits.to_frame()) == 10


# --- ratio scale -------------------------------------------------------------------------------


def test_ratio_scale_back_transforms_the_log_ratio():
    reference, test, subject = clustered(12, seed=8)
    log_ratio = np.log(test / reference)
    on_log = limits_of_agreement(np.zeros(log_ratio.size), log_ratio, subject=subject, seed=4)
    ratio = limits_of_agreement(reference, test, subject=subject, scale="ratio", seed=4)
    assert ratio.bias.name == "ratio_bias"
    assert ratio.bias.estimate == pytest.approx(math.exp(on_log.bias.estimate), rel=1e-10)
    assert ratio.upper.estimate == pytest.approx(math.exp(on_log.upper.estimate), rel=1e-10)
    assert ratio.sd.estimate == pytest.approx(on_log.sd.estimate, rel=1e-10)
    assert ratio.upper.ci.high == pytest.approx(math.exp(on_log.upper.ci.high), rel=1e-10)
    assert ratio.lower.analytic_ci.low == pytest.approx(
        math.exp(on_log.lower.analytic_ci.low), rel=1e-10
    )


def test_ratio_scale_not_estimable_with_values_at_or_below_zero():
    reference, test, subject = clustered(10, seed=1)
    reference[:3] = [0.0, -1.0, -2.0]
    with pytest.warns(NotEstimableWarning, match="3 of .* pairs have a value <= 0"):
        result = limits_of_agreement(reference, test, subject=subject, scale="ratio", n_boot=50)
    assert math.isnan(result.bias.estimate) and math.isnan(result.upper.ci.low)
    assert "not estimable: ratio scale: 3 of" in result.note


@settings(max_examples=25, deadline=None)
@given(factor=st.floats(min_value=1e-3, max_value=1e3), seed=st.integers(0, 1000))
def test_ratio_limits_invariant_to_a_common_unit(factor, seed):
    # Property: ratios do not depend on the unit (multiply both methods by a constant).
    reference, test, subject = clustered(6, seed=seed, m_max=5)
    base = limits_of_agreement(reference, test, subject=subject, scale="ratio", n_boot=30)
    scaled = limits_of_agreement(
        factor * reference, factor * test, subject=subject, scale="ratio", n_boot=30
    )
    for a, b in ((base.bias, scaled.bias), (base.lower, scaled.lower), (base.upper, scaled.upper)):
        assert b.estimate == pytest.approx(a.estimate, rel=1e-9)
        assert b.ci.low == pytest.approx(a.ci.low, rel=1e-9)


# --- invariants --------------------------------------------------------------------------------


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_bias_flips_sign_when_methods_are_swapped(seed):
    reference, test, subject = clustered(5, seed=seed, m_max=6)
    forward = limits_of_agreement(reference, test, subject=subject, n_boot=40)
    backward = limits_of_agreement(test, reference, subject=subject, n_boot=40)
    assert backward.bias.estimate == pytest.approx(-forward.bias.estimate, rel=1e-9, abs=1e-12)
    assert backward.upper.estimate == pytest.approx(-forward.lower.estimate, rel=1e-9, abs=1e-12)
    assert backward.bias.ci.low == pytest.approx(-forward.bias.ci.high, rel=1e-9, abs=1e-12)


@settings(max_examples=25, deadline=None)
@given(shift=st.floats(min_value=-1e3, max_value=1e3), seed=st.integers(0, 10_000))
def test_constant_shift_moves_bias_by_the_shift_and_keeps_the_sd(shift, seed):
    reference, test, subject = clustered(5, seed=seed, m_max=6)
    assume(np.ptp(test - reference) > 1e-6)
    base = limits_of_agreement(reference, test, subject=subject, n_boot=0)
    moved = limits_of_agreement(reference, test + shift, subject=subject, n_boot=0)
    assert moved.bias.estimate == pytest.approx(base.bias.estimate + shift, rel=1e-9, abs=1e-9)
    assert moved.sd.estimate == pytest.approx(base.sd.estimate, rel=1e-7)


# --- not estimable and errors -------------------------------------------------------------------


def test_one_subject_is_not_estimable_with_a_reason():
    reference, test, _ = clustered(3, seed=1)
    subject = np.full(reference.size, "only")
    with pytest.warns(NotEstimableWarning, match="fewer than 2 subjects"):
        result = limits_of_agreement(reference, test, subject=subject, n_boot=100)
    assert math.isnan(result.bias.estimate) and math.isnan(result.upper.estimate)
    assert result.bias.note == "not estimable: fewer than 2 subjects (n=1)"
    frame = result.to_frame()
    assert frame["note"].str.contains("not estimable: fewer than 2 subjects").all()
    with pytest.warns(NotEstimableWarning):
        assert math.isnan(proportional_bias(reference, test, subject=subject).slope.estimate)


def test_no_bootstrap_leaves_analytic_intervals():
    reference, test, subject = clustered(8, seed=1)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = limits_of_agreement(reference, test, subject=subject, n_boot=0)
    assert result.upper.ci.note == "not estimable: no bootstrap requested (n_boot=0)"
    assert result.upper.analytic_ci.estimable


def test_bias_function_equals_limits_bias():
    reference, test, subject = clustered(8, seed=2)
    assert bias(reference, test, subject=subject, n_boot=50) == (
        limits_of_agreement(reference, test, subject=subject, n_boot=50).bias
    )


def test_errors_name_the_argument():
    x = np.arange(5.0)
    with pytest.raises(ValueError, match="scale must be one of"):
        limits_of_agreement(x, x, scale="log")
    with pytest.raises(ValueError, match="analytic must be 'exact' or 'approximate'"):
        subject_mean_limits(x, x, analytic="bootstrap")
    with pytest.raises(ValueError, match="confidence_level must be between 0 and 1, got 95"):
        limits_of_agreement(x, x, confidence_level=95)
