"""Bullseye (polar) map of per-segment values in the AHA layout (small multiples of it:
:mod:`cohort.plots.bullseye_grid`).

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
from collections.abc import Iterable, Mapping, Sequence
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


def ring_band(ring: str) -> tuple[float, float]:
    """Inner and outer radius of a ring: unit-wide bands, apex disc at the centre.

    The order comes from :data:`cohort.domain.segments.RINGS` (basal outermost).

    Examples
    --------
    >>> ring_band("basal"), ring_band("apex")
    ((3.0, 4.0), (0.0, 1.0))
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


# Long: signature and numpydoc parameters of 20 options are ~75 lines; drawing is in helpers
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

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> drawn = draw_bullseye({1: 2.0, 2: 4.0, 17: 3.0}, parameter="ff")
    >>> len(drawn.patches), drawn.missing[:3], drawn.ax.name
    (17, (3, 4, 5), 'polar')
    >>> drawn.colorbar.ax.get_ylabel()
    'fat fraction (%)'
    >>> matplotlib.pyplot.close(drawn.ax.figure)
    """
    _check_modes(kind, labels, missing)
    allowed = segment_model(model).numbers
    given, outlined, notes = _segment_inputs(values, outline, annotations, allowed, model)
    label = colorbar_label if colorbar_label is not None else _default_label(kind, parameter)
    context = style_context() if ax is None else contextlib.nullcontext()
    with context:
        if ax is None:
            fig = plt.figure(figsize=figure_size("single", aspect=0.78))
            ax = fig.add_subplot(projection="polar")
        _check_polar(ax)
        scale = colour_scale(kind, given.values(), cmap=cmap, norm=norm, vmin=vmin, vmax=vmax)
        _polar_conventions(ax)
        drawn = _draw_segments(ax, allowed, given, scale, missing, outlined, labels, notes, kwargs)
        mappable = ScalarMappable(norm=scale.norm, cmap=scale.cmap)
        mappable.set_array(np.asarray([v for v in given.values() if math.isfinite(v)]))
        cbar = _colorbar(ax.figure, mappable, ax, scale, label) if colorbar else None
        handles = _key_handles(
            bool(drawn["missing"]) and missing == "hatch", outline_label if outlined else None
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
    return Bullseye(ax=ax, mappable=mappable, colorbar=cbar, **drawn)


def _draw_segments(
    ax: Axes,
    allowed: Sequence[int],
    given: Mapping[int, float],
    scale: ColourScale,
    missing: str,
    outlined: set[int],
    labels: str | None,
    notes: Mapping[int, str],
    kwargs: dict[str, object],
) -> dict[str, object]:
    """Every segment of the model with its texts: the fields of :class:`Bullseye` they fill."""
    patches: dict[int, Patch] = {}
    texts: dict[int, Text] = {}
    note_texts: dict[int, Text] = {}
    outline_artists: dict[int, Artist] = {}
    for number in allowed:
        fill = _fill(given.get(number, math.nan), scale, missing)
        patch, outline_artist = _draw_segment(ax, number, fill, number in outlined, kwargs)
        patches[number] = patch
        outline_artists[number] = outline_artist
        label_text, note_text = _segment_texts(ax, number, patch, labels, notes.get(number))
        if label_text is not None:
            texts[number] = label_text
        if note_text is not None:
            note_texts[number] = note_text
    return {
        "patches": MappingProxyType(patches),
        "labels": MappingProxyType(texts),
        "annotations": MappingProxyType(note_texts),
        "outlines": MappingProxyType({n: outline_artists[n] for n in sorted(outlined)}),
        "missing": tuple(n for n in allowed if not math.isfinite(given.get(n, math.nan))),
    }


def _check_modes(kind: str, labels: str | None, missing: str) -> None:
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {list(KINDS)}, got {kind!r}")
    if labels not in LABEL_MODES:
        raise ValueError(f"labels must be one of {list(LABEL_MODES)}, got {labels!r}")
    if missing not in MISSING_MODES:
        raise ValueError(f"missing must be one of {list(MISSING_MODES)}, got {missing!r}")


def _segment_inputs(
    values: object,
    outline: Iterable[int],
    annotations: Mapping[int, str] | None,
    allowed: Sequence[int],
    model: str,
) -> tuple[dict[int, float], set[int], dict[int, str]]:
    """The values, outlined segments and annotations, each keyed by checked segment number."""
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
    return given, outlined, notes


def _polar_conventions(ax: Axes) -> None:
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


def _fill(value: float, scale: ColourScale, missing: str) -> dict[str, object]:
    """Face colour (and hatch) of a segment: its colour on the scale, or the missing style."""
    if math.isfinite(value):
        return {"color": scale.cmap(scale.norm(value))}
    if missing == "hatch":
        return {"color": MISSING_COLOUR, "hatch": MISSING_HATCH, **_hatch_colour()}
    return {"color": "#FFFFFF"}


def _draw_segment(
    ax: Axes, number: int, fill: dict[str, object], outlined: bool, kwargs: dict[str, object]
) -> tuple[Patch, Artist]:
    """One segment as a polar bar; returns the patch and the artist carrying its outline."""
    seg = SEGMENTS[number]
    inner, outer = ring_band(seg.ring)
    face = fill["color"]
    bar_kwargs: dict[str, object] = {
        "edgecolor": SEPARATOR_COLOUR,
        "linewidth": SEPARATOR_WIDTH,
        "zorder": 1,
    }
    bar_kwargs.update({k: v for k, v in fill.items() if k != "color"})
    is_apex = seg.ring == "apex"
    if is_apex:
        # A full-circle bar would draw its seam as a radius; the apical ring's inner
        # edges already separate the disc, and an outline is drawn as a circle below.
        bar_kwargs.update(linewidth=0.0)
    elif outlined:
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
    if not (is_apex and outlined):
        return patch, patch
    (circle,) = ax.plot(
        np.linspace(0.0, 2.0 * math.pi, 361),
        np.full(361, outer),
        color=OUTLINE_COLOUR,
        linewidth=OUTLINE_WIDTH,
        solid_joinstyle="round",
        zorder=3.5,
        gid=f"outline-{number}",
    )
    return patch, circle


def _segment_texts(
    ax: Axes, number: int, patch: Patch, labels: str | None, note: str | None
) -> tuple[Text | None, Text | None]:
    """The segment's label and annotation, in black or white against its fill."""
    seg = SEGMENTS[number]
    inner, outer = ring_band(seg.ring)
    theta = math.radians(seg.centre_deg)
    radius = 0.0 if seg.ring == "apex" else (inner + outer) / 2.0
    common = {
        "xy": (theta, radius),
        "textcoords": "offset points",
        "ha": "center",
        "va": "center",
        "color": text_colour_for(patch.get_facecolor()),
        "zorder": 4,
    }
    label_text = note_text = None
    if labels is not None:
        text = str(number) if labels == "number" else seg.short_name
        label_text = ax.annotate(
            text,
            xytext=(0.0, 3.0 if note is not None else 0.0),
            fontsize=LABEL_SIZE,
            gid=f"label-{number}",
            **common,
        )
    if note is not None:
        note_text = ax.annotate(
            note,
            xytext=(0.0, -3.5 if labels is not None else 0.0),
            fontsize=ANNOTATION_SIZE,
            gid=f"annotation-{number}",
            **common,
        )
    return label_text, note_text


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
