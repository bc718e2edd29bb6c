"""Pseudonymisation: no original subject ID in any output; codes stable per key (HMAC,
RFC 2104)."""

from __future__ import annotations

import hashlib
import hmac
import zipfile

import pandas as pd
import pytest

from cohort.cli import main
from cohort.demo import write_demo
from cohort.problems import StudyError
from cohort.pseudonyms import KEY_VARIABLE, load_key, pseudonym

KEY = "a-long-enough-secret-for-tests"


def test_code_is_the_keyed_hmac_and_stable():
    # RFC 2104 HMAC with SHA-256, computed independently with the standard library
    expected = "P" + hmac.new(KEY.encode(), b"0017", hashlib.sha256).hexdigest()[:12]
    assert pseudonym("0017", KEY.encode()) == expected == pseudonym("0017", KEY.encode())
    assert pseudonym("0017", b"another-key-of-16-bytes") != expected


def test_short_or_missing_key_is_refused(tmp_path, monkeypatch):
    monkeypatch.delenv(KEY_VARIABLE, raising=False)
    with pytest.raises(StudyError, match="missing or shorter"):
        load_key()
    (tmp_path / "k").write_text("short")
    with pytest.raises(StudyError, match="shorter than 16"):
        load_key(tmp_path / "k")


def test_no_original_id_in_any_output(tmp_path, monkeypatch, capsys):
    study_file = write_demo(tmp_path / "demo", n_subjects=9)
    # an identifiable-looking ID scheme (invented)
    values = pd.read_csv(study_file.parent / "values.csv", dtype=str, keep_default_na=False)
    subjects = pd.read_csv(study_file.parent / "subjects.csv", dtype=str, keep_default_na=False)
    ids = {old: f"MRN{900100 + i}" for i, old in enumerate(subjects["subject"])}
    values["subject"] = values["subject"].map(ids)
    subjects["subject"] = subjects["subject"].map(ids)
    values.to_csv(study_file.parent / "values.csv", index=False)
    subjects.to_csv(study_file.parent / "subjects.csv", index=False)
    monkeypatch.setenv(KEY_VARIABLE, KEY)
    out = tmp_path / "report"
    code = main(
        [
            "run",
            str(study_file),
            "--out",
            str(out),
            "--bootstrap",
            "20",
            "--quiet",
            "--pseudonymize",
        ]
    )
    assert code == 0, capsys.readouterr().err
    texts = []
    for path in out.rglob("*"):
        if path.suffix in (".csv", ".html", ".md", ".json", ".svg"):
            texts.append((path, path.read_text(encoding="utf-8", errors="replace")))
        elif path.suffix == ".xlsx":
            with zipfile.ZipFile(path) as z:
                texts += [(path, z.read(n).decode("utf-8", "replace")) for n in z.namelist()]
    assert any(p.suffix == ".svg" for p, _ in texts)
    for path, text in texts:
        for original in ids.values():
            assert original not in text, f"{original} found in {path}"
    codes = pd.read_csv(tmp_path / "report-pseudonym-codes.csv", dtype=str)
    assert set(codes["subject"]) == set(ids.values())
    assert codes["code"].str.match(r"^P[0-9a-f]{12}$").all()
    assert KEY not in (out / "manifest.json").read_text()
    agreement = pd.read_csv(out / "tables" / "findings_subject.csv", dtype=str)
    assert set(agreement["subject"]) <= set(codes["code"])


def test_code_list_inside_the_report_folder_is_refused(tmp_path, monkeypatch, capsys):
    study_file = write_demo(tmp_path / "demo", n_subjects=6)
    monkeypatch.setenv(KEY_VARIABLE, KEY)
    out = tmp_path / "report"
    code = main(
        [
            "run",
            str(study_file),
            "--out",
            str(out),
            "--pseudonymize",
            "--code-list",
            str(out / "codes.csv"),
            "--quiet",
        ]
    )
    assert code == 2 and "outside the output folder" in capsys.readouterr().err
