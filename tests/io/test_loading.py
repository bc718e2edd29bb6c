"""Tests of cohort.io.loading: the pyarrow path for plain delimited files gives exactly what the
csv-module path gives (cells as text, spreadsheet row numbers, problems)."""

from __future__ import annotations

import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cohort.domain.problems import StudyError
from cohort.io import loading


def _read(path, fast: bool, monkeypatch):
    monkeypatch.setattr(loading, "FAST_PLAIN_CSV", fast)
    try:
        table = loading.read_table(path)
    except StudyError as exc:
        return "error", [(p.code, p.row, p.column, p.value) for p in exc.problems]
    return "table", table.frame


def _same(path, monkeypatch):
    fast = _read(path, True, monkeypatch)
    slow = _read(path, False, monkeypatch)
    assert fast[0] == slow[0]
    if fast[0] == "error":
        assert fast[1] == slow[1]
    else:
        pd.testing.assert_frame_equal(fast[1], slow[1])  # cells and spreadsheet rows


cell = st.text(alphabet=" abcX01.-;\t\u00e9", max_size=4)


@settings(
    max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)  # each call sets the switch itself
@given(
    rows=st.lists(st.lists(cell, min_size=3, max_size=4), min_size=0, max_size=8),
    ending=st.sampled_from(["\n", "\r\n"]),
    last_newline=st.booleans(),
    blank_at=st.one_of(st.none(), st.integers(0, 8)),
)
def test_plain_files_read_the_same_by_both_paths(
    tmp_path_factory, monkeypatch, rows, ending, last_newline, blank_at
):
    lines = ["subject,method,value"] + [",".join(r) for r in rows]
    if blank_at is not None:
        lines.insert(min(blank_at + 1, len(lines)), " , ,")  # a blank row: the careful path
    text = ending.join(lines) + (ending if last_newline else "")
    path = tmp_path_factory.mktemp("plain") / "values.csv"
    path.write_bytes(text.encode("utf-8"))
    _same(path, monkeypatch)


def test_the_fast_path_reads_plain_files_and_leaves_others(tmp_path, monkeypatch):
    plain = "subject,method,value\n0017,ref, 1.5\n0018,ref,\n"
    frame = loading._read_plain(plain, ",")
    assert frame is not None
    assert frame.values.tolist() == [["0017", "ref", " 1.5"], ["0018", "ref", ""]]
    assert list(frame.attrs["rows"]) == [2, 3]  # spreadsheet rows: header = row 1
    for other in (
        'subject,method,value\n0017,"ref, fast",1\n',  # a quoted cell
        "subject,method,value\n0017,ref\n",  # a short row: reported by the careful path
        "subject,method,value\n\n0017,ref,1\n",  # an empty line: rows shift
        "subject,method,value\r0017,ref,1\r",  # old Mac line ends
        "subject,method,value\n",  # no data row
    ):
        assert loading._read_plain(other, ",") is None, other
    path = tmp_path / "values.csv"
    path.write_text("subject,method,value\n0017,ref\n0018,ref,2\n", encoding="utf-8")
    with pytest.raises(StudyError) as caught:
        loading.read_table(path)
    assert [(p.code, p.row) for p in caught.value.problems] == [("file-unreadable", 2)]


# --- encodings: UTF-8 only, never guessed ---------------------------------------------------
# UTF-8 and its byte-order mark EF BB BF: Unicode Standard, chapter 3 (D92) and section 23.8
# (memory); 0xE9 is "é" in ISO 8859-1 (Latin-1) and never a complete UTF-8 sequence before
# an ASCII byte (RFC 3629, section 3: a lead byte 1110xxxx needs two continuation bytes).

VALUES = "subject,method,segment,parameter,value\n"


def _problems(path, fast=True, monkeypatch=None):
    if monkeypatch is not None:
        monkeypatch.setattr(loading, "FAST_PLAIN_CSV", fast)
    with pytest.raises(StudyError) as caught:
        loading.read_table(path)
    return caught.value.problems


