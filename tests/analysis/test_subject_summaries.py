"""Per-subject summaries and group descriptives (cohort.analysis.subject_summaries).

Sources named beside each check: direct pandas group-bys, numpy quantile (Hyndman & Fan type
7) and std(ddof=1), the AHA territory assignment of Cerqueira et al. 2002. The demo cohort
is used for integration.
"""

from __future__ import annotations

import numpy as np
import pytest

from cohort.analysis.subject_summaries import CULPRIT_MEAN, SUMMARY_COLUMNS, subject_summaries
from cohort.stats.results import NotEstimableWarning

from .group_data import LAD, LCX, RCA


@pytest.fixture
def study(demo_study):
    return demo_study


@pytest.fixture
def result(demo_groups):
    return demo_groups


def test_subject_summaries_match_direct_pandas(study, result):
    s = result.summaries
    v = study.values
    assert tuple(s.columns) == SUMMARY_COLUMNS
    direct = v.groupby(["subject", "method", "parameter"])["value"].agg(["mean", "max", "count"])
    for kind in ("mean", "max"):
        part = s[s["summary"].eq(kind)].set_index(["subject", "method", "parameter"])
        np.testing.assert_allclose(part["value"], direct.loc[part.index, kind])
        np.testing.assert_array_equal(part["n_segments"], direct.loc[part.index, "count"])


def test_culprit_mean_uses_the_aha_territory_and_is_nan_for_controls(study, result):
    # territories of Cerqueira et al. 2002 (LAD/RCA/LCx segment lists above)
    s = result.summaries[result.summaries["summary"].eq(CULPRIT_MEAN)]
    subjects = study.subjects.set_index("subject")
    patient = subjects[subjects["culprit_territory"].ne("")].index[0]
    territory = subjects.loc[patient, "culprit_territory"]
    segments = {"LAD": LAD, "RCA": RCA, "LCx": LCX}[territory]
    v = study.values
    part = v[v["subject"].eq(patient) & v["parameter"].eq("ff") & v["segment"].isin(segments)]
    for method, values in part.groupby("method")["value"]:
        row = s[s["subject"].eq(patient) & s["method"].eq(method) & s["parameter"].eq("ff")].iloc[0]
        assert row["value"] == pytest.approx(values.mean())
        assert row["n_segments"] == values.size
    controls = s[s["group"].eq("control")]
    assert controls["value"].isna().all() and controls["note"].str.contains("no culprit").all()


def test_subject_summaries_warn_for_missing_culprit_and_reject_unknown_territory(study):
    with pytest.warns(NotEstimableWarning, match="no culprit territory"):
        subject_summaries(study.values, study.subjects)
    bad = study.subjects.assign(culprit_territory="LM")
    with pytest.raises(ValueError, match=r"culprit_territory.*must be blank or one of"):
        subject_summaries(study.values, bad)
    without = subject_summaries(study.values, study.subjects.drop(columns="culprit_territory"))
    assert set(without["summary"]) == {"mean", "max"}


def test_describe_groups_matches_numpy(result):
    d = result.descriptives
    s = result.summaries
    row = d[d["parameter"].eq("r2star") & d["method"].eq("quickmap") & d["summary"].eq("max")]
    row = row.set_index("group").loc["acute"]
    x = s[
        s["parameter"].eq("r2star")
        & s["method"].eq("quickmap")
        & s["summary"].eq("max")
        & s["group"].eq("acute")
    ]["value"].to_numpy()
    # numpy quantile (linear, Hyndman & Fan type 7) and ddof=1 SD
    assert (row["q1"], row["median"], row["q3"]) == pytest.approx(
        tuple(np.quantile(x, [0.25, 0.5, 0.75]))
    )
    assert row["sd"] == pytest.approx(np.std(x, ddof=1)) and row["n_subjects"] == x.size
    assert row["unit"] == "1/s"
    control = d[d["summary"].eq(CULPRIT_MEAN) & d["group"].eq("control")]
    assert (control["n_subjects"] == 0).all() and control["note"].str.contains(
        "not estimable"
    ).all()
