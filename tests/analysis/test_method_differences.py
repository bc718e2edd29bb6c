"""Head-to-head differences between test methods: estimates equal the agreement table's and
findings_agreement's, the sign convention, coverage of a planted truth, the same resampled
subjects for both methods, the Holm family, n_boot = 0, baseline mode and bad input."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from cohort.analysis.agreement_table import agreement_table
from cohort.analysis.finding_agreement import findings_agreement
from cohort.analysis.findings import evaluate_findings
from cohort.analysis.method_differences import (
    BETTER,
    METHOD_DIFFERENCE_COLUMNS,
    bootstrap_p_value,
    method_differences,
)
from cohort.domain.segments import SEGMENTS
from cohort.domain.thresholds import FAT, HEMORRHAGE
from cohort.stats.agreement import limits_of_agreement
from cohort.stats.bootstrap import resample_subjects
from cohort.stats.concordance import concordance_correlation
from cohort.stats.results import NotEstimableWarning

REF = "ref"
SAME = "same subjects for both methods"
SCALE = {"ff": 1.0, "r2star": 2.0, "field": 2.0}
"""Noise and shift of a method in each parameter's unit, per unit of its specification."""


def simulated_values(
    n_subjects: int,
    methods: dict[str, tuple[float, float, float]],
    *,
    seed: int = 5,
    lesions: int = 3,
    parameters: tuple[str, ...] = ("ff", "r2star", "field"),
    reference_sd: float = 0.3,
    subject_sd: float = 0.2,
) -> pd.DataFrame:
    """Values of the reference and test methods (``name: (shift, sd, miss)``), 17 segments.

    Truth: fat fraction 2 % (fat lesions 15 %), R2* 25 1/s (hemorrhage 70 1/s, 1.5 T), field
    0 Hz, plus subject and segment variation. A test value is truth + shift + a subject
    offset (SD ``subject_sd``) + noise (SD ``sd``), each scaled by :data:`SCALE`; with
    probability ``miss`` a lesion reads as background (below the thresholds: FAT 10 %,
    HEMORRHAGE 50 1/s). The reference measures the truth with noise ``reference_sd``.
    """
    rng = np.random.default_rng(seed)
    segments = np.array(list(SEGMENTS))
    rows = []
    for i in range(n_subjects):
        subject = f"s{i:02d}"
        lesion = rng.choice(segments, size=lesions, replace=False)
        base = {"ff": 2.0 + rng.normal(0, 1), "r2star": 25 + rng.normal(0, 3), "field": 0.0}
        for parameter in parameters:
            scale = SCALE[parameter]
            truth = base[parameter] + rng.normal(0, scale, segments.size)
            is_lesion = np.isin(segments, lesion) & (parameter != "field")
            truth[is_lesion] = {"ff": 15.0, "r2star": 70.0, "field": 0.0}[parameter]
            background = base[parameter]
            observed = {REF: truth + rng.normal(0, reference_sd * scale, segments.size)}
            for name, (shift, sd, miss) in methods.items():
                value = truth + scale * (shift + rng.normal(0, subject_sd))
                value = value + rng.normal(0, sd * scale, segments.size)
                missed = is_lesion & (rng.random(segments.size) < miss)
                value[missed] = background
                observed[name] = value
            for name, value in observed.items():
                for seg, v in zip(segments, value, strict=True):
                    rows.append((subject, name, int(seg), parameter, float(v)))
    values = pd.DataFrame(rows, columns=["subject", "method", "segment", "parameter", "value"])
    values["group"] = "all"
    values["field_strength"] = 1.5
    values["segment_name"] = values["segment"].map(lambda s: SEGMENTS[s].name)
    values["ring"] = values["segment"].map(lambda s: SEGMENTS[s].ring)
    values["territory"] = values["segment"].map(lambda s: SEGMENTS[s].territory)
    return values


