"""Sizes and shared scales of the figures: grid widths, panel axes, legend room and the
colour limits shared by the panels of a set.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from cohort.plots.bullseye_grid import COLORBAR_ROOM_MM
from cohort.plots.style import FIGURE_WIDTHS_MM, MM_PER_INCH

PANEL_MM = 45.0
"""Width of one bullseye panel in the grids (mm); figures are at most double-column wide."""


def _fit_width(fig: Figure, square: bool = False) -> Figure:
    """Make room for the legend above a single axes: widen ``fig`` (up to the double-column
    width) so the legend is no wider than the axes, and reserve a band above the axes for it.

    Constrained layout would otherwise treat a legend wider than its axes as a right margin
    and shrink the axes, or long method and group names would be cut off. ``square``: the
    axes keep equal aspect (method scatter), so the height follows the width.
    """
    if len(fig.axes) != 1 or fig.axes[0].get_legend() is None:
        return fig
    ax = fig.axes[0]
    legend = ax.get_legend()
    fig.draw_without_rendering()
    extent = legend.get_window_extent(fig.canvas.get_renderer())
    legend_w, legend_h = extent.width / fig.dpi, extent.height / fig.dpi
    width, height = fig.get_size_inches()
    slot = ax.get_position(original=True)
    left, below = slot.x0 * width, slot.y0 * height
    right = 0.1  # inches: constrained layout's padding and the last tick label
    limit = FIGURE_WIDTHS_MM["double"] / MM_PER_INCH
    new_width = min(limit, max(width, left + legend_w + 0.08))
    new_height = height
    if square:
        new_height = (new_width - left - right) + below + legend_h + 0.2
        ax.set_anchor("SW")  # under the legend, which starts at the axes' left edge
    legend.set_in_layout(False)
    fig.set_size_inches(new_width, new_height)
    fig.get_layout_engine().set(rect=(0.0, 0.0, 1.0, 1.0 - (legend_h + 0.12) / new_height))
    return fig


def _shared_limits(values: np.ndarray, signed: bool) -> dict[str, float]:
    """Colour limits shared by panels: symmetric about 0 for signed quantities; from 0 (or
    the lowest value, if below 0) to the highest for levels, so colour steps stay
    proportional to the value instead of magnifying a narrow range."""
    finite = values[np.isfinite(values)]
    if not finite.size:
        return {}
    if signed:
        half = float(np.max(np.abs(finite)))
        return {"vmin": -half, "vmax": half} if half > 0 else {}
    low, high = min(0.0, float(finite.min())), float(finite.max())
    return {"vmin": low, "vmax": high} if low < high else {}


def _grid_width(n_columns: int) -> float:
    """Figure width in mm for a bullseye grid of ``n_columns`` panels plus its colour bar."""
    return min(FIGURE_WIDTHS_MM["double"], COLORBAR_ROOM_MM + n_columns * PANEL_MM)
