"""Output writing: formula injection guarded in CSV and XLSX (OWASP "CSV Injection"),
numbers kept as numbers, atomic folders."""

from __future__ import annotations

import pandas as pd
import pytest

from cohort.outputs import OutputExistsError, guard_text, publish, staging_folder, write_tables


def test_text_that_a_spreadsheet_would_run_is_quoted():
    frame = pd.DataFrame(
        {
            "method": ['=HYPERLINK("http://x")', "+1+1", "-cmd", "@SUM(A1)", "\tx", "\rx", "plain"],
            "value": [-1.5, 2.0, -3.0, 4.0, 5.0, 6.0, 7.0],
            "text_number": ["-1.5", "2", "-3e2", "x", "y", "z", "w"],
        }
    )
    guarded = guard_text(frame)
    assert guarded["method"].tolist()[:6] == ["'" + v for v in frame["method"][:6]]
    assert guarded["method"].iloc[6] == "plain"
    assert guarded["value"].tolist() == frame["value"].tolist()  # numbers stay numbers
    assert guarded["text_number"].tolist()[:3] == ["-1.5", "2", "-3e2"]  # numeric text too
    assert frame["method"].iloc[0].startswith("=")  # the input is not changed


def test_csv_and_xlsx_cells_are_guarded(tmp_path):
    frame = pd.DataFrame({"method": ["=1+2", "ok"], "bias": [-0.5, 0.25]})
    write_tables({"agreement": frame}, tmp_path)
    csv = pd.read_csv(tmp_path / "tables" / "agreement.csv")
    assert csv["method"].tolist() == ["'=1+2", "ok"] and csv["bias"].tolist() == [-0.5, 0.25]
    from openpyxl import load_workbook

    sheet = load_workbook(tmp_path / "tables.xlsx")["agreement"]
    assert sheet["A2"].value == "'=1+2" and sheet["A2"].data_type == "s"
    assert sheet["B2"].value == -0.5 and sheet["B2"].data_type == "n"


def test_staging_refuses_a_non_empty_folder_and_publish_replaces(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "old.txt").write_text("old")
    with pytest.raises(OutputExistsError):
        staging_folder(out, force=False)
    staging = staging_folder(out, force=True)
    (staging / "new.txt").write_text("new")
    publish(staging, out)
    assert [p.name for p in out.iterdir()] == ["new.txt"]
    assert [p.name for p in tmp_path.iterdir()] == ["out"]
