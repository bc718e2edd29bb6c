"""Forest panels of several test methods against one reference: which method is good enough.

Methods are rows (top to bottom in the order given), panels are columns: the limits of
agreement of a parameter (difference, test minus reference, in the parameter's unit), a
concordance correlation coefficient, or a segment-level sensitivity. Each row shows an
estimate with its interval; a limits row shows both limits of agreement (Bland & Altman
1986, Lancet i:307-310), each with its interval, joined by a thin line, and the bias as the
marker. Acceptance declared in advance is drawn per panel: a band (-L, +L) for the limits
(Bland & Altman 1999, Stat Methods Med Res 8:135-160, judge the limits against a clinically
acceptable difference fixed beforehand), a criterion line for a coefficient or a sensitivity;
the acceptable side is shaded lightly.

A verdict is never shown by colour alone: each verdict has its own marker shape
(:data:`VERDICT_STYLES`), and a word per method may be written at the right of each tier of
panels. Nothing is estimated here: estimates, intervals, criteria and verdicts are given.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure, SubFigure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator

from cohort.domain.acceptance import VERDICTS
from cohort.domain.units import PARAMETERS
from cohort.plots.style import (
    LINE_COLOUR,
    MM_PER_INCH,
    OKABE_ITO,
    figure_size,
    fit_label,
    style_context,
)

PANEL_KINDS: tuple[str, ...] = ("limits", "ccc", "sensitivity")
"""What a panel shows: limits of agreement, Lin's CCC, or a sensitivity (0 to 1)."""

VERDICT_WORDS: MappingProxyType[str, str] = MappingProxyType(
    {
        "meets": "meets",
        "fails": "fails",
        "inconclusive": "inconclusive",
        "not-assessed": "not assessed",
    }
)
"""The word written for each verdict."""


@dataclass(frozen=True)
class VerdictStyle:
    """How a verdict is drawn: colour (Okabe-Ito), marker shape and whether it is filled."""

    colour: str
    marker: str
    filled: bool


# Shapes differ for every verdict so that greyscale print and colour-vision deficiencies
# keep them apart (Wong 2011, Nature Methods 8:441: do not rely on colour alone).
VERDICT_STYLES: MappingProxyType[str, VerdictStyle] = MappingProxyType(
    {
        "meets": VerdictStyle(OKABE_ITO["bluish green"], "o", True),
        "fails": VerdictStyle(OKABE_ITO["vermillion"], "X", True),
        "inconclusive": VerdictStyle(OKABE_ITO["orange"], "D", False),
        "not-assessed": VerdictStyle(OKABE_ITO["black"], "s", False),  # neutral: no criterion
    }
)
"""Colour, marker and fill of each verdict."""

NO_VERDICT_STYLE = VerdictStyle(LINE_COLOUR, "o", True)
"""Rows without a verdict (no criteria declared)."""

ACCEPT_COLOUR = OKABE_ITO["bluish green"]
ACCEPT_ALPHA = 0.13
"""The acceptable side of a criterion, shaded lightly so that intervals stay legible."""
STRIPE_COLOUR = "#F2F2F2"
"""Every other method row is striped, to follow a row across panels."""

NOT_ESTIMABLE = "not estimable"
NO_RESULT = "no result"

ROW_MM = 5.0
"""Height of one method row (mm)."""
TIER_EXTRA_MM = 17.0
"""Height of a tier's titles, tick labels and axis label (mm)."""
LEGEND_MM = 9.0

_REQUIRED = ("method", "panel", "estimate", "ci_low", "ci_high")
_LIMIT_COLUMNS = ("low", "low_ci_low", "low_ci_high", "high", "high_ci_low", "high_ci_high")


