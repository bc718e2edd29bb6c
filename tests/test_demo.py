"""The demo cohort: a full analysis recovers the truth planted in it (cohort/demo.py).

The planted values come from the generator itself (invented data); the tolerances allow for
its noise. This is an integration check of the whole pipeline, not a check of an estimator
against an outside source (those are in the module tests). Where a test computes a statistic
by hand it says from which formula.
"""

from __future__ import annotations

import hashlib
import tomllib

import numpy as np
import pandas as pd
import pytest

from cohort import demo
from cohort.analysis.pipeline import analyse, options_from_study
from cohort.domain.thresholds import HEMORRHAGE
from cohort.io.study import load_study


@pytest.fixture(scope="module")
def analysis(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    study = load_study(demo.write_demo(folder))
    return analyse(study, options_from_study(study, n_boot=100, strata=("all", "group")))


def overall(analysis, parameter, method=demo.QUICKMAP):
    t = analysis.tables["agreement"]
    return t[(t.parameter == parameter) & (t.method == method) & (t.stratum == "all")].iloc[0]


def segment_sensitivity(analysis, finding, method):
    det = analysis.tables["findings_agreement"]
    row = det[
        (det.finding == finding)
        & (det.method == method)
        & (det.level == "segment")
        & (det.stratum == "all")
    ]
    return row["sensitivity"].item()


def test_fat_fraction_bias_and_proportional_error_are_recovered(analysis):
    quick = demo.PLANTED[demo.QUICKMAP]
    row = overall(analysis, "ff")
    paired = analysis.study.paired
    truth_mean = paired.query("parameter == 'ff' and method == 'quickmap'")["reference_value"]
    # planted: test = 0.5 + 1.05 x truth, so bias = 0.5 + 0.05 x mean truth
    expected_bias = quick.ff_bias + (quick.ff_slope - 1) * truth_mean.mean()
    assert row["bias"] == pytest.approx(expected_bias, abs=0.1)
    assert row["bias_ci_low"] < row["bias"] < row["bias_ci_high"]
    # slope of the difference on the mean: (b - 1) / (1 + (b - 1) / 2) for y = a + b x
    expected = (quick.ff_slope - 1) / (1 + (quick.ff_slope - 1) / 2)
    assert row["prop_slope"] == pytest.approx(expected, abs=0.03)
    # net-full: test = 0.2 + truth, no proportional error
    full = overall(analysis, "ff", demo.NET_FULL)
    assert full["bias"] == pytest.approx(demo.PLANTED[demo.NET_FULL].ff_bias, abs=0.1)
    assert full["prop_slope"] == pytest.approx(0.0, abs=0.03)


@pytest.mark.parametrize("method", [demo.NET_FULL, demo.QUICKMAP])
def test_field_offsets_are_removed_by_referencing(analysis, method):
    row = overall(analysis, "field", method)
    assert abs(row["bias"]) < 0.5  # planted: equal after referencing
    # planted noise SDs 1 and 2 Hz: limits about +/- 1.96 sqrt(5) = 4.4 Hz
    assert row["loa_high"] - row["loa_low"] == pytest.approx(2 * 1.96 * np.sqrt(5.0), rel=0.25)


def test_missed_hemorrhage_is_found_and_flagged(analysis):
    planted = pd.read_csv(
        analysis.study.settings.values.parent / "planted_lesions.csv", dtype={"subject": str}
    )
    hem = set(map(tuple, planted.query("kind == 'hemorrhage'")[["subject", "segment"]].to_numpy()))
    missed = analysis.tables["missed_findings"].query(
        "finding == 'hemorrhage' and level == 'segment' and method == 'quickmap'"
    )
    missed_keys = set(zip(missed["subject"], missed["segment"], strict=True))
    assert missed_keys and missed_keys <= hem  # every miss is a planted lesion
    # the reference finds exactly the planted hemorrhage
    seg = analysis.tables["findings_segment"]
    ref_pos = seg[
        (seg.method == demo.REFERENCE) & (seg.finding == "hemorrhage") & seg.positive.astype(bool)
    ]
    assert set(zip(ref_pos.subject, ref_pos.segment, strict=True)) == hem
    # missed ones are the near-threshold lesions: below the knee-derived limit
    assert segment_sensitivity(analysis, "hemorrhage", demo.QUICKMAP) < 0.8
    assert any("hemorrhage" in a and "r2star" in a for a in analysis.alerts)


def test_fat_is_found_and_no_swap_is_flagged(analysis):
    det = analysis.tables["findings_agreement"]
    fat = det.query(
        "finding == 'fat' and level == 'subject' and stratum == 'all' and method == 'quickmap'"
    )
    assert fat["sensitivity"].item() == 1.0
    assert analysis.tables["swap_flags"].empty


# --- the three test methods of issue 13 -------------------------------------------------

# sha256 of DataFrame.to_csv(index=False, lineterminator="\n") of make_demo(12, 20261202)
# (values, subjects, lesions), computed once with the one-method generator of commit 692eccc,
# before the demo gained net-full and net-mag1: the reference, quickmap, subjects and
# lesions of a seed must not change.
_BEFORE_SHA256 = {
    "values": "fa03942cbae9c798c6ec03d691a4a9ffb1bf6c6386c6b665fc8940d9cecacaff",
    "subjects": "6c19263c41d1d07714949afe879350498f3dc54128d0990d66d5d39c83683ef3",
    "lesions": "4427bec31f00dd15b1fa5affb3f3605032b2899f5d65492b421e3d705554f4bf",
}


def _sha256(frame: pd.DataFrame) -> str:
    return hashlib.sha256(frame.to_csv(index=False, lineterminator="\n").encode()).hexdigest()


def test_reference_and_quickmap_are_unchanged_for_a_seed():
    one = demo.make_demo(12, 20261202, test_methods=(demo.QUICKMAP,))
    three = demo.make_demo(12, 20261202)
    n_old = 2 * 12 * 17 * 3  # reference + quickmap, 17 segments, 3 parameters
    assert _sha256(one.values) == _BEFORE_SHA256["values"]
    assert _sha256(three.values.iloc[:n_old]) == _BEFORE_SHA256["values"]
    for cohort in (one, three):
        assert _sha256(cohort.subjects) == _BEFORE_SHA256["subjects"]
        assert _sha256(cohort.lesions) == _BEFORE_SHA256["lesions"]


def test_rows_come_reference_first_then_quickmap_then_the_others():
    cohort = demo.make_demo(6)
    per_method = 6 * 17 * 3
    methods = cohort.values["method"].to_numpy()
    expected = [demo.REFERENCE, demo.QUICKMAP, demo.NET_FULL, demo.NET_MAG1]
    assert list(methods[::per_method]) == expected
    assert (pd.Series(methods).value_counts() == per_method).all()
    picked = demo.make_demo(6, test_methods=(demo.NET_MAG1, demo.NET_FULL)).values
    assert list(pd.unique(picked["method"])) == [demo.REFERENCE, demo.NET_MAG1, demo.NET_FULL]


def test_test_methods_keyword_gives_each_method_the_same_values():
    full = demo.make_demo(12, 7)
    alone = demo.make_demo(12, 7, test_methods=(demo.NET_MAG1,))
    for method in (demo.REFERENCE, demo.NET_MAG1):
        a = full.values[full.values["method"] == method].reset_index(drop=True)
        b = alone.values[alone.values["method"] == method].reset_index(drop=True)
        pd.testing.assert_frame_equal(a, b)
    assert demo.DEMO_TEST_METHODS == ("net-full", "quickmap", "net-mag1")


@pytest.mark.parametrize(
    "bad", ["quickmap", (), ("quickmap", "quickmap"), ("quickmap", "slowmap"), None]
)
def test_test_methods_are_checked(bad):
    with pytest.raises(ValueError, match="test_methods must"):
        demo.make_demo(6, test_methods=bad)


def test_only_quickmap_lacks_the_apex_in_one_subject_in_eight():
    values = demo.make_demo(24).values
    blank = values[values["value"].astype(str) == ""]
    assert set(blank["method"]) == {demo.QUICKMAP}
    assert set(blank["segment"]) == {17}
    assert blank["subject"].nunique() == 24 // demo.NO_APEX_EVERY
    assert len(blank) == 3 * (24 // demo.NO_APEX_EVERY)  # all three parameters


def test_magnitude_only_fat_fractions_stay_within_0_to_50():
    values = demo.make_demo(60).values
    ff = values[(values["method"] == demo.NET_MAG1) & (values["parameter"] == "ff")]
    assert ff["value"].astype(float).between(0.0, 50.0).all()


def _r2star_pairs(cohort, method):
    """Reference and ``method`` R2* per (subject, segment), with each subject's field."""
    v = cohort.values[cohort.values["parameter"] == "r2star"]
    v = v.assign(value=pd.to_numeric(v["value"].replace("", np.nan)))
    wide = v.pivot_table(index=["subject", "segment"], columns="method", values="value")
    wide = wide[[demo.REFERENCE, method]].dropna().reset_index()
    b0 = cohort.subjects.set_index("subject")["field_strength"]
    return wide.assign(b0=wide["subject"].map(b0).astype(float))


def _ccc(x: np.ndarray, y: np.ndarray) -> float:
    """Lin's CCC, 2 s_xy / (s_x^2 + s_y^2 + (mean x - mean y)^2), moments with divisor n
    (Lin, Biometrics 1989; 45:255-268, equation 2a)."""
    sxy = np.mean((x - x.mean()) * (y - y.mean()))
    return 2 * sxy / (x.var() + y.var() + (x.mean() - y.mean()) ** 2)


def _hemorrhage_sensitivity(pairs, method) -> float:
    """Segment sensitivity with the reference as truth: R2* > 50 1/s at 1.5 T, > 79 1/s at
    3 T (the default finding, cohort.domain.thresholds.HEMORRHAGE)."""
    threshold = pairs["b0"].map(lambda b: HEMORRHAGE.threshold_at(b).value)
    truth = pairs[demo.REFERENCE] > threshold
    return float((pairs[method] > threshold)[truth].mean())


@pytest.mark.parametrize(
    ("n_subjects", "seed"),
    [(30, 1), (42, 3), (demo.DEMO_SUBJECTS.default, demo.DEMO_SEED), (60, 7)],
)
def test_planted_r2star_properties_hold_across_sizes_and_seeds(n_subjects, seed):
    cohort = demo.make_demo(n_subjects, seed)
    results = {}
    for method in demo.DEMO_TEST_METHODS:
        pairs = _r2star_pairs(cohort, method)
        x, y = pairs[demo.REFERENCE].to_numpy(), pairs[method].to_numpy()
        results[method] = (_ccc(x, y), _hemorrhage_sensitivity(pairs, method))
    assert HEMORRHAGE.threshold_at(1.5).value == 50.0  # O'Regan et al. 2009 (memory)
    ccc, sens = results[demo.NET_FULL]  # adequate: agrees and finds hemorrhage
    assert ccc > 0.95 and sens >= 0.85
    ccc, sens = results[demo.QUICKMAP]  # agrees well overall, misses hemorrhage
    assert ccc > 0.88 and 0.3 < sens < 0.8
    ccc, sens = results[demo.NET_MAG1]  # poor overall and misses hemorrhage
    assert ccc < 0.8 and sens < 0.5


def test_net_full_agrees_and_net_mag1_does_not(analysis):
    assert overall(analysis, "r2star", demo.NET_FULL)["ccc"] > 0.95
    assert overall(analysis, "r2star", demo.NET_MAG1)["ccc"] < 0.8
    assert segment_sensitivity(analysis, "hemorrhage", demo.NET_FULL) > 0.9
    assert segment_sensitivity(analysis, "hemorrhage", demo.NET_MAG1) < 0.5
    assert segment_sensitivity(analysis, "fat", demo.NET_FULL) > 0.9
    assert segment_sensitivity(analysis, "fat", demo.NET_MAG1) < 0.8


def test_methods_are_analysed_in_display_order(analysis):
    assert analysis.study.test_methods == demo.DEMO_TEST_METHODS
    agreement = analysis.tables["agreement"]
    assert list(pd.unique(agreement["method"].astype(str))) == list(demo.DEMO_TEST_METHODS)


def test_verdicts_tell_the_story_of_the_demo(analysis):
    # criteria of the demo's study file: net-full meets every one, quickmap fails the
    # hemorrhage sensitivity, net-mag1 fails its limits of agreement and both findings
    v = analysis.tables["method_verdicts"]
    v = v[v["verdict"] != "not-assessed"]
    full = v[v["method"] == demo.NET_FULL]
    assert len(full) == 3 * 2 + 2 and (full["verdict"] == "meets").all()
    quick = v[v["method"] == demo.QUICKMAP].set_index(["target", "statistic"])["verdict"]
    assert quick[("hemorrhage", "sensitivity")] == "fails"
    assert quick[("fat", "sensitivity")] == "meets"
    for target in ("ff", "field"):
        assert quick[(target, "loa_low")] != "fails" and quick[(target, "loa_high")] != "fails"
    mag = v[v["method"] == demo.NET_MAG1].set_index(["target", "statistic"])["verdict"]
    assert all(mag[(target, "loa_low")] == "fails" for target in ("ff", "r2star", "field"))
    assert mag[("hemorrhage", "sensitivity")] == "fails"


def test_demo_study_file_declares_methods_labels_and_criteria():
    document = tomllib.loads(demo.STUDY_TOML)
    study = document["study"]
    assert study["methods"] == list(demo.DEMO_TEST_METHODS)
    assert study["method_labels"] == dict(demo.METHOD_LABELS)
    # the labels come right after [study]'s own keys
    assert 'methods = ["net-full", "quickmap", "net-mag1"]\n\n[study.method_labels]\n' in (
        demo.STUDY_TOML
    )
    assert document["findings"] == {"magnitude_only_methods": [demo.NET_MAG1]}
    assert document["acceptance"] == {
        "limits": {"ff": 3.0, "r2star": 15.0, "field": 10.0},
        "findings": {"hemorrhage": 0.8, "fat": 0.8},
    }


def test_one_method_study_file_loads_with_its_cohort(tmp_path):
    cohort = demo.make_demo(6, test_methods=(demo.QUICKMAP,))
    cohort.values.to_csv(tmp_path / "values.csv", index=False)
    cohort.subjects.to_csv(tmp_path / "subjects.csv", index=False)
    text = demo.study_toml((demo.QUICKMAP,))
    assert "net-" not in text and "magnitude_only_methods" not in text
    (tmp_path / "study.toml").write_text(text, encoding="utf-8")
    study = load_study(tmp_path / "study.toml")
    assert study.test_methods == (demo.QUICKMAP,)


def test_alerts_tell_the_story_of_the_demo(analysis):
    # the planted truth (cohort/demo.py): quickmap agrees well overall and misses hemorrhage
    # (deceptive agreement), net-mag1 agrees poorly and misses lesions (missed lesions, which
    # the deceptive-agreement screen alone never flagged), net-full raises nothing
    labels = demo.METHOD_LABELS
    alerts = analysis.alerts
    deceptive = [a for a in alerts if a.startswith("Deceptive agreement")]
    missed = [a for a in alerts if a.startswith("Missed lesions")]
    assert deceptive and all(labels[demo.QUICKMAP] in a for a in deceptive)
    assert any(labels[demo.NET_MAG1] in a and "hemorrhage" in a for a in missed)
    assert not any(labels[demo.NET_FULL] in a for a in alerts)
    assert not any(labels[demo.QUICKMAP] in a for a in missed)  # the stronger form stands alone
    # strongest first: every deceptive-agreement alert before the first missed-lesion alert
    assert max(alerts.index(a) for a in deceptive) < min(alerts.index(a) for a in missed)


def test_head_to_head_ranks_the_methods_as_planted(analysis):
    # net-full shows more hemorrhage than net-mag1 (planted: about 1.0 against 0.1), and the
    # subject cluster bootstrap interval of the difference excludes 0
    d = analysis.tables["method_differences"]
    row = d[
        d["method_a"].eq(demo.NET_FULL)
        & d["method_b"].eq(demo.NET_MAG1)
        & d["target"].eq("hemorrhage")
        & d["statistic"].eq("sensitivity")
    ].iloc[0]
    assert row["difference"] > 0.5 and row["ci_low"] > 0
    assert row["p_adjusted"] < 0.05 and row["p_adjusted"] >= row["p_value"]
