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
from cohort.plots.limit_lines import _draw_limits, _get, _linear_text
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
    return labels, [g for g in order if g in present]


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


def _blank(label: str = "") -> Line2D:
    return Line2D([], [], linestyle="none", marker="none", label=label)


def _legend_above(ax: Axes, line_handles: list[Any], group_handles: list[Any]) -> None:
    """Legend outside the axes, above them, so it never covers data.

    Two columns when there are groups (lines left, groups right, padded to equal length so
    they do not mix), otherwise one column for long labels.
    """
    if group_handles and line_handles:
        rows = max(len(line_handles), len(group_handles))
        lines = line_handles + [_blank() for _ in range(rows - len(line_handles))]
        groups = group_handles + [_blank() for _ in range(rows - len(group_handles))]
        handles, ncols = lines + groups, 2
    else:
        handles = line_handles or group_handles
        if not handles:
            return
        longest = max(len(h.get_label()) for h in handles)
        ncols = 1 if longest > 30 or len(handles) < 2 else 2
    ax.legend(
        handles=handles,
        loc="lower left",
        bbox_to_anchor=(0.0, 1.02),
        ncols=ncols,
        borderaxespad=0.0,
        handlelength=1.6,
        columnspacing=1.2,
        frameon=False,
    )


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
        line_handles = [] if limits is None else _limits(ax, limits, mean, y, ratio, limit_type)
        _label_bland_altman(ax, reference_name, test_name, axis_label, ratio)
        _legend_above(ax, line_handles, data_artists if labels is not None else [])
    return ax


def _no_difference_line(ax: Axes, ratio: bool) -> None:
    """Dotted line at no difference (ratio 1 on a log axis)."""
    if ratio:
        ax.set_yscale("log")
    no_difference = 1.0 if ratio else 0.0
    ax.axhline(no_difference, color="#888888", linewidth=0.6, linestyle=":", zorder=1)


def _limits(
    ax: Axes, limits: Any, mean: np.ndarray, y: np.ndarray, ratio: bool, limit_type: str
) -> list[Any]:
    """The limit lines, their numbers given to about three significant digits of the spread."""
    spread = float(np.ptp(y)) if y.size > 1 else float(abs(y[0]))
    decimals = 3 if ratio else _decimals(spread)
    return _draw_limits(ax, limits, mean, ratio, limit_type, decimals)


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
    groups, group_order, parameter, density, reference_name, test_name, ax, **kwargs
        As in :func:`bland_altman_plot`.

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
    lo = float(min(ref.min(), tst.min()))
    hi = float(max(ref.max(), tst.max()))
    pad = 0.05 * (hi - lo) if hi > lo else max(abs(hi) * 0.05, 1.0)
    lims = (lo - pad, hi + pad)

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
        _legend_above(ax, handles, data_artists if labels is not None else [])
    return ax


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
        color="#888888",
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
