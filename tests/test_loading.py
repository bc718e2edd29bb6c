"""Tests of cohort.loading: the pyarrow path for plain delimited files gives exactly what the
csv-module path gives (cells as text, spreadsheet row numbers, problems)."""

from __future__ import annotations

import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cohort import loading
from cohort.problems import StudyError


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
