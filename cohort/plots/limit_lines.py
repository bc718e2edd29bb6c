"""Bias and limits-of-agreement lines of a Bland-Altman plot, their CI bands and legend texts;
the keys of agreement plots: a legend above one plot, or the numbers above a panel and one
legend shared by the panels of a figure (:func:`limit_key`, :func:`scatter_key`,
:func:`group_key`, :func:`shared_legend`).

The numbers are a row of the agreement table (:mod:`cohort.analysis.agreement_table`):
constant limits ``bias``, ``loa_low``, ``loa_high`` with their CIs, or regression-based
limits (Bland & Altman 1999) as intercept/slope pairs. Nothing is estimated here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.legend import Legend
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from cohort.domain.wording import interval_label
from cohort.plots.style import BAND_COLOUR, LINE_COLOUR, fit_label, group_styles

REGRESSION_KEYS = (
    "bias_intercept",
    "bias_slope",
    "loa_low_intercept",
    "loa_low_slope",
    "loa_high_intercept",
    "loa_high_slope",
)
"""Keys of regression-based limits: each line is ``intercept + slope * mean``."""

NUMBERS_SIZE = 6.5
"""Font size (pt) of the numbers above a panel."""

NO_DIFFERENCE_COLOUR = "#888888"
"""Colour of the dotted no-difference (ratio 1, identity) line."""

_CI_KEYS = {
    "bias": ("bias_ci_low", "bias_ci_high"),
    "loa_low": ("loa_low_ci_low", "loa_low_ci_high"),
    "loa_high": ("loa_high_ci_low", "loa_high_ci_high"),
}


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


def _draw_limits(
    ax: Axes,
    limits: Any,
    mean: np.ndarray,
    ratio: bool,
    limit_type: str,
    decimals: int,
    compact: bool = False,
) -> list[Any]:
    """Bias and limits of agreement (regression lines or constant lines with CI bands);
    returns the legend handles (``compact``: short labels, for the numbers of a panel whose
    figure has one shared key, :func:`limit_key`)."""
    if not (isinstance(limits, Mapping) or isinstance(limits, pd.Series)):
        raise ValueError(
            f"limits must be a mapping (a row of the agreement table), got {type(limits).__name__}"
        )
    regression = {k: _get(limits, k) for k in REGRESSION_KEYS}
    has_regression = all(v is not None and math.isfinite(v) for v in regression.values())
    if limit_type == "regression" and not has_regression:
        absent = [k for k, v in regression.items() if v is None or not math.isfinite(v)]
        raise ValueError(f"limit_type='regression' needs finite limits keys {absent!r}")
    level = _get(limits, "confidence_level")
    ci_name = interval_label(level)
    if limit_type == "regression" or (limit_type == "auto" and has_regression):
        return _regression_lines(ax, regression, mean, ratio, decimals, compact)
    values = _constant_limits(limits, ratio)
    drawn, not_estimable = _constant_lines(ax, limits, values)
    handles = _constant_handles(limits, values, decimals, ci_name, drawn, not_estimable, compact)
    if ratio and compact:  # the key names the line "geometric mean ratio"
        handles[0].set_label(handles[0].get_label().replace("bias", "mean ratio", 1))
    return handles


def _regression_lines(
    ax: Axes,
    regression: dict[str, Any],
    mean: np.ndarray,
    ratio: bool,
    decimals: int,
    compact: bool = False,
) -> list[Any]:
    """Regression-based bias and limits, each ``intercept + slope * mean`` over the data."""
    handles: list[Any] = []
    xs = np.linspace(float(mean.min()), float(mean.max()), 200)
    for name, style, text in (
        ("bias", "-", "bias"),
        ("loa_low", "--", "limits of agreement"),
        ("loa_high", "--", None),
    ):
        a, b = regression[f"{name}_intercept"], regression[f"{name}_slope"]
        line_y = a + b * xs
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
            line.set_label(f"bias = {_linear_text(a, b, decimals, '× mean')}")
            handles.append(line)
        elif text is not None:
            line.set_label(
                "limits: regression on mean" if compact else f"{text} (regression on mean)"
            )
            handles.append(line)
    return handles


def _constant_limits(limits: Any, ratio: bool) -> dict[str, float]:
    required = {k: _get(limits, k) for k in ("bias", "loa_low", "loa_high")}
    absent = [k for k, v in required.items() if v is None]
    if absent:
        raise ValueError(f"limits must hold keys {absent!r} for constant limits")
    values = {k: float(v) for k, v in required.items()}  # type: ignore[arg-type]
    if ratio:
        nonpositive = [k for k, v in values.items() if math.isfinite(v) and v <= 0]
        if nonpositive:
            raise ValueError(f"ratio=True needs positive limits, got {nonpositive!r} <= 0")
    return values


def _constant_lines(ax: Axes, limits: Any, values: dict[str, float]) -> tuple[bool, list[str]]:
    """Horizontal bias and limit lines with their CI bands; returns whether a band was drawn
    and the lines whose CI is given but not finite."""
    band_drawn = False
    band_missing = []
    for name, style in (("bias", "-"), ("loa_low", "--"), ("loa_high", "--")):
        value = values[name]
        if math.isfinite(value):
            ax.axhline(value, color=LINE_COLOUR, linestyle=style, linewidth=1.0, gid=name, zorder=3)
        low, high = (_get(limits, k) for k in _CI_KEYS[name])
        if low is None or high is None:
            continue
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
    return band_drawn, band_missing


def _constant_handles(
    limits: Any,
    values: dict[str, float],
    decimals: int,
    ci_name: str,
    band_drawn: bool,
    band_missing: list[str],
    compact: bool = False,
) -> list[Any]:
    """Legend entries of constant limits: the numbers, and the CI bands drawn or missing
    (``compact``: "limits" for "limits of agreement", and the lines without a CI not named,
    for the few words above a panel; the caption names them)."""
    if math.isfinite(values["bias"]):
        bias_text = f"bias {_fixed(values['bias'], decimals)}"
        low, high = (_get(limits, k) for k in _CI_KEYS["bias"])
        if low is not None and high is not None and math.isfinite(low) and math.isfinite(high):
            bias_text += f" ({ci_name} {_fixed(low, decimals)} to {_fixed(high, decimals)})"
    else:
        bias_text = "bias not estimable"
    handles: list[Any] = [Line2D([], [], color=LINE_COLOUR, linestyle="-", label=bias_text)]
    if math.isfinite(values["loa_low"]) and math.isfinite(values["loa_high"]):
        low_text, high_text = (_fixed(values[k], decimals) for k in ("loa_low", "loa_high"))
        loa_text = f"limits of agreement {low_text} to {high_text}"
    else:
        loa_text = "limits of agreement not estimable"
    if compact:
        loa_text = loa_text.replace("limits of agreement", "limits")
    handles.append(Line2D([], [], color=LINE_COLOUR, linestyle="--", label=loa_text))
    if band_drawn:
        handles.append(Patch(facecolor=BAND_COLOUR, alpha=0.55, label=f"{ci_name} (shaded)"))
    if band_missing:
        label = f"{ci_name} not estimable" + ("" if compact else f": {', '.join(band_missing)}")
        handles.append(Line2D([], [], linestyle="none", label=label))
    return handles


def limit_key(
    *,
    ratio: bool = False,
    regression: bool = False,
    bands: bool = False,
    level: float | None = None,
) -> list[Any]:
    """Legend entries, without numbers, for the lines of Bland-Altman panels that share one
    key: the no-difference line, bias, limits of agreement and (``bands``) the shaded CIs
    of the ``level`` given (a fraction, e.g. 0.95).

    Examples
    --------
    >>> [h.get_label() for h in limit_key(bands=True, level=0.95)]
    ['no difference', 'bias', 'limits of agreement', '95% CI (shaded)']
    """
    suffix = " (regression on mean)" if regression else ""
    bias = "geometric mean ratio" if ratio and not regression else "bias"
    handles: list[Any] = [
        Line2D([], [], color=NO_DIFFERENCE_COLOUR, linestyle=":", linewidth=0.8,
               label="ratio 1" if ratio else "no difference"),
        Line2D([], [], color=LINE_COLOUR, linestyle="-", label=bias + suffix),
        Line2D([], [], color=LINE_COLOUR, linestyle="--", label="limits of agreement" + suffix),
    ]  # fmt: skip
    if bands:
        label = f"{interval_label(level)} (shaded)"
        handles.append(Patch(facecolor=BAND_COLOUR, alpha=0.55, label=label))
    return handles


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


def _numbers_above(ax: Axes, texts: Sequence[str]) -> None:
    """The numbers of a panel as lines of text just above the axes (gid ``"numbers"``), where
    they never cover data; a title set later must be raised above them (its ``pad``)."""
    if not texts:
        return
    ax.annotate(
        "\n".join(texts),
        xy=(0.5, 1.0),
        xycoords="axes fraction",
        xytext=(0.0, 3.0),
        textcoords="offset points",
        ha="center",
        va="bottom",
        fontsize=NUMBERS_SIZE,
        linespacing=1.25,
        annotation_clip=False,
        gid="numbers",
    )


def scatter_key(procedure: str | None = "Passing-Bablok") -> list[Any]:
    """Legend entries, without numbers, for method-comparison panels that share one key: the
    identity line and (unless ``procedure`` is None) the fitted line of that procedure."""
    handles: list[Any] = [
        Line2D([], [], color=NO_DIFFERENCE_COLOUR, linestyle=":", linewidth=0.8, label="identity")
    ]
    if procedure is not None:
        handles.append(Line2D([], [], color=LINE_COLOUR, linewidth=1.0, label=f"{procedure} fit"))
    return handles


def group_key(
    levels: Sequence[object], counts: Mapping[object, int] | None = None, line: bool = False
) -> list[Any]:
    """Legend entries of the groups, in the colours and markers the plots give them
    (:func:`cohort.plots.style.group_styles` of the same ``levels``), with ``n = counts`` when
    given; ``line``: a line through the marker (paired lines)."""
    styles = group_styles(levels)
    handles = []
    for level in levels:
        colour, marker = styles[level]
        label = fit_label(level)
        if counts is not None:
            label += f" (n = {int(counts.get(level, 0))})"
        handles.append(
            Line2D([], [], color=colour, marker=marker, markersize=3.5, label=label,
                   linestyle="-" if line else "none", linewidth=0.8)
        )  # fmt: skip
    return handles


def shared_legend(
    fig: Figure, line_handles: Sequence[Any], group_handles: Sequence[Any] = ()
) -> Legend | None:
    """One legend for all panels of ``fig``, above them (constrained layout keeps the room).

    The first of these layouts that fits the figure's width: all entries in one row; the
    lines in a row and the groups in the next (at least three columns); the lines in a
    column and the groups in the next; then rows of fewer columns, lines and groups never
    mixed in a row.

    Examples
    --------
    >>> import matplotlib; matplotlib.use("Agg")
    >>> import matplotlib.pyplot as plt
    >>> fig, axes = plt.subplots(1, 2, layout="constrained")
    >>> legend = shared_legend(fig, scatter_key())
    >>> [t.get_text() for t in legend.get_texts()]
    ['identity', 'Passing-Bablok fit']
    >>> plt.close(fig)
    """
    lines, groups = list(line_handles), list(group_handles)
    if not lines and not groups:
        return None
    renderer = fig.canvas.get_renderer()
    widest = max(len(lines), len(groups))
    by_rows = [(n, _blocks_by_column([lines, groups], n)) for n in range(widest, 0, -1)]
    layouts = [(len(lines) + len(groups), lines + groups)]
    layouts += [(n, h) for n, h in by_rows if n >= 3]
    if lines and groups:  # a column each (legend columns fill top to bottom)
        rows = max(len(lines), len(groups))
        pad = [_blank() for _ in range(rows)]
        layouts.append((2, (lines + pad)[:rows] + (groups + pad)[:rows]))
    layouts += [(n, h) for n, h in by_rows if n < 3]
    legend = None
    for ncols, handles in layouts:
        if legend is not None:
            legend.remove()
        legend = fig.legend(
            handles=handles,
            loc="outside upper center",
            ncols=ncols,
            frameon=False,
            handlelength=1.6,
            columnspacing=1.2,
        )
        if legend.get_window_extent(renderer).width <= 0.98 * fig.bbox.width:
            break
    return legend


def _blocks_by_column(blocks: Sequence[list[Any]], ncols: int) -> list[Any]:
    """Handles in the order a legend of ``ncols`` columns fills them (column by column) so
    that each block starts a new row: blocks padded with blank entries to full rows."""
    rows: list[list[Any]] = []
    for block in blocks:
        for start in range(0, len(block), ncols):
            row = block[start : start + ncols]
            rows.append(row + [_blank() for _ in range(ncols - len(row))])
    return [row[j] for j in range(ncols) for row in rows]
