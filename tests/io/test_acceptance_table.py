"""The ``[acceptance]`` table of a study file: criteria set in advance, checked when the study
file is read, every problem located by table and key and listed at once.

Sources of the rules:
- Bland & Altman, Stat Methods Med Res 1999;8:135-160: the largest acceptable difference L
  is set in advance, in the unit of the measurement; a difference limit is positive (both
  limits of agreement must lie within -L..+L).
- Lin's CCC lies in [-1, 1] (Lin, Biometrics 1989) and a sensitivity in [0, 1]; a minimum
  of 0 is always met, so a criterion lies in (0, 1] (definitions).
- TOML v1.0.0 (toml.io): ``3`` is an integer and ``3.0`` a float, ``nan``/``inf`` are floats.
- Everything else (key names, messages, did-you-mean): this package's contract.
"""

from __future__ import annotations

import re
import textwrap
from pathlib import Path

import pytest

from cohort.domain.acceptance import Acceptance
from cohort.domain.problems import StudyError
from cohort.io.acceptance_table import build_acceptance
from cohort.io.settings import build_settings, read_study_file

STUDY = """\
[study]
values = "values.csv"
subjects = "subjects.csv"
reference = "ref"
"""


def write(tmp_path: Path, extra: str, study_lines: str = "") -> Path:
    path = tmp_path / "study.toml"
    path.write_text(STUDY + study_lines + "\n" + textwrap.dedent(extra), encoding="utf-8")
    return path


def problems_of(path: Path) -> list:
    with pytest.raises(StudyError) as info:
        read_study_file(path)
    return info.value.problems


VALID = """
[acceptance]
baseline = " net-full "
[acceptance.limits]
ff = 3
r2star = 15.0
field = 4.5
[acceptance.findings]
hemorrhage = 0.8
fat = 1
[acceptance.ccc]
ff = 0.9
r2star = 1.0
"""


def test_a_valid_table_is_parsed_with_float_criteria(tmp_path):
    settings = read_study_file(write(tmp_path, VALID, 'methods = ["net-full", "quick"]\n'))
    a = settings.acceptance
    assert dict(a.limits) == {"ff": 3.0, "r2star": 15.0, "field": 4.5}
    assert dict(a.findings) == {"hemorrhage": 0.8, "fat": 1.0}
    assert dict(a.ccc) == {"ff": 0.9, "r2star": 1.0}
    # TOML integers 3 and 1 become floats (one type per criterion)
    values = [*a.limits.values(), *a.findings.values(), *a.ccc.values()]
    assert all(type(v) is float for v in values)
    assert a.baseline == "net-full"  # surrounding spaces removed, like every name
    assert a.declared
    assert a.min_sensitivity("hemorrhage") == 0.8 and a.min_sensitivity("fat") == 1.0


def test_the_table_is_recorded_as_written(tmp_path):
    settings = read_study_file(write(tmp_path, VALID, 'methods = ["net-full", "quick"]\n'))
    recorded = settings.to_dict()["acceptance"]
    # as the study file gave it (the manifest records this; the parsed form is separate)
    assert recorded == {
        "baseline": " net-full ",
        "limits": {"ff": 3, "r2star": 15.0, "field": 4.5},
        "findings": {"hemorrhage": 0.8, "fat": 1},
        "ccc": {"ff": 0.9, "r2star": 1.0},
    }
    assert "acceptance" not in read_study_file(write(tmp_path, "")).to_dict()


def test_no_table_no_criteria(tmp_path):
    assert read_study_file(write(tmp_path, "")).acceptance == Acceptance()
    empty = read_study_file(write(tmp_path, "[acceptance]\n[acceptance.limits]\n")).acceptance
    assert not empty.declared and dict(empty.limits) == {}


def test_build_settings_takes_the_table_like_a_study_file():
    settings = build_settings(
        values="v.csv",
        subjects="s.csv",
        reference="ref",
        methods=("b", "a"),
        method_labels={"a": "Method A"},
        tables={"acceptance": {"limits": {"r2star": 10}, "baseline": "a"}},
    )
    assert settings.methods == ("b", "a") and settings.method_labels == {"a": "Method A"}
    assert settings.acceptance == Acceptance(limits={"r2star": 10.0}, baseline="a")
    with pytest.raises(StudyError) as info:
        build_settings(
            values="v.csv",
            subjects="s.csv",
            reference="ref",
            tables={"acceptance": {"ccc": {"ff": 2}}},
        )
    (problem,) = info.value.problems
    assert problem.file == "command line" and "[acceptance.ccc] ff is not valid" in problem.detail


