"""Statistics of a 2x2 (k x k) table: Wilson intervals, Cohen's kappa, McNemar and diagnostic
accuracy against published values and statsmodels."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.contingency_tables import mcnemar
from statsmodels.stats.inter_rater import cohens_kappa
from statsmodels.stats.proportion import proportion_confint

from cohort.stats.classification import (
    PROPORTIONS,
    STATISTICS,
    WILSON_METHOD,
    Kappa,
    accuracy_of_counts,
    cohen_kappa,
    diagnostic_accuracy,
    mcnemar_test,
    proportion,
)
from cohort.stats.results import NotEstimableWarning

# --- Wilson intervals ----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("x", "n", "low", "high"),
    [
        # Newcombe RG, Stat Med 1998;17:857, Table I, Wilson score method (memory, DOMAIN.md)
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ],
)
def test_wilson_matches_newcombe_table_1(x, n, low, high):
    p = proportion(x, n)
    assert p.ci.low == pytest.approx(low, abs=5e-5)
    assert p.ci.high == pytest.approx(high, abs=5e-5)
    assert "Wilson" in p.ci.method and "Newcombe 1998" in p.ci.method
    assert p.ci.method == WILSON_METHOD and "units treated as independent" in p.ci.method
    assert p.estimate == pytest.approx(x / n) and (p.successes, p.n_units) == (x, n)


@pytest.mark.parametrize(("x", "n"), [(0, 1), (3, 7), (7, 7), (50, 1000), (999, 1000)])
@pytest.mark.parametrize("level", [0.90, 0.95, 0.99])
def test_wilson_matches_statsmodels(x, n, level):
    # statsmodels.stats.proportion.proportion_confint(method="wilson")
    low, high = proportion_confint(x, n, alpha=1 - level, method="wilson")
    ci = proportion(x, n, level).ci
    assert (ci.low, ci.high) == pytest.approx((low, high), abs=1e-12)
    assert ci.level == level


def test_wilson_input_checks_and_empty():
    with pytest.raises(ValueError, match="successes must be between 0 and n"):
        proportion(5, 3)
    with pytest.raises(ValueError, match="n_units must be a non-negative integer count"):
        proportion(1, 2.5)
    with pytest.warns(NotEstimableWarning, match="ppv not estimable: no test-positive"):
        empty = proportion(0, 0, name="ppv", empty_reason="no test-positive units")
    assert not empty.ci.estimable and math.isnan(empty.estimate)
    assert empty.note == "ppv not estimable: no test-positive units"


# --- kappa and McNemar ---------------------------------------------------------------------


def test_kappa_matches_cohen_1960_and_statsmodels():
    # Cohen 1960 example (memory, DOMAIN.md): proportions x 200, kappa 0.4915 (published .49)
    table = [[88, 14, 18], [10, 40, 10], [2, 6, 12]]
    k = cohen_kappa(table)
    assert k.estimate == pytest.approx(0.4915, abs=5e-5)
    ref = cohens_kappa(table)  # statsmodels.stats.inter_rater.cohens_kappa
    assert k.estimate == pytest.approx(ref.kappa, rel=1e-12)
    assert k.se == pytest.approx(ref.std_kappa, rel=1e-12)  # Fleiss, Cohen & Everitt 1969
    assert (k.ci.low, k.ci.high) == pytest.approx((ref.kappa_low, ref.kappa_upp), rel=1e-12)
    assert k.observed_agreement == pytest.approx(0.70)  # (88 + 40 + 12) / 200
    assert k.chance_agreement == pytest.approx(0.41)
    assert k.n_units == 200


@pytest.mark.parametrize("table", [[[4, 3], [2, 126]], [[20, 5], [10, 15]], [[1, 0], [0, 9]]])
def test_kappa_2x2_matches_statsmodels(table):
    k = cohen_kappa(table)
    ref = cohens_kappa(table)
    assert (k.estimate, k.se) == pytest.approx((ref.kappa, ref.std_kappa), rel=1e-10, abs=1e-12)


def test_kappa_not_estimable_when_chance_agreement_is_one():
    with pytest.warns(NotEstimableWarning, match="chance agreement is 1"):
        k = cohen_kappa([[0, 0], [0, 30]])
    assert math.isnan(k.estimate) and not k.ci.estimable and "not estimable" in k.note
    with pytest.warns(NotEstimableWarning, match="kappa not estimable: no units"):
        assert cohen_kappa([[0, 0], [0, 0]]).n_units == 0
    with pytest.raises(ValueError, match="square k x k"):
        cohen_kappa([[1, 2, 3]])
    with pytest.raises(ValueError, match="non-negative finite counts"):
        cohen_kappa([[1, -2], [3, 4]])


def test_kappa_result_vocabulary():
    k = cohen_kappa([[20, 5], [10, 15]])
    assert isinstance(k, Kappa)
    frame = k.to_frame()
    assert frame.loc[0, "estimate"] == k.estimate and frame.loc[0, "n_units"] == 50
    assert (frame.loc[0, "ci_low"], frame.loc[0, "ci_high"]) == (k.ci.low, k.ci.high)
    assert repr(k).startswith("Kappa(estimate=0.4") and "n_units=50" in repr(k)
    with pytest.raises(AttributeError):
        k.estimate = 0.0  # frozen


def test_mcnemar_exact_matches_statsmodels():
    # statsmodels.stats.contingency_tables.mcnemar(exact=True): binomial on discordant pairs
    for b, c in [(3, 2), (0, 7), (12, 30), (5, 5), (1, 0)]:
        ref = mcnemar([[10, b], [c, 20]], exact=True)
        got = mcnemar_test(b, c)
        assert got.p_value == pytest.approx(ref.pvalue, rel=1e-12)
        assert got.statistic == ref.statistic


def test_mcnemar_chi_square_matches_agresti():
    # Agresti, presidential approval [[794, 150], [86, 570]] (memory, DOMAIN.md): 17.36
    got = mcnemar_test(150, 86, exact=False, correction=False)
    assert got.statistic == pytest.approx(17.36, abs=0.005)
    ref = mcnemar([[794, 150], [86, 570]], exact=False, correction=False)
    assert got.p_value == pytest.approx(ref.pvalue, rel=1e-12)
    corrected = mcnemar_test(150, 86, exact=False, correction=True)
    ref_c = mcnemar([[794, 150], [86, 570]], exact=False, correction=True)
    assert corrected.statistic == pytest.approx(ref_c.statistic, rel=1e-12)
    # the words of every test (GroupTest): statistic_name, p_value, p_method
    assert list(corrected.to_frame().columns) == [
        "statistic",
        "statistic_name",
        "p_value",
        "p_method",
        "b",
        "c",
        "note",
    ]
    assert corrected.p_method == "chi-square, 1 df, continuity corrected"
    assert corrected.statistic_name == "chi-square" and not hasattr(corrected, "method")
    assert mcnemar_test(3, 2).statistic_name == "min(b, c)"


def test_mcnemar_without_discordant_pairs():
    exact = mcnemar_test(0, 0)
    assert exact.p_value == 1.0 and "no discordant pairs" in exact.note
    with pytest.warns(NotEstimableWarning, match="McNemar chi-square not estimable"):
        chi = mcnemar_test(0, 0, exact=False)
    assert math.isnan(chi.p_value)
    with pytest.raises(ValueError, match="b must be a non-negative integer count"):
        mcnemar_test(True, 1)


# --- diagnostic accuracy -------------------------------------------------------------------


def test_diagnostic_accuracy_of_a_table_and_not_estimable_parts():
    acc = diagnostic_accuracy(tp=4, fp=2, fn=3, tn=126)
    assert acc.sensitivity.estimate == pytest.approx(4 / 7)
    assert acc.specificity.estimate == pytest.approx(126 / 128)
    assert acc.ppv.estimate == pytest.approx(4 / 6)
    assert acc.npv.estimate == pytest.approx(126 / 129)
    assert acc.sensitivity.n_units == 7 and acc.n_units == 135
    low, high = proportion_confint(4, 7, method="wilson")
    assert (acc.sensitivity.ci.low, acc.sensitivity.ci.high) == pytest.approx((low, high))
    assert acc.mcnemar.p_value == pytest.approx(mcnemar([[4, 3], [2, 126]]).pvalue)
    assert acc.kappa.estimate == pytest.approx(cohens_kappa([[4, 3], [2, 126]]).kappa)
    frame = acc.to_frame()
    assert len(frame) == 5 and list(frame["quantity"]) == list(STATISTICS)
    with pytest.warns(NotEstimableWarning, match="sensitivity not estimable: no reference-pos"):
        empty = diagnostic_accuracy(tp=0, fp=1, fn=0, tn=9)
    assert math.isnan(empty.sensitivity.estimate)
    assert "no reference-positive" in empty.sensitivity.note
    with pytest.raises(ValueError, match="tp must be a non-negative integer"):
        diagnostic_accuracy(-1, 0, 0, 0)


def test_vectorised_counts_equal_one_table_at_a_time():
    # accuracy_of_counts (used per bootstrap resample) against diagnostic_accuracy, same tables
    rng = np.random.default_rng(4)
    counts = rng.integers(0, 6, size=(40, 4))
    counts[0] = (0, 0, 0, 9)  # chance agreement 1: kappa not estimable
    out = accuracy_of_counts(*counts.T)
    assert math.isnan(out["kappa"][0]) and math.isnan(out["sensitivity"][0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)  # random tables with empty margins
        for i, (tp, fp, fn, tn) in enumerate(counts):
            acc = diagnostic_accuracy(int(tp), int(fp), int(fn), int(tn))
            for name in STATISTICS:
                expected = getattr(acc, name).estimate
                assert out[name][i] == pytest.approx(expected, rel=1e-12, nan_ok=True)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 40), min_size=4, max_size=4))
def test_invariants_of_a_2x2_table(counts):
    # kappa is symmetric in the two raters; each interval holds its estimate (common practice)
    tp, fp, fn, tn = counts
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        acc = diagnostic_accuracy(tp, fp, fn, tn)
        swapped = cohen_kappa([[tp, fp], [fn, tn]])
    assert acc.kappa.estimate == pytest.approx(swapped.estimate, nan_ok=True)
    for name in PROPORTIONS:
        p = getattr(acc, name)
        assert math.isnan(p.estimate) or p.ci.low <= p.estimate <= p.ci.high
    if not math.isnan(acc.kappa.estimate):
        assert acc.kappa.ci.low <= acc.kappa.estimate <= acc.kappa.ci.high
    assert acc.mcnemar.b == fn and acc.mcnemar.c == fp
