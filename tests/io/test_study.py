"""The loader: valid studies load losslessly; every bad-input case names file, row, column.

Row numbers are spreadsheet rows: header = row 1, first data row = row 2 (common practice of
spreadsheet programs). Unit facts: R2* = 1000 / T2* [ms] (definition); proton gamma-bar
42.577 MHz/T (CODATA 2018).
"""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pytest

from cohort.domain.problems import StudyError
from cohort.io.study import COMPACT_COLUMNS, PAIRED_COLUMNS, load_study

from ..conftest import HEADER, problems_of, small_subjects, small_values, write_csv
from ..conftest import coded as only

# --- valid input ---------------------------------------------------------------------------


def test_valid_study_loads_and_pairs_every_segment(make_study):
    study = load_study(make_study())
    assert study.methods == ("ref", "fast")
    assert study.parameters == ("ff", "r2star", "field")
    assert tuple(study.paired.columns) == PAIRED_COLUMNS
    # 3 subjects x 17 segments x 3 parameters, one test method
    assert len(study.paired) == 3 * 17 * 3
    assert study.accounting() == {"records_in": 306, "used": 306, "missing": 0, "excluded": 0}


def test_study_tables_carry_no_attrs(make_study):
    # pandas deep-copies DataFrame.attrs on every operation (a 100x slowdown at scale)
    study = load_study(make_study())
    for frame in (study.values, study.paired, study.records, study.subjects):
        assert frame.attrs == {}


def test_repeated_text_columns_are_categoricals_of_the_same_text(make_study):
    # memory at scale: text repeated per segment is held once per distinct value
    study = load_study(make_study())
    for frame in (study.values, study.paired, study.records):
        for column in COMPACT_COLUMNS & set(frame.columns):
            assert isinstance(frame[column].dtype, pd.CategoricalDtype), column
    assert sorted(study.paired["method"].astype(str).unique()) == ["fast"]
    assert set(study.records["status"].astype(str)) == {"used"}
    assert set(study.values["subject"].astype(str)) == {"0017", "0018", "0019"}


def test_subject_ids_stay_text(make_study):
    study = load_study(make_study())
    assert set(study.subjects["subject"]) == {"0017", "0018", "0019"}
    assert set(study.paired["subject"]) == {"0017", "0018", "0019"}


def test_paired_values_are_the_input_values(make_study):
    study = load_study(make_study(field_referencing="none"))
    row = study.paired.query("subject == '0018' and segment == 5 and parameter == 'ff'")
    # small_values: ff = 1.0 + 0.1*seg + 0.2*m + i with i=1 (0018), m=0 ref / 1 fast
    assert row["reference_value"].item() == pytest.approx(2.5)
    assert row["test_value"].item() == pytest.approx(2.7)
    assert row["ring"].item() == "basal" and row["segment_name"].item() == "basal inferolateral"
    assert row["territory"].item() == "LCx" and row["group"].item() == "acute"


def test_column_names_are_matched_case_insensitively_and_trimmed(make_study):
    header = [" Subject", "METHOD ", "Segment", "Parameter", "Value"]
    study = load_study(make_study(values_header=header))
    assert len(study.paired) == 153


def test_wide_layout_gives_the_same_pairs_as_long(make_study, tmp_path):
    long = load_study(make_study())
    rows = small_values()
    wide = (
        pd.DataFrame(rows, columns=HEADER)
        .pivot_table(index=["subject", "method", "segment"], columns="parameter", values="value")
        .reset_index()
    )
    wide["subject"] = wide["subject"].astype(str)
    wide["pixels"] = 100
    path = tmp_path / "wide.csv"
    wide.to_csv(path, index=False)
    study = load_study(make_study().with_options(values=path))
    cols = ["parameter", "subject", "segment", "reference_value", "test_value"]
    a = long.paired[cols].sort_values(cols[:3]).reset_index(drop=True)
    b = study.paired[cols].sort_values(cols[:3]).reset_index(drop=True)
    pd.testing.assert_frame_equal(a, b)
    assert "pixels" in study.records.columns  # extra columns are kept


