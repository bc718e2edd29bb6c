"""The study file is checked once, completely, when it is read (``cohort check`` and ``run``).

Sources of the rules tested here:
- TOML v1.0.0 specification (toml.io): ``nan`` and ``inf`` are valid floats; integers and
  floats are distinct types (``2000.0`` is a float).
- Python data model: ``bool`` is a subclass of ``int`` (so ``True`` passes ``int`` checks).
- numpy ``SeedSequence``: seeds are non-negative integers (numpy documentation).
- Confidence level strictly between 0 and 1: definition of a confidence interval.
- Lin's CCC and a sensitivity lie in [-1, 1] and [0, 1]; thresholds on them outside [0, 1]
  can never or always be met (definitions).
- Everything else (floors, key names, messages): common practice / this package's contract.
"""

from __future__ import annotations

import re
import subprocess
import sys
import textwrap
from dataclasses import fields
from pathlib import Path

import pytest

from cohort.analysis.pipeline import options_from_study
from cohort.cli import main
from cohort.demo import STUDY_TOML, write_demo
from cohort.domain import options as opts
from cohort.domain.options import CHECK_RULES, Checks
from cohort.domain.problems import StudyError
from cohort.io.settings import build_settings, read_study_file
from cohort.io.study import load_study

ROOT = Path(__file__).resolve().parents[2]

STUDY = """\
[study]
values = "values.csv"
subjects = "subjects.csv"
reference = "ref"
groups = ["control", "acute"]
"""


def write(tmp_path: Path, extra: str = "", study: str = STUDY) -> Path:
    path = tmp_path / "study.toml"
    path.write_text(study + "\n" + textwrap.dedent(extra), encoding="utf-8")
    return path


def problems_of(path: Path) -> list:
    with pytest.raises(StudyError) as info:
        read_study_file(path)
    return info.value.problems


# --- every refused case, located by file, table and key ------------------------------------

