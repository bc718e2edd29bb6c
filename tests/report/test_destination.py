"""Output folders that cannot hurt: every refused ``--out``, ``--force`` only over an earlier
cohort output, the lock, the final move, the code list, and interruption by signals.

Each refused case checks the exit status 2, a message naming the folder, no traceback, and
that every input and unrelated file is byte-identical afterwards (the user's files are never
deleted or overwritten: the rule of this project, common practice for research data).
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from cohort.analysis.pipeline import options_from_study
from cohort.cli import main
from cohort.demo import write_demo
from cohort.io.pseudonyms import CODE_LIST_COLUMNS
from cohort.io.study import load_study
from cohort.parallel import can_fork, ordered_map
from cohort.report import destination, runner
from cohort.report.destination import (
    OutputExistsError,
    OutputFolderError,
    check_destination,
    writing_to,
)

ONE = ("quickmap",)  # the one-method demo: these tests do not depend on the number of methods

FAST = ["--bootstrap", "0", "--no-figures", "--quiet"]


def snapshot(folder: Path) -> dict[str, str]:
    """SHA-256 of every file below ``folder`` (links not followed), by relative path."""
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file() and not p.is_symlink()
    }


@pytest.fixture
def study(tmp_path):
    """A small invented demo study in ``tmp_path/study`` and the tree's snapshot."""
    study_file = write_demo(tmp_path / "study", n_subjects=6, test_methods=ONE)
    return study_file


def run_cli(study_file: Path, out: Path | str, *extra: str) -> int:
    return main(["run", str(study_file), "--out", str(out), *FAST, *extra])


def refused(capsys, code: int, *words: str) -> str:
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    for word in words:
        assert word in err, err
    return err


