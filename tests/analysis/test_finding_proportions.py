"""Proportions of positive subjects per group and their tests
(cohort.analysis.finding_proportions).

Sources named beside each check: scipy.stats.fisher_exact, statsmodels 0.15
(confint_proportions_2indep, multipletests). The demo cohort is used for integration.
"""

from __future__ import annotations

from unittest import mock

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep

from cohort.analysis.finding_proportions import (
    PROPORTION_TEST_COLUMNS,
    ProportionComparison,
    compare_proportions,
)
from cohort.analysis.group_tables import ALL_GROUPS
from cohort.stats.proportion_tests import freeman_halton
from cohort.stats.results import Result

from ..stats.group_data import ORDER
from .group_data import demo_findings


@pytest.fixture
def study(demo_study):
    return demo_study


@pytest.fixture
def result(demo_groups):
    return demo_groups


def test_compare_proportions_pairs_match_scipy_and_holm(result, study):
    tests = result.proportion_tests
    props = result.proportions
    _, subject = demo_findings(study.values)
    part = subject[subject["method"].eq("reference-fit") & subject["finding"].eq("hemorrhage")]
    counts = part.groupby("group")["positive"].agg(["sum", "count"])
    rows = tests[tests["method"].eq("reference-fit") & tests["finding"].eq("hemorrhage")]
    pair = rows[rows["comparison"].eq("acute vs control")].iloc[0]
    a, na = int(counts.loc["acute", "sum"]), int(counts.loc["acute", "count"])
    c, nc = int(counts.loc["control", "sum"]), int(counts.loc["control", "count"])
    # scipy.stats.fisher_exact 2x2 and statsmodels' Newcombe interval
    assert pair["p_value"] == pytest.approx(stats.fisher_exact([[a, na - a], [c, nc - c]]).pvalue)
    assert pair["effect_size"] == pytest.approx(a / na - c / nc)
    want = confint_proportions_2indep(a, na, c, nc, method="newcomb", compare="diff")
    assert (pair["effect_ci_low"], pair["effect_ci_high"]) == pytest.approx(want)
    pairs = rows[rows["comparison"].ne(ALL_GROUPS)]
    with mock.patch("gc.collect", return_value=0):  # statsmodels' Holm calls gc.collect()
        holm = multipletests(pairs["p_value"], method="holm")[1]
    np.testing.assert_allclose(pairs["p_adjusted"], holm)  # statsmodels multipletests
    omnibus = rows[rows["comparison"].eq(ALL_GROUPS)].iloc[0]
    x = counts.loc[list(ORDER), "sum"].to_numpy()
    n = counts.loc[list(ORDER), "count"].to_numpy()
    assert omnibus["p_value"] == pytest.approx(freeman_halton(x, n).p_value)
    assert omnibus["p_method"].startswith("exact enumeration")
    assert set(tests.columns) == set(PROPORTION_TEST_COLUMNS)
    share = props[props["method"].eq("reference-fit") & props["finding"].eq("hemorrhage")]
    assert share.set_index("group")["n_positive"].to_dict() == counts["sum"].to_dict()


def test_input_errors_name_argument_rule_and_value():
    frame = pd.DataFrame(
        {"subject": ["a"], "group": ["g"], "method": ["m"], "finding": ["f"], "positive": ["yes"]}
    )
    with pytest.raises(ValueError, match=r"positive.*must be boolean"):
        compare_proportions(frame)
    twice = pd.concat([frame.assign(positive=True)] * 2)
    with pytest.raises(ValueError, match="one row per subject, method and finding, got 1 repeated"):
        compare_proportions(twice)


def test_proportion_comparison_follows_the_vocabulary_of_results(study):
    # project rule (cohort.stats.results.Result): frozen, repr=False, to_frame
    _, subject = demo_findings(study.values)
    found = compare_proportions(subject[subject["finding"].eq("field shift")], ORDER)
    assert isinstance(found, ProportionComparison) and isinstance(found, Result)
    assert found.to_frame() is found.tests
    assert repr(found).startswith("ProportionComparison(proportions=<DataFrame (")
