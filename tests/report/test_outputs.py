"""Output writing: formula injection guarded in CSV and XLSX (OWASP "CSV Injection"),
numbers kept as numbers, atomic folders."""

from __future__ import annotations

import zipfile

import pandas as pd
import pytest

from cohort.parallel import can_fork
from cohort.report import outputs
from cohort.report.formula_guard import guard_text
from cohort.report.outputs import write_tables

ONE = ("quickmap",)  # the one-method demo: these tests do not depend on the number of methods


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


@pytest.mark.skipif(not can_fork(), reason="worker processes are forked on Linux only")
@pytest.mark.parametrize("rows_per_piece", [250_000, 4])
def test_two_workers_write_the_same_files(tmp_path, monkeypatch, rows_per_piece):
    # the workbook and pieces of the CSV files are written by two processes: same bytes
    # (CSV, also when a file is joined from pieces) and the same worksheets (the workbook's
    # zip entries carry write times)
    tables = {
        "agreement": pd.DataFrame({"method": ["=1+2", "ok"], "bias": [-0.5, 0.25]}),
        "coverage": pd.DataFrame({"segment": list(range(1, 18)), "n": [3] * 17}),
    }
    serial = write_tables(tables, tmp_path / "serial")
    monkeypatch.setattr(outputs, "_CSV_ROWS_PER_PIECE", rows_per_piece)  # 17 rows: 5 pieces
    forked = write_tables(tables, tmp_path / "forked", workers=2)
    assert sorted(p.name for p in (tmp_path / "forked" / "tables").iterdir()) == [
        "agreement.csv",
        "coverage.csv",
    ]  # the pieces are joined and removed
    assert [p.relative_to(tmp_path / "serial") for p in serial] == [
        p.relative_to(tmp_path / "forked") for p in forked
    ]
    for a, b in zip(serial, forked, strict=True):
        if a.suffix == ".csv":
            assert a.read_bytes() == b.read_bytes()
        else:
            with zipfile.ZipFile(a) as za, zipfile.ZipFile(b) as zb:
                assert za.namelist() == zb.namelist()
                for name in za.namelist():
                    assert za.read(name) == zb.read(name), name


def test_categorical_cells_are_guarded_and_keep_their_dtype(tmp_path):
    # study tables hold repeated text as categoricals; OWASP "CSV Injection": a cell starting
    # with = + - @ is prefixed with an apostrophe, a negative number written as text is not
    frame = pd.DataFrame(
        {
            "method": pd.Categorical(["=cmd|' /C calc'!A0", "ok", "+fast", "@sum", "-1.5", None]),
            "bias": [0.5, 1.0, 1.5, 2.0, 2.5, 3.0],
        }
    )
    guarded = guard_text(frame)
    assert isinstance(guarded["method"].dtype, pd.CategoricalDtype)
    assert guarded["method"].tolist()[:5] == [
        "'=cmd|' /C calc'!A0",
        "ok",
        "'+fast",
        "'@sum",
        "-1.5",
    ]
    assert pd.isna(guarded["method"].iloc[5])
    assert frame["method"].tolist()[0] == "=cmd|' /C calc'!A0"  # the input is not changed
    write_tables({"agreement": frame}, tmp_path)
    csv = pd.read_csv(tmp_path / "tables" / "agreement.csv", dtype=str, keep_default_na=False)
    assert csv["method"].tolist() == ["'=cmd|' /C calc'!A0", "ok", "'+fast", "'@sum", "-1.5", ""]


def test_a_study_with_formula_like_names_runs_and_is_guarded(tmp_path):
    # subject, method and group names that a spreadsheet would read as formulas: the run
    # completes (it once crashed after the analysis) and every table cell is guarded
    from cohort.analysis.pipeline import options_from_study
    from cohort.demo import write_demo
    from cohort.io.study import load_study
    from cohort.report.runner import run

    study_file = write_demo(tmp_path / "study", n_subjects=6, test_methods=ONE)
    values = pd.read_csv(study_file.parent / "values.csv", dtype=str, keep_default_na=False)
    subjects = pd.read_csv(study_file.parent / "subjects.csv", dtype=str, keep_default_na=False)
    first = values["subject"].iloc[0]
    values["subject"] = values["subject"].replace({first: "=1+1"})
    subjects["subject"] = subjects["subject"].replace({first: "=1+1"})
    values["method"] = values["method"].replace({"quickmap": "+quick"})
    values.to_csv(study_file.parent / "values.csv", index=False)
    text = study_file.read_text(encoding="utf-8")  # the study file names the method too
    study_file.write_text(
        text.replace('"quickmap"', '"+quick"').replace("quickmap =", '"+quick" ='),
        encoding="utf-8",
    )
    subjects.to_csv(study_file.parent / "subjects.csv", index=False)
    study = load_study(study_file)
    summary = run(study, tmp_path / "out", options_from_study(study, n_boot=0, figures=False))
    for path in (summary.out / "tables").glob("*.csv"):
        table = pd.read_csv(path, dtype=str, keep_default_na=False)
        for column in table.columns:
            cells = table[column]
            assert not cells.isin(["=1+1", "+quick"]).any(), (path.name, column)
    agreement = pd.read_csv(summary.out / "tables" / "agreement.csv", dtype=str)
    assert "'+quick" in set(agreement["method"])
