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
    # The summary speaks the names of the repr (project rule, cohort.stats.results.Result):
    # every number is read back from the result's own attributes.
    x, y, subject = pairs()
    loa = cs.limits_of_agreement(x, y, subject=subject, n_boot=40, seed=1)
    lines = loa.summary().splitlines()
    assert lines[0] == f"LimitsOfAgreement: {loa.procedure}, difference scale"
    assert [line.split()[0] for line in lines[1:7]] == [
        "bias",
        "lower",
        "upper",
        "sd",
        *(c.name for c in loa.components),  # sd_within, sd_between
    ]
    b = loa.bias
    [bias] = [line for line in lines if line.split()[0] == "bias"]
    assert f"{b.estimate:.4g}" in bias and f"95% CI {b.ci.low:.4g} to {b.ci.high:.4g}" in bias
    assert f"analytic: {b.analytic_ci.low:.4g} to {b.analytic_ci.high:.4g}" in bias
    # one bootstrap for every quantity: said once, without a list of quantities
    assert lines.count(f"intervals: {b.ci.method}") == 1
    # analytic methods differ: each once, naming the quantities that use it
    mover = loa.lower.analytic_ci.method
    assert f"analytic intervals: {mover} (lower, upper)" in lines
    assert f"n_subjects = {loa.n_subjects}, n_pairs = {loa.n_pairs}" in lines
    assert "nan" not in loa.summary()
    with pytest.warns(cs.NotEstimableWarning):
        lonely = cs.concordance_correlation(x, y, subject=np.zeros(18), n_boot=0)
    assert math.isnan(lonely.estimate)
    assert lonely.summary().endswith(
        "note: concordance correlation not estimable: fewer than 2 subjects (n=1)"
    )
    line = lonely.summary().splitlines()[1]
    assert line.split("   ") == [
        "  Lin's concordance correlation not estimable",
        "95% CI not available",
        "analytic: not available",
    ]


def test_summary_labels_intervals_with_the_exact_level():
    # 0.975 is "97.5% CI", never rounded to "98%" (cohort.domain.wording.interval_label)
    from cohort.domain.wording import interval_label

    x, y, subject = pairs()
    ccc = cs.concordance_correlation(x, y, subject=subject, confidence_level=0.975, n_boot=40)
    [line] = [line for line in ccc.summary().splitlines() if "CI" in line]
    assert line.split()[:3] == ["Lin's", "concordance", "correlation"]
    assert f"{interval_label(0.975)} {ccc.ci.low:.4g} to {ccc.ci.high:.4g}" in line
    assert "97.5% CI" in line and "98%" not in line


def test_summary_of_a_2x2_table_counts_every_unit_and_gives_the_level():
    # 58 units = tp + fp + fn + tn; sensitivity is 20 of tp + fn = 23 (the reviewer's case:
    # the summary printed n_units = 23, the sensitivity's denominator, and no level)
    acc = cs.diagnostic_accuracy(tp=20, fp=5, fn=3, tn=30, confidence_level=0.975)
    text = acc.summary()
    lines = text.splitlines()
    assert "n_units = 58, tp = 20, fp = 5, fn = 3, tn = 30" in lines
    assert "n_units = 23" not in text
    [sens] = [line for line in lines if line.split()[0] == "sensitivity"]
    assert "97.5% CI" in sens and "(20 of 23)" in sens
    p = acc.mcnemar
    assert f"  mcnemar: min(b, c) = 3, p = {p.p_value:.4g} ({p.p_method})" in lines
    # two interval methods: each once, naming its quantities
    assert any(line.endswith("(sensitivity, specificity, ppv, npv)") for line in lines)
    assert any(line.endswith("(kappa)") for line in lines)