REFUSED = [
    # [analysis]: integers are TOML integers (TOML spec: 2000.0 is a float)
    ("n_boot-float", "[analysis]\nn_boot = 2000.5", "[analysis] n_boot"),
    ("n_boot-whole-float", "[analysis]\nn_boot = 2000.0", "[analysis] n_boot"),
    ("n_boot-bool", "[analysis]\nn_boot = true", "[analysis] n_boot"),  # bool is an int
    ("n_boot-below-floor", "[analysis]\nn_boot = 19", "[analysis] n_boot"),  # MIN_N_BOOT = 20
    ("n_boot-one", "[analysis]\nn_boot = 1", "[analysis] n_boot"),
    ("n_boot-negative", "[analysis]\nn_boot = -5", "[analysis] n_boot"),
    ("n_boot-huge", "[analysis]\nn_boot = 1000001", "[analysis] n_boot"),  # MAX_N_BOOT
    ("n_boot-text", '[analysis]\nn_boot = "2000"', "[analysis] n_boot"),
    ("seed-negative", "[analysis]\nseed = -1", "[analysis] seed"),  # numpy SeedSequence
    ("seed-float", "[analysis]\nseed = 1.5", "[analysis] seed"),
    ("seed-bool", "[analysis]\nseed = false", "[analysis] seed"),
    ("level-zero", "[analysis]\nconfidence_level = 0", "[analysis] confidence_level"),
    ("level-one", "[analysis]\nconfidence_level = 1.0", "[analysis] confidence_level"),
    ("level-percent", "[analysis]\nconfidence_level = 95", "[analysis] confidence_level"),
    ("level-nan", "[analysis]\nconfidence_level = nan", "[analysis] confidence_level"),
    ("strata-unknown", '[analysis]\nstrata = ["all", "sex"]', "[analysis] strata"),
    ("strata-empty", "[analysis]\nstrata = []", "[analysis] strata"),
    ("strata-text", '[analysis]\nstrata = "all"', "[analysis] strata"),
    ("strata-twice", '[analysis]\nstrata = ["all", "all"]', "[analysis] strata"),
    ("ratio-unknown", '[analysis]\nratio_parameters = ["t2star"]', "[analysis] ratio_parameters"),
    ("ratio-field", '[analysis]\nratio_parameters = ["field"]', "[analysis] ratio_parameters"),
    ("error-ratio-zero", "[analysis]\nerror_ratio = 0", "[analysis] error_ratio"),
    ("error-ratio-inf", "[analysis]\nerror_ratio = inf", "[analysis] error_ratio"),
    ("regression-int", "[analysis]\nregression_limits = 1", "[analysis] regression_limits"),
    ("correction", '[analysis]\ncorrection = "bonferroni"', "[analysis] correction"),
    ("ccc-above-1", "[analysis]\nccc_min = 1.2", "[analysis] ccc_min"),
    ("ccc-below-0", "[analysis]\nccc_min = -0.1", "[analysis] ccc_min"),
    ("ccc-bool", "[analysis]\nccc_min = true", "[analysis] ccc_min"),
    ("sensitivity-2", "[analysis]\nsensitivity_max = 2", "[analysis] sensitivity_max"),
    ("bias-ratio-zero", "[analysis]\nbias_ratio = 0", "[analysis] bias_ratio"),
    ("bias-ratio-negative", "[analysis]\nbias_ratio = -2", "[analysis] bias_ratio"),
    ("bias-ratio-below-1", "[analysis]\nbias_ratio = 0.5", "[analysis] bias_ratio"),
    ("bias-ratio-inf", "[analysis]\nbias_ratio = inf", "[analysis] bias_ratio"),
    ("pb-negative", "[analysis]\npb_max_pairs = -1", "[analysis] pb_max_pairs"),
    ("pb-float", "[analysis]\npb_max_pairs = 1e6", "[analysis] pb_max_pairs"),
    ("workers-negative", "[analysis]\nworkers = -1", "[analysis] workers"),
    ("workers-float", "[analysis]\nworkers = 2.0", "[analysis] workers"),
    ("workers-bool", "[analysis]\nworkers = true", "[analysis] workers"),
    ("figures-in-file", "[analysis]\nfigures = false", "unknown key 'figures' in [analysis]"),
    ("analysis-not-table", 'TOP:analysis = "fast"', "[analysis] must be a table"),
    # [checks]
    ("r2star-max-nan", "[checks]\nr2star_max = nan", "[checks] r2star_max"),
    ("r2star-max-zero", "[checks]\nr2star_max = 0", "[checks] r2star_max"),
    ("r2star-max-bool", "[checks]\nr2star_max = true", "[checks] r2star_max"),
    ("ff-below-negative", "[checks]\nff_below_zero_tolerance = -1", "ff_below_zero_tolerance"),
    ("ff-above-inf", "[checks]\nff_above_100_tolerance = inf", "[checks] ff_above_100_tolerance"),
    ("t2-tolerance-2", "[checks]\nt2star_r2star_tolerance = 2", "t2star_r2star_tolerance"),
    ("field-max-neg", "[checks]\nfield_max_abs_hz = -inf", "[checks] field_max_abs_hz"),
    ("implausible-word", '[checks]\nimplausible = "drop"', "[checks] implausible"),
    ("implausible-bool", "[checks]\nimplausible = true", "[checks] implausible"),
    ("confirmed-int", "[checks]\nff_percent_confirmed = 1", "[checks] ff_percent_confirmed"),
    ("confirmed-text", '[checks]\nff_percent_confirmed = "yes"', "ff_percent_confirmed"),
    ("checks-unknown", "[checks]\nr2_max = 500.0", "unknown key 'r2_max' in [checks]"),
    # [units]: only ff and field are configurable (T2* is read in ms, R2* in 1/s)
    ("ff-unit", '[units]\nff = "procent"', "[units] ff"),
    ("field-unit", '[units]\nfield = "T"', "[units] field"),
    ("t2star-unit", '[units]\nt2star = "ms"', "[units] t2star is not configurable"),
    ("r2star-unit", '[units]\nr2star = "1/s"', "[units] r2star is not configurable"),
    # [field]
    ("referencing", '[field]\nreferencing = "global"', "[field] referencing"),
    ("remote-zero", "[field]\nremote_segments = [0]", "[field] remote_segments"),
    ("remote-float", "[field]\nremote_segments = [1.0]", "[field] remote_segments"),
    ("remote-text", '[field]\nremote_segments = "1,2"', "[field] remote_segments"),
    ("remote-missing", '[field]\nreferencing = "remote"', "[field] referencing = 'remote' needs"),
    # [findings] and its sub-tables
    ("swap-margin-nan", "[findings]\nswap_margin = nan", "[findings] swap_margin"),
    ("swap-margin-neg", "[findings]\nswap_margin = -1", "[findings] swap_margin"),
    ("use-defaults", '[findings]\nuse_defaults = "yes"', "[findings] use_defaults"),
    ("magnitude", '[findings]\nmagnitude_only_methods = "fast"', "magnitude_only_methods"),
    ("threshold-nan", "[findings.fat]\nthreshold = nan", "[findings.fat] threshold"),
    ("threshold-bool", "[findings.fat]\nthreshold = true", "[findings.fat] threshold"),
    ("thresholds-inf", '[findings.hemorrhage]\nthresholds = { "1.5" = inf }', "thresholds"),
    ("thresholds-tesla", '[findings.hemorrhage]\nthresholds = { "-3" = 50.0 }', "thresholds"),
    ("k-negative", "[findings.r]\nparameter = 'ff'\nkind = 'remote'\nk = -1", "[findings.r] k"),
    ("min-segments-zero", "[findings.fat]\nmin_segments = 0", "[findings.fat] min_segments"),
    ("min-segments-float", "[findings.fat]\nmin_segments = 2.0", "[findings.fat] min_segments"),
    ("min-segments-bool", "[findings.fat]\nmin_segments = true", "[findings.fat] min_segments"),
    ("parameter", '[findings.fat]\nparameter = "pdff"', "[findings.fat] parameter"),
    ("finding-key", "[findings.fat]\ntreshold = 5.0", "unknown key 'treshold' in [findings.fat]"),
    ("new-finding", "[findings.scar]\nthreshold = 5.0", "[findings.scar] needs 'parameter'"),
    ("switch-off-typo", "[findings.hemorhage]\nenabled = false", "[findings.hemorhage] switches"),
    # unknown tables and keys
    ("report-table", "[report]\ntitle = 'x'", "unknown table [report]"),
    ("typo-table", "[anlysis]\nseed = 1", "unknown table [anlysis]"),
    ("outside-table", "TOP:seed = 3", "key 'seed' is outside any table"),
]


