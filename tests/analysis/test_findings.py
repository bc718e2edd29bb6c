"""Tissue findings by threshold, checked against direct computations on invented values."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest

from cohort.analysis.findings import (
    SEGMENT_COLUMNS,
    SUBJECT_COLUMNS,
    TERRITORY_COLUMNS,
    evaluate_findings,
)
from cohort.demo import make_demo, write_demo
from cohort.domain.problems import StudyError
from cohort.domain.segments import SEGMENTS
from cohort.domain.thresholds import FAT, FIELD_PERTURBATION, HEMORRHAGE, FindingDefinition
from cohort.io.study import load_study
from cohort.stats.results import NotEstimableWarning


def values_frame(table: dict, field_strength: dict | None = None, group: dict | None = None):
    """Long values from {(subject, method, parameter): 17 values} (invented numbers)."""
    rows = []
    for (subject, method, parameter), vals in table.items():
        for seg, v in zip(range(1, 18), vals, strict=True):
            s = SEGMENTS[seg]
            rows.append(
                {
                    "subject": subject,
                    "method": method,
                    "segment": seg,
                    "parameter": parameter,
                    "value": float(v),
                    "group": (group or {}).get(subject, "patient"),
                    "field_strength": (field_strength or {}).get(subject, 1.5),
                    "segment_name": s.name,
                    "ring": s.ring,
                    "territory": s.territory,
                }
            )
    return pd.DataFrame(rows)


def subjects_frame(culprit: dict):
    return pd.DataFrame(
        {
            "subject": list(culprit),
            "group": "patient",
            "field_strength": 1.5,
            "culprit_territory": list(culprit.values()),
        }
    )


BASE = [25.0] * 17


def test_absolute_threshold_is_strict_for_hemorrhage_and_inclusive_for_fat():
    r2 = list(BASE)
    r2[2], r2[3] = 50.0, 50.01  # T2* = 20 ms exactly is not hemorrhage (R2* > 50, common practice)
    ff = [1.0] * 17
    ff[5], ff[6] = 10.0, 9.99  # ff >= 10 % (common practice)
    values = values_frame({("a", "ref", "r2star"): r2, ("a", "ref", "ff"): ff})
    res = evaluate_findings(values, subjects_frame({"a": ""}), (HEMORRHAGE, FAT))
    assert tuple(res.segments.columns) == SEGMENT_COLUMNS
    seg = res.segments.set_index(["finding", "segment"])
    hem = seg.loc["hemorrhage", "positive"]
    assert list(hem[hem].index) == [4]
    fat = seg.loc["fat", "positive"]
    assert list(fat[fat].index) == [6]
    assert (seg.loc["hemorrhage", "threshold"] == 50.0).all()


def test_field_strength_selects_the_threshold_and_marks_derived():
    # 3 T: 1.88 x 50 - 15 = 79 1/s (Storey et al. 2007), derived
    r2 = list(BASE)
    r2[0], r2[1] = 78.9, 79.1
    values = values_frame(
        {("a", "ref", "r2star"): r2, ("b", "ref", "r2star"): r2}, field_strength={"b": 3.0}
    )
    res = evaluate_findings(values, subjects_frame({"a": "", "b": ""}), (HEMORRHAGE,))
    seg = res.segments.set_index(["subject", "segment"])
    assert seg.loc[("a", 1), "positive"] and seg.loc[("a", 2), "positive"]
    assert not seg.loc[("b", 1), "positive"] and seg.loc[("b", 2), "positive"]
    assert seg.loc[("b", 1), "threshold"] == pytest.approx(79.0) and seg.loc[("b", 1), "derived"]
    assert not seg.loc[("a", 1), "derived"]


def test_unknown_field_strength_is_an_error_naming_finding_and_field():
    values = values_frame({("a", "ref", "r2star"): BASE}, field_strength={"a": 7.0})
    with pytest.raises(StudyError, match=r"'hemorrhage' has no threshold at 7 T.*1 subjects"):
        evaluate_findings(values, subjects_frame({"a": ""}), (HEMORRHAGE,))


def test_absolute_value_for_signed_field():
    fld = [0.0] * 17
    fld[0], fld[1], fld[2] = -31.0, 31.0, 29.0
    values = values_frame({("a", "ref", "field"): fld})
    res = evaluate_findings(values, subjects_frame({"a": ""}), (FIELD_PERTURBATION,))
    pos = res.segments.set_index("segment")["positive"]
    assert list(pos[pos].index) == [1, 2]


def test_remote_threshold_is_mean_plus_k_sd_of_the_methods_own_remote_segments():
    rng = np.random.default_rng(5)
    a_ref = rng.normal(25, 2, 17)
    a_fast = rng.normal(27, 3, 17)
    lad = [n for n, s in SEGMENTS.items() if s.territory == "LAD"]
    a_ref[np.array(lad[:2]) - 1] = 60.0
    values = values_frame(
        {
            ("a", "ref", "r2star"): a_ref,
            ("a", "fast", "r2star"): a_fast,
            ("c", "ref", "r2star"): rng.normal(25, 2, 17),
        }
    )
    remote = FindingDefinition("remote", "r2star", kind="remote", k=2.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no not-estimable warning here
        res = evaluate_findings(values, subjects_frame({"a": "LAD", "c": ""}), (remote,))
    seg = res.segments.set_index(["subject", "method", "segment"])
    outside = np.array([s.territory != "LAD" for s in SEGMENTS.values()])
    # direct numpy computation, SD with ddof=1
    for method, vals in (("ref", a_ref), ("fast", a_fast)):
        expected = vals[outside].mean() + 2.0 * vals[outside].std(ddof=1)
        got = seg.xs(("a", method), level=("subject", "method"))
        np.testing.assert_allclose(got["threshold"], expected, rtol=1e-12)
        np.testing.assert_array_equal(got["positive"].to_numpy(dtype=bool), vals > expected)
    c_vals = values[values["subject"].eq("c")]["value"].to_numpy()
    c_thr = seg.xs(("c", "ref"), level=("subject", "method"))["threshold"]
    np.testing.assert_allclose(c_thr, c_vals.mean() + 2 * c_vals.std(ddof=1), rtol=1e-12)
    assert "no culprit territory: all segments taken as remote" in set(res.notes["note"])


def test_remote_below_direction_uses_mean_minus_k_sd():
    vals = np.linspace(20, 30, 17)
    values = values_frame({("a", "ref", "r2star"): vals})
    low = FindingDefinition(
        "low", "r2star", direction="below", kind="remote", k=1.0, remote_segments=(1, 2, 3, 4)
    )
    res = evaluate_findings(values, subjects_frame({"a": ""}), (low,))
    expected = vals[:4].mean() - vals[:4].std(ddof=1)
    np.testing.assert_allclose(res.segments["threshold"], expected)
    np.testing.assert_array_equal(res.segments["positive"].to_numpy(dtype=bool), vals < expected)


def test_remote_with_fewer_than_two_segments_is_not_estimable_not_a_crash():
    values = values_frame({("a", "ref", "r2star"): BASE})
    one = FindingDefinition("one", "r2star", kind="remote", k=2.0, remote_segments=(1,))
    with pytest.warns(NotEstimableWarning, match="fewer than 2 remote segments"):
        res = evaluate_findings(values, subjects_frame({"a": ""}), (one,))
    assert res.segments["threshold"].isna().all()
    assert res.segments["positive"].isna().all()
    subj = res.subjects.iloc[0]
    assert subj["n_classified"] == 0 and pd.isna(subj["positive"])
    assert math.isnan(subj["extent_percent"])
    assert res.notes["note"].str.contains("not estimable").any()


def test_outside_culprit_needs_the_culprit_column():
    values = values_frame({("a", "ref", "r2star"): BASE})
    remote = FindingDefinition("remote", "r2star", kind="remote", k=2.0)
    with pytest.raises(ValueError, match="no column 'culprit_territory'"):
        evaluate_findings(values, pd.DataFrame({"subject": ["a"]}), (remote,))
    with pytest.raises(ValueError, match="must name a territory"):
        evaluate_findings(values, subjects_frame({"a": "LM"}), (remote,))


def test_territory_and_subject_levels():
    r2 = list(BASE)
    r2[2], r2[3], r2[8] = 60.0, 70.0, 55.0  # segments 3, 4, 9: RCA (Cerqueira et al. 2002)
    r2[0] = 52.0  # segment 1: LAD
    values = values_frame({("a", "ref", "r2star"): r2, ("b", "ref", "r2star"): BASE})
    two = FindingDefinition("hem2", "r2star", thresholds={1.5: 50.0}, min_segments=2)
    one = FindingDefinition("hem5", "r2star", thresholds={1.5: 50.0}, min_segments=5)
    res = evaluate_findings(values, subjects_frame({"a": "", "b": ""}), (two, one))
    assert tuple(res.territories.columns) == TERRITORY_COLUMNS
    assert tuple(res.subjects.columns) == SUBJECT_COLUMNS
    terr = res.territories.query("finding == 'hem2' and subject == 'a'").set_index("territory")
    assert terr.loc["RCA", "n_positive"] == 3 and terr.loc["RCA", "n_segments"] == 5
    assert terr.loc["RCA", "extent_percent"] == pytest.approx(60.0)
    assert terr.loc["RCA", "positive"] and terr.loc["LAD", "positive"]
    assert not terr.loc["LCx", "positive"]
    assert terr.loc["RCA", "extreme_value"] == 70.0 and terr.loc["RCA", "extreme_segment"] == 4
    subj = res.subjects.set_index(["finding", "subject"])
    a2 = subj.loc[("hem2", "a")]
    assert a2["positive"] and a2["n_positive"] == 4 and a2["positive_segments"] == "1, 3, 4, 9"
    assert a2["extent_percent"] == pytest.approx(400 / 17)
    assert a2["extreme_value"] == 70.0 and a2["extreme_segment"] == 4
    assert not subj.loc[("hem5", "a"), "positive"]  # 4 positive segments < min_segments 5
    assert not subj.loc[("hem2", "b"), "positive"] and subj.loc[("hem2", "b"), "n_positive"] == 0


def test_missing_parameter_gives_a_note():
    values = values_frame({("a", "ref", "r2star"): BASE})
    res = evaluate_findings(values, subjects_frame({"a": ""}), (HEMORRHAGE, FAT))
    assert res.subjects["finding"].unique().tolist() == ["hemorrhage"]
    assert res.notes["note"].str.contains("no values of parameter 'ff'").any()


def test_duplicate_names_rejected():
    with pytest.raises(ValueError, match="distinct names"):
        evaluate_findings(values_frame({("a", "ref", "ff"): BASE}), subjects_frame({}), (FAT, FAT))


def test_demo_reference_recovers_the_planted_hemorrhage(tmp_path):
    # integration only: the demo plants hemorrhage with R2* 55-110 1/s at 1.5 T (scaled to 3 T
    # with Storey 2007) against about 23-28 1/s elsewhere, so the reference finds exactly them
    study = load_study(write_demo(tmp_path, n_subjects=24, seed=3))
    lesions = make_demo(24, 3).lesions
    res = evaluate_findings(study.values, study.subjects)
    seg = res.segments
    hem = seg[seg["finding"].eq("hemorrhage") & seg["method"].eq("reference-fit")]
    found = set(
        hem.loc[hem["positive"].to_numpy(dtype=bool), ["subject", "segment"]].itertuples(
            index=False, name=None
        )
    )
    planted = set(
        lesions[lesions["kind"].eq("hemorrhage")][["subject", "segment"]].itertuples(
            index=False, name=None
        )
    )
    assert found == planted
    fat = seg[seg["finding"].eq("fat") & seg["method"].eq("reference-fit")]
    fat_found = set(
        fat.loc[fat["positive"].to_numpy(dtype=bool), ["subject", "segment"]].itertuples(
            index=False, name=None
        )
    )
    planted_fat = set(
        lesions[lesions["kind"].eq("fat")][["subject", "segment"]].itertuples(
            index=False, name=None
        )
    )
    assert fat_found and fat_found <= planted_fat


def test_unknown_level_is_refused():
    values = values_frame({("a", "ref", "r2star"): BASE})
    res = evaluate_findings(values, subjects_frame({"a": ""}), (HEMORRHAGE,))
    with pytest.raises(ValueError, match="level must be one of"):
        res.to_frame("ring")