def test_blank_values_are_missing_data_counted_per_method_segment_parameter(make_study):
    rows = small_values()
    rows[0][4] = ""  # 0017 ref seg 1 ff
    rows[1][4] = " "  # 0017 ref seg 1 r2star
    study = load_study(make_study(values=rows))
    missing = study.missing_values()
    assert missing["n_missing"].sum() == 2
    assert set(missing["parameter"]) == {"ff", "r2star"}
    counts = study.accounting()
    # the fast method's two partners of the blank cells cannot be paired: excluded
    assert counts == {"records_in": 306, "used": 302, "missing": 2, "excluded": 2}
    excluded = study.exclusions().query("status == 'excluded'")
    assert set(excluded["reason"]) == {"the reference method has no value for this segment"}
    assert set(excluded["source_row"]) == {2 + 51 + 0, 2 + 51 + 1}


def test_t2star_is_converted_to_r2star(make_study):
    rows = [
        r if r[3] != "r2star" else [*r[:3], "t2star", round(1000.0 / r[4], 6)]
        for r in small_values()
    ]
    study = load_study(make_study(values=rows))
    r2 = load_study(make_study()).paired.query("parameter == 'r2star'")
    t2 = study.paired.query("parameter == 'r2star'")
    np.testing.assert_allclose(t2["reference_value"], r2["reference_value"], rtol=1e-6)


def test_t2star_beside_agreeing_r2star_is_listed_as_excluded(make_study):
    rows = small_values()
    extra = [[*r[:3], "t2star", 1000.0 / r[4]] for r in rows[:6] if r[3] == "r2star"]
    study = load_study(make_study(values=rows + extra))
    excluded = study.exclusions()
    assert len(excluded) == len(extra)
    assert excluded["reason"].str.contains("T2\\* duplicates").all()


def test_t2star_and_r2star_that_disagree_are_an_error(make_study):
    rows = small_values()
    rows.append(["0017", "ref", 1, "t2star", 10.0])  # 100 1/s, but R2* is 26
    problem = only(problems_of(make_study(values=rows)), "t2star-r2star-conflict")[0]
    assert problem.file == "values.csv" and problem.row == 3


def test_fraction_unit_is_converted_to_percent(make_study):
    rows = [r if r[3] != "ff" else [*r[:4], r[4] / 100.0] for r in small_values()]
    study = load_study(make_study(values=rows, ff_unit="fraction"))
    ref = load_study(make_study()).paired.query("parameter == 'ff'")["reference_value"]
    np.testing.assert_allclose(study.paired.query("parameter == 'ff'")["reference_value"], ref)


def test_ppm_field_is_converted_with_the_field_strength(make_study):
    rows = [r if r[3] != "field" else [*r[:4], 0.5] for r in small_values()]
    study = load_study(make_study(values=rows, field_unit="ppm", field_referencing="none"))
    f = study.values.query("parameter == 'field'")
    # 0.5 ppm x 42.577478518 MHz/T x B0 (CODATA 2018): 31.933 Hz at 1.5 T, 63.866 Hz at 3 T
    np.testing.assert_allclose(f.loc[f.field_strength == 1.5, "value"], 31.9331, atol=1e-3)
    np.testing.assert_allclose(f.loc[f.field_strength == 3.0, "value"], 63.8662, atol=1e-3)


def test_field_is_referenced_to_the_subject_median_by_default(make_study):
    study = load_study(make_study())
    f = study.values.query("parameter == 'field'")
    medians = f.groupby(["subject", "method"])["value"].median()
    np.testing.assert_allclose(medians, 0.0, atol=1e-12)
    # small_values: field = 10 + seg + 3m; referenced to the median segment (9): seg - 9
    one = f.query("subject == '0017' and method == 'fast' and segment == 1")["value"].item()
    assert one == pytest.approx(-8.0)


def test_field_referenced_to_remote_segments(make_study):
    study = load_study(make_study(field_referencing="remote", remote_segments=(1, 2, 3)))
    f = study.values.query("parameter == 'field' and subject == '0017' and method == 'ref'")
    assert f.query("segment == 2")["value"].item() == pytest.approx(0.0)
    assert f.query("segment == 17")["value"].item() == pytest.approx(15.0)


def test_loading_never_modifies_the_inputs(make_study):
    settings = make_study()
    before = [
        hashlib.sha256(p.read_bytes()).hexdigest() for p in (settings.values, settings.subjects)
    ]
    load_study(settings)
    after = [
        hashlib.sha256(p.read_bytes()).hexdigest() for p in (settings.values, settings.subjects)
    ]
    assert before == after