@dataclass(frozen=True)
class ForestPanel:
    """One column of a forest figure.

    Parameters
    ----------
    key
        The value of ``rows["panel"]`` drawn here.
    kind
        One of :data:`PANEL_KINDS`.
    title
        Drawn above the panel (what it is about: a parameter or a finding).
    parameter
        For ``"limits"``: the parameter code, whose unit (:mod:`cohort.domain.units`) labels
        the x axis.
    band
        For ``"limits"``: the acceptance band ``(-L, +L)``, or None.
    criterion
        For ``"ccc"`` and ``"sensitivity"``: the minimum acceptable value, or None.
    xlabel
        Replaces the default axis label (quantity and unit).
    """

    key: str
    kind: str
    title: str
    parameter: str | None = None
    band: tuple[float, float] | None = None
    criterion: float | None = None
    xlabel: str | None = None

    def __post_init__(self) -> None:
        if self.kind not in PANEL_KINDS:
            raise ValueError(f"kind must be one of {list(PANEL_KINDS)}, got {self.kind!r}")
        if self.kind == "limits":
            if self.parameter not in PARAMETERS:
                raise ValueError(
                    f"parameter must be one of {sorted(PARAMETERS)} for a limits panel, "
                    f"got {self.parameter!r}"
                )
            if self.criterion is not None:
                raise ValueError(
                    f"criterion is for ccc and sensitivity panels; a limits panel takes band, "
                    f"got criterion={self.criterion!r}"
                )
            if self.band is not None:
                low, high = (float(v) for v in self.band)
                if not (math.isfinite(low) and math.isfinite(high) and low < high):
                    raise ValueError(
                        f"band must be two finite numbers, low < high, got {self.band!r}"
                    )
        else:
            if self.band is not None:
                raise ValueError(
                    f"band is for limits panels; a {self.kind} panel takes criterion, "
                    f"got band={self.band!r}"
                )
            if self.criterion is not None:
                top = 1.0
                bottom = -1.0 if self.kind == "ccc" else 0.0
                value = float(self.criterion)
                if not (math.isfinite(value) and bottom <= value <= top):
                    raise ValueError(
                        f"criterion of a {self.kind} panel must lie in [{bottom:g}, {top:g}], "
                        f"got {self.criterion!r}"
                    )

    @property
    def axis_label(self) -> str:
        """The x-axis label: quantity and unit."""
        if self.xlabel is not None:
            return self.xlabel
        if self.kind == "limits":
            return f"limits of agreement ({PARAMETERS[str(self.parameter)].unit})"
        # Both are unitless proportions of agreement; the axis says which.
        return "CCC" if self.kind == "ccc" else "sensitivity"


def verdict_style(verdict: object) -> VerdictStyle:
    """The style of a verdict; :data:`NO_VERDICT_STYLE` for None or NaN."""
    if verdict is None or (isinstance(verdict, float) and math.isnan(verdict)):
        return NO_VERDICT_STYLE
    if verdict not in VERDICT_STYLES:
        raise ValueError(f"verdict must be one of {list(VERDICTS)} or NaN, got {verdict!r}")
    return VERDICT_STYLES[str(verdict)]