@pytest.mark.parametrize("name, extra, where", REFUSED, ids=[case[0] for case in REFUSED])
def test_each_bad_value_is_refused_at_read_time_with_its_location(tmp_path, name, extra, where):
    if extra.startswith("TOP:"):  # a key before the first table
        path = write(tmp_path, study=extra[4:] + "\n" + STUDY)
    else:
        path = write(tmp_path, extra)
    problems = problems_of(path)
    matching = [p for p in problems if where in p.detail]
    assert matching, [str(p) for p in problems]
    assert all(p.code == "study-option" and p.file == str(path) for p in problems)
    assert len(problems) == 1, [str(p) for p in problems]  # one problem, no echoes


STUDY_REFUSED = [
    ("groups-text", 'groups = "control"', "[study] groups"),
    ("groups-twice", 'groups = ["a", "a"]', "[study] groups"),
    ("groups-number", "groups = [1, 2]", "[study] groups"),
    ("groups-blank", 'groups = ["a", " "]', "[study] groups"),
    ("labels-not-table", 'groups = ["a"]\ngroup_labels = "A"', "[study] group_labels"),
    ("labels-not-text", 'groups = ["a"]\n[study.group_labels]\na = 3', "[study] group_labels"),
    ("labels-undeclared", 'groups = ["a"]\n[study.group_labels]\nb = "B"', "group_labels] b"),
    ("identifying-text", 'identifying_columns = "mrn"', "[study] identifying_columns"),
    ("identifying-blank", 'identifying_columns = ["mrn", ""]', "[study] identifying_columns"),
    ("identifying-number", "identifying_columns = [7]", "[study] identifying_columns"),
    ("title-number", "title = 3", "[study] title"),
    ("segment-model", 'segment_model = "aha18"', "[study] segment_model"),
    ("reference-blank", 'reference2 = "x"', "unknown key 'reference2' in [study]"),
]

