"""Prevalence maps: percent of subjects positive for each finding per segment, group and
method (:func:`cohort.analysis.display.segment_prevalence` of the segment findings table),
with the segments where a test method falls well below the reference outlined.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping

import pandas as pd

from cohort.analysis import display
from cohort.figures.captions import _method_title, _names_note, _threshold_text
from cohort.figures.layout import _grid_width
from cohort.figures.records import SkippedFigure, _Drawn, _Item, _slug
from cohort.figures.tables import (
    FINDINGS_REQUIRED,
    FINDINGS_TABLE,
    SEGMENT_PREVALENCE,
    _display_table,
    _finding_parameter,
    _group_label,
    _groups_present,
    _model_numbers,
    _positive,
    _table,
)
from cohort.io.study import Study
from cohort.plots.bullseye_grid import bullseye_grid

PREVALENCE_DROP_POINTS = 10.0
"""Test segments outlined when their prevalence is this many percentage points (or more)
below the reference's in the same group."""


def _prevalence_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    table, reason = _table(tables, FINDINGS_TABLE, FINDINGS_REQUIRED)
    if table is None:
        yield SkippedFigure("bullseye_prevalence_by_group_method", reason)
        return
    numbers = _model_numbers(study)
    prevalence = _display_table(
        tables, SEGMENT_PREVALENCE, lambda: display.segment_prevalence(table, numbers)
    )
    for finding in pd.unique(table["finding"].astype(str)):
        key = f"bullseye_prevalence_{_slug(finding)}_by_group_method"
        rows = table[(table["finding"].astype(str) == finding) & table["segment"].isin(numbers)]
        classified = rows[_positive(rows).notna().to_numpy()]
        if classified.empty:
            yield SkippedFigure(key, f"no segment is classified for finding {finding!r}")
            continue
        classified = classified.assign(group=classified["group"].astype(str))
        frame = display.select(prevalence, finding=finding).rename(
            columns={"percent_positive": "value"}
        )[["group", "method", "segment", "value"]]
        present = set(frame["method"].unique())
        methods = [m for m in study.methods if m in present]
        methods += sorted(present - set(methods))
        if study.reference not in methods:
            yield SkippedFigure(
                key, f"finding {finding!r} has no rows for the reference {study.reference!r}"
            )
            continue
        yield _prevalence_figure(study, finding, key, rows, classified, frame, methods)


def _prevalence_figure(
    study: Study,
    finding: str,
    key: str,
    rows: pd.DataFrame,
    classified: pd.DataFrame,
    frame: pd.DataFrame,
    methods: list,
) -> _Drawn:
    """One finding's prevalence maps: group rows, method columns, drops outlined."""
    frame["outlined"] = _outlined(frame, methods, study.reference)
    frame["method"] = frame["method"].astype(str).map(lambda m: _method_title(study, m))
    methods = [_method_title(study, m) for m in methods]
    # Round half up (12.5 % of 16 subjects reads 13, not the round-half-even 12).
    frame["note"] = [str(math.floor(v + 0.5)) for v in frame["value"]]
    groups = _groups_present(study, classified)
    n = classified.groupby("group")["subject"].nunique()
    names = {g: f"{_group_label(study, g)}\n(n = {int(n.get(g, 0))})" for g in groups}
    frame["row"] = frame["group"].map(names)
    top = float(frame["value"].max())
    vmax = min(100.0, max(20.0, 10.0 * math.ceil(top / 10.0)))
    grid = bullseye_grid(
        frame,
        row="row",
        col="method",
        kind="prevalence",
        model=study.settings.segment_model,
        labels=None,
        annotation="note",
        outline="outlined",
        outline_label=(
            f"test \N{GREATER-THAN OR EQUAL TO} {PREVALENCE_DROP_POINTS:g} points below reference"
        ),
        row_order=[names[g] for g in groups],
        col_order=methods,
        vmax=vmax,
        width=_grid_width(len(methods)),
        colorbar_label=f"subjects positive for {finding} (%)",
    )
    parameter = _finding_parameter(rows)
    caption = (
        f"Prevalence of {finding} per AHA segment: percent of the subjects of each group "
        f"(rows, n subjects in the label) whose segment is positive, i.e. "
        f"{_threshold_text(classified, parameter)}, for each method (columns, "
        f"{study.reference} first); the number in each segment is that percentage, rounded to "
        "a whole percent. "
        f"Denominator: subjects with that segment classified by that method. Discrete "
        f"colour scale in 10-point bins from 0 to {vmax:g} % (the highest prevalence "
        "rounded up to the next bin, at least 20 %). Segments where a test "
        f"method's prevalence is at least {PREVALENCE_DROP_POINTS:g} percentage points "
        f"below {study.reference}'s in the same group are outlined in black "
        f"({int(frame['outlined'].sum())} here). Percentages are display summaries; detection "
        "statistics with their CIs are in the findings tables."
        + _names_note(methods, "Columns, left to right")
    )
    title = f"Prevalence of {finding} by segment, group and method"
    return _Drawn(key, title, caption, "findings", parameter, None, grid.fig)


def _outlined(frame: pd.DataFrame, methods: list, reference_method: str) -> list[bool]:
    """Rows of a test method at least :data:`PREVALENCE_DROP_POINTS` below the reference's
    prevalence in the same group and segment."""
    wide = frame.pivot_table(index=["group", "segment"], columns="method", values="value")
    reference = wide[reference_method]
    drop = {
        m: (reference - wide[m]) >= PREVALENCE_DROP_POINTS for m in methods if m != reference_method
    }
    return [
        bool(drop[m].get((g, s), False)) if m in drop else False
        for g, m, s in zip(frame["group"], frame["method"], frame["segment"], strict=True)
    ]
