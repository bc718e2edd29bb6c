"""Group figures: per-subject means by group and method (boxes and points), and paired lines
from reference to test per subject, from :mod:`cohort.analysis.display`.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.figure import Figure

from cohort.analysis import display
from cohort.figures.captions import (
    _axis,
    _label,
    _method_title,
    _names_note,
    _panel_lead,
    _panels_text,
    _strength_note,
    _tesla,
    _unit,
)
from cohort.figures.layout import _letter, _panel_grid, _panel_heading, _title_width
from cohort.figures.records import SkippedFigure, _Drawn, _Item
from cohort.figures.tables import (
    PAIRED_SUBJECT_MEANS,
    SUBJECT_MEANS,
    _display_table,
    _group_label,
    _groups_present,
    _strengths,
)
from cohort.io.study import Study
from cohort.plots.group_plots import group_distribution_plot, paired_lines_plot
from cohort.plots.limit_lines import _numbers_above, group_key, shared_legend
from cohort.plots.style import figure_size, fit_label, style_context


def _group_parameters(study: Study) -> Iterator[tuple[str, str | None]]:
    """Parameters for group plots, or the reason one is left out."""
    for parameter in study.parameters:
        if parameter == "field" and study.settings.field_referencing == "subject-median":
            yield (
                parameter,
                "field is referenced to each subject's own median, so a per-subject mean "
                "over segments is close to 0 by construction and says nothing about groups",
            )
        else:
            yield parameter, None


def _panel_axes(n_panels: int, aspect: float) -> tuple[Figure, list[Any]]:
    width = "single" if n_panels == 1 else "double"
    fig, axes = plt.subplots(
        1,
        n_panels,
        figsize=figure_size(width, aspect=aspect / n_panels if n_panels > 1 else aspect),
        squeeze=False,
        sharey=True,
        layout="constrained",
    )
    return fig, list(axes[0])


def _group_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    table = _display_table(tables, SUBJECT_MEANS, lambda: display.subject_means(study))
    for parameter, why in _group_parameters(study):
        key = f"groups_{parameter}_subject_mean"
        if why is not None:
            yield SkippedFigure(key, why)
            continue
        part = display.select(table, parameter=parameter)
        means = part[["subject", "group", "method", "field_strength", "mean"]].rename(
            columns={"mean": "value"}
        )
        means["group"] = means["group"].astype(str)
        strengths = _strengths(study, parameter, part)
        groups = _groups_present(study, means)
        present = set(means["method"].unique())
        methods = [m for m in study.methods if m in present]
        with style_context():
            fig, axes = _panel_axes(len(strengths), aspect=0.75)
            for k, (ax, b0) in enumerate(zip(axes, strengths, strict=True)):
                sub = means if b0 is None else means[means["field_strength"] == b0]
                sub = sub.assign(group=sub["group"].map(lambda g: _group_label(study, g)))
                group_distribution_plot(
                    sub,
                    value="value",
                    group="group",
                    method="method",
                    order=[_group_label(study, g) for g in groups],
                    method_order=methods,
                    parameter=parameter,
                    ax=ax,
                )
                _subject_mean_label(ax, parameter)
                if b0 is not None:
                    ax.set_title(_tesla(b0), loc="right", fontsize=7.5)
                if k > 0 and ax.get_legend() is not None:
                    ax.get_legend().remove()
                    ax.set_ylabel("")
        caption = (
            f"Per-subject mean of {_label(parameter)} ({_unit(parameter)}) over each method's "
            f"own segments, by group (n subjects under each group) and method (colours); "
            f"{means['subject'].nunique()} subjects. The means are a simple arithmetic mean "
            "of the available segments, formed here for display only; the group comparison "
            "statistics are in the groups table. Boxes: quartiles with whiskers to the "
            "furthest value within 1.5 IQR (Tukey); every subject drawn as a point."
            + _names_note(methods, "Methods, in the order of the key")
            + _strength_note(study, parameter, part, strengths != [None])
        )
        yield _Drawn(
            key,
            f"{_label(parameter).capitalize() if parameter != 'r2star' else 'R2*'} per "
            "subject by group and method",
            caption,
            "groups",
            parameter,
            None,
            fig,
        )


def _subject_mean_label(ax: Any, parameter: str) -> None:
    ax.set_ylabel(f"subject mean {_axis(parameter)}")


def _paired_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    """One figure per parameter: lines from reference to test of each subject's means, a
    panel per test method (in the study's order) and field strength (a row each)."""
    table = _display_table(
        tables, PAIRED_SUBJECT_MEANS, lambda: display.paired_subject_means(study)
    )
    for parameter, why in _group_parameters(study):
        key = f"paired_{parameter}_subject_mean"
        if why is not None:
            yield SkippedFigure(key, why)
            continue
        means = display.select(table, parameter=parameter)
        present = set(means["method"].astype(str))
        methods = [m for m in study.test_methods if m in present]
        if not methods:
            yield SkippedFigure(key, f"study.paired has no {parameter} pairs")
            continue
        yield _paired_figure(study, means, parameter, methods, key)


PAIRED_ASPECT = 1.0
"""Height / width of a panel of paired lines."""


@dataclass(frozen=True)
class _PairedPanel:
    method: str
    b0: float | None
    rows: pd.DataFrame  # one row per subject: reference and test means, with their labels


def _paired_panels(
    study: Study, means: pd.DataFrame, parameter: str, methods: Sequence[str]
) -> tuple[list[_PairedPanel], list[int], list[float | None]]:
    """The panels (field strengths in rows, test methods across; one test method: the
    field strengths across) and the panels a row."""
    strengths = _strengths(study, parameter, means)
    panels, blocks = [], []
    for b0 in strengths:
        at = means if b0 is None else means[means["field_strength"] == b0]
        block = [
            _PairedPanel(m, b0, at[at["method"].astype(str) == m])
            for m in methods
            if (at["method"].astype(str) == m).any()
        ]
        panels += block
        blocks.append(len(block))
    if len(methods) == 1:
        blocks = [len(panels)]
    return panels, [b for b in blocks if b], strengths


def _long(study: Study, rows: pd.DataFrame, test: str) -> pd.DataFrame:
    """A panel's means as one row per subject and method (the reference and ``test``)."""
    long = pd.concat(
        [
            rows.assign(method=study.reference, value=rows["reference_mean"]),
            rows.assign(method=test, value=rows["test_mean"]),
        ],
        ignore_index=True,
    )
    long["group"] = long["group"].astype(str).map(lambda g: _group_label(study, g))
    return long


# Long: one loop over the panels with the plot's arguments, headings and the shared key
def _paired_figure(
    study: Study, means: pd.DataFrame, parameter: str, methods: Sequence[str], key: str
) -> _Drawn:
    """Lines from reference to test of each subject's means, one panel per test method and
    field strength, one y axis for all."""
    panels, blocks, strengths = _paired_panels(study, means, parameter, methods)
    order = [_group_label(study, g) for g in _groups_present(study, means)]
    longs = [_long(study, p.rows, p.method) for p in panels]
    # Colours follow the order of the groups present in a panel: one key for the figure
    # only when every panel holds every group.
    shared_key = all(set(lg["group"].unique()) == set(order) for lg in longs)
    several = len(panels) > 1
    width = _title_width(len(methods))
    tick_width = 14 if max(blocks) >= 4 else 18  # characters a line of a method name
    with style_context():
        fig, axes = _panel_grid(blocks, aspect=PAIRED_ASPECT, sharex=False)
        for k, (ax, panel, long) in enumerate(zip(axes, panels, longs, strict=True)):
            title = _method_title(study, panel.method)
            paired_lines_plot(
                long,
                reference=study.reference,
                test=panel.method,
                group="group",
                group_order=[g for g in order if g in set(long["group"].unique())],
                parameter=parameter,
                ax=ax,
            )
            names = [fit_label(n, tick_width, 3) for n in (study.reference, title)]
            ax.set_xticks([0.0, 1.0], names)
            ax.set_xlim(-0.45, 1.45)  # room for the method names under the ends
            _subject_mean_label(ax, parameter)
            if ax.get_subplotspec().colspan.start > 0:
                ax.set_ylabel("")
            n = panel.rows["subject"].nunique()
            where = "" if panel.b0 is None else f"{_tesla(panel.b0)}, "
            _numbers_above(ax, [f"{where}n = {n}"])  # under the title, as counts
            if shared_key:
                ax.get_legend().remove()
            _panel_heading(ax, title, _letter(k) if several else None, width)
        if shared_key:
            counts = pd.concat(longs).groupby("group")["subject"].nunique()
            shared_legend(fig, [], group_key(order, counts.to_dict(), line=True))
    caption = _paired_caption(study, parameter, panels, strengths, shared_key, means)
    title = f"Per-subject {_label(parameter)}, {study.reference} to " + (
        f"{len(methods)} test methods" if len(methods) > 1 else _method_title(study, methods[0])
    )
    return _Drawn(
        key, title, caption, "groups", parameter, None if len(methods) > 1 else methods[0], fig
    )


def _paired_caption(
    study: Study,
    parameter: str,
    panels: Sequence[_PairedPanel],
    strengths: Sequence[float | None],
    shared_key: bool,
    means: pd.DataFrame,
) -> str:
    several = len(panels) > 1
    names = [
        _method_title(study, p.method) + ("" if p.b0 is None else f" at {_tesla(p.b0)}")
        for p in panels
    ]
    where = (
        "n subjects per group over all panels in the key, per panel above it"
        if shared_key
        else "n subjects in each panel's key"
    )
    n_methods = len({p.method for p in panels})
    split = strengths != [None]
    per = {
        (True, True): "one panel per test method and field strength, field strengths in rows",
        (True, False): "one panel per test method",
        (False, True): "one panel per field strength",
    }.get((n_methods > 1, split))
    layout = f"{per} ({_panels_text(names)}), one y axis for all; " if per else ""
    counts = "; ".join(
        f"{_panel_lead(k, names[k], several)}{p.rows['subject'].nunique()} subjects, "
        f"{int(p.rows['n_pairs'].sum())} (subject, segment) pairs"
        for k, p in enumerate(panels)
    )
    test = "the test method" if n_methods > 1 else _method_title(study, panels[0].method)
    return (
        f"Per-subject mean of {_label(parameter)} ({_unit(parameter)}) by {study.reference} "
        f"(left) and {test} (right): {layout}one line per subject coloured by group ({where}); "
        f"means over the segments where both methods have a value ({counts}). Simple "
        "arithmetic means formed here for display only."
        + _strength_note(study, parameter, means, strengths != [None])
    )