BASE = 'values = "values.csv"\nsubjects = "subjects.csv"\nreference = "ref"\n'


@pytest.mark.parametrize("name, lines, where", STUDY_REFUSED, ids=[c[0] for c in STUDY_REFUSED])
def test_bad_study_table_values_are_located(tmp_path, name, lines, where):
    path = write(tmp_path, study="[study]\n" + BASE + lines + "\n")
    problems = problems_of(path)
    assert [p for p in problems if where in p.detail], [str(p) for p in problems]
    assert all(p.code == "study-option" and p.file == str(path) for p in problems)


def test_required_keys_and_the_study_table_are_needed(tmp_path):
    path = write(tmp_path, study='[study]\nvalues = "v.csv"\nreference = ""\n')
    details = [p.detail for p in problems_of(path)]
    assert "[study] needs 'subjects'" in details
    assert any(d.startswith("[study] reference is not valid") for d in details)
    path = write(tmp_path, study='[units]\nff = "percent"\n')
    assert [p.detail for p in problems_of(path)] == ["[study] is missing"]


def test_remote_segments_must_belong_to_the_segment_model(tmp_path):
    # AHA 16-segment model has no apex segment 17 (Cerqueira et al. 2002)
    path = write(
        tmp_path,
        '[field]\nreferencing = "remote"\nremote_segments = [16, 17]\n',
        STUDY + 'segment_model = "aha16"\n',
    )
    (problem,) = problems_of(path)
    assert "[field] remote_segments names a segment outside the model 'aha16'" in problem.detail


def test_one_error_lists_problems_of_every_table(tmp_path):
    path = write(
        tmp_path,
        """
        [units]
        ff = "procent"
        [field]
        referencing = "global"
        [checks]
        r2star_max = nan
        [analysis]
        n_boot = 2000.5
        [findings]
        swap_margin = inf
        """,
        STUDY + "title = 3\n",
    )
    problems = problems_of(path)
    tables = {re.match(r"\[(\w+)", p.detail).group(1) for p in problems}
    assert tables == {"study", "units", "field", "checks", "analysis", "findings"}
    assert len(problems) == 6


def test_did_you_mean_hints(tmp_path):
    path = write(
        tmp_path,
        """
        [anlysis]
        [analysis]
        n_boots = 100
        correction = "hol"
        [units]
        ff = "procent"
        [findings.hemorrhage]
        treshold = 60.0
        """,
        STUDY + "seed = 1\n",
    )
    text = "\n".join(str(p) for p in problems_of(path))
    assert "unknown table [anlysis]; did you mean 'analysis'?" in text
    assert "unknown key 'n_boots' in [analysis]; did you mean 'n_boot'?" in text
    assert "unknown key 'seed' in [study]; did you mean 'seed' in [analysis]?" in text
    assert "[analysis] correction is not valid; did you mean 'holm'?" in text
    assert "[units] ff is not valid; did you mean 'percent'?" in text
    assert "unknown key 'treshold' in [findings.hemorrhage]; did you mean 'threshold'?" in text


def test_traps_are_explained(tmp_path):
    path = write(tmp_path, "[analysis]\nn_boot = 2000.0\nseed = true\nccc_min = nan\n")
    text = "\n".join(str(p) for p in problems_of(path))
    assert "without a decimal point" in text  # TOML: 2000.0 is a float
    assert "true/false is not a number" in text  # Python: bool is an int subclass
    assert "nan and inf are not accepted" in text  # TOML allows nan


# --- unreadable files ------------------------------------------------------------------------


