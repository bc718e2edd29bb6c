"""Default thresholds, their sources, and the [findings] table of study.toml."""

from __future__ import annotations

import math

import pytest

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
    thresholds_table,
)
from cohort.domain.units import r2star_to_t2star_ms, t2star_ms_to_r2star

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
