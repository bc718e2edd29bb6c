"""Tests of cohort.stats.concordance: Lin's CCC and the ICC forms."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pingouin as pg
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from cohort.stats.concordance import concordance_correlation, icc_agreement, icc_forms
from cohort.stats.results import NotEstimableWarning

# pingouin 0.7 calls pandas methods with inplace=..., deprecated in pandas 3.1: not ours.
pytestmark = pytest.mark.filterwarnings("ignore:The inplace keyword")

# Shrout & Fleiss 1979, Psychol Bull 86:420-428, Table 2: six targets x four judges
# (values of DOMAIN.md).
SHROUT_FLEISS = np.array(
    [[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8], [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]],
    dtype=float,
)


@pytest.fixture
def unrounded_pingouin():
    # DOMAIN.md: pingouin rounds CI columns to 2 decimals unless this option is lifted.
    previous = pg.options["round.column.CI95"]
    pg.options["round.column.CI95"] = None
    yield
    pg.options["round.column.CI95"] = previous


def _pingouin_icc(table: np.ndarray) -> pd.DataFrame:
    n, k = table.shape
    long = pd.DataFrame(
        {
            "target": np.repeat(np.arange(n), k),
            "rater": np.tile(np.arange(k), n),
            "rating": table.ravel(),
        }
    )
    return pg.intraclass_corr(long, targets="target", raters="rater", ratings="rating")


def test_icc_forms_on_shrout_fleiss_example(unrounded_pingouin):
    forms = icc_forms(SHROUT_FLEISS)
    # Published (Shrout & Fleiss 1979, Table 4): ICC(1,1) .17, ICC(2,1) .29, ICC(3,1) .71,
    # ICC(1,4) .44, ICC(2,4) .62, ICC(3,4) .91.
    published = {"ICC(1,1)": 0.17, "ICC(2,1)": 0.29, "ICC(3,1)": 0.71}
    published.update({"ICC(1,k)": 0.44, "ICC(2,k)": 0.62, "ICC(3,k)": 0.91})
    for name, value in published.items():
        assert forms[name].estimate == pytest.approx(value, abs=0.005), name
    # pingouin.intraclass_corr on the same table (DOMAIN.md: 0.165742, 0.289764, 0.714841,
    # 0.442797, 0.620051, 0.909316); F-based intervals, unrounded.
    expected = _pingouin_icc(SHROUT_FLEISS)
    got = forms.to_frame()
    np.testing.assert_allclose(
        got["estimate"], [0.165742, 0.289764, 0.714841, 0.442797, 0.620051, 0.909316], atol=1e-6
    )
    np.testing.assert_allclose(got["estimate"], expected["ICC"], rtol=1e-10)
    np.testing.assert_allclose(got["f_value"], expected["F"], rtol=1e-10)
    np.testing.assert_allclose(got["p_value"], expected["pval"], rtol=1e-8)
    expected_ci = np.vstack(expected["CI95"].to_numpy())
    np.testing.assert_allclose(got[["ci_low", "ci_high"]].to_numpy(), expected_ci, atol=1e-6)
    assert forms["ICC(A,1)"].shrout_fleiss == "ICC(2,1)"


def cohort_pairs(n_subjects=30, seed=2):
    """Invented cohort-like pairs: subject levels, segment noise, a method offset."""
    rng = np.random.default_rng(seed)
    m = rng.integers(8, 18, n_subjects)
    subject = np.repeat([f"S{i:03d}" for i in range(n_subjects)], m)
    truth = np.repeat(rng.normal(30, 6, n_subjects), m) + rng.normal(0, 3, m.sum())
    reference = truth + rng.normal(0, 1.5, m.sum())
    test = 0.8 + 1.02 * truth + rng.normal(0, 2.0, m.sum())
    return reference, test, subject


def test_icc_agreement_matches_pingouin_on_cohort_like_data(unrounded_pingouin):
    # pingouin.intraclass_corr with each (subject, segment) pair a target, methods as raters.
    reference, test, subject = cohort_pairs()
    expected = _pingouin_icc(np.column_stack([reference, test])).set_index("Type")
    result = icc_agreement(reference, test, subject=subject, n_boot=200)
    assert result.estimate == pytest.approx(expected.loc["ICC(A,1)", "ICC"], rel=1e-10)
    low, high = expected.loc["ICC(A,1)", "CI95"]
    assert result.analytic_ci.low == pytest.approx(low, abs=1e-9)
    assert result.analytic_ci.high == pytest.approx(high, abs=1e-9)
    forms = icc_forms(np.column_stack([reference, test]))
    assert result.estimate == pytest.approx(forms["ICC(A,1)"].estimate, rel=1e-10)
    assert result.ci.low < result.estimate < result.ci.high


def test_ccc_equals_lin_definitions_computed_independently():
    # Lin 1989: rho_c = 1 - E(Y - X)^2 / [s_x^2 + s_y^2 + (mu_x - mu_y)^2] (divisor n), and
    # rho_c = r * C_b with C_b = 2 / (v + 1/v + u^2), v = s_x/s_y, u = (mu_x - mu_y)/sqrt(s_x s_y).
    reference, test, subject = cohort_pairs()
    sx2, sy2 = reference.var(), test.var()
    shift = test.mean() - reference.mean()
    expected = 1 - np.mean((test - reference) ** 2) / (sx2 + sy2 + shift**2)
    result = concordance_correlation(reference, test, subject=subject, n_boot=200)
    assert result.estimate == pytest.approx(expected, rel=1e-12)
    r = np.corrcoef(reference, test)[0, 1]
    v, u = math.sqrt(sx2 / sy2), shift / (sx2 * sy2) ** 0.25
    assert result.pearson_r == pytest.approx(r, rel=1e-12)
    assert result.accuracy == pytest.approx(2 / (v + 1 / v + u * u), rel=1e-12)
    assert result.estimate == pytest.approx(r * result.accuracy, rel=1e-12)


def test_lin_standard_error_matches_monte_carlo():
    # Lin 1989 (with the 2000 correction): asymptotic SE of atanh(rho_c) (formula from memory,
    # so checked here against the Monte Carlo SD over 3000 bivariate normal samples, n = 100,
    # with a location and scale shift). The SE behind each analytic interval, averaged over
    # 200 samples, must agree with the Monte Carlo SD within 5%.
    rng = np.random.default_rng(9)
    n, reps = 100, 3000
    cov = [[1.0, 0.8 * 1.2], [0.8 * 1.2, 1.44]]
    samples = rng.multivariate_normal([0.0, 0.4], cov, size=(reps, n))
    x, y = samples[..., 0], samples[..., 1]
    sxy = ((x - x.mean(1, keepdims=True)) * (y - y.mean(1, keepdims=True))).mean(1)
    ccc = 2 * sxy / (x.var(1) + y.var(1) + (x.mean(1) - y.mean(1)) ** 2)
    mc_sd = np.arctanh(ccc).std(ddof=1)
    q = stats.norm.ppf(0.975)
    ses = []
    for i in range(200):
        one = concordance_correlation(x[i], y[i], n_boot=0)
        assert one.estimate == pytest.approx(ccc[i], rel=1e-10)
        ses.append((math.atanh(one.analytic_ci.high) - math.atanh(one.estimate)) / q)
    assert np.mean(ses) == pytest.approx(mc_sd, rel=0.05)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_ccc_is_one_for_identical_methods(seed):
    reference, _, subject = cohort_pairs(4, seed=seed)
    result = concordance_correlation(reference, reference.copy(), subject=subject, n_boot=30)
    assert result.estimate == pytest.approx(1.0, abs=1e-12)
    assert result.ci.low == pytest.approx(1.0, abs=1e-12)
    icc = icc_agreement(reference, reference.copy(), subject=subject, n_boot=30)
    assert icc.estimate == pytest.approx(1.0, abs=1e-12)


def test_ccc_below_correlation_when_methods_differ_in_location():
    # Lin 1989: rho_c = r only without location or scale shift; a shift lowers rho_c.
    reference, test, subject = cohort_pairs()
    shifted = concordance_correlation(reference, test + 5.0, subject=subject, n_boot=0)
    base = concordance_correlation(reference, test, subject=subject, n_boot=0)
    assert shifted.estimate < base.estimate < base.pearson_r


def test_identical_constant_values_are_not_estimable():
    subject = np.repeat(["a", "b"], 5)
    values = np.full(10, 4.0)
    with pytest.warns(NotEstimableWarning, match="no variation in either method"):
        result = concordance_correlation(values, values, subject=subject, n_boot=20)
    assert math.isnan(result.estimate)
    with pytest.warns(NotEstimableWarning, match="no variation in either method"):
        assert math.isnan(icc_agreement(values, values, subject=subject).estimate)


def test_one_subject_is_not_estimable():
    reference, test, _ = cohort_pairs(3)
    with pytest.warns(NotEstimableWarning, match="fewer than 2 subjects"):
        result = concordance_correlation(reference, test, subject=["x"] * reference.size)
    note = "concordance correlation not estimable: fewer than 2 subjects (n=1)"
    assert result.note == result.to_frame()["note"].iloc[0] == note


@pytest.mark.parametrize(
    ("ratings", "match"),
    [
        ([1.0, 2.0, 3.0], r"ratings must be a 2-D table \(targets x raters\), got shape \(3,\)"),
        ([[1.0, 2.0]], r"at least 2 targets and 2 raters, got shape \(1, 2\)"),
        ([[1.0, np.nan], [2.0, 3.0]], "ratings must be complete and finite"),
    ],
)
def test_icc_forms_errors(ratings, match):
    with pytest.raises(ValueError, match=match):
        icc_forms(ratings)