def test_xlsx_tsv_and_parquet_inputs_read_alike(make_study, tmp_path):
    frame = pd.DataFrame(small_values(), columns=HEADER)
    frame["subject"] = frame["subject"].astype(str)
    base = load_study(make_study()).paired
    for suffix, writer in (
        (".tsv", lambda p: frame.to_csv(p, sep="\t", index=False)),
        (".xlsx", lambda p: frame.to_excel(p, index=False)),
        (".parquet", lambda p: frame.to_parquet(p, index=False)),
    ):
        path = tmp_path / f"values{suffix}"
        writer(path)
        paired = load_study(make_study().with_options(values=path)).paired
        pd.testing.assert_frame_equal(paired, base, check_exact=False)


# --- bad input: each case has its own test --------------------------------------------------


def test_missing_file(make_study, tmp_path):
    problem = only(
        problems_of(make_study().with_options(values=tmp_path / "nope.csv")), "file-missing"
    )[0]
    assert "nope.csv" in problem.file


def test_unreadable_file(make_study, tmp_path):
    path = tmp_path / "broken.xlsx"
    path.write_bytes(b"this is not a workbook")
    only(problems_of(make_study().with_options(values=path)), "file-unreadable")


def test_wrong_delimiter(make_study, tmp_path):
    path = write_csv(tmp_path / "semi.csv", HEADER, small_values(), delimiter=";")
    problem = only(problems_of(make_study().with_options(values=path)), "delimiter")[0]
    assert problem.row == 1 and "semicolon" in problem.detail


def test_missing_column(make_study):
    rows = [r[:4] for r in small_values()]
    problem = only(
        problems_of(make_study(values=rows, values_header=[*HEADER[:3], "param"])), "missing-column"
    )
    assert {p.column for p in problem} == {"parameter", "value"}
    assert problem[0].file == "values.csv" and problem[0].row == 1


def test_unknown_parameter(make_study):
    rows = small_values()
    rows[4][3] = "T2"
    problem = only(problems_of(make_study(values=rows)), "unknown-parameter")[0]
    assert (problem.row, problem.column, problem.value) == (6, "parameter", "T2")


@pytest.mark.parametrize("bad", ["18", "0", "2.5", "seven", ""])
def test_segment_not_in_the_model(make_study, bad):
    rows = small_values()
    rows[10][2] = bad
    problem = only(problems_of(make_study(values=rows)), "segment-invalid")[0]
    assert (problem.file, problem.row, problem.column) == ("values.csv", 12, "segment")
    assert "1-17" in problem.expected


def test_segment_17_in_a_16_segment_study(make_study):
    problems = problems_of(make_study(segment_model="aha16"))
    found = only(problems, "segment-invalid")
    assert "1-16" in found[0].expected and found[0].value == "17"


def test_duplicate_value(make_study):
    rows = small_values()
    rows.append(list(rows[3]))
    problem = only(problems_of(make_study(values=rows)), "duplicate-value")[0]
    assert problem.row == 5 and f"[{len(rows) + 1}]" in problem.detail


def test_non_numeric_value(make_study):
    rows = small_values()
    rows[7][4] = "12,5"
    rows[8][4] = "high"
    found = only(problems_of(make_study(values=rows)), "not-numeric")
    assert [(p.row, p.column, p.value) for p in found] == [
        (9, "value", "12,5"),
        (10, "value", "high"),
    ]
    assert "decimal commas" in found[0].expected


def test_infinite_value(make_study):
    rows = small_values()
    rows[2][4] = "inf"
    only(problems_of(make_study(values=rows)), "not-finite")


def test_subject_in_values_but_not_in_subjects(make_study):
    subjects = small_subjects()[:2]
    problem = only(problems_of(make_study(subjects=subjects)), "subject-without-info")[0]
    assert problem.file == "values.csv" and problem.row == 2 + 2 * 102
    # the ID is in the subject field, which pseudonymisation replaces whole; not in the text
    assert problem.subject == "0019" and problem.value is None and "0019" not in problem.detail


def test_subject_in_subjects_but_not_in_values(make_study):
    subjects = [*small_subjects(), ["0020", "control", 1.5, 40]]
    problem = only(problems_of(make_study(subjects=subjects)), "subject-without-values")[0]
    assert (problem.file, problem.row, problem.subject) == ("subjects.csv", 5, "0020")
    assert problem.value is None and "0020" not in problem.detail


def test_duplicate_subject_with_conflicting_groups(make_study):
    subjects = [*small_subjects(), ["0017", "acute", 1.5, 51]]
    problem = only(problems_of(make_study(subjects=subjects)), "duplicate-subject")[0]
    assert problem.row == 2 and "conflicting groups" in problem.detail


