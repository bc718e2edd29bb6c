"""Bullseye maps of display summaries: segment medians per group and method, and median
differences (test minus reference) per group, from :mod:`cohort.analysis.display`.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping

import numpy as np
import pandas as pd

from cohort.analysis import display
from cohort.figures.captions import (
    _label,
    _method_title,
    _names_note,
    _pairs_text,
    _strength_note,
    _tesla,
    _tesla_slug,
    _unit,
)
from cohort.figures.layout import _grid_width, _shared_limits
from cohort.figures.records import _Drawn, _Item
from cohort.figures.tables import (
    DIFFERENCE_MEDIANS,
    SEGMENT_MEDIANS,
    _display_table,
    _group_label,
    _groups_present,
    _model_numbers,
    _strengths,
)
from cohort.io.study import Study
from cohort.plots.bullseye_grid import bullseye_grid
from cohort.plots.style import fit_axis_name


def _median_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    table = _display_table(tables, SEGMENT_MEDIANS, lambda: display.segment_medians(study))
    values = study.values
    numbers = _model_numbers(study)
    for parameter in study.parameters:
        # the study's values give the subjects counted in the labels; the medians are a table
        part = values[(values["parameter"] == parameter) & values["segment"].isin(numbers)]
        strengths = _strengths(study, parameter, part)
        medians = []
        for b0 in strengths:
            sub = part if b0 is None else part[part["field_strength"] == b0]
            rows = display.select(table, parameter=parameter, field_strength=b0)
            medians.append((b0, sub, rows[["group", "method", "segment", "median"]]))
        every = np.concatenate([m["median"].to_numpy(dtype=float) for _, _, m in medians])
        signed = parameter == "field"  # referenced field: 0 is the subject's own reference
        limits = _shared_limits(every, signed)
        for b0, sub, med in medians:
            suffix = "" if b0 is None else f"_{_tesla_slug(b0)}"
            key = f"bullseye_median_{parameter}{suffix}_by_group_method"
            frame = med.rename(columns={"median": "value"})
            groups = _groups_present(study, sub)
            n = sub.groupby("group")["subject"].nunique()
            row_names = {g: f"{_group_label(study, g)}\n(n = {int(n.get(g, 0))})" for g in groups}
            frame["row"] = frame["group"].astype(str).map(row_names)
            present = set(frame["method"].unique())
            methods = [_method_title(study, m) for m in study.methods if m in present]
            frame["method"] = frame["method"].astype(str).map(lambda m: _method_title(study, m))
            where = "" if b0 is None else f" at {_tesla(b0)}"
            label = f"median {_label(parameter)}{where} ({_unit(parameter)})"
            grid = bullseye_grid(
                frame,
                row="row",
                col="method",
                kind="difference" if signed else "value",
                model=study.settings.segment_model,
                parameter=parameter,
                row_order=[row_names[g] for g in groups],
                col_order=methods,
                colorbar_label=label,
                width=_grid_width(len(methods)),
                **limits,
            )
            scale = (
                "diverging colour scale centred at 0 (the subject's own reference)"
                if signed
                else "sequential colour scale starting at 0"
            )
            caption = (
                f"Median {_label(parameter)} ({_unit(parameter)}) per AHA segment over the "
                f"subjects of each group (rows, n subjects in the label), for each method "
                f"(columns){where}. One {scale}, with the same limits in every panel and in "
                f"every {_label(parameter)} map of this set; hatched: no data. Medians are "
                "display summaries of each method's own values."
                + _names_note(methods, "Columns, left to right")
                + _strength_note(study, parameter, part, b0 is not None)
            )
            if parameter == "field":
                caption += (
                    f" Field is referenced within each subject "
                    f"({study.settings.field_referencing})."
                )
            yield _Drawn(
                key,
                f"Median {_label(parameter)}{where} by group and method",
                caption,
                "maps",
                parameter,
                None,
                grid.fig,
                grid,
            )


def _difference_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    """One figure per parameter: median differences per segment, the test methods as rows
    (in the study's order) and the groups as columns, on one symmetric colour scale."""
    table = _display_table(tables, DIFFERENCE_MEDIANS, lambda: display.difference_medians(study))
    paired = study.paired
    numbers = _model_numbers(study)
    for parameter in study.parameters:
        # the study's pairs give the counts in the titles and caption; the medians are a table
        part = paired[(paired["parameter"] == parameter) & paired["segment"].isin(numbers)]
        if part.empty:
            continue
        medians = display.select(table, parameter=parameter)
        methods = [m for m in study.test_methods if (part["method"] == m).any()]
        yield _difference_figure(study, parameter, part, medians, methods)


def _difference_figure(
    study: Study, parameter: str, part: pd.DataFrame, medians: pd.DataFrame, methods: list[str]
) -> _Drawn:
    groups = _groups_present(study, part)
    several = len(methods) > 1
    frames = []
    for method in methods:
        frame = display.select(medians, method=method)[["group", "segment", "median_difference"]]
        frames.append(frame.assign(row=_method_title(study, method)))
    frame = pd.concat(frames, ignore_index=True).rename(columns={"median_difference": "value"})
    frame = frame[frame["group"].astype(str).isin(groups)]
    # n subjects per group over all test methods (a method's own counts are in the caption)
    n = part.groupby("group", observed=True)["subject"].nunique()
    names = {g: f"{_group_label(study, g)} (n = {int(n.get(g, 0))})" for g in groups}
    frame["col"] = frame["group"].astype(str).map(names)
    limits = _shared_limits(frame["value"].to_numpy(dtype=float), signed=True)
    test = "test method" if several else fit_axis_name(_method_title(study, methods[0]))
    grid = bullseye_grid(
        frame,
        row="row" if several else None,
        col="col",
        kind="difference",
        model=study.settings.segment_model,
        parameter=parameter,
        row_order=[_method_title(study, m) for m in methods] if several else None,
        col_order=[names[g] for g in groups],
        width=_grid_width(len(groups)),
        colorbar_label=(
            f"{test} \N{MINUS SIGN} {fit_axis_name(study.reference)}\n"
            f"median difference ({_unit(parameter)})"
        ),
        **limits,
    )
    counts = "; ".join(
        f"{_method_title(study, m)}: {_pairs_text(part[part['method'] == m])}" for m in methods
    )
    which = (
        f"each test method (rows, top to bottom: "
        f"{', '.join(_method_title(study, m) for m in methods)}) minus {study.reference}"
        if several
        else f"{_method_title(study, methods[0])} minus {study.reference}"
    )
    caption = (
        f"Median difference of {_label(parameter)} ({_unit(parameter)}) per AHA segment, "
        f"{which}, over the subjects of each group (columns; n subjects in the title), from "
        f"the pairs where both methods have a value ({counts}). Diverging colour scale "
        "centred at 0 with limits symmetric about 0, shared by every panel; red: the test "
        "method higher, blue: lower; hatched: no pairs. Medians are display summaries; bias "
        "and its CI are in the agreement table." + _strength_note(study, parameter, part, False)
    )
    title = (
        f"Median difference of {_label(parameter)}, "
        + ("test methods" if several else _method_title(study, methods[0]))
        + f" vs {study.reference}, by group"
    )
    return _Drawn(
        f"bullseye_difference_{parameter}_by_group",
        title,
        caption,
        "maps",
        parameter,
        None if several else methods[0],
        grid.fig,
        grid,
    )
