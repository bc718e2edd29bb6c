"""Holm and Benjamini-Hochberg adjusted p-values, checked against statsmodels and the paper.

References: Holm S, Scand J Stat 1979;6:65-70; Benjamini Y, Hochberg Y, J R Stat Soc B
1995;57:289-300; statsmodels.stats.multitest.multipletests (registry reference library;
its default is Holm-Sidak, so the method is always passed explicitly).
"""

from __future__ import annotations

from unittest import mock

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.multitest import multipletests

from cohort.stats.multiplicity import (
    BENJAMINI_HOCHBERG,
    HOLM,
    adjust_p,
    adjust_table,
    adjust_within_families,
    benjamini_hochberg,
    holm,
)

# Benjamini & Hochberg 1995, section 4.1: the 15 p-values of their example (memory).
BH_1995 = np.array(
    [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
     0.4262, 0.5719, 0.6528, 0.7590, 1.000]
)  # fmt: skip

p_lists = st.lists(
    st.one_of(st.floats(0.0, 1.0), st.sampled_from([0.0, 0.01, 0.05, 0.5, 1.0])),
    min_size=1,
    max_size=40,
)


def test_bh_1995_example_rejections():
    # Benjamini & Hochberg 1995 (memory): at 0.05 BH rejects 4, Bonferroni and Holm 3.
    assert int(np.sum(benjamini_hochberg(BH_1995) <= 0.05)) == 4
    assert int(np.sum(holm(BH_1995) <= 0.05)) == 3
    assert int(np.sum(np.minimum(1.0, 15 * BH_1995) <= 0.05)) == 3  # Bonferroni, the same data


def test_bh_1995_example_against_statsmodels():
    # statsmodels multipletests, method='holm' and 'fdr_bh' (registry reference library)
    np.testing.assert_allclose(holm(BH_1995), multipletests(BH_1995, method="holm")[1])
    np.testing.assert_allclose(
        benjamini_hochberg(BH_1995), multipletests(BH_1995, method="fdr_bh")[1]
    )


def test_holm_is_not_holm_sidak():
    # statsmodels' default (Holm-Sidak) gives smaller values than Holm on this example
    with np.errstate(divide="ignore"):  # log1p(-1) for p = 1 inside statsmodels' Sidak step
        sidak = multipletests(BH_1995)[1]
    assert np.all(holm(BH_1995) >= sidak - 1e-15)
    assert np.any(holm(BH_1995) > sidak + 1e-6)


@settings(max_examples=100, deadline=None)
@given(p_lists)
def test_against_statsmodels_on_arbitrary_p_values(values):
    # statsmodels multipletests (registry reference library), ties included. Its Holm
    # branch calls gc.collect() (0.2 s a call here); collection does not change results.
    p = np.array(values)
    with mock.patch("gc.collect", return_value=0):
        expected_holm = multipletests(p, method="holm")[1]
    np.testing.assert_allclose(holm(p), expected_holm, rtol=1e-12)
    np.testing.assert_allclose(
        benjamini_hochberg(p), multipletests(p, method="fdr_bh")[1], rtol=1e-12
    )


@settings(max_examples=100, deadline=None)
@given(p_lists)
def test_bh_never_exceeds_holm_and_both_exceed_raw(values):
    # (m - i + 1) >= m / i for 1 <= i <= m, so the BH value is at most Holm's (algebra)
    p = np.array(values)
    h, b = holm(p), benjamini_hochberg(p)
    assert np.all(b <= h + 1e-15)
    assert np.all(b >= p - 1e-15) and np.all(h <= 1.0)


def test_missing_p_values_stay_missing_and_do_not_count():
    p = np.array([0.01, np.nan, 0.04, 0.03])
    out = holm(p)
    assert np.isnan(out[1])
    np.testing.assert_allclose(out[[0, 2, 3]], multipletests([0.01, 0.04, 0.03], method="holm")[1])
    np.testing.assert_allclose(adjust_p(p, "none"), p, equal_nan=True)


def test_adjust_table_corrects_within_each_family_only():
    table = pd.DataFrame(
        {
            "family": ["a", "a", "b", "b", "b", "c"],
            "p_value": [0.01, 0.04, 0.01, 0.02, 0.03, 0.2],
        }
    )
    out = adjust_table(table, method=BENJAMINI_HOCHBERG)
    np.testing.assert_allclose(
        out["p_adjusted"][:2], multipletests([0.01, 0.04], method="fdr_bh")[1]
    )
    np.testing.assert_allclose(
        out["p_adjusted"][2:5], multipletests([0.01, 0.02, 0.03], method="fdr_bh")[1]
    )
    assert out["p_adjusted"].iloc[5] == pytest.approx(0.2)
    assert "p_adjusted" not in table.columns  # the input is not modified


def test_adjust_table_rows_leave_other_rows_alone():
    table = pd.DataFrame(
        {"family": ["a", "a", "a"], "p_value": [0.01, 0.02, 0.5], "p_adjusted": [9.0, 9.0, 9.0]}
    )
    out = adjust_table(table, method=HOLM, rows=[True, True, False])
    np.testing.assert_allclose(out["p_adjusted"], [0.02, 0.02, 9.0])


