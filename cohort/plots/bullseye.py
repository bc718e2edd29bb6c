"""Bullseye (polar) maps of per-segment values in the AHA layout, and small multiples of them.

Layout of the AHA statement (Cerqueira MD et al. Standardized myocardial segmentation and
nomenclature for tomographic imaging of the heart. Circulation 2002;105:539-542): basal ring
outermost, then mid, apical, and the apex as the centre disc; anterior at the top, septum
on the viewer's left, lateral on the right. The angles and rings come from
:mod:`cohort.domain.segments`; this module only draws them, one polar bar per segment.

The functions take numbers already computed (medians, differences, prevalences); they
compute no statistics.
"""

from __future__ import annotations

import contextlib
import math
import numbers
from collections.abc import Hashable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.cm import ScalarMappable
from matplotlib.colorbar import Colorbar
from matplotlib.colors import BoundaryNorm, Colormap, Normalize
from matplotlib.figure import Figure
from matplotlib.patches import Patch
from matplotlib.text import Text

from cohort.domain.segments import RINGS, SEGMENTS, segment_model
from cohort.domain.units import PARAMETERS
from cohort.plots.style import (
    LABEL_WIDTH,
    MISSING_COLOUR,
    MISSING_HATCH_COLOUR,
    MM_PER_INCH,
    ColourScale,
    colour_scale,
    figure_size,
    fit_label,
    style_context,
    text_colour_for,
)

KINDS: tuple[str, ...] = ("value", "difference", "prevalence")
LABEL_MODES: tuple[str | None, ...] = ("number", "short", None)
MISSING_MODES: tuple[str, ...] = ("hatch", "blank")

SEPARATOR_COLOUR = "#FFFFFF"
SEPARATOR_WIDTH = 0.8
OUTLINE_COLOUR = "#000000"
OUTLINE_WIDTH = 2.0
MISSING_HATCH = "///"
LABEL_SIZE = 6.5
ANNOTATION_SIZE = 5.5
COLORBAR_ROOM_MM = 16.0
COLORBAR_LENGTH_MM = 55.0
PANEL_TITLE_IN = 0.2
MAX_HEIGHT_MM = 240.0  # a full journal page less the caption (common practice)


def ring_band(ring: str) -> tuple[float, float]:
    """Inner and outer radius of a ring: unit-wide bands, apex disc at the centre.

    The order comes from :data:`cohort.domain.segments.RINGS` (basal outermost).
    """
    if ring not in RINGS:
        raise ValueError(f"ring must be one of {list(RINGS)}, got {ring!r}")
    inner = float(len(RINGS) - 1 - RINGS.index(ring))
    return (inner, inner + 1.0)


OUTER_RADIUS = float(len(RINGS))


@dataclass(frozen=True)
class Bullseye:
    """What :func:`draw_bullseye` drew: the Axes, the mappable for a colour bar, the
    patches, labels and annotations by segment number, the artist carrying each outline
    (the patch itself; a circle for the apex), the colour bar and the missing segments."""

    ax: Axes
    mappable: ScalarMappable
    patches: Mapping[int, Patch]
    labels: Mapping[int, Text]
    annotations: Mapping[int, Text]
    outlines: Mapping[int, Artist]
    colorbar: Colorbar | None
    missing: tuple[int, ...]


def _default_label(kind: str, parameter: str | None) -> str:
    if kind == "prevalence":
        return "prevalence (% of subjects)"
    if parameter is None:
        return "value (unit not given)" if kind == "value" else "difference (unit not given)"
    if parameter not in PARAMETERS:
        raise ValueError(f"parameter must be one of {sorted(PARAMETERS)}, got {parameter!r}")
    axis_label = PARAMETERS[parameter].axis_label
    return axis_label if kind == "value" else f"difference in {axis_label}"


