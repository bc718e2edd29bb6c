"""Finding-level agreement: 2x2 statistics against published values and statsmodels, the
cluster bootstrap against a direct per-resample computation, and a simulated cohort with
planted lesions that the test method misses."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.contingency_tables import mcnemar
from statsmodels.stats.inter_rater import cohens_kappa
from statsmodels.stats.proportion import proportion_confint

from cohort.analysis.detection import (
    FINDINGS_AGREEMENT_COLUMNS,
    MISSED_COLUMNS,
    DeceptiveAgreementWarning,
    cohen_kappa,
    deceptive_agreement,
    diagnostic_accuracy,
    finding_strata,
    findings_agreement,
    mcnemar_test,
    missed_findings,
    wilson_interval,
)
from cohort.analysis.findings import evaluate_findings
from cohort.demo import write_demo
from cohort.domain.segments import SEGMENTS
from cohort.domain.thresholds import HEMORRHAGE, FindingDefinition
from cohort.io.study import load_study
from cohort.stats.bootstrap import resample_subjects
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
    ci = wilson_interval(x, n)
    assert ci.low == pytest.approx(low, abs=5e-5)
    assert ci.high == pytest.approx(high, abs=5e-5)
    assert "Wilson" in ci.method and "Newcombe 1998" in ci.method


@pytest.mark.parametrize(("x", "n"), [(0, 1), (3, 7), (7, 7), (50, 1000), (999, 1000)])
@pytest.mark.parametrize("level", [0.90, 0.95, 0.99])
def test_wilson_matches_statsmodels(x, n, level):
    # statsmodels.stats.proportion.proportion_confint(method="wilson")
    low, high = proportion_confint(x, n, alpha=1 - level, method="wilson")
    ci = wilson_interval(x, n, level)
    assert (ci.low, ci.high) == pytest.approx((low, high), abs=1e-12)
    assert ci.level == level


def test_wilson_input_checks_and_empty():
    with pytest.raises(ValueError, match="successes must be between 0 and n"):
        wilson_interval(5, 3)
    assert not wilson_interval(0, 0).estimable


# --- kappa and McNemar ---------------------------------------------------------------------


def test_kappa_matches_cohen_1960_and_statsmodels():
    # Cohen 1960 example (memory, DOMAIN.md): proportions x 200, kappa 0.4915 (published .49)
    table = [[88, 14, 18], [10, 40, 10], [2, 6, 12]]
    k = cohen_kappa(table)
    assert k.kappa == pytest.approx(0.4915, abs=5e-5)
    ref = cohens_kappa(table)  # statsmodels.stats.inter_rater.cohens_kappa
    assert k.kappa == pytest.approx(ref.kappa, rel=1e-12)
    assert k.se == pytest.approx(ref.std_kappa, rel=1e-12)  # Fleiss, Cohen & Everitt 1969
    assert (k.ci.low, k.ci.high) == pytest.approx((ref.kappa_low, ref.kappa_upp), rel=1e-12)
    assert k.observed_agreement == pytest.approx(0.70)  # (88 + 40 + 12) / 200
    assert k.chance_agreement == pytest.approx(0.41)


@pytest.mark.parametrize("table", [[[4, 3], [2, 126]], [[20, 5], [10, 15]], [[1, 0], [0, 9]]])
def test_kappa_2x2_matches_statsmodels(table):
    k = cohen_kappa(table)
    ref = cohens_kappa(table)
    assert (k.kappa, k.se) == pytest.approx((ref.kappa, ref.std_kappa), rel=1e-10, abs=1e-12)


def test_kappa_not_estimable_when_chance_agreement_is_one():
    with pytest.warns(NotEstimableWarning, match="chance agreement is 1"):
        k = cohen_kappa([[0, 0], [0, 30]])
    assert math.isnan(k.kappa) and not k.ci.estimable and "not estimable" in k.note
    with pytest.raises(ValueError, match="square k x k"):
        cohen_kappa([[1, 2, 3]])


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


def test_diagnostic_accuracy_of_a_table_and_not_estimable_parts():
    acc = diagnostic_accuracy(tp=4, fp=2, fn=3, tn=126)
    assert acc.sensitivity.value == pytest.approx(4 / 7)
    assert acc.specificity.value == pytest.approx(126 / 128)
    assert acc.ppv.value == pytest.approx(4 / 6) and acc.npv.value == pytest.approx(126 / 129)
    low, high = proportion_confint(4, 7, method="wilson")
    assert (acc.sensitivity.ci.low, acc.sensitivity.ci.high) == pytest.approx((low, high))
    assert acc.mcnemar.p_value == pytest.approx(mcnemar([[4, 3], [2, 126]]).pvalue)
    assert len(acc.to_frame()) == 5
    with pytest.warns(NotEstimableWarning, match="sensitivity not estimable: no reference-pos"):
        empty = diagnostic_accuracy(tp=0, fp=1, fn=0, tn=9)
    assert math.isnan(empty.sensitivity.value) and "no reference-positive" in empty.sensitivity.note
    with pytest.raises(ValueError, match="tp must be a non-negative integer"):
        diagnostic_accuracy(-1, 0, 0, 0)


# --- a simulated cohort with planted lesions ------------------------------------------------

SUBJECTS = [f"s{i:02d}" for i in range(1, 9)]
GROUP = {s: ("acute" if i < 4 else "control") for i, s in enumerate(SUBJECTS)}
FIELD = {s: (3.0 if s in ("s03", "s07") else 1.5) for s in SUBJECTS}

# (subject, segment): (reference R2*, test R2*) in 1/s; thresholds 50 at 1.5 T and 79 at 3 T
# (common practice; 3 T derived with Storey et al. 2007)
DETECTED = {
    ("s01", 3): (80, 75),
    ("s01", 4): (82, 70),
    ("s02", 9): (90, 88),
    ("s03", 10): (100, 90),
}
MISSED = {("s01", 5): (60, 45), ("s04", 15): (55, 48), ("s03", 16): (85, 75)}
EXTRA = {("s06", 7): (30, 55), ("s02", 1): (40, 52)}
UNPAIRED = ("s02", 12)  # reference positive (90 1/s), no test value: neither missed nor counted


def planted_values(seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for s in SUBJECTS:
        for seg, info in SEGMENTS.items():
            ref = 25.0 + rng.normal(0, 2)
            test = ref + rng.normal(0, 1)
            for planted in (DETECTED, MISSED, EXTRA):
                if (s, seg) in planted:
                    ref, test = planted[(s, seg)]
            if (s, seg) == UNPAIRED:
                ref = 90.0
            for method, value in (("ref", ref), ("fast", test)):
                if method == "fast" and (s, seg) == UNPAIRED:
                    continue
                rows.append(
                    {
                        "subject": s,
                        "method": method,
                        "segment": seg,
                        "parameter": "r2star",
                        "value": float(value),
                        "group": GROUP[s],
                        "field_strength": FIELD[s],
                        "segment_name": info.name,
                        "ring": info.ring,
                        "territory": info.territory,
                    }
                )
    return pd.DataFrame(rows)


def planted_subjects() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "subject": SUBJECTS,
            "group": [GROUP[s] for s in SUBJECTS],
            "field_strength": [FIELD[s] for s in SUBJECTS],
            "culprit_territory": ["RCA", "RCA", "RCA", "RCA", "", "", "", ""],
        }
    )


def planted_paired(values: pd.DataFrame) -> pd.DataFrame:
    ref = values[values["method"].eq("ref")].drop(columns="method")
    test = values[values["method"].eq("fast")][["subject", "segment", "parameter", "value"]]
    paired = test.merge(ref, on=["subject", "segment", "parameter"], suffixes=("", "_ref"))
    paired = paired.rename(columns={"value": "test_value", "value_ref": "reference_value"})
    paired["method"], paired["reference"] = "fast", "ref"
    return paired


@pytest.fixture(scope="module")
def planted():
    values = planted_values()
    return values, evaluate_findings(values, planted_subjects(), (HEMORRHAGE,))


def _keys(frame: pd.DataFrame, *columns: str) -> set:
    return set(frame[list(columns)].itertuples(index=False, name=None))


def test_missed_findings_lists_exactly_the_planted_misses_and_extras(planted):
    _, res = planted
    table = missed_findings(res, "ref")
    assert tuple(table.columns) == MISSED_COLUMNS
    seg = table[table["level"].eq("segment")]
    assert _keys(seg[seg["kind"].eq("missed")], "subject", "segment") == set(MISSED)
    assert _keys(seg[seg["kind"].eq("extra")], "subject", "segment") == set(EXTRA)
    row = seg.set_index(["subject", "segment"]).loc[("s03", 16)]
    assert (row["reference_value"], row["test_value"]) == (85.0, 75.0)
    assert row["reference_threshold"] == pytest.approx(79.0)  # 3 T, Storey 2007
    assert row["segment_name"] == "apical lateral" and row["group"] == "acute"
    subj = table[table["level"].eq("subject")]
    assert _keys(subj, "kind", "subject") == {("missed", "s04"), ("extra", "s06")}
    assert subj.set_index("subject").loc["s04", "reference_value"] == 55.0
    terr = table[table["level"].eq("territory")]
    assert _keys(terr, "kind", "subject", "territory") == {
        ("missed", "s01", "LCx"),
        ("missed", "s03", "LCx"),
        ("missed", "s04", "RCA"),
        ("extra", "s02", "LAD"),
        ("extra", "s06", "LAD"),
    }


def test_agreement_counts_follow_the_planted_design(planted):
    _, res = planted
    with pytest.warns(NotEstimableWarning):  # control stratum: no reference positives
        table = findings_agreement(res, "ref", n_boot=200, seed=3).table
    assert tuple(table.columns) == FINDINGS_AGREEMENT_COLUMNS
    rows = table.set_index(["level", "stratum"])
    paired_segments = 8 * 17 - 1
    seg = rows.loc[("segment", "all")]
    tp, fn, fp = len(DETECTED), len(MISSED), len(EXTRA)
    assert (seg["tp"], seg["fn"], seg["fp"]) == (tp, fn, fp)
    assert seg["tn"] == paired_segments - tp - fn - fp and seg["n_units"] == paired_segments
    assert seg["sensitivity"] == pytest.approx(4 / 7)
    low, high = proportion_confint(4, 7, method="wilson")
    assert (seg["sensitivity_ci_low"], seg["sensitivity_ci_high"]) == pytest.approx((low, high))
    k = cohens_kappa([[tp, fn], [fp, seg["tn"]]])
    assert seg["kappa"] == pytest.approx(k.kappa) and seg["kappa_se"] == pytest.approx(k.std_kappa)
    assert seg["mcnemar_p"] == pytest.approx(mcnemar([[tp, fn], [fp, 0]], exact=True).pvalue)
    assert seg["n_subjects"] == 8
    acute, control = rows.loc[("segment", "group=acute")], rows.loc[("segment", "group=control")]
    assert (acute["tp"], acute["fn"], acute["fp"]) == (4, 3, 1)
    assert (control["tp"], control["fn"], control["fp"], control["tn"]) == (0, 0, 1, 67)
    assert math.isnan(control["sensitivity"]) and "no reference-positive" in control["note"]
    for c in ("tp", "fp", "fn", "tn"):
        assert acute[c] + control[c] == seg[c]
    subj = rows.loc[("subject", "all")]
    assert (subj["tp"], subj["fn"], subj["fp"], subj["tn"]) == (3, 1, 1, 3)
    assert math.isnan(subj["sensitivity_cluster_ci_low"])
    assert subj["cluster_ci_method"].startswith("not applicable")
    assert rows.loc[("territory", "all"), "fn"] == 3


def test_cluster_bootstrap_equals_a_direct_per_resample_computation(planted):
    _, res = planted
    n_boot, seed = 300, 17
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        table = findings_agreement(res, "ref", levels=("segment",), n_boot=n_boot, seed=seed).table
        again = findings_agreement(res, "ref", levels=("segment",), n_boot=n_boot, seed=seed).table
        other = findings_agreement(res, "ref", levels=("segment",), n_boot=n_boot, seed=seed + 1)
    pd.testing.assert_frame_equal(table, again)  # reproducible with a seed
    row = table.set_index("stratum").loc["all"]
    assert (
        row["cluster_ci_method"]
        == f"subject cluster bootstrap, percentile, B={n_boot}, seed={seed}"
    )
    assert (
        other.table.set_index("stratum").loc["all", "sensitivity_cluster_ci_low"]
        != row["sensitivity_cluster_ci_low"]
        or other.table.set_index("stratum").loc["all", "kappa_cluster_ci_low"]
        != row["kappa_cluster_ci_low"]
    )
    # straightforward: rebuild each resample's segments from the same drawn subjects
    seg = res.segments
    ref = seg[seg["method"].eq("ref")].set_index(["subject", "segment"])["positive"]
    test = seg[seg["method"].eq("fast")].set_index(["subject", "segment"])["positive"]
    both = pd.concat({"r": ref, "t": test}, axis=1, join="inner").astype(bool).reset_index()
    labels = np.unique(both["subject"])
    per_subject = {s: both[both["subject"].eq(s)] for s in labels}
    sens, kappa = [], []
    for drawn in resample_subjects(len(labels), n_boot, seed):
        sample = pd.concat([per_subject[labels[i]] for i in drawn])
        r, t = sample["r"].to_numpy(), sample["t"].to_numpy()
        tp, fn = np.sum(r & t), np.sum(r & ~t)
        fp, tn = np.sum(~r & t), np.sum(~r & ~t)
        sens.append(tp / (tp + fn) if tp + fn else np.nan)
        n = tp + fp + fn + tn
        po, pe = (tp + tn) / n, ((tp + fn) * (tp + fp) + (fp + tn) * (fn + tn)) / n**2
        kappa.append((po - pe) / (1 - pe) if pe < 1 else np.nan)
    for name, draws in (("sensitivity", sens), ("kappa", kappa)):
        draws = np.asarray(draws)
        expected = np.quantile(draws[np.isfinite(draws)], [0.025, 0.975])
        got = (row[f"{name}_cluster_ci_low"], row[f"{name}_cluster_ci_high"])
        assert got == pytest.approx(tuple(expected), rel=1e-12)


def test_unclassified_units_are_counted_not_compared():
    values = planted_values()
    one = FindingDefinition("one", "r2star", kind="remote", k=2.0, remote_segments=(1,))
    with pytest.warns(NotEstimableWarning):
        res = evaluate_findings(values, planted_subjects(), (one,))
        table = findings_agreement(res, "ref", levels=("segment", "subject"), n_boot=10).table
    seg = table.set_index(["level", "stratum"]).loc[("segment", "all")]
    assert seg["n_units"] == 0 and seg["n_unclassified"] == 8 * 17 - 1
    assert "not classified by both methods" in seg["note"]
    assert table.set_index(["level", "stratum"]).loc[("subject", "all"), "n_unclassified"] == 8


def test_one_subject_has_no_cluster_interval():
    values = planted_values()
    values = values[values["subject"].eq("s01")]
    res = evaluate_findings(values, planted_subjects(), (HEMORRHAGE,))
    with pytest.warns(NotEstimableWarning, match="cluster interval not estimable: fewer than 2"):
        table = findings_agreement(res, "ref", levels=("segment",), n_boot=50).table
    row = table.set_index("stratum").loc["all"]
    assert row["sensitivity"] == pytest.approx(2 / 3)  # s01: segments 3, 4 found, 5 missed
    assert math.isnan(row["sensitivity_cluster_ci_low"])
    assert "sensitivity cluster interval not estimable: fewer than 2 subjects" in row["note"]


def test_finding_strata_masks_reference_positive_segments(planted):
    values, res = planted
    paired = planted_paired(values)
    masks = finding_strata(paired, res)
    pos, neg = masks["finding=hemorrhage:positive"], masks["finding=hemorrhage:negative"]
    assert pos.dtype == bool and pos.shape == (len(paired),)
    assert _keys(paired[pos], "subject", "segment") == set(DETECTED) | set(MISSED)
    assert not (pos & neg).any() and (pos | neg).all()
    # the strata cover every parameter of a reference-positive segment
    ff_rows = paired.assign(parameter="ff")
    ff_pos = finding_strata(ff_rows, res)["finding=hemorrhage:positive"]
    assert _keys(ff_rows[ff_pos], "subject", "segment") == set(DETECTED) | set(MISSED)


def test_input_errors():
    res = evaluate_findings(planted_values(), planted_subjects(), (HEMORRHAGE,))
    with pytest.raises(ValueError, match="reference must be a method"):
        findings_agreement(res, "nope")
    with pytest.raises(ValueError, match="levels must be among"):
        findings_agreement(res, "ref", levels=("ring",))
    with pytest.raises(ValueError, match="methods must be test methods"):
        findings_agreement(res, "ref", methods=("ref",))
    with pytest.raises(ValueError, match="n_boot must be a non-negative integer"):
        findings_agreement(res, "ref", n_boot=-1)


# --- deceptive agreement -------------------------------------------------------------------


@pytest.fixture(scope="module")
def detection(planted):
    _, res = planted
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        return findings_agreement(res, "ref", levels=("segment",), n_boot=0).table


def rows(ccc, b_pos, b_neg):
    return pd.DataFrame(
        {
            "parameter": "r2star",
            "method": "fast",
            "stratum": ["all", "finding=hemorrhage:positive", "finding=hemorrhage:negative"],
            "ccc": [ccc, np.nan, np.nan],
            "bias": [0.1, b_pos, b_neg],
        }
    )


def test_high_ccc_with_low_sensitivity_warns(detection):
    # planted cohort: sensitivity 4/7 = 0.571 < 0.8 at segment level
    with pytest.warns(DeceptiveAgreementWarning, match=r"CCC 0.950 >= 0.9.*0.571 < 0.8"):
        found = deceptive_agreement(rows(0.95, 0.2, 0.1), detection)
    assert [(w.kind, w.parameter, w.method, w.finding) for w in found] == [
        ("low-sensitivity", "r2star", "fast", "hemorrhage")
    ]
    assert found[0].sensitivity == pytest.approx(4 / 7) and "hemorrhage" in found[0].message
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert deceptive_agreement(rows(0.85, 0.2, 0.1), detection) == []  # CCC not high
        assert deceptive_agreement(rows(0.95, 0.2, 0.1), detection, sensitivity_max=0.5) == []


@pytest.mark.parametrize(
    ("b_pos", "b_neg", "floor", "marked"),
    [
        (-8.0, 0.5, None, True),  # shift 8.5 >= max(5 1/s default floor, 0.5)
        (1.2, 0.5, None, False),  # shift 0.7 < default floor 5 1/s
        (1.2, 0.5, 0.5, True),  # shift 0.7 >= max(0.5, (2 - 1) x 0.5)
        (0.9, 0.5, 0.1, False),  # shift 0.4 < (2 - 1) x 0.5: less than double
        (-0.2, 0.5, 0.1, True),  # other sign, shift 0.7 >= 0.5
    ],
)
def test_bias_shift_rule(detection, b_pos, b_neg, floor, marked):
    options = {"sensitivity_max": 0.5}
    if floor is not None:
        options["min_bias_difference"] = {"r2star": floor}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        found = deceptive_agreement(rows(0.95, b_pos, b_neg), detection, **options)
    assert [w.kind for w in found] == (["bias-shift"] if marked else [])
    assert [issubclass(c.category, DeceptiveAgreementWarning) for c in caught] == (
        [True] if marked else []
    )
    if marked:
        assert f"{b_pos:.4g}" in found[0].message and "'hemorrhage'" in found[0].message


def test_deceptive_agreement_input_checks(detection):
    with pytest.raises(ValueError, match="agreement_rows must have columns"):
        deceptive_agreement(pd.DataFrame({"parameter": []}), detection)
    with pytest.raises(ValueError, match="ccc_min must be between 0 and 1"):
        deceptive_agreement(rows(0.9, 0, 0), detection, ccc_min=2)
    with pytest.raises(ValueError, match="bias_ratio must be >= 1"):
        deceptive_agreement(rows(0.9, 0, 0), detection, bias_ratio=0.5)


# --- integration with the demo cohort ------------------------------------------------------


def test_demo_missed_segments_equal_a_direct_threshold_comparison(tmp_path):
    # integration only; thresholds 50 1/s at 1.5 T, 79 at 3 T (common practice; Storey 2007)
    study = load_study(write_demo(tmp_path, n_subjects=24, seed=5))
    res = evaluate_findings(study.values, study.subjects)
    table = missed_findings(res, study.reference, levels=("segment",))
    p = study.paired[study.paired["parameter"].eq("r2star")]
    thr = np.where(p["field_strength"] > 2, 1.88 * 50 - 15, 50.0)
    ref_pos, test_pos = p["reference_value"] > thr, p["test_value"] > thr
    hem = table[table["finding"].eq("hemorrhage")]
    assert _keys(hem[hem["kind"].eq("missed")], "subject", "segment") == _keys(
        p[ref_pos & ~test_pos], "subject", "segment"
    )
    assert _keys(hem[hem["kind"].eq("extra")], "subject", "segment") == _keys(
        p[~ref_pos & test_pos], "subject", "segment"
    )
    masks = finding_strata(study.paired, res)
    r2_rows = study.paired["parameter"].eq("r2star").to_numpy()
    assert (masks["finding=hemorrhage:positive"] & r2_rows).sum() == ref_pos.sum()
