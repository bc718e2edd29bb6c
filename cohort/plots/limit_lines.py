"""Bias and limits-of-agreement lines of a Bland-Altman plot, their CI bands and legend texts.

The numbers are a row of the agreement table (:mod:`cohort.analysis.agreement_table`):
constant limits ``bias``, ``loa_low``, ``loa_high`` with their CIs, or regression-based
limits (Bland & Altman 1999) as intercept/slope pairs. Nothing is estimated here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from cohort.domain.wording import interval_label
from cohort.plots.style import BAND_COLOUR, LINE_COLOUR

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
    ax: Axes, limits: Any, mean: np.ndarray, ratio: bool, limit_type: str, decimals: int
) -> list[Any]:
    """Bias and limits of agreement (regression lines or constant lines with CI bands);
    returns the legend handles."""
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
        return _regression_lines(ax, regression, mean, ratio, decimals)
    values = _constant_limits(limits, ratio)
    drawn, not_estimable = _constant_lines(ax, limits, values)
    return _constant_handles(limits, values, decimals, ci_name, drawn, not_estimable)


def _regression_lines(
    ax: Axes, regression: dict[str, Any], mean: np.ndarray, ratio: bool, decimals: int
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
            line.set_label(f"{text} (regression on mean)")
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
) -> list[Any]:
    """Legend entries of constant limits: the numbers, and the CI bands drawn or missing."""
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
    handles.append(Line2D([], [], color=LINE_COLOUR, linestyle="--", label=loa_text))
    if band_drawn:
        handles.append(Patch(facecolor=BAND_COLOUR, alpha=0.55, label=f"{ci_name} (shaded)"))
    if band_missing:
        label = f"{ci_name} not estimable: {', '.join(band_missing)}"
        handles.append(Line2D([], [], linestyle="none", label=label))
    return handles
