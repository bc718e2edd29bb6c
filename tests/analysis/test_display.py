"""Tests of cohort.analysis.display: the display summaries the figures draw.

Each summary is checked against the definition computed here independently, row by row,
with numpy on the study's own frames (median, arithmetic mean, percent positive: textbook
definitions, common practice). The study is the invented demo cohort (12 subjects).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from cohort.analysis import display
from cohort.demo import write_demo
from cohort.io.study import load_study


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    return load_study(write_demo(tmp_path_factory.mktemp("demo"), n_subjects=12))


def test_segment_medians_are_numpy_medians_per_field_strength(study):
    table = display.segment_medians(study)
    v = study.values
    for row in table.sample(40, random_state=1).itertuples():
        mask = (
            (v["parameter"].astype(str) == row.parameter)
            & (v["group"].astype(str) == str(row.group))
            & (v["method"].astype(str) == str(row.method))
            & (v["segment"] == row.segment)
        )
        if not math.isnan(row.field_strength):
            mask &= v["field_strength"] == row.field_strength
        assert row.median == pytest.approx(float(np.median(v.loc[mask, "value"])), abs=1e-12)
    # R2* and field depend on B0: one set per field strength; fat fraction pooled (NaN)
    by_parameter = table.groupby("parameter")["field_strength"].unique()
    assert all(np.isnan(by_parameter["ff"]))
    assert sorted(by_parameter["r2star"]) == sorted(pd.unique(study.subjects["field_strength"]))


def test_difference_medians_are_test_minus_reference(study):
    table = display.difference_medians(study)
    p = study.paired
    for row in table.sample(30, random_state=2).itertuples():
        mask = (
            (p["parameter"].astype(str) == row.parameter)
            & (p["method"].astype(str) == str(row.method))
            & (p["group"].astype(str) == str(row.group))
            & (p["segment"] == row.segment)
        )
        d = (p.loc[mask, "test_value"] - p.loc[mask, "reference_value"]).to_numpy()
        assert row.median_difference == pytest.approx(float(np.median(d)), abs=1e-12)


def test_subject_means_and_paired_means(study):
    means = display.subject_means(study)
    v = study.values
    row = means.iloc[5]
    mask = (
        (v["parameter"].astype(str) == row["parameter"])
        & (v["subject"].astype(str) == str(row["subject"]))
        & (v["method"].astype(str) == str(row["method"]))
    )
    assert row["mean"] == pytest.approx(float(np.mean(v.loc[mask, "value"])), abs=1e-12)
    paired = display.paired_subject_means(study)
    p = study.paired
    row = paired.iloc[3]
    mask = (
        (p["parameter"].astype(str) == row["parameter"])
        & (p["method"].astype(str) == row["method"])
        & (p["subject"].astype(str) == str(row["subject"]))
    )
    assert row["n_pairs"] == int(mask.sum())
    assert row["reference_mean"] == pytest.approx(float(p.loc[mask, "reference_value"].mean()))
    assert row["test_mean"] == pytest.approx(float(p.loc[mask, "test_value"].mean()))
    assert int(paired["n_pairs"].sum()) == int(
        p["method"].astype(str).isin(study.test_methods).sum()
    )


def test_prevalence_leaves_unclassified_segments_out_of_the_denominator():
    table = pd.DataFrame(
        {
            "finding": ["fat"] * 5,
            "group": ["a", "a", "a", "a", "b"],
            "method": ["m"] * 5,
            "segment": [1, 1, 1, 1, 1],
            "positive": [True, False, None, True, False],
        }
    )
    out = display.segment_prevalence(table, [1]).set_index("group")
    assert out.loc["a", "percent_positive"] == pytest.approx(100 * 2 / 3)
    assert (out.loc["a", "n_positive"], out.loc["a", "n_classified"]) == (2, 3)
    assert out.loc["b", "percent_positive"] == 0.0
    assert display.segment_prevalence(table, [2]).empty
