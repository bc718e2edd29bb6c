"""Tests between groups on per-subject summaries and the whole group comparison
(cohort.analysis.group_comparison).

Sources named beside each check: scipy.stats (kruskal, mannwhitneyu, f_oneway), pingouin
0.7 (compute_effsize), statsmodels 0.15 (multipletests). The demo cohort is used for
integration only; invented data only in property tests.
"""

from __future__ import annotations

import itertools
import warnings
from unittest import mock

import numpy as np
import pingouin as pg
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.multitest import multipletests

from cohort.analysis.group_comparison import (
    COMPARISON_COLUMNS,
    compare_summaries,
    group_comparison_table,
)
from cohort.analysis.group_tables import ALL_GROUPS
from cohort.analysis.subject_summaries import CULPRIT_MEAN, subject_summaries
from cohort.stats.group_tests import GAMES_HOWELL, KRUSKAL_WALLIS, MANN_WHITNEY, WELCH_ANOVA
from cohort.stats.models import JOINT_GROUP, SUBJECT_MEANS_PATH, choose_model_path
from cohort.stats.results import NotEstimableWarning, Result

from ..stats.group_data import ORDER, samples
from .group_data import long_frame


@pytest.fixture
def study(demo_study):
    return demo_study


@pytest.fixture
def result(demo_groups):
    return demo_groups


def test_group_comparison_rows_match_scipy_and_pingouin(result):
    table = result.comparisons
    assert tuple(table.columns) == COMPARISON_COLUMNS
    s = result.summaries
    part = s[s["parameter"].eq("r2star") & s["method"].eq("reference-fit") & s["summary"].eq("max")]
    by = {g: part.loc[part["group"].eq(g), "value"].to_numpy() for g in ORDER}
    rows = table[
        table["parameter"].eq("r2star")
        & table["method"].eq("reference-fit")
        & table["summary"].eq("max")
    ]
    kw = rows[rows["test"].eq(KRUSKAL_WALLIS)].iloc[0]
    assert kw["comparison"] == ALL_GROUPS
    assert kw["p_value"] == pytest.approx(stats.kruskal(*by.values()).pvalue)  # scipy
    mw = rows[rows["test"].eq(MANN_WHITNEY) & rows["comparison"].eq("acute vs control")].iloc[0]
    want = stats.mannwhitneyu(by["acute"], by["control"])  # scipy, its 'auto' rule
    assert (mw["statistic"], mw["p_value"]) == pytest.approx((want.statistic, want.pvalue))
    welch = rows[rows["test"].eq(WELCH_ANOVA)].iloc[0]
    assert welch["p_value"] == pytest.approx(stats.f_oneway(*by.values(), equal_var=False).pvalue)
    gh = rows[rows["test"].eq(GAMES_HOWELL) & rows["comparison"].eq("chronic vs acute")].iloc[0]
    assert gh["effect_size"] == pytest.approx(
        pg.compute_effsize(by["chronic"], by["acute"], eftype="hedges")
    )
    assert gh["correction"].startswith("studentized range")


def test_group_comparison_families_are_holm_corrected(result):
    # statsmodels multipletests(method='holm') over each stated family
    table = result.comparisons
    for _, family in table[table["correction"].eq("holm")].groupby("family"):
        finite = family["p_value"].notna()
        with mock.patch("gc.collect", return_value=0):  # statsmodels' Holm calls gc.collect()
            holm = multipletests(family.loc[finite, "p_value"], method="holm")[1]
        np.testing.assert_allclose(family.loc[finite, "p_adjusted"], holm)
    omnibus = table[table["test"].eq(KRUSKAL_WALLIS) & table["summary"].eq("mean")]
    n_methods = len(set(omnibus["method"].astype(str)))
    assert n_methods == 4  # the demo's reference and three test methods
    # one family: parameters x methods
    assert omnibus["family"].nunique() == 1 and len(omnibus) == 3 * n_methods


def test_culprit_summary_leaves_controls_out_with_a_note(result):
    table = result.comparisons
    rows = table[table["summary"].eq(CULPRIT_MEAN) & table["test"].eq(KRUSKAL_WALLIS)]
    assert (rows["comparison"] == "groups acute, chronic").all()
    assert rows["note"].str.contains("left out \\(no value\\): control").all()


def test_bh_correction_option(study):
    summaries = subject_summaries(study.values, study.subjects.drop(columns="culprit_territory"))
    table = compare_summaries(summaries, ORDER, tests=("kruskal-wallis",), correction="fdr_bh")
    omnibus = table[table["comparison"].eq(ALL_GROUPS)]
    assert omnibus["family"].nunique() == 2  # one family per summary (mean, max)
    for _, family in omnibus.groupby("family"):  # statsmodels multipletests(method='fdr_bh')
        expected = multipletests(family["p_value"], method="fdr_bh")[1]
        np.testing.assert_allclose(family["p_adjusted"], expected)
    assert (table["correction"] == "benjamini-hochberg").all()


