"""Sizes and shared scales of the figures: grid widths, panel axes, legend room, the
colour limits shared by the panels of a set, and the panels of a multi-panel figure (one
per test method: at most four to a row, shared axes, a letter and a title each).
"""

from __future__ import annotations

import math
import string
from collections.abc import Sequence

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from cohort.plots.bullseye_grid import COLORBAR_ROOM_MM
from cohort.plots.limit_lines import NUMBERS_SIZE
from cohort.plots.style import FIGURE_WIDTHS_MM, figure_size, fit_label

PANEL_MM = 45.0
"""Width of one bullseye panel in the grids (mm); figures are at most double-column wide."""

MAX_PANELS_PER_ROW = 4
"""Panels in a row of a multi-panel figure; more wrap to the next row (about 45 mm each at
double-column width, the smallest that keeps 6.5 pt tick labels apart; common practice)."""

KEY_ROOM_IN = 0.55
"""Height kept for the shared legend and the axis labels of a panel figure (inches)."""

HEADING_ROOM_IN = 0.45
"""Height kept above each row of panels for their titles and numbers (inches)."""

TITLE_SIZE = 7.5
"""Font size (pt) of panel letters and titles."""


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


def _panel_grid(
    blocks: Sequence[int], *, aspect: float, sharex: bool = True, sharey: bool = True
) -> tuple[Figure, list[Axes]]:
    """A figure with one axes per panel, in reading order.

    ``blocks``: numbers of panels, each block starting a new row (e.g. one block per field
    strength), wrapped at :data:`MAX_PANELS_PER_ROW`. One panel: single-column width; more:
    double-column width (:data:`cohort.plots.style.FIGURE_WIDTHS_MM`). ``aspect``: panel
    height / width. Shared axes show tick labels on the outer panels only; a slot left
    empty in a wrapped row is hidden and the panel above it shows its x tick labels. Call it
    inside :func:`cohort.plots.style.style_context`.

    Examples
    --------
    >>> import matplotlib; matplotlib.use("Agg")
    >>> fig, axes = _panel_grid([5], aspect=1.0)
    >>> len(axes), [ax.get_subplotspec().get_geometry()[:2] for ax in axes[:1]]
    (5, [(2, 4)])
    >>> plt.close(fig)
    """
    if not blocks or any(n < 1 for n in blocks):
        raise ValueError(f"blocks must be positive numbers of panels, got {list(blocks)!r}")
    ncols = min(MAX_PANELS_PER_ROW, max(blocks))
    positions: list[tuple[int, int]] = []
    nrows = 0
    for n in blocks:
        positions += [(nrows + k // ncols, k % ncols) for k in range(n)]
        nrows += math.ceil(n / ncols)
    width = "single" if len(positions) == 1 else "double"
    width_in = figure_size(width)[0]
    height_in = nrows * (aspect * width_in / ncols + HEADING_ROOM_IN) + KEY_ROOM_IN
    fig, grid = plt.subplots(
        nrows,
        ncols,
        figsize=(width_in, height_in),
        sharex=sharex,
        sharey=sharey,
        squeeze=False,
        layout="constrained",
    )
    used = set(positions)
    for i in range(nrows):
        for j in range(ncols):
            if (i, j) in used:
                continue
            grid[i, j].set_visible(False)
            if sharex and i > 0 and (i - 1, j) in used:
                grid[i - 1, j].xaxis.set_tick_params(labelbottom=True)
    return fig, [grid[i, j] for i, j in positions]


def _letter(k: int) -> str:
    """Panel letter ``k`` (0-based): a ... z, then aa, ab, ..."""
    letters = string.ascii_lowercase
    return letters[k] if k < len(letters) else _letter(k // len(letters) - 1) + letters[k % 26]


def _panel_heading(ax: Axes, title: str, letter: str | None, width: int = 28) -> None:
    """The panel's ``title`` (fitted to ``width`` characters a line) centred above the axes
    and its ``letter`` (bold) at the left, both raised above the numbers a plot wrote there
    (the text with gid ``"numbers"``)."""
    numbers = [t for t in ax.texts if t.get_gid() == "numbers"]
    lines = sum(t.get_text().count("\n") + 1 for t in numbers)
    pad = 4.0 + lines * NUMBERS_SIZE * 1.25 + (2.0 if lines else 0.0)
    ax.set_title(fit_label(title, width=width), fontsize=TITLE_SIZE, pad=pad)
    if letter is not None:
        ax.set_title(letter, loc="left", fontsize=TITLE_SIZE + 0.5, fontweight="bold", pad=pad)


def _title_width(n_panels: int) -> int:
    """Characters a line of a panel title may take (the panel's width at 7.5 pt, less the
    room of the letter)."""
    columns = min(MAX_PANELS_PER_ROW, n_panels)
    panel_mm = (FIGURE_WIDTHS_MM["single" if n_panels == 1 else "double"]) / columns
    return max(10, int(panel_mm / 1.6) - 6)


def _outer_labels(fig: Figure, axes: Sequence[Axes], xlabel: str, ylabel: str) -> None:
    """One x and one y label for all panels (figure-level), instead of one per panel."""
    for ax in axes:
        ax.set_xlabel("")
        ax.set_ylabel("")
    fig.supxlabel(xlabel, fontsize=7.0)
    fig.supylabel(ylabel, fontsize=7.0)


def _fit_height(fig: Figure, axes: Sequence[Axes]) -> None:
    """Give ``fig`` the height at which its equal-aspect panels (method scatter) fill their
    slots, so no gap is left above and below them.

    The layout is measured with the aspect released: an equal-aspect axes shrunk inside its
    slot lets constrained layout count its title inside the unused room, so its margins
    would be too small to measure from.
    """
    aspects = [ax.get_aspect() for ax in axes]
    for ax in axes:
        ax.set_aspect("auto")
    fig.draw_without_rendering()
    width, height = fig.get_size_inches()
    extra = min(ax.get_position().width * width - ax.get_position().height * height for ax in axes)
    rows = len({ax.get_subplotspec().rowspan.start for ax in axes})
    fig.set_size_inches(width, height + rows * extra)
    for ax, aspect in zip(axes, aspects, strict=True):
        ax.set_aspect(aspect, adjustable="box")
