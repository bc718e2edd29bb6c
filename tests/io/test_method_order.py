"""The order and labels of a study's methods: ``[study] methods`` and
``[study.method_labels]`` when the study file is read, and the order every loaded table and
output follows (the reference first, then the test methods as listed, else in their order of
first appearance in the values table; never alphabetical).

Sources: this package's contract (cohort/io/method_order.py, the study-file table in the
README); the limits criterion in the analysis below is judged as Bland & Altman, Stat
Methods Med Res 1999 (limits against a difference set in advance) with the confidence bounds
as Stöckl et al., Clin Chem 2004 (memory); the invented values are made so that each
method's bias is known by construction.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from cohort.analysis.pipeline import analyse, options_from_study
from cohort.domain.problems import StudyError
from cohort.io.method_order import levels, method_order, method_problems, ordered_methods
from cohort.io.settings import build_settings, read_study_file
from cohort.io.study import load_study

# --- method_order and ordered_methods ------------------------------------------------------


def test_default_order_is_first_appearance_not_alphabetical():
    present = ["zeta", "ref", "alpha", "zeta", "mid", "alpha"]
    assert method_order(present, "ref") == ("ref", "zeta", "alpha", "mid")


def test_listed_order_then_unlisted_in_order_of_appearance():
    present = ["zeta", "ref", "alpha", "mid"]
    assert method_order(present, "ref", ["mid", "zeta", "alpha"]) == ("ref", "mid", "zeta", "alpha")
    # a partial list: listed first, the rest as they appear; absent names are left out
    assert method_order(present, "ref", ["mid", "gone"]) == ("ref", "mid", "zeta", "alpha")
    # the reference is always first, wherever it appears
    assert method_order(["a", "b", "ref"], "ref", ["b"])[0] == "ref"


def test_categorical_and_non_text_names_are_ordered_as_text():
    present = pd.Categorical(["b", "ref", "a"], categories=["a", "b", "ref"])
    assert method_order(present, "ref") == ("ref", "b", "a")
    assert method_order([2, "ref", 1], "ref", ["1"]) == ("ref", "1", "2")


def test_ordered_methods_makes_a_categorical_in_the_given_order():
    frame = pd.DataFrame({"method": ["b", "a", "c", "a"], "x": [1, 2, 3, 4]})
    ordered_methods(frame, ("ref", "c", "a", "b"))
    # only the methods present become categories, in the given order
    assert list(frame["method"].cat.categories) == ["c", "a", "b"]
    assert list(frame.sort_values("method")["x"]) == [3, 2, 4, 1]
    other = pd.DataFrame({"name": ["b"]})
    ordered_methods(other, ("b",))  # no method column: left as it is
    assert not isinstance(other["name"].dtype, pd.CategoricalDtype)


def test_levels_are_the_categories_that_occur_else_first_appearance():
    column = pd.Series(pd.Categorical(["a", "c", "a"], categories=["c", "b", "a"]))
    assert levels(column) == ["c", "a"]  # category order, unused "b" left out
    assert levels(pd.Series(["z", "a", "z", "m"])) == ["z", "a", "m"]


# --- [study] methods and [study.method_labels] when the study file is read -----------------

STUDY = '[study]\nvalues = "values.csv"\nsubjects = "subjects.csv"\nreference = "ref"\n'


def read_problems(tmp_path: Path, lines: str) -> list:
    path = tmp_path / "study.toml"
    path.write_text(STUDY + textwrap.dedent(lines), encoding="utf-8")
    with pytest.raises(StudyError) as info:
        read_study_file(path)
    assert {p.file for p in info.value.problems} == {str(path)}
    assert {p.code for p in info.value.problems} == {"study-option"}
    return info.value.problems


@pytest.mark.parametrize(
    ("lines", "detail", "value"),
    [
        ('methods = ["fast", "ref"]', "[study] methods lists the reference", "ref"),
        ('methods = [" ref "]', "[study] methods lists the reference", "ref"),
        ('methods = ["fast", "fast"]', "[study] methods is not valid", "[fast, fast]"),
        ('methods = ["fast", " fast"]', "[study] methods is not valid", "[fast,  fast]"),
        ("methods = []", "[study] methods is not valid", "[]"),
        ('methods = "fast"', "[study] methods is not valid", "fast"),
        ('methods = ["fast", ""]', "[study] methods is not valid", "[fast, ]"),
        ("methods = [1, 2]", "[study] methods is not valid", "[1, 2]"),
        ('methods = ["fast"]\nmethod_labels = "Fast"', "[study] method_labels is not valid",
         "Fast"),
        ('methods = ["fast"]\n[study.method_labels]\nfast = 3',
         "[study] method_labels is not valid", "{fast = 3}"),
        ('methods = ["fast", "slow"]\n[study.method_labels]\nfats = "F"',
         "[study.method_labels] fats labels a method that [study] methods does not list (it "
         "lists ['fast', 'slow', 'ref']; a misspelling may be in either key)", "fats"),
    ],
)  # fmt: skip
def test_bad_methods_and_labels_are_located(tmp_path, lines, detail, value):
    (problem,) = read_problems(tmp_path, lines + "\n")
    assert problem.detail.startswith(detail), problem.detail
    assert problem.value == value


def test_labels_may_name_the_reference_and_listed_methods(tmp_path):
    path = tmp_path / "study.toml"
    path.write_text(
        STUDY + 'methods = [" slow ", "fast"]\n[study.method_labels]\n'
        'ref = "Reference fit"\nfast = "Fast fit"\n',
        encoding="utf-8",
    )
    settings = read_study_file(path)
    assert settings.methods == ("slow", "fast")  # names trimmed like every name
    assert settings.method_labels == {"ref": "Reference fit", "fast": "Fast fit"}
    assert settings.to_dict()["methods"] == ["slow", "fast"]
    assert settings.to_dict()["method_labels"] == {"ref": "Reference fit", "fast": "Fast fit"}


def test_build_settings_refuses_the_reference_among_methods():
    with pytest.raises(StudyError, match=r"\[study\] methods lists the reference") as info:
        build_settings(values="v.csv", subjects="s.csv", reference="ref", methods=["ref", "a"])
    assert info.value.problems[0].file == "command line"


# --- the order through load_study and analyse ----------------------------------------------

SUBJECTS = ("k1", "k2", "k3", "k4")
APPEARANCE = ("ref", "zeta", "alpha", "mid")
SHIFT = {"ref": 0.0, "zeta": 1.0, "alpha": -1.0, "mid": 3.0}
"""Bias of each method in 1/s, by construction (noise uniform within +/- 0.5 1/s)."""
LISTED = ("mid", "zeta", "alpha")


def write_cohort(folder: Path, study_lines: str = "") -> Path:
    """Values (R2*, 4 subjects x 17 segments, methods first appearing as ``APPEARANCE``),
    subjects and a study file in ``folder``."""
    rng = np.random.default_rng(1302)
    truth = {(s, seg): 24.0 + 0.4 * seg + i for i, s in enumerate(SUBJECTS) for seg in range(1, 18)}
    rows = [
        (s, method, seg, "r2star", round(t + SHIFT[method] + rng.uniform(-0.5, 0.5), 3))
        for method in APPEARANCE
        for (s, seg), t in truth.items()
    ]
    values = pd.DataFrame(rows, columns=["subject", "method", "segment", "parameter", "value"])
    values.to_csv(folder / "values.csv", index=False)
    pd.DataFrame({"subject": SUBJECTS, "group": "control", "field_strength": 1.5}).to_csv(
        folder / "subjects.csv", index=False
    )
    path = folder / "study.toml"
    path.write_text(STUDY + textwrap.dedent(study_lines), encoding="utf-8")
    return path


def load_problems(folder: Path, study_lines: str) -> list:
    with pytest.raises(StudyError) as info:
        load_study(write_cohort(folder, study_lines))
    return info.value.problems


def test_default_order_through_load_study(tmp_path):
    study = load_study(write_cohort(tmp_path))
    assert study.methods == ("ref", "zeta", "alpha", "mid")  # first appearance
    assert study.test_methods == ("zeta", "alpha", "mid")
    assert list(study.paired["method"].cat.categories) == ["zeta", "alpha", "mid"]
    assert list(study.paired["method"].unique()) == ["zeta", "alpha", "mid"]
    assert study.method_label("zeta") == "zeta"  # no label: the name


@pytest.fixture(scope="module")
def listed(tmp_path_factory):
    """The cohort with ``[study] methods``, labels and a limits criterion, and its analysis
    (B = 0: analytic intervals; only the whole cohort as stratum)."""
    folder = tmp_path_factory.mktemp("listed")
    lines = """\
    methods = ["mid", "zeta", "alpha"]
    [study.method_labels]
    mid = "Middle version"
    ref = "Reference fit"
    [acceptance.limits]
    r2star = 2.5
    """
    study = load_study(write_cohort(folder, lines))
    options = options_from_study(study, n_boot=0, figures=False, strata=("all",))
    return study, analyse(study, options)


def test_listed_order_in_the_study(listed):
    study, _ = listed
    assert study.methods == ("ref", *LISTED)
    assert study.test_methods == LISTED
    assert list(study.values["method"].cat.categories) == ["ref", *LISTED]
    paired = study.paired
    assert list(paired["method"].cat.categories) == list(LISTED)
    # paired rows: parameter, then method in the study's order, then subject and segment
    assert list(paired["method"].astype(str).unique()) == list(LISTED)
    assert (paired.groupby("method", observed=True).size() == 4 * 17).all()
    # the pairs still belong to their method: mean difference = the planted bias (+/- 0.5)
    diff = (paired["test_value"] - paired["reference_value"]).groupby(paired["method"].astype(str))
    for method, mean in diff.mean().items():
        assert abs(mean - SHIFT[method]) < 0.5, method


def test_labels(listed):
    study, _ = listed
    assert study.method_label("mid") == "Middle version"
    assert study.method_label("ref") == "Reference fit"
    assert study.method_label("alpha") == "alpha"


def test_method_verdicts_follow_the_study_order(listed):
    _, analysis = listed
    verdicts = analysis.tables["method_verdicts"]
    params = verdicts[verdicts["kind"].eq("parameter")]
    assert list(params["method"].astype(str).unique()) == list(LISTED)
    by = params.set_index(["method", "statistic"])["verdict"]
    # limits criterion 2.5 1/s: zeta (bias +1) and alpha (bias -1) have limits within
    # +/- (1 + 1.96 x 0.29 + CI) < 2.5; mid (bias +3) has its upper limit beyond +2.5 (fails)
    # and its lower limit near +2.4 >= -2.5 (meets): the rows belong to the right method
    assert by[("mid", "loa_high")] == "fails" and by[("mid", "loa_low")] == "meets"
    for method in ("zeta", "alpha"):
        assert by[(method, "loa_low")] == "meets" and by[(method, "loa_high")] == "meets"
    assert (params.loc[params["statistic"].eq("ccc"), "verdict"] == "not-assessed").all()


def test_agreement_and_detection_rows_follow_the_study_order(listed):
    # neither alphabetical (alpha, mid, zeta) nor first appearance (zeta, alpha, mid)
    _, analysis = listed
    for name in ("agreement", "findings_agreement"):
        table = analysis.tables[name]
        assert list(table["method"].astype(str).unique()) == list(LISTED), name
    agreement = analysis.tables["agreement"].set_index(["method", "stratum"])
    # each row is its method's: bias = the planted shift within the uniform noise (+/- 0.5)
    for method in LISTED:
        assert abs(agreement.loc[(method, "all"), "bias"] - SHIFT[method]) < 0.5


# --- problems found when the values table is read ------------------------------------------


def test_a_listed_method_absent_from_the_values_table(tmp_path):
    (problem,) = load_problems(tmp_path, 'methods = ["mid", "zeta", "alpha", "zeat"]\n')
    assert problem.code == "study-option" and Path(problem.file).name == "study.toml"
    assert (problem.column, problem.value) == ("methods", "zeat")
    assert problem.detail == (
        "[study] methods names a method that is not a test method of the values table; "
        "did you mean 'zeta'?"
    )


def test_a_test_method_missing_from_the_list(tmp_path):
    (problem,) = load_problems(tmp_path, 'methods = ["mid", "zeta"]\n')
    assert Path(problem.file).name == "study.toml"
    assert (problem.column, problem.value) == ("methods", "alpha")
    assert problem.detail.startswith("[study] methods does not list a test method")


def test_several_method_problems_at_once(tmp_path):
    problems = load_problems(tmp_path, 'methods = ["mid", "beta"]\n')
    assert sorted(p.value for p in problems) == ["alpha", "beta", "zeta"]
    assert {Path(p.file).name for p in problems} == {"study.toml"}


def test_labels_and_baseline_must_name_methods_of_the_values_table(tmp_path):
    lines = '[study.method_labels]\nzet = "Z"\nref = "R"\n[acceptance]\nbaseline = "ref"\n'
    problems = load_problems(tmp_path, lines)
    assert sorted((p.column, p.value) for p in problems) == [
        ("baseline", "ref"),  # the reference is not a test method
        ("method_labels", "zet"),  # the reference's own label is allowed
    ]
    label = next(p for p in problems if p.column == "method_labels")
    assert label.detail.endswith("did you mean 'zeta'?")
    assert Path(label.file).name == "study.toml"


def test_method_problems_without_a_list():
    # no [study] methods: nothing to list; labels and baseline checked against the table
    assert method_problems(["ref", "a", "b"], "ref", (), {"a": "A", "ref": "R"}, "b", "f") == []
    (problem,) = method_problems(["ref", "a"], "ref", (), {}, "c", "f")
    assert (problem.file, problem.column, problem.value) == ("f", "baseline", "c")
