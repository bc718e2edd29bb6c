"""Method-agreement figures: Bland-Altman plots and method-comparison scatter plots.

The statistics (bias, limits of agreement and their confidence intervals, regression
lines, CCC) are computed elsewhere and passed in as numbers; these functions only draw.

- Bland JM, Altman DG. Statistical methods for assessing agreement between two methods of
  clinical measurement. Lancet 1986;i:307-310 (difference against mean plot).
- Bland JM, Altman DG. Measuring agreement in method comparison studies. Stat Methods Med
  Res 1999;8:135-160 (ratio on a log axis; regression-based limits).
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Mapping, Sequence
from typing import Any

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.lines import Line2D
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

from cohort.domain.units import PARAMETERS
from cohort.plots.limit_lines import (
    NO_DIFFERENCE_COLOUR,
    _draw_limits,
    _get,
    _legend_above,
    _linear_text,
    _numbers_above,
)
from cohort.plots.style import (
    AXIS_NAME_WIDTH,
    CATEGORICAL,
    LINE_COLOUR,
    figure_size,
    fit_axis_name,
    group_styles,
    style_context,
)

DENSITY_THRESHOLD = 5000
"""Above this many pairs, ``density="auto"`` draws a hexagonal 2-D histogram, not points."""

DENSITY_GRIDSIZE = 45
LIMIT_TYPES = ("auto", "constant", "regression")
KEYS = ("legend", "text", "none")
"""Where a plot says what its lines are: a legend above the axes with the numbers
(``"legend"``); the numbers only, in a few lines of text just above the axes, for a panel
of a figure with one shared key (``"text"``, gid ``"numbers"``); nothing (``"none"``)."""


def _axis_label(parameter: str) -> str:
    if parameter not in PARAMETERS:
        raise ValueError(f"parameter must be one of {sorted(PARAMETERS)}, got {parameter!r}")
    return PARAMETERS[parameter].axis_label


def _pairs(reference: Any, test: Any) -> tuple[np.ndarray, np.ndarray]:
    ref = np.array(reference, dtype=float, copy=True)
    tst = np.array(test, dtype=float, copy=True)
    if ref.ndim != 1 or tst.ndim != 1:
        raise ValueError(
            f"reference and test must be one-dimensional, got shapes {ref.shape} and {tst.shape}"
        )
    if ref.shape != tst.shape:
        raise ValueError(
            f"reference and test must have the same length, got {ref.size} and {tst.size}"
        )
    if ref.size == 0:
        raise ValueError("reference and test must hold at least one pair, got none")
    bad = ~(np.isfinite(ref) & np.isfinite(tst))
    if bad.any():
        raise ValueError(
            f"reference and test must be finite, got {int(bad.sum())} non-finite pair(s); "
            "drop them explicitly before plotting"
        )
    return ref, tst


def _group_levels(
    groups: Any, n: int, group_order: Sequence[object] | None
) -> tuple[np.ndarray | None, list[object]]:
    if groups is None:
        if group_order is not None:
            raise ValueError("group_order needs groups, got groups=None")
        return None, []
    labels = np.asarray(pd.Series(groups, copy=True).to_numpy(), dtype=object)
    if labels.shape != (n,):
        raise ValueError(f"groups must have one label per pair ({n}), got shape {labels.shape}")
    present = list(pd.unique(pd.Series(labels)))
    if group_order is None:
        return labels, present
    order = list(group_order)
    absent = [g for g in present if g not in order]
    if absent:
        raise ValueError(f"group_order must list every group, missing {absent!r}")
    # every level of the order keeps its style, so panels of one figure colour a group alike
    # even when a panel lacks some group (drawn without points and without a legend entry)
    return labels, list(dict.fromkeys(order))


def _use_density(density: bool | str, n: int, grouped: bool) -> bool:
    if density not in ("auto", True, False):
        raise ValueError(f"density must be 'auto', True or False, got {density!r}")
    if density is True and grouped:
        raise ValueError(
            "density=True cannot show groups; pass density=False or draw one panel per group"
        )
    if density == "auto":
        # Grouped data stay as (rasterised) points so the groups remain visible.
        return n > DENSITY_THRESHOLD and not grouped
    return bool(density)


def _draw_data(
    ax: Axes,
    x: np.ndarray,
    y: np.ndarray,
    labels: np.ndarray | None,
    levels: list[object],
    density: bool,
    log_y: bool,
    kwargs: dict[str, object],
) -> list[object]:
    n = x.size
    if density:
        hb = ax.hexbin(
            x,
            y,
            gridsize=DENSITY_GRIDSIZE,
            mincnt=1,
            bins="log",
            cmap="viridis",
            linewidths=0.0,
            yscale="log" if log_y else "linear",
            gid="density",
            **kwargs,
        )
        cbar = ax.figure.colorbar(hb, ax=ax, shrink=0.8, aspect=25, pad=0.02)
        cbar.set_label("pairs per bin")
        cbar.ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
        cbar.outline.set_linewidth(0.5)
        return [hb]
    many = n > DENSITY_THRESHOLD
    point_kwargs: dict[str, object] = {
        "s": 4.0 if many else 12.0,
        "alpha": 0.5 if many else 0.8,
        "linewidths": 0.3,
        "edgecolors": "white",
        "rasterized": many,  # keeps the SVG small; vector output of 1e4 markers is unusable
        "zorder": 2,
    }
    point_kwargs.update(kwargs)
    artists = []
    if labels is None:
        artists.append(
            ax.scatter(x, y, color=CATEGORICAL[0], marker="o", gid="points", **point_kwargs)
        )
        return artists
    styles = group_styles(levels)
    for level in levels:
        mask = labels == level
        if not mask.any():
            continue
        colour, marker = styles[level]
        artists.append(
            ax.scatter(
                x[mask],
                y[mask],
                color=colour,
                marker=marker,
                label=f"{level} (n = {int(mask.sum())})",
                gid=f"points-{level}",
                **point_kwargs,
            )
        )
    return artists


def _decimals(scale: float) -> int:
    """Decimals that give about three significant digits for numbers of size ``scale``."""
    if not math.isfinite(scale) or scale <= 0:
        return 2
    return int(min(4, max(0, 2 - math.floor(math.log10(scale)))))


# Long: the numpydoc parameters of 15 options are most of it; drawing is in helpers
def bland_altman_plot(
    reference: Any,
    test: Any,
    *,
    limits: Mapping[str, float] | pd.Series | None = None,
    groups: Any = None,
    group_order: Sequence[object] | None = None,
    parameter: str = "ff",
    ratio: bool = False,
    density: bool | str = "auto",
    limit_type: str = "auto",
    reference_name: str = "reference",
    test_name: str = "test",
    key: str = "legend",
    decimals: int | None = None,
    ax: Axes | None = None,
    **kwargs: object,
) -> Axes:
    """Bland-Altman plot: difference (test minus reference) against the mean of the two.

    With ``ratio=True`` the y axis is the ratio test / reference on a log scale (Bland &
    Altman 1999, section 3.3 (memory)); the ``limits`` are then ratios.

    Parameters
    ----------
    reference, test
        Paired values, same length, finite (drop pairs explicitly beforehand).
    limits
        A row of the agreement table: ``bias``, ``loa_low``, ``loa_high`` and optionally
        their CIs (``bias_ci_low``, ``bias_ci_high``, ``loa_low_ci_low``, ...,
        ``loa_high_ci_high``, shaded) and ``confidence_level``; optionally regression-based
        limits as intercept/slope pairs (:data:`cohort.plots.limit_lines.REGRESSION_KEYS`).
        Nothing is drawn but the data if None.
    groups, group_order
        A label per pair: Okabe-Ito colours and distinct markers per group.
    parameter
        Parameter code for axis labels (quantity and unit from :mod:`cohort.domain.units`).
    density
        ``"auto"``: a hexagonal 2-D histogram above 5,000 ungrouped pairs; True/False force.
    limit_type
        ``"constant"``, ``"regression"``, or ``"auto"`` (regression lines when all their
        keys are present and finite, else constant).
    reference_name, test_name
        Method names for axis labels.
    key
        One of :data:`KEYS`: a legend above the axes with the numbers (default), or for a
        panel of a figure with one shared key (:func:`~cohort.plots.limit_lines.limit_key`,
        :func:`group_key`, :func:`shared_legend`) the numbers only, as text above the axes.
    decimals
        Decimals of the numbers shown (ratios: 3); by default about three significant
        digits of the differences' range (give one value to the panels of a figure).
    ax
        Axes to draw on; a new single-column figure in the house style if None.
    **kwargs
        Passed to ``Axes.scatter`` (or ``Axes.hexbin``).

    Returns
    -------
    matplotlib.axes.Axes

    Examples
    --------
    >>> import matplotlib; matplotlib.use("Agg")
    >>> limits = {"bias": 0.5, "loa_low": -1.0, "loa_high": 2.0}
    >>> ax = bland_altman_plot([1.0, 2.0, 3.0], [1.5, 2.0, 4.0], limits=limits)
    >>> [round(line.get_ydata()[0], 2) for line in ax.get_lines()]
    [0.0, 0.5, -1.0, 2.0]
    >>> plt.close(ax.figure)
    """
    axis_label = _axis_label(parameter)
    if limit_type not in LIMIT_TYPES:
        raise ValueError(f"limit_type must be one of {list(LIMIT_TYPES)}, got {limit_type!r}")
    _check_key(key)
    ref, tst = _pairs(reference, test)
    if ratio:
        _check_positive(ref, tst)
    labels, levels = _group_levels(groups, ref.size, group_order)
    use_density = _use_density(density, ref.size, labels is not None)
    mean, y = (ref + tst) / 2.0, (tst / ref if ratio else tst - ref)

    context = style_context() if ax is None else contextlib.nullcontext()
    with context:
        if ax is None:
            _, ax = plt.subplots(figsize=figure_size("single", aspect=0.85))
        data_artists = _draw_data(ax, mean, y, labels, levels, use_density, ratio, dict(kwargs))
        _no_difference_line(ax, ratio)
        compact = key == "text"
        line_handles = (
            []
            if limits is None
            else _limits(ax, limits, mean, y, ratio, limit_type, compact, decimals)
        )
        _label_bland_altman(ax, reference_name, test_name, axis_label, ratio)
        if key == "legend":
            _legend_above(ax, line_handles, data_artists if labels is not None else [])
        elif key == "text":
            _numbers_above(ax, [h.get_label() for h in line_handles if isinstance(h, Line2D)])
    return ax


def _check_key(key: str) -> None:
    if key not in KEYS:
        raise ValueError(f"key must be one of {list(KEYS)}, got {key!r}")


def _no_difference_line(ax: Axes, ratio: bool) -> None:
    """Dotted line at no difference (ratio 1 on a log axis)."""
    if ratio:
        ax.set_yscale("log")
    no_difference = 1.0 if ratio else 0.0
    ax.axhline(no_difference, color=NO_DIFFERENCE_COLOUR, linewidth=0.6, linestyle=":", zorder=1)


def _limits(
    ax: Axes,
    limits: Any,
    mean: np.ndarray,
    y: np.ndarray,
    ratio: bool,
    limit_type: str,
    compact: bool,
    decimals: int | None,
) -> list[Any]:
    """The limit lines, their numbers given to about three significant digits of the spread."""
    if decimals is None:
        spread = float(np.ptp(y)) if y.size > 1 else float(abs(y[0]))
        decimals = 3 if ratio else _decimals(spread)
    return _draw_limits(ax, limits, mean, ratio, limit_type, decimals, compact)


def _check_positive(ref: np.ndarray, tst: np.ndarray) -> None:
    if (ref <= 0).any() or (tst <= 0).any():
        raise ValueError(
            "ratio=True needs positive reference and test values, got "
            f"{int(((ref <= 0) | (tst <= 0)).sum())} pair(s) with a value <= 0"
        )


def _label_bland_altman(
    ax: Axes, reference_name: str, test_name: str, axis_label: str, ratio: bool
) -> None:
    ref_text, test_text = fit_axis_name(reference_name), fit_axis_name(test_name)
    ax.set_xlabel(_two_lines(f"mean of {ref_text}", f"and {test_text}, {axis_label}"))
    if ratio:
        ax.set_ylabel(_two_lines(f"ratio {test_text}", f"/ {ref_text}"))
        _ratio_ticks(ax)
    else:
        ax.set_ylabel(_two_lines(f"{test_text} −", f"{ref_text}, {axis_label}"))


def _two_lines(first: str, second: str, width: int = 2 * AXIS_NAME_WIDTH) -> str:
    """``first second`` on one line when it fits in ``width`` characters, else two lines."""
    one = f"{first} {second}"
    return one if len(one.replace("\\$", "$")) <= width else f"{first}\n{second}"


_RATIO_TICKS = (
    (0.5, 0.67, 0.8, 0.9, 1.0, 1.1, 1.25, 1.5, 2.0),
    (0.25, 0.5, 0.8, 1.0, 1.25, 2.0, 4.0),
    (0.01, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0, 100.0),
)


def _ratio_ticks(ax: Axes) -> None:
    """Plain-number ticks on the log ratio axis (no 10^x notation), at most eight."""
    ax.autoscale_view()
    low, high = ax.get_ylim()
    for candidates in _RATIO_TICKS:
        ticks = [t for t in candidates if low <= t <= high]
        if 3 <= len(ticks) <= 8:
            break
    else:
        return  # a range the candidates do not suit: keep matplotlib's log ticks
    ax.yaxis.set_major_locator(FixedLocator(ticks))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    ax.yaxis.set_minor_formatter(NullFormatter())


# Long: the numpydoc parameters of 14 options are most of it; drawing is in helpers
def method_scatter(
    reference: Any,
    test: Any,
    *,
    line: Mapping[str, Any] | pd.Series | None = None,
    ccc: float | None = None,
    ccc_ci: tuple[float, float] | None = None,
    groups: Any = None,
    group_order: Sequence[object] | None = None,
    parameter: str = "ff",
    density: bool | str = "auto",
    reference_name: str = "reference",
    test_name: str = "test",
    axis_limits: tuple[float, float] | None = None,
    key: str = "legend",
    ax: Axes | None = None,
    **kwargs: object,
) -> Axes:
    """Method-comparison scatter: test (y) against reference (x) with the identity line.

    Parameters
    ----------
    reference, test
        Paired values, same length, finite.
    line
        A fitted line with keys ``slope``, ``intercept`` and ``procedure`` (e.g.
        ``"Passing-Bablok"``, ``"Deming"``), computed elsewhere.
    ccc, ccc_ci
        Lin's concordance correlation coefficient (Lin 1989) and its CI, shown in the
        legend.
    axis_limits
        Limits of both axes (e.g. the same for every panel of a figure); by default the
        range of all values with 5 % room.
    groups, group_order, parameter, density, reference_name, test_name, key, ax, **kwargs
        As in :func:`bland_altman_plot` (``key="text"``: the fitted line and CCC as text
        above the axes; the procedure's name belongs in the shared key, :func:`scatter_key`).

    Returns
    -------
    matplotlib.axes.Axes
        Equal aspect and equal x and y limits, so the identity line is the diagonal.

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> line = {"slope": 1.1, "intercept": -0.2, "procedure": "Passing-Bablok"}
    >>> ax = method_scatter([1.0, 2.0, 3.0], [1.0, 2.1, 3.2], line=line, ccc=0.98)
    >>> ax.get_xlim() == ax.get_ylim(), ax.get_legend().get_texts()[-1].get_text()
    (True, 'CCC = 0.980')
    >>> plt.close(ax.figure)
    """
    axis_label = _axis_label(parameter)
    ref, tst = _pairs(reference, test)
    labels, levels = _group_levels(groups, ref.size, group_order)
    use_density = _use_density(density, ref.size, labels is not None)
    fit = _fitted_line(line)
    if ccc is not None and not isinstance(ccc, int | float):
        raise ValueError(f"ccc must be a number, got {ccc!r}")
    _check_key(key)
    lo = float(min(ref.min(), tst.min()))
    hi = float(max(ref.max(), tst.max()))
    lims = _axis_limits(lo, hi) if axis_limits is None else _checked_limits(axis_limits)

    context = style_context() if ax is None else contextlib.nullcontext()
    with context:
        if ax is None:
            _, ax = plt.subplots(figsize=figure_size("single", aspect=1.0))
        data_kwargs = dict(kwargs)
        if use_density:
            data_kwargs.setdefault("extent", (*lims, *lims))
        data_artists = _draw_data(ax, ref, tst, labels, levels, use_density, False, data_kwargs)
        handles = _scatter_lines(ax, lims, fit, _decimals(hi - lo) + 1)
        if ccc is not None:
            handles.append(Line2D([], [], linestyle="none", label=_ccc_text(ccc, ccc_ci)))
        ax.set_xlim(lims)
        ax.set_ylim(lims)
        ax.set_aspect("equal", adjustable="box")
        ax.set_xlabel(f"{fit_axis_name(reference_name)}, {axis_label}")
        ax.set_ylabel(f"{fit_axis_name(test_name)}, {axis_label}")
        if key == "legend":
            _legend_above(ax, handles, data_artists if labels is not None else [])
        elif key == "text":
            # the fitted line without its procedure's name (in the shared key), and the CCC
            texts = [h.get_label().split(": ", 1)[-1] for h in handles[1:]]
            _numbers_above(ax, texts)
    return ax


def _axis_limits(lo: float, hi: float) -> tuple[float, float]:
    """The range of the values with 5 % room on each side (1 unit when all are equal)."""
    pad = 0.05 * (hi - lo) if hi > lo else max(abs(hi) * 0.05, 1.0)
    return (lo - pad, hi + pad)


def _checked_limits(limits: Any) -> tuple[float, float]:
    low, high = (float(v) for v in limits)
    if not (math.isfinite(low) and math.isfinite(high) and low < high):
        raise ValueError(f"axis_limits must be two finite numbers, low < high, got {limits!r}")
    return low, high


def _fitted_line(line: Any) -> tuple[float, float, str] | None:
    """Slope, intercept and procedure of a given line (None when none is given)."""
    if line is None:
        return None
    if not (isinstance(line, Mapping) or isinstance(line, pd.Series)):
        raise ValueError(f"line must be a mapping, got {type(line).__name__}")
    slope, intercept = _get(line, "slope"), _get(line, "intercept")
    if slope is None or intercept is None:
        raise ValueError("line must hold keys 'slope' and 'intercept'")
    if not (math.isfinite(slope) and math.isfinite(intercept)):
        raise ValueError(
            f"line slope and intercept must be finite, got {slope!r} and {intercept!r}"
        )
    procedure = str(line["procedure"]) if "procedure" in line else "fitted line"
    return slope, intercept, procedure


def _scatter_lines(
    ax: Axes, lims: tuple[float, float], fit: tuple[float, float, str] | None, decimals: int
) -> list[Any]:
    """The identity line and the fitted line, if any; returns their legend handles."""
    identity = ax.axline(
        (lims[0], lims[0]),
        slope=1.0,
        color=NO_DIFFERENCE_COLOUR,
        linestyle=":",
        linewidth=0.8,
        label="identity",
        gid="identity",
        zorder=1,
    )
    if fit is None:
        return [identity]
    slope, intercept, procedure = fit
    fitted = ax.axline(
        (0.0, intercept),
        slope=slope,
        color=LINE_COLOUR,
        linewidth=1.0,
        label=f"{procedure}: y = {_linear_text(intercept, slope, decimals, 'x')}",
        gid="fit",
        zorder=3,
    )
    return [identity, fitted]


def _ccc_text(ccc: float, ccc_ci: tuple[float, float] | None) -> str:
    if not math.isfinite(ccc):
        return "CCC not estimable"
    text = f"CCC = {ccc:.3f}"
    if ccc_ci is not None and all(math.isfinite(v) for v in ccc_ci):
        text += f" ({ccc_ci[0]:.3f} to {ccc_ci[1]:.3f})"
    return text
