"""House style for figures: palette, print sizes, fonts, colour scales, saving.

- Categorical colours: the Okabe-Ito palette, safe for the common colour-vision
  deficiencies (Wong B. Points of view: Color blindness. Nature Methods 2011;8:441), paired
  with distinct marker shapes so groups stay apart in greyscale print.
- Figure widths: single column 89 mm, 1.5 column 120 mm, double column 183 mm (the column
  widths of Nature-family journals (memory); common practice elsewhere).
- Fonts 7-8 pt at print size (common practice for journal figures).
- Colour scales: sequential ``viridis`` for values, diverging ``RdBu_r`` with limits
  symmetric about zero for differences, a discrete ``YlGnBu`` (ColorBrewer, colour-blind
  safe) with a ``BoundaryNorm`` in 10-percent steps for prevalence in percent.
- Names drawn in a figure (methods, groups, subjects) are fitted by :func:`fit_label`:
  wrapped at spaces to :data:`LABEL_WIDTH` characters a line, at most
  :data:`LABEL_LINES` lines, the rest cut with an ellipsis; captions and tables keep the
  full name (common practice).
- Text colour on a coloured fill: black or white, whichever has the higher contrast ratio by
  the WCAG 2.x definitions of relative luminance and contrast ratio (W3C, Web Content
  Accessibility Guidelines 2.1, 2018).

Nothing here changes global ``rcParams``: :func:`style_context` is a context manager, and
plot functions that create their own figure draw inside it.
"""

from __future__ import annotations

import contextlib
import math
import textwrap
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType

import matplotlib as mpl
import numpy as np
from matplotlib.colors import BoundaryNorm, Colormap, Normalize, TwoSlopeNorm, to_rgb
from matplotlib.figure import Figure

# Wong 2011, Figure 2 (hex values as published by Okabe & Ito).
OKABE_ITO: MappingProxyType[str, str] = MappingProxyType(
    {
        "black": "#000000",
        "orange": "#E69F00",
        "sky blue": "#56B4E9",
        "bluish green": "#009E73",
        "yellow": "#F0E442",
        "blue": "#0072B2",
        "vermillion": "#D55E00",
        "reddish purple": "#CC79A7",
    }
)
"""The eight Okabe-Ito colours by name (Wong 2011)."""

# Order for groups: the strongest colours first; yellow (poor on white) and black (used for
# reference lines) last.
CATEGORICAL: tuple[str, ...] = tuple(
    OKABE_ITO[name]
    for name in (
        "blue",
        "orange",
        "bluish green",
        "vermillion",
        "reddish purple",
        "sky blue",
        "yellow",
        "black",
    )
)
"""Okabe-Ito colours in the order given to groups."""

MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P", "X", "*")
"""Marker shapes given to groups together with :data:`CATEGORICAL`, for greyscale print."""

MISSING_COLOUR = "#D9D9D9"
"""Fill of a segment or cell without data (drawn hatched)."""

MISSING_HATCH_COLOUR = "#8C8C8C"

LINE_COLOUR = "#222222"
"""Colour of reference lines (bias, identity, fitted lines)."""

BAND_COLOUR = "#BDBDBD"
"""Colour of confidence bands."""

FIGURE_WIDTHS_MM: MappingProxyType[str, float] = MappingProxyType(
    {"single": 89.0, "onehalf": 120.0, "double": 183.0}
)
"""Journal figure widths in mm: single column, 1.5 column, double column."""

MM_PER_INCH = 25.4

SEQUENTIAL_CMAP = "viridis"
DIVERGING_CMAP = "RdBu_r"
PREVALENCE_CMAP = "YlGnBu"
PREVALENCE_BOUNDARIES: tuple[float, ...] = tuple(float(b) for b in range(0, 101, 10))
"""Bin edges (percent) of the discrete prevalence colour scale."""

COLOUR_SCALE_KINDS: tuple[str, ...] = ("value", "difference", "prevalence")

RC_PARAMS: MappingProxyType[str, object] = MappingProxyType(
    {
        "font.family": "sans-serif",
        "font.sans-serif": ("Arial", "Helvetica", "Liberation Sans", "DejaVu Sans"),
        "font.size": 7.0,
        "axes.titlesize": 8.0,
        "axes.labelsize": 7.0,
        "xtick.labelsize": 6.5,
        "ytick.labelsize": 6.5,
        "legend.fontsize": 6.5,
        "legend.title_fontsize": 7.0,
        "figure.titlesize": 9.0,
        "axes.linewidth": 0.6,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.prop_cycle": mpl.cycler(color=list(CATEGORICAL)),
        "xtick.major.width": 0.6,
        "ytick.major.width": 0.6,
        "xtick.major.size": 2.5,
        "ytick.major.size": 2.5,
        "lines.linewidth": 1.0,
        "lines.markersize": 3.5,
        "patch.linewidth": 0.6,
        "hatch.linewidth": 0.6,
        "legend.frameon": False,
        "figure.dpi": 100.0,
        "savefig.dpi": 300.0,
        "figure.constrained_layout.use": True,
        "svg.fonttype": "none",
        "pdf.fonttype": 42,
        "image.cmap": SEQUENTIAL_CMAP,
    }
)
"""Matplotlib settings of the house style, applied only inside :func:`style_context`."""


