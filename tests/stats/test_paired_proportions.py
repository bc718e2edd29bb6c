"""The clustered test of two correlated proportions (Obuchowski 1998): a worked example by
hand, the reduction to the unclustered paired form, the cluster-robust standard error of
statsmodels, p-values from scipy, the exact McNemar beside it, not-estimable cases and bad
input."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.contingency_tables import mcnemar

from cohort.stats.classification import mcnemar_test
from cohort.stats.paired_proportions import (
    OBUCHOWSKI_CI_METHOD,
    OBUCHOWSKI_P_METHOD,
    PairedProportions,
    clustered_paired_proportions,
)
from cohort.stats.results import NotEstimableWarning

# Worked example (hand computation, written out below): 4 subjects with 3, 2, 4, 1 units
FIRST = [1, 1, 0, 1, 1, 0, 1, 1, 0, 1]
SECOND = [1, 0, 0, 1, 1, 1, 0, 0, 0, 0]
SUBJECT = list("aaabbccccd")


def test_worked_example_by_hand():
    # per subject (n_i, x_i, y_i): a (3, 2, 1), b (2, 2, 2), c (4, 2, 1), d (1, 1, 0);
    # N = 10, p1 = 7/10, p2 = 4/10.
    # x_i - p1 n_i: -0.1, 0.6, -0.8, 0.3 -> squares sum 1.10
    # y_i - p2 n_i: -0.2, 1.2, -0.6, -0.4 -> squares sum 2.00; cross products sum 1.10
    # K/(K-1)/N^2 = 4/3/100 = 1/75 (Obuchowski 1998, equations (2)-(3), memory)
    # var(p1) = 1.10/75, var(p2) = 2.00/75, cov = 1.10/75
    # var(p1 - p2) = (1.10 + 2.00 - 2.20)/75 = 0.012; z = 0.3 / sqrt(0.012) = 2.7386
    r = clustered_paired_proportions(FIRST, SECOND, subject=SUBJECT)
    assert isinstance(r, PairedProportions)
    assert (r.first, r.second) == pytest.approx((0.7, 0.4))
    assert r.difference == r.estimate == pytest.approx(0.3)
    assert r.variance_first == pytest.approx(1.10 / 75)
    assert r.variance_second == pytest.approx(2.00 / 75)
    assert r.covariance == pytest.approx(1.10 / 75)
    assert r.std_error**2 == pytest.approx(0.012)
    assert r.std_error**2 == pytest.approx(r.variance_first + r.variance_second - 2 * r.covariance)
    assert r.statistic == pytest.approx(0.3 / math.sqrt(0.012))
    assert r.statistic == pytest.approx(2.738613, abs=5e-7)
    assert (r.n_subjects, r.n_units) == (4, 10)
    # discordant units: b = 4 (first only), c = 1 (second only); exact McNemar
    # p = 2 P(X <= 1), X ~ Bin(5, 1/2) = 2 x 6/32 = 0.375
    assert (r.mcnemar.b, r.mcnemar.c) == (4, 1)
    assert r.mcnemar.p_value == pytest.approx(0.375)
    assert r.note == "" and r.p_method == OBUCHOWSKI_P_METHOD


def test_p_value_and_interval_come_from_the_standard_normal():
    # scipy.stats.norm: two-sided p and the Wald interval at several levels
    for level in (0.9, 0.95, 0.99):
        r = clustered_paired_proportions(FIRST, SECOND, subject=SUBJECT, confidence_level=level)
        assert r.p_value == pytest.approx(2 * stats.norm.sf(abs(r.statistic)), rel=1e-12)
        q = stats.norm.ppf(0.5 + level / 2)
        assert (r.ci.low, r.ci.high) == pytest.approx(
            (0.3 - q * r.std_error, 0.3 + q * r.std_error), rel=1e-12
        )
        assert r.ci.level == level and r.ci.method == OBUCHOWSKI_CI_METHOD
    assert r.p_value == pytest.approx(0.0061699, abs=5e-7)


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_variance_equals_the_cluster_robust_se_of_statsmodels(seed):
    # p1 - p2 is the mean of the unit differences d = first - second; its ratio-estimator
    # variance equals the CR1 cluster-robust variance of the intercept of OLS of d on 1
    # (statsmodels, cov_type="cluster", small-sample factor G/(G-1) (N-1)/(N-1))
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 9, size=15)
    subject = np.repeat(np.arange(15), sizes)
    propensity = rng.uniform(0.2, 0.9, 15)[subject]
    first = rng.random(subject.size) < propensity
    second = rng.random(subject.size) < propensity - 0.15
    r = clustered_paired_proportions(first, second, subject=subject)
    d = first.astype(float) - second.astype(float)
    fit = sm.OLS(d, np.ones(d.size)).fit(cov_type="cluster", cov_kwds={"groups": subject})
    assert r.estimate == pytest.approx(fit.params[0], rel=1e-12)
    assert r.std_error == pytest.approx(fit.bse[0], rel=1e-10)
    assert r.p_value == pytest.approx(fit.pvalues[0], rel=1e-8)  # normal reference as ours


@pytest.mark.parametrize(("b", "c", "agree"), [(15, 5, 30), (3, 9, 12), (40, 38, 5)])
def test_one_unit_per_subject_reduces_to_the_paired_wald_variance(b, c, agree):
    # Agresti 2002, Categorical Data Analysis, section 10.1 (memory): the Wald variance of a
    # paired difference is [(b + c)/K - ((b - c)/K)^2] / K; the clustered variance is
    # K/(K-1) times it when every subject has one unit
    first = [1] * b + [0] * c + [1] * agree + [0] * agree
    second = [0] * b + [1] * c + [1] * agree + [0] * agree
    k = len(first)
    r = clustered_paired_proportions(first, second, subject=[f"s{i}" for i in range(k)])
    wald = ((b + c) / k - ((b - c) / k) ** 2) / k
    assert r.std_error**2 == pytest.approx(k / (k - 1) * wald, rel=1e-12)
    assert r.estimate == pytest.approx((b - c) / k)
    # subject=None means one subject per unit
    assert clustered_paired_proportions(first, second).std_error == pytest.approx(r.std_error)
    # the exact McNemar test beside it is the package's own (statsmodels exact=True agrees)
    assert r.mcnemar == mcnemar_test(b, c)
    assert r.mcnemar.p_value == pytest.approx(mcnemar([[agree, b], [c, agree]]).pvalue)


@pytest.mark.filterwarnings("ignore::cohort.stats.results.NotEstimableWarning")
@settings(max_examples=50, deadline=None)
@given(
    st.lists(st.tuples(st.booleans(), st.booleans(), st.integers(0, 5)), min_size=4, max_size=40)
)
def test_swapping_the_methods_negates_the_difference(units):
    first, second, subject = (list(v) for v in zip(*units, strict=True))
    forward = clustered_paired_proportions(first, second, subject=subject)
    backward = clustered_paired_proportions(second, first, subject=subject)
    assert backward.estimate == pytest.approx(-forward.estimate)
    assert backward.std_error == pytest.approx(forward.std_error, nan_ok=True)
    assert backward.p_value == pytest.approx(forward.p_value, nan_ok=True)
    assert backward.mcnemar.p_value == pytest.approx(forward.mcnemar.p_value)


def test_summary_and_frame_show_both_tests():
    r = clustered_paired_proportions(FIRST, SECOND, subject=SUBJECT)
    text = r.summary()
    assert "difference" in text and "z = 2.739" in text and "Obuchowski" in text
    assert "exact McNemar: min(b, c) = 1, p = 0.375" in text
    frame = r.to_frame()
    assert frame.loc[0, "difference"] == pytest.approx(0.3)
    assert frame.loc[0, "mcnemar_p"] == pytest.approx(0.375)
    assert frame.loc[0, "n_subjects"] == 4 and frame.loc[0, "n_units"] == 10


@pytest.mark.parametrize(
    ("first", "second", "subject", "reason"),
    [
        ([], [], [], "no units"),
        ([1, 0, 1], [0, 0, 1], ["a", "a", "a"], r"fewer than 2 subjects \(n=1\)"),
        ([1, 0, 1, 1], [1, 0, 1, 1], ["a", "a", "b", "b"], "zero variance of the difference"),
        ([1, 1], [0, 0], ["a", "b"], "zero variance of the difference"),
    ],
)
def test_not_estimable_cases_say_why(first, second, subject, reason):
    with pytest.warns(NotEstimableWarning, match=reason):
        r = clustered_paired_proportions(first, second, subject=subject)
    assert math.isnan(r.p_value) and math.isnan(r.statistic) and math.isnan(r.std_error)
    assert not r.ci.estimable and "not estimable" in r.note
    if first:  # the proportions themselves remain
        assert r.estimate == pytest.approx(np.mean(first) - np.mean(second))
        assert 0.0 <= r.mcnemar.p_value <= 1.0


@pytest.mark.parametrize(
    ("first", "second", "subject", "match"),
    [
        ([1, 0], [1], None, "first and second must have the same length, got 2 and 1"),
        ([1, 2], [1, 0], None, r"first must hold successes as booleans or 0/1, got \[2.0\]"),
        ([1, 0], [1, None], None, "second must not be missing, got 1 missing"),
        ([[1, 0]], [[1, 0]], None, r"first must be one-dimensional, got shape \(1, 2\)"),
        ([1, 0], [1, 0], ["a"], r"subject must have one label per pair \(2\)"),
    ],
)
def test_bad_input_is_refused(first, second, subject, match):
    with pytest.raises(ValueError, match=match):
        clustered_paired_proportions(first, second, subject=subject)


def test_bad_confidence_level_is_refused():
    with pytest.raises(ValueError, match="confidence_level must be between 0 and 1, got 95"):
        clustered_paired_proportions(FIRST, SECOND, confidence_level=95)
