"""Small multiples of bullseye maps: one :func:`~cohort.plots.bullseye.draw_bullseye` panel
per (row, column) level of a tidy, already aggregated table, with one shared colour scale.

The table holds numbers computed elsewhere (medians, differences, prevalences); nothing is
computed here.
"""

from __future__ import annotations

import math
from collections.abc import Hashable, Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.cm import ScalarMappable
from matplotlib.colorbar import Colorbar
from matplotlib.colors import Colormap, Normalize
from matplotlib.figure import Figure

from cohort.plots.bullseye import (
    ANNOTATION_SIZE,
    Bullseye,
    _colorbar,
    _default_label,
    _key_handles,
    draw_bullseye,
)
from cohort.plots.style import (
    MM_PER_INCH,
    ColourScale,
    colour_scale,
    figure_size,
    fit_label,
    style_context,
)

COLORBAR_ROOM_MM = 16.0
"""Width kept beside the panels for the shared colour bar (mm)."""
COLORBAR_LENGTH_MM = 55.0
PANEL_TITLE_IN = 0.2
MAX_HEIGHT_MM = 240.0  # a full journal page less the caption (common practice)


@dataclass(frozen=True)
class BullseyeGrid:
    """What :func:`bullseye_grid` drew: the figure, the panels by (row, column) level, the
    shared mappable and colour bar (None when limits are per panel)."""

    fig: Figure
    axes: tuple[tuple[Axes, ...], ...]
    panels: Mapping[tuple[Hashable, Hashable], Bullseye]
    mappable: ScalarMappable | None
    colorbar: Colorbar | None


def _levels(table: pd.DataFrame, column: str | None, order: Sequence[object] | None, name: str):
    if column is None:
        if order is not None:
            raise ValueError(f"{name}_order needs {name} to name a column, got {name}=None")
        return [None]
    present = list(pd.unique(table[column]))
    if order is None:
        return present
    order = list(order)
    unknown = [level for level in order if level not in present]
    if unknown:
        raise ValueError(f"{name}_order names levels not in column {column!r}: {unknown!r}")
    return order