LABEL_WIDTH = 28
"""Characters a line of a name drawn in a figure (about 45 mm at 7 pt; common practice)."""
LABEL_LINES = 2
"""Lines a name drawn in a figure may take before it is cut with an ellipsis."""
ELLIPSIS = "\N{HORIZONTAL ELLIPSIS}"
AXIS_NAME_WIDTH = 24
"""Characters of a method name in an axis or colour-bar label: one line, then an ellipsis
(:func:`fit_axis_name`)."""


def fit_axis_name(name: object) -> str:
    """A method name as drawn in an axis or colour-bar label: one line of
    :data:`AXIS_NAME_WIDTH` characters (:func:`fit_label`)."""
    return fit_label(name, width=AXIS_NAME_WIDTH, lines=1)


def fit_label(text: object, width: int = LABEL_WIDTH, lines: int = LABEL_LINES) -> str:
    """A name as drawn in a figure: wrapped, shortened with an ellipsis, safe from mathtext.

    Each line of ``text`` is wrapped at spaces (long words broken) to ``width`` characters
    and cut after ``lines`` lines with an ellipsis; a text that fits is kept as it is.
    Dollar signs are escaped, since matplotlib reads text between two of them as a formula
    (a name holding one would fail to draw or be drawn as math). The full name belongs in
    the caption and the tables, never only in the figure.

    Parameters
    ----------
    text
        The name (anything, shown as ``str(text)``).
    width, lines
        Characters a line (at least 2) and lines a paragraph (at least 1).

    Returns
    -------
    str
        The text to draw; every line at most ``width`` characters (before escaping).
    """
    if width < 2 or lines < 1:
        raise ValueError(f"width must be >= 2 and lines >= 1, got width={width}, lines={lines}")
    fitted = []
    for paragraph in str(text).split("\n"):
        if len(paragraph) <= width:
            fitted.append(paragraph)
            continue
        wrapped = textwrap.wrap(
            " ".join(paragraph.split()), width, break_on_hyphens=False
        )  # break_long_words (default): a name without spaces still fits
        if len(wrapped) > lines:
            last = wrapped[lines - 1]
            wrapped = [*wrapped[: lines - 1], last[: width - 1].rstrip() + ELLIPSIS]
        fitted.extend(wrapped)
    return "\n".join(fitted).replace("$", r"\$")


@contextlib.contextmanager
def style_context(**overrides: object) -> Iterator[None]:
    """Apply the house style inside a ``with`` block; global ``rcParams`` are restored after.

    ``overrides`` are further rcParams, e.g. ``style_context(**{"font.size": 8})``.
    """
    params = dict(RC_PARAMS)
    params.update(overrides)
    with mpl.rc_context(params):
        yield


def figure_size(width: str | float = "single", aspect: float = 0.75) -> tuple[float, float]:
    """Figure size in inches for a journal width preset (or a width in mm) and height/width.

    ``width`` is ``"single"`` (89 mm), ``"onehalf"`` (120 mm), ``"double"`` (183 mm) or a
    number of millimetres.
    """
    if isinstance(width, str):
        if width not in FIGURE_WIDTHS_MM:
            raise ValueError(
                f"width must be one of {sorted(FIGURE_WIDTHS_MM)} or a number of mm, got {width!r}"
            )
        width_mm = FIGURE_WIDTHS_MM[width]
    else:
        width_mm = float(width)
        if not math.isfinite(width_mm) or width_mm <= 0:
            raise ValueError(f"width must be a positive number of mm, got {width!r}")
    if not math.isfinite(aspect) or aspect <= 0:
        raise ValueError(f"aspect must be a positive height/width ratio, got {aspect!r}")
    width_in = width_mm / MM_PER_INCH
    return (width_in, width_in * aspect)


def group_styles(levels: Sequence[object]) -> dict[object, tuple[str, str]]:
    """Colour and marker for each group level, in order: Okabe-Ito colours with marker shapes."""
    levels = list(levels)
    if len(levels) > len(CATEGORICAL):
        raise ValueError(
            f"groups must have at most {len(CATEGORICAL)} levels to stay distinguishable, "
            f"got {len(levels)}"
        )
    return {level: (CATEGORICAL[k], MARKERS[k]) for k, level in enumerate(levels)}


