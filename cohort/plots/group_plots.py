"""Group figures: distributions per group (and method), and paired lines per subject.

These take tidy per-subject summaries computed elsewhere (one row per subject and method)
and only draw them; box and violin shapes are matplotlib's own (box: quartiles with
whiskers to the furthest point within 1.5 IQR, Tukey's convention; violin: Gaussian KDE
with Scott's bandwidth), with every individual value drawn on top.
"""

from __future__ import annotations

import contextlib
import math
import warnings
from collections.abc import Sequence
from typing import Any

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.collections import LineCollection
from matplotlib.colors import to_rgb
from matplotlib.legend_handler import HandlerTuple
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from cohort.domain.units import PARAMETERS
from cohort.plots.style import LINE_COLOUR, figure_size, fit_label, group_styles, style_context
from cohort.stats.results import CohortWarning

DISTRIBUTION_KINDS = ("box", "violin")

PAIRED_LINES_MAX = 500
"""Up to this many subjects :func:`paired_lines_plot` draws one line artist per subject;
above, one rasterised line collection per group (thousands of artists take seconds each to
draw and make SVG files of many megabytes)."""


def _check_table(summary: Any, columns: Sequence[str | None]) -> None:
    if not isinstance(summary, pd.DataFrame):
        raise ValueError(f"summary must be a pandas DataFrame, got {type(summary).__name__}")
    absent = [c for c in columns if c is not None and c not in summary.columns]
    if absent:
        raise ValueError(
            f"summary has no column(s) {absent!r}; columns are {list(summary.columns)}"
        )