def _checked(
    rows: pd.DataFrame, panels: Sequence[ForestPanel], methods: Sequence[str]
) -> pd.DataFrame:
    if not isinstance(rows, pd.DataFrame):
        raise ValueError(f"rows must be a pandas DataFrame, got {type(rows).__name__}")
    absent = [c for c in _REQUIRED if c not in rows.columns]
    if absent:
        raise ValueError(f"rows must have the columns {list(_REQUIRED)}, missing {absent}")
    if not panels or not all(isinstance(p, ForestPanel) for p in panels):
        raise ValueError(f"panels must be a non-empty sequence of ForestPanel, got {panels!r}")
    keys = [p.key for p in panels]
    if len(set(keys)) != len(keys):
        raise ValueError(f"panels must have distinct keys, got {keys!r}")
    if isinstance(methods, str) or not methods or len(set(methods)) != len(methods):
        raise ValueError(f"methods must be a non-empty sequence of distinct names, got {methods!r}")
    frame = rows.copy()
    frame["method"] = frame["method"].astype(str)
    frame["panel"] = frame["panel"].astype(str)
    for column, allowed, what in (("method", methods, "methods"), ("panel", keys, "panels")):
        stray = sorted(set(frame[column]) - {str(a) for a in allowed})
        if stray:
            raise ValueError(f"rows[{column!r}] holds {stray!r}, not among the {what} given")
    twice = frame.duplicated(["method", "panel"])
    if twice.any():
        first = frame.loc[twice, ["method", "panel"]].iloc[0].tolist()
        raise ValueError(f"rows must hold one row per (method, panel), got several for {first}")
    limit_keys = {p.key for p in panels if p.kind == "limits"}
    if limit_keys & set(frame["panel"]):
        missing = [c for c in ("low", "high") if c not in frame.columns]
        if missing:
            raise ValueError(f"rows of limits panels need the columns {missing}")
    for column in (*_REQUIRED[2:], *_LIMIT_COLUMNS):
        frame[column] = (
            pd.to_numeric(frame[column], errors="raise") if column in frame else math.nan
        )
    if "verdict" in frame.columns:
        for value in frame["verdict"]:
            verdict_style(value)  # raises on an unknown verdict
    else:
        frame["verdict"] = None
    return frame.set_index(["method", "panel"])


def _tier_sizes(tiers: Sequence[int] | None, n_panels: int) -> list[int]:
    if tiers is None:
        return [n_panels]
    sizes = [int(t) for t in tiers]
    if any(t < 1 for t in sizes) or sum(sizes) != n_panels:
        raise ValueError(
            f"tiers must be positive panel counts summing to the {n_panels} panels, got {tiers!r}"
        )
    return sizes


def method_forest(
    rows: pd.DataFrame,
    *,
    panels: Sequence[ForestPanel],
    methods: Sequence[str],
    labels: Mapping[str, str] | None = None,
    summary: Mapping[str, str] | None = None,
    tiers: Sequence[int] | None = None,
    width: str | float = "double",
    fig: Figure | None = None,
) -> Figure:
    """Forest panels: methods as rows, one panel per statistic and target.

    Parameters
    ----------
    rows
        Tidy table, one row per (method, panel): ``method, panel, estimate, ci_low,
        ci_high``; for limits panels also ``low, high`` (the limits of agreement, with
        ``estimate`` the bias) and optionally ``low_ci_low, low_ci_high, high_ci_low,
        high_ci_high``; optionally ``verdict`` (one of :data:`VERDICTS`, or NaN). A NaN
        estimate (or limit) is drawn as the words "not estimable"; a (method, panel) with no
        row as "no result".
    panels
        :class:`ForestPanel` per column, left to right (then tier by tier), lettered a, b, c...
    methods
        Method names, drawn top to bottom in this order.
    labels
        Display label per method (default: the name), fitted by
        :func:`~cohort.plots.style.fit_label`.
    summary
        A verdict per method (one of :data:`VERDICTS`), written as a word at the right of
        each tier; None: no words.
    tiers
        Panels per tier of panels, e.g. ``(3, 5)``; default one tier.
    width
        Figure width preset or mm (:func:`~cohort.plots.style.figure_size`), used when ``fig``
        is None; the height follows from the number of methods and tiers.
    fig
        Draw into this (empty) figure instead of a new one.

    Returns
    -------
    Figure
        One subfigure per tier; ``fig.axes`` lists the panels in order, then the verdict axes.

    Examples
    --------
    >>> rows = pd.DataFrame({"method": ["a", "b"], "panel": ["s", "s"],
    ...                      "estimate": [0.9, 0.7], "ci_low": [0.8, 0.5],
    ...                      "ci_high": [0.95, 0.85], "verdict": ["meets", "inconclusive"]})
    >>> panel = ForestPanel("s", "sensitivity", "Hemorrhage", criterion=0.8)
    >>> fig = method_forest(rows, panels=[panel], methods=["a", "b"])
    >>> [t.get_text() for t in fig.axes[0].get_yticklabels()]
    ['a', 'b']
    """
    panels = list(panels)
    frame = _checked(rows, panels, methods)
    sizes = _tier_sizes(tiers, len(panels))
    methods = [str(m) for m in methods]
    names = [fit_label((labels or {}).get(m, m)) for m in methods]
    if summary is not None:
        for method, verdict in summary.items():
            if verdict not in VERDICTS:
                raise ValueError(
                    f"summary[{method!r}] must be one of {list(VERDICTS)}, got {verdict!r}"
                )
    if fig is not None and (not isinstance(fig, Figure) or fig.axes or fig.subfigs):
        raise ValueError(f"fig must be an empty matplotlib Figure or None, got {fig!r}")
    with style_context():
        if fig is None:
            fig = Figure(figsize=_size(width, len(methods), len(sizes)), layout="constrained")
        tiers_of = fig.subfigures(len(sizes), 1, squeeze=False)[:, 0] if len(sizes) > 1 else [fig]
        start = 0
        for sub, size in zip(tiers_of, sizes, strict=True):
            part = panels[start : start + size]
            _draw_tier(sub, frame, part, start, methods, names, summary)
            start += size
        _legend(fig, frame, panels)
    return fig