def relative_luminance(colour: object) -> float:
    """Relative luminance of an sRGB colour by the WCAG 2.x definition.

    ``L = 0.2126 R + 0.7152 G + 0.0722 B`` with each channel linearised as ``c / 12.92`` for
    ``c <= 0.04045`` and ``((c + 0.055) / 1.055) ** 2.4`` otherwise (W3C, WCAG 2.1, 2018,
    definition of relative luminance). Validated against the definition's corner values
    (white 1, black 0, primaries equal to their coefficients).
    """
    rgb = np.asarray(to_rgb(colour), dtype=float)
    linear = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(np.dot([0.2126, 0.7152, 0.0722], linear))


def contrast_ratio(colour_a: object, colour_b: object) -> float:
    """WCAG 2.x contrast ratio ``(L1 + 0.05) / (L2 + 0.05)``, L1 the lighter (1 to 21)."""
    la, lb = relative_luminance(colour_a), relative_luminance(colour_b)
    lighter, darker = max(la, lb), min(la, lb)
    return (lighter + 0.05) / (darker + 0.05)


def text_colour_for(fill: object) -> str:
    """Black or white, whichever has the higher WCAG contrast ratio against ``fill``."""
    if contrast_ratio(fill, "#000000") >= contrast_ratio(fill, "#FFFFFF"):
        return "#000000"
    return "#FFFFFF"


@dataclass(frozen=True)
class ColourScale:
    """A colour map with its normalisation and the colour-bar ``extend`` it needs."""

    kind: str
    cmap: Colormap
    norm: Normalize
    extend: str


def colour_scale(
    kind: str,
    values: Iterable[float] = (),
    *,
    cmap: str | Colormap | None = None,
    norm: Normalize | None = None,
    vmin: float | None = None,
    vmax: float | None = None,
) -> ColourScale:
    """Colour map and norm for ``kind`` = ``"value"``, ``"difference"`` or ``"prevalence"``.

    Limits not given are taken from the finite ``values``: the range for values; for
    differences the largest absolute value on both sides of zero (symmetric, so equal
    colour steps mean equal differences; given asymmetric limits use a ``TwoSlopeNorm``
    centred at zero); for prevalence 0-100 % in 10 % bins (``BoundaryNorm``). ``extend``
    tells the colour bar whether values fall outside the limits (clipped colours).

    Examples
    --------
    >>> scale = colour_scale("difference", [-2.0, 0.5, 3.0])
    >>> (scale.norm.vmin, scale.norm.vmax, scale.extend)
    (-3.0, 3.0, 'neither')
    >>> colour_scale("value", [10.0, 20.0], vmax=15.0).extend
    'max'
    """
    if kind not in COLOUR_SCALE_KINDS:
        raise ValueError(f"kind must be one of {list(COLOUR_SCALE_KINDS)}, got {kind!r}")
    data = np.asarray(list(values), dtype=float)
    data = data[np.isfinite(data)]
    _check_limits(norm, vmin, vmax)
    if kind == "prevalence":
        return _prevalence_scale(data, cmap, norm, vmin, vmax)
    default = SEQUENTIAL_CMAP if kind == "value" else DIVERGING_CMAP
    cmap_out = cmap if isinstance(cmap, Colormap) else mpl.colormaps[cmap or default]
    if norm is None:
        norm = (
            _value_norm(data, vmin, vmax) if kind == "value" else _difference_norm(data, vmin, vmax)
        )
    return ColourScale(kind, cmap_out, norm, _extend(data, norm))


def _check_limits(norm: Normalize | None, vmin: float | None, vmax: float | None) -> None:
    if norm is not None and (vmin is not None or vmax is not None):
        raise ValueError("give either norm or vmin/vmax, not both")
    for name, limit in (("vmin", vmin), ("vmax", vmax)):
        if limit is not None and not math.isfinite(limit):
            raise ValueError(f"{name} must be finite, got {limit!r}")
    if vmin is not None and vmax is not None and not vmin < vmax:
        raise ValueError(f"vmin must be below vmax, got vmin={vmin!r}, vmax={vmax!r}")