@pytest.mark.parametrize("fast", [True, False])  # the pyarrow path and the csv-module path
@pytest.mark.parametrize(
    "body",
    [
        "S1,ref,1,ff,1.5\nS2,Ren\u00e9,1,ff,2.5\nS3,ref,1,ff,3.5\n",  # plain: pyarrow's reader
        'S1,ref,1,ff,1.5\nS2,"Ren\u00e9, fast",1,ff,2.5\nS3,ref,1,ff,3.5\n',  # quoted: csv
    ],
)
def test_latin1_bytes_are_refused_at_their_row(tmp_path, monkeypatch, fast, body):
    path = tmp_path / "values.csv"
    path.write_bytes((VALUES + body).encode("latin-1"))
    (problem,) = _problems(path, fast, monkeypatch)
    assert (problem.code, problem.file, problem.row) == (loading.ENCODING_CODE, "values.csv", 3)
    assert "line 3 is not UTF-8" in problem.detail and "0xE9" in problem.detail
    assert "save the file as UTF-8" in problem.expected


def test_the_row_of_a_bad_byte_counts_crlf_line_ends(tmp_path, monkeypatch):
    path = tmp_path / "values.tsv"
    text = "subject\tvalue\r\nS1\t1\r\nS2\t2\r\nS3\t\u00e93\r\n"
    path.write_bytes(text.encode("latin-1"))
    (problem,) = _problems(path, True, monkeypatch)
    assert (problem.file, problem.row) == ("values.tsv", 4)
    assert problem.value == "S3\t\ufffd3"  # the line, the bad byte as U+FFFD


@pytest.mark.parametrize("encoding", ["utf-16", "utf-32"])  # with a byte-order mark
def test_utf16_and_utf32_with_a_byte_order_mark_are_named(tmp_path, encoding):
    path = tmp_path / "values.csv"
    path.write_bytes((VALUES + "S1,ref,1,ff,1.5\n").encode(encoding))
    (problem,) = _problems(path)
    assert (problem.code, problem.file, problem.row) == (loading.ENCODING_CODE, "values.csv", 1)
    assert f"{encoding.upper()} text" in problem.detail


def test_utf16_without_a_byte_order_mark_is_refused(tmp_path):
    # UTF-16LE of ASCII text is valid UTF-8 byte by byte, with a NUL after every character
    # (Unicode Standard, section 3.10, UTF-16LE; memory): the NUL bytes give it away.
    path = tmp_path / "values.csv"
    path.write_bytes((VALUES + "S1,ref,1,ff,1.5\n").encode("utf-16-le"))
    (problem,) = _problems(path)
    assert (problem.code, problem.file, problem.row) == (loading.ENCODING_CODE, "values.csv", 1)
    assert "UTF-16" in problem.detail and "NUL byte" in problem.detail


@pytest.mark.parametrize("fast", [True, False])
def test_utf8_with_and_without_byte_order_mark_read_the_same(tmp_path, monkeypatch, fast):
    monkeypatch.setattr(loading, "FAST_PLAIN_CSV", fast)
    text = VALUES + "S1,R\u00e9f\u00e9rence \u2013 fit,1,ff,1.5\n"
    plain, marked = tmp_path / "plain.csv", tmp_path / "marked.csv"
    plain.write_bytes(text.encode("utf-8"))
    marked.write_bytes(text.encode("utf-8-sig"))  # EF BB BF first
    a, b = loading.read_table(plain).frame, loading.read_table(marked).frame
    pd.testing.assert_frame_equal(a, b)
    assert list(a.columns)[1] == "subject"  # the mark is not part of the first name
    assert a["method"].tolist() == ["R\u00e9f\u00e9rence \u2013 fit"]


# --- spreadsheet error values and uncalculated formulas ---------------------------------------
# The seven cell error values of spreadsheets (ECMA-376 Office Open XML Part 1, cell error
# values; memory): #NULL!, #DIV/0!, #VALUE!, #REF!, #NAME?, #NUM!, #N/A.

ERRORS = ["#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A"]


def test_the_error_values_are_the_seven_of_the_file_format():
    assert loading.ERROR_VALUES == frozenset(ERRORS)


@pytest.mark.parametrize("fast", [True, False])
@pytest.mark.parametrize("error", ERRORS)
def test_error_values_written_as_text_in_a_csv_are_errors(tmp_path, monkeypatch, fast, error):
    path = tmp_path / "values.csv"
    path.write_text(
        VALUES + f"S1,ref,1,ff,1.5\nS2,ref,1,ff,{error}\nS3,ref,1,ff, {error.lower()}\n",
        encoding="utf-8",
    )
    problems = _problems(path, fast, monkeypatch)
    assert [(p.code, p.file, p.row, p.column, p.value) for p in problems] == [
        (loading.ERROR_VALUE_CODE, "values.csv", 3, "value", error),
        (loading.ERROR_VALUE_CODE, "values.csv", 4, "value", f" {error.lower()}"),
    ]


