"""A catalogue of malformed studies: each gives a usable study with a recorded warning, or
exit status 2 with a message naming file, row and column; none raises out of the CLI.

The cases are the usual ways hand-edited spreadsheets go wrong (common practice); the
expected outcome of each is stated beside it.
"""

from __future__ import annotations

import string

import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cohort.cli import main
from cohort.domain.problems import StudyError
from cohort.io.settings import build_settings
from cohort.io.study import load_study

from ..conftest import HEADER, small_subjects, small_values, write_csv

SUBJECT_HEADER = ["subject", "group", "field_strength", "age"]


def values_frame():
    frame = pd.DataFrame(small_values(), columns=HEADER)
    frame["subject"] = frame["subject"].astype(str)
    return frame


def write_values_text(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def csv_text(rows, header=HEADER, sep=","):
    return "\n".join(sep.join(str(c) for c in r) for r in [header, *rows]) + "\n"


def edit(rows, index, column, value):
    rows = [list(r) for r in rows]
    rows[index][column] = value
    return rows


def wide_frame():
    frame = values_frame().pivot_table(
        index=["subject", "method", "segment"], columns="parameter", values="value"
    )
    return frame.reset_index()


# name -> (values writer, subjects rows or None, extra flags, expected exit, expected text)
CASES = {
    "wrong delimiter (semicolon)": (
        lambda p: write_values_text(p / "values.csv", csv_text(small_values(), sep=";")),
        None,
        [],
        2,
        "values.csv, row 1",
    ),
    "byte-order mark": (
        lambda p: (p / "values.csv").write_bytes(
            b"\xef\xbb\xbf" + csv_text(small_values()).encode()
        ),
        None,
        [],
        0,
        None,
    ),
    "excel with several sheets": (
        lambda p: _two_sheets(p / "values.xlsx"),
        None,
        [],
        0,
        "extra-sheets",
    ),
    "title row above the header": (
        lambda p: write_values_text(
            p / "values.csv", "Export of segment values\n" + csv_text(small_values())
        ),
        None,
        [],
        2,
        "header seems to be on row 2",
    ),
    "unit in header, as declared": (
        lambda p: (
            wide_frame().rename(columns={"ff": "ff (%)"}).to_csv(p / "values.csv", index=False)
        ),
        None,
        [],
        0,
        "unit-in-text",
    ),
    "unit in header contradicts declaration": (
        lambda p: (
            wide_frame()
            .rename(columns={"ff": "ff (fraction)"})
            .to_csv(p / "values.csv", index=False)
        ),
        None,
        [],
        2,
        "column 'ff (fraction)'",
    ),
    "comma decimal separator": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 3, 4, '"2,5"')),
        None,
        [],
        2,
        "values.csv, row 5, column 'value'",
    ),
    "number stored as text with spaces": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 3, 4, " 2.5 ")),
        None,
        [],
        0,
        None,
    ),
    "duplicated subject with conflicting groups": (
        None,
        [*small_subjects(), ["0018", "control", 1.5, 50]],
        [],
        2,
        "conflicting groups",
    ),
    "whitespace around IDs": (
        lambda p: write_csv(
            p / "values.csv", HEADER, [[f" {r[0]} ", *r[1:]] for r in small_values()]
        ),
        None,
        [],
        0,
        "whitespace-trimmed",
    ),
    "empty values file": (
        lambda p: write_values_text(p / "values.csv", ""),
        None,
        [],
        2,
        "file is empty",
    ),
    "header only": (
        lambda p: write_values_text(p / "values.csv", ",".join(HEADER) + "\n"),
        None,
        [],
        2,
        "no data rows",
    ),
    "only one method": (
        lambda p: write_csv(p / "values.csv", HEADER, small_values(methods=("ref",))),
        None,
        [],
        2,
        "too-few-methods",
    ),
    "huge value": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 0, 4, "1e300")),
        None,
        [],
        2,
        "values.csv, row 2, column 'value'",
    ),
    "infinity": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 1, 4, "-inf")),
        None,
        [],
        2,
        "value is infinite",
    ),
    "NaN text is missing": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 1, 4, "NaN")),
        None,
        [],
        0,
        "1 missing",
    ),
    "16-segment study with apex values": (
        lambda p: write_csv(p / "values.csv", HEADER, small_values()),
        None,
        ["--segment-model", "aha16"],
        2,
        "expected an integer 1-16",
    ),
    "17-segment study, some subjects without apex": (
        lambda p: write_csv(
            p / "values.csv",
            HEADER,
            [r for r in small_values() if not (r[0] == "0018" and r[2] == 17)],
        ),
        None,
        [],
        0,
        None,
    ),
    "field strength written 1.5T": (
        None,
        edit(small_subjects(), 0, 2, "1.5T"),
        [],
        0,
        "unit-in-text",
    ),
    "field strength written 3 tesla": (
        None,
        edit(small_subjects(), 0, 2, "3 tesla"),
        [],
        2,
        "subjects.csv, row 2, column 'field_strength'",
    ),
    "negative field strength": (
        None,
        edit(small_subjects(), 1, 2, "-3"),
        [],
        2,
        "subjects.csv, row 3, column 'field_strength'",
    ),
    "segment written as text": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 2, 2, "seg4")),
        None,
        [],
        2,
        "values.csv, row 4, column 'segment'",
    ),
    "segment as 4.0": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 2, 2, "1.0")),
        None,
        [],
        0,
        None,
    ),
    "ragged row": (
        lambda p: write_values_text(p / "values.csv", csv_text(small_values()) + "0017,ref,1\n"),
        None,
        [],
        2,
        "row 308",
    ),
    "duplicate column names": (
        lambda p: write_csv(
            p / "values.csv", [*HEADER, "Value"], [[*r, 1] for r in small_values()]
        ),
        None,
        [],
        2,
        "duplicate-column",
    ),
    "unknown file type": (
        lambda p: write_values_text(p / "values.json", "{}"),
        None,
        [],
        2,
        "file type not supported",
    ),
    "binary garbage as xlsx": (
        lambda p: (p / "values.xlsx").write_bytes(bytes(range(256)) * 4),
        None,
        [],
        2,
        "cannot read file",
    ),
    "latin-1 encoded file": (
        lambda p: (p / "values.csv").write_bytes(
            csv_text(
                [[*r[:1], "réf" if r[1] == "ref" else r[1], *r[2:]] for r in small_values()]
            ).encode("latin-1")
        ),
        None,
        ["--reference", "réf"],
        2,
        "values.csv, row 2: line 2 is not UTF-8 text",  # UTF-8 only, never guessed (loading)
    ),
    "blank subject ID": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 5, 0, "")),
        None,
        [],
        2,
        "values.csv, row 7, column 'subject'",
    ),
    "blank group": (
        None,
        edit(small_subjects(), 2, 1, ""),
        [],
        2,
        "subjects.csv, row 4, column 'group'",
    ),
    "missing subjects column": (
        None,
        [[r[0], r[1], r[3]] for r in small_subjects()],
        ["--no-field"],
        2,
        "column 'field_strength'",
    ),
    "negative R2*": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 1, 4, "-2")),
        None,
        [],
        2,
        "R2* is negative",
    ),
    "fat fractions as 0-1 fractions while percent is declared": (
        lambda p: write_csv(
            p / "values.csv",
            HEADER,
            [r if r[3] != "ff" else [*r[:4], r[4] / 100] for r in small_values()],
        ),
        None,
        [],
        2,
        "units.ff = 'fraction'",
    ),
    "R2* above the plausible maximum": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 1, 4, "1200")),
        None,
        [],
        2,
        "values.csv, row 3, column 'value', subject '0017', method 'ref'",
    ),
    "field offset far too large": (
        lambda p: write_csv(p / "values.csv", HEADER, edit(small_values(), 2, 4, "250000")),
        None,
        [],
        2,
        "field_max_abs_hz",
    ),
}


