"""Default thresholds, their sources, and the [findings] table of study.toml."""

from __future__ import annotations

import math

import pytest

from cohort.domain.problems import StudyError
from cohort.domain.thresholds import (
    BUILT_IN,
    CAUTION,
    DEFAULT_FINDINGS,
    FAT,
    FIELD_PERTURBATION,
    HEMORRHAGE,
    MAGNITUDE_ONLY_FF_LIMIT,
    STOREY_2007,
    THRESHOLDS_COLUMNS,
    FindingDefinition,
    parse_findings,
    parse_swap_options,
    thresholds_table,
)
from cohort.domain.units import r2star_to_t2star_ms, t2star_ms_to_r2star
from cohort.io.settings import read_study_file

# --- facts of the trade --------------------------------------------------------------------


def test_hemorrhage_at_15t_is_t2star_below_20_ms():
    # T2* < 20 ms at 1.5 T (common practice; O'Regan et al., Radiology 2009 (memory);
    # Carberry et al., JACC Cardiovasc Imaging 2018); R2* = 1000 / T2* (definition)
    t = HEMORRHAGE.threshold_at(1.5)
    assert t.value == t2star_ms_to_r2star(20.0) == 50.0
    assert not t.derived
    assert HEMORRHAGE.direction == "above" and not HEMORRHAGE.inclusive
    assert "O'Regan" in t.source and "Carberry" in t.source


def test_hemorrhage_at_3t_is_derived_with_storey_2007():
    # R2*(3 T) = 1.88 R2*(1.5 T) - 15 1/s (Storey et al., J Magn Reson Imaging 2007):
    # 1.88 x 50 - 15 = 79 1/s, T2* about 12.7 ms (DOMAIN.md)
    t = HEMORRHAGE.threshold_at(3.0)
    assert t.value == pytest.approx(1.88 * 50.0 - 15.0) == pytest.approx(79.0)
    assert r2star_to_t2star_ms(t.value) == pytest.approx(12.66, abs=0.01)
    assert t.derived and "Storey" in t.source
    assert STOREY_2007.apply(23.0) == pytest.approx(28.24)  # normal myocardium 1.5 -> 3 T


def test_fat_default_is_ten_percent_inclusive_at_any_field():
    # ff >= 10 %: common practice, no published consensus (DOMAIN.md)
    for b0 in (1.5, 3.0, 0.55):
        assert FAT.threshold_at(b0).value == 10.0
    assert FAT.inclusive and FAT.comparison == ">="
    assert "no published consensus" in FAT.source


def test_magnitude_only_limit_is_fifty_percent():
    # magnitude-only two-point fat fractions are confined to 0-50 % (Hussain et al.,
    # Radiology 2005 (memory); common practice)
    assert MAGNITUDE_ONLY_FF_LIMIT == 50.0


def test_field_finding_is_off_by_default():
    assert "field" not in {d.name for d in DEFAULT_FINDINGS}
    assert BUILT_IN["field"] is FIELD_PERTURBATION
    # shift in Hz proportional to B0 (physics): 3 T value is twice the 1.5 T value
    assert (
        FIELD_PERTURBATION.threshold_at(3.0).value == 2 * FIELD_PERTURBATION.threshold_at(1.5).value
    )
    assert FIELD_PERTURBATION.absolute_value


def test_missing_field_strength_names_finding_and_field_strength():
    with pytest.raises(ValueError, match=r"'hemorrhage' has no threshold at 7 T"):
        HEMORRHAGE.threshold_at(7.0)
    no_rule = FindingDefinition("hem15", "r2star", thresholds={1.5: 50.0})
    with pytest.raises(ValueError, match=r"'hem15' has no threshold at 3 T.*derive"):
        no_rule.threshold_at(3.0)


def test_definition_checks_its_arguments():
    with pytest.raises(ValueError, match="parameter must be one of"):
        FindingDefinition("x", "t2", value_any_field=1.0)
    with pytest.raises(ValueError, match="direction must be one of"):
        FindingDefinition("x", "ff", direction="up", value_any_field=1.0)
    with pytest.raises(ValueError, match="needs 'thresholds'"):
        FindingDefinition("x", "ff")
    with pytest.raises(ValueError, match="remote threshold needs k"):
        FindingDefinition("x", "ff", kind="remote")
    with pytest.raises(ValueError, match="min_segments must be an integer >= 1"):
        FindingDefinition("x", "ff", value_any_field=1.0, min_segments=0)
    with pytest.raises(ValueError, match="remote_segments must be segment numbers"):
        FindingDefinition("x", "ff", kind="remote", k=2.0, remote_segments=(0, 18))


def test_thresholds_table_lists_sources_and_cautions():
    table = thresholds_table()
    assert tuple(table.columns) == THRESHOLDS_COLUMNS
    hem = table[table["finding"].eq("hemorrhage")].set_index("field_strength")
    assert hem.loc[1.5, "threshold"] == 50.0 and not hem.loc[1.5, "derived"]
    assert hem.loc[3.0, "threshold"] == pytest.approx(79.0) and hem.loc[3.0, "derived"]
    assert hem.loc[3.0, "caution"].startswith("derived, not validated")
    assert (table["caution"].str.contains(CAUTION)).all()
    fat = table[table["finding"].eq("fat")].iloc[0]
    assert math.isnan(fat["field_strength"]) and "any field strength" in fat["rule"]
    assert fat["rule"].startswith("fat fraction >= 10 %")


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
    defs = parse_findings(settings.extra.get("findings"))
    assert [d.name for d in defs] == ["hemorrhage", "fat", "remote_hemorrhage"]
    assert defs[0].threshold_at(3.0).value == 79.0
    assert parse_swap_options(settings.extra.get("findings")).magnitude_only_methods == ("fast",)
