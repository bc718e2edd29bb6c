"""The fitting engine of group models (cohort.stats.models), on invented data.

Sources named beside each check: statsmodels 0.15 (formula ``ols`` on subject means,
``mixedlm``) as the reference library. The demo-cohort comparisons of every path with direct
statsmodels fits are in tests/analysis/test_group_models.py.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf

from cohort.stats.models import (
    GEE_PATH,
    JOINT_GROUP,
    SUBJECT_MEANS_PATH,
    choose_model_path,
    fit_group_model,
)
from cohort.stats.results import NotEstimableWarning


def clustered(seed: int = 7, n_per_group: int = 8, segments: int = 6):
    """Invented values: three groups, a random intercept per subject, noise per segment."""
    rng = np.random.default_rng(seed)
    groups = np.repeat(["control", "acute", "chronic"], n_per_group)
    subjects = [f"s{i:02d}" for i in range(groups.size)]
    shift = {"control": 0.0, "acute": 1.5, "chronic": 0.7}
    rows = []
    for s, g in zip(subjects, groups, strict=True):
        level = shift[g] + rng.normal(0, 0.8)
        for k in range(segments):
            rows.append((s, g, level + rng.normal(0, 0.5), k + 1))
    frame = pd.DataFrame(rows, columns=["subject", "group", "value", "segment"])
    info = pd.DataFrame({"group": groups, "age": rng.integers(40, 80, groups.size)}, subjects)
    return frame, info


def test_path_is_chosen_by_size_and_stated():
    # the documented rule of MIXED_MODEL_MAX_OBSERVATIONS (project rule)
    assert choose_model_path(10_000)[0] == "mixed"
    assert choose_model_path(10_001)[0] == "subject-means"
    assert choose_model_path(10, "subject-means") == ("subject-means", "subject-means requested")
    with pytest.raises(ValueError, match="path must be one of"):
        choose_model_path(10, "fast")


def test_subject_means_fit_equals_statsmodels_ols_on_subject_means():
    # statsmodels formula ols on the subject means, covariate age (reference library)
    frame, info = clustered()
    order = ["control", "acute", "chronic"]
    fit = fit_group_model("subject-means", frame["value"], frame["subject"], info, order, ("age",))
    means = frame.groupby(["subject", "group"], as_index=False)["value"].mean()
    means["age"] = means["subject"].map(info["age"])
    ols = smf.ols("value ~ C(group, Treatment('control')) + age", means).fit()
    terms = {t["term"]: t for t in fit.term_tests()}
    for g in ("acute", "chronic"):
        name = f"C(group, Treatment('control'))[T.{g}]"
        assert terms[f"group[{g}]"]["estimate"] == pytest.approx(ols.params[name], rel=1e-10)
        assert terms[f"group[{g}]"]["std_error"] == pytest.approx(ols.bse[name], rel=1e-10)
        assert terms[f"group[{g}]"]["p_value"] == pytest.approx(ols.pvalues[name], rel=1e-8)
    assert terms["age"]["estimate"] == pytest.approx(ols.params["age"], rel=1e-10)
    joint = fit.joint_group_test()
    names = [f"C(group, Treatment('control'))[T.{g}]" for g in ("acute", "chronic")]
    f = ols.f_test(", ".join(f"{n} = 0" for n in names))
    assert joint["statistic"] == pytest.approx(float(np.squeeze(f.fvalue)), rel=1e-10)
    assert fit.path == SUBJECT_MEANS_PATH and fit.t_df == ols.df_resid
    assert (fit.n_subjects, fit.n_observations) == (24, 144)
    assert fit.to_frame()["term"].iloc[-1] == JOINT_GROUP


def test_mixed_fit_equals_statsmodels_mixedlm():
    # statsmodels formula mixedlm, REML, random intercept per subject (reference library)
    frame, info = clustered(seed=11)
    ref = smf.mixedlm("value ~ C(group, Treatment('control'))", frame, groups=frame["subject"]).fit(
        reml=True
    )
    name = "C(group, Treatment('control'))[T.acute]"
    fit = fit_group_model(
        "mixed", frame["value"], frame["subject"], info, ["control", "acute", "chronic"]
    )
    terms = {t["term"]: t for t in fit.term_tests()}
    assert terms["group[acute]"]["estimate"] == pytest.approx(ref.fe_params[name], rel=1e-5)
    assert terms["group[acute]"]["std_error"] == pytest.approx(ref.bse_fe[name], rel=1e-4)


def test_not_estimable_fits_say_why():
    frame, info = clustered()
    one = info.assign(group="control")
    with pytest.warns(NotEstimableWarning, match="probe not estimable: fewer than 2 groups"):
        fit = fit_group_model("mixed", frame["value"], frame["subject"], one, ["control"],
                              what="probe")  # fmt: skip
    assert not fit.estimable and "fewer than 2 groups with subjects (control)" in fit.note
    flat = (frame["group"] != "control").astype(float)  # every control segment 0: separation
    with pytest.warns(NotEstimableWarning, match="separation: every segment of group\\(s\\)"):
        gee = fit_group_model("gee", flat, frame["subject"], info, ["control", "acute", "chronic"])
    assert gee.path == GEE_PATH and math.isnan(gee.to_frame()["p_value"].iloc[0])
    with pytest.raises(ValueError, match="subjects table lacks subjects of the model data"):
        fit_group_model("mixed", [1.0], ["nobody"], info, ["control"])


def test_integer_subject_ids_fit_as_their_text_does():
    # The reviewer's case: integer IDs in both the data and the subjects table were refused
    # ("subjects table lacks subjects"). Same data with IDs 0..23 instead of "s00".."s23";
    # checked against statsmodels formula ols on the subject means (reference library).
    frame, info = clustered()
    number = {s: i for i, s in enumerate(info.index)}
    order = ["control", "acute", "chronic"]
    ids = frame["subject"].map(number).to_numpy()
    by_number = info.rename(index=number)
    fit = fit_group_model("subject-means", frame["value"], ids, by_number, order)
    means = frame.groupby(["subject", "group"], as_index=False)["value"].mean()
    ols = smf.ols("value ~ C(group, Treatment('control'))", means).fit()
    terms = {t["term"]: t for t in fit.term_tests()}
    name = "C(group, Treatment('control'))[T.acute]"
    assert terms["group[acute]"]["estimate"] == pytest.approx(ols.params[name], rel=1e-10)
    assert (fit.n_subjects, fit.n_observations) == (24, 144)
    # IDs as numbers in the data and as text in the table (or the reverse) match too
    text_table = info.rename(index=lambda s: str(number[s]))
    mixed = fit_group_model("subject-means", frame["value"], ids, text_table, order)
    assert next(mixed.term_tests())["estimate"] == terms["group[acute]"]["estimate"]
    with pytest.raises(
        ValueError, match=r"subjects table lacks subjects of the model data: \['99'\]"
    ):
        fit_group_model("subject-means", [1.0], [99], by_number, order)


def test_unknown_kind_is_a_value_error_listing_the_kinds():
    frame, info = clustered()
    with pytest.raises(
        ValueError, match=r"kind must be one of \('mixed', 'subject-means', 'gee'\), got 'ols'"
    ):
        fit_group_model("ols", frame["value"], frame["subject"], info, ["control", "acute"])
