"""The [findings] table of study.toml: finding definitions and swap options, every problem
at once (rules: common practice / this package's contract; thresholds' sources are in
tests/domain/test_thresholds.py)."""

from __future__ import annotations

import pytest

from cohort.domain.problems import StudyError
from cohort.domain.thresholds import DEFAULT_FINDINGS, FIELD_PERTURBATION
from cohort.io.findings_table import parse_findings, parse_swap_options
from cohort.io.settings import read_study_file

# --- the [findings] table ------------------------------------------------------------------


def test_empty_table_gives_the_defaults():
    assert parse_findings(None) == DEFAULT_FINDINGS
    assert parse_findings({}) == DEFAULT_FINDINGS


def test_table_overrides_adds_and_switches_off():
    defs = parse_findings(
        {
            "hemorrhage": {"thresholds": {"1.5": 45.0, "3.0": 70.0}, "min_segments": 2},
            "fat": {"enabled": False},
            "remote_hemorrhage": {"parameter": "r2star", "kind": "remote", "k": 2.0},
            "field": {},
        }
    )
    by_name = {d.name: d for d in defs}
    assert set(by_name) == {"hemorrhage", "remote_hemorrhage", "field"}
    hem = by_name["hemorrhage"]
    assert hem.threshold_at(3.0).value == 70.0 and not hem.threshold_at(3.0).derived
    assert hem.min_segments == 2 and hem.source == "declared in the study file"
    remote = by_name["remote_hemorrhage"]
    assert remote.kind == "remote" and remote.k == 2.0
    assert remote.remote_segments == "outside-culprit"
    assert by_name["field"] == FIELD_PERTURBATION


def test_new_threshold_without_rule_needs_every_field_strength():
    (hem,) = parse_findings({"use_defaults": False, "hemorrhage": {"thresholds": {"1.5": 45}}})
    with pytest.raises(ValueError, match="no threshold at 3 T"):
        hem.threshold_at(3.0)
    (hem,) = parse_findings(
        {"use_defaults": False, "hemorrhage": {"thresholds": {"1.5": 45}, "derive": "storey-2007"}}
    )
    assert hem.threshold_at(3.0).value == pytest.approx(1.88 * 45 - 15)
    assert hem.threshold_at(3.0).derived


def test_remote_segments_list_and_below_direction():
    (d,) = parse_findings(
        {
            "use_defaults": False,
            "low_t": {
                "parameter": "r2star",
                "direction": "below",
                "kind": "remote",
                "k": 1.5,
                "remote_segments": [3, 4, 9],
            },
        }
    )
    assert d.remote_segments == (3, 4, 9) and d.rule() == "R2* < remote mean - 1.5 SD"


def test_every_problem_is_collected_with_code_study_option():
    with pytest.raises(StudyError) as info:
        parse_findings(
            {
                "colour": "red",
                "swap_margin": -1,
                "hemorrhage": {"direction": "upwards", "treshold": 3.0},
                "scar": {"kind": "absolute"},
                "fat": {"thresholds": {"one-point-five": 10.0}},
                "hem2": {"parameter": "r2star", "threshold": 50.0, "derive": "magic"},
            }
        )
    problems = info.value.problems
    assert {p.code for p in problems} == {"study-option"}
    text = "\n".join(str(p) for p in problems)
    assert "unknown key 'colour' in [findings]" in text
    assert "[findings] swap_margin is not valid; got '-1'; expected a finite number 0 to" in text
    assert "[findings.hemorrhage] direction is not valid" in text and "upwards" in text
    assert "unknown key 'treshold' in [findings.hemorrhage]; did you mean 'threshold'?" in text
    assert "[findings.scar] needs 'parameter'" in text
    assert "[findings.fat] thresholds is not valid; got '{one-point-five = 10.0}'" in text
    assert "[findings.hem2] derive is not valid; got 'magic'" in text
    assert len(problems) == 7


def test_bad_remote_and_min_segments_values():
    with pytest.raises(StudyError, match=r"\[findings.r\] remote_segments is not valid"):
        parse_findings({"r": {"parameter": "ff", "kind": "remote", "k": 2, "remote_segments": "x"}})
    with pytest.raises(StudyError, match=r"\[findings.fat\] min_segments is not valid"):
        parse_findings({"fat": {"min_segments": 1.5}})
    with pytest.raises(StudyError, match="remote threshold needs k"):
        parse_findings({"r": {"parameter": "ff", "kind": "remote"}})


def test_swap_options():
    opts = parse_swap_options({"magnitude_only_methods": ["dixon2pt"], "swap_margin": 5})
    assert opts.magnitude_only_methods == ("dixon2pt",) and opts.margin == 5.0
    assert parse_swap_options(None).margin == 10.0
    with pytest.raises(StudyError, match="magnitude_only_methods"):
        parse_swap_options({"magnitude_only_methods": "dixon2pt"})


def test_findings_table_read_from_a_study_file(tmp_path):
    (tmp_path / "study.toml").write_text(
        """
[study]
values = "v.csv"
subjects = "s.csv"
reference = "ref"

[findings]
magnitude_only_methods = ["fast"]

[findings.hemorrhage]
parameter = "r2star"; direction = "above"; kind = "absolute"
thresholds = { "1.5" = 50.0, "3.0" = 79.0 }
min_segments = 1

[findings.remote_hemorrhage]
parameter = "r2star"
direction = "above"
kind = "remote"
k = 2.0
remote_segments = "outside-culprit"
""".replace("; ", "\n"),
        encoding="utf-8",
    )
    settings = read_study_file(tmp_path / "study.toml")
    defs = settings.findings
    assert [d.name for d in defs] == ["hemorrhage", "fat", "remote_hemorrhage"]
    assert defs[0].threshold_at(3.0).value == 79.0
    assert settings.swap.magnitude_only_methods == ("fast",)