# Long: signature and numpydoc parameters of 24 options are ~75 lines; drawing is in helpers
def bullseye_grid(
    table: pd.DataFrame,
    *,
    row: str | None = "group",
    col: str | None = "method",
    value: str = "value",
    segment: str = "segment",
    kind: str = "value",
    model: str = "aha17",
    parameter: str | None = None,
    cmap: str | Colormap | None = None,
    norm: Normalize | None = None,
    vmin: float | None = None,
    vmax: float | None = None,
    shared: bool = True,
    labels: str | None = "number",
    outline: str | None = None,
    outline_label: str | None = None,
    annotation: str | None = None,
    row_order: Sequence[object] | None = None,
    col_order: Sequence[object] | None = None,
    col_wrap: int | None = None,
    width: str | float = "double",
    colorbar_label: str | None = None,
    title: str | None = None,
    **kwargs: object,
) -> BullseyeGrid:
    """Small multiples of bullseyes from a tidy, already aggregated table.

    One panel per (``row``, ``col``) level pair, e.g. group x method medians, difference
    maps per group, prevalence per finding x method, or one bullseye per subject
    (``row=None, col="subject", col_wrap=6``).

    Parameters
    ----------
    table
        One row per facet level(s) and segment, with columns ``segment`` and ``value``.
    row, col
        Facet columns (either may be None). Levels in order of appearance unless
        ``row_order``/``col_order`` are given.
    kind, model, parameter, cmap, norm, vmin, vmax, labels
        As in :func:`draw_bullseye`.
    shared
        One colour scale for all panels (default) with one colour bar; if False each
        panel gets its own limits and colour bar.
    outline, annotation
        Optional columns: booleans marking outlined segments, and per-segment text.
    outline_label
        Meaning of the outline, shown once in the figure's key with the "no data" swatch.
    col_wrap
        With ``row=None``, wrap the column facets into rows of this many panels.
    width
        Figure width preset of :func:`cohort.plots.style.figure_size` (or mm).
    **kwargs
        Passed on to :func:`draw_bullseye` (and so to ``Axes.bar``).

    Returns
    -------
    BullseyeGrid

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> table = pd.DataFrame(
    ...     {"method": ["a", "a", "b", "b"], "segment": [1, 2, 1, 2], "value": [1.0, 2.0, 3.0, 4.0]}
    ... )
    >>> grid = bullseye_grid(table, row=None, col="method", parameter="ff")
    >>> len(grid.panels), grid.mappable.norm.vmin, grid.mappable.norm.vmax
    (2, 1.0, 4.0)
    >>> plt.close(grid.fig)
    """
    values_all = _check_grid_table(table, row, col, value, segment, outline, annotation, col_wrap)
    row_levels = _levels(table, row, row_order, "row")
    col_levels = _levels(table, col, col_order, "col")
    cells = [(r, c) for r in row_levels for c in col_levels]
    nrows, ncols, positions = _grid_positions(cells, row_levels, col_levels, col_wrap)

    with style_context():
        fig, axes, fig_h = _grid_figure(width, title, shared, nrows, ncols)
        scale = None
        if shared:
            scale = colour_scale(
                kind, values_all.to_numpy(), cmap=cmap, norm=norm, vmin=vmin, vmax=vmax
            )
            own = {"cmap": scale.cmap, "norm": scale.norm, "colorbar": False}
        else:
            own = {"cmap": cmap, "norm": norm, "vmin": vmin, "vmax": vmax, "colorbar": True}
            own["colorbar_label"] = colorbar_label
        options = {"model": model, "kind": kind, "parameter": parameter, "labels": labels}
        panels: dict[tuple[Hashable, Hashable], Bullseye] = {}
        for cell in cells:
            i, j = positions[cell]
            ax = axes[i, j]
            mask = pd.Series(True, index=table.index)
            if row is not None:
                mask &= table[row] == cell[0]
            if col is not None:
                mask &= table[col] == cell[1]
            seg_values, outlined, notes = _panel_inputs(
                table.loc[mask], values_all[mask], segment, outline, annotation
            )
            panels[cell] = draw_bullseye(
                seg_values, ax=ax, outline=outlined, annotations=notes, key=False,
                **options, **own, **kwargs,
            )  # fmt: skip
            if col is not None and (i == 0 or col_wrap is not None):
                ax.set_title(fit_label(cell[1]), pad=2.0)  # the caption names it in full
            if row is not None and j == 0:
                ax.set_ylabel(fit_label(cell[0]), labelpad=4.0, fontsize=8.0)
        used = set(positions.values())
        _hide_unused(axes, used)
        _grid_key(fig, panels, outline_label, kwargs.get("missing", "hatch") == "hatch")
        mappable = cbar = None
        if scale is not None:
            label = (
                colorbar_label if colorbar_label is not None else _default_label(kind, parameter)
            )
            visible = [axes[i, j] for (i, j) in sorted(used)]
            mappable, cbar = _shared_colorbar(fig, visible, scale, values_all, label, fig_h)
        if title is not None:
            fig.suptitle(title)
    return BullseyeGrid(
        fig=fig,
        axes=tuple(tuple(axes[i, j] for j in range(ncols)) for i in range(nrows)),
        panels=MappingProxyType(panels),
        mappable=mappable,
        colorbar=cbar,
    )


def _hide_unused(axes: np.ndarray, used: set[tuple[int, int]]) -> None:
    nrows, ncols = axes.shape
    for i in range(nrows):
        for j in range(ncols):
            if (i, j) not in used:
                axes[i, j].set_visible(False)


def _shared_colorbar(
    fig: Figure,
    visible: list[Axes],
    scale: ColourScale,
    values: pd.Series,
    label: str,
    fig_h: float,
) -> tuple[ScalarMappable, Colorbar]:
    """One colour bar beside all panels, at most :data:`COLORBAR_LENGTH_MM` long."""
    mappable = ScalarMappable(norm=scale.norm, cmap=scale.cmap)
    mappable.set_array(values.dropna().to_numpy())
    shrink = min(0.8, COLORBAR_LENGTH_MM / MM_PER_INCH / fig_h)
    return mappable, _colorbar(fig, mappable, visible, scale, label, shrink=shrink)


