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
from matplotlib.patches import Patch
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

from cohort.domain.units import PARAMETERS
from cohort.plots.style import (
    AXIS_NAME_WIDTH,
    BAND_COLOUR,
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
REGRESSION_KEYS = (
    "bias_intercept",
    "bias_slope",
    "loa_low_intercept",
    "loa_low_slope",
    "loa_high_intercept",
    "loa_high_slope",
)
"""Keys of regression-based limits: each line is ``intercept + slope * mean``."""

_CI_KEYS = {
    "bias": ("bias_ci_low", "bias_ci_high"),
    "loa_low": ("loa_low_ci_low", "loa_low_ci_high"),
    "loa_high": ("loa_high_ci_low", "loa_high_ci_high"),
}


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


def _fixed(value: float, decimals: int) -> str:
    """Fixed-point text with a typographic minus sign."""
    text = f"{value:.{decimals}f}"
    return text.replace("-", "\N{MINUS SIGN}")


def _get(limits: Any, key: str) -> float | None:
    if key not in limits:
        return None
    value = limits[key]
    try:
        return float(value)
    except (TypeError, ValueError):
        raise ValueError(f"limits[{key!r}] must be a number, got {value!r}") from None


def _linear_text(intercept: float, slope: float, decimals: int, variable: str) -> str:
    """``"1.090 x − 0.05"``-style text of ``intercept + slope * variable``."""
    sign = "\N{MINUS SIGN}" if intercept < 0 else "+"
    return f"{_fixed(slope, 3)} {variable} {sign} {_fixed(abs(intercept), decimals)}"


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
        limits as intercept/slope pairs (:data:`REGRESSION_KEYS`). Nothing is drawn but the
        data if None.
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
    """
    axis_label = _axis_label(parameter)
    if limit_type not in LIMIT_TYPES:
        raise ValueError(f"limit_type must be one of {list(LIMIT_TYPES)}, got {limit_type!r}")
    ref, tst = _pairs(reference, test)
    if ratio and ((ref <= 0).any() or (tst <= 0).any()):
        raise ValueError(
            "ratio=True needs positive reference and test values, got "
            f"{int(((ref <= 0) | (tst <= 0)).sum())} pair(s) with a value <= 0"
        )
    labels, levels = _group_levels(groups, ref.size, group_order)
    use_density = _use_density(density, ref.size, labels is not None)
    mean = (ref + tst) / 2.0
    y = tst / ref if ratio else tst - ref

    context = style_context() if ax is None else contextlib.nullcontext()
    with context:
        if ax is None:
            _, ax = plt.subplots(figsize=figure_size("single", aspect=0.85))
        data_artists = _draw_data(ax, mean, y, labels, levels, use_density, ratio, dict(kwargs))
        if ratio:
            ax.set_yscale("log")
        no_difference = 1.0 if ratio else 0.0
        ax.axhline(no_difference, color="#888888", linewidth=0.6, linestyle=":", zorder=1)

        group_handles = data_artists if labels is not None else []
        line_handles = []
        if limits is not None:
            spread = float(np.ptp(y)) if y.size > 1 else float(abs(y[0]))
            decimals = 3 if ratio else _decimals(spread)
            line_handles = _draw_limits(ax, limits, mean, ratio, limit_type, decimals)
        ref_text, test_text = fit_axis_name(reference_name), fit_axis_name(test_name)
        ax.set_xlabel(_two_lines(f"mean of {ref_text}", f"and {test_text}, {axis_label}"))
        if ratio:
            ax.set_ylabel(_two_lines(f"ratio {test_text}", f"/ {ref_text}"))
            _ratio_ticks(ax)
        else:
            ax.set_ylabel(_two_lines(f"{test_text} −", f"{ref_text}, {axis_label}"))
        _legend_above(ax, line_handles, group_handles)
    return ax


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


def _draw_limits(
    ax: Axes, limits: Any, mean: np.ndarray, ratio: bool, limit_type: str, decimals: int
) -> list[Any]:
    if not (isinstance(limits, Mapping) or isinstance(limits, pd.Series)):
        raise ValueError(
            f"limits must be a mapping (a row of the agreement table), got {type(limits).__name__}"
        )
    regression = {k: _get(limits, k) for k in REGRESSION_KEYS}
    has_regression = all(v is not None and math.isfinite(v) for v in regression.values())
    if limit_type == "regression" and not has_regression:
        absent = [k for k, v in regression.items() if v is None or not math.isfinite(v)]
        raise ValueError(f"limit_type='regression' needs finite limits keys {absent!r}")
    use_regression = limit_type == "regression" or (limit_type == "auto" and has_regression)
    level = _get(limits, "confidence_level")
    ci_name = f"{level:.0%} CI" if level is not None and math.isfinite(level) else "CI"
    handles: list[Any] = []

    def fmt(v: float) -> str:
        return _fixed(v, decimals)

    if use_regression:
        xs = np.linspace(float(mean.min()), float(mean.max()), 200)
        for name, style, text in (
            ("bias", "-", "bias"),
            ("loa_low", "--", "limits of agreement"),
            ("loa_high", "--", None),
        ):
            a, b = regression[f"{name}_intercept"], regression[f"{name}_slope"]
            line_y = a + b * xs  # type: ignore[operator]
            if ratio and (line_y <= 0).any():
                raise ValueError(f"ratio=True needs positive {name} regression lines")
            (line,) = ax.plot(
                xs,
                line_y,
                color=LINE_COLOUR,
                linestyle=style,
                linewidth=1.0,
                gid=f"{name}-regression",
                zorder=3,
            )
            if name == "bias":
                line.set_label(f"bias = {_linear_text(a, b, decimals, '× mean')}")  # type: ignore[arg-type]
                handles.append(line)
            elif text is not None:
                line.set_label(f"{text} (regression on mean)")
                handles.append(line)
        return handles

    required = {k: _get(limits, k) for k in ("bias", "loa_low", "loa_high")}
    absent = [k for k, v in required.items() if v is None]
    if absent:
        raise ValueError(f"limits must hold keys {absent!r} for constant limits")
    values = {k: float(v) for k, v in required.items()}  # type: ignore[arg-type]
    if ratio:
        nonpositive = [k for k, v in values.items() if math.isfinite(v) and v <= 0]
        if nonpositive:
            raise ValueError(f"ratio=True needs positive limits, got {nonpositive!r} <= 0")
    band_drawn = False
    band_missing = []
    for name, style in (("bias", "-"), ("loa_low", "--"), ("loa_high", "--")):
        value = values[name]
        if math.isfinite(value):
            ax.axhline(value, color=LINE_COLOUR, linestyle=style, linewidth=1.0, gid=name, zorder=3)
        low, high = (_get(limits, k) for k in _CI_KEYS[name])
        if low is not None and high is not None:
            if math.isfinite(low) and math.isfinite(high):
                ax.axhspan(
                    low,
                    high,
                    facecolor=BAND_COLOUR,
                    alpha=0.55,
                    linewidth=0.0,
                    zorder=0.5,
                    gid=f"{name}-ci",
                )
                band_drawn = True
            else:
                band_missing.append(name)

    if math.isfinite(values["bias"]):
        bias_text = f"bias {fmt(values['bias'])}"
        low, high = (_get(limits, k) for k in _CI_KEYS["bias"])
        if low is not None and high is not None and math.isfinite(low) and math.isfinite(high):
            bias_text += f" ({ci_name} {fmt(low)} to {fmt(high)})"
    else:
        bias_text = "bias not estimable"
    handles.append(Line2D([], [], color=LINE_COLOUR, linestyle="-", label=bias_text))
    if math.isfinite(values["loa_low"]) and math.isfinite(values["loa_high"]):
        loa_text = f"limits of agreement {fmt(values['loa_low'])} to {fmt(values['loa_high'])}"
    else:
        loa_text = "limits of agreement not estimable"
    handles.append(Line2D([], [], color=LINE_COLOUR, linestyle="--", label=loa_text))
    if band_drawn:
        handles.append(Patch(facecolor=BAND_COLOUR, alpha=0.55, label=f"{ci_name} (shaded)"))
    if band_missing:
        handles.append(
            Line2D(
                [],
                [],
                linestyle="none",
                label=f"{ci_name} not estimable: {', '.join(band_missing)}",
            )
        )
    return handles


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
    """
    axis_label = _axis_label(parameter)
    ref, tst = _pairs(reference, test)
    labels, levels = _group_levels(groups, ref.size, group_order)
    use_density = _use_density(density, ref.size, labels is not None)
    fit = None
    if line is not None:
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
        fit = (slope, intercept, procedure)
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
        group_handles = data_artists if labels is not None else []
        handles: list[Any] = []
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
        handles.append(identity)
        if fit is not None:
            slope, intercept, procedure = fit
            decimals = _decimals(hi - lo) + 1
            fitted = ax.axline(
                (0.0, intercept),
                slope=slope,
                color=LINE_COLOUR,
                linewidth=1.0,
                label=f"{procedure}: y = {_linear_text(intercept, slope, decimals, 'x')}",
                gid="fit",
                zorder=3,
            )
            handles.append(fitted)
        if ccc is not None:
            if math.isfinite(ccc):
                text = f"CCC = {ccc:.3f}"
                if ccc_ci is not None and all(math.isfinite(v) for v in ccc_ci):
                    text += f" ({ccc_ci[0]:.3f} to {ccc_ci[1]:.3f})"
            else:
                text = "CCC not estimable"
            handles.append(Line2D([], [], linestyle="none", label=text))
        ax.set_xlim(lims)
        ax.set_ylim(lims)
        ax.set_aspect("equal", adjustable="box")
        ax.set_xlabel(f"{fit_axis_name(reference_name)}, {axis_label}")
        ax.set_ylabel(f"{fit_axis_name(test_name)}, {axis_label}")
        _legend_above(ax, handles, group_handles)
    return ax
