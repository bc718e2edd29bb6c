"""Pseudonymisation: no original subject ID, identifying value, path or identifying file name
in any output; whole values replaced, never parts of a text; codes stable per key (HMAC,
RFC 2104)."""

from __future__ import annotations

import csv
import hashlib
import hmac
import html
import json
import re
import zipfile
from dataclasses import replace
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

from cohort.cli import main
from cohort.demo import write_demo
from cohort.domain.problems import Problem, StudyError
from cohort.io.pseudonyms import (
    CODE_LIST_COLUMNS,
    DROPPED_COLUMN_CODE,
    IDENTIFYING_KIND,
    KEY_VARIABLE,
    ROLES,
    SUBJECT_KIND,
    WITHHELD,
    load_key,
    pseudonym,
    pseudonymize_study,
)
from cohort.io.settings import read_study_file
from cohort.io.study import load_study

ONE = ("quickmap",)  # the one-method demo: these tests do not depend on the number of methods

KEY = "a-long-enough-secret-for-tests"
OTHER_KEY = "another-secret-of-enough-length"
CODE = re.compile(r"^P[0-9a-f]{12}$")

# An invented study (no real people): short numeric IDs that also occur as numbers, an ID of
# 5 characters, and file and folder names that hold that ID.
SHORT_IDS = [str(i) for i in range(1, 13)]
IDS = [*SHORT_IDS, "S0042"]
FOLDER = "site-S0042"
STUDY_NAME, VALUES_NAME, SUBJECTS_NAME = "study-S0042.toml", "values-S0042.csv", "subj-S0042.csv"
HOSPITAL = {s: f"HN{730011 + 37 * i}" for i, s in enumerate(IDS)}
ACCESSION = {s: f"AC{58113 + 7 * i}" for i, s in enumerate(IDS)}
DROPPED = ("visit_label", "matched_control", "scan_label")


def _hmac_code(text: str, key: str) -> str:
    # RFC 2104 HMAC with SHA-256, computed independently with the standard library
    return "P" + hmac.new(key.encode(), text.encode(), hashlib.sha256).hexdigest()[:12]


def _write_study(root: Path, declare: bool = True) -> Path:
    """Write the invented study; return its study file (``declare``: with the study-file
    option ``identifying_columns``)."""
    folder = root / FOLDER
    folder.mkdir(parents=True)
    values = []
    for i, s in enumerate(IDS):
        for method, shift in (("ref", 0.0), ("fast", 0.4)):
            for seg in range(1, 18):
                ff = f"{1.5 + (3 * i + seg) % 9 * 0.7 + shift:.2f}"
                if seg == 17 and method == "ref" and s in SHORT_IDS:
                    ff = s  # a measurement whose text equals a subject ID: must stay as it is
                if not (seg == 17 and method == "fast"):  # ref seg 17 ff: excluded, unpaired
                    values.append([s, method, seg, "ff", ff])
                r2 = "" if (seg == 5 and method == "fast") else f"{24 + seg * 0.5 + i + shift:.1f}"
                values.append([s, method, seg, "r2star", r2])
    frame = pd.DataFrame(values, columns=["subject", "method", "segment", "parameter", "value"])
    frame["accession"] = frame["subject"].map(ACCESSION)  # declared identifying
    frame["scan_label"] = frame["subject"] + "-scan"  # holds "S0042" inside a text: dropped
    frame["reader"] = frame["method"].map({"ref": "R-A", "fast": "R-B"})  # kept
    frame.loc[frame.index[frame["subject"].eq("7")][0], "subject"] = " 7"  # trimmed: a warning
    frame.to_csv(folder / VALUES_NAME, index=False)
    subjects = pd.DataFrame(
        {
            "subject": IDS,
            "group": ["control" if i % 2 else "acute" for i in range(len(IDS))],
            "field_strength": ["1.5" if i % 3 else "3" for i in range(len(IDS))],
            "age": [str(30 + 3 * i) for i in range(len(IDS))],  # never equal to an ID: kept
            "note": ["follow-up at 12 months"] * len(IDS),  # short ID inside text only: kept
            "hospital_number": [HOSPITAL[s] for s in IDS],  # declared identifying
            "visit_label": [f"{s}-baseline" if s == "S0042" else "baseline" for s in IDS],
            "matched_control": ["3" if i % 4 == 0 else "" for i in range(len(IDS))],  # IDs whole
        }
    )
    subjects.loc[1, "field_strength"] = "1.5T"  # 'T' removed: a warning naming the file
    subjects.to_csv(folder / SUBJECTS_NAME, index=False)
    study = folder / STUDY_NAME
    study.write_text(
        "[study]\n"
        'title = "Invented pseudonymisation check"\n'
        f'values = "{VALUES_NAME}"\nsubjects = "{SUBJECTS_NAME}"\nreference = "ref"\n'
        'groups = ["control", "acute"]\n'
        + ('identifying_columns = ["hospital_number", "accession"]\n' if declare else ""),
        encoding="utf-8",
    )
    return study


