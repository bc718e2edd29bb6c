"""What the group tables share (cohort.analysis.group_tables): families as data, input checks.

Sources named beside each check: statsmodels 0.15 ``multipletests(method='holm' / 'fdr_bh')``
(reference library); the ``family`` wording is the project's own (the texts below are those
of the tables before the families became data, kept byte-identical).
"""

from __future__ import annotations

import math
import warnings
from unittest import mock

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.multitest import multipletests

from cohort.analysis.group_tables import (
    GROUP_TERMS,
    JOINT_TESTS,
    OMNIBUS_PER_SUMMARY,
    OMNIBUS_PER_TABLE,
    PAIRS,
    Family,
    adjust_by_family,
    one_warning_per_reason,
    ordered_groups,
    positive_flags,
)
from cohort.stats.results import NotEstimableWarning, warn_not_estimable


def test_family_text_is_the_wording_of_the_tables():
    # the f-strings of the family column before this change (project wording)
    kw, summary, parameter, method = "Kruskal-Wallis", "culprit_mean", "r2star", "quickmap"
    assert (
        Family(OMNIBUS_PER_SUMMARY, kw, (summary,), ("parameter", "method")).text
        == f"{kw} all groups, summary {summary}: every parameter x method"
    )
    assert (
        Family(PAIRS, "Mann-Whitney U", (parameter, method, summary)).text
        == f"Mann-Whitney U pairs: {parameter}, {method}, {summary}"
    )
    assert (
        Family(OMNIBUS_PER_TABLE, "Fisher", across=("method", "finding")).text
        == "Fisher all-groups tests: every method x finding"
    )
    assert (
        Family(PAIRS, "Fisher", (method, "hemorrhage")).text
        == f"Fisher pairs: {method}, hemorrhage"
    )
    model = "group difference"
    assert (
        Family(GROUP_TERMS, model, (parameter, method), reference="control").text
        == f"{model} group terms vs control: {parameter}, {method}"
    )
    assert (
        Family(JOINT_TESTS, "finding by group", across=("method", "finding")).text
        == "finding by group joint group tests: every method x finding"
    )
    with pytest.raises(ValueError, match="unknown kind of family 'other'"):
        _ = Family("other", "x").text


def table_of(families, p_values, correction=None, p_adjusted=None):
    n = len(p_values)
    return pd.DataFrame(
        {
            "family": families,
            "p_value": p_values,
            "correction": correction or [""] * n,
            "p_adjusted": p_adjusted or [math.nan] * n,
        }
    )


@pytest.mark.parametrize(
    ("correction", "name"), [("holm", "holm"), ("benjamini-hochberg", "fdr_bh")]
)
def test_rows_are_corrected_within_their_family_key_only(correction, name):
    # statsmodels multipletests per family; keys interleaved, one row without a family,
    # one row with its own adjustment (as Games-Howell pairs have)
    a = Family(PAIRS, "Fisher", ("m", "f"))
    b = Family(PAIRS, "Fisher", ("m", "g"))
    table = table_of(
        [a, b, a, "", b, a, b],
        [0.01, 0.04, 0.03, 0.2, 0.01, 0.02, 0.5],
        correction=["", "", "", "", "", "", "studentized range"],
        p_adjusted=[math.nan] * 6 + [0.7],
    )
    with mock.patch("gc.collect", return_value=0):  # statsmodels' Holm calls gc.collect()
        want_a = multipletests([0.01, 0.03, 0.02], method=name)[1]
        want_b = multipletests([0.04, 0.01], method=name)[1]
    out = adjust_by_family(table, correction)
    np.testing.assert_allclose(out["p_adjusted"].iloc[[0, 2, 5]], want_a, rtol=1e-12)
    np.testing.assert_allclose(out["p_adjusted"].iloc[[1, 4]], want_b, rtol=1e-12)
    assert math.isnan(out["p_adjusted"].iloc[3]) and out["p_adjusted"].iloc[6] == 0.7
    assert list(out["correction"]) == [correction] * 3 + [""] + [correction] + [
        correction,
        "studentized range",
    ]
    assert out["family"].iloc[0] == "Fisher pairs: m, f" and out["family"].iloc[3] == ""


def test_families_with_the_same_wording_but_different_keys_never_mix():
    # the key is data: a finding named "f, g" and the cell ("f", "g") read alike but differ
    one = Family(PAIRS, "Fisher", ("m", "f, g"))
    other = Family(PAIRS, "Fisher", ("m, f", "g"))
    assert one.text == other.text and one != other
    out = adjust_by_family(table_of([one, other], [0.02, 0.03]), "holm")
    np.testing.assert_allclose(out["p_adjusted"], [0.02, 0.03])  # families of one test each


def test_ordered_groups_and_positive_flags_check_their_inputs():
    assert ordered_groups(pd.Series(["b", "a", "b"]), None, "x") == ["b", "a"]
    with pytest.raises(ValueError, match="group_order must not repeat a group"):
        ordered_groups(["a"], ["a", "a"], "x")
    with pytest.raises(
        ValueError, match=r"group_order must list every group of x, missing \['b'\]"
    ):
        ordered_groups(["a", "b"], ["a"], "x")
    with pytest.raises(
        ValueError, match=r"f\['positive'\] must be boolean \(or 0/1\), got \['2'\]"
    ):
        positive_flags(pd.DataFrame({"positive": [1, 2]}), "f")


def test_each_not_estimable_reason_is_warned_once_with_its_count():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with one_warning_per_reason():
            for _ in range(3):
                warn_not_estimable("probe", "a reason")
    messages = [str(w.message) for w in caught if issubclass(w.category, NotEstimableWarning)]
    assert messages == ["probe not estimable: a reason (3 rows)"]