def paired_of(values: pd.DataFrame) -> pd.DataFrame:
    """``Study.paired`` from values: every test value beside the reference value."""
    ref = values[values["method"].eq(REF)]
    test = values[~values["method"].eq(REF)]
    keys = ["subject", "segment", "parameter"]
    paired = test.merge(ref[[*keys, "value"]], on=keys, suffixes=("", "_ref"))
    paired = paired.rename(columns={"value": "test_value", "value_ref": "reference_value"})
    paired["reference"] = REF
    return paired


def findings_of(values: pd.DataFrame):
    subjects = pd.DataFrame({"subject": sorted(values["subject"].unique())})
    return evaluate_findings(values, subjects, (HEMORRHAGE, FAT))


def run(values: pd.DataFrame, methods, **options) -> pd.DataFrame:
    options = {"n_boot": 200, "seed": 3, **options}
    return method_differences(
        paired_of(values), findings_of(values).segments, REF, methods, **options
    )


def row(table: pd.DataFrame, a: str, b: str, target: str, statistic: str) -> pd.Series:
    hit = table[
        table["method_a"].eq(a)
        & table["method_b"].eq(b)
        & table["target"].eq(target)
        & table["statistic"].eq(statistic)
    ]
    assert len(hit) == 1
    return hit.iloc[0]


# --- estimates equal those of the agreement table and findings_agreement ----------------------


@pytest.fixture(scope="module")
def gappy():
    """Three methods, 8 subjects; b lacks segment 17 of s01 (ff), c lacks subject s02 (r2star)
    and has no field values at all."""
    values = simulated_values(8, {"a": (0.2, 0.5, 0.0), "b": (1.0, 1.0, 0.3), "c": (0, 2, 0.6)})
    drop = (
        (values["method"].eq("b") & values["subject"].eq("s01") & values["segment"].eq(17))
        & values["parameter"].eq("ff")
    ) | (values["method"].eq("c") & values["subject"].eq("s02") & values["parameter"].eq("r2star"))
    drop |= values["method"].eq("c") & values["parameter"].eq("field")
    return values[~drop].reset_index(drop=True)


def test_parameter_estimates_equal_the_agreement_table(gappy):
    # the agreement table's own rows (stratum all) are the reference values
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        table = run(gappy, ["a", "b", "c"], n_boot=0)
        agreement = agreement_table(paired_of(gappy), strata=("all",), n_boot=0)
    agreement = agreement.set_index(["parameter", "method"])
    checked = 0
    for r in table[table["kind"].eq("parameter")].itertuples():
        for side, method in (("estimate_a", r.method_a), ("estimate_b", r.method_b)):
            if (r.target, method) not in agreement.index:
                assert math.isnan(getattr(r, side))  # c has no field pairs
                continue
            ref = agreement.loc[(r.target, method)]
            expected = {
                "abs_bias": abs(ref["bias"]),
                "loa_width": ref["loa_high"] - ref["loa_low"],
                "ccc": ref["ccc"],
            }[r.statistic]
            assert getattr(r, side) == pytest.approx(expected, rel=1e-12, abs=1e-12)
            checked += 1
        assert r.difference == pytest.approx(r.estimate_a - r.estimate_b, nan_ok=True)
    # ff, r2star: 3 pairs x 3 statistics x 2 methods; field: both of (a, b), one of the others
    assert checked == 2 * 3 * 3 * 2 + 3 * 2 + 3 + 3


def test_a_method_without_pairs_gives_nan_rows_with_a_note(gappy):
    with pytest.warns(NotEstimableWarning, match="not estimable"):
        table = run(gappy, ["a", "b", "c"], n_boot=20)
    r = row(table, "a", "c", "field", "ccc")
    assert math.isnan(r["difference"]) and math.isnan(r["ci_low"]) and math.isnan(r["p_value"])
    assert math.isnan(r["estimate_b"]) and r["estimate_a"] > 0.5
    assert "c: not estimable: no pairs" in r["note"]
    assert math.isnan(r["p_adjusted"])
    # the pair with pairs of both methods is estimated
    estimated = row(table, "a", "b", "field", "ccc")
    assert math.isfinite(estimated["difference"]) and math.isfinite(estimated["ci_low"])


