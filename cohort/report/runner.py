"""``cohort run``: load, analyse and write a complete, reproducible output folder.

Layout of the folder::

    report.html        self-contained report (inline CSS and figures, no network)
    methods.md         ready-to-edit methods text with references
    manifest.json      inputs with SHA-256, settings, options, versions, times, warnings
    tables/*.csv       every table (column names documented in the README)
    tables.xlsx        the same tables, one sheet each
    figures/*.png|svg  every figure (PNG at 300 dpi and SVG)

The folder is written beside its final place and moved there at the end, so an interrupted
run leaves no half report. Which folders may be written or replaced, and how, is the rule of
:mod:`cohort.report.destination`: never an input or a folder holding one, and with ``force`` only
the output of an earlier run.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from cohort.analysis.pipeline import Analysis, Progress, RunOptions, analyse
from cohort.io.settings import StudySettings
from cohort.io.study import Study, load_study
from cohort.parallel import resolve_workers
from cohort.report.destination import OutputFolderError, raise_if_interrupted, writing_to
from cohort.report.manifest import build_manifest, sha256, write_manifest
from cohort.report.methods_text import methods_markdown
from cohort.report.outputs import write_tables
from cohort.report.page import render_report


@dataclass(frozen=True)
class RunSummary:
    """What a run wrote and what it found worth saying first."""

    out: Path
    report: Path
    analysis: Analysis
    n_tables: int
    n_figures: int
    alerts: tuple[str, ...]
    kept: Path | None = None
    """Where files found in a replaced earlier output, and not written by it, were kept."""

    def __repr__(self) -> str:
        return (
            f"<RunSummary {str(self.out)!r}: {self.n_tables} tables, {self.n_figures} figures, "
            f"{len(self.alerts)} alerts; .text() for more>"
        )

    def text(self) -> str:
        study = self.analysis.study
        lines = [
            f"cohort run: {study.settings.title}",
            f"  {len(study.subjects)} subjects, reference {study.reference!r}, "
            f"compared {', '.join(repr(m) for m in study.test_methods)}",
            f"  {self.n_tables} tables, {self.n_figures} figures, "
            f"bootstrap B = {self.analysis.options.n_boot}, seed {self.analysis.options.seed}",
        ]
        if self.alerts:
            lines.append(f"  {len(self.alerts)} warning(s) to read first:")
            lines += [f"    ! {a}" for a in self.alerts]
        else:
            lines.append("  no deceptive-agreement or swap warning")
        lines.append(f"  report: {self.report}")
        if self.kept is not None:
            lines.append(
                f"  files that appeared in the replaced earlier output were kept in {self.kept}"
            )
        return "\n".join(lines)


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


def run(
    source: str | Path | StudySettings | Study,
    out: str | Path,
    options: RunOptions | None = None,
    *,
    force: bool = False,
    progress: Progress | None = None,
    pseudonymized: bool = False,
    protect: Iterable[str | Path] = (),
) -> RunSummary:
    """Run the whole study and write the output folder ``out``; see the module docstring.

    ``options`` default to the study's own (its ``[analysis]`` table). ``out`` is checked
    before the analysis (:func:`cohort.report.destination.check_destination`) against the
    study's input files and ``protect`` (other files the caller read, such as a key file);
    :class:`~cohort.report.destination.OutputFolderError` says why a folder is refused.

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> from cohort.analysis.pipeline import options_from_study
    >>> from cohort.demo import write_demo
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     study = load_study(write_demo(Path(folder) / "demo", n_subjects=6))
    ...     options = options_from_study(study, n_boot=0, figures=False)
    ...     done = run(study, Path(folder) / "report", options)
    ...     names = sorted(p.name for p in done.out.iterdir())
    >>> names
    ['manifest.json', 'methods.md', 'report.html', 'tables', 'tables.xlsx']
    """
    tell = progress or (lambda message: None)

    def say(message: str) -> None:
        raise_if_interrupted()  # between stages: a signal is never lost
        tell(message)

    started = _now()
    study = source if isinstance(source, Study) else load_study(source)
    options = options or study.settings.options
    inputs = _inputs(study)
    before = {k: sha256(p) for k, p in inputs.items()}
    with writing_to(out, [*inputs.values(), *protect], force=force) as destination:
        staging = destination.staging
        analysis = analyse(study, options, progress=say)
        say("writing tables")
        written = write_tables(analysis.tables, staging, workers=options.workers)
        records = _figures(analysis, staging, say)
        methods = methods_markdown(analysis)
        (staging / "methods.md").write_text(methods, encoding="utf-8")
        after = _unchanged(inputs, before)
        outputs = [p.relative_to(staging).as_posix() for p in staging.rglob("*") if p.is_file()]
        manifest = _manifest(analysis, inputs, after, started, pseudonymized, outputs)
        say("writing the report")
        report = render_report(analysis, records, methods, manifest)
        (staging / "report.html").write_text(report, encoding="utf-8")
        write_manifest(manifest, staging / "manifest.json")
        final = destination.publish()
        kept = destination.kept
    n_tables = sum(1 for p in written if p.suffix == ".csv")
    return RunSummary(
        final, final / "report.html", analysis, n_tables, len(records),
        tuple(analysis.alerts), kept,
    )  # fmt: skip


def _inputs(study: Study) -> dict[str, Path]:
    """The files a run reads, by role."""
    inputs = {"values": study.settings.values, "subjects": study.settings.subjects}
    if study.settings.study_file:
        inputs["study_file"] = study.settings.study_file
    return inputs


def _figures(analysis: Analysis, staging: Path, say: Progress) -> list[Any]:
    """The figures of the report (none with ``figures = False``)."""
    if not analysis.options.figures:
        return []
    from cohort.figures.figure_set import make_figures

    return make_figures(
        analysis.study,
        {**analysis.tables, **analysis.display},
        staging / "figures",
        progress=say,
        workers=analysis.options.workers,
    )


def _unchanged(inputs: dict[str, Path], before: dict[str, str]) -> dict[str, str]:
    """The inputs' digests, refusing the run if one changed while it was read."""
    after = {k: sha256(p) for k, p in inputs.items()}
    if after != before:
        changed = ", ".join(k for k in inputs if before[k] != after[k])
        raise OutputFolderError(
            f"an input changed while the run read it ({changed}); nothing was written: "
            "run again when the files are final"
        )
    return after


def _manifest(
    analysis: Analysis,
    inputs: dict[str, Path],
    digests: dict[str, str],
    started: str,
    pseudonymized: bool,
    written: list[str],
) -> dict[str, Any]:
    """The manifest of a run: inputs, settings, options, warnings, outputs."""
    study, options = analysis.study, analysis.options
    return build_manifest(
        inputs=inputs,
        digests=digests,
        input_names={
            k: None if pseudonymized else study.settings.input_name(p) for k, p in inputs.items()
        },
        settings=study.settings.to_dict(hide_paths=pseudonymized),
        options={
            **options.to_dict(),
            "workers_used": resolve_workers(options.workers),
            "pseudonymized": pseudonymized,
        },
        started=started,
        finished=_now(),
        warnings=[*analysis.alerts, *analysis.warnings, *(str(w) for w in study.warnings)],
        outputs=[*written, "report.html", "manifest.json"],
        accounting=study.accounting(),
    )