def _segment_number(key: object, what: str, allowed: Sequence[int], model: str) -> int:
    if isinstance(key, bool) or not isinstance(key, numbers.Integral):
        if isinstance(key, numbers.Real) and float(key).is_integer():
            key = int(key)
        else:
            raise ValueError(f"{what} keys must be segment numbers (integers), got {key!r}")
    number = int(key)
    if number not in allowed:
        raise ValueError(
            f"{what} names segment {number}, which is not in model {model!r} "
            f"(segments {allowed[0]}-{allowed[-1]})"
        )
    return number


def _as_float(value: object, segment: int) -> float:
    if value is None:
        return math.nan
    try:
        return float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ValueError(f"values must be numbers, got {value!r} for segment {segment}") from None


def _check_polar(ax: Axes) -> None:
    if getattr(ax, "name", None) != "polar":
        raise ValueError(
            "ax must be a polar Axes (projection='polar'), "
            f"got an Axes of projection {getattr(ax, 'name', type(ax).__name__)!r}"
        )


def _colorbar(
    fig: Figure,
    mappable: ScalarMappable,
    axes: Axes | Sequence[Axes],
    scale: ColourScale,
    label: str,
    shrink: float = 0.75,
) -> Colorbar:
    cbar = fig.colorbar(mappable, ax=axes, shrink=shrink, aspect=18, pad=0.04, extend=scale.extend)
    cbar.set_label(label)
    if isinstance(scale.norm, BoundaryNorm):
        edges = np.asarray(scale.norm.boundaries, dtype=float)
        step = max(1, math.ceil((len(edges) - 1) / 5))
        cbar.set_ticks(edges[::step])
    cbar.outline.set_linewidth(0.5)
    cbar.ax.tick_params(width=0.5, length=2)
    return cbar