@pytest.mark.parametrize(
    ("where", "words"),
    [
        ("study/values.csv", "is the input file"),
        ("study", "holds the input"),
        (".", "current folder"),  # tmp_path is the current folder here
        ("study/..", "current folder"),
    ],
)
def test_out_that_is_or_holds_an_input_or_the_current_folder_is_refused(
    study, tmp_path, monkeypatch, capsys, where, words
):
    monkeypatch.chdir(tmp_path)
    before = snapshot(tmp_path)
    code = run_cli(study, where, "--force")
    refused(capsys, code, words, "Nothing was written or removed")
    assert snapshot(tmp_path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["study"]


def test_an_ancestor_of_the_inputs_is_refused_even_with_force(tmp_path, monkeypatch, capsys):
    study = write_demo(tmp_path / "project" / "study", n_subjects=6, test_methods=ONE)
    (tmp_path / "elsewhere").mkdir()
    monkeypatch.chdir(tmp_path / "elsewhere")
    before = snapshot(tmp_path)
    refused(capsys, run_cli(study, tmp_path / "project", "--force"), "holds the input")
    assert snapshot(tmp_path) == before


def test_a_file_a_symlink_and_a_path_below_a_file_are_refused(study, tmp_path, capsys):
    note = tmp_path / "note.txt"
    note.write_text("my notes")
    target = tmp_path / "target"
    target.mkdir()
    (target / "keep.txt").write_text("mine")
    (tmp_path / "link").symlink_to(target, target_is_directory=True)
    before = snapshot(tmp_path)
    refused(capsys, run_cli(study, note, "--force"), "is a file")
    refused(capsys, run_cli(study, tmp_path / "link", "--force"), "symbolic link")
    refused(capsys, run_cli(study, note / "sub"), "is a file")
    assert snapshot(tmp_path) == before
    assert (tmp_path / "link").is_symlink()


def test_a_folder_that_cannot_be_written_is_refused(study, tmp_path, capsys):
    # /proc accepts no new folders, even for root (Linux procfs): a real refusal by the
    # file system, not a permission check that root would pass
    if not Path("/proc/self").exists():
        pytest.skip("needs Linux /proc")
    refused(capsys, run_cli(study, "/proc/cohort-test-output"), "cannot write in")


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write in a read-only folder")
def test_a_read_only_parent_is_refused(study, tmp_path, capsys):  # pragma: no cover - non-root
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        refused(capsys, run_cli(study, locked / "out"), "cannot write in")
    finally:
        locked.chmod(0o700)


def test_force_never_touches_a_folder_with_files_cohort_did_not_write(study, tmp_path, capsys):
    out = tmp_path / "busy"
    (out / "sub").mkdir(parents=True)
    (out / "keep.txt").write_text("mine")
    (out / "sub" / "data.csv").write_text("a,b\n1,2\n")
    empty_tree = tmp_path / "empty-tree"
    (empty_tree / "x").mkdir(parents=True)
    before = snapshot(tmp_path)
    refused(capsys, run_cli(study, out), "did not write", "keep.txt")
    refused(capsys, run_cli(study, out, "--force"), "did not write", "keep.txt")
    refused(capsys, run_cli(study, empty_tree, "--force"), "did not write")
    assert snapshot(tmp_path) == before
    assert (empty_tree / "x").is_dir()


def test_force_replaces_an_earlier_output_and_nothing_else(study, tmp_path, capsys):
    out = tmp_path / "report"
    assert run_cli(study, out) == 0
    first = snapshot(out)
    refused(capsys, run_cli(study, out), "earlier cohort output", "--force")
    assert snapshot(out) == first
    assert run_cli(study, out, "--force") == 0
    assert (out / "manifest.json").exists() and (out / "report.html").exists()
    # nothing left beside it: no staging folder, lock or moved-aside old output
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report", "study"]
    # a file added to an earlier output makes it no longer cohort's alone: refused
    (out / "tables" / "my-notes.csv").write_text("x\n1\n")
    before = snapshot(tmp_path)
    refused(capsys, run_cli(study, out, "--force"), "did not write", "tables/my-notes.csv")
    assert snapshot(tmp_path) == before


def test_an_empty_folder_is_used_and_new_parents_are_created(study, tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    assert run_cli(study, empty) == 0 and (empty / "report.html").exists()
    deep = tmp_path / "a" / "b" / "c"
    assert run_cli(study, deep) == 0 and (deep / "manifest.json").exists()


def test_a_folder_that_appears_during_the_run_is_not_replaced(study, tmp_path, monkeypatch):
    out = tmp_path / "late"
    analyse = runner.analyse

    def analyse_while_someone_writes(*args, **kwargs):
        out.mkdir()
        (out / "theirs.txt").write_text("theirs")
        return analyse(*args, **kwargs)

    monkeypatch.setattr(runner, "analyse", analyse_while_someone_writes)
    loaded = load_study(study)
    with pytest.raises(OutputExistsError, match="did not write"):
        runner.run(loaded, out, options_from_study(loaded, n_boot=0, figures=False))
    assert snapshot(out) == {"theirs.txt": hashlib.sha256(b"theirs").hexdigest()}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["late", "study"]


def test_the_final_move_keeps_files_that_slip_into_an_earlier_output(study, tmp_path, monkeypatch):
    # a file written into the earlier output after the last check: moved aside with it and
    # kept in a visible folder, never deleted
    out = tmp_path / "report"
    assert run_cli(study, out) == 0
    loaded = load_study(study)
    with writing_to(out, [study], force=True) as target:
        (target.staging / "manifest.json").write_text('{"tool": "cohort", "outputs": []}')
        monkeypatch.setattr(destination, "check_destination", lambda *a, **k: out)
        (out / "late.txt").write_text("late")
        target.publish()
        kept = target.kept
    assert kept is not None and (kept / "late.txt").read_text() == "late"
    assert not (kept / "report.html").exists()  # the earlier output's own files are gone
    assert sorted(p.name for p in (out).iterdir()) == ["manifest.json"]
    del loaded


def test_two_runs_on_one_folder_cannot_both_succeed(study, tmp_path, capsys):
    out = tmp_path / "shared"
    with writing_to(out, [study]):
        # a second run while the first holds the folder's lock
        refused(capsys, run_cli(study, out), "another cohort run")
        assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["study"]  # lock and staging gone
    assert run_cli(study, out) == 0
    refused(capsys, run_cli(study, out), "earlier cohort output")


def test_check_destination_is_a_pure_check(study, tmp_path):
    before = snapshot(tmp_path)
    assert check_destination(tmp_path / "new", [study]) == tmp_path / "new"
    with pytest.raises(OutputFolderError, match="holds the input"):
        check_destination(tmp_path, [study])
    assert snapshot(tmp_path) == before and not (tmp_path / "new").exists()


def test_a_manifest_cannot_steer_a_deletion_outside_its_folder(study, tmp_path, capsys):
    # a hand-written manifest listing files elsewhere (absolute, "..") is not cohort's:
    # refused, and the files it names are untouched
    precious = tmp_path / "precious"
    precious.mkdir()
    (precious / "thesis.txt").write_text("years of work")
    fake = tmp_path / "fake"
    fake.mkdir()
    for listed in (
        [str(precious / "thesis.txt")],
        ["../precious/thesis.txt"],
        ["./manifest.json", "a\\..\\b"],
        [str(study.parent / "values.csv")],
    ):
        (fake / "manifest.json").write_text(
            json.dumps({"tool": "cohort", "outputs": ["manifest.json", *listed]})
        )
        before = snapshot(tmp_path)
        refused(capsys, run_cli(study, fake, "--force"), "did not write")
        assert snapshot(tmp_path) == before


def test_an_empty_folder_added_to_an_earlier_output_is_not_removed(study, tmp_path, capsys):
    out = tmp_path / "report"
    assert run_cli(study, out) == 0
    (out / "my-notes").mkdir()
    (out / "tables" / "sub").mkdir()
    refused(capsys, run_cli(study, out, "--force"), "did not write", "my-notes")
    assert (out / "my-notes").is_dir() and (out / "tables" / "sub").is_dir()


def test_the_lock_never_follows_a_link_or_takes_a_user_file(study, tmp_path, capsys):
    victim = tmp_path / "victim.csv"
    victim.write_text("a,b\n1,2\n")
    (tmp_path / ".linked.cohort-lock").symlink_to(victim)
    (tmp_path / ".mine.cohort-lock").write_text("my own notes, not a lock\n")
    before = snapshot(tmp_path)
    refused(capsys, run_cli(study, tmp_path / "linked"), "not a cohort lock file")
    refused(capsys, run_cli(study, tmp_path / "mine"), "not a cohort lock file")
    assert snapshot(tmp_path) == before
    assert (tmp_path / ".linked.cohort-lock").is_symlink()
    # the lock file of a run that was killed (a process number) is taken over and removed
    (tmp_path / ".stale.cohort-lock").write_text("999999\n")
    assert run_cli(study, tmp_path / "stale") == 0
    assert not (tmp_path / ".stale.cohort-lock").exists()


# --- the code list -------------------------------------------------------------------------


@pytest.fixture
def key_file(tmp_path):
    key = tmp_path / "secret.key"
    key.write_text("an invented key of enough length for the test\n")
    return key


def test_code_list_never_overwrites_another_file(study, tmp_path, key_file, capsys):
    pseudo = ["--pseudonymize", "--key-file", str(key_file)]
    mine = tmp_path / "mine.csv"
    mine.write_text("patient,notes\nA,keep\n")
    before = snapshot(tmp_path)
    for target, words in [
        (mine, "not one that cohort wrote"),
        (study.parent / "subjects.csv", "is an input file"),
        (key_file, "is an input file"),
        (tmp_path / "out" / "codes.csv", "outside the output folder"),
    ]:
        code = run_cli(study, tmp_path / "out", *pseudo, "--code-list", str(target))
        refused(capsys, code, words)
        assert snapshot(tmp_path) == before
        assert not (tmp_path / "out").exists()
    # a new code list, then the same file replaced by the next run's code list
    codes = tmp_path / "codes.csv"
    assert run_cli(study, tmp_path / "out", *pseudo, "--code-list", str(codes)) == 0
    assert codes.read_text().splitlines()[0] == ",".join(CODE_LIST_COLUMNS)
    assert run_cli(study, tmp_path / "out", *pseudo, "--code-list", str(codes), "--force") == 0
    assert mine.read_text() == "patient,notes\nA,keep\n"


def test_a_code_list_that_cannot_be_written_is_refused_before_the_analysis(
    study, tmp_path, key_file, capsys
):
    pseudo = ["--pseudonymize", "--key-file", str(key_file)]
    user_list = tmp_path / "linkage.csv"
    user_list.write_text("subject,code\nHV001,kept-by-the-hospital\n")  # not cohort's header
    before = snapshot(tmp_path)
    for target, words in [
        (study / "codes.csv", "is a file"),  # below the study file
        ("/proc/cohort-codes.csv", "cannot write"),
        (user_list, "not one that cohort wrote"),
    ]:
        code = run_cli(study, tmp_path / "out", *pseudo, "--code-list", str(target))
        refused(capsys, code, words)
        assert not (tmp_path / "out").exists()  # refused before anything was written
        assert snapshot(tmp_path) == before


def test_key_file_inside_out_is_protected(study, tmp_path, key_file, capsys):
    code = run_cli(study, tmp_path, "--force", "--pseudonymize", "--key-file", str(key_file))
    refused(capsys, code)
    assert key_file.exists()


# --- the demo folder -------------------------------------------------------------------------


def test_demo_writes_only_into_a_new_folder_or_an_earlier_demo(tmp_path, capsys):
    folder = tmp_path / "d"
    assert main(["demo", str(folder), "--subjects", "6"]) == 0
    refused(
        capsys,
        main(["demo", str(folder), "--subjects", "6"]),
        "earlier demo",
        "Nothing was written or removed.",
    )
    assert main(["demo", str(folder), "--subjects", "7", "--force"]) == 0
    (folder / "values.csv").write_text("my own values\n")  # now not a demo's file alone?
    (folder / "notes.txt").write_text("mine")
    before = snapshot(folder)
    refused(capsys, main(["demo", str(folder), "--force"]), "not an earlier cohort demo")
    assert snapshot(folder) == before


def test_demo_size_is_checked_before_anything_is_written(tmp_path, capsys):
    for size in ("0", "-5", "5", "100000000", "many"):
        with pytest.raises(SystemExit) as exit_:
            main(["demo", str(tmp_path / "d"), "--subjects", size])
        assert exit_.value.code == 2
        assert "--subjects" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


# --- interruption ------------------------------------------------------------------------------


def test_ctrl_c_while_the_libraries_load_ends_quietly(monkeypatch, capsys):
    import importlib.abc

    import cohort.__main__ as entry

    class Interrupting(importlib.abc.MetaPathFinder):
        def find_spec(self, name, path=None, target=None):
            if name == "cohort.cli":
                raise KeyboardInterrupt
            return None

    monkeypatch.delitem(sys.modules, "cohort.cli")
    monkeypatch.setattr(sys, "meta_path", [Interrupting(), *sys.meta_path])
    assert entry.main() == 130
    assert "interrupted while starting" in capsys.readouterr().err


def test_workers_end_when_one_of_them_fails():
    if not can_fork():
        pytest.skip("worker processes are forked on Linux only")
    import multiprocessing

    with pytest.raises(ZeroDivisionError):
        ordered_map(_reciprocal, [1, 2, 0, 4, 5, 6], workers=2)
    deadline = time.monotonic() + 10
    while multiprocessing.active_children() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert multiprocessing.active_children() == []


def _reciprocal(x: int) -> float:
    if x == 0:
        return 1 / x
    time.sleep(0.2)
    return 1 / x


def _children(pid: int) -> set[int]:
    found: set[int] = set()
    for task in Path(f"/proc/{pid}/task").glob("*"):
        try:
            found |= {int(c) for c in (task / "children").read_text().split()}
        except OSError:
            pass
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().split(")")[-1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.skipif(
    not can_fork() or not Path("/proc/self/task").exists(),
    reason="needs forked workers and Linux /proc",
)
@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])
def test_a_signal_ends_the_workers_and_removes_the_partial_folder(tmp_path, signum):
    study_file = write_demo(tmp_path / "study", n_subjects=24, test_methods=ONE)
    out = tmp_path / "out"
    process = subprocess.Popen(
        [
            *(sys.executable, "-m", "cohort.cli", "run", str(study_file), "--out", str(out)),
            *("--bootstrap", "3000", "--workers", "2", "--quiet"),
        ],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    # wait until the run has its staging folder and its forked workers
    seen: set[int] = set()
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and process.poll() is None:
        seen |= _children(process.pid)
        partial = list(tmp_path.glob(".out.cohort-partial-*"))
        if partial and seen:
            break
        time.sleep(0.05)
    assert process.poll() is None, "the run ended before it could be interrupted"
    assert seen, "no worker processes were seen"
    process.send_signal(signum)
    _, err = process.communicate(timeout=120)
    assert process.returncode == 128 + signum, err
    assert "interrupted" in err and "Traceback" not in err
    deadline = time.monotonic() + 20
    while any(_alive(c) for c in seen) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not [c for c in seen if _alive(c)], "a worker outlived the run"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["study"]  # no out, partial, lock