def _finite_values(summary: pd.DataFrame, value: str) -> np.ndarray:
    numbers = pd.to_numeric(summary[value], errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(numbers)
    if bad.any():
        raise ValueError(
            f"column {value!r} must hold finite numbers, got {int(bad.sum())} missing or "
            "non-numeric value(s); drop them explicitly before plotting"
        )
    return numbers


def _value_label(summary: pd.DataFrame, value: str, parameter: str | None) -> str:
    if parameter is None and "parameter" in summary.columns:
        codes = list(pd.unique(summary["parameter"]))
        if len(codes) > 1:
            raise ValueError(
                f"summary must hold one parameter per figure (one unit per axis), got {codes!r}"
            )
        parameter = codes[0] if codes else None
    if parameter is None:
        return value
    if parameter not in PARAMETERS:
        raise ValueError(f"parameter must be one of {sorted(PARAMETERS)}, got {parameter!r}")
    return PARAMETERS[parameter].axis_label


def _order(summary: pd.DataFrame, column: str, order: Sequence[object] | None, name: str):
    present = list(pd.unique(summary[column]))
    if order is None:
        return present
    order = list(order)
    absent = [level for level in present if level not in order]
    if absent:
        raise ValueError(f"{name} must list every level of {column!r}, missing {absent!r}")
    return [level for level in order if level in present]


def group_distribution_plot(
    summary: pd.DataFrame,
    *,
    value: str = "value",
    group: str = "group",
    method: str | None = "method",
    order: Sequence[object] | None = None,
    method_order: Sequence[object] | None = None,
    kind: str = "box",
    parameter: str | None = None,
    subject: str | None = "subject",
    jitter: float = 0.3,
    seed: int = 0,
    ax: Axes | None = None,
    **kwargs: object,
) -> Axes:
    """Box or violin per group (dodged by method), with every value as a jittered point.

    Parameters
    ----------
    summary
        Tidy table, one row per subject (and method), values already summarised.
    value, group, method
        Column names; ``method=None`` for a single box per group.
    order, method_order
        Order of groups and methods (default: order of appearance).
    kind
        ``"box"`` or ``"violin"``. A violin needs two distinct values; groups with fewer
        get points only, with a :class:`cohort.stats.results.CohortWarning`.
    parameter
        Parameter code for the axis label; taken from a single-valued ``parameter`` column
        if None.
    subject
        Column counted for ``n`` under each group (omitted if absent).
    jitter, seed
        Horizontal spread of the points as a fraction of the box width, and the seed of the
        jitter (``numpy.random.default_rng(seed)``), so figures are reproducible.
    ax
        Axes to draw on; a new single-column figure in the house style if None.
    **kwargs
        Passed to ``Axes.scatter`` for the points.

    Returns
    -------
    matplotlib.axes.Axes

    Examples
    --------
    >>> import matplotlib; matplotlib.use("Agg")
    >>> summary = pd.DataFrame({"subject": ["a", "b", "c", "d"], "group": ["x", "x", "y", "y"],
    ...                         "value": [1.0, 2.0, 3.0, 5.0]})
    >>> ax = group_distribution_plot(summary, method=None, parameter="ff")
    >>> [t.get_text().splitlines() for t in ax.get_xticklabels()]
    [['x', '(n = 2)'], ['y', '(n = 2)']]
    >>> plt.close(ax.figure)
    """
    _check_options(kind, jitter)
    _check_table(summary, [value, group, method])
    numbers = _finite_values(summary, value)
    label = _value_label(summary, value, parameter)
    groups = summary[group].to_numpy(dtype=object)
    group_levels = _order(summary, group, order, "order")
    methods, method_levels = _method_levels(summary, method, method_order)
    styles = group_styles(method_levels)
    counted = subject if subject is not None and subject in summary.columns else None
    rng = np.random.default_rng(seed)

    context = style_context() if ax is None else contextlib.nullcontext()
    with context:
        if ax is None:
            _, ax = plt.subplots(figsize=figure_size("single", aspect=0.75))
        cells = (numbers, groups, methods, group_levels, method_levels)
        _draw_cells(ax, kind, cells, styles, rng, jitter, kwargs)
        _group_axis(ax, _tick_labels(summary, groups, group_levels, counted), label)
        if method is not None and len(method_levels) > 1:
            _method_legend(ax, method_levels, styles)
    return ax


def _draw_cells(
    ax: Axes,
    kind: str,
    cells: tuple[np.ndarray, np.ndarray, np.ndarray, list[object], list[object]],
    styles: dict,
    rng: np.random.Generator,
    jitter: float,
    kwargs: dict[str, object],
) -> None:
    """A box or violin and the jittered points of each group (dodged by method)."""
    numbers, groups, methods, group_levels, method_levels = cells
    slot = 0.8 / len(method_levels)
    width = 0.75 * slot
    for i, g in enumerate(group_levels):
        in_group = groups == g
        for k, m in enumerate(method_levels):
            data = numbers[in_group & (methods == m) if m is not None else in_group]
            if data.size == 0:
                continue
            position = i + (k - (len(method_levels) - 1) / 2.0) * slot
            tag = f"{g}" if m is None else f"{g}-{m}"
            _draw_distribution(ax, kind, data, position, width, styles[m][0], tag)
            offsets = rng.uniform(-0.5, 0.5, data.size) * width * jitter
            _draw_points(ax, position + offsets, data, styles[m], tag, kwargs)


def _check_options(kind: str, jitter: float) -> None:
    if kind not in DISTRIBUTION_KINDS:
        raise ValueError(f"kind must be one of {list(DISTRIBUTION_KINDS)}, got {kind!r}")
    if not (math.isfinite(jitter) and 0 <= jitter <= 1):
        raise ValueError(f"jitter must be a fraction of the box width in [0, 1], got {jitter!r}")


def _tick_labels(
    summary: pd.DataFrame, groups: np.ndarray, levels: Sequence[object], counted: str | None
) -> list[str]:
    """Group names, with the number of distinct ``counted`` (subjects) under each."""
    labels = []
    for g in levels:
        text = fit_label(g)
        if counted is not None:
            text += f"\n(n = {summary.loc[groups == g, counted].nunique()})"
        labels.append(text)
    return labels


def _group_axis(ax: Axes, tick_labels: list[str], label: str) -> None:
    ax.set_xticks(range(len(tick_labels)), tick_labels)
    ax.set_xlim(-0.6, len(tick_labels) - 0.4)
    ax.set_ylabel(label)
    ax.tick_params(axis="x", length=0)


def _method_levels(
    summary: pd.DataFrame, method: str | None, method_order: Sequence[object] | None
) -> tuple[np.ndarray, list[object]]:
    """The method of each row and the methods in drawing order (``[None]``: no methods)."""
    if method is not None:
        methods = summary[method].to_numpy(dtype=object)
        return methods, _order(summary, method, method_order, "method_order")
    if method_order is not None:
        raise ValueError("method_order needs method to name a column, got method=None")
    return np.full(len(summary), None, dtype=object), [None]


def _draw_distribution(
    ax: Axes, kind: str, data: np.ndarray, position: float, width: float, colour: str, tag: str
) -> None:
    """A box (Tukey) or a violin (Gaussian KDE) of one group and method."""
    if kind == "box":
        bp = ax.boxplot(
            [data],
            positions=[position],
            widths=width,
            patch_artist=True,
            showfliers=False,  # every point is drawn anyway
            manage_ticks=False,
            zorder=1,
            medianprops={"color": LINE_COLOUR, "linewidth": 1.0},
            whiskerprops={"color": colour, "linewidth": 0.8},
            capprops={"color": colour, "linewidth": 0.8},
            boxprops={"edgecolor": colour, "linewidth": 0.8},
        )
        box = bp["boxes"][0]
        box.set_facecolor((*to_rgb(colour), 0.25))
        box.set_gid(f"box-{tag}")
    elif np.unique(data).size >= 2:
        vp = ax.violinplot(
            [data], positions=[position], widths=width, showmedians=True, showextrema=False
        )
        body = vp["bodies"][0]
        body.set_facecolor(colour)
        body.set_edgecolor(colour)
        body.set_alpha(0.3)
        body.set_gid(f"violin-{tag}")
        vp["cmedians"].set_color(LINE_COLOUR)
        vp["cmedians"].set_linewidth(1.0)
    else:
        warnings.warn(
            f"violin not drawn for {tag}: fewer than 2 distinct values "
            f"({data.size} point(s) drawn)",
            CohortWarning,
            stacklevel=4,
        )


def _draw_points(
    ax: Axes,
    x: np.ndarray,
    data: np.ndarray,
    style: tuple[str, str],
    tag: str,
    kwargs: dict[str, object],
) -> None:
    point_kwargs: dict[str, object] = {
        "s": 10.0,
        "alpha": 0.85,
        "linewidths": 0.3,
        "edgecolors": "white",
        "zorder": 3,
    }
    point_kwargs.update(kwargs)
    colour, marker = style
    ax.scatter(x, data, color=colour, marker=marker, gid=f"points-{tag}", **point_kwargs)


def _method_legend(ax: Axes, method_levels: Sequence[object], styles: dict) -> None:
    """Box swatch and marker together, so methods stay apart in greyscale too."""
    handles = [
        (
            Patch(facecolor=(*to_rgb(styles[m][0]), 0.25), edgecolor=styles[m][0]),
            Line2D([], [], linestyle="none", marker=styles[m][1], color=styles[m][0]),
        )
        for m in method_levels
    ]
    labels = [fit_label(m) for m in method_levels]
    wide = max(len(line) for text in labels for line in text.split("\n")) > 12
    ax.legend(
        handles=handles,
        labels=labels,
        handler_map={tuple: HandlerTuple(ndivide=None, pad=0.0)},
        loc="lower left",
        bbox_to_anchor=(0.0, 1.02),
        ncols=min(2 if wide else 4, len(handles)),
        borderaxespad=0.0,
        frameon=False,
    )


def paired_lines_plot(
    summary: pd.DataFrame,
    *,
    reference: object,
    test: object,
    subject: str = "subject",
    method: str = "method",
    value: str = "value",
    group: str | None = "group",
    group_order: Sequence[object] | None = None,
    parameter: str | None = None,
    ax: Axes | None = None,
    **kwargs: object,
) -> Axes:
    """One line per subject from its reference value to its test value.

    Parameters
    ----------
    summary
        Tidy table with one row per subject and method (``method`` holds both the reference
        and the test method's name).
    reference, test
        The two method names to connect (left and right).
    subject, method, value, group
        Column names; ``group=None`` draws all subjects in one colour. Groups get
        Okabe-Ito colours and distinct markers.
    group_order, parameter
        Order of the groups in the legend; parameter code for the axis label.
    ax
        Axes to draw on; a new single-column figure in the house style if None.
    **kwargs
        Passed to ``Axes.plot`` for every subject's line.

    Returns
    -------
    matplotlib.axes.Axes
        Each line has ``gid`` ``"subject-<id>"``; above :data:`PAIRED_LINES_MAX` subjects the
        lines of a group are one rasterised ``LineCollection`` with ``gid``
        ``"subjects-<group>"`` (segments in subject order) and its end points one scatter
        with ``gid`` ``"ends-<group>"``.

    Examples
    --------
    >>> import matplotlib; matplotlib.use("Agg")
    >>> summary = pd.DataFrame({"subject": ["a", "a", "b", "b"], "method": ["ref", "new"] * 2,
    ...                         "value": [1.0, 1.5, 2.0, 1.8], "group": ["x", "x", "y", "y"]})
    >>> ax = paired_lines_plot(summary, reference="ref", test="new")
    >>> [[float(v) for v in line.get_ydata()] for line in ax.get_lines()]
    [[1.0, 1.5], [2.0, 1.8]]
    >>> plt.close(ax.figure)
    """
    _check_table(summary, [subject, method, value, group])
    rows, wide, label = _paired_wide(summary, reference, test, subject, method, value, parameter)
    subjects_in_order = list(pd.unique(rows[subject]))
    subject_group, levels = _subject_groups(rows, subject, group, group_order, subjects_in_order)
    styles = group_styles(levels)
    n = len(subjects_in_order)
    alpha = 0.8 if n <= 50 else max(0.05, 0.8 * math.sqrt(50 / n))

    context = style_context() if ax is None else contextlib.nullcontext()
    with context:
        if ax is None:
            _, ax = plt.subplots(figsize=figure_size("single", aspect=0.9))
        line_kwargs: dict[str, Any] = {"linewidth": 0.8, "markersize": 3.5, "alpha": alpha}
        line_kwargs.update(kwargs)
        if n <= PAIRED_LINES_MAX:
            _subject_lines(ax, wide, (reference, test), subject_group, styles, line_kwargs)
        else:
            _line_collections(ax, wide, reference, test, subject_group, levels, styles, line_kwargs)
        ax.set_xticks([0.0, 1.0], [fit_label(reference, 18, 3), fit_label(test, 18, 3)])
        ax.set_xlim(-0.25, 1.25)
        ax.set_ylabel(label)
        if group is not None:
            _group_key(ax, levels, styles, subject_group.value_counts())
    return ax


def _paired_wide(
    summary: pd.DataFrame,
    reference: object,
    test: object,
    subject: str,
    method: str,
    value: str,
    parameter: str | None,
) -> tuple[pd.DataFrame, pd.DataFrame, str]:
    """The rows of the two methods, checked, their values as subject x method, and the
    axis label."""
    if reference == test:
        raise ValueError(f"reference and test must be different methods, got {reference!r} twice")
    present = set(pd.unique(summary[method]))
    absent = [m for m in (reference, test) if m not in present]
    if absent:
        raise ValueError(f"column {method!r} has no rows for method(s) {absent!r}")
    label = _value_label(summary, value, parameter)
    rows = summary.loc[summary[method].isin([reference, test])]
    numbers = _finite_values(rows, value)
    duplicated = rows.duplicated([subject, method])
    if duplicated.any():
        first = rows.loc[duplicated, [subject, method]].iloc[0].tolist()
        raise ValueError(
            f"summary must hold one row per (subject, method), got {int(duplicated.sum())} "
            f"duplicate(s), e.g. {first!r}"
        )
    table = pd.DataFrame(
        {"subject": rows[subject].to_numpy(), "method": rows[method].to_numpy(), "v": numbers}
    )
    wide = table.pivot(index="subject", columns="method", values="v")
    incomplete = wide.index[wide[[reference, test]].isna().any(axis=1)].tolist()
    if incomplete:
        raise ValueError(
            f"every subject needs both {reference!r} and {test!r}; "
            f"{len(incomplete)} subject(s) lack one, e.g. {incomplete[:3]!r}"
        )
    return rows, wide, label


def _subject_groups(
    rows: pd.DataFrame,
    subject: str,
    group: str | None,
    group_order: Sequence[object] | None,
    subjects_in_order: list,
) -> tuple[pd.Series, list[object]]:
    """The group of each subject and the groups in legend order (``[None]``: no groups)."""
    if group is None:
        if group_order is not None:
            raise ValueError("group_order needs group to name a column, got group=None")
        return pd.Series(None, index=subjects_in_order, dtype=object), [None]
    per_subject = rows.groupby(subject, sort=False)[group].nunique()
    mixed = per_subject.index[per_subject > 1].tolist()
    if mixed:
        raise ValueError(f"each subject must be in one group, got several for {mixed[:3]!r}")
    subject_group = rows.groupby(subject, sort=False)[group].first()
    return subject_group, _order(rows, group, group_order, "group_order")


def _group_key(ax: Axes, levels: Sequence[object], styles: dict, counts: pd.Series) -> None:
    handles = [
        Line2D(
            [],
            [],
            color=styles[g][0],
            marker=styles[g][1],
            linewidth=0.8,
            markersize=3.5,
            label=f"{fit_label(g)} (n = {int(counts.get(g, 0))})",
        )
        for g in levels
    ]
    # Beside the axes: the lines fill the whole height, so no corner is free.
    ax.legend(
        handles=handles,
        loc="center left",
        bbox_to_anchor=(1.02, 0.5),
        ncols=1,
        borderaxespad=0.0,
        frameon=False,
    )


def _subject_lines(
    ax: Axes,
    wide: pd.DataFrame,
    methods: tuple[object, object],
    subject_group: pd.Series,
    styles: dict,
    line_kwargs: dict[str, Any],
) -> None:
    """One line artist per subject, in the order of ``subject_group``."""
    reference, test = methods
    for s in subject_group.index:
        colour, marker = styles[subject_group[s]]
        ax.plot(
            [0.0, 1.0],
            [wide.at[s, reference], wide.at[s, test]],
            color=colour,
            marker=marker,
            gid=f"subject-{s}",
            **line_kwargs,
        )


def _line_collections(
    ax: Axes,
    wide: pd.DataFrame,
    reference: object,
    test: object,
    subject_group: pd.Series,
    levels: Sequence[object],
    styles: dict,
    line_kwargs: dict[str, Any],
) -> None:
    """One line collection and one scatter of end points per group (many subjects)."""
    options = dict(line_kwargs)  # always holds linewidth, markersize and alpha
    width, size, alpha = (options.pop(k) for k in ("linewidth", "markersize", "alpha"))
    for level in levels:
        members = subject_group.index[
            subject_group.isna() if level is None else subject_group == level
        ]
        if not len(members):
            continue
        ref = wide.loc[members, reference].to_numpy(dtype=float)
        tst = wide.loc[members, test].to_numpy(dtype=float)
        colour, marker = styles[level]
        segments = np.stack([np.zeros_like(ref), ref, np.ones_like(ref), tst], axis=1)
        lines = LineCollection(
            segments.reshape(-1, 2, 2), colors=[colour], linewidths=width, alpha=alpha, **options
        )
        lines.set_gid(f"subjects-{level}")
        lines.set_rasterized(True)
        ax.add_collection(lines, autolim=True)
        ends = ax.scatter(
            np.repeat([0.0, 1.0], ref.size),
            np.concatenate([ref, tst]),
            s=float(size) ** 2,
            color=colour,
            marker=marker,
            alpha=alpha,
            linewidths=0,
            rasterized=True,
        )
        ends.set_gid(f"ends-{level}")
    ax.autoscale_view()