def test_unknown_group(make_study):
    subjects = small_subjects()
    subjects[1][1] = "acut"
    problem = only(problems_of(make_study(subjects=subjects)), "unknown-group")[0]
    assert (problem.file, problem.row, problem.column, problem.value) == (
        "subjects.csv",
        3,
        "group",
        "acut",
    )


def test_unknown_reference_method(make_study):
    problem = only(problems_of(make_study(reference="reference")), "unknown-reference")[0]
    assert "['fast', 'ref']" in problem.expected


def test_fewer_than_two_methods(make_study):
    only(problems_of(make_study(values=small_values(methods=("ref",)))), "too-few-methods")


@pytest.mark.parametrize("bad", ["", "0", "-1.5", "strong"])
def test_missing_or_non_positive_field_strength(make_study, bad):
    subjects = small_subjects()
    subjects[2][2] = bad
    problem = only(problems_of(make_study(subjects=subjects)), "field-strength")[0]
    assert (problem.row, problem.column) == (4, "field_strength")


def test_field_strength_with_unit_is_read_with_a_warning(make_study):
    subjects = small_subjects()
    subjects[0][2] = "1.5T"
    study = load_study(make_study(subjects=subjects))
    assert study.subjects["field_strength"].iloc[0] == 1.5
    assert [w.code for w in study.warnings] == ["unit-in-text"]


@pytest.mark.parametrize("value, ok", [(-4.9, True), (-5.1, False), (104.0, True), (106.0, False)])
def test_fat_fraction_plausible_range_with_noise_tolerance(make_study, value, ok):
    # small negative PDFF is noise near zero and is kept signed (DOMAIN.md; Liu et al. 2007, memory)
    rows = small_values()
    rows[0][4] = value
    settings = make_study(values=rows)
    if ok:
        assert load_study(settings).values.query("value == @value").shape[0] == 1
    else:
        problem = only(problems_of(settings), "implausible-value")[0]
        assert problem.row == 2 and problem.column == "value"


def test_tolerance_is_configurable(make_study):
    rows = small_values()
    rows[0][4] = -8.0
    load_study(make_study(values=rows, checks={"ff_below_zero_tolerance": 10.0}))


def test_negative_r2star(make_study):
    rows = small_values()
    rows[1][4] = -3.0
    problem = only(problems_of(make_study(values=rows)), "implausible-value")[0]
    assert problem.row == 3 and "negative" in problem.detail


def test_zero_t2star(make_study):
    rows = [r if r[3] != "r2star" else [*r[:3], "t2star", 30.0] for r in small_values()]
    rows[1][4] = 0
    problem = only(problems_of(make_study(values=rows)), "implausible-value")[0]
    assert problem.row == 3 and "T2* must be positive" in problem.detail


def test_percent_fraction_mix_up_between_methods(make_study):
    rows = [r if (r[3] != "ff" or r[1] != "fast") else [*r[:4], r[4] / 100] for r in small_values()]
    problem = only(problems_of(make_study(values=rows)), "unit-mismatch")[0]
    assert "'fast'" in problem.detail and "fractions" in problem.detail


def test_percent_declared_as_fraction(make_study):
    problem = only(problems_of(make_study(ff_unit="fraction")), "unit-mismatch")[0]
    assert "look like percent" in problem.detail


def test_all_problems_are_listed_together(make_study):
    rows = small_values()
    rows[0][2] = "99"
    rows[1][3] = "x"
    rows[2][4] = "abc"
    subjects = small_subjects()
    subjects[0][1] = "nogroup"
    codes = {p.code for p in problems_of(make_study(values=rows, subjects=subjects))}
    assert {"segment-invalid", "unknown-parameter", "not-numeric", "unknown-group"} <= codes


def test_error_message_names_file_row_and_column(make_study):
    rows = small_values()
    rows[0][4] = "abc"
    with pytest.raises(
        StudyError,
        match=r"values\.csv, row 2, column 'value', subject '0017', method 'ref': "
        r"value is not a number",
    ):
        load_study(make_study(values=rows))


def test_unknown_study_file_key_is_refused(tmp_path):
    from cohort.io.settings import read_study_file

    path = tmp_path / "study.toml"
    path.write_text('[study]\nvalues="v.csv"\nsubjects="s.csv"\nreference="r"\nrefrence="x"\n')
    with pytest.raises(StudyError, match="unknown key 'refrence'"):
        read_study_file(path)