def test_build_acceptance_of_a_checked_table():
    assert build_acceptance(None) == Acceptance()
    a = build_acceptance({"findings": {"fat": 1}, "baseline": " b "})
    assert dict(a.findings) == {"fat": 1.0} and a.baseline == "b"


# --- every refused case, located by table and key ------------------------------------------

REFUSED = [
    # (id, TOML, text the problem's detail holds, the value it names)
    ("limit-negative", "[acceptance.limits]\nff = -1", "[acceptance.limits] ff is not valid", "-1"),
    ("limit-zero", "[acceptance.limits]\nr2star = 0", "[acceptance.limits] r2star is not valid",
     "0"),
    ("limit-nan", "[acceptance.limits]\nff = nan", "[acceptance.limits] ff is not valid", "nan"),
    ("limit-inf", "[acceptance.limits]\nff = inf", "[acceptance.limits] ff is not valid", "inf"),
    ("limit-bool", "[acceptance.limits]\nff = true", "[acceptance.limits] ff is not valid",
     "true"),
    ("limit-text", '[acceptance.limits]\nff = "3"', "[acceptance.limits] ff is not valid", "3"),
    ("limit-t2star", "[acceptance.limits]\nt2star = 5.0",
     "[acceptance.limits] t2star: unknown parameter", "t2star"),
    ("limit-typo", "[acceptance.limits]\nr2start = 15.0",
     "[acceptance.limits] r2start: unknown parameter; did you mean 'r2star'?", "r2start"),
    ("ccc-above-1", "[acceptance.ccc]\nff = 1.2", "[acceptance.ccc] ff is not valid", "1.2"),
    ("ccc-negative", "[acceptance.ccc]\nr2star = -0.1", "[acceptance.ccc] r2star is not valid",
     "-0.1"),
    ("ccc-zero", "[acceptance.ccc]\nfield = 0", "[acceptance.ccc] field is not valid", "0"),
    ("ccc-unknown", "[acceptance.ccc]\npdff = 0.9", "[acceptance.ccc] pdff: unknown parameter",
     "pdff"),
    ("sensitivity-above-1", "[acceptance.findings]\nhemorrhage = 1.5",
     "[acceptance.findings] hemorrhage is not valid", "1.5"),
    ("sensitivity-zero", "[acceptance.findings]\nfat = 0", "[acceptance.findings] fat is not valid",
     "0"),
    ("sensitivity-percent", "[acceptance.findings]\nfat = 80",
     "[acceptance.findings] fat is not valid", "80"),
    ("finding-undefined", "[acceptance.findings]\nscar = 0.8",
     "[acceptance.findings] scar: unknown finding", "scar"),
    ("finding-typo", "[acceptance.findings]\nhemorhage = 0.8",
     "[acceptance.findings] hemorhage: unknown finding; did you mean 'hemorrhage'?",
     "hemorhage"),
    ("finding-switched-off", "[acceptance.findings]\nhemorrhage = 0.8\n"
     "[findings.hemorrhage]\nenabled = false",
     "[acceptance.findings] hemorrhage: unknown finding", "hemorrhage"),
    ("limits-number", "[acceptance]\nlimits = 3", "[acceptance] limits is not valid", "3"),
    ("findings-text", '[acceptance]\nfindings = "hemorrhage"',
     "[acceptance] findings is not valid", "hemorrhage"),
    ("ccc-list", "[acceptance]\nccc = [0.9]", "[acceptance] ccc is not valid", "[0.9]"),
    ("limits-nested", "[acceptance.limits.ff]\nvalue = 3.0", "[acceptance] limits is not valid",
     "{ff = {value = 3.0}}"),
    ("baseline-number", "[acceptance]\nbaseline = 3", "[acceptance] baseline is not valid", "3"),
    ("baseline-blank", '[acceptance]\nbaseline = " "', "[acceptance] baseline is not valid", " "),
    ("key-typo", '[acceptance]\nbaselin = "a"',
     "unknown key 'baselin' in [acceptance]; did you mean 'baseline'?", "baselin"),
]  # fmt: skip


@pytest.mark.parametrize(("name", "extra", "where", "value"), REFUSED, ids=[c[0] for c in REFUSED])
def test_each_bad_criterion_is_one_located_problem(tmp_path, name, extra, where, value):
    path = write(tmp_path, extra)
    problems = problems_of(path)
    assert len(problems) == 1, [str(p) for p in problems]  # one problem, no echoes
    (problem,) = problems
    assert where in problem.detail, problem.detail
    assert problem.code == "study-option" and problem.file == str(path)
    assert problem.value == value and problem.expected


