"""Segment-level models of groups (cohort.analysis.group_models over cohort.stats.models).

Sources named beside each check: statsmodels 0.15 formula fits (mixedlm, gee, ols) as the
reference library. The demo cohort is used for integration.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import stats
from statsmodels.tools.sm_exceptions import ConvergenceWarning

from cohort.analysis.group_models import (
    FINDING_BY_GROUP,
    GROUP_DIFFERENCE,
    METHOD_BY_GROUP,
    finding_models,
    group_models,
)
from cohort.parallel import can_fork
from cohort.stats.models import JOINT_GROUP, MIXED_PATH, SUBJECT_MEANS_PATH
from cohort.stats.results import NotEstimableWarning

from ..stats.group_data import ORDER
from .group_data import demo_findings


@pytest.fixture
def study(demo_study):
    return demo_study


@pytest.fixture
def result(demo_groups):
    return demo_groups


def joint_wald(res, names):
    r = np.zeros((len(names), len(res.params)))
    for i, name in enumerate(names):
        r[i, list(res.params.index).index(name)] = 1.0
    return float(np.squeeze(res.wald_test(r, scalar=True).statistic))


def test_mixed_model_matches_a_direct_statsmodels_fit(study, result):
    # statsmodels formula mixedlm, REML, random intercept per subject (reference library)
    v = study.values
    part = v[v["parameter"].eq("r2star") & v["method"].eq("reference-fit")]
    fit = smf.mixedlm("value ~ C(group, Treatment('control'))", part, groups=part["subject"]).fit(
        reml=True
    )
    rows = result.models[
        result.models["model"].eq(GROUP_DIFFERENCE)
        & result.models["parameter"].eq("r2star")
        & result.models["method"].eq("reference-fit")
    ].set_index("term")
    assert (rows["path"] == MIXED_PATH).all()
    for g in ("acute", "chronic"):
        name = f"C(group, Treatment('control'))[T.{g}]"
        assert rows.loc[f"group[{g}]", "estimate"] == pytest.approx(fit.fe_params[name], rel=1e-5)
        assert rows.loc[f"group[{g}]", "std_error"] == pytest.approx(fit.bse_fe[name], rel=1e-4)
        assert rows.loc[f"group[{g}]", "p_value"] == pytest.approx(fit.pvalues[name], rel=1e-3)
    names = [f"C(group, Treatment('control'))[T.{g}]" for g in ("acute", "chronic")]
    assert rows.loc[JOINT_GROUP, "statistic"] == pytest.approx(joint_wald(fit, names), rel=1e-4)
    assert rows.loc[JOINT_GROUP, "df"] == 2


def test_method_group_interaction_matches_a_direct_fit(study, result):
    # statsmodels mixedlm on test - reference per segment (reference library), fitted with
    # Nelder-Mead: its default BFGS stops short here (REML variance at the boundary, 0)
    p = study.paired
    part = p[p["parameter"].eq("r2star") & p["method"].eq("quickmap")].assign(
        diff=lambda f: f["test_value"] - f["reference_value"]
    )
    model = smf.mixedlm("diff ~ C(group, Treatment('control'))", part, groups=part["subject"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)  # "MLE may be on the boundary"
        fit = model.fit(reml=True, method=["nm"])
    assert fit.converged
    names = [f"C(group, Treatment('control'))[T.{g}]" for g in ("acute", "chronic")]
    rows = result.models[
        result.models["model"].eq(METHOD_BY_GROUP)
        & result.models["parameter"].eq("r2star")
        & result.models["method"].astype(str).eq("quickmap")
    ]
    joint = rows[rows["term"].eq(JOINT_GROUP)].iloc[0]
    assert joint["statistic"] == pytest.approx(joint_wald(fit, names), rel=1e-4)
    assert joint["p_value"] == pytest.approx(stats.chi2.sf(joint_wald(fit, names), 2), rel=1e-3)
    # the planted truth of the demo: quickmap compresses hemorrhagic R2* (acute only)
    assert rows.set_index("term").loc["group[acute]", "estimate"] < 0


def test_gee_matches_a_direct_statsmodels_fit(study, result):
    # statsmodels formula gee, binomial, exchangeable, clustered by subject (reference library)
    segment, _ = demo_findings(study.values)
    part = segment[segment["method"].eq("reference-fit") & segment["finding"].eq("field shift")]
    part = part.assign(y=part["positive"].astype(float))
    fit = smf.gee(
        "y ~ C(group, Treatment('control'))", groups="subject", data=part,
        family=sm.families.Binomial(), cov_struct=sm.cov_struct.Exchangeable(),
    ).fit()  # fmt: skip
    rows = result.models[
        result.models["model"].eq(FINDING_BY_GROUP)
        & result.models["method"].eq("reference-fit")
        & result.models["finding"].eq("field shift")
    ].set_index("term")
    for g in ("acute", "chronic"):
        name = f"C(group, Treatment('control'))[T.{g}]"
        assert rows.loc[f"group[{g}]", "estimate"] == pytest.approx(fit.params[name], rel=1e-6)
        assert rows.loc[f"group[{g}]", "std_error"] == pytest.approx(fit.bse[name], rel=1e-6)
    names = [f"C(group, Treatment('control'))[T.{g}]" for g in ("acute", "chronic")]
    assert rows.loc[JOINT_GROUP, "statistic"] == pytest.approx(joint_wald(fit, names), rel=1e-6)


@pytest.mark.skipif(not can_fork(), reason="worker processes are forked on Linux only")
def test_gee_fits_in_worker_processes_give_the_same_table(study, result):
    segment, _ = demo_findings(study.values)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        forked = finding_models(segment, study.subjects, ORDER, workers=2)
    serial = result.models[result.models["model"].eq(FINDING_BY_GROUP)].reset_index(drop=True)
    pd.testing.assert_frame_equal(forked, serial, check_exact=True)
    assert any("separation" in str(w.message) for w in caught)  # repeated from the workers


def test_gee_separation_is_not_estimable_with_the_reason(result):
    rows = result.models[result.models["finding"].eq("hemorrhage")]
    assert (rows["term"] == JOINT_GROUP).all() and rows["p_value"].isna().all()
    assert rows["note"].str.contains("separation: every segment of group\\(s\\) control").all()


def test_subject_means_path_equals_the_mixed_model_on_a_balanced_design(study):
    # balanced (every subject 17 segments): GLS of the random-intercept model = OLS on the
    # subject means (algebra; see MIXED_MODEL_MAX_OBSERVATIONS), statsmodels MixedLM fit
    v = study.values
    part = v[v["parameter"].eq("r2star") & v["method"].eq("reference-fit")]
    # the demo leaves a few test values blank, so their reference partners are excluded:
    # keep the subjects with all 17 segments
    part = part[part.groupby("subject")["segment"].transform("size").eq(17)]
    assert part.groupby("subject").size().nunique() == 1 and part["subject"].nunique() > 40
    mixed = group_models(part, study.subjects, ORDER, path="mixed").set_index("term")
    means = group_models(part, study.subjects, ORDER, path="subject-means").set_index("term")
    assert (means["path"] == SUBJECT_MEANS_PATH).all()
    for term in ("group[acute]", "group[chronic]"):
        assert means.loc[term, "estimate"] == pytest.approx(mixed.loc[term, "estimate"], rel=1e-6)
        assert means.loc[term, "std_error"] == pytest.approx(mixed.loc[term, "std_error"], rel=1e-3)
    # statsmodels OLS on the subject means, F test of the group terms
    subject_means = part.groupby(["subject", "group"], as_index=False)["value"].mean()
    ols = smf.ols("value ~ C(group, Treatment('control'))", subject_means).fit()
    f = ols.f_test(
        "C(group, Treatment('control'))[T.acute] = 0, C(group, Treatment('control'))[T.chronic] = 0"
    )
    assert means.loc[JOINT_GROUP, "statistic"] == pytest.approx(float(np.squeeze(f.fvalue)))
    assert means.loc[JOINT_GROUP, "df_denominator"] == ols.df_resid


def test_covariates_enter_the_model_and_constant_ones_are_not_estimable(study):
    v = study.values
    part = v[v["parameter"].eq("r2star") & v["method"].eq("reference-fit")]
    rows = group_models(
        part, study.subjects, ORDER, covariates=("age", "sex"), path="subject-means"
    )
    assert {"age", "sex[M]"} <= set(rows["term"])
    age = rows.set_index("term").loc["age"]
    assert math.isnan(age["p_adjusted"]) and age["correction"].startswith("none")
    constant = study.subjects.assign(site="A", coil=8.0)
    for covariate in ("site", "coil"):
        with pytest.warns(NotEstimableWarning, match=f"covariate\\(s\\) {covariate} constant"):
            out = group_models(part, constant, ORDER, covariates=(covariate,), path="mixed")
        assert out["p_value"].isna().all()
    collinear = study.subjects.assign(
        dose=study.subjects["group"].map({"control": 0, "acute": 1, "chronic": 1})
    )
    with pytest.warns(NotEstimableWarning, match="rank deficient"):
        group_models(part, collinear, ORDER, covariates=("dose",), path="subject-means")


def test_input_errors_name_argument_rule_and_value(study):
    with pytest.raises(ValueError, match="path must be one of"):
        group_models(study.values, study.subjects, path="fast")
    with pytest.raises(ValueError, match="subjects must be given when covariates are requested"):
        finding_models(demo_findings(study.values)[0], covariates=("age",))