def draw_bullseye(
    values: Mapping[int, float] | pd.Series,
    *,
    ax: Axes | None = None,
    model: str = "aha17",
    kind: str = "value",
    parameter: str | None = None,
    cmap: str | Colormap | None = None,
    norm: Normalize | None = None,
    vmin: float | None = None,
    vmax: float | None = None,
    labels: str | None = "number",
    missing: str = "hatch",
    outline: Iterable[int] = (),
    outline_label: str | None = None,
    annotations: Mapping[int, str] | None = None,
    key: bool = True,
    colorbar: bool = True,
    colorbar_label: str | None = None,
    title: str | None = None,
    **kwargs: object,
) -> Bullseye:
    """Draw per-segment values as an AHA bullseye on polar axes.

    Parameters
    ----------
    values
        Value per segment number (a mapping or a Series indexed by segment). Segments
        absent or non-finite are drawn as missing.
    ax
        A polar Axes; a new single-column figure in the house style if None.
    model
        ``"aha17"`` or ``"aha16"`` (no apex: the centre disc stays empty).
    kind
        ``"value"`` (sequential map), ``"difference"`` (diverging, symmetric about zero) or
        ``"prevalence"`` (percent, discrete 10 % bins); see :func:`cohort.plots.style.colour_scale`.
    parameter
        Parameter code for the default colour-bar label (quantity and unit).
    cmap, norm, vmin, vmax
        Override the colour scale; pass the same ``norm`` to several bullseyes to share it.
    labels
        ``"number"`` (1-17), ``"short"`` (e.g. ``"bAS"``) or None. Text is black or white,
        whichever contrasts more with the fill (WCAG 2.x).
    missing
        ``"hatch"`` (grey, hatched, with a "no data" key) or ``"blank"`` (white).
    outline, outline_label
        Segments drawn with a thick black outline, e.g. those positive for a finding, and
        what the outline means (shown in the key, e.g. ``"hemorrhage"``).
    annotations
        Extra text per segment (e.g. ``"n=12"``), drawn below the label.
    key
        Draw the key ("no data" swatch, outline meaning) under the bullseye when used.
    colorbar, colorbar_label, title
        Colour bar (with ``extend`` arrows when values fall outside the limits) and title.
    **kwargs
        Passed to ``Axes.bar`` for every segment patch.

    Returns
    -------
    Bullseye
        The Axes, a mappable for a shared colour bar, patches by segment (``gid``
        ``"segment-<n>"``), label and annotation texts, the colour bar, missing segments.
    """
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {list(KINDS)}, got {kind!r}")
    if labels not in LABEL_MODES:
        raise ValueError(f"labels must be one of {list(LABEL_MODES)}, got {labels!r}")
    if missing not in MISSING_MODES:
        raise ValueError(f"missing must be one of {list(MISSING_MODES)}, got {missing!r}")
    seg_model = segment_model(model)
    allowed = seg_model.numbers
    items = values.items() if hasattr(values, "items") else None
    if items is None:
        raise ValueError(
            f"values must be a mapping of segment number to value, got {type(values).__name__}"
        )
    given: dict[int, float] = {}
    for segment_key, value in items:
        number = _segment_number(segment_key, "values", allowed, model)
        if number in given:
            raise ValueError(f"values gives segment {number} more than once")
        given[number] = _as_float(value, number)
    outlined = {_segment_number(k, "outline", allowed, model) for k in outline}
    notes: dict[int, str] = {}
    if annotations is not None:
        for segment_key, text in annotations.items():
            notes[_segment_number(segment_key, "annotations", allowed, model)] = str(text)
    label = colorbar_label if colorbar_label is not None else _default_label(kind, parameter)

    own_figure = ax is None
    context = style_context() if own_figure else contextlib.nullcontext()
    with context:
        if ax is None:
            fig = plt.figure(figsize=figure_size("single", aspect=0.78))
            ax = fig.add_subplot(projection="polar")
        _check_polar(ax)
        scale = colour_scale(kind, given.values(), cmap=cmap, norm=norm, vmin=vmin, vmax=vmax)

        # Explicit conventions: theta measured counter-clockwise from 3 o'clock, which is the
        # convention of Segment.centre_deg (segment 1 at 90 deg = 12 o'clock, septum left).
        ax.set_theta_zero_location("E")
        ax.set_theta_direction(1)
        ax.set_ylim(0.0, OUTER_RADIUS)
        ax.set_xticks([])
        ax.set_yticks([])
        ax.grid(False)
        ax.spines["polar"].set_visible(False)
        ax.set_facecolor("none")

        patches: dict[int, Patch] = {}
        texts: dict[int, Text] = {}
        note_texts: dict[int, Text] = {}
        outline_artists: dict[int, Artist] = {}
        missing_segments = []
        for number in allowed:
            seg = SEGMENTS[number]
            inner, outer = ring_band(seg.ring)
            value = given.get(number, math.nan)
            is_missing = not math.isfinite(value)
            bar_kwargs: dict[str, object] = {
                "edgecolor": SEPARATOR_COLOUR,
                "linewidth": SEPARATOR_WIDTH,
                "zorder": 1,
            }
            if is_missing:
                missing_segments.append(number)
                if missing == "hatch":
                    face = MISSING_COLOUR
                    bar_kwargs.update(hatch=MISSING_HATCH, **_hatch_colour())
                else:
                    face = "#FFFFFF"
            else:
                face = scale.cmap(scale.norm(value))
            is_apex = seg.ring == "apex"
            if is_apex:
                # A full-circle bar would draw its seam as a radius; the apical ring's inner
                # edges already separate the disc, and an outline is drawn as a circle below.
                bar_kwargs.update(linewidth=0.0)
            elif number in outlined:
                bar_kwargs.update(edgecolor=OUTLINE_COLOUR, linewidth=OUTLINE_WIDTH, zorder=3)
            bar_kwargs.update(kwargs)
            container = ax.bar(
                math.radians(seg.centre_deg),
                outer - inner,
                width=math.radians(seg.width_deg),
                bottom=inner,
                align="center",
                color=face,
                gid=f"segment-{number}",
                **bar_kwargs,
            )
            patch = container.patches[0]
            patches[number] = patch
            outline_artists[number] = patch
            if is_apex and number in outlined:
                (circle,) = ax.plot(
                    np.linspace(0.0, 2.0 * math.pi, 361),
                    np.full(361, outer),
                    color=OUTLINE_COLOUR,
                    linewidth=OUTLINE_WIDTH,
                    solid_joinstyle="round",
                    zorder=3.5,
                    gid=f"outline-{number}",
                )
                outline_artists[number] = circle

            theta = math.radians(seg.centre_deg)
            radius = 0.0 if seg.ring == "apex" else (inner + outer) / 2.0
            colour = text_colour_for(patch.get_facecolor())
            has_note = number in notes
            if labels is not None:
                text = str(number) if labels == "number" else seg.short_name
                texts[number] = ax.annotate(
                    text,
                    xy=(theta, radius),
                    xytext=(0.0, 3.0 if has_note else 0.0),
                    textcoords="offset points",
                    ha="center",
                    va="center",
                    color=colour,
                    fontsize=LABEL_SIZE,
                    zorder=4,
                    gid=f"label-{number}",
                )
            if has_note:
                note_texts[number] = ax.annotate(
                    notes[number],
                    xy=(theta, radius),
                    xytext=(0.0, -3.5 if labels is not None else 0.0),
                    textcoords="offset points",
                    ha="center",
                    va="center",
                    color=colour,
                    fontsize=ANNOTATION_SIZE,
                    zorder=4,
                    gid=f"annotation-{number}",
                )

        mappable = ScalarMappable(norm=scale.norm, cmap=scale.cmap)
        mappable.set_array(np.asarray([v for v in given.values() if math.isfinite(v)]))
        cbar = None
        if colorbar:
            cbar = _colorbar(ax.figure, mappable, ax, scale, label)
        handles = _key_handles(
            bool(missing_segments) and missing == "hatch", outline_label if outlined else None
        )
        if key and handles:
            ax.legend(
                handles=handles,
                loc="upper left",
                bbox_to_anchor=(-0.04, 0.04),
                frameon=False,
                handlelength=1.2,
                handleheight=1.0,
                borderaxespad=0.0,
                fontsize=ANNOTATION_SIZE,
            )
        if title is not None:
            ax.set_title(title)
    return Bullseye(
        ax=ax,
        mappable=mappable,
        patches=MappingProxyType(patches),
        labels=MappingProxyType(texts),
        annotations=MappingProxyType(note_texts),
        outlines=MappingProxyType({n: outline_artists[n] for n in sorted(outlined)}),
        colorbar=cbar,
        missing=tuple(missing_segments),
    )