def _two_sheets(path):
    with pd.ExcelWriter(path) as writer:
        values_frame().to_excel(writer, sheet_name="values", index=False)
        pd.DataFrame({"note": ["exported"]}).to_excel(writer, sheet_name="notes", index=False)
    return path


def test_catalogue_has_at_least_30_cases():
    assert len(CASES) >= 30


@pytest.mark.parametrize("name", list(CASES))
def test_bad_input_case(name, tmp_path, capsys):
    write_values, subjects, flags, expected_exit, expected_text = CASES[name]
    if write_values is None:
        write_csv(tmp_path / "values.csv", HEADER, small_values())
    else:
        write_values(tmp_path)
    values_path = next(p for p in tmp_path.iterdir() if p.name.startswith("values"))
    subj_rows = subjects if subjects is not None else small_subjects()
    header = SUBJECT_HEADER if "--no-field" not in flags else ["subject", "group", "age"]
    write_csv(tmp_path / "subjects.csv", header, subj_rows)
    flags = [f for f in flags if f != "--no-field"]
    reference = ["--reference", "ref"] if "--reference" not in flags else []
    argv = ["check", "--values", str(values_path), "--subjects", str(tmp_path / "subjects.csv"),
            *reference, "--groups", "control,acute,chronic", *flags]  # fmt: skip
    code = main(argv)
    out, err = capsys.readouterr()
    assert code == expected_exit, err or out
    if expected_exit == 2:
        assert "Traceback" not in err and out == ""
    if expected_text:
        assert expected_text in (err if expected_exit == 2 else out)


# --- property: random tables give a valid study or the documented error -------------------

cell = st.one_of(
    st.text(alphabet=string.printable, max_size=6),
    st.sampled_from(
        ["", "ff", "r2star", "t2star", "field", "ref", "fast", "0017", "1", "17", "-1e9"]
    ),
    st.floats(allow_nan=True, allow_infinity=True).map(str),
    st.integers(-5, 30).map(str),
)


@settings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(rows=st.lists(st.lists(cell, min_size=5, max_size=5), min_size=1, max_size=12))
def test_random_values_tables_give_a_study_or_a_study_error(tmp_path, rows):
    write_csv(tmp_path / "values.csv", HEADER, rows)
    write_csv(tmp_path / "subjects.csv", SUBJECT_HEADER, small_subjects())
    settings_ = build_settings(
        values=tmp_path / "values.csv", subjects=tmp_path / "subjects.csv", reference="ref"
    )
    try:
        study = load_study(settings_)
    except StudyError as exc:
        assert exc.problems and all(p.file for p in exc.problems)
    else:
        counts = study.accounting()
        assert counts["records_in"] == len(rows)
