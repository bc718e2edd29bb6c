"""Record accounting: every input value is used, missing or excluded, and an excluded value
enters no analysis; every problem and exclusion says what actually happened.

Numbers come from the invented tables of ``conftest.small_values`` (field = 10 + segment +
3 x method index, ff = 1.0 + 0.1 x segment + 0.2 x method index + subject index, R2* = 25 +
segment + method index - subject index). Unit facts: R2* = 1000 / T2* [ms] (definition);
proton gamma-bar 42.577478518 MHz/T (CODATA 2018). Row numbers are spreadsheet rows
(header = row 1; common practice of spreadsheet programs).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from cohort.analysis.findings import evaluate_findings
from cohort.analysis.subject_summaries import subject_summaries
from cohort.cli import main
from cohort.domain.options import Checks
from cohort.domain.thresholds import SwapOptions
from cohort.io.study import load_study

from ..conftest import HEADER, coded, problems_of, small_subjects, small_values, write_csv

GROUPS = "control,acute,chronic"


def as_text(frame: pd.DataFrame) -> pd.DataFrame:
    """A table with categorical columns as text, rows in a fixed order (for comparisons)."""
    out = frame.copy()
    for column in out.columns:
        if isinstance(out[column].dtype, pd.CategoricalDtype):
            out[column] = out[column].astype(str)
    keys = [c for c in ("parameter", "method", "subject", "segment", "summary") if c in out]
    return out.sort_values(keys).reset_index(drop=True)


def without(rows, subject=None, method=None, segments=(), parameter=None):
    """``rows`` without those matching every given condition."""

    def match(r):
        return (
            (subject is None or r[0] == subject)
            and (method is None or r[1] == method)
            and (not segments or r[2] in segments)
            and (parameter is None or r[3] == parameter)
        )

    return [r for r in rows if not match(r)]


def cli_check(settings, *flags):
    return main(
        ["check", "--values", str(settings.values), "--subjects", str(settings.subjects),
         "--reference", "ref", "--groups", GROUPS, *flags]
    )  # fmt: skip


# --- 1. an excluded value enters no analysis -----------------------------------------------


def test_an_unpaired_reference_value_changes_no_analysis_input(make_study, tmp_path):
    # segment 17 measured by the reference only (e.g. no apex in the test method's slices)
    base = without(small_values(), segments=(17,))
    extra = [r for r in small_values() if r[2] == 17 and r[1] == "ref"]
    without_extra = load_study(make_study(values=base))
    with_extra = load_study(make_study(values=base + extra))
    # field referenced to the subject median: with segment 17 counted, the reference median
    # would move from segment 8.5 to segment 9 (small_values), shifting every value by 0.5
    pd.testing.assert_frame_equal(as_text(with_extra.values), as_text(without_extra.values))
    pd.testing.assert_frame_equal(as_text(with_extra.paired), as_text(without_extra.paired))
    ref_field = with_extra.values.query("parameter == 'field' and method == 'ref'")
    one = ref_field.query("subject == '0017' and segment == 1")["value"].item()
    assert one == pytest.approx(1 - 8.5)  # median of segments 1-16 is 8.5 (paired only)
    # subject summaries (input of the group models) and findings see the same values
    pd.testing.assert_frame_equal(
        as_text(subject_summaries(with_extra.values, with_extra.subjects)),
        as_text(subject_summaries(without_extra.values, without_extra.subjects)),
    )
    a = evaluate_findings(with_extra.values, with_extra.subjects).segments
    b = evaluate_findings(without_extra.values, without_extra.subjects).segments
    pd.testing.assert_frame_equal(as_text(a), as_text(b))
    # ... and the extra values are accounted for as excluded, each with the true reason
    counts = with_extra.accounting()
    assert counts == {"records_in": len(base) + 9, "used": len(base), "missing": 0, "excluded": 9}
    excluded = with_extra.exclusions()
    assert set(excluded["segment"]) == {17} and set(excluded["method"].astype(str)) == {"ref"}
    assert set(excluded["reason"].astype(str)) == {"no other method has a value for this segment"}


def test_remote_referencing_uses_only_paired_remote_segments(make_study):
    # the test method lacks segment 1; the reference's segment 1 is unpaired and excluded, so
    # the reference is referenced to its remote segments 2 and 3 only: offset 10 + 2.5
    rows = without(small_values(), method="fast", segments=(1,))
    study = load_study(
        make_study(values=rows, field_referencing="remote", remote_segments=(1, 2, 3))
    )
    f = study.values.query("parameter == 'field' and subject == '0017'")
    ref = f.query("method == 'ref'").set_index("segment")["value"]
    fast = f.query("method == 'fast'").set_index("segment")["value"]
    assert 1 not in ref.index
    assert ref[2] == pytest.approx(-0.5) and ref[17] == pytest.approx(14.5)
    assert fast[2] == pytest.approx(-0.5)  # 10 + 2 + 3 - (10 + 2.5 + 3)


# --- 2. true reasons ----------------------------------------------------------------------


def test_subject_without_remote_segments_is_excluded_with_the_true_reason(make_study):
    rows = without(small_values(), subject="0018", method="fast", segments=(1, 2, 3),
                   parameter="field")  # fmt: skip
    study = load_study(
        make_study(values=rows, field_referencing="remote", remote_segments=(1, 2, 3))
    )
    records = study.records.astype({"reason": str, "method": str, "subject": str})
    fast = records.query("subject == '0018' and method == 'fast' and parameter == 'field'")
    assert len(fast) == 14 and fast["status"].astype(str).eq("excluded").all()
    assert set(fast["reason"]) == {
        "field not referenced: subject has no usable remote-segment value (segments 1, 2, 3) "
        "for method 'fast'"
    }
    ref = records.query("subject == '0018' and method == 'ref' and parameter == 'field'")
    by_segment = ref.set_index("segment")["reason"]
    assert by_segment[2] == "no other method has a value for this segment"
    # the reference's own remote segments lost their partners, so it is not referenced
    # either: the reason says so (the records show the chain)
    assert by_segment[5] == (
        "field not referenced: subject has no usable remote-segment value (segments 1, 2, 3) "
        "for method 'ref'"
    )
    assert "0018" not in " ".join(records["reason"])  # IDs stay in the subject column
    # nothing of 0018's field map is analysed; the other subjects' field maps are
    field = study.values.query("parameter == 'field'")
    assert "0018" not in set(field["subject"].astype(str))
    assert set(field["subject"].astype(str)) == {"0017", "0019"}
    assert study.accounting()["excluded"] == 14 + 17


# --- 3. fractions declared as percent --------------------------------------------------------


def fractions():
    return [r if r[3] != "ff" else [*r[:4], round(r[4] / 100, 6)] for r in small_values()]


def test_fat_fractions_all_within_0_1_declared_percent_are_refused(make_study, capsys):
    settings = make_study(values=fractions())
    problem = coded(problems_of(settings), "unit-mismatch")[0]
    assert problem.severity == "error" and problem.file == "values.csv"
    assert problem.column == "value" and problem.row is not None
    assert "units.ff = 'fraction'" in problem.expected
    assert "ff_percent_confirmed" in problem.expected
    assert cli_check(settings) == 2
    out, err = capsys.readouterr()
    assert "unit-mismatch" in err and "Traceback" not in err and out == ""


def test_confirmed_percent_turns_the_refusal_into_a_warning(make_study):
    settings = make_study(values=fractions()).with_options(checks=Checks(ff_percent_confirmed=True))
    study = load_study(settings)
    warned = coded(study.warnings, "unit-mismatch")
    assert len(warned) == 1 and "ff_percent_confirmed" in warned[0].detail
    # accepted as percent: no conversion
    assert study.values.query("parameter == 'ff'")["value"].max() <= 1.0


def test_all_zero_fat_is_accepted_without_a_unit_message(make_study):
    # 0 % and a fraction of 0 are the same value: the declared unit cannot be wrong
    rows = [r if r[3] != "ff" else [*r[:4], 0.0] for r in small_values()]
    study = load_study(make_study(values=rows))
    assert not [w for w in study.warnings if w.code == "unit-mismatch"]
    assert (study.values.query("parameter == 'ff'")["value"] == 0.0).all()


# --- 4. the implausible-value policy ---------------------------------------------------------


def implausible_rows():
    rows = small_values()
    rows[1][4] = 1500.0  # 0017 ref segment 1 R2*: above 1000 1/s (row 3)
    rows[3][4] = -20.0  # 0017 ref segment 2 ff: below -5 % (row 5)
    return rows


def test_implausible_values_are_refused_by_default(make_study, capsys):
    settings = make_study(values=implausible_rows())
    found = coded(problems_of(settings), "implausible-value")
    assert sorted(p.row for p in found) == [3, 5]
    assert cli_check(settings) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_implausible_values_can_be_excluded_with_their_rule(make_study):
    settings = make_study(values=implausible_rows()).with_options(
        checks=Checks(implausible="exclude")
    )
    study = load_study(settings)
    excluded = study.exclusions().astype({"reason": str})
    by_row = excluded.set_index("source_row")["reason"]
    assert by_row[3] == (
        "implausible: R2* above the plausible maximum 1000 1/s ([checks] r2star_max)"
    )
    assert by_row[5].startswith("implausible: fat fraction outside -5 to 105 %")
    # their partners of the test method lose the reference value: excluded, saying so
    partners = excluded[~excluded["source_row"].isin([3, 5])]
    assert len(partners) == 2
    assert set(partners["reason"]) == {"the reference value for this segment is excluded"}
    assert study.accounting() == {"records_in": 306, "used": 302, "missing": 0, "excluded": 4}
    # used nowhere
    values = study.values.astype({"subject": str, "method": str, "parameter": str})
    assert not ((values["subject"] == "0017") & (values["segment"] == 1)
                & (values["parameter"] == "r2star")).any()  # fmt: skip
    assert 1500.0 not in set(study.paired["reference_value"])
    # one summary warning naming both rules
    warned = coded(study.warnings, "implausible-value")
    assert len(warned) == 1 and warned[0].severity == "warning"
    assert warned[0].detail.startswith("2 implausible value(s) excluded")


def test_methods_text_states_the_plausibility_policy_that_ran(make_study):
    # the methods text states exactly what ran (project rule): limits and what they did
    from cohort.report.methods_text import _plausibility_sentence

    refused = make_study(values=small_values())
    excluded = refused.with_options(checks=Checks(implausible="exclude", r2star_max=800.0))
    assert "would have been refused" in _plausibility_sentence(refused)
    text = _plausibility_sentence(excluded)
    assert "R2* 0 to 800 1/s" in text and "were excluded and listed" in text


def test_excluded_implausible_t2star_does_not_clash_with_r2star(make_study):
    rows = small_values()
    rows.append(["0017", "ref", 1, "t2star", 0.0])  # not positive: excluded, never converted
    settings = make_study(values=rows).with_options(checks=Checks(implausible="exclude"))
    study = load_study(settings)
    excluded = study.exclusions()
    assert excluded["reason"].astype(str).tolist() == ["implausible: T2* is not positive"]
    assert np.isfinite(study.values["value"]).all()


def test_field_given_in_ppm_is_checked_in_hz(make_study):
    # 100 ppm at 3 T = 12,773 Hz, beyond 2000 Hz; 10 ppm at 1.5 T = 639 Hz is plausible
    # (42.577478518 MHz/T, CODATA 2018)
    rows = [r if r[3] != "field" else [*r[:4], 10.0] for r in small_values()]
    load_study(make_study(values=rows, field_unit="ppm"))
    index = next(i for i, r in enumerate(rows) if r[0] == "0018" and r[3] == "field")
    rows[index][4] = 100.0  # 0018 is scanned at 3 T (small_subjects)
    problem = coded(problems_of(make_study(values=rows, field_unit="ppm")), "implausible-value")
    assert len(problem) == 1 and problem[0].row == index + 2 and problem[0].subject == "0018"
    assert "after conversion from ppm" in problem[0].detail


# --- 5. problems name subject and method in their own fields ---------------------------------


def test_value_problems_name_subject_and_method_outside_the_text(make_study):
    rows = small_values()
    rows.append(list(rows[3]))  # duplicate: 0017 ref segment 2 ff
    rows[60][4] = 5000.0  # 0017 fast segment 3 R2* (row 62)
    problems = problems_of(make_study(values=rows))
    dup = coded(problems, "duplicate-value")[0]
    assert (dup.subject, dup.method) == ("0017", "ref") and "0017" not in dup.detail
    bad = coded(problems, "implausible-value")[0]
    assert (bad.row, bad.subject, bad.method) == (62, "0017", "fast")
    assert "subject '0017', method 'fast'" in str(bad)


def test_subject_problems_name_the_subject_outside_the_text(make_study):
    subjects = [*small_subjects(), ["0017", "acute", 1.5, 51]]
    problem = coded(problems_of(make_study(subjects=subjects)), "duplicate-subject")[0]
    assert problem.subject == "0017" and "0017" not in problem.detail


# --- 6. every T2*/R2* conflict counted, its column named -------------------------------------


def test_every_t2star_r2star_conflict_is_counted(make_study):
    rows = small_values()
    conflicts = [[r[0], r[1], r[2], "t2star", 1.0 + 0.01 * i]  # ~1000 1/s vs R2* 25-45
                 for i, r in enumerate(r for r in rows if r[3] == "r2star")][:25]  # fmt: skip
    found = coded(problems_of(make_study(values=rows + conflicts)), "t2star-r2star-conflict")
    assert len(found) == 20 + 1  # 20 listed (validation.PER_CODE), then the count of the rest
    assert "5 more" in found[-1].detail and "25 in all" in found[-1].detail
    first = found[0]  # listed by subject, method, segment
    assert (first.subject, first.method, first.column) == ("0017", "fast", "value")
    assert "column 'value'" in first.detail and "0017" not in first.detail


def test_t2star_r2star_conflict_in_wide_layout_names_both_columns(make_study, tmp_path):
    wide = pd.DataFrame(small_values(), columns=HEADER).pivot_table(
        index=["subject", "method", "segment"], columns="parameter", values="value"
    )
    wide = wide.reset_index()
    wide["subject"] = wide["subject"].astype(str)
    wide["t2star"] = 1000.0 / wide["r2star"]
    wide.loc[4, "t2star"] = 10.0  # 100 1/s against R2* of 25-45
    path = tmp_path / "wide.csv"
    wide.to_csv(path, index=False)
    found = coded(problems_of(make_study().with_options(values=path)), "t2star-r2star-conflict")
    assert len(found) == 1
    assert found[0].column == "r2star" and "column 't2star'" in found[0].detail
    assert found[0].row == 4 + 2


# --- 7. the wide layout: a parameter a method does not measure is not missing ----------------


def test_wide_layout_method_without_a_parameter_is_not_missing(make_study, tmp_path):
    wide = pd.DataFrame(small_values(), columns=HEADER).pivot_table(
        index=["subject", "method", "segment"], columns="parameter", values="value"
    )
    wide = wide.reset_index()
    wide["subject"] = wide["subject"].astype(str)
    wide.loc[wide["method"] == "fast", "field"] = np.nan  # the fast method makes no field map
    wide.loc[wide.index[wide["method"].eq("ref")][0], "ff"] = np.nan  # a blank: missing
    path = tmp_path / "wide.csv"
    wide.to_csv(path, index=False)
    study = load_study(make_study().with_options(values=path))
    # ref: 3 parameters x 51 cells; fast: ff and r2star x 51 cells (no field records)
    counts = study.accounting()
    assert counts["records_in"] == 3 * 51 + 2 * 51
    assert counts["missing"] == 1
    missing = study.missing_values()
    assert missing[["method", "parameter"]].astype(str).values.tolist() == [["ref", "ff"]]
    # the reference's field values have nothing to compare with: excluded, not missing
    assert counts["excluded"] == 51 + 1
    assert "field" not in study.parameters


# --- 8. group spelling ----------------------------------------------------------------------


@pytest.mark.parametrize(
    "spellings, separate",
    [(("acute", "Acute"), True), (("acute  mi", "acute mi"), True), (("acute ", "acute"), False)],
)
def test_group_names_differing_in_case_or_spacing_are_named(make_study, spellings, separate):
    subjects = small_subjects()
    subjects[0][1], subjects[1][1] = spellings
    study = load_study(make_study(subjects=subjects, groups=()))
    warned = [w for w in study.warnings if w.column == "group" and "differ only" in w.detail]
    assert len(warned) == 1
    assert all(repr(s) in warned[0].detail for s in spellings)
    assert ("2 different groups" in warned[0].detail) is separate
    assert warned[0].file == "subjects.csv" and warned[0].row == 3


def test_distinct_group_names_give_no_spelling_warning(make_study):
    study = load_study(make_study(groups=()))
    assert not [w for w in study.warnings if "differ only" in w.detail]


# --- 9. inputs named relative to the study file ---------------------------------------------


def test_problems_and_records_name_inputs_relative_to_the_study_file(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    rows = small_values()
    write_csv(data / "values.csv", HEADER, rows)
    write_csv(data / "subjects.csv", ["subject", "group", "field_strength", "age"],
              small_subjects())  # fmt: skip
    study_file = tmp_path / "study.toml"
    study_file.write_text(
        '[study]\nvalues = "data/values.csv"\nsubjects = "data/subjects.csv"\nreference = "ref"\n'
    )
    study = load_study(study_file)
    assert set(study.records["source_file"].astype(str)) == {"data/values.csv"}
    rows[0][4] = "abc"
    write_csv(data / "values.csv", HEADER, rows)
    problem = coded(problems_of(study_file), "not-numeric")[0]
    assert problem.file == "data/values.csv"
    (data / "subjects.csv").unlink()
    problem = coded(problems_of(study_file), "file-missing")[0]
    assert problem.file == "data/subjects.csv"


def test_summary_lists_only_the_exclusion_reasons_that_occur(make_study):
    rows = small_values()
    rows[0][4] = ""  # 0017 ref segment 1 ff: blank, its fast partner excluded
    text = load_study(make_study(values=rows)).summary()
    excluded = [line.strip() for line in text.splitlines() if line.strip().startswith("excluded:")]
    assert excluded == ["excluded: 1 x the reference method has no value for this segment"]


def test_every_used_value_is_in_a_pair_and_nothing_else_is(make_study):
    rows = without(small_values(), method="fast", segments=(16, 17))  # reference-only values
    rows[0][4] = ""  # a blank reference value
    rows[5][4] = 2500.0  # 0017 ref segment 2 field: beyond 2000 Hz, excluded as implausible
    settings = make_study(values=rows).with_options(checks=Checks(implausible="exclude"))
    study = load_study(settings)
    used = study.records[study.records["status"].astype(str) == "used"]
    assert len(used) == len(study.values)
    ref = study.values[study.values["method"].astype(str) == "ref"]
    keys = ["subject", "segment", "parameter"]
    in_pairs = set(map(tuple, as_text(study.paired)[keys].to_numpy().tolist()))
    assert set(map(tuple, as_text(ref)[keys].to_numpy().tolist())) == in_pairs
    assert len(study.paired) == len(study.values) - len(ref)
    reasons = set(study.exclusions()["reason"].astype(str))
    assert (
        "implausible: field offset beyond the plausible 2000 Hz ([checks] field_max_abs_hz)"
        in reasons
    )


def test_a_magnitude_only_method_that_is_not_a_test_method_is_refused_at_check(make_study):
    # found by `cohort check`, not after the analysis (it once crashed the run)
    settings = make_study(values=small_values())
    settings = settings.with_options(swap=SwapOptions(magnitude_only_methods=("nope",)))
    problems = problems_of(settings)
    found = coded(problems, "study-option")
    assert found[0].value == "nope" and found[0].column == "magnitude_only_methods"
    assert "'fast'" in found[0].expected
