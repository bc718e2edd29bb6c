"""Tests of cohort.stats.correlation against DOMAIN.md values, pingouin and scipy."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pingouin as pg
import pytest
from scipy import stats

from cohort.stats.correlation import pearson, repeated_measures_correlation, spearman
from cohort.stats.results import NotEstimableWarning


def cohort_like(n_subjects=40, seed=3):
    """Invented clustered pairs with subject-level offsets (tests only)."""
    rng = np.random.default_rng(seed)
    m = rng.integers(5, 18, n_subjects)
    subject = np.repeat([f"S{i:03d}" for i in range(n_subjects)], m)
    truth = np.repeat(rng.normal(30, 8, n_subjects), m) + rng.normal(0, 3, m.sum())
    reference = truth + rng.normal(0, 1, m.sum())
    test = 2 + truth + np.repeat(rng.normal(0, 4, n_subjects), m) + rng.normal(0, 2, m.sum())
    return reference, test, subject


# pingouin 0.7 calls pandas methods with inplace=..., deprecated in pandas 3.1: not ours.
pytestmark = pytest.mark.filterwarnings("ignore:The inplace keyword")


def test_rm_corr_on_bland_altman_1995_data():
    # Bland & Altman 1995 BMJ 310:446 data as pingouin.read_dataset("rm_corr") (47
    # observations of 8 subjects); DOMAIN.md: r_rm -0.506770, df 38, p 0.000847108,
    # 95% CI -0.706715 to -0.231863 (equals the R rmcorr package); published r -0.51 (memory).
    data = pg.read_dataset("rm_corr")
    result = repeated_measures_correlation(
        data["pH"], data["PacO2"], subject=data["Subject"], n_boot=200
    )
    assert result.estimate == pytest.approx(-0.506770, abs=1e-6)
    assert result.df == 38
    assert result.p_value == pytest.approx(0.000847108, rel=1e-5)
    assert result.analytic_ci.low == pytest.approx(-0.706715, abs=1e-6)
    assert result.analytic_ci.high == pytest.approx(-0.231863, abs=1e-6)
    # pingouin.rm_corr: same r and p (its CI is rounded to 2 decimals internally).
    reference = pg.rm_corr(data, x="pH", y="PacO2", subject="Subject")
    assert result.estimate == pytest.approx(reference["r"].iloc[0], abs=1e-12)
    assert result.p_value == pytest.approx(reference["pval"].iloc[0], rel=1e-9)
    np.testing.assert_allclose(
        [result.analytic_ci.low, result.analytic_ci.high],
        reference["CI95"].iloc[0],
        atol=0.005 + 1e-9,
    )
    # DOMAIN.md: the naive pooled Pearson r on the same data is -0.065.
    assert pearson(data["pH"], data["PacO2"], n_boot=0).estimate == pytest.approx(-0.065, abs=5e-4)


def test_rm_corr_equals_pingouin_on_cohort_like_data():
    reference, test, subject = cohort_like()
    frame = pd.DataFrame({"x": reference, "y": test, "s": subject})
    expected = pg.rm_corr(frame, x="x", y="y", subject="s")
    result = repeated_measures_correlation(reference, test, subject=subject, n_boot=0)
    assert result.estimate == pytest.approx(expected["r"].iloc[0], abs=1e-12)
    assert result.df == expected["dof"].iloc[0]
    # Removing subject offsets changes the answer: the pooled r differs.
    pooled = pearson(reference, test, n_boot=0).estimate
    assert abs(pooled - result.estimate) > 0.05


def test_rm_corr_at_ten_thousand_subjects_without_a_dense_design():
    # DOMAIN.md: pingouin.rm_corr needs a 12.7 GiB allocation at 10,000 subjects (a dense
    # subject design, 170,000 x 10,000 float64); centring in numpy needs a few arrays of
    # 170,000 values. The peak traced allocation must stay far below one dense design.
    # Speed: benchmarks/correlation_speed.py (no timing in tests).
    import tracemalloc

    rng = np.random.default_rng(0)
    subject = np.repeat(np.arange(10_000), 17)
    x = rng.normal(size=subject.size)
    y = 0.5 * x + rng.normal(size=subject.size)
    tracemalloc.start()
    try:
        result = repeated_measures_correlation(x, y, subject=subject, n_boot=0)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 200e6  # bytes; a dense design would be 13.6e9
    assert result.df == subject.size - 10_000 - 1
    # Population value for y = 0.5 x + e, var(x) = var(e) = 1: r = 0.5 / sqrt(1.25).
    assert result.estimate == pytest.approx(0.5 / math.sqrt(1.25), abs=0.01)


def test_pearson_matches_scipy_pearsonr_and_its_fisher_interval():
    reference, test, subject = cohort_like()
    expected = stats.pearsonr(reference, test)
    ci = expected.confidence_interval(0.9)
    result = pearson(reference, test, subject=subject, confidence_level=0.9, n_boot=200)
    assert result.estimate == pytest.approx(expected.statistic, rel=1e-12)
    assert result.p_value == pytest.approx(expected.pvalue, rel=1e-6, abs=1e-300)
    assert result.analytic_ci.low == pytest.approx(ci.low, rel=1e-10)
    assert result.analytic_ci.high == pytest.approx(ci.high, rel=1e-10)
    # The subject cluster bootstrap interval is wider than the one treating pairs as
    # independent (DOMAIN.md, Aarts et al. 2014).
    assert result.ci.high - result.ci.low > ci.high - ci.low


def test_spearman_matches_scipy_and_states_its_bootstrap_approximation():
    reference, test, subject = cohort_like()
    reference = np.round(reference)  # ties: mid-ranks
    expected = stats.spearmanr(reference, test)
    result = spearman(reference, test, subject=subject, n_boot=200)
    assert result.estimate == pytest.approx(expected.statistic, rel=1e-12)
    assert result.p_value == pytest.approx(expected.pvalue, rel=1e-6, abs=1e-300)
    assert "ranks of the full sample (approximation)" in result.ci.method
    assert "Bonett & Wright 2000" in result.analytic_ci.method


def test_bonett_wright_standard_error_matches_monte_carlo():
    # Bonett DG, Wright TA. Psychometrika 2000: SE of atanh(rho_s) about
    # sqrt((1 + rho^2/2)/(n - 3)) for bivariate normal data. Monte Carlo SD over 3000 samples
    # of n = 80 with rho = 0.6 must agree within 7%.
    rng = np.random.default_rng(5)
    n, reps, rho = 80, 3000, 0.6
    cov = [[1, rho], [rho, 1]]
    samples = rng.multivariate_normal([0, 0], cov, size=(reps, n))
    ranks = stats.rankdata(samples, axis=1)
    centred = ranks - ranks.mean(axis=1, keepdims=True)
    rs = (centred[..., 0] * centred[..., 1]).sum(1) / np.sqrt(
        (centred[..., 0] ** 2).sum(1) * (centred[..., 1] ** 2).sum(1)
    )
    mc_sd = np.arctanh(rs).std(ddof=1)
    one = spearman(samples[0, :, 0], samples[0, :, 1], n_boot=0)
    r = one.estimate
    q = stats.norm.ppf(0.975)
    se = (math.atanh(one.analytic_ci.high) - math.atanh(r)) / q
    assert se == pytest.approx(math.sqrt((1 + r * r / 2) / (n - 3)), rel=1e-9)
    assert math.sqrt((1 + rho_s(rho) ** 2 / 2) / (n - 3)) == pytest.approx(mc_sd, rel=0.07)


def rho_s(rho: float) -> float:
    """Population Spearman correlation of a bivariate normal: (6/pi) asin(rho/2) (Pearson 1907,
    common practice)."""
    return 6 / math.pi * math.asin(rho / 2)


@pytest.mark.parametrize("function", [pearson, spearman])
def test_constant_values_are_not_estimable(function):
    reference, test, subject = cohort_like(5)
    with pytest.warns(NotEstimableWarning, match="no variation in reference values"):
        result = function(np.full(reference.size, 3.0), test, subject=subject, n_boot=20)
    assert math.isnan(result.estimate) and math.isnan(result.p_value)
    assert result.note.endswith("not estimable: no variation in reference values (all tied)")


def test_rm_corr_not_estimable_with_one_pair_per_subject():
    rng = np.random.default_rng(1)
    x, y = rng.normal(size=10), rng.normal(size=10)
    with pytest.warns(NotEstimableWarning, match=r"N - k - 1 = -1"):
        result = repeated_measures_correlation(x, y, subject=np.arange(10), n_boot=20)
    assert math.isnan(result.estimate)


def test_rm_corr_not_estimable_without_within_subject_variation():
    subject = np.repeat(np.arange(6), 3)
    x = np.repeat(np.arange(6.0), 3)  # constant within each subject
    y = np.random.default_rng(2).normal(size=18)
    with pytest.warns(NotEstimableWarning, match="reference values within subjects"):
        result = repeated_measures_correlation(x, y, subject=subject, n_boot=20)
    assert math.isnan(result.estimate)


def test_one_subject_is_not_estimable():
    with pytest.warns(NotEstimableWarning, match="fewer than 2 subjects"):
        result = pearson([1.0, 2.0, 3.0, 4.0], [1.0, 3.0, 2.0, 5.0], subject=["a"] * 4)
    assert math.isnan(result.estimate)
    note = result.to_frame()["note"].iloc[0]
    assert note == result.note == "Pearson correlation not estimable: fewer than 2 subjects (n=1)"
