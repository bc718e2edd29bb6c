"""Bullseyes of single subjects: each method's values side by side, the segments positive by
the reference outlined, a few subjects to a figure.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass

import pandas as pd

from cohort.figures.captions import _label, _tesla, _threshold_text, _unit
from cohort.figures.layout import _grid_width, _shared_limits
from cohort.figures.records import SkippedFigure, _Drawn, _Item
from cohort.figures.tables import (
    FINDINGS_REQUIRED,
    FINDINGS_TABLE,
    _finding_parameter,
    _group_label,
    _model_numbers,
    _positive,
    _table,
)
from cohort.io.study import Study
from cohort.plots.bullseye_grid import bullseye_grid

MAX_SUBJECTS_SHOWN = 6
"""Subjects drawn one bullseye each by default (reference-positive for the first finding)."""


DEFAULT_SUBJECT_PARAMETER = "r2star"
"""Parameter of the per-subject bullseyes when the findings table names none."""


def _default_subjects(table: pd.DataFrame | None, finding: str | None, reference: str) -> list:
    if table is None or finding is None:
        return []
    rows = table[
        (table["finding"].astype(str) == finding)
        & (table["method"].astype(str) == reference)
        & _positive(table).fillna(False).to_numpy(dtype=bool)
    ]
    return sorted(pd.unique(rows["subject"].astype(str)))[:MAX_SUBJECTS_SHOWN]


def _subject_figure(
    study: Study, tables: Mapping[str, pd.DataFrame], subjects_to_show: Sequence[str]
) -> Iterator[_Item]:
    table, reason = _table(tables, FINDINGS_TABLE, FINDINGS_REQUIRED)
    finding = None if table is None else str(table["finding"].astype(str).iloc[0])
    parameter = DEFAULT_SUBJECT_PARAMETER
    if table is not None:
        parameter = _finding_parameter(table[table["finding"].astype(str) == finding]) or parameter
    key = f"bullseye_subjects_{parameter}"
    named = list(dict.fromkeys(str(s) for s in subjects_to_show))
    chosen = named or _default_subjects(table, finding, study.reference)
    if not chosen:
        why = (
            f"no subject was named and {reason}"
            if table is None
            else f"no subject is positive for {finding!r} by {study.reference!r}"
        )
        yield SkippedFigure(key, why)
        return
    known = set(study.subjects["subject"].astype(str).unique())
    unknown = [s for s in chosen if s not in known]
    if unknown:
        raise ValueError(f"subjects_to_show names subjects not in the study: {unknown!r}")
    numbers = _model_numbers(study)
    values = study.values
    # The subjects' own values are drawn: data, not a summary.
    part = values[
        (values["parameter"] == parameter)
        & values["subject"].astype(str).isin(chosen)
        & values["segment"].isin(numbers)
    ]
    if part.empty:
        yield SkippedFigure(key, f"no {parameter} values for subjects {chosen!r}")
        return
    shown = _Shown(
        parameter=parameter,
        finding=finding,
        outlined=_reference_positive(table, finding, study.reference),
        limits=_shared_limits(part["value"].to_numpy(dtype=float), signed=False),
        how=(
            f"{len(chosen)} subjects named by the caller"
            if subjects_to_show
            else (
                f"the first {len(chosen)} subjects (in order of ID) positive for {finding} by "
                f"{study.reference}"
            )
        ),
        threshold=(
            _threshold_text(table[table["finding"].astype(str) == finding], parameter)
            if table is not None
            else ""
        ),
        why_plain="" if table is not None else reason,
    )
    chunks = [chosen[k : k + MAX_SUBJECTS_SHOWN] for k in range(0, len(chosen), MAX_SUBJECTS_SHOWN)]
    for k, chunk in enumerate(chunks):
        part_text = f", part {k + 1} of {len(chunks)}" if len(chunks) > 1 else ""
        chunk_key = key if len(chunks) == 1 else f"{key}_part{k + 1}"
        yield _subject_chunk(study, part, chunk, shown, chunk_key, part_text)


@dataclass(frozen=True)
class _Shown:
    """What every figure of the single-subject set shares."""

    parameter: str
    finding: str | None
    outlined: set[tuple[str, int]] | None  # None: no findings table, no outlines
    limits: dict[str, float]
    how: str
    threshold: str
    why_plain: str


def _reference_positive(
    table: pd.DataFrame | None, finding: str | None, reference: str
) -> set[tuple[str, int]] | None:
    """(subject, segment) positive for ``finding`` by the reference (None: no table)."""
    if table is None:
        return None
    pos = table[
        (table["finding"].astype(str) == finding)
        & (table["method"].astype(str) == reference)
        & _positive(table).fillna(False).to_numpy(dtype=bool)
    ]
    return set(zip(pos["subject"].astype(str), pos["segment"].astype(int), strict=True))


def _subject_chunk(
    study: Study, part: pd.DataFrame, chunk: list[str], shown: _Shown, key: str, part_text: str
) -> _Drawn:
    """One figure: each subject of ``chunk`` by each method, side by side."""
    parameter = shown.parameter
    present = set(part["method"].unique())
    methods = [m for m in study.methods if m in present]
    by_subject = study.subjects.set_index(study.subjects["subject"].astype(str))
    strength, groups = by_subject["field_strength"], by_subject["group"]
    frame = part[part["subject"].astype(str).isin(chunk)]
    frame = frame[["subject", "method", "segment", "value"]].assign(
        subject=frame["subject"].astype(str)
    )
    panel = {(s, m): f"{s}, {_tesla(float(strength[s]))}\n{m}" for s in chunk for m in methods}
    frame["panel"] = [panel[(s, m)] for s, m in zip(frame["subject"], frame["method"], strict=True)]
    outlined = shown.outlined or set()
    frame["outlined"] = [
        (s, int(g)) in outlined for s, g in zip(frame["subject"], frame["segment"], strict=True)
    ]
    drawn = set(frame["panel"].unique())
    order = [panel[(s, m)] for s in chunk for m in methods if panel[(s, m)] in drawn]
    wrap = min(len(methods) * max(1, 4 // len(methods)), len(order))
    with_table = shown.outlined is not None
    grid = bullseye_grid(
        frame,
        row=None,
        col="panel",
        col_order=order,
        col_wrap=wrap,
        width=_grid_width(wrap),
        kind="value",
        model=study.settings.segment_model,
        parameter=parameter,
        outline="outlined" if with_table else None,
        outline_label=f"{shown.finding} by {study.reference}" if with_table else None,
        **shown.limits,
    )
    by_group: dict[str, list[str]] = {}
    for subject in chunk:
        by_group.setdefault(_group_label(study, groups[subject]), []).append(subject)
    listed = "; ".join(f"{g}: {', '.join(ids)}" for g, ids in by_group.items())
    caption = (
        f"{_label(parameter)} ({_unit(parameter)}) per AHA segment of single subjects, "
        f"each method side by side ({', '.join(methods)}), field strength in the title; "
        f"{shown.how}{part_text} ({listed}). One sequential colour scale from 0, shared by all "
        "panels; hatched: no value."
    )
    if with_table:
        caption += (
            f" Black outlines: segments positive for {shown.finding} by {study.reference} "
            f"({shown.threshold}), drawn on every method's panel so a segment the test method "
            "misses stands out."
        )
    else:
        caption += f" No outlines: {shown.why_plain}."
    title = f"{_label(parameter)} maps of single subjects, by method{part_text}"
    return _Drawn(key, title, caption, "findings", parameter, None, grid.fig, grid)