def test_summary_of_a_test_says_statistic_df_p_and_method_in_words():
    test = cs.kruskal_wallis([[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]], ["a", "b"])
    assert test.summary().splitlines() == [
        "GroupTest: Kruskal-Wallis",
        f"  H = {test.statistic:.4g}, df = 1, p = {test.p_value:.4g} ({test.p_method})",
        "n_subjects = 6",
        f"note: {test.note}",  # fewer than 5 subjects in a group: chi-square rough
    ]
    welch = cs.welch_anova([[1.0, 2.0, 4.0], [4.0, 5.0, 7.0], [2.0, 9.0, 9.5]])
    assert f"df = 2 and {welch.df_denominator:.4g}," in welch.summary()
    mcnemar = cs.mcnemar_test(5, 12)
    assert mcnemar.summary().splitlines() == [
        "McNemar",
        f"  min(b, c) = 5, p = {mcnemar.p_value:.4g} (exact binomial on discordant pairs)",
        "b = 5, c = 12",
    ]
    first, *_ = cs.games_howell([[1.0, 2, 3, 4, 5], [3.0, 5, 6, 7, 8]], ["a", "b"])
    lines = first.summary().splitlines()
    assert lines[0] == "PairTest: Games-Howell, b vs a"
    assert f"adjusted p = {first.p_adjusted:.4g} ({first.p_adjusted_method})" in lines[1]
    for text in (mcnemar.summary(), first.summary()):
        assert "note" not in text and "nan" not in text  # no table with an empty column


def test_summary_of_several_quantities_names_each_by_its_field_or_name():
    x, y, subject = pairs()
    fit = cs.passing_bablok(x, y, subject=subject, n_boot=40, seed=1)
    lines = fit.summary().splitlines()
    assert lines[0] == "MethodRegression: Passing-Bablok"
    assert [line.split()[0] for line in lines[1:3]] == ["slope", "intercept"]
    forms = cs.icc_forms(np.column_stack([x, y]))
    labels = [line.split()[0] for line in forms.summary().splitlines() if "CI" in line]
    assert labels == [f.name for f in forms.forms]
    assert "n_targets = 18, n_raters = 2" in forms.summary()
    g = cs.hedges_g([3.0, 5, 6, 7, 8], [1.0, 2, 3, 4, 5])
    assert g.summary().splitlines()[1].startswith("  Hedges' g ")


def test_summary_of_a_group_model_names_its_terms():
    # the reviewer's case: rows shown as "row 1", "row 2"
    info = pd.DataFrame({"group": ["a", "a", "a", "b", "b", "b"]}, index=list("uvwxyz"))
    y = [1.0, 1.2, 2.0, 2.2, 1.5, 1.9, 3.1, 2.9, 2.5, 2.8, 3.6, 3.2]
    fit = cs.fit_group_model("subject-means", y, list("uuvvwwxxyyzz"), info, ["a", "b"])
    text = fit.summary()
    assert "row 1" not in text
    lines = text.splitlines()
    assert lines[0] == "GroupModelFit: subject means (OLS)"
    term = next(fit.term_tests())
    assert lines[1].split()[:2] == ["group[b]", f"{term['estimate']:.4g}"]
    assert lines[3].startswith("  joint: group: F = ")
    assert "n_subjects = 6, n_observations = 12" in lines


def test_estimate_note_leaves_out_a_reason_repeated_inside_another():
    ci = ConfidenceInterval.not_estimable("too few")
    e = Estimate("x", math.nan, ci, ci, 1, 1, "x not estimable: too few")
    assert e.row()["note"] == "x not estimable: too few"
    other = Estimate("x", 1.0, ConfidenceInterval(0, 2, note="2 of 9 left out"), ci, 1, 1)
    assert other.row()["note"] == "2 of 9 left out; not estimable: too few"


def test_regression_limit_names_are_the_fields_of_the_result():
    from cohort.stats.regression_limits import REGRESSION_LIMIT_NAMES

    estimates = [
        f.name for f in dataclasses.fields(cs.RegressionLimits) if f.type in ("Estimate", Estimate)
    ]
    assert tuple(estimates) == REGRESSION_LIMIT_NAMES
    x, y, subject = pairs()
    lines = cs.regression_based_limits(x, y, subject=subject, n_boot=0)
    assert tuple(lines.to_frame()["quantity"]) == REGRESSION_LIMIT_NAMES
    assert isinstance(lines.at([1.0]), pd.DataFrame)
