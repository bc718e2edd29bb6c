"""The command line: a thin layer that says the same as the API."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

from cohort.cli import main
from cohort.demo import write_demo
from cohort.io.study import load_study

from .conftest import HEADER, small_values, write_csv

ROOT = Path(__file__).resolve().parents[1]


def run_cli(*args, cwd=None):
    return subprocess.run(
        [sys.executable, "-m", "cohort.cli", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )


def test_check_on_the_bundled_demo_exits_0_with_a_summary():
    result = run_cli("check", str(ROOT / "demo_cohort" / "study.toml"))
    assert result.returncode == 0, result.stderr
    study = load_study(ROOT / "demo_cohort" / "study.toml")
    assert f"{len(study.subjects)} subjects" in result.stdout
    assert "reference method 'reference-fit'" in result.stdout
    assert "Research use only" in result.stdout
    # the demo's fast method lacks the apex in one subject in eight: 6 blanks per parameter
    assert (
        "missing (blank) by method and parameter: "
        "quickmap ff 6, quickmap field 6, quickmap r2star 6" in result.stdout
    )


def test_check_with_flags_says_the_same_as_with_a_study_file(tmp_path, capsys):
    study_file = write_demo(tmp_path / "demo", n_subjects=9)
    assert main(["check", str(study_file)]) == 0
    from_file = capsys.readouterr().out
    folder = study_file.parent
    code = main(
        [
            "check",
            "--values", str(folder / "values.csv"),
            "--subjects", str(folder / "subjects.csv"),
            "--reference", "reference-fit",
            "--groups", "control,acute,chronic",
            "--methods", "net-full,quickmap,net-mag1",
        ]
    )  # fmt: skip
    assert code == 0
    from_flags = capsys.readouterr().out
    # identical apart from the title line (the flag form has no title)
    assert from_file.splitlines()[1:] == from_flags.splitlines()[1:]


def test_check_on_bad_input_exits_2_naming_file_row_column_without_traceback(tmp_path):
    rows = small_values()
    rows[5][4] = "n.a."
    write_csv(tmp_path / "values.csv", HEADER, rows)
    write_csv(
        tmp_path / "subjects.csv",
        ["subject", "group", "field_strength"],
        [["0017", "control", 1.5], ["0018", "control", 1.5], ["0019", "control", "0"]],
    )
    before = sorted(p.name for p in tmp_path.iterdir())
    result = run_cli(
        "check", "--values", "values.csv", "--subjects", "subjects.csv", "--reference", "ref",
        cwd=tmp_path,
    )  # fmt: skip
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    assert (
        "values.csv, row 7, column 'value', subject '0017', method 'ref': value is not a number; "
        "got 'n.a.'"
    ) in result.stderr
    assert "subjects.csv, row 4, column 'field_strength'" in result.stderr
    assert result.stdout == ""
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # check never writes


def test_study_file_and_flags_together_are_refused(tmp_path):
    study_file = write_demo(tmp_path, n_subjects=6)
    result = run_cli("check", str(study_file), "--reference", "x")
    assert result.returncode == 2 and "not both" in result.stderr


def test_missing_study_file_exits_2():
    result = run_cli("check", "no/such/study.toml")
    assert result.returncode == 2 and "study file not found" in result.stderr


def test_warnings_on_the_command_line_are_plain_lines(tmp_path, capsys, monkeypatch):
    # a table longer than a worksheet (limit lowered here) warns while the tables are written
    from cohort.report import outputs

    study_file = write_demo(tmp_path / "demo", n_subjects=6)
    monkeypatch.setattr(outputs, "EXCEL_MAX_ROWS", 50)
    out = tmp_path / "out"
    args = ["run", str(study_file), "--out", str(out), "--bootstrap", "0", "--no-figures"]
    assert main([*args, "--quiet"]) == 0
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if "more than an Excel worksheet holds" in line]
    assert lines
    assert all(line.startswith("cohort: CohortWarning: tables.xlsx: table '") for line in lines)
    assert "warnings.warn" not in err and "write_tables(" not in err
