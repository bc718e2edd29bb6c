"""A run as the command line asks for it: the output folder checked before any work, the
study loaded, optionally pseudonymised with a keyed code list written beside the output.

:func:`run_study` is what ``cohort run`` calls; the output folder's rules are
:mod:`cohort.report.destination`'s, and the code list is a :class:`ReservedFile` that replaces
nothing but an earlier code list.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from cohort.analysis.pipeline import options_from_study
from cohort.domain.options import COMMAND_LINE
from cohort.io.pseudonyms import CODE_LIST_COLUMNS, load_key, pseudonymize_study
from cohort.io.settings import StudySettings
from cohort.io.study import load_study
from cohort.report.destination import OutputFolderError, ReservedFile, check_destination
from cohort.report.runner import Progress, RunSummary, run


@dataclass(frozen=True)
class StudyRun:
    """What :func:`run_study` wrote: the run's summary and the code list, if any."""

    summary: RunSummary
    code_list: Path | None = None


def input_paths(settings: StudySettings, *extra: str | Path | None) -> list[Path]:
    """Every file a run reads: none of them may be written or sit inside the output."""
    paths = [settings.values, settings.subjects, settings.study_file, *extra]
    return [Path(p) for p in paths if p]


def is_code_list(path: Path) -> bool:
    """Whether ``path`` is a code list written by a pseudonymised run (its header is exactly
    :data:`cohort.io.pseudonyms.CODE_LIST_COLUMNS`): the only kind of existing file that a
    new code list may replace."""
    try:
        with path.open(encoding="utf-8") as handle:
            header = tuple(handle.readline().rstrip("\r\n").split(","))
    except (OSError, UnicodeDecodeError):
        return False
    return header == tuple(CODE_LIST_COLUMNS)


def reserve_code_list(
    out: str | Path, code_list: str | Path | None, inputs: list[Path]
) -> ReservedFile:
    """Where the code list goes (default: ``<out>-pseudonym-codes.csv`` beside ``out``),
    checked and reserved before the analysis: outside ``out``, not an input, replacing
    nothing but an earlier code list."""
    out = Path(os.path.abspath(out))
    path = Path(os.path.abspath(code_list or out.with_name(f"{out.name}-pseudonym-codes.csv")))
    real = Path(os.path.realpath(path))
    if Path(os.path.realpath(out)) in (real, *real.parents):
        raise OutputFolderError("--code-list must be outside the output folder")
    if any(Path(os.path.realpath(p)) == real for p in inputs):
        raise OutputFolderError(f"--code-list {str(path)!r} is an input file; give a new file")
    return ReservedFile(path, is_code_list, "--code-list")


def run_study(
    settings: StudySettings,
    out: str | Path,
    overrides: Mapping[str, Any],
    *,
    force: bool = False,
    progress: Progress | None = None,
    pseudonymize: bool = False,
    key_file: str | Path | None = None,
    code_list: str | Path | None = None,
) -> StudyRun:
    """Check ``out`` (and the code list's place), load the study, pseudonymise it if asked,
    apply the option ``overrides`` (checked by their rules) and :func:`run` it."""
    inputs = input_paths(settings, key_file)
    check_destination(out, inputs, force=force)  # before any work
    reserved = reserve_code_list(out, code_list, inputs) if pseudonymize else None
    try:
        study = load_study(settings)
        if pseudonymize:
            study, codes = pseudonymize_study(study, load_key(key_file))
        options = options_from_study(study, where=COMMAND_LINE, **overrides)
        summary = run(
            study,
            out,
            options,
            force=force,
            progress=progress,
            pseudonymized=pseudonymize,
            protect=inputs,
        )
        written = None
        if reserved is not None:
            written = reserved.commit(lambda temporary: codes.to_csv(temporary, index=False))
    finally:
        if reserved is not None:
            reserved.discard()
    return StudyRun(summary, written)