def _run(study: Path, out: Path, key: str, codes: Path, *extra: str) -> int:
    key_file = out.parent / f"{out.name}.key"
    key_file.write_text(key + "\n")
    return main(
        [
            "run",
            str(study),
            "--out",
            str(out),
            "--pseudonymize",
            "--key-file",
            str(key_file),
            "--code-list",
            str(codes),
            "--bootstrap",
            "20",
            "--workers",
            "1",
            "--quiet",
            *extra,
        ]
    )


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The study, and three pseudonymised runs: key A twice, key B once (no figures)."""
    root = tmp_path_factory.mktemp("pseudo")
    study = _write_study(root)
    result = {"root": root, "study": study}
    for name, key in (("a", KEY), ("a2", KEY), ("b", OTHER_KEY)):
        out, codes = root / f"out-{name}", root / f"codes-{name}.csv"
        assert _run(study, out, key, codes, "--no-figures") == 0
        result[name] = (out, codes)
    return result


def _long_tokens(root: Path) -> list[str]:
    """Texts that must appear nowhere, not even inside another text."""
    return [
        "S0042",
        *HOSPITAL.values(),
        *ACCESSION.values(),
        str(root),
        str(root.resolve()),
        FOLDER,
        STUDY_NAME,
        VALUES_NAME,
        SUBJECTS_NAME,
        "-scan",
        "-baseline",
    ]


def _check_table(where: str, header: list[str], body: list[list[str]], tokens: list[str]):
    assert not set(DROPPED) & set(header), f"dropped column in {where}"
    for row in body:
        for name, cell in zip(header, row, strict=False):
            text = "" if cell is None else str(cell)
            for token in tokens:
                assert token.casefold() not in text.casefold(), f"{token!r} in {where} {name}"
            if name == "subject" and text:
                assert CODE.match(text.lstrip("'")), f"{text!r} in {where} column subject"
            if name in ("file", "source_file") and text:
                assert text in ROLES.values(), f"{text!r} in {where} column {name}"


def _check_text(where: str, text: str, tokens: list[str]):
    for token in tokens:
        assert token.casefold() not in text.casefold(), f"{token!r} in {where}"
    # quoted tokens of text (tags removed first: attribute values such as colspan="2" are
    # markup, not data); a short ID can only be recognised where it stands alone
    plain = html.unescape(re.sub(r"<[^>]*>", " ", text))
    for quoted in re.findall(r"""(['"])([^'"\n]{1,40})\1""", plain):
        assert quoted[1].strip() not in IDS, f"quoted {quoted[1]!r} in {where}"
    for match in re.finditer(r"subject\W{1,4}([^\s'\",;)]+)", plain):
        assert match.group(1) not in IDS, f"{match.group(0)!r} in {where}"


def _scan(out: Path, root: Path) -> int:
    """Check every file of ``out``; return how many were checked."""
    tokens = _long_tokens(root)
    checked = 0
    for path in sorted(p for p in out.rglob("*") if p.is_file()):
        where = str(path.relative_to(out))
        for token in tokens:
            assert token.casefold() not in where.casefold(), f"{token!r} in the name {where}"
        if path.suffix == ".csv":
            with path.open(encoding="utf-8", newline="") as handle:
                header, *body = list(csv.reader(handle))
            _check_table(where, header, body, tokens)
        elif path.suffix == ".xlsx":
            book = openpyxl.load_workbook(path, read_only=True)
            for sheet in book.worksheets:
                rows = [list(r) for r in sheet.iter_rows(values_only=True)]
                if rows:
                    header = [str(c) for c in rows[0]]
                    _check_table(f"{where}:{sheet.title}", header, rows[1:], tokens)
            book.close()
            with zipfile.ZipFile(path) as z:  # every XML part as text too
                for part in z.namelist():
                    _check_text(f"{where}:{part}", z.read(part).decode("utf-8", "replace"), tokens)
        elif path.suffix in (".html", ".md", ".json", ".svg"):
            _check_text(where, path.read_text(encoding="utf-8"), tokens)
        elif path.suffix != ".png":
            raise AssertionError(f"unexpected output file {where}: scan it too")
        checked += 1
    return checked


def test_no_identifier_path_or_file_name_in_any_output(runs):
    out, _ = runs["a"]
    assert _scan(out, runs["root"]) > 20  # every table, the workbook, report, methods, manifest


def test_manifest_names_inputs_by_role_only(runs):
    # README "Data protection" and manifest.build_manifest: no name, no path when pseudonymised
    out, _ = runs["a"]
    manifest = json.loads((out / "manifest.json").read_text())
    assert set(manifest["inputs"]) == {"values", "subjects", "study_file"}
    assert all(entry["name"] is None for entry in manifest["inputs"].values())
    assert all(len(entry["sha256"]) == 64 for entry in manifest["inputs"].values())
    for key in ("values", "subjects", "study_file"):
        assert "pseudonymised" in manifest["settings"][key]
    assert manifest["options"]["pseudonymized"] is True
    assert KEY not in (out / "manifest.json").read_text()
    report = html.unescape((out / "report.html").read_text())
    for column in DROPPED:  # each dropped column is reported, in the manifest and the report
        assert any(f"'{column}'" in w for w in manifest["warnings"]), column
        assert f"'{column}'" in report, column


def test_measurement_text_is_not_altered(runs):
    # exclusions.csv value_text against the input cell of the same spreadsheet row (values
    # table in long layout: spreadsheet row = data index + 2)
    out, codes_path = runs["a"]
    study = runs["study"]
    raw = pd.read_csv(study.parent / VALUES_NAME, dtype=str, keep_default_na=False)
    with (out / "tables" / "exclusions.csv").open(encoding="utf-8", newline="") as handle:
        rows = list(csv.DictReader(handle))
    texts = [r["value_text"] for r in rows]
    assert set(SHORT_IDS) <= set(texts)  # the study plants numbers equal to short IDs
    assert "" in texts  # and blank cells
    codes = pd.read_csv(codes_path, dtype=str, keep_default_na=False)
    back = dict(zip(codes["code"], codes["value"], strict=True))
    for r in rows:
        source = raw.iloc[int(r["source_row"]) - 2]
        assert r["value_text"] == source["value"]
        assert back[r["subject"]] == source["subject"].strip()  # the code maps back
        assert back[r["accession"]] == source["accession"]
        assert r["reader"] == source["reader"]  # an extra column without IDs is kept
        assert r["source_file"] == ROLES["values"]


def test_input_warnings_name_files_by_role(runs):
    out, _ = runs["a"]
    warnings = pd.read_csv(out / "tables" / "input_warnings.csv", dtype=str, keep_default_na=False)
    assert set(warnings["file"]) <= set(ROLES.values())
    assert {ROLES["values"], ROLES["subjects"]} <= set(warnings["file"])
    dropped = warnings[warnings["code"].eq(DROPPED_COLUMN_CODE)]
    assert set(dropped["column"]) == set(DROPPED)


def test_same_key_same_codes_other_key_other_codes(runs):
    first = pd.read_csv(runs["a"][1], dtype=str, keep_default_na=False)
    again = pd.read_csv(runs["a2"][1], dtype=str, keep_default_na=False)
    other = pd.read_csv(runs["b"][1], dtype=str, keep_default_na=False)
    pd.testing.assert_frame_equal(first, again)
    assert not set(first["code"]) & set(other["code"])
    tables = [pd.read_csv(runs[r][0] / "tables" / "exclusions.csv", dtype=str) for r in ("a", "a2")]
    pd.testing.assert_frame_equal(*tables)


def test_code_list_maps_back(runs):
    codes = pd.read_csv(runs["a"][1], dtype=str, keep_default_na=False)
    assert tuple(codes.columns) == CODE_LIST_COLUMNS
    subjects = codes[codes["kind"].eq(SUBJECT_KIND)]
    assert sorted(subjects["value"]) == sorted(IDS)
    assert (subjects["column"] == "subject").all()
    identifying = codes[codes["kind"].eq(IDENTIFYING_KIND)]
    expected = {("hospital_number", v) for v in HOSPITAL.values()}
    expected |= {("accession", v) for v in ACCESSION.values()}
    assert set(zip(identifying["column"], identifying["value"], strict=True)) == expected
    for value, code in zip(codes["value"], codes["code"], strict=True):
        assert code == _hmac_code(value, KEY)
    other = pd.read_csv(runs["b"][1], dtype=str, keep_default_na=False)
    for value, code in zip(other["value"], other["code"], strict=True):
        assert code == _hmac_code(value, OTHER_KEY)
    found = pd.read_csv(runs["a"][0] / "tables" / "findings_subject.csv", dtype=str)
    assert set(found["subject"]) <= set(subjects["code"])


def test_report_with_figures_holds_no_identifier(runs):
    root = runs["root"]
    out = root / "out-figures"
    assert _run(runs["study"], out, KEY, root / "codes-figures.csv") == 0
    assert any(out.rglob("*.svg"))
    assert _scan(out, root) > 20


def test_whole_values_replaced_never_substrings(tmp_path):
    settings = read_study_file(_write_study(tmp_path, declare=False))
    study = load_study(settings.with_options(identifying_columns=("Hospital_Number", "accession")))
    key = KEY.encode()
    values_file = settings.input_name(settings.values)
    planted = [
        Problem("unit-in-text", "unit removed", file=values_file, column="ff", value="12.5"),
        Problem("unit-in-text", "unit removed", file=VALUES_NAME, column="ff", value="7"),
        Problem(
            "whitespace-trimmed",
            "trimmed",
            file=str(settings.subjects),
            column="Subject",
            value=" 7",
            subject="7",
        ),
        Problem("unit-in-text", "x", file="other.csv", column="hospital_number", value="HN1"),
        Problem("unit-in-text", "x", file=str(settings.study_file), value="S0042-baseline"),
        Problem("unit-in-text", "seen in S0042 only", expected="not 1 or 12"),
    ]
    study = replace(study, warnings=[replace(p, severity="warning") for p in planted])
    pseudo, codes = pseudonymize_study(study, key)
    w = pseudo.warnings
    assert (w[0].value, w[0].file) == ("12.5", ROLES["values"])  # a number stays a number
    assert (w[1].value, w[1].file) == (_hmac_code("7", KEY), ROLES["values"])  # value = an ID
    assert (w[2].value, w[2].subject) == (_hmac_code("7", KEY),) * 2
    assert w[2].file == ROLES["subjects"]
    assert (w[3].value, w[3].file) == (_hmac_code("HN1", KEY), "input file")
    assert (w[4].value, w[4].file) == (WITHHELD, ROLES["study_file"])
    assert (w[5].detail, w[5].expected) == (WITHHELD, "not 1 or 12")  # short IDs: no match
    dropped = [p for p in w[6:] if p.code == DROPPED_COLUMN_CODE]
    assert sorted(p.column for p in dropped) == sorted(DROPPED)
    # measurement text untouched, row by row (categorical codes compared as text)
    pd.testing.assert_series_equal(pseudo.records["value_text"], study.records["value_text"])
    assert pseudo.records["subject"].astype(str).map(CODE.match).all()
    kept = {"subject", "group", "field_strength", "age", "note", "hospital_number"}
    assert set(pseudo.subjects.columns) == kept
    pd.testing.assert_series_equal(pseudo.subjects["age"], study.subjects["age"])
    assert pseudo.subjects["hospital_number"].tolist() == [
        _hmac_code(HOSPITAL[s], KEY) for s in study.subjects["subject"]
    ]
    assert "scan_label" not in pseudo.records and "reader" in pseudo.records
    assert "visit_label" in study.subjects  # the input study is not changed
    assert ("identifying value", "hospital_number", "HN1") in set(
        zip(codes["kind"], codes["column"], codes["value"], strict=True)
    )
    assert not codes.duplicated(["kind", "column", "value"]).any()


def test_text_naming_an_input_file_is_withheld_whole(tmp_path):
    # a file name can hold a person's name or number (brief rule 3): a warning text naming an
    # input file is withheld whole, never edited; a text naming none is kept as it is
    settings = read_study_file(_write_study(tmp_path, declare=False))
    study = load_study(settings)
    study = replace(
        study,
        settings=settings.with_options(values=tmp_path / "ward-b-list.csv"),
        warnings=[
            Problem("extra-sheets", "read sheet 'A' of ward-b-list.csv", file="ward-b-list.csv"),
            Problem("extra-sheets", "read sheet 'A', ignored ['B']", file="ward-b-list.csv"),
        ],
    )
    pseudo, _ = pseudonymize_study(study, KEY.encode())
    assert [(w.detail, w.file) for w in pseudo.warnings[:2]] == [
        (WITHHELD, ROLES["values"]),
        ("read sheet 'A', ignored ['B']", ROLES["values"]),
    ]


def test_code_is_the_keyed_hmac_and_stable():
    expected = _hmac_code("0017", KEY)
    assert pseudonym("0017", KEY.encode()) == expected == pseudonym("0017", KEY.encode())
    assert pseudonym("0017", b"another-key-of-16-bytes") != expected


def test_short_or_missing_key_is_refused(tmp_path, monkeypatch):
    monkeypatch.delenv(KEY_VARIABLE, raising=False)
    with pytest.raises(StudyError, match="missing or shorter"):
        load_key()
    (tmp_path / "k").write_text("short")
    with pytest.raises(StudyError, match="shorter than 16"):
        load_key(tmp_path / "k")


def test_unreadable_key_file_is_a_study_error(tmp_path, monkeypatch):
    with pytest.raises(StudyError, match="not found"):
        load_key(tmp_path / "absent")
    with pytest.raises(StudyError, match="not a file"):
        load_key(tmp_path)
    (tmp_path / "binary").write_bytes(b"\xff\xfe\x00" * 20)
    with pytest.raises(StudyError, match="not UTF-8"):
        load_key(tmp_path / "binary")
    locked = tmp_path / "locked"
    locked.write_text(KEY)
    locked.chmod(0)

    def refuse(self):  # a superuser reads any file: the permission error is simulated
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(Path, "read_bytes", refuse)
    with pytest.raises(StudyError, match=r"cannot be read .*Permission denied"):
        load_key(locked)


def test_unreadable_key_file_exits_2_without_traceback(tmp_path, capsys):
    study_file = write_demo(tmp_path / "demo", n_subjects=6, test_methods=ONE)
    out, folder = str(tmp_path / "r"), str(tmp_path)
    code = main(["run", str(study_file), "--out", out, "--pseudonymize", "--key-file", folder])
    err = capsys.readouterr().err
    assert code == 2 and "not a file" in err and "Traceback" not in err
    assert not (tmp_path / "r").exists()


def test_code_list_inside_the_report_folder_is_refused(tmp_path, monkeypatch, capsys):
    study_file = write_demo(tmp_path / "demo", n_subjects=6, test_methods=ONE)
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