def _check_grid_table(
    table: object,
    row: str | None,
    col: str | None,
    value: str,
    segment: str,
    outline: str | None,
    annotation: str | None,
    col_wrap: int | None,
) -> pd.Series:
    """Check the grid's table and options; return its values as numbers (NaN: missing)."""
    if not isinstance(table, pd.DataFrame):
        raise ValueError(f"table must be a pandas DataFrame, got {type(table).__name__}")
    needed = [c for c in (row, col, value, segment, outline, annotation) if c is not None]
    absent = [c for c in needed if c not in table.columns]
    if absent:
        raise ValueError(f"table has no column(s) {absent!r}; columns are {list(table.columns)}")
    if col_wrap is not None:
        if row is not None:
            raise ValueError(f"col_wrap needs row=None, got row={row!r}")
        if not isinstance(col_wrap, int) or col_wrap < 1:
            raise ValueError(f"col_wrap must be a positive integer, got {col_wrap!r}")
    keys = [c for c in (row, col) if c is not None] + [segment]
    duplicated = table.duplicated(keys)
    if duplicated.any():
        raise ValueError(
            f"table must hold one row per {tuple(keys)} (aggregate first), got "
            f"{int(duplicated.sum())} duplicated row(s)"
        )
    values_all = pd.to_numeric(table[value], errors="coerce")
    if values_all.isna().sum() > table[value].isna().sum():
        raise ValueError(f"column {value!r} must hold numbers")
    return values_all


def _grid_positions(
    cells: list[tuple[Hashable, Hashable]],
    row_levels: list,
    col_levels: list,
    col_wrap: int | None,
) -> tuple[int, int, dict[tuple[Hashable, Hashable], tuple[int, int]]]:
    """Rows and columns of the grid and the (row, column) position of each cell."""
    if col_wrap is not None:
        ncols = min(col_wrap, len(col_levels))
        nrows = math.ceil(len(col_levels) / ncols)
        return nrows, ncols, {cell: divmod(k, ncols) for k, cell in enumerate(cells)}
    positions = {(r, c): (i, j) for i, r in enumerate(row_levels) for j, c in enumerate(col_levels)}
    return len(row_levels), len(col_levels), positions


def _grid_figure(
    width: str | float, title: str | None, shared: bool, nrows: int, ncols: int
) -> tuple[Figure, np.ndarray, float]:
    """The figure and its polar axes; the height follows the panel width (inches)."""
    fig_w, _ = figure_size(width)
    title_in = 0.2 if title else 0.0
    if shared:
        panel_in = (fig_w - COLORBAR_ROOM_MM / MM_PER_INCH) / ncols
        fig_h = nrows * (panel_in + PANEL_TITLE_IN) + title_in
    else:  # each panel carries its own colour bar beside a smaller disc
        panel_in = fig_w / ncols
        fig_h = nrows * (0.78 * panel_in + PANEL_TITLE_IN) + title_in
    fig_h = min(fig_h, MAX_HEIGHT_MM / MM_PER_INCH)
    fig, axes = plt.subplots(
        nrows,
        ncols,
        figsize=(fig_w, fig_h),
        subplot_kw={"projection": "polar"},
        squeeze=False,
        layout="constrained",
    )
    fig.get_layout_engine().set(wspace=0.04, hspace=0.04)  # keep neighbouring discs apart
    return fig, axes, fig_h


def _panel_inputs(
    sub: pd.DataFrame,
    values: pd.Series,
    segment: str,
    outline: str | None,
    annotation: str | None,
) -> tuple[dict, list, dict | None]:
    """The values, outlined segments and annotations of one panel's rows."""
    seg_values = dict(zip(sub[segment].tolist(), values.tolist(), strict=True))
    outlined = sub.loc[sub[outline].astype(bool), segment].tolist() if outline is not None else ()
    if annotation is None:
        return seg_values, outlined, None
    notes = {
        s: t
        for s, t in zip(sub[segment].tolist(), sub[annotation].tolist(), strict=True)
        if isinstance(t, str) and t
    }
    return seg_values, outlined, notes


def _grid_key(
    fig: Figure, panels: Mapping[object, Bullseye], outline_label: str | None, hatch: bool
) -> None:
    """One key for the figure, below the panels, instead of one per panel."""
    any_missing = any(p.missing for p in panels.values())
    any_outline = any(p.outlines for p in panels.values())
    handles = _key_handles(any_missing and hatch, outline_label if any_outline else None)
    if handles:
        fig.legend(
            handles=handles,
            loc="outside lower left",
            ncols=len(handles),
            frameon=False,
            handlelength=1.2,
            handleheight=1.0,
            fontsize=ANNOTATION_SIZE + 0.5,
        )