def test_finding_estimates_equal_findings_agreement(gappy):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        table = run(gappy, ["a", "b", "c"], n_boot=0)
        fa = findings_agreement(findings_of(gappy), REF, levels=("segment",), n_boot=0).table
    fa = fa[fa["stratum"].eq("all")].set_index(["finding", "method"])
    # hemorrhage (R2*): a and b classified every segment, so their proportions are those of
    # findings_agreement (tp / (tp + fn) and tn / (tn + fp))
    for statistic in ("sensitivity", "specificity"):
        r = row(table, "a", "b", "hemorrhage", statistic)
        assert r["estimate_a"] == pytest.approx(fa.loc[("hemorrhage", "a"), statistic])
        assert r["estimate_b"] == pytest.approx(fa.loc[("hemorrhage", "b"), statistic])
        assert r["difference"] == pytest.approx(r["estimate_a"] - r["estimate_b"])
        assert "left out" not in r["note"]
    # c lacks s02's R2*: 17 segments of s02 are left out of the pairs with c, and said so
    assert (
        "17 segment(s) classified by only one"
        in row(table, "a", "c", "hemorrhage", "sensitivity")["note"]
    )
    # b lacks one fat-fraction segment
    assert (
        "1 segment(s) classified by only one" in row(table, "a", "b", "fat", "specificity")["note"]
    )


# --- sign convention, coverage and the same resampled subjects ---------------------------------


