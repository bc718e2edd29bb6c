"""The figure set of a report: every figure drawn from already computed tables, then saved.

:func:`make_figures` takes a :class:`~cohort.io.study.Study` and the report's tables (the
agreement table of :mod:`cohort.analysis.agreement_table`, the segment findings of
:mod:`cohort.analysis.findings`, and the display summaries of :mod:`cohort.analysis.display`,
formed from the study when not given), draws each figure with the plotting functions of
:mod:`cohort.plots`, saves it with :func:`cohort.plots.style.save_figure` and returns a
:class:`~cohort.figures.records.FigureRecord` per figure (file paths and a caption a reader
understands on its own).

The parts of the set, one module each: :mod:`~cohort.figures.agreement` (Bland-Altman and
scatter), :mod:`~cohort.figures.findings` (prevalence maps), :mod:`~cohort.figures.subjects`
(single-subject bullseyes), :mod:`~cohort.figures.maps` (median and difference maps),
:mod:`~cohort.figures.groups` (per-subject means by group); their captions are worded in
:mod:`~cohort.figures.captions`, the tables they read are named in
:mod:`~cohort.figures.tables`, and shared sizes are in :mod:`~cohort.figures.layout`.

No statistic is computed here. Bias, limits, their intervals, Passing-Bablok lines and CCC
come from the agreement table; display summaries (segment medians, per-subject means,
percentages of subjects positive) come from :mod:`cohort.analysis.display`, and the
captions say so.

A figure whose table is absent, empty or lacks the rows it needs is not drawn; the returned
:class:`FigureSet` lists it in ``skipped`` with the reason. A table that is given but lacks a
required column is an error (``ValueError`` naming the columns).

Field strength: maps and group plots of absolute levels of R2* and off-resonance are split
by field strength when a study has more than one
(:data:`cohort.analysis.display.FIELD_DEPENDENT_PARAMETERS`).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.figure import Figure

from cohort.figures.agreement import _agreement_figures
from cohort.figures.findings import _prevalence_figures
from cohort.figures.groups import _group_figures, _paired_figures
from cohort.figures.maps import _difference_figures, _median_figures
from cohort.figures.overview import _overview_figures
from cohort.figures.records import SECTIONS, FigureRecord, FigureSet, SkippedFigure, _Item
from cohort.figures.subjects import MAX_SUBJECTS_SHOWN, _subject_figure
from cohort.io.study import Study
from cohort.parallel import map_shared
from cohort.plots.style import save_figure

__all__ = [
    "MAX_SUBJECTS_SHOWN",
    "SECTIONS",
    "FigureRecord",
    "FigureSet",
    "SkippedFigure",
    "make_figures",
]


def make_figures(
    study: Study,
    tables: Mapping[str, pd.DataFrame],
    folder: Path,
    *,
    formats: Sequence[str] = ("png", "svg"),
    dpi: float = 300,
    subjects_to_show: Sequence[str] = (),
    progress: Callable[[str], object] | None = None,
    workers: int = 1,
) -> FigureSet:
    """Draw and save every figure of the report; return their records.

    Parameters
    ----------
    study
        The loaded study (its ``paired`` and ``values`` tables give the points and maps).
    tables
        Already computed tables: ``"agreement"`` (:func:`cohort.analysis.agreement_table.
        agreement_table`) and ``"findings_segment"`` (the ``segments`` table of
        :func:`cohort.analysis.findings.evaluate_findings`). An absent or empty table skips its
        figures.
    folder
        Where the files go (created); each figure is ``<key>.<format>``.
    formats, dpi
        File formats and raster resolution, passed to :func:`cohort.plots.style.save_figure`
        (300 dpi, the usual journal minimum; lower for quick previews).
    subjects_to_show
        Subjects drawn one bullseye per method each, :data:`MAX_SUBJECTS_SHOWN` to a figure;
        default: up to :data:`MAX_SUBJECTS_SHOWN` subjects positive by the reference for the
        first finding of the findings table, in order of subject ID.
    progress
        Called with a short text once per figure written (from the worker processes when
        there are several).
    workers
        Processes drawing the parts of the set (:func:`cohort.parallel.map_shared`; 0 = one
        per core); the figures and records are the same for any number.

    Returns
    -------
    FigureSet
        A list of :class:`FigureRecord` (in drawing order: agreement, findings, maps,
        groups) with ``skipped``, the figures not drawn and why.
    """
    if not isinstance(study, Study):
        raise ValueError(f"study must be a cohort.io.study.Study, got {type(study).__name__}")
    if not isinstance(tables, Mapping):
        raise ValueError(f"tables must be a mapping of name to DataFrame, got {type(tables)}")
    if isinstance(formats, str) or not formats:
        raise ValueError(f"formats must be a non-empty sequence of format names, got {formats!r}")
    if isinstance(subjects_to_show, str):
        raise ValueError(
            f"subjects_to_show must be a sequence of subject IDs, got the string "
            f"{subjects_to_show!r}"
        )
    if progress is not None and not callable(progress):
        raise ValueError(f"progress must be callable or None, got {progress!r}")
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    parts = (
        (_overview_figures, (study, tables)),
        (_agreement_figures, (study, tables)),
        (_prevalence_figures, (study, tables)),
        (_subject_figure, (study, tables, subjects_to_show)),
        (_median_figures, (study, tables)),
        (_difference_figures, (study, tables)),
        (_group_figures, (study, tables)),
        (_paired_figures, (study, tables)),
    )
    pending = _Pending(parts, folder, tuple(formats), dpi, progress)
    done = map_shared(_draw_part, pending, len(parts), workers)
    records: list[FigureRecord] = []
    skipped: list[SkippedFigure] = []
    for part_records, part_skipped in done:
        records += part_records
        skipped += part_skipped
    keys = [r.key for r in records]
    if len(set(keys)) != len(keys):  # parts draw figures of distinct prefixes
        raise RuntimeError(f"two parts of the figure set wrote the same key: {sorted(keys)}")
    return FigureSet(records, skipped)


@dataclass(frozen=True)
class _Pending:
    parts: tuple[tuple[Callable[..., Iterator[_Item]], tuple[Any, ...]], ...]
    folder: Path
    formats: tuple[str, ...]
    dpi: float
    progress: Callable[[str], object] | None


def _draw_part(pending: _Pending, index: int) -> tuple[list[FigureRecord], list[SkippedFigure]]:
    """Draw and save the figures of one part of the set (in this process or a worker)."""
    source, args = pending.parts[index]
    records: list[FigureRecord] = []
    skipped: list[SkippedFigure] = []
    keys: set[str] = set()
    for item in source(*args):
        if isinstance(item, SkippedFigure):
            skipped.append(item)
            continue
        key = _unique(item.key, keys)
        try:
            paths = _save(item.fig, pending.folder / key, pending.formats, pending.dpi)
        finally:
            plt.close(item.fig)
        records.append(
            FigureRecord(
                key, item.title, item.caption, item.section, item.parameter, item.method, paths
            )
        )
        if pending.progress is not None:
            pending.progress(f"figure: {key}")
    return records, skipped


def _save(fig: Figure, stem: Path, formats: Sequence[str], dpi: float) -> tuple[Path, ...]:
    """Save each format; the layout computed for the first is kept for the others, since
    constrained layout would otherwise be solved again for every file (a third of the time)."""
    paths = list(save_figure(fig, stem, formats=formats[:1], dpi=dpi))
    if len(formats) > 1:
        fig.set_layout_engine("none")
        paths += save_figure(fig, stem, formats=formats[1:], dpi=dpi)
    return tuple(paths)


def _unique(key: str, keys: set[str]) -> str:
    """``key``, or ``key-2``, ``key-3``... when method names give the same file name (compared
    ignoring case, as case-insensitive file systems do)."""
    candidate, k = key, 1
    while candidate.casefold() in keys:
        k += 1
        candidate = f"{key}-{k}"
    keys.add(candidate.casefold())
    return candidate