def test_statsmodels_spelling_is_accepted_and_shown_canonically():
    np.testing.assert_allclose(adjust_p(BH_1995, "fdr_bh"), benjamini_hochberg(BH_1995))
    table = pd.DataFrame({"family": ["a", "a"], "p_value": [0.01, 0.04]})
    np.testing.assert_allclose(
        adjust_table(table, method="fdr_bh")["p_adjusted"], benjamini_hochberg([0.01, 0.04])
    )


def test_errors_name_the_argument_and_value():
    with pytest.raises(ValueError, match="correction must be one of"):
        adjust_p([0.1], "bonferonni")
    with pytest.raises(ValueError, match=r"p_values must lie in \[0, 1\]"):
        holm([0.2, 1.5])
    with pytest.raises(ValueError, match="one-dimensional"):
        benjamini_hochberg([[0.1, 0.2]])
    with pytest.raises(ValueError, match="no column 'family'"):
        adjust_table(pd.DataFrame({"p_value": [0.1]}))
    with pytest.raises(ValueError, match="rows must hold one boolean per row"):
        adjust_table(pd.DataFrame({"family": ["a"], "p_value": [0.1]}), rows=[True, False])


@settings(max_examples=50, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["a", "b", "c"]), st.floats(0.0, 1.0)), max_size=30))
def test_within_families_equals_statsmodels_per_family(pairs):
    # statsmodels multipletests(method='holm' / 'fdr_bh') on each family alone (registry
    # reference library); the families are tuple keys, interleaved in any order
    keys = [("Fisher pairs", label) for label, _ in pairs]
    p = np.array([v for _, v in pairs])
    for method, name in ((HOLM, "holm"), (BENJAMINI_HOCHBERG, "fdr_bh")):
        got = adjust_within_families(p, keys, method)
        for key in set(keys):
            members = [i for i, k in enumerate(keys) if k == key]
            with mock.patch("gc.collect", return_value=0):  # statsmodels' Holm collects
                want = multipletests(p[members], method=name)[1]
            np.testing.assert_allclose(got[members], want, rtol=1e-12)


def test_families_never_mix_and_unselected_rows_are_nan():
    # one family's adjusted values do not change when another family is added (algebra)
    p = np.array([0.01, 0.04, 0.03, 0.02])
    alone = adjust_within_families(p[:2], [("KW", "mean")] * 2)
    mixed = adjust_within_families(
        p, [("KW", "mean"), ("KW", "mean"), ("KW", "max"), ("KW", "max")]
    )
    np.testing.assert_allclose(mixed[:2], alone)
    np.testing.assert_allclose(mixed[2:], multipletests(p[2:], method="holm")[1])
    some = adjust_within_families(p, ["a"] * 4, rows=[True, False, True, False])
    assert np.isnan(some[[1, 3]]).all()
    np.testing.assert_allclose(some[[0, 2]], multipletests(p[[0, 2]], method="holm")[1])
    with pytest.raises(ValueError, match="families must hold one key per p-value \\(4\\), got 3"):
        adjust_within_families(p, ["a"] * 3)


def test_docstring_examples_agree_with_statsmodels():
    # the values printed in the Examples of holm, benjamini_hochberg and adjust_p, recomputed
    # with statsmodels multipletests (registry reference library)
    p = np.array([0.01, 0.04, 0.03, 0.005])
    for ours, name in ((holm, "holm"), (benjamini_hochberg, "fdr_bh")):
        with mock.patch("gc.collect", return_value=0):  # statsmodels' Holm collects
            want = multipletests(p, method=name)[1]
        np.testing.assert_allclose(ours(p), want, rtol=1e-12)
        np.testing.assert_allclose(adjust_p(p, name), want, rtol=1e-12)
    np.testing.assert_allclose(holm(p), [0.03, 0.06, 0.06, 0.02], rtol=1e-12)
    np.testing.assert_allclose(benjamini_hochberg(p), [0.02, 0.04, 0.04, 0.02], rtol=1e-12)


@pytest.mark.parametrize(
    "missing",
    [float("nan"), np.nan, pd.NA, pd.NaT, ("KW", float("nan")), ("KW", ("max", np.nan))],
    ids=["nan", "np.nan", "pd.NA", "NaT", "in a tuple", "nested"],
)
def test_missing_value_in_a_family_key_is_an_error_naming_the_row(missing):
    # NaN equals nothing, not even another NaN: without the check each such row would be a
    # family of one and its p-value left unadjusted, silently (the reviewer's case)
    p = [0.01, 0.02, 0.03]
    keys = [("KW", "mean"), missing, ("KW", "mean")]
    with pytest.raises(ValueError, match="families: the key of row 1 holds a missing value"):
        adjust_within_families(p, keys)
    # the row left out of the correction need not have a key
    got = adjust_within_families(p, keys, rows=[True, False, True])
    np.testing.assert_allclose(got[[0, 2]], holm([0.01, 0.03]))
    table = pd.DataFrame({"family": [1.0, np.nan, 1.0], "p_value": p})
    with pytest.raises(ValueError, match="row 1"):
        adjust_table(table)
