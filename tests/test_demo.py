"""The demo cohort: a full analysis recovers the truth planted in it (cohort/demo.py).

The planted values come from the generator itself (invented data); the tolerances allow for
its noise. This is an integration check of the whole pipeline, not a check of an estimator
against an outside source (those are in the module tests).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from cohort import demo
from cohort.analysis.pipeline import analyse, options_from_study
from cohort.io.study import load_study


@pytest.fixture(scope="module")
def analysis(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    study = load_study(demo.write_demo(folder))
    return analyse(study, options_from_study(study, n_boot=100, strata=("all", "group")))


def overall(analysis, parameter):
    t = analysis.tables["agreement"]
    return t[(t.parameter == parameter) & (t.stratum == "all")].iloc[0]


def test_fat_fraction_bias_and_proportional_error_are_recovered(analysis):
    row = overall(analysis, "ff")
    truth_mean = analysis.study.paired.query("parameter == 'ff'")["reference_value"].mean()
    # planted: test = 0.5 + 1.05 x truth, so bias = 0.5 + 0.05 x mean truth
    assert row["bias"] == pytest.approx(demo.FF_BIAS + (demo.FF_SLOPE - 1) * truth_mean, abs=0.1)
    assert row["bias_ci_low"] < row["bias"] < row["bias_ci_high"]
    # slope of the difference on the mean: (b - 1) / (1 + (b - 1) / 2) for y = a + b x
    expected = (demo.FF_SLOPE - 1) / (1 + (demo.FF_SLOPE - 1) / 2)
    assert row["prop_slope"] == pytest.approx(expected, abs=0.03)


def test_field_offsets_are_removed_by_referencing(analysis):
    row = overall(analysis, "field")
    assert abs(row["bias"]) < 0.5  # planted: equal after referencing
    # planted noise SDs 1 and 2 Hz: limits about +/- 1.96 sqrt(5) = 4.4 Hz
    assert row["loa_high"] - row["loa_low"] == pytest.approx(2 * 1.96 * np.sqrt(5.0), rel=0.25)


def test_missed_hemorrhage_is_found_and_flagged(analysis):
    planted = pd.read_csv(
        analysis.study.settings.values.parent / "planted_lesions.csv", dtype={"subject": str}
    )
    hem = set(map(tuple, planted.query("kind == 'hemorrhage'")[["subject", "segment"]].to_numpy()))
    missed = analysis.tables["missed_findings"].query(
        "finding == 'hemorrhage' and level == 'segment'"
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
    det = analysis.tables["findings_agreement"]
    sens = det.query("finding == 'hemorrhage' and level == 'segment' and stratum == 'all'")
    assert sens["sensitivity"].item() < 0.8
    assert any("hemorrhage" in a and "r2star" in a for a in analysis.alerts)


def test_fat_is_found_and_no_swap_is_flagged(analysis):
    det = analysis.tables["findings_agreement"]
    fat = det.query("finding == 'fat' and level == 'subject' and stratum == 'all'")
    assert fat["sensitivity"].item() == 1.0
    assert analysis.tables["swap_flags"].empty