def _size(width: str | float, n_methods: int, n_tiers: int) -> tuple[float, float]:
    width_in = figure_size(width)[0]
    height_mm = n_tiers * (TIER_EXTRA_MM + ROW_MM * max(n_methods, 2)) + LEGEND_MM
    return (width_in, height_mm / MM_PER_INCH)


def _draw_tier(
    sub: Figure | SubFigure,
    frame: pd.DataFrame,
    panels: list[ForestPanel],
    first: int,
    methods: list[str],
    names: list[str],
    summary: Mapping[str, str] | None,
) -> None:
    axes = sub.subplots(1, len(panels), squeeze=False, sharey=True)[0]
    for k, (ax, panel) in enumerate(zip(axes, panels, strict=True)):
        _draw_panel(ax, frame, panel, methods)
        ax.set_title(fit_label(panel.title, width=24, lines=2), loc="left")
        # The letter just left of the axes on the title's baseline, apart from the title.
        ax.annotate(
            panel_letter(first + k),
            xy=(0.0, 1.0),
            xycoords="axes fraction",
            xytext=(-3.0, 6.0),
            textcoords="offset points",
            ha="right",
            va="baseline",
            fontsize=8.0,
            fontweight="bold",
            gid="panel-letter",
        )
        ax.set_gid(f"panel:{panel.key}")
        ax.tick_params(axis="y", length=0, labelleft=k == 0)
    axes[0].set_yticks(range(len(methods)), labels=names)
    if summary is not None:
        _summary_axis(axes[-1], methods, summary)


