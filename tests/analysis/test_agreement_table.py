"""Tests of cohort.analysis.agreement_table: layout, agreement with the statistics' own functions,
determinism and not-estimable rows."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest

from cohort.analysis.agreement_table import AGREEMENT_COLUMNS, COLUMN_DESCRIPTIONS, agreement_table
from cohort.domain.segments import SEGMENTS
from cohort.parallel import can_fork
from cohort.stats.agreement import (
    limits_of_agreement,
    proportional_bias,
    subject_mean_limits,
)
from cohort.stats.concordance import concordance_correlation, icc_agreement
from cohort.stats.correlation import pearson, repeated_measures_correlation, spearman
from cohort.stats.regression import deming, passing_bablok
from cohort.stats.regression_limits import regression_based_limits
from cohort.stats.results import NotEstimableWarning

B = 100
SEED = 31


def invented_paired(n_subjects=9, methods=("fast", "slow"), seed=4) -> pd.DataFrame:
    """Invented pairs in the data-contract layout; some segments missing (tests only)."""
    rng = np.random.default_rng(seed)
    frames = []
    groups = np.array(["control", "acute", "chronic"])
    for p, (mu, sd) in {"ff": (3.0, 1.0), "r2star": (30.0, 5.0), "field": (0.0, 8.0)}.items():
        truth = (
            mu + np.repeat(rng.normal(0, sd, n_subjects), 17) + rng.normal(0, sd, 17 * n_subjects)
        )
        reference = truth + rng.normal(0, 0.3 * sd, truth.size)
        for j, method in enumerate(methods):
            test = 0.2 * (j + 1) + 1.03 * truth + rng.normal(0, 0.5 * sd, truth.size)
            keep = rng.random(truth.size) > 0.1
            subject_index = np.repeat(np.arange(n_subjects), 17)[keep]
            segment = np.tile(np.arange(1, 18), n_subjects)[keep]
            frames.append(
                pd.DataFrame(
                    {
                        "parameter": p,
                        "method": method,
                        "reference": "ref",
                        "subject": [f"P{i:02d}" for i in subject_index],
                        "group": groups[subject_index % 3],
                        "field_strength": 1.5,
                        "segment": segment,
                        "segment_name": [SEGMENTS[s].name for s in segment],
                        "ring": [SEGMENTS[s].ring for s in segment],
                        "territory": [SEGMENTS[s].territory for s in segment],
                        "reference_value": reference[keep],
                        "test_value": test[keep],
                    }
                )
            )
    return pd.concat(frames, ignore_index=True)


@pytest.fixture(scope="module")
def paired():
    return invented_paired()


@pytest.fixture(scope="module")
def table(paired):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)  # apex: one pair per subject
        return agreement_table(paired, n_boot=B, seed=SEED)


def _row(table, parameter, method, stratum):
    row = table[
        (table["parameter"] == parameter)
        & (table["method"] == method)
        & (table["stratum"] == stratum)
    ]
    assert len(row) == 1
    return row.iloc[0]


def test_columns_are_the_documented_constant(table):
    assert list(table.columns) == list(AGREEMENT_COLUMNS)
    assert all(COLUMN_DESCRIPTIONS[c].strip() for c in AGREEMENT_COLUMNS)
    required = (
        "parameter method reference stratum n_subjects n_pairs bias bias_ci_low bias_ci_high "
        "loa_low loa_high loa_low_ci_low loa_low_ci_high loa_high_ci_low loa_high_ci_high ccc "
        "icc pearson_r spearman_rho rm_corr confidence_level ci_method n_boot seed note"
    ).split()
    assert set(required) <= set(AGREEMENT_COLUMNS)
    for stat in (
        "bias",
        "loa_low",
        "loa_high",
        "ccc",
        "icc",
        "pearson_r",
        "spearman_rho",
        "rm_corr",
        "prop_slope",
        "subject_mean_loa_low",
        "ratio_loa_high",
    ):
        for suffix in ("_ci_low", "_ci_high", "_analytic_ci_low", "_analytic_ci_high"):
            assert stat + suffix in AGREEMENT_COLUMNS
    for fit in ("pb", "deming"):
        for q in ("slope", "intercept"):
            assert {f"{fit}_{q}", f"{fit}_{q}_ci_low", f"{fit}_{q}_ci_high"} <= set(
                AGREEMENT_COLUMNS
            )


def test_one_row_per_parameter_method_and_stratum(paired, table):
    strata = [
        "all",
        "group=acute",
        "group=chronic",
        "group=control",
        "ring=basal",
        "ring=mid",
        "ring=apical",
        "ring=apex",
        "territory=LAD",
        "territory=RCA",
        "territory=LCx",
    ]
    assert len(table) == 3 * 2 * len(strata)
    assert list(table["parameter"].unique()) == ["ff", "r2star", "field"]
    assert (
        list(table.loc[table["parameter"].eq("ff") & table["method"].eq("fast"), "stratum"])
        == strata
    )
    counts = paired.groupby(["parameter", "method", "ring"]).agg(
        n_pairs=("subject", "size"), n_subjects=("subject", "nunique")
    )
    row = _row(table, "r2star", "slow", "ring=mid")
    assert row["n_pairs"] == counts.loc[("r2star", "slow", "mid"), "n_pairs"]
    assert row["n_subjects"] == counts.loc[("r2star", "slow", "mid"), "n_subjects"]
    assert (
        table["ci_method"] == f"subject cluster bootstrap, percentile, B={B}, seed={SEED}"
    ).all()
    assert (table["seed"] == SEED).all() and (table["n_boot"] == B).all()


@pytest.mark.parametrize(
    ("parameter", "method", "stratum", "column", "level"),
    [
        ("ff", "fast", "all", None, None),
        ("r2star", "slow", "group=acute", "group", "acute"),
        ("field", "fast", "territory=RCA", "territory", "RCA"),
    ],
)
def test_rows_equal_the_statistics_own_functions(
    paired, table, parameter, method, stratum, column, level
):
    # Same pairs, same seed: every row must equal what each function gives on its own.
    rows = paired[paired["parameter"].eq(parameter) & paired["method"].eq(method)]
    if column is not None:
        rows = rows[rows[column] == level]
    x, y, s = rows["reference_value"], rows["test_value"], rows["subject"]
    options = {"subject": s, "n_boot": B, "seed": SEED}
    row = _row(table, parameter, method, stratum)
    loa = limits_of_agreement(x, y, **options)
    expected = {
        "bias": loa.bias,
        "loa_low": loa.lower,
        "loa_high": loa.upper,
        "sd": loa.sd,
        "sd_within": loa.components[0],
    }
    means = subject_mean_limits(x, y, **options)
    expected.update({"subject_mean_loa_low": means.lower, "subject_mean_loa_high": means.upper})
    expected["prop_slope"] = proportional_bias(x, y, **options).slope
    expected["pearson_r"] = pearson(x, y, **options)
    expected["spearman_rho"] = spearman(x, y, **options)
    expected["rm_corr"] = repeated_measures_correlation(x, y, **options)
    expected["ccc"] = concordance_correlation(x, y, **options)
    expected["icc"] = icc_agreement(x, y, **options)
    if parameter == "r2star":
        ratio = limits_of_agreement(x, y, scale="ratio", **options)
        expected.update({"ratio_bias": ratio.bias, "ratio_loa_high": ratio.upper})
    for name, estimate in expected.items():
        # an Estimate or a single-quantity result: both have estimate, ci and analytic_ci
        assert row[name] == pytest.approx(estimate.estimate, rel=1e-12), name
        assert row[f"{name}_ci_low"] == pytest.approx(estimate.ci.low, rel=1e-12), name
        assert row[f"{name}_ci_high"] == pytest.approx(estimate.ci.high, rel=1e-12), name
        assert row[f"{name}_analytic_ci_low"] == pytest.approx(estimate.analytic_ci.low, rel=1e-12)
    pb = passing_bablok(x, y, **options)
    dm = deming(x, y, **options)
    assert row["pb_slope"] == pytest.approx(pb.slope.estimate, rel=1e-12)
    assert row["pb_slope_ci_high"] == pytest.approx(pb.slope.ci.high, rel=1e-12)
    assert row["deming_intercept_ci_low"] == pytest.approx(dm.intercept.ci.low, rel=1e-12)
    assert row["deming_ci_method"] == dm.slope.ci.method


def test_same_inputs_and_seed_give_an_identical_table(paired, table):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        again = agreement_table(paired, n_boot=B, seed=SEED)
    pd.testing.assert_frame_equal(table, again)


@pytest.mark.skipif(not can_fork(), reason="worker processes are forked on Linux only")
def test_worker_processes_give_the_serial_table_and_warnings(paired, table):
    # every row carries its own seed and inputs, so two forked workers must reproduce the
    # serial table exactly, and repeat the same not-estimable warnings in the same order
    with warnings.catch_warnings(record=True) as serial:
        warnings.simplefilter("always")
        agreement_table(paired, n_boot=B, seed=SEED)
    with warnings.catch_warnings(record=True) as forked:
        warnings.simplefilter("always")
        parallel = agreement_table(paired, n_boot=B, seed=SEED, workers=2)
    pd.testing.assert_frame_equal(parallel, table, check_exact=True)
    assert [str(w.message) for w in forked] == [str(w.message) for w in serial]
    assert any(issubclass(w.category, NotEstimableWarning) for w in forked)


def test_rows_above_pb_max_pairs_have_no_passing_bablok_fit_and_say_why(paired, table):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        capped = agreement_table(paired, n_boot=B, seed=SEED, pb_max_pairs=100)
    big = capped["n_pairs"] > 100
    assert big.any() and (~big).any()
    pb = [c for c in AGREEMENT_COLUMNS if c.startswith("pb_") and c != "pb_ci_method"]
    assert capped.loc[big, pb].isna().all().all()
    assert capped.loc[big, "note"].str.contains("Passing-Bablok not computed").all()
    assert not capped.loc[~big, "note"].str.contains("Passing-Bablok not computed").any()
    pd.testing.assert_frame_equal(capped.loc[~big], table.loc[~big])  # small rows unchanged
    kept = [c for c in AGREEMENT_COLUMNS if not c.startswith("pb_") and c != "note"]
    pd.testing.assert_frame_equal(capped[kept], table[kept])  # nothing else changes
    with pytest.raises(ValueError, match="pb_max_pairs must be a non-negative integer"):
        agreement_table(paired, n_boot=0, pb_max_pairs=-1)


def test_apex_rows_say_why_rm_corr_is_not_estimable(table):
    # Segment 17 is a single segment per subject: no within-subject df for rm_corr.
    row = _row(table, "ff", "fast", "ring=apex")
    assert math.isnan(row["rm_corr"])
    assert "fewer than 2 residual degrees of freedom" in row["note"]
    assert row["n_pairs"] == row["n_subjects"]
    assert math.isfinite(row["bias"])


def test_a_stratum_with_one_subject_is_a_row_saying_so(paired):
    one = paired[paired["subject"].isin(["P00", "P01", "P03"])]  # P01 alone in group acute
    with pytest.warns(
        NotEstimableWarning, match="group=acute: not estimable: fewer than 2 subjects"
    ):
        result = agreement_table(one, strata=("all", "group"), n_boot=50, seed=1)
    row = _row(result, "ff", "fast", "group=acute")
    assert row["n_subjects"] == 1
    assert row["note"].startswith("not estimable: fewer than 2 subjects (n=1)")
    statistics = [
        "bias",
        "loa_high_ci_low",
        "ccc",
        "icc",
        "pearson_r",
        "rm_corr",
        "pb_slope",
        "deming_slope",
        "subject_mean_loa_low",
        "prop_slope",
    ]
    assert row[statistics].isna().all()
    assert math.isfinite(_row(result, "ff", "fast", "all")["bias"])


def test_extra_strata_and_empty_strata(paired):
    mask = (paired["segment"] <= 6).to_numpy()
    nothing = np.zeros(len(paired), dtype=bool)
    with pytest.warns(NotEstimableWarning, match="no pairs in this stratum"):
        result = agreement_table(
            paired,
            strata=("all",),
            n_boot=30,
            seed=2,
            extra_strata={"finding=basal:positive": mask, "finding=none:positive": nothing},
        )
    row = _row(result, "ff", "slow", "finding=basal:positive")
    expected = paired[
        paired["parameter"].eq("ff") & paired["method"].eq("slow") & (paired["segment"] <= 6)
    ]
    assert row["n_pairs"] == len(expected)
    empty = _row(result, "ff", "slow", "finding=none:positive")
    assert empty["n_pairs"] == 0 and empty["note"].startswith("not estimable: no pairs")


def test_ratio_columns(paired, table):
    ff = _row(table, "ff", "fast", "all")
    assert math.isnan(ff["ratio_bias"]) and "not requested: ratio scale" in ff["note"]
    r2 = _row(table, "r2star", "fast", "all")
    assert math.isfinite(r2["ratio_loa_high"]) and "ratio scale" not in r2["note"]
    broken = paired.copy()
    first = broken.index[broken["parameter"].eq("r2star") & broken["method"].eq("fast")][0]
    broken.loc[first, "reference_value"] = 0.0
    with pytest.warns(
        NotEstimableWarning, match="r2star fast vs ref, all: .*1 of .* pairs have a value <= 0"
    ):
        result = agreement_table(broken, strata=("all",), n_boot=30, seed=2)
    row = _row(result, "r2star", "fast", "all")
    assert math.isnan(row["ratio_bias"]) and math.isfinite(row["bias"])


def test_regression_limits_on_request(paired):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        result = agreement_table(paired, strata=("all",), n_boot=40, seed=5, regression_limits=True)
    row = _row(result, "field", "slow", "all")
    rows = paired[paired["parameter"].eq("field") & paired["method"].eq("slow")]
    lines = regression_based_limits(
        rows["reference_value"], rows["test_value"], subject=rows["subject"]
    )
    assert row["bias_slope"] == pytest.approx(row["prop_slope"], rel=1e-10)
    assert row["loa_high_intercept"] == pytest.approx(lines.loa_high_intercept.estimate, rel=1e-10)
    assert "regression-based limits" not in row["note"]


def test_without_bootstrap_the_note_says_so(paired):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        result = agreement_table(paired, strata=("all",), n_boot=0)
    assert result["bias_ci_low"].isna().all() and result["bias_analytic_ci_low"].notna().all()
    assert result["note"].str.contains("bootstrap not requested (n_boot=0)", regex=False).all()


@pytest.mark.parametrize(
    ("options", "match"),
    [
        ({"strata": ("all", "segment")}, r"strata must be among .*got \['segment'\]"),
        ({"strata": "group"}, "strata must be a sequence of names, got the string 'group'"),
        ({"error_ratio": 0.0}, "error_ratio must be a positive finite number, got 0.0"),
        ({"regression_n_boot": -1}, "regression_n_boot must be a non-negative integer or None"),
        ({"ratio_parameters": "r2star"}, "ratio_parameters must be a sequence of parameter codes"),
        ({"extra_strata": {"x": [True]}}, r"extra_strata\['x'\] must be a boolean mask"),
        ({"extra_strata": {"group=acute": None}}, "extra_strata names must be new"),
        (
            {"n_boot": -5},
            r"n_boot must be 0 \(no bootstrap\) or an integer from 20 to 1000000, got -5",
        ),
    ],
)
def test_errors_name_the_argument(paired, options, match):
    with pytest.raises(ValueError, match=match):
        agreement_table(paired, **options)


def test_missing_columns_are_named(paired):
    with pytest.raises(ValueError, match=r"paired lacks the columns \['ring'\]"):
        agreement_table(paired.drop(columns="ring"), strata=("all", "ring"))