def _hatch_colour() -> dict[str, object]:
    # Patch.hatchcolor exists from matplotlib 3.10; before, hatches take the edge colour.
    if hasattr(Patch, "set_hatchcolor"):
        return {"hatchcolor": MISSING_HATCH_COLOUR}
    return {"edgecolor": MISSING_HATCH_COLOUR}


def _key_handles(missing: bool, outline_label: str | None) -> list[Patch]:
    """Key entries: the hatched "no data" swatch and the outline's meaning, when used."""
    handles = []
    if missing:
        handles.append(
            Patch(
                facecolor=MISSING_COLOUR,
                hatch=MISSING_HATCH,
                **{"edgecolor": MISSING_HATCH_COLOUR, **_hatch_colour()},
                linewidth=0.5,
                label="no data",
            )
        )
    if outline_label is not None:
        handles.append(
            Patch(
                facecolor="white",
                edgecolor=OUTLINE_COLOUR,
                linewidth=OUTLINE_WIDTH * 0.75,
                label=fit_label(outline_label, width=2 * LABEL_WIDTH),
            )
        )
    return handles


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
    """
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
    row_levels = _levels(table, row, row_order, "row")
    col_levels = _levels(table, col, col_order, "col")
    values_all = pd.to_numeric(table[value], errors="coerce")
    if values_all.isna().sum() > table[value].isna().sum():
        raise ValueError(f"column {value!r} must hold numbers")

    cells = [(r, c) for r in row_levels for c in col_levels]
    if col_wrap is not None:
        ncols = min(col_wrap, len(col_levels))
        nrows = math.ceil(len(col_levels) / ncols)
        positions = {cell: divmod(k, ncols) for k, cell in enumerate(cells)}
    else:
        nrows, ncols = len(row_levels), len(col_levels)
        positions = {
            (r, c): (i, j) for i, r in enumerate(row_levels) for j, c in enumerate(col_levels)
        }

    with style_context():
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
        if shared:
            scale = colour_scale(
                kind, values_all.to_numpy(), cmap=cmap, norm=norm, vmin=vmin, vmax=vmax
            )
        panels: dict[tuple[Hashable, Hashable], Bullseye] = {}
        used = set()
        for cell in cells:
            i, j = positions[cell]
            used.add((i, j))
            ax = axes[i, j]
            mask = pd.Series(True, index=table.index)
            if row is not None:
                mask &= table[row] == cell[0]
            if col is not None:
                mask &= table[col] == cell[1]
            sub = table.loc[mask]
            seg_values = dict(zip(sub[segment].tolist(), values_all[mask].tolist(), strict=True))
            outlined = (
                sub.loc[sub[outline].astype(bool), segment].tolist() if outline is not None else ()
            )
            notes = (
                {
                    s: t
                    for s, t in zip(sub[segment].tolist(), sub[annotation].tolist(), strict=True)
                    if isinstance(t, str) and t
                }
                if annotation is not None
                else None
            )
            if shared:
                panel = draw_bullseye(
                    seg_values,
                    ax=ax,
                    model=model,
                    kind=kind,
                    parameter=parameter,
                    cmap=scale.cmap,
                    norm=scale.norm,
                    labels=labels,
                    outline=outlined,
                    annotations=notes,
                    key=False,
                    colorbar=False,
                    **kwargs,
                )
            else:
                panel = draw_bullseye(
                    seg_values,
                    ax=ax,
                    model=model,
                    kind=kind,
                    parameter=parameter,
                    cmap=cmap,
                    norm=norm,
                    vmin=vmin,
                    vmax=vmax,
                    labels=labels,
                    outline=outlined,
                    annotations=notes,
                    key=False,
                    colorbar=True,
                    colorbar_label=colorbar_label,
                    **kwargs,
                )
            panels[cell] = panel
            show_col_title = col is not None and (i == 0 or col_wrap is not None)
            if show_col_title:
                ax.set_title(fit_label(cell[1]), pad=2.0)  # the caption names it in full
            if row is not None and j == 0:
                ax.set_ylabel(fit_label(cell[0]), labelpad=4.0, fontsize=8.0)
        for i in range(nrows):
            for j in range(ncols):
                if (i, j) not in used:
                    axes[i, j].set_visible(False)
        # One key for the figure, below the panels, instead of one per panel.
        any_missing = any(p.missing for p in panels.values())
        any_outline = any(p.outlines for p in panels.values())
        handles = _key_handles(
            any_missing and kwargs.get("missing", "hatch") == "hatch",
            outline_label if any_outline else None,
        )
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
        mappable = cbar = None
        if shared:
            mappable = ScalarMappable(norm=scale.norm, cmap=scale.cmap)
            mappable.set_array(values_all.dropna().to_numpy())
            label = (
                colorbar_label if colorbar_label is not None else _default_label(kind, parameter)
            )
            visible = [axes[i, j] for (i, j) in sorted(used)]
            shrink = min(0.8, COLORBAR_LENGTH_MM / MM_PER_INCH / fig_h)
            cbar = _colorbar(fig, mappable, visible, scale, label, shrink=shrink)
        if title is not None:
            fig.suptitle(title)
    return BullseyeGrid(
        fig=fig,
        axes=tuple(tuple(axes[i, j] for j in range(ncols)) for i in range(nrows)),
        panels=MappingProxyType(panels),
        mappable=mappable,
        colorbar=cbar,
    )