def test_text_that_only_contains_a_hash_is_kept(tmp_path):
    path = tmp_path / "values.csv"
    path.write_text(VALUES + "S#1,scan #2,1,ff,1.5\n", encoding="utf-8")
    frame = loading.read_table(path).frame
    assert frame[["subject", "method"]].values.tolist() == [["S#1", "scan #2"]]


def _workbook(path, rows):
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["subject", "method", "segment", "parameter", "Value (%)"])
    for row in rows:
        sheet.append(row)
    book.save(path)  # openpyxl writes formulas without calculating them


def test_workbook_error_cells_are_errors_not_blanks(tmp_path):
    path = tmp_path / "values.xlsx"
    _workbook(path, [["S1", "ref", 1, "ff", 1.5], ["S2", "ref", 1, "ff", "#DIV/0!"]])
    (problem,) = _problems(path)
    assert (problem.code, problem.file, problem.row, problem.column, problem.value) == (
        loading.ERROR_VALUE_CODE,
        "values.xlsx",
        3,
        "Value (%)",
        "#DIV/0!",
    )
    assert "cell E3" in problem.detail


def test_workbook_formulas_without_a_calculated_value_are_errors(tmp_path):
    path = tmp_path / "values.xlsx"
    _workbook(path, [["S1", "ref", 1, "ff", 1.5], [], ["S2", "ref", 1, "ff", "=E2*2"]])
    (problem,) = _problems(path)
    assert (problem.code, problem.file, problem.row, problem.column, problem.value) == (
        loading.UNCALCULATED_CODE,
        "values.xlsx",
        4,  # the blank row 3 counts: rows as a spreadsheet program shows them
        "Value (%)",
        "=E2*2",
    )
    assert "cell E4" in problem.detail and "formula" in problem.detail


def test_many_error_cells_are_listed_up_to_a_limit_and_counted(tmp_path):
    path = tmp_path / "values.csv"
    n = loading.MAX_CELL_PROBLEMS + 5
    path.write_text(VALUES + "".join(f"S{i},ref,1,ff,#N/A\n" for i in range(n)), "utf-8")
    problems = _problems(path)
    assert [p.row for p in problems[:-1]] == list(range(2, 2 + loading.MAX_CELL_PROBLEMS))
    assert problems[-1].row is None and problems[-1].detail.startswith("5 more cell(s)")


# --- without pyarrow ------------------------------------------------------------------------


def test_without_pyarrow_plain_files_are_read_by_the_csv_module(tmp_path, monkeypatch):
    import sys

    path = tmp_path / "values.csv"
    path.write_text(VALUES + "0017,ref,1,ff, 1.5\n0018,ref,2,ff,\n\n0019,ref,3,ff,2\n", "utf-8")
    plain = tmp_path / "plain.csv"
    plain.write_text(VALUES + "0017,ref,1,ff, 1.5\n0018,ref,2,ff,\n", "utf-8")
    assert loading._read_plain(plain.read_text("utf-8"), ",") is not None  # pyarrow here
    with_pyarrow = [loading.read_table(p).frame for p in (path, plain)]
    monkeypatch.setitem(sys.modules, "pyarrow", None)  # import pyarrow raises ImportError
    monkeypatch.setitem(sys.modules, "pyarrow.csv", None)
    with pytest.raises(ImportError):
        import pyarrow  # noqa: F401
    assert loading._read_plain(plain.read_text("utf-8"), ",") is None
    for before, p in zip(with_pyarrow, (path, plain), strict=True):
        after = loading.read_table(p).frame
        pd.testing.assert_frame_equal(after, before)  # same cells and spreadsheet rows
    assert loading.read_table(path).frame["_row"].tolist() == [2, 3, 5]
    assert loading.read_table(plain).frame["value"].tolist() == [" 1.5", ""]


def test_an_unreadable_file_is_named_without_its_folder(tmp_path):
    # a reader's own message repeats the path; the problem names the file alone, since a
    # folder name can identify a person (README, Data protection)
    folder = tmp_path / "patient-Doe-Jane"
    folder.mkdir()
    path = folder / "values.parquet"
    path.write_bytes(b"not a parquet file")
    with pytest.raises(StudyError) as caught:
        loading.read_table(path)
    [problem] = caught.value.problems
    assert problem.code == "file-unreadable" and problem.file == "values.parquet"
    assert "patient-Doe-Jane" not in str(problem)