def test_unknown_names_say_what_is_known(tmp_path):
    (problem,) = problems_of(write(tmp_path, "[acceptance.limits]\nt2star = 5.0"))
    # limits are in the report's units: R2* 1/s, not T2* ms (units.PARAMETERS)
    assert problem.expected == "one of ['ff', 'r2star', 'field']"
    (problem,) = problems_of(write(tmp_path, "[acceptance.findings]\nscar = 0.8"))
    assert problem.expected == "one of ['hemorrhage', 'fat']"


def test_r2_star_as_written_in_papers_gets_a_hint(tmp_path):
    (problem,) = problems_of(write(tmp_path, '[acceptance.limits]\n"r2*" = 15.0'))
    assert "[acceptance.limits] r2*: unknown parameter" in problem.detail
    assert "did you mean 'r2star'?" in problem.detail


def test_a_finding_defined_in_the_study_file_is_accepted(tmp_path):
    extra = """
    [findings.scar]
    parameter = "ff"
    threshold = 20.0
    [acceptance.findings]
    scar = 0.7
    hemorrhage = 0.9
    """
    settings = read_study_file(write(tmp_path, extra))
    assert dict(settings.acceptance.findings) == {"scar": 0.7, "hemorrhage": 0.9}
    # without the default findings, only the study's own are known
    only_own = "[findings]\nuse_defaults = false\n" + textwrap.dedent(extra)
    (problem,) = problems_of(write(tmp_path, only_own))
    assert "[acceptance.findings] hemorrhage: unknown finding" in problem.detail
    assert problem.expected == "one of ['scar']"


def test_a_bad_findings_table_does_not_echo_into_acceptance(tmp_path):
    # [findings] has its own problem; the criteria are checked against the default findings
    extra = "[findings]\nswap_margin = -1\n[acceptance.findings]\nhemorrhage = 0.8\n"
    (problem,) = problems_of(write(tmp_path, extra))
    assert problem.detail.startswith("[findings] swap_margin is not valid")


def test_the_baseline_must_be_a_listed_test_method(tmp_path):
    methods = 'methods = ["net-full", "quick"]\n'
    ok = read_study_file(write(tmp_path, '[acceptance]\nbaseline = "quick"\n', methods))
    assert ok.acceptance.baseline == "quick"
    path = write(tmp_path, '[acceptance]\nbaseline = "net-ful"\n', methods)
    (problem,) = problems_of(path)
    assert problem.detail == (
        "[acceptance] baseline is not one of the methods listed in [study] methods; "
        "did you mean 'net-full'?"
    )
    assert problem.file == str(path) and problem.value == "net-ful"
    assert problem.expected == "one of ['net-full', 'quick']"
    # the reference is not a test method: not listed, so not a baseline
    (problem,) = problems_of(write(tmp_path, '[acceptance]\nbaseline = "ref"\n', methods))
    assert problem.value == "ref" and "[acceptance] baseline" in problem.detail
    # without [study] methods the baseline is checked against the values table when loaded
    # (tests/io/test_method_order.py)
    assert read_study_file(write(tmp_path, '[acceptance]\nbaseline = "x"\n')).acceptance.baseline


def test_every_problem_is_listed_at_once(tmp_path):
    extra = """
    [acceptance]
    baseline = "nobody"
    [acceptance.limits]
    "r2*" = 15.0
    ff = -3.0
    [acceptance.findings]
    hemorrhage = 2
    scar = 0.5
    [acceptance.ccc]
    ff = 0
    [analysis]
    n_boot = 5
    """
    path = write(tmp_path, extra, 'methods = ["a", "b"]\n')
    problems = problems_of(path)
    details = [p.detail for p in problems]
    expected_starts = [
        "[acceptance] baseline is not one of the methods listed in [study] methods",
        "[acceptance.limits] r2*: unknown parameter",
        "[acceptance.limits] ff is not valid",
        "[acceptance.findings] hemorrhage is not valid",
        "[acceptance.findings] scar: unknown finding",
        "[acceptance.ccc] ff is not valid",
        "[analysis] n_boot is not valid",
    ]
    for start in expected_starts:
        assert sum(d.startswith(start) for d in details) == 1, (start, details)
    assert len(problems) == len(expected_starts)
    assert {p.file for p in problems} == {str(path)}
    # one StudyError whose message names every problem
    with pytest.raises(StudyError) as info:
        read_study_file(path)
    message = str(info.value)
    for start in expected_starts:
        assert start in message


def test_acceptance_must_be_a_table(tmp_path):
    path = tmp_path / "study.toml"
    path.write_text("acceptance = 3\n" + STUDY, encoding="utf-8")
    (problem,) = problems_of(path)
    assert re.fullmatch(r"\[acceptance\] must be a table.*", problem.detail)
