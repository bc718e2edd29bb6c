"""The shared result vocabulary: every result type is a frozen Result with to_frame()."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
import pytest

from cohort import stats as cs
from cohort.stats.results import ConfidenceInterval, Estimate, Result, SingleQuantity

RESULT_TYPES = [
    cs.LimitsOfAgreement,
    cs.RegressionLimits,
    cs.ProportionalBias,
    cs.Correlation,
    cs.Concordance,
    cs.IntraclassCorrelation,
    cs.IccForm,
    cs.IccForms,
    cs.MethodRegression,
    cs.Estimate,
]


@pytest.mark.parametrize("kind", RESULT_TYPES, ids=lambda k: k.__name__)
def test_every_result_type_is_a_frozen_result_with_the_shared_repr(kind):
    assert issubclass(kind, Result)
    params = kind.__dataclass_params__
    assert params.frozen and not params.repr  # repr=False: Result.__repr__ is used
    assert "to_frame" in vars(kind) or any("to_frame" in vars(b) for b in kind.__mro__[1:-2])


def pairs():
    rng = np.random.default_rng(4)
    subject = np.repeat(np.arange(6), 3)
    truth = np.repeat(rng.normal(10, 2, 6), 3) + rng.normal(0, 1, 18)
    return truth, 0.3 + truth + rng.normal(0, 0.4, 18), subject


@pytest.mark.parametrize(
    "name", ["pearson", "spearman", "repeated_measures_correlation", "concordance_correlation",
             "icc_agreement"]
)  # fmt: skip
def test_single_quantity_results_expose_estimate_and_intervals_directly(name):
    x, y, subject = pairs()
    result = getattr(cs, name)(x, y, subject=subject, n_boot=40, seed=1)
    assert isinstance(result, SingleQuantity)
    assert isinstance(result.estimate, float)
    assert isinstance(result.ci, ConfidenceInterval) and result.ci.low <= result.ci.high
    assert isinstance(result.analytic_ci, ConfidenceInterval)
    assert (result.n_subjects, result.n_pairs) == (6, 18)
    row = result.to_frame().iloc[0]
    assert row["quantity"] == result.quantity and row["estimate"] == result.estimate
    assert (row["ci_low"], row["analytic_ci_high"]) == (result.ci.low, result.analytic_ci.high)


def test_repr_shows_estimate_and_interval_in_one_line():
    x, y, subject = pairs()
    r = cs.pearson(x, y, subject=subject, n_boot=40, seed=1)
    text = repr(r)
    assert "\n" not in text and text.startswith("Correlation(procedure='Pearson', ")
    assert f"estimate={r.estimate:.4g}, ci=[{r.ci.low:.4g}, {r.ci.high:.4g}]" in text
    assert "note=" not in text  # empty text fields are left out
    loa = cs.limits_of_agreement(x, y, subject=subject, n_boot=40, seed=1)
    b = loa.bias
    assert f"bias={b.estimate:.4g} [{b.ci.low:.4g}, {b.ci.high:.4g}]" in repr(loa)


def test_summary_gives_each_quantity_with_its_interval_and_how_it_was_obtained():
    x, y, subject = pairs()
    loa = cs.limits_of_agreement(x, y, subject=subject, n_boot=40, seed=1)
    lines = loa.summary().splitlines()
    assert lines[0] == "LimitsOfAgreement"
    b = loa.bias
    [bias] = [line for line in lines if line.split()[0] == "bias"]
    assert f"{b.estimate:.4g}" in bias and f"95% CI {b.ci.low:.4g} to {b.ci.high:.4g}" in bias
    assert f"(analytic {b.analytic_ci.low:.4g} to {b.analytic_ci.high:.4g})" in bias
    assert [line.split()[0] for line in lines[1:7]] == [
        "bias",
        "loa_low",
        "loa_high",
        "sd",
        "sd_within",
        "sd_between",
    ]
    assert f"intervals: {b.ci.method}" in lines
    assert f"n_subjects = {loa.n_subjects}, n_pairs = {loa.n_pairs}" in lines
    test = cs.kruskal_wallis([[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]])  # a test: its rows as a table
    assert test.summary().startswith(test.to_frame().to_string(index=False))
    with pytest.warns(cs.NotEstimableWarning):
        lonely = cs.concordance_correlation(x, y, subject=np.zeros(18), n_boot=0)
    assert math.isnan(lonely.estimate)
    assert lonely.summary().endswith(
        "note: concordance correlation not estimable: fewer than 2 subjects (n=1)"
    )


def test_estimate_note_leaves_out_a_reason_repeated_inside_another():
    ci = ConfidenceInterval.not_estimable("too few")
    e = Estimate("x", math.nan, ci, ci, 1, 1, "x not estimable: too few")
    assert e.row()["note"] == "x not estimable: too few"
    other = Estimate("x", 1.0, ConfidenceInterval(0, 2, note="2 of 9 left out"), ci, 1, 1)
    assert other.row()["note"] == "2 of 9 left out; not estimable: too few"


def test_regression_limit_names_are_the_fields_of_the_result():
    from cohort.stats.agreement import REGRESSION_LIMIT_NAMES

    estimates = [
        f.name for f in dataclasses.fields(cs.RegressionLimits) if f.type in ("Estimate", Estimate)
    ]
    assert tuple(estimates) == REGRESSION_LIMIT_NAMES
    x, y, subject = pairs()
    lines = cs.regression_based_limits(x, y, subject=subject, n_boot=0)
    assert tuple(lines.to_frame()["quantity"]) == REGRESSION_LIMIT_NAMES
    assert isinstance(lines.at([1.0]), pd.DataFrame)