def test_unreadable_study_files_give_a_study_error(tmp_path, monkeypatch):
    folder = tmp_path / "folder.toml"
    folder.mkdir()
    binary = tmp_path / "binary.toml"
    binary.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR")
    latin = tmp_path / "latin.toml"
    latin.write_bytes('[study]\ntitle = "Müller"\n'.encode("latin-1"))
    broken = tmp_path / "broken.toml"
    broken.write_text("[study\n", encoding="utf-8")
    cases = [
        (folder, "file-unreadable", "folder"),
        (binary, "file-unreadable", "binary"),
        (latin, "file-unreadable", "not UTF-8"),
        (broken, "study-file", "not valid TOML"),
        (tmp_path / "none.toml", "file-missing", "not found"),
    ]
    for path, code, words in cases:
        (problem,) = problems_of(path)
        assert (problem.code, problem.file) == (code, str(path)) and words in problem.detail

    def refuse(self):
        raise PermissionError(13, "Permission denied")

    good = write(tmp_path)
    monkeypatch.setattr(Path, "read_bytes", refuse)
    (problem,) = problems_of(good)
    assert problem.code == "file-unreadable" and "Permission denied" in problem.detail


# --- the command line ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "extra, message",
    [
        ("[analysis]\nn_boot = 2000.5", "[analysis] n_boot is not valid"),
        ("[checks]\nr2star_max = nan", "[checks] r2star_max is not valid"),
        ("[findings]\nswap_margin = -1", "[findings] swap_margin is not valid"),
        ("[units]\nt2star = 'ms'", "[units] t2star is not configurable"),
        ("[report]\ntitle = 'x'", "unknown table [report]"),
    ],
)
def test_cohort_check_exits_2_without_traceback(tmp_path, capsys, extra, message):
    path = write(tmp_path, extra)
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert message in err and str(path) in err and "Traceback" not in err


