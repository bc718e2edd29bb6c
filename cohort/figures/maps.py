"""Bullseye maps of display summaries: segment medians per group and method, and median
differences (test minus reference) per group, from :mod:`cohort.analysis.display`.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping

import numpy as np
import pandas as pd

from cohort.analysis import display
from cohort.figures.captions import _label, _names_note, _strength_note, _tesla, _tesla_slug, _unit
from cohort.figures.layout import _grid_width, _shared_limits
from cohort.figures.records import _Drawn, _Item, _slug
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
            methods = [m for m in study.methods if m in present]
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
    table = _display_table(tables, DIFFERENCE_MEDIANS, lambda: display.difference_medians(study))
    paired = study.paired
    numbers = _model_numbers(study)
    for parameter in study.parameters:
        # the study's pairs give the counts in the titles and caption; the medians are a table
        part = paired[(paired["parameter"] == parameter) & paired["segment"].isin(numbers)]
        if part.empty:
            continue
        medians = display.select(table, parameter=parameter)
        limits = _shared_limits(medians["median_difference"].to_numpy(dtype=float), signed=True)
        for method in study.test_methods:
            sub = part[part["method"] == method]
            if sub.empty:
                continue
            key = f"bullseye_difference_{parameter}_by_group_{_slug(method)}"
            frame = display.select(medians, method=method)[
                ["group", "segment", "median_difference"]
            ]
            frame = frame.rename(columns={"median_difference": "value"})
            groups = _groups_present(study, sub)
            n = sub.groupby("group")["subject"].nunique()
            names = {g: f"{_group_label(study, g)} (n = {int(n.get(g, 0))})" for g in groups}
            frame["col"] = frame["group"].astype(str).map(names)
            grid = bullseye_grid(
                frame,
                row=None,
                col="col",
                kind="difference",
                model=study.settings.segment_model,
                parameter=parameter,
                col_order=[names[g] for g in groups],
                width=_grid_width(len(groups)),
                colorbar_label=(
                    f"{fit_axis_name(method)} \N{MINUS SIGN} "
                    f"{fit_axis_name(study.reference)}\n"
                    f"median difference ({_unit(parameter)})"
                ),
                **limits,
            )
            caption = (
                f"Median difference {method} minus {study.reference} of {_label(parameter)} "
                f"({_unit(parameter)}) per AHA segment over the subjects of each group "
                f"(panels; n subjects in the title), from the {len(sub)} pairs of "
                f"{sub['subject'].nunique()} subjects where both methods have a value. "
                "Diverging colour scale centred at 0 with limits symmetric about 0 and shared "
                f"by every {_label(parameter)} difference map of this set; red: {method} "
                "higher, blue: lower; hatched: no pairs. Medians are display summaries; "
                "bias and its CI are in the agreement table."
                + _strength_note(study, parameter, sub, False)
            )
            yield _Drawn(
                key,
                f"Median difference of {_label(parameter)}, {method} vs {study.reference}, "
                "by group",
                caption,
                "maps",
                parameter,
                method,
                grid.fig,
                grid,
            )