@pytest.fixture(scope="module")
def planted():
    """48 subjects: a is close to the reference and finds every lesion; b is biased (-2),
    noisy (SD 1.5) and misses half the lesions (truth: sensitivity difference 0.5)."""
    methods = {"a": (0.0, 0.3, 0.0), "b": (-2.0, 1.5, 0.5)}
    values = simulated_values(48, methods, seed=7, subject_sd=0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        forward = run(values, ["a", "b"], n_boot=2000, seed=11)
        backward = run(values, ["b", "a"], n_boot=2000, seed=11)
    return values, forward, backward


def test_difference_is_a_minus_b_and_favours_the_better_method(planted):
    _, table, _ = planted
    assert tuple(table.columns) == METHOD_DIFFERENCE_COLUMNS
    assert set(table["method_a"]) == {"a"} and set(table["method_b"]) == {"b"}
    for r in table.itertuples():
        assert r.difference == pytest.approx(r.estimate_a - r.estimate_b)
        assert r.better == BETTER[r.statistic]
    for target in ("ff", "r2star", "field"):
        assert row(table, "a", "b", target, "abs_bias")["ci_high"] < 0
        assert row(table, "a", "b", target, "loa_width")["ci_high"] < 0
        assert row(table, "a", "b", target, "ccc")["ci_low"] > 0
    for target in ("hemorrhage", "fat"):
        r = row(table, "a", "b", target, "sensitivity")
        assert r["ci_low"] > 0 and r["p_value"] < 0.001 and r["mcnemar_p"] < 0.001
        assert r["estimate_a"] == 1.0


def test_swapping_the_pair_negates_differences_and_mirrors_intervals(planted):
    _, forward, backward = planted
    f = forward.set_index(["target", "statistic"])
    b = backward.set_index(["target", "statistic"]).loc[f.index]
    assert np.allclose(f["difference"], -b["difference"], atol=1e-12)
    assert np.allclose(f["ci_low"], -b["ci_high"], atol=1e-9)
    assert np.allclose(f["ci_high"], -b["ci_low"], atol=1e-9)
    assert np.allclose(f["p_value"], b["p_value"], equal_nan=True)


def test_intervals_cover_the_planted_truth(planted):
    _, table, _ = planted
    # planted (field, which has no lesions): bias 0 against -2 (x SCALE), SD of the
    # differences sqrt(sd_test^2 + 0.3^2) x SCALE; sensitivity 1 against 0.5 (half the
    # lesions read as background)
    for target, scale in (("field", SCALE["field"]),):
        truths = {
            "abs_bias": (0.0 - 2.0) * scale,
            "loa_width": 2 * 1.96 * scale * (math.hypot(0.3, 0.3) - math.hypot(1.5, 0.3)),
        }
        for statistic, truth in truths.items():
            r = row(table, "a", "b", target, statistic)
            assert r["ci_low"] < truth < r["ci_high"], (target, statistic)
    for target in ("hemorrhage", "fat"):
        r = row(table, "a", "b", target, "sensitivity")
        assert r["ci_low"] < 0.5 < r["ci_high"]


@pytest.mark.parametrize("seed", [4, None])
def test_identical_methods_differ_by_exactly_zero(seed):
    # a copy of method a under another name: every resample sees the same subjects for both
    # (also without a seed), so every resampled difference is 0 and the interval is [0, 0]
    values = simulated_values(12, {"a": (0.5, 1.0, 0.4)}, seed=2)
    twin = values[values["method"].eq("a")].assign(method="twin")
    values = pd.concat([values, twin], ignore_index=True)
    table = run(values, ["a", "twin"], n_boot=500, seed=seed)
    drawn = "not reproducible" if seed is None else f"seed={seed}"
    method = f"subject cluster bootstrap, percentile, B=500, {drawn}, {SAME}"
    assert table["ci_method"].eq(method).all()
    assert (table["difference"] == 0).all()
    assert (table["ci_low"] == 0).all() and (table["ci_high"] == 0).all()
    parameters = table[table["kind"].eq("parameter")]
    assert (parameters["p_value"] == 1.0).all()
    findings = table[table["kind"].eq("finding")]
    assert (findings["mcnemar_p"] == 1.0).all()  # no discordant segments
    assert findings["p_value"].isna().all()
    assert findings["note"].str.contains("zero variance of the difference").all()


def test_intervals_equal_a_direct_computation_on_the_same_resampled_subjects():
    # Field & Welsh 2007 cluster bootstrap done by hand: draw subjects with
    # resample_subjects (the documented draws), copy each drawn subject's pairs under a new
    # label, compute each method's statistic with the public functions, take the difference
    values = simulated_values(6, {"a": (0.3, 0.5, 0.3), "b": (1.0, 1.0, 0.6)}, seed=4)
    values = values[values["parameter"].isin(["ff", "r2star"])]
    n_boot, seed = 20, 9
    table = run(values, ["a", "b"], n_boot=n_boot, seed=seed)
    paired = paired_of(values)
    subjects = np.array(sorted(paired["subject"].unique()))
    units = findings_of(values).segments
    units = units[units["finding"].eq("hemorrhage")].astype({"subject": str, "method": str})
    wide = units.set_index(["subject", "segment", "method"])["positive"].unstack("method")
    direct: dict[tuple[str, str], list[float]] = {}
    for drawn in resample_subjects(subjects.size, n_boot, seed):
        parts = [
            paired[paired["subject"].eq(subjects[j])].assign(copy=f"{n}")
            for n, j in enumerate(drawn)
        ]
        sample = pd.concat(parts)
        for target in ("ff", "r2star"):
            stats = {}
            for method in ("a", "b"):
                part = sample[sample["parameter"].eq(target) & sample["method"].eq(method)]
                x, y = part["reference_value"], part["test_value"]
                s = part["copy"]
                loa = limits_of_agreement(x, y, subject=s, n_boot=0)
                ccc = concordance_correlation(x, y, subject=s, n_boot=0)
                stats[method] = {
                    "abs_bias": abs(loa.bias.estimate),
                    "loa_width": loa.upper.estimate - loa.lower.estimate,
                    "ccc": ccc.estimate,
                }
            for statistic in ("abs_bias", "loa_width", "ccc"):
                value = stats["a"][statistic] - stats["b"][statistic]
                direct.setdefault((target, statistic), []).append(value)
        rows = pd.concat([wide.loc[subjects[j]] for j in drawn])
        positive = rows[rows[REF].astype(bool)]
        sens = positive["a"].astype(bool).mean() - positive["b"].astype(bool).mean()
        direct.setdefault(("hemorrhage", "sensitivity"), []).append(sens)
    for (target, statistic), draws in direct.items():
        r = row(table, "a", "b", target, statistic)
        low, high = np.quantile(np.array(draws), [0.025, 0.975])
        assert (r["ci_low"], r["ci_high"]) == pytest.approx((low, high), rel=1e-9, abs=1e-12)
        if statistic != "sensitivity":
            assert r["p_value"] == pytest.approx(
                bootstrap_p_value(r["difference"], np.array(draws))
            )


# --- p-values and their correction --------------------------------------------------------------


def test_p_adjusted_is_holm_over_every_finite_p_value(planted):
    _, table, _ = planted
    p = table["p_value"].to_numpy()
    finite = np.isfinite(p)
    # statsmodels.stats.multitest.multipletests, method="holm" (not its Holm-Sidak default)
    expected = multipletests(p[finite], method="holm")[1]
    assert np.allclose(table["p_adjusted"].to_numpy()[finite], expected, atol=1e-12)
    assert table["p_adjusted"][~finite].isna().all()
    assert (table["correction"] == "holm").all()
    assert (
        table["family"].iloc[0] == f"every row of this table with a p-value ({finite.sum()} tests)"
    )
    parameters = table[table["kind"].eq("parameter")]
    assert parameters["p_method"].str.contains("bootstrap").all()
    assert parameters["mcnemar_p"].isna().all()
    findings = table[table["kind"].eq("finding")]
    assert findings["p_method"].str.contains("Obuchowski").all()


def test_other_corrections_follow_adjust_p(planted):
    values, table, _ = planted
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        bh = run(values, ["a", "b"], n_boot=2000, seed=11, correction="fdr_bh")
    p = table["p_value"].to_numpy()
    finite = np.isfinite(p)
    expected = multipletests(p[finite], method="fdr_bh")[1]
    assert np.allclose(bh["p_adjusted"].to_numpy()[finite], expected, atol=1e-12)
    assert (bh["correction"] == "benjamini-hochberg").all()


def test_bootstrap_p_value_is_a_wald_test_with_the_bootstrap_standard_error():
    # Efron & Tibshirani 1993 (memory): z = d / se_boot; hand computation with scipy.stats.norm
    draws = np.array([-0.5, 0.2, 0.4, 0.9, 1.3, np.nan])
    se = np.std(draws[:5], ddof=1)
    assert bootstrap_p_value(0.6, draws) == pytest.approx(2 * stats.norm.sf(0.6 / se))
    assert bootstrap_p_value(0.0, np.zeros(9)) == 1.0
    assert bootstrap_p_value(0.2, np.zeros(9)) == 0.0
    assert np.isnan(bootstrap_p_value(0.3, np.full(3, np.nan)))
    # no floor at 2 / (B + 1): a difference far from 0 gets a p-value far below it
    wide = np.random.default_rng(1).normal(5.0, 1.0, 200)
    assert bootstrap_p_value(5.0, wide) < 1e-5 < 2 / 201


# --- n_boot = 0, baseline mode, not estimable and bad input --------------------------------------


def test_no_bootstrap_gives_nan_intervals_with_notes():
    values = simulated_values(6, {"a": (0.0, 0.5, 0.0), "b": (1.0, 1.0, 0.5)}, seed=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        table = run(values, ["a", "b"], n_boot=0)
    assert table["ci_low"].isna().all() and table["ci_high"].isna().all()
    assert table["note"].str.contains("no bootstrap requested (n_boot=0)", regex=False).all()
    parameters = table[table["kind"].eq("parameter")]
    assert parameters["p_value"].isna().all()
    assert parameters["note"].str.contains("bootstrap test not computed").all()
    assert np.isfinite(parameters["difference"]).all()
    assert table["ci_method"].str.contains("B=0").all()
    # the clustered test of the proportions needs no bootstrap
    assert np.isfinite(row(table, "a", "b", "hemorrhage", "sensitivity")["p_value"])


def test_baseline_compares_every_other_method_with_it():
    values = simulated_values(6, {"a": (0, 0.5, 0), "b": (1, 1, 0.5), "c": (2, 1, 0)}, seed=8)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        table = run(values, ["a", "b", "c"], baseline="b", n_boot=20)
        every = run(values, ["a", "b", "c"], n_boot=20)
    assert set(zip(table["method_a"], table["method_b"], strict=True)) == {("a", "b"), ("c", "b")}
    assert set(zip(every["method_a"], every["method_b"], strict=True)) == {
        ("a", "b"),
        ("a", "c"),
        ("b", "c"),
    }
    per_pair = 3 * 3 + 2 * 2  # 3 parameters x 3 statistics, 2 findings x 2 statistics
    assert len(table) == 2 * per_pair and len(every) == 3 * per_pair
    merged = table.merge(every, on=["method_a", "method_b", "target", "statistic"])
    assert np.allclose(merged["difference_x"], merged["difference_y"], equal_nan=True)
    assert np.allclose(merged["ci_low_x"], merged["ci_low_y"], equal_nan=True)


def test_a_finding_without_reference_positives_is_a_row_with_a_note():
    values = simulated_values(6, {"a": (0, 0.5, 0), "b": (1, 1, 0.5)}, seed=8, lesions=0)
    with pytest.warns(NotEstimableWarning, match="sensitivity of fat"):
        table = run(values, ["a", "b"], n_boot=20)
    r = row(table, "a", "b", "fat", "sensitivity")
    assert math.isnan(r["difference"]) and math.isnan(r["p_value"]) and math.isnan(r["ci_low"])
    assert "no reference-positive segments" in r["note"]
    assert np.isfinite(row(table, "a", "b", "fat", "specificity")["estimate_a"])


def test_fewer_than_two_test_methods_give_an_empty_table():
    values = simulated_values(4, {"a": (0, 0.5, 0)}, seed=1)
    table = run(values, ["a"])
    assert table.empty and tuple(table.columns) == METHOD_DIFFERENCE_COLUMNS
    assert run(values, ["a"], baseline="a").empty


@pytest.mark.parametrize(
    ("options", "match"),
    [
        ({"methods": ["a", "b"], "baseline": "z"}, r"baseline must be one of methods .* got 'z'"),
        ({"methods": ["a", "ref"]}, "methods must be test methods, not the reference 'ref'"),
        ({"methods": ["a", "a"]}, r"methods must name each test method once, got \['a'\]"),
        (
            {"methods": ["a", "nope"]},
            r"methods must have pairs or classified segments, got \['nope'\]",
        ),
        ({"methods": "ab"}, "methods must be a sequence of method names"),
        ({"methods": ["a", "b"], "correction": "sidak"}, "correction must be one of"),
        ({"methods": ["a", "b"], "n_boot": 5}, "n_boot must be 0 .* got 5"),
        ({"methods": ["a", "b"], "confidence_level": 95}, "confidence_level must be between"),
    ],
)
def test_bad_input_is_refused_with_the_rule_and_the_value(options, match):
    values = simulated_values(4, {"a": (0, 0.5, 0), "b": (1, 1, 0)}, seed=1)
    methods = options.pop("methods")
    with pytest.raises(ValueError, match=match):
        method_differences(paired_of(values), None, REF, methods, **options)


def test_bad_tables_are_refused():
    values = simulated_values(4, {"a": (0, 0.5, 0), "b": (1, 1, 0)}, seed=1)
    paired = paired_of(values)
    with pytest.raises(ValueError, match="paired must be a pandas DataFrame, got dict"):
        method_differences({}, None, REF, ["a", "b"])
    with pytest.raises(ValueError, match=r"paired lacks the columns \['test_value'\]"):
        method_differences(paired.drop(columns="test_value"), None, REF, ["a", "b"])
    with pytest.raises(ValueError, match=r"paired must hold pairs with reference 'other'"):
        method_differences(paired, None, "other", ["a", "b"])
    findings = findings_of(values).segments
    doubled = pd.concat([findings, findings.iloc[:1]])
    with pytest.raises(ValueError, match="one row per finding, method, subject and segment"):
        method_differences(paired, doubled, REF, ["a", "b"], n_boot=0)