def test_cohort_check_on_a_folder_exits_2(tmp_path, capsys):
    assert main(["check", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert "is a folder" in err and "Traceback" not in err


@pytest.mark.parametrize(
    "flag, value, name",
    [("--bootstrap", "5", "n_boot"), ("--seed", "-1", "seed"), ("--workers", "-1", "workers")],
)
def test_run_flags_obey_the_same_rules(tmp_path, capsys, flag, value, name):
    study_file = write_demo(tmp_path / "demo", n_subjects=6)
    out = tmp_path / "out"
    assert main(["run", str(study_file), "--out", str(out), flag, value, "--quiet"]) == 2
    err = capsys.readouterr().err
    assert f"option '{name}' ({flag}) is not valid" in err and "Traceback" not in err
    assert not out.exists()  # nothing written


def test_overrides_are_checked_like_the_file(tmp_path):
    study = load_study(write_demo(tmp_path, n_subjects=6))
    for override in ({"n_boot": 1}, {"n_boot": 20.0}, {"seed": -1}, {"seed": True},
                     {"workers": -1}, {"confidence_level": 1.0}, {"strata": ("sex",)}):  # fmt: skip
        with pytest.raises(StudyError) as info:
            options_from_study(study, **override)
        (problem,) = info.value.problems
        assert problem.file == "options_from_study()" and next(iter(override)) in problem.detail
        assert "--" not in problem.detail  # no command-line flag named in a Python call
    assert options_from_study(study, n_boot=0).n_boot == 0  # 0 = analytic intervals only
    assert options_from_study(study, n_boot=opts.MIN_N_BOOT).n_boot == opts.MIN_N_BOOT
    with pytest.raises(TypeError, match="unknown options"):
        options_from_study(study, n_bootstrap=20)


def test_flag_form_obeys_the_same_rules():
    with pytest.raises(StudyError) as info:
        build_settings(
            values="v.csv",
            subjects="s.csv",
            reference="ref",
            groups=("a", "a"),
            remote_segments=("0", "x"),
            checks={"r2star_max": float("nan"), "implausible": "drop"},
            identifying_columns=("mrn", 3),
        )
    details = [p.detail for p in info.value.problems]
    for where in ("[study] groups", "[field] remote_segments", "[checks] r2star_max",
                  "[checks] implausible", "[study] identifying_columns"):  # fmt: skip
        assert any(d.startswith(where) for d in details), details
    assert {p.file for p in info.value.problems} == {"command line"}
    settings = build_settings(
        values="v.csv", subjects="s.csv", reference="ref", remote_segments=("1", "2"),
        field_referencing="remote", checks=Checks(implausible="exclude"),
    )  # fmt: skip
    assert settings.remote_segments == (1, 2) and settings.checks.implausible == "exclude"


# --- what passes ----------------------------------------------------------------------------


def test_identifying_columns_and_checks_are_parsed(tmp_path):
    path = write(
        tmp_path,
        '[checks]\nimplausible = "exclude"\nff_percent_confirmed = true\nr2star_max = 800\n',
        STUDY + 'identifying_columns = ["hospital_number", " initials "]\n',
    )
    settings = read_study_file(path)
    assert settings.identifying_columns == ("hospital_number", "initials")
    assert settings.checks == Checks(
        implausible="exclude", ff_percent_confirmed=True, r2star_max=800.0
    )
    assert isinstance(settings.checks.r2star_max, float)


def _readme_toml_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    return re.findall(r"```toml\n(.*?)```", text, flags=re.S)


def _docstring_example(module, start: str, stop: str) -> str:
    doc = module.__doc__
    return textwrap.dedent(doc[doc.index(start) :].split("::", 1)[1].split(stop)[0])


def test_documented_and_demo_study_files_pass(tmp_path):
    from cohort.domain import options, thresholds
    from cohort.io import settings

    read_study_file(ROOT / "demo_cohort" / "study.toml")
    read_study_file(write(tmp_path, study=STUDY_TOML))
    read_study_file(write(tmp_path, study=_docstring_example(settings, "A study file", "Tables")))
    blocks = _readme_toml_blocks()
    assert blocks and "[study]" in blocks[0]
    read_study_file(write(tmp_path, study=blocks[0]))
    for block in blocks[1:]:
        read_study_file(write(tmp_path, block, STUDY))
    for example in (
        _docstring_example(options, "The ``[analysis]`` table", "Command-line"),
        _docstring_example(thresholds, "Study file format", "The rules of every key"),
    ):
        read_study_file(write(tmp_path, example, STUDY))


def test_the_bootstrap_floor_and_integers(tmp_path):
    for value in (0, opts.MIN_N_BOOT, 2000, opts.MAX_N_BOOT):
        path = write(tmp_path, f"[analysis]\nn_boot = {value}\nseed = 0\nworkers = 0\n")
        assert read_study_file(path).options.n_boot == value


# --- one place for each fact ------------------------------------------------------------------


def test_every_option_has_a_rule():
    run_fields = {f.name for f in fields(opts.RunOptions)}
    assert set(opts.ANALYSIS_RULES) == run_fields - {"figures"}
    assert set(opts.OVERRIDE_RULES) == run_fields
    assert set(CHECK_RULES) == {f.name for f in fields(Checks)}
    defaults = opts.RunOptions()
    for key, rule in opts.ANALYSIS_RULES.items():
        value = getattr(defaults, key)
        assert rule.accepts(list(value) if isinstance(value, tuple) else value), key
    for key, rule in CHECK_RULES.items():
        assert rule.accepts(getattr(Checks(), key)), key


def test_every_offered_correction_is_one_the_estimators_know():
    from cohort.stats import multiplicity

    for correction in opts.CORRECTIONS:
        multiplicity.check_correction(correction)


def test_the_input_edge_does_not_import_the_analysis():
    code = (
        "import sys, cohort.io.settings; "
        "print(sorted(m for m in ('cohort.analysis.pipeline', 'cohort.analysis.agreement_table', "
        "'cohort.stats.bootstrap') if m in sys.modules))"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert result.returncode == 0 and result.stdout.strip() == "[]", result.stderr