def test_too_few_subjects_gives_not_estimable_rows_not_a_crash():
    arrays = [np.array([1.0, 2.0, 3.0, 2.5]), np.array([4.0]), np.array([5.0, 6.5, 7.0])]
    with pytest.warns(NotEstimableWarning) as record:
        table = compare_summaries(long_frame(arrays))
    messages = [str(w.message) for w in record]
    assert any(
        "Kruskal-Wallis not estimable: fewer than 2 subjects in acute" in m for m in messages
    )
    assert any("Hedges' g not estimable: fewer than 2 subjects in acute" in m for m in messages)
    omnibus = table[table["comparison"].eq(ALL_GROUPS)]
    assert omnibus["p_value"].isna().all() and omnibus["note"].str.contains("not estimable").all()
    pairs = table[table["comparison"].eq("chronic vs control")]
    assert pairs["p_value"].notna().all()  # pairs without the small group are still tested
    small = table[table["comparison"].eq("acute vs control")]
    assert small["p_value"].isna().all() and small["note"].str.contains("not estimable").all()


group_sizes = st.tuples(st.integers(3, 7), st.integers(3, 7), st.integers(3, 7))


@settings(max_examples=15, deadline=None)
@given(group_sizes, st.integers(0, 10_000), st.permutations(["x1", "x2", "x3"]))
def test_consistent_relabelling_keeps_every_p_value(sizes, seed, names):
    # invented data; renaming groups consistently (data and order) cannot change a test
    arrays = samples(seed, sizes)
    mapping = dict(zip(ORDER, names, strict=True))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        before = compare_summaries(long_frame(arrays))
        after = compare_summaries(long_frame(arrays, names), [mapping[g] for g in ORDER])
    np.testing.assert_allclose(after["p_value"], before["p_value"], equal_nan=True)
    np.testing.assert_allclose(after["p_adjusted"], before["p_adjusted"], equal_nan=True)
    pairs = itertools.permutations(ORDER, 2)
    renamed = before["comparison"].replace(
        {f"{a} vs {b}": f"{mapping[a]} vs {mapping[b]}" for a, b in pairs}
    )
    assert list(after["comparison"]) == list(renamed)


@settings(max_examples=10, deadline=None)
@given(group_sizes, st.integers(0, 10_000))
def test_reversed_group_order_flips_effects_not_p_values(sizes, seed):
    arrays = samples(seed, sizes)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        forward = compare_summaries(long_frame(arrays)).set_index(["test", "comparison"])
        back = compare_summaries(long_frame(arrays), ORDER[::-1]).set_index(["test", "comparison"])
    for (test, comparison), row in forward.iterrows():
        if comparison == ALL_GROUPS:
            assert back.loc[(test, comparison), "p_value"] == pytest.approx(row["p_value"])
            continue
        first, second = comparison.split(" vs ")
        other = back.loc[(test, f"{second} vs {first}")]
        assert other["p_value"] == pytest.approx(row["p_value"], rel=1e-9)
        assert other["effect_size"] == pytest.approx(-row["effect_size"], abs=1e-12)
        assert other["effect_ci_low"] == pytest.approx(-row["effect_ci_high"], abs=1e-9)


def test_path_is_chosen_by_size_and_stated(study):
    assert choose_model_path(10_000)[0] == "mixed"
    assert choose_model_path(10_001)[0] == "subject-means"
    assert choose_model_path(10, "subject-means") == ("subject-means", "subject-means requested")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        out = group_comparison_table(study.values, study.subjects, max_mixed_observations=100)
    assert out.model_path.startswith(SUBJECT_MEANS_PATH) and "large cohort" in out.model_path
    joint = out.models[out.models["term"].eq(JOINT_GROUP)]
    # one path for every fit, chosen by the largest: the used values of one parameter and
    # method (the notes state that size)
    sizes = (
        study.values.astype({"parameter": str, "method": str})
        .groupby(["parameter", "method"])
        .size()
    )
    for row in joint.itertuples():
        assert f"largest fit {sizes.max()} values > 100" in row.note
    assert set(out.tables()) >= {"group_comparison", "group_descriptives", "group_models"}


def test_input_errors_name_argument_rule_and_value():
    summaries = long_frame(samples())
    with pytest.raises(ValueError, match="tests must be a non-empty selection"):
        compare_summaries(summaries, tests=("anova",))
    with pytest.raises(ValueError, match="correction must be one of"):
        compare_summaries(summaries, correction="bonferroni")
    with pytest.raises(
        ValueError, match=r"group_order must list every group .* missing \['chronic'\]"
    ):
        compare_summaries(summaries, ("control", "acute"))
    with pytest.raises(ValueError, match="summaries has no column\\(s\\) \\['value'\\]"):
        compare_summaries(summaries.drop(columns="value"))


def test_group_comparison_follows_the_vocabulary_of_results(result):
    # project rule (cohort.stats.results.Result): frozen, repr=False, to_frame
    assert isinstance(result, Result) and result.to_frame() is result.comparisons
    assert repr(result).startswith("GroupComparison(comparisons=<DataFrame (")
