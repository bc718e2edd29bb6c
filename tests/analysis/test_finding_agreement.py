"""Finding-level agreement: a simulated cohort with planted lesions that the test method
misses, the cluster bootstrap against a direct per-resample computation, missed findings and
the strata of reference-positive segments. The 2x2 statistics themselves are checked against
published values and statsmodels in tests/stats/test_classification.py."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.contingency_tables import mcnemar
from statsmodels.stats.inter_rater import cohens_kappa
from statsmodels.stats.proportion import proportion_confint

from cohort.analysis.finding_agreement import (
    FINDINGS_AGREEMENT_COLUMNS,
    MISSED_COLUMNS,
    FindingsAgreement,
    finding_strata,
    findings_agreement,
    missed_findings,
)
from cohort.analysis.findings import evaluate_findings
from cohort.demo import write_demo
from cohort.domain.thresholds import HEMORRHAGE, FindingDefinition
from cohort.io.study import load_study
from cohort.stats.bootstrap import resample_subjects
from cohort.stats.results import NotEstimableWarning
from tests.analysis.planted import (
    DETECTED,
    EXTRA,
    MISSED,
    planted_paired,
    planted_subjects,
    planted_values,
)


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
        table = findings_agreement(res, "ref", levels=("segment", "subject"), n_boot=20).table
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
    with pytest.raises(
        ValueError, match=r"n_boot must be 0 \(no bootstrap\) or an integer from 20"
    ):
        findings_agreement(res, "ref", n_boot=-1)
    with pytest.raises(ValueError, match="reference must be a method"):
        missed_findings(res, "nope")
    with pytest.raises(ValueError, match="levels must be among"):
        missed_findings(res, "ref", levels=("ring",))


def test_findings_agreement_is_a_result():
    res = evaluate_findings(planted_values(), planted_subjects(), (HEMORRHAGE,))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        result = findings_agreement(res, "ref", levels=("subject",), n_boot=0, seed=5)
    assert isinstance(result, FindingsAgreement) and result.to_frame() is result.table
    # 1 finding x 1 level x 3 strata (all, acute, control)
    assert repr(result) == (
        "FindingsAgreement(table=<DataFrame (3, 44)>, n_boot=0, seed=5, confidence_level=0.95)"
    )
    with pytest.raises(AttributeError):
        result.n_boot = 10  # frozen


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