def _prevalence_scale(
    data: np.ndarray,
    cmap: str | Colormap | None,
    norm: Normalize | None,
    vmin: float | None,
    vmax: float | None,
) -> ColourScale:
    """Percentages in discrete bins at :data:`PREVALENCE_BOUNDARIES` between the limits."""
    if data.size and (data.min() < 0 or data.max() > 100):
        raise ValueError(
            "prevalence values must be percentages in 0-100, got range "
            f"{data.min():g} to {data.max():g}"
        )
    base = cmap if isinstance(cmap, Colormap) else mpl.colormaps[cmap or PREVALENCE_CMAP]
    if norm is not None:
        return ColourScale("prevalence", base, norm, _extend(data, norm))
    low = 0.0 if vmin is None else vmin
    high = 100.0 if vmax is None else vmax
    edges = [b for b in PREVALENCE_BOUNDARIES if low <= b <= high]
    edges = sorted({low, *edges, high})
    n_bins = len(edges) - 1
    # Start above the near-white end so the lowest bin still reads as a colour.
    colours = base(np.linspace(0.12, 1.0, n_bins))
    binned = mpl.colors.ListedColormap(colours, name=f"{base.name}_binned")
    norm = BoundaryNorm(edges, n_bins)
    return ColourScale("prevalence", binned, norm, _extend(data, norm))


def _value_norm(data: np.ndarray, vmin: float | None, vmax: float | None) -> Normalize:
    """Sequential limits: the range of the data where not given."""
    low = float(data.min()) if vmin is None and data.size else vmin
    high = float(data.max()) if vmax is None and data.size else vmax
    low = 0.0 if low is None else low
    high = low + 1.0 if high is None else high
    if not low < high:  # all values equal: a unit-wide scale around them
        centre = low
        half = max(abs(centre) * 0.05, 0.5)
        low, high = centre - half, centre + half
    return Normalize(low, high)


def _difference_norm(data: np.ndarray, vmin: float | None, vmax: float | None) -> Normalize:
    """Diverging limits: symmetric about 0 unless both are given; always straddling 0."""
    if vmin is None and vmax is None:
        half = float(np.max(np.abs(data))) if data.size else 1.0
        half = half if half > 0 else 1.0
        return Normalize(-half, half)
    if vmin is None or vmax is None:
        half = abs(vmax if vmax is not None else vmin)  # type: ignore[arg-type]
        if half == 0:
            raise ValueError("a difference scale needs a non-zero limit, got 0")
        return Normalize(-half, half)
    if vmin == -vmax:
        return Normalize(vmin, vmax)
    if not vmin < 0 < vmax:
        raise ValueError(f"difference limits must straddle zero, got vmin={vmin!r}, vmax={vmax!r}")
    return TwoSlopeNorm(vcenter=0.0, vmin=vmin, vmax=vmax)


def _extend(data: np.ndarray, norm: Normalize) -> str:
    if not data.size or norm.vmin is None or norm.vmax is None:
        return "neither"
    below = bool(data.min() < norm.vmin)
    above = bool(data.max() > norm.vmax)
    return {(False, False): "neither", (True, False): "min", (False, True): "max"}.get(
        (below, above), "both"
    )


def save_figure(
    fig: Figure,
    path_stem: str | Path,
    formats: Sequence[str] = ("png", "svg"),
    dpi: float = 300,
    **savefig_kwargs: object,
) -> tuple[Path, ...]:
    """Write ``fig`` as ``<path_stem>.<format>`` for each format; return the paths written.

    Raster formats use ``dpi`` (300 by default, the usual journal minimum for colour
    figures, common practice); SVG keeps text as text (``svg.fonttype = "none"``) so it
    stays editable, naming the house fonts (Arial, Helvetica, Liberation Sans, DejaVu Sans,
    in that order), and carries no date so reruns give identical files. Parent folders are
    created.
    """
    if isinstance(formats, str):
        raise ValueError(f"formats must be a sequence of format names, got the string {formats!r}")
    if not formats:
        raise ValueError("formats must name at least one format, got an empty sequence")
    supported = fig.canvas.get_supported_filetypes()
    unknown = [f for f in formats if f not in supported]
    if unknown:
        raise ValueError(f"formats must be among {sorted(supported)}, got {unknown!r}")
    if not (isinstance(dpi, int | float) and math.isfinite(dpi) and dpi > 0):
        raise ValueError(f"dpi must be a positive number, got {dpi!r}")
    stem = Path(path_stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    written = []
    save_params = {
        "svg.fonttype": "none",
        "pdf.fonttype": 42,
        "svg.hashsalt": "cohort",
        # SVG text names its fonts at save time: list the house fonts the PNG was drawn with.
        "font.sans-serif": RC_PARAMS["font.sans-serif"],
    }
    with mpl.rc_context(save_params):
        for fmt in formats:
            path = stem.with_name(f"{stem.name}.{fmt}")
            kwargs = dict(savefig_kwargs)
            if fmt in ("svg", "pdf"):
                kwargs.setdefault("metadata", {"Date": None})
            fig.savefig(path, format=fmt, dpi=dpi, **kwargs)
            written.append(path)
    return tuple(written)
