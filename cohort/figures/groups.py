"""Group figures: per-subject means by group and method (boxes and points), and paired lines
from reference to test per subject, from :mod:`cohort.analysis.display`.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from typing import Any

import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from cohort.analysis import display
from cohort.figures.captions import _axis, _label, _names_note, _strength_note, _tesla, _unit
from cohort.figures.records import SkippedFigure, _Drawn, _Item, _slug
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
from cohort.plots.style import figure_size, group_styles, style_context


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
    table = _display_table(
        tables, PAIRED_SUBJECT_MEANS, lambda: display.paired_subject_means(study)
    )
    for parameter, why in _group_parameters(study):
        for method in study.test_methods:
            key = f"paired_{parameter}_subject_mean_{_slug(method)}"
            if why is not None:
                yield SkippedFigure(key, why)
                continue
            means = display.select(table, parameter=parameter, method=method)
            if means.empty:
                yield SkippedFigure(key, f"study.paired has no {parameter} pairs for {method!r}")
                continue
            yield _paired_figure(study, means, parameter, method, key)


def _paired_figure(
    study: Study, means: pd.DataFrame, parameter: str, method: str, key: str
) -> _Drawn:
    """Lines from reference to test of each subject's means, one panel per field strength."""
    means = means.rename(columns={"reference_mean": "reference_value", "test_mean": "test_value"})
    long = pd.concat(
        [
            means.assign(method=study.reference, value=means["reference_value"]),
            means.assign(method=method, value=means["test_value"]),
        ],
        ignore_index=True,
    )
    long["group"] = long["group"].astype(str).map(lambda g: _group_label(study, g))
    strengths = _strengths(study, parameter, means)
    order = [_group_label(study, g) for g in _groups_present(study, means)]
    panels = [long if b0 is None else long[long["field_strength"] == b0] for b0 in strengths]
    # Colours follow the order of the groups present in a panel: one legend for the
    # figure only when every panel holds every group.
    shared_legend = len(panels) > 1 and all(set(p["group"].unique()) == set(order) for p in panels)
    with style_context():
        fig, axes = _panel_axes(len(strengths), aspect=0.9)
        for k, (ax, b0, sub) in enumerate(zip(axes, strengths, panels, strict=True)):
            paired_lines_plot(
                sub,
                reference=study.reference,
                test=method,
                group="group",
                group_order=[g for g in order if g in set(sub["group"].unique())],
                parameter=parameter,
                ax=ax,
            )
            _subject_mean_label(ax, parameter)
            if b0 is not None:
                ax.set_title(f"{_tesla(b0)} (n = {sub['subject'].nunique()})", fontsize=7.5)
            if shared_legend:
                ax.get_legend().remove()
            if k > 0:
                ax.set_ylabel("")
        if shared_legend:
            _group_legend(fig, order, long)
    where = (
        "n subjects per group over all field strengths in the legend, per field strength "
        "in the panel titles"
        if shared_legend
        else "n subjects in the legend"
    )
    caption = (
        f"Per-subject mean of {_label(parameter)} ({_unit(parameter)}) by "
        f"{study.reference} (left) and {method} (right), one line per subject "
        f"coloured by group ({where}); {means['subject'].nunique()} "
        f"subjects, means over the segments where both methods have a value "
        f"({int(means['n_pairs'].sum())} (subject, segment) pairs). Simple arithmetic means "
        "formed here for display only."
        + _strength_note(study, parameter, means, strengths != [None])
    )
    title = f"Per-subject {_label(parameter)}, {study.reference} to {method}"
    return _Drawn(key, title, caption, "groups", parameter, method, fig)


def _group_legend(fig: Figure, order: Sequence[str], subjects: pd.DataFrame) -> None:
    """One legend beside all panels: the group styles of the panels with total n."""
    styles = group_styles(order)
    counts = subjects.groupby("group")["subject"].nunique()
    handles = [
        Line2D(
            [],
            [],
            color=styles[g][0],
            marker=styles[g][1],
            linewidth=0.8,
            markersize=3.5,
            label=f"{g} (n = {int(counts.get(g, 0))})",
        )
        for g in order
    ]
    fig.legend(handles=handles, loc="outside right center", frameon=False)