def panel_letter(index: int) -> str:
    """The letter of panel ``index`` (0-based): a..z, then aa, ab... (common practice).

    Examples
    --------
    >>> panel_letter(0), panel_letter(7), panel_letter(26)
    ('a', 'h', 'aa')
    """
    if index < 0:
        raise ValueError(f"index must be >= 0, got {index!r}")
    letters = "abcdefghijklmnopqrstuvwxyz"
    return letters[index] if index < 26 else panel_letter(index // 26 - 1) + letters[index % 26]


def _summary_axis(ax: Axes, methods: list[str], summary: Mapping[str, str]) -> None:
    """The verdict word of each method at the right of the tier, as right-hand tick labels."""
    right = ax.secondary_yaxis("right")
    words = [VERDICT_WORDS.get(summary.get(m, ""), "") for m in methods]
    right.set_yticks(range(len(methods)), labels=words)
    right.tick_params(length=0)
    right.spines["right"].set_visible(False)
    right.set_gid("verdicts")
    for text, method in zip(right.get_yticklabels(), methods, strict=True):
        verdict = summary.get(method)
        if verdict in VERDICT_STYLES:
            text.set_color(VERDICT_STYLES[verdict].colour)
            text.set_fontweight("bold")


def _draw_panel(ax: Axes, frame: pd.DataFrame, panel: ForestPanel, methods: list[str]) -> None:
    n = len(methods)
    # Conventions set explicitly: first method at the top, one unit per row.
    ax.set_ylim(n - 0.5, -0.5)
    ax.set_xlim(*_xlimits(frame, panel, methods))
    for i in range(1, n, 2):
        ax.axhspan(i - 0.5, i + 0.5, color=STRIPE_COLOUR, lw=0, zorder=0)
    _draw_acceptance(ax, panel)
    ax.spines["left"].set_visible(False)
    # Narrow panels (coefficients, proportions) get fewer ticks so their labels stay apart.
    bins = 4 if panel.kind == "limits" else 3
    ax.xaxis.set_major_locator(MaxNLocator(nbins=bins, steps=[1, 2, 2.5, 5, 10]))
    ax.set_xlabel(panel.axis_label)
    for i, method in enumerate(methods):
        if (method, panel.key) not in frame.index:
            _words(ax, i, NO_RESULT)
            continue
        row = frame.loc[(method, panel.key)]
        if panel.kind == "limits":
            _draw_limits_row(ax, i, row)
        else:
            _draw_point_row(ax, i, row)


def _draw_acceptance(ax: Axes, panel: ForestPanel) -> None:
    if panel.kind == "limits":
        ax.axvline(0.0, color=LINE_COLOUR, lw=0.6, ls=":", zorder=1, gid="zero")
        if panel.band is not None:
            low, high = (float(v) for v in panel.band)
            ax.axvspan(
                low,
                high,
                color=ACCEPT_COLOUR,
                alpha=ACCEPT_ALPHA,
                lw=0,
                zorder=0.5,
                gid="acceptance",
            )
            for edge in (low, high):
                ax.axvline(edge, color=LINE_COLOUR, lw=0.6, ls="--", zorder=1, gid="band-edge")
        return
    if panel.criterion is not None:
        value = float(panel.criterion)
        top = ax.get_xlim()[1]
        ax.axvspan(
            value, top, color=ACCEPT_COLOUR, alpha=ACCEPT_ALPHA, lw=0, zorder=0.5, gid="acceptance"
        )
        ax.axvline(value, color=LINE_COLOUR, lw=0.8, ls="--", zorder=1, gid="criterion")


def _finite(*values: float) -> bool:
    return all(math.isfinite(v) for v in values)


def _words(ax: Axes, y: float, text: str) -> None:
    ax.text(
        0.5,
        y,
        text,
        transform=ax.get_yaxis_transform(),
        ha="center",
        va="center",
        fontsize=6.0,
        fontstyle="italic",
        color="#555555",
        gid="no-estimate",
    )


def _marker_style(verdict: object) -> dict[str, object]:
    style = verdict_style(verdict)
    face = style.colour if style.filled else "white"
    return dict(marker=style.marker, ls="none", markersize=4.2, markeredgewidth=1.0,
                markerfacecolor=face, markeredgecolor=style.colour)  # fmt: skip


def _marker(ax: Axes, x: float, y: float, verdict: object) -> None:
    name = verdict if verdict_style(verdict) is not NO_VERDICT_STYLE else "none"
    ax.plot([x], [y], zorder=4, gid=f"estimate:{name}", **_marker_style(verdict))


def _draw_point_row(ax: Axes, y: int, row: pd.Series) -> None:
    estimate, low, high = float(row["estimate"]), float(row["ci_low"]), float(row["ci_high"])
    if not math.isfinite(estimate):
        _words(ax, y, NOT_ESTIMABLE)
        return
    colour = verdict_style(row["verdict"]).colour
    if _finite(low, high):
        ax.plot(
            [low, high],
            [y, y],
            color=colour,
            lw=1.4,
            solid_capstyle="butt",
            zorder=3,
            gid="interval",
        )
    _marker(ax, estimate, y, row["verdict"])


def _draw_limits_row(ax: Axes, y: int, row: pd.Series) -> None:
    low, high, bias = float(row["low"]), float(row["high"]), float(row["estimate"])
    if not _finite(low, high):
        _words(ax, y, NOT_ESTIMABLE)
        return
    colour = verdict_style(row["verdict"]).colour
    ax.plot([low, high], [y, y], color=colour, lw=0.6, zorder=2, gid="limits-span")
    for name, value in (("low", low), ("high", high)):
        ci = float(row[f"{name}_ci_low"]), float(row[f"{name}_ci_high"])
        if _finite(*ci):
            ax.plot(
                ci,
                [y, y],
                color=colour,
                lw=2.6,
                solid_capstyle="butt",
                alpha=0.55,
                zorder=3,
                gid=f"limit-interval:{name}",
            )
        ax.plot(
            [value],
            [y],
            marker="|",
            markersize=6.0,
            markeredgewidth=1.1,
            color=colour,
            ls="none",
            zorder=4,
            gid=f"limit:{name}",
        )
    if math.isfinite(bias):
        _marker(ax, bias, y, row["verdict"])


def _xlimits(frame: pd.DataFrame, panel: ForestPanel, methods: list[str]) -> tuple[float, float]:
    keys = [(m, panel.key) for m in methods if (m, panel.key) in frame.index]
    part = frame.loc[keys] if keys else frame.iloc[:0]
    if panel.kind == "sensitivity":
        return (-0.04, 1.04)  # room for a marker at 0 or 1
    if panel.kind == "ccc":
        values = part[["estimate", "ci_low", "ci_high"]].to_numpy(dtype=float).ravel()
        values = values[np.isfinite(values)]
        lowest = min(
            [*values.tolist(), *([panel.criterion] if panel.criterion is not None else [])],
            default=0.0,
        )
        lowest = min(lowest, 0.98)
        # Lin's CCC is at most 1: the axis ends just past it, and starts a little below the data.
        span = 1.0 - lowest
        return (max(-1.04, lowest - 0.1 * span), 1.0 + 0.04 * span)
    columns = ["estimate", *_LIMIT_COLUMNS]
    values = part[columns].to_numpy(dtype=float).ravel()
    values = values[np.isfinite(values)]
    extent = [*np.abs(values).tolist()]
    if panel.band is not None:
        extent += [abs(float(v)) for v in panel.band]
    half = max(extent, default=1.0) or 1.0
    # Symmetric about zero: equal distances on both sides mean equal disagreement.
    return (-1.1 * half, 1.1 * half)


def _legend(fig: Figure, frame: pd.DataFrame, panels: list[ForestPanel]) -> None:
    handles: list[object] = []
    present = {v for v in frame["verdict"] if isinstance(v, str)}
    for verdict in VERDICTS:
        if verdict in present:
            label = VERDICT_WORDS[verdict]
            handles.append(Line2D([], [], label=label, **_marker_style(verdict)))
    if any(p.band is not None or p.criterion is not None for p in panels):
        handles.append(Patch(color=ACCEPT_COLOUR, alpha=ACCEPT_ALPHA * 2, label="acceptable"))
    limit_cis = frame[["low_ci_low", "low_ci_high", "high_ci_low", "high_ci_high"]]
    if limit_cis.notna().any().any():
        handles.append(
            Line2D([], [], color=LINE_COLOUR, lw=2.6, alpha=0.55, label="CI of each limit")
        )
    if handles:
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles))
