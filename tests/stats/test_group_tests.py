"""Tests between groups (cohort.stats.group_tests), checked against reference libraries.

Sources named beside each check: scipy.stats (kruskal, mannwhitneyu, f_oneway with
equal_var=False, ttest_ind), pingouin 0.7 (welch_anova, pairwise_gameshowell). Invented
data only (seeded normal samples rounded to create ties).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
import pingouin as pg
import pytest
from scipy import stats

from cohort.stats.group_tests import games_howell, kruskal_wallis, mann_whitney, welch_anova
from cohort.stats.results import NotEstimableWarning, Result

from .group_data import ORDER, samples


def test_kruskal_wallis_matches_scipy_with_ties():
    # scipy.stats.kruskal (tie-corrected H, chi-square p); values rounded to create ties
    a, b, c = samples()
    got = kruskal_wallis([a, b, c])
    want = stats.kruskal(a, b, c)
    assert got.statistic == pytest.approx(want.statistic, rel=1e-12)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-10)
    assert got.df == 2


@pytest.mark.parametrize("sizes", [(3, 7), (8, 8), (5, 40), (2, 2), (1 + 1, 30)])
def test_mann_whitney_exact_matches_scipy(sizes):
    # scipy.stats.mannwhitneyu(method='exact'), continuous values (no ties)
    rng = np.random.default_rng(sum(sizes))
    x, y = rng.normal(0.4, 1, sizes[0]), rng.normal(0, 1, sizes[1])
    got = mann_whitney(x, y, method="exact")
    want = stats.mannwhitneyu(x, y, method="exact")
    assert got.statistic == pytest.approx(want.statistic)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-9)


def test_mann_whitney_asymptotic_and_auto_match_scipy():
    # scipy.stats.mannwhitneyu: asymptotic (tie + continuity corrected) and its 'auto' rule
    a, b, _ = samples()
    got = mann_whitney(b, a)
    want = stats.mannwhitneyu(b, a)  # ties present: scipy's auto picks the normal approximation
    assert got.p_method.startswith("normal approximation")
    assert got.statistic == pytest.approx(want.statistic)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-12)
    x, y = np.array([1.1, 2.3, 3.2, 4.8]), np.linspace(2.0, 9.0, 12)
    assert mann_whitney(x, y).p_method == "exact, no ties"
    assert mann_whitney(x, y).p_value == pytest.approx(stats.mannwhitneyu(x, y).pvalue)


def test_welch_anova_matches_scipy_pingouin_and_formula():
    # scipy.stats.f_oneway(equal_var=False) and pingouin.welch_anova (reference libraries),
    # and Welch 1951's formula written out here
    arrays = samples()
    got = welch_anova(arrays)
    want = stats.f_oneway(*arrays, equal_var=False)
    assert got.statistic == pytest.approx(want.statistic, rel=1e-12)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-10)
    frame = pd.DataFrame(
        {"v": np.concatenate(arrays), "g": np.repeat(ORDER, [a.size for a in arrays])}
    )
    ping = pg.welch_anova(frame, dv="v", between="g")
    assert got.df_denominator == pytest.approx(ping["ddof2"].iloc[0], rel=1e-10)
    assert got.statistic == pytest.approx(ping["F"].iloc[0], rel=1e-10)
    n = np.array([a.size for a in arrays])
    m = np.array([a.mean() for a in arrays])
    w = n / np.array([a.var(ddof=1) for a in arrays])
    mw = (w * m).sum() / w.sum()
    lam = ((1 - w / w.sum()) ** 2 / (n - 1)).sum()
    f = ((w * (m - mw) ** 2).sum() / 2) / (1 + 2 * 1 * lam / 8)
    assert got.statistic == pytest.approx(f, rel=1e-12)
    assert got.df_denominator == pytest.approx(8 / (3 * lam), rel=1e-12)


def test_games_howell_matches_pingouin():
    # pingouin.pairwise_gameshowell; pingouin orders pairs A < B alphabetically and reports
    # mean(A) - mean(B); ours read "later vs earlier" in the given order
    arrays = samples()
    labels = ("a", "b", "c")
    pairs = games_howell(arrays, labels)
    frame = pd.DataFrame(
        {"v": np.concatenate(arrays), "g": np.repeat(labels, [a.size for a in arrays])}
    )
    ref = pg.pairwise_gameshowell(frame, dv="v", between="g").set_index(["A", "B"])
    assert [p.comparison for p in pairs] == ["b vs a", "c vs a", "c vs b"]
    for pair in pairs:
        row = ref.loc[(pair.second, pair.first)]
        assert pair.statistic == pytest.approx(-row["T"], rel=1e-10)
        assert pair.df == pytest.approx(row["df"], rel=1e-10)
        assert pair.p_adjusted == pytest.approx(row["pval"], rel=1e-6)
        # the unadjusted p is the Welch t-test's: scipy.stats.ttest_ind(equal_var=False)
        i, j = labels.index(pair.first), labels.index(pair.second)
        welch = stats.ttest_ind(arrays[i], arrays[j], equal_var=False)
        assert pair.p_value == pytest.approx(welch.pvalue, rel=1e-10)


def test_zero_variance_is_not_estimable_for_welch():
    with pytest.warns(NotEstimableWarning, match="zero variance in b"):
        got = welch_anova([np.array([1.0, 2.0, 3.0]), np.array([2.0, 2.0])], ["a", "b"])
    assert math.isnan(got.p_value) and "not estimable" in got.note


def test_input_errors_name_argument_rule_and_value():
    with pytest.raises(ValueError, match="samples\\[1\\] must hold finite values"):
        kruskal_wallis([[1.0, 2.0], [np.nan, 1.0]])
    with pytest.raises(ValueError, match="samples must hold at least 2 groups, got 1"):
        welch_anova([[1.0, 2.0, 3.0]])
    with pytest.raises(ValueError, match="labels must name each of the 2 samples, got 3"):
        kruskal_wallis([[1.0, 2.0], [3.0, 4.0]], ["a", "b", "c"])
    with pytest.raises(ValueError, match="method must be 'auto', 'exact' or 'asymptotic'"):
        mann_whitney([1.0, 2.0], [3.0, 4.0], method="fast")


def test_results_follow_the_vocabulary_of_results():
    # project rule (cohort.stats.results.Result): frozen, one-line repr, to_frame, n_subjects
    a, b, c = samples()
    res = kruskal_wallis([a, b, c])
    assert isinstance(res, Result) and res.n_subjects == a.size + b.size + c.size
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.p_value = 0.0
    assert repr(res).startswith("GroupTest(test='Kruskal-Wallis', statistic=")
    assert list(res.to_frame().columns) == [
        "test", "statistic", "statistic_name", "df", "df_denominator", "p_value", "p_method",
        "n_subjects", "note",
    ]  # fmt: skip
    pair = games_howell([a, b], ["control", "acute"])[0]
    assert isinstance(pair, Result) and pair.n_subjects == a.size + b.size
    assert pair.to_frame()["comparison"].iloc[0] == "acute vs control"
    with pytest.warns(NotEstimableWarning, match="fewer than 2 subjects in y \\(n=1\\)"):
        small = mann_whitney(a, [1.0])
    assert math.isnan(small.p_value) and small.note.startswith("Mann-Whitney U not estimable")
