"""The figure set of a report: every figure drawn from already computed tables, then saved.

:func:`make_figures` takes a :class:`~cohort.io.study.Study` and the report's tables (the
agreement table of :mod:`cohort.analysis.agreement_table`, the segment findings of
:mod:`cohort.analysis.findings`), draws each figure with the plotting functions of
:mod:`cohort.plots.agreement_plots`, :mod:`cohort.plots.bullseye` and
:mod:`cohort.plots.group_plots`, saves it with :func:`cohort.plots.style.save_figure` and
returns a :class:`FigureRecord` per figure (file paths and a caption a reader understands
on its own).

No statistic is computed here. Bias, limits, their intervals, Passing-Bablok lines and CCC
come from the agreement table; only display summaries are formed here (segment medians,
per-subject means, percentages of subjects positive), and the captions say so.

A figure whose table is absent, empty or lacks the rows it needs is not drawn; the returned
:class:`FigureSet` lists it in ``skipped`` with the reason. A table that is given but lacks a
required column is an error (``ValueError`` naming the columns): that is a bug upstream,
not a study without that analysis.

Field strength: R2* and off-resonance in Hz depend on B0 (R2*(3 T) = 1.88 R2*(1.5 T) - 15
1/s, Storey et al., J Magn Reson Imaging 2007; Hz scale with B0, physics), so maps and
group plots of absolute levels of these parameters are split by field strength when a
study has more than one (:data:`FIELD_DEPENDENT_PARAMETERS`).
"""

from __future__ import annotations

import hashlib
import math
import re
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Any

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from cohort.domain.segments import segment_model
from cohort.domain.units import PARAMETERS
from cohort.io.study import Study
from cohort.parallel import map_shared
from cohort.plots.agreement_plots import REGRESSION_KEYS, bland_altman_plot, method_scatter
from cohort.plots.bullseye import COLORBAR_ROOM_MM, BullseyeGrid, bullseye_grid
from cohort.plots.group_plots import group_distribution_plot, paired_lines_plot
from cohort.plots.style import (
    FIGURE_WIDTHS_MM,
    MM_PER_INCH,
    figure_size,
    fit_axis_name,
    fit_label,
    group_styles,
    save_figure,
    style_context,
)
from cohort.stats.results import CohortWarning

# --- column names of the input tables (adjust here if a table's spelling changes) ---------

AGREEMENT_TABLE = "agreement"
FINDINGS_TABLE = "findings_segment"

ALL_STRATUM = "all"
"""Value of ``stratum`` for the rows over the whole cohort."""

AGREEMENT_REQUIRED: tuple[str, ...] = (
    "parameter", "method", "reference", "stratum", "n_subjects", "n_pairs",
    "bias", "loa_low", "loa_high",
)  # fmt: skip
"""Columns without which the agreement figures cannot be drawn."""

LIMIT_CI_COLUMNS: tuple[str, ...] = (
    "bias_ci_low", "bias_ci_high", "loa_low_ci_low", "loa_low_ci_high",
    "loa_high_ci_low", "loa_high_ci_high",
)  # fmt: skip
"""CIs of bias and limits of agreement (shaded bands when present and finite)."""

CONFIDENCE_LEVEL = "confidence_level"
CI_METHOD = "ci_method"
NOTE = "note"
CCC = "ccc"
CCC_CI = ("ccc_ci_low", "ccc_ci_high")
PB_SLOPE = "pb_slope"
PB_INTERCEPT = "pb_intercept"
PB_SLOPE_CI = ("pb_slope_ci_low", "pb_slope_ci_high")
PB_INTERCEPT_CI = ("pb_intercept_ci_low", "pb_intercept_ci_high")
PB_CI_METHOD = "pb_ci_method"

RATIO_COLUMNS: Mapping[str, str] = MappingProxyType(
    {
        "bias": "ratio_bias",
        "bias_ci_low": "ratio_bias_ci_low",
        "bias_ci_high": "ratio_bias_ci_high",
        "loa_low": "ratio_loa_low",
        "loa_low_ci_low": "ratio_loa_low_ci_low",
        "loa_low_ci_high": "ratio_loa_low_ci_high",
        "loa_high": "ratio_loa_high",
        "loa_high_ci_low": "ratio_loa_high_ci_low",
        "loa_high_ci_high": "ratio_loa_high_ci_high",
    }
)
"""Keys of :func:`~cohort.plots.agreement_plots.bland_altman_plot` limits -> ratio-scale columns."""

FINDINGS_REQUIRED: tuple[str, ...] = (
    "subject", "group", "method", "segment", "finding", "positive",
)  # fmt: skip
"""Columns of the segment findings table needed for prevalence and subject maps (``value``,
``threshold``, ``parameter`` and ``field_strength`` are used when present)."""

# --- choices of the figure set --------------------------------------------------------------

SECTIONS: tuple[str, ...] = ("agreement", "findings", "groups", "maps")

PREVALENCE_DROP_POINTS = 10.0
"""Test segments outlined when their prevalence is this many percentage points (or more)
below the reference's in the same group."""

MAX_SUBJECTS_SHOWN = 6
"""Subjects drawn one bullseye each by default (reference-positive for the first finding)."""

FIELD_DEPENDENT_PARAMETERS: tuple[str, ...] = ("r2star", "field")
"""Parameters whose absolute level depends on B0: maps and group plots split by field strength."""

PANEL_MM = 45.0
"""Width of one bullseye panel in the grids (mm); figures are at most double-column wide."""

DEFAULT_SUBJECT_PARAMETER = "r2star"
"""Parameter of the per-subject bullseyes when the findings table names none."""

_LIMITS_TEXT = (
    "bias (solid line) is the mean difference over all pairs and the dashed lines are the "
    "limits of agreement, bias \N{PLUS-MINUS SIGN} 1.96 SD of a single difference, the SD "
    "combining between- and within-subject variance (Bland & Altman 2007, repeated "
    "measurements)"
)
_REGRESSION_TEXT = (
    "bias and limits of agreement are regression-based lines on the mean of the two methods "
    "(Bland & Altman 1999)"
)
_RATIO_TEXT = (
    "the solid line is the geometric mean ratio, exp(mean log ratio), and the dashed lines "
    "the ratio limits of agreement, back-transformed from the limits of the log ratio "
    "(Bland & Altman 2007 on log(test/reference))"
)


@dataclass(frozen=True)
class FigureRecord:
    """One saved figure: a stable key (the file stem), title, caption, report section,
    parameter and test method it shows (None when it spans several) and the files written."""

    key: str
    title: str
    caption: str
    section: str
    parameter: str | None
    method: str | None
    paths: tuple[Path, ...]


@dataclass(frozen=True)
class SkippedFigure:
    """A figure of the set that was not drawn, and why."""

    key: str
    reason: str


class FigureSet(list):
    """The records of the figures written (a list of :class:`FigureRecord`), with
    ``skipped``: the figures not drawn, each with its reason."""

    def __init__(self, records: Sequence[FigureRecord], skipped: Sequence[SkippedFigure]):
        super().__init__(records)
        self.skipped: tuple[SkippedFigure, ...] = tuple(skipped)

    def to_frame(self) -> pd.DataFrame:
        """One row per figure, drawn or skipped: key, section, parameter, method, title,
        caption, files, and the reason a figure was skipped (empty when drawn)."""
        rows = [
            {
                "key": r.key,
                "section": r.section,
                "parameter": r.parameter,
                "method": r.method,
                "title": r.title,
                "caption": r.caption,
                "files": "; ".join(p.name for p in r.paths),
                "skipped_reason": "",
            }
            for r in self
        ]
        rows += [
            {
                "key": s.key,
                "section": "",
                "parameter": None,
                "method": None,
                "title": "",
                "caption": "",
                "files": "",
                "skipped_reason": s.reason,
            }
            for s in self.skipped
        ]
        columns = ["key", "section", "parameter", "method", "title", "caption", "files"]
        return pd.DataFrame(rows, columns=[*columns, "skipped_reason"])


@dataclass(frozen=True)
class _Drawn:
    key: str
    title: str
    caption: str
    section: str
    parameter: str | None
    method: str | None
    fig: Figure
    grid: BullseyeGrid | None = None  # what a bullseye grid drew (for inspection in tests)


_Item = _Drawn | SkippedFigure


# --- small helpers ------------------------------------------------------------------------


SLUG_MAX = 40
"""Characters of a name kept in a file name; a longer or altered name gets a hash too."""


def _slug(text: object) -> str:
    """File-name-safe text: letters, digits, dot, minus and underscore kept; others to '-'.

    A name already made of those characters and at most :data:`SLUG_MAX` long is kept as
    it is; any other is cut to :data:`SLUG_MAX` characters and followed by the first 8 hex
    digits of the SHA-256 of the full name, so names that differ only in the characters
    replaced or cut still give distinct file names.
    """
    name = str(text)
    slug = re.sub(r"[^A-Za-z0-9._-]+", "-", name).strip("-.")
    if slug == name and 0 < len(slug) <= SLUG_MAX:
        return slug
    digest = hashlib.sha256(name.encode("utf-8")).hexdigest()[:8]
    return f"{slug[:SLUG_MAX].rstrip('-.')}-{digest}".lstrip("-")


def _names_note(names: Sequence[object], where: str) -> str:
    """The full names of the methods drawn shortened in a figure, for its caption."""
    if all(fit_label(n) == str(n) for n in names):
        return ""
    return f" {where}: " + "; ".join(f"'{n}'" for n in names) + "."


def _tesla(b0: float) -> str:
    return f"{b0:g} T"


def _tesla_slug(b0: float) -> str:
    return f"{b0:g}T"


def _unit(parameter: str) -> str:
    return PARAMETERS[parameter].unit


def _label(parameter: str) -> str:
    return PARAMETERS[parameter].label


def _axis(parameter: str) -> str:
    return PARAMETERS[parameter].axis_label


def _number(value: float, unit: str = "", digits: int = 3) -> str:
    """``digits`` significant digits, trailing zeros kept (-2.00, not -2); a true minus."""
    if not math.isfinite(value):
        return "not estimable"
    if value == 0 or 1e-3 <= abs(value) < 10**digits:
        text = f"{value:#.{digits}g}".rstrip(".")
    elif abs(value) >= 10**digits:
        text = f"{value:.0f}"
    else:
        text = f"{value:.2e}"
    text = text.replace("-", "\N{MINUS SIGN}")
    return f"{text} {unit}".strip()


def _short(value: float) -> str:
    """A declared number (a threshold) as given: 50, not 50.0."""
    return f"{value:g}".replace("-", "\N{MINUS SIGN}")


def _float(row: pd.Series, column: str) -> float:
    if column not in row.index:
        return math.nan
    try:
        return float(row[column])
    except (TypeError, ValueError):
        return math.nan


def _text(row: pd.Series, column: str) -> str:
    if column not in row.index:
        return ""
    value = row[column]
    return "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)


def _level_text(row: pd.Series) -> str:
    level = _float(row, CONFIDENCE_LEVEL)
    return f"{level:.0%}" if math.isfinite(level) else "the table's"


def _ci_text(row: pd.Series, low: str, high: str, unit: str = "") -> str | None:
    lo, hi = _float(row, low), _float(row, high)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return None
    return f"{_number(lo)} to {_number(hi, unit)}"


def _group_label(study: Study, group: object) -> str:
    return str(study.settings.group_labels.get(str(group), group))


def _groups_present(study: Study, frame: pd.DataFrame) -> list[str]:
    present = set(frame["group"].astype(str).unique())
    order = [g for g in study.groups if g in present]
    return order + sorted(present - set(order))


def _strengths(study: Study, parameter: str, frame: pd.DataFrame) -> list[float | None]:
    """Field strengths to draw separately (``[None]``: all pooled)."""
    if parameter not in FIELD_DEPENDENT_PARAMETERS:
        return [None]
    levels = sorted(float(b) for b in pd.unique(frame["field_strength"]))
    return levels if len(levels) > 1 else [None]


def _strength_note(study: Study, parameter: str, frame: pd.DataFrame, split: bool) -> str:
    levels = sorted(float(b) for b in pd.unique(frame["field_strength"]))
    if len(levels) < 2:
        return f" All subjects at {_tesla(levels[0])}." if levels else ""
    listed = " and ".join(_tesla(b) for b in levels)
    if split:
        return f" Shown separately at {listed}, since {_label(parameter)} depends on B0."
    if parameter in FIELD_DEPENDENT_PARAMETERS:
        return (
            f" Subjects at {listed} are pooled; {_label(parameter)} depends on B0, so "
            "part of the spread reflects field strength."
        )
    return f" Subjects at {listed} pooled."


def _table(tables: Mapping[str, pd.DataFrame], name: str, required: Sequence[str]):
    """The table, or the reason it cannot be used (absent, empty). Missing columns raise."""
    table = tables.get(name)
    if table is None:
        return None, f"no {name!r} table was given"
    if not isinstance(table, pd.DataFrame):
        raise ValueError(f"tables[{name!r}] must be a pandas DataFrame, got {type(table).__name__}")
    if table.empty:
        return None, f"the {name!r} table is empty"
    absent = [c for c in required if c not in table.columns]
    if absent:
        raise ValueError(
            f"tables[{name!r}] lacks the column(s) {absent!r} needed for its figures; "
            f"columns are {list(table.columns)}"
        )
    return table, ""


# --- agreement ----------------------------------------------------------------------------


def _agreement_rows(table: pd.DataFrame) -> pd.DataFrame:
    rows = table[table["stratum"].astype(str) == ALL_STRATUM]
    order = {p: i for i, p in enumerate(PARAMETERS)}
    return rows.assign(_p=rows["parameter"].map(order)).sort_values(["_p", "method"], kind="stable")


def _agreement_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    paired = study.paired
    combos = paired[["parameter", "method"]].drop_duplicates()
    combos = [
        (p, m)
        for p in PARAMETERS
        for m in sorted(combos.loc[combos["parameter"] == p, "method"].astype(str))
    ]
    table, reason = _table(tables, AGREEMENT_TABLE, AGREEMENT_REQUIRED)
    if table is None:
        for p, m in combos:
            for kind in ("bland_altman", "scatter"):
                yield SkippedFigure(f"{kind}_{p}_{_slug(m)}", reason)
        return
    rows = _agreement_rows(table)
    seen = set()
    for _, row in rows.iterrows():
        parameter, method = str(row["parameter"]), str(row["method"])
        if (parameter, method) in seen:
            raise ValueError(
                f"tables[{AGREEMENT_TABLE!r}] must hold one stratum {ALL_STRATUM!r} row per "
                f"(parameter, method), got several for ({parameter!r}, {method!r})"
            )
        seen.add((parameter, method))
        if parameter not in PARAMETERS:
            yield SkippedFigure(
                f"bland_altman_{_slug(parameter)}_{_slug(method)}",
                f"unknown parameter {parameter!r} in the agreement table",
            )
            continue
        pairs = paired[(paired["parameter"] == parameter) & (paired["method"] == method)]
        key_ba = f"bland_altman_{parameter}_{_slug(method)}"
        key_sc = f"scatter_{parameter}_{_slug(method)}"
        if pairs.empty:
            why = f"study.paired has no {parameter} pairs for method {method!r}"
            yield SkippedFigure(key_ba, why)
            yield SkippedFigure(key_sc, why)
            continue
        _check_counts(row, pairs)
        yield _bland_altman(study, row, pairs, key_ba)
        yield from _ratio_bland_altman(study, row, pairs, parameter, method)
        yield _scatter(study, row, pairs, key_sc)
    for parameter, method in combos:
        if (parameter, method) not in seen:
            why = f"the agreement table has no {ALL_STRATUM!r} row for {parameter} / {method!r}"
            yield SkippedFigure(f"bland_altman_{parameter}_{_slug(method)}", why)
            yield SkippedFigure(f"scatter_{parameter}_{_slug(method)}", why)


def _check_counts(row: pd.Series, pairs: pd.DataFrame) -> None:
    n_pairs, n_subjects = len(pairs), pairs["subject"].nunique()
    if (_float(row, "n_pairs"), _float(row, "n_subjects")) != (n_pairs, n_subjects):
        warnings.warn(
            f"agreement row {row['parameter']} / {row['method']} reports "
            f"{_float(row, 'n_pairs'):g} pairs from {_float(row, 'n_subjects'):g} subjects, "
            f"but study.paired holds {n_pairs} pairs from {n_subjects}; was the table "
            "computed from this study?",
            CohortWarning,
            stacklevel=4,
        )


def _group_arrays(study: Study, pairs: pd.DataFrame) -> tuple[np.ndarray, list[str]]:
    labels = pairs["group"].astype(str).map(lambda g: _group_label(study, g)).to_numpy()
    order = [_group_label(study, g) for g in _groups_present(study, pairs)]
    return labels, order


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


def _counts_text(pairs: pd.DataFrame) -> str:
    return (
        f"{len(pairs)} (subject, segment) pairs from {pairs['subject'].nunique()} subjects "
        "(n in the legend: pairs per group)"
    )


def _bands_text(row: pd.Series, columns: Sequence[str]) -> str:
    values = [_float(row, c) for c in columns]
    method = _text(row, CI_METHOD) or "method not stated in the agreement table"
    if values and all(math.isfinite(v) for v in values):
        return f" Shaded bands: {_level_text(row)} CIs of these lines ({method})."
    note = _text(row, NOTE)
    return " No CI bands: the intervals are not available" + (f" ({note})." if note else ".")


def _bland_altman(study: Study, row: pd.Series, pairs: pd.DataFrame, key: str) -> _Drawn:
    parameter, method, reference = str(row["parameter"]), str(row["method"]), study.reference
    labels, order = _group_arrays(study, pairs)
    regression = all(math.isfinite(_float(row, k)) for k in REGRESSION_KEYS)
    ax = bland_altman_plot(
        pairs["reference_value"].to_numpy(dtype=float),
        pairs["test_value"].to_numpy(dtype=float),
        limits=row,
        groups=labels,
        group_order=order,
        parameter=parameter,
        reference_name=reference,
        test_name=method,
    )
    unit = _unit(parameter)
    caption = (
        f"Bland-Altman plot of {_label(parameter)} ({unit}): {method} minus {reference} "
        f"against the mean of the two methods, one point per pair, coloured by group; "
        f"{_counts_text(pairs)}. "
    )
    if regression:
        caption += f"{_REGRESSION_TEXT[0].upper()}{_REGRESSION_TEXT[1:]}."
    else:
        bias, low, high = (_float(row, c) for c in ("bias", "loa_low", "loa_high"))
        caption += (
            f"{_LIMITS_TEXT[0].upper()}{_LIMITS_TEXT[1:]}: bias {_number(bias, unit)}, "
            f"limits {_number(low)} to {_number(high, unit)}."
        )
        caption += _bands_text(row, LIMIT_CI_COLUMNS)
    caption += " Dotted line: no difference."
    return _Drawn(
        key,
        f"Bland-Altman plot: {_label(parameter)}, {method} vs {reference}",
        caption,
        "agreement",
        parameter,
        method,
        _fit_width(ax.figure),
    )


def _ratio_bland_altman(
    study: Study, row: pd.Series, pairs: pd.DataFrame, parameter: str, method: str
) -> Iterator[_Item]:
    key = f"bland_altman_ratio_{parameter}_{_slug(method)}"
    present = RATIO_COLUMNS["bias"] in row.index
    if not present:
        return
    limits = {k: _float(row, c) for k, c in RATIO_COLUMNS.items()}
    if not math.isfinite(limits["bias"]):
        # NaN for parameters not analysed on the ratio scale: not a figure of this study.
        return
    ref = pairs["reference_value"].to_numpy(dtype=float)
    test = pairs["test_value"].to_numpy(dtype=float)
    if (ref <= 0).any() or (test <= 0).any():
        yield SkippedFigure(key, "ratio plot needs positive values; some pairs are <= 0")
        return
    limits[CONFIDENCE_LEVEL] = _float(row, CONFIDENCE_LEVEL)
    labels, order = _group_arrays(study, pairs)
    ax = bland_altman_plot(
        ref,
        test,
        limits=limits,
        groups=labels,
        group_order=order,
        parameter=parameter,
        ratio=True,
        limit_type="constant",
        reference_name=study.reference,
        test_name=method,
    )
    ratio_cols = [RATIO_COLUMNS[k] for k in LIMIT_CI_COLUMNS]
    caption = (
        f"Bland-Altman plot on the ratio scale of {_label(parameter)} ({_unit(parameter)}): "
        f"ratio {method} / {study.reference} on a log axis against the mean of the two "
        f"methods ({_unit(parameter)}); {_counts_text(pairs)}. "
        f"{_RATIO_TEXT[0].upper()}{_RATIO_TEXT[1:]}: geometric mean ratio "
        f"{_number(limits['bias'])}, limits {_number(limits['loa_low'])} to "
        f"{_number(limits['loa_high'])}."
        + _bands_text(row, ratio_cols)
        + " Dotted line: ratio 1. Use this scale when the differences grow with the level."
    )
    yield _Drawn(
        key,
        f"Bland-Altman plot (ratio): {_label(parameter)}, {method} vs {study.reference}",
        caption,
        "agreement",
        parameter,
        method,
        _fit_width(ax.figure),
    )


def _scatter(study: Study, row: pd.Series, pairs: pd.DataFrame, key: str) -> _Drawn:
    parameter, method, reference = str(row["parameter"]), str(row["method"]), study.reference
    unit = _unit(parameter)
    labels, order = _group_arrays(study, pairs)
    slope, intercept = _float(row, PB_SLOPE), _float(row, PB_INTERCEPT)
    line = None
    if math.isfinite(slope) and math.isfinite(intercept):
        line = {"slope": slope, "intercept": intercept, "procedure": "Passing-Bablok"}
    ccc = _float(row, CCC) if CCC in row.index else None
    ccc_ci = tuple(_float(row, c) for c in CCC_CI) if all(c in row.index for c in CCC_CI) else None
    ax = method_scatter(
        pairs["reference_value"].to_numpy(dtype=float),
        pairs["test_value"].to_numpy(dtype=float),
        line=line,
        ccc=ccc,
        ccc_ci=ccc_ci,
        groups=labels,
        group_order=order,
        parameter=parameter,
        reference_name=reference,
        test_name=method,
    )
    caption = (
        f"Method comparison of {_label(parameter)} ({unit}): {method} (y) against {reference} "
        f"(x), one point per pair, coloured by group; {_counts_text(pairs)}. Dotted line: "
        "identity."
    )
    if line is not None:
        caption += (
            f" Solid line: Passing-Bablok regression (Passing & Bablok 1983), slope "
            f"{_number(slope)}, intercept {_number(intercept, unit)}"
        )
        slope_ci = _ci_text(row, *PB_SLOPE_CI)
        intercept_ci = _ci_text(row, *PB_INTERCEPT_CI, unit=unit)
        if slope_ci and intercept_ci:
            how = _text(row, PB_CI_METHOD) or "method not stated in the agreement table"
            caption += (
                f" ({_level_text(row)} CIs: slope {slope_ci}, intercept {intercept_ci}; {how})"
            )
        caption += "."
    elif PB_SLOPE in row.index:
        caption += " No regression line: the Passing-Bablok fit is not estimable"
        note = _text(row, NOTE)
        caption += f" ({note})." if note else "."
    if ccc is not None:
        caption += f" Lin's concordance correlation coefficient (Lin 1989): {_number(ccc)}"
        ci = _ci_text(row, *CCC_CI)
        if ci:
            how = _text(row, CI_METHOD) or "method not stated in the agreement table"
            caption += f", {_level_text(row)} CI {ci} ({how})"
        caption += "."
    return _Drawn(
        key,
        f"Method comparison: {_label(parameter)}, {method} vs {reference}",
        caption,
        "agreement",
        parameter,
        method,
        _fit_width(ax.figure, square=True),
    )


# --- maps: medians and differences ----------------------------------------------------------


def _model_numbers(study: Study) -> tuple[int, ...]:
    return segment_model(study.settings.segment_model).numbers


def _median_figures(study: Study) -> Iterator[_Item]:
    values = study.values
    numbers = _model_numbers(study)
    for parameter in study.parameters:
        part = values[(values["parameter"] == parameter) & values["segment"].isin(numbers)]
        strengths = _strengths(study, parameter, part)
        medians = []
        for b0 in strengths:
            sub = part if b0 is None else part[part["field_strength"] == b0]
            medians.append((b0, sub, sub.groupby(["group", "method", "segment"])["value"].median()))
        every = np.concatenate([m.to_numpy(dtype=float) for _, _, m in medians])
        signed = parameter == "field"  # referenced field: 0 is the subject's own reference
        limits = _shared_limits(every, signed)
        for b0, sub, med in medians:
            suffix = "" if b0 is None else f"_{_tesla_slug(b0)}"
            key = f"bullseye_median_{parameter}{suffix}_by_group_method"
            frame = med.rename("value").reset_index()
            groups = _groups_present(study, sub)
            n = sub.groupby("group")["subject"].nunique()
            row_names = {g: f"{_group_label(study, g)}\n(n = {int(n.get(g, 0))})" for g in groups}
            frame["row"] = frame["group"].astype(str).map(row_names)
            present = set(frame["method"].unique())
            methods = [m for m in study.methods if m in present]
            where = "" if b0 is None else f" at {_tesla(b0)}"
            label = f"median {_label(parameter)}{where} ({_unit(parameter)})"
            grid = bullseye_grid(
                frame,
                row="row",
                col="method",
                kind="difference" if signed else "value",
                model=study.settings.segment_model,
                parameter=parameter,
                row_order=[row_names[g] for g in groups],
                col_order=methods,
                colorbar_label=label,
                width=_grid_width(len(methods)),
                **limits,
            )
            scale = (
                "diverging colour scale centred at 0 (the subject's own reference)"
                if signed
                else "sequential colour scale starting at 0"
            )
            caption = (
                f"Median {_label(parameter)} ({_unit(parameter)}) per AHA segment over the "
                f"subjects of each group (rows, n subjects in the label), for each method "
                f"(columns){where}. One {scale}, with the same limits in every panel and in "
                f"every {_label(parameter)} map of this set; hatched: no data. Medians are "
                "display summaries of each method's own values."
                + _names_note(methods, "Columns, left to right")
                + _strength_note(study, parameter, part, b0 is not None)
            )
            if parameter == "field":
                caption += (
                    f" Field is referenced within each subject "
                    f"({study.settings.field_referencing})."
                )
            yield _Drawn(
                key,
                f"Median {_label(parameter)}{where} by group and method",
                caption,
                "maps",
                parameter,
                None,
                grid.fig,
                grid,
            )


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


def _difference_figures(study: Study) -> Iterator[_Item]:
    paired = study.paired
    numbers = _model_numbers(study)
    for parameter in study.parameters:
        part = paired[(paired["parameter"] == parameter) & paired["segment"].isin(numbers)]
        if part.empty:
            continue
        diff = part.assign(value=part["test_value"] - part["reference_value"])
        medians = diff.groupby(["method", "group", "segment"])["value"].median()
        limits = _shared_limits(medians.to_numpy(dtype=float), signed=True)
        for method in study.test_methods:
            sub = diff[diff["method"] == method]
            if sub.empty:
                continue
            key = f"bullseye_difference_{parameter}_by_group_{_slug(method)}"
            frame = medians.loc[method].rename("value").reset_index()
            groups = _groups_present(study, sub)
            n = sub.groupby("group")["subject"].nunique()
            names = {g: f"{_group_label(study, g)} (n = {int(n.get(g, 0))})" for g in groups}
            frame["col"] = frame["group"].astype(str).map(names)
            grid = bullseye_grid(
                frame,
                row=None,
                col="col",
                kind="difference",
                model=study.settings.segment_model,
                parameter=parameter,
                col_order=[names[g] for g in groups],
                width=_grid_width(len(groups)),
                colorbar_label=(
                    f"{fit_axis_name(method)} \N{MINUS SIGN} "
                    f"{fit_axis_name(study.reference)}\n"
                    f"median difference ({_unit(parameter)})"
                ),
                **limits,
            )
            caption = (
                f"Median difference {method} minus {study.reference} of {_label(parameter)} "
                f"({_unit(parameter)}) per AHA segment over the subjects of each group "
                f"(panels; n subjects in the title), from the {len(sub)} pairs of "
                f"{sub['subject'].nunique()} subjects where both methods have a value. "
                "Diverging colour scale centred at 0 with limits symmetric about 0 and shared "
                f"by every {_label(parameter)} difference map of this set; red: {method} "
                "higher, blue: lower; hatched: no pairs. Medians are display summaries; "
                "bias and its CI are in the agreement table."
                + _strength_note(study, parameter, sub, False)
            )
            yield _Drawn(
                key,
                f"Median difference of {_label(parameter)}, {method} vs {study.reference}, "
                "by group",
                caption,
                "maps",
                parameter,
                method,
                grid.fig,
                grid,
            )


# --- groups -------------------------------------------------------------------------------


def _group_parameters(study: Study) -> Iterator[tuple[str, str | None]]:
    """Parameters for group plots, or the reason one is left out."""
    for parameter in study.parameters:
        if parameter == "field" and study.settings.field_referencing == "subject-median":
            yield (
                parameter,
                "field is referenced to each subject's own median, so a per-subject mean "
                "over segments is close to 0 by construction and says nothing about groups",
            )
        else:
            yield parameter, None


def _panel_axes(n_panels: int, aspect: float) -> tuple[Figure, list[Any]]:
    width = "single" if n_panels == 1 else "double"
    fig, axes = plt.subplots(
        1,
        n_panels,
        figsize=figure_size(width, aspect=aspect / n_panels if n_panels > 1 else aspect),
        squeeze=False,
        sharey=True,
        layout="constrained",
    )
    return fig, list(axes[0])


def _group_figures(study: Study) -> Iterator[_Item]:
    values = study.values
    numbers = _model_numbers(study)
    for parameter, why in _group_parameters(study):
        key = f"groups_{parameter}_subject_mean"
        if why is not None:
            yield SkippedFigure(key, why)
            continue
        part = values[(values["parameter"] == parameter) & values["segment"].isin(numbers)]
        means = (
            part.groupby(["subject", "group", "method", "field_strength"], sort=False)["value"]
            .mean()
            .reset_index()
        )
        means["group"] = means["group"].astype(str)
        strengths = _strengths(study, parameter, part)
        groups = _groups_present(study, means)
        present = set(means["method"].unique())
        methods = [m for m in study.methods if m in present]
        with style_context():
            fig, axes = _panel_axes(len(strengths), aspect=0.75)
            for k, (ax, b0) in enumerate(zip(axes, strengths, strict=True)):
                sub = means if b0 is None else means[means["field_strength"] == b0]
                sub = sub.assign(group=sub["group"].map(lambda g: _group_label(study, g)))
                group_distribution_plot(
                    sub,
                    value="value",
                    group="group",
                    method="method",
                    order=[_group_label(study, g) for g in groups],
                    method_order=methods,
                    parameter=parameter,
                    ax=ax,
                )
                _subject_mean_label(ax, parameter)
                if b0 is not None:
                    ax.set_title(_tesla(b0), loc="right", fontsize=7.5)
                if k > 0 and ax.get_legend() is not None:
                    ax.get_legend().remove()
                    ax.set_ylabel("")
        caption = (
            f"Per-subject mean of {_label(parameter)} ({_unit(parameter)}) over each method's "
            f"own segments, by group (n subjects under each group) and method (colours); "
            f"{means['subject'].nunique()} subjects. The means are a simple arithmetic mean "
            "of the available segments, formed here for display only; the group comparison "
            "statistics are in the groups table. Boxes: quartiles with whiskers to the "
            "furthest value within 1.5 IQR (Tukey); every subject drawn as a point."
            + _names_note(methods, "Methods, in the order of the key")
            + _strength_note(study, parameter, part, strengths != [None])
        )
        yield _Drawn(
            key,
            f"{_label(parameter).capitalize() if parameter != 'r2star' else 'R2*'} per "
            "subject by group and method",
            caption,
            "groups",
            parameter,
            None,
            fig,
        )


def _subject_mean_label(ax: Any, parameter: str) -> None:
    ax.set_ylabel(f"subject mean {_axis(parameter)}")


def _paired_figures(study: Study) -> Iterator[_Item]:
    paired = study.paired
    numbers = _model_numbers(study)
    for parameter, why in _group_parameters(study):
        for method in study.test_methods:
            key = f"paired_{parameter}_subject_mean_{_slug(method)}"
            if why is not None:
                yield SkippedFigure(key, why)
                continue
            part = paired[
                (paired["parameter"] == parameter)
                & (paired["method"] == method)
                & paired["segment"].isin(numbers)
            ]
            if part.empty:
                yield SkippedFigure(key, f"study.paired has no {parameter} pairs for {method!r}")
                continue
            means = (
                part.groupby(["subject", "group", "field_strength"], sort=False)[
                    ["reference_value", "test_value"]
                ]
                .mean()
                .reset_index()
            )
            long = pd.concat(
                [
                    means.assign(method=study.reference, value=means["reference_value"]),
                    means.assign(method=method, value=means["test_value"]),
                ],
                ignore_index=True,
            )
            long["group"] = long["group"].astype(str).map(lambda g: _group_label(study, g))
            strengths = _strengths(study, parameter, part)
            order = [_group_label(study, g) for g in _groups_present(study, part)]
            panels = [
                long if b0 is None else long[long["field_strength"] == b0] for b0 in strengths
            ]
            # Colours follow the order of the groups present in a panel: one legend for the
            # figure only when every panel holds every group.
            shared_legend = len(panels) > 1 and all(
                set(p["group"].unique()) == set(order) for p in panels
            )
            with style_context():
                fig, axes = _panel_axes(len(strengths), aspect=0.9)
                for k, (ax, b0, sub) in enumerate(zip(axes, strengths, panels, strict=True)):
                    paired_lines_plot(
                        sub,
                        reference=study.reference,
                        test=method,
                        group="group",
                        group_order=[g for g in order if g in set(sub["group"].unique())],
                        parameter=parameter,
                        ax=ax,
                    )
                    _subject_mean_label(ax, parameter)
                    if b0 is not None:
                        ax.set_title(f"{_tesla(b0)} (n = {sub['subject'].nunique()})", fontsize=7.5)
                    if shared_legend:
                        ax.get_legend().remove()
                    if k > 0:
                        ax.set_ylabel("")
                if shared_legend:
                    _group_legend(fig, order, long)
            where = (
                "n subjects per group over all field strengths in the legend, per field strength "
                "in the panel titles"
                if shared_legend
                else "n subjects in the legend"
            )
            caption = (
                f"Per-subject mean of {_label(parameter)} ({_unit(parameter)}) by "
                f"{study.reference} (left) and {method} (right), one line per subject "
                f"coloured by group ({where}); {means['subject'].nunique()} "
                f"subjects, means over the segments where both methods have a value ({len(part)} "
                "(subject, segment) pairs). Simple arithmetic means formed here for display only."
                + _strength_note(study, parameter, part, strengths != [None])
            )
            yield _Drawn(
                key,
                f"Per-subject {_label(parameter)}, {study.reference} to {method}",
                caption,
                "groups",
                parameter,
                method,
                fig,
            )


def _group_legend(fig: Figure, order: Sequence[str], subjects: pd.DataFrame) -> None:
    """One legend beside all panels: the group styles of the panels with total n."""
    styles = group_styles(order)
    counts = subjects.groupby("group")["subject"].nunique()
    handles = [
        Line2D(
            [],
            [],
            color=styles[g][0],
            marker=styles[g][1],
            linewidth=0.8,
            markersize=3.5,
            label=f"{g} (n = {int(counts.get(g, 0))})",
        )
        for g in order
    ]
    fig.legend(handles=handles, loc="outside right center", frameon=False)


# --- findings -----------------------------------------------------------------------------


def _positive(frame: pd.DataFrame) -> pd.Series:
    """Positivity as nullable boolean: NA where a segment was not classified."""
    return frame["positive"].astype("boolean")


def _finding_parameter(rows: pd.DataFrame) -> str | None:
    if "parameter" not in rows.columns:
        return None
    codes = [str(c) for c in pd.unique(rows["parameter"].dropna())]
    return codes[0] if len(codes) == 1 and codes[0] in PARAMETERS else None


def _threshold_text(rows: pd.DataFrame, parameter: str | None) -> str:
    """Threshold(s) of a finding as read from its rows, with the unit."""
    if "threshold" not in rows.columns:
        return "its threshold"
    unit = f" {_unit(parameter)}" if parameter is not None else ""
    on = f" on {_axis(parameter)}" if parameter is not None else ""
    finite = rows[np.isfinite(rows["threshold"].to_numpy(dtype=float))]
    if finite.empty:
        return "its threshold (not estimable for these rows)"
    side = _direction(finite)
    unique = pd.unique(finite["threshold"])
    if len(unique) == 1:
        return f"{side} a threshold{on} of {_short(float(unique[0]))}{unit}"
    if "field_strength" in finite.columns:
        per = finite.groupby("field_strength")["threshold"].unique()
        if all(len(v) == 1 for v in per):
            parts = [f"{_short(float(v[0]))}{unit} at {_tesla(float(b))}" for b, v in per.items()]
            return f"{side} a threshold{on} of " + ", ".join(parts)
    median = float(np.median(finite["threshold"].to_numpy(dtype=float)))
    return f"{side} subject-specific thresholds{on} (median {_number(median)}{unit})"


def _direction(rows: pd.DataFrame) -> str:
    """ "above" or "below" as the positive rows show it (the table does not say), else
    "beyond" (e.g. a threshold on the absolute value)."""
    if "value" not in rows.columns:
        return "beyond"
    flags = _positive(rows).fillna(False).to_numpy(dtype=bool)
    value = rows["value"].to_numpy(dtype=float)[flags]
    threshold = rows["threshold"].to_numpy(dtype=float)[flags]
    if not value.size:
        return "beyond"
    if (value >= threshold).all():
        return "above"
    if (value <= threshold).all():
        return "below"
    return "beyond"


def _prevalence_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    table, reason = _table(tables, FINDINGS_TABLE, FINDINGS_REQUIRED)
    if table is None:
        yield SkippedFigure("bullseye_prevalence_by_group_method", reason)
        return
    numbers = _model_numbers(study)
    for finding in pd.unique(table["finding"].astype(str)):
        key = f"bullseye_prevalence_{_slug(finding)}_by_group_method"
        rows = table[(table["finding"].astype(str) == finding) & table["segment"].isin(numbers)]
        positive = _positive(rows)
        classified = rows[positive.notna().to_numpy()]
        if classified.empty:
            yield SkippedFigure(key, f"no segment is classified for finding {finding!r}")
            continue
        flags = _positive(classified).astype(bool).to_numpy()
        classified = classified.assign(_pos=flags, group=classified["group"].astype(str))
        prevalence = (
            classified.groupby(["group", "method", "segment"])["_pos"].mean().mul(100.0)
        ).rename("value")
        frame = prevalence.reset_index()
        present = set(frame["method"].unique())
        methods = [m for m in study.methods if m in present]
        methods += sorted(present - set(methods))
        if study.reference not in methods:
            yield SkippedFigure(
                key, f"finding {finding!r} has no rows for the reference {study.reference!r}"
            )
            continue
        wide = frame.pivot_table(index=["group", "segment"], columns="method", values="value")
        reference = wide[study.reference]
        drop = {
            m: (reference - wide[m]) >= PREVALENCE_DROP_POINTS
            for m in methods
            if m != study.reference
        }
        frame["outlined"] = [
            bool(drop[m].get((g, s), False)) if m in drop else False
            for g, m, s in zip(frame["group"], frame["method"], frame["segment"], strict=True)
        ]
        # Round half up (12.5 % of 16 subjects reads 13, not the round-half-even 12).
        frame["note"] = [str(math.floor(v + 0.5)) for v in frame["value"]]
        groups = _groups_present(study, classified)
        n = classified.groupby("group")["subject"].nunique()
        names = {g: f"{_group_label(study, g)}\n(n = {int(n.get(g, 0))})" for g in groups}
        frame["row"] = frame["group"].map(names)
        top = float(frame["value"].max())
        vmax = min(100.0, max(20.0, 10.0 * math.ceil(top / 10.0)))
        grid = bullseye_grid(
            frame,
            row="row",
            col="method",
            kind="prevalence",
            model=study.settings.segment_model,
            labels=None,
            annotation="note",
            outline="outlined",
            outline_label=(
                f"test \N{GREATER-THAN OR EQUAL TO} {PREVALENCE_DROP_POINTS:g} points "
                "below reference"
            ),
            row_order=[names[g] for g in groups],
            col_order=methods,
            vmax=vmax,
            width=_grid_width(len(methods)),
            colorbar_label=f"subjects positive for {finding} (%)",
        )
        parameter = _finding_parameter(rows)
        n_outlined = int(frame["outlined"].sum())
        caption = (
            f"Prevalence of {finding} per AHA segment: percent of the subjects of each group "
            f"(rows, n subjects in the label) whose segment is positive, i.e. "
            f"{_threshold_text(classified, parameter)}, for each method (columns, "
            f"{study.reference} first); the number in each segment is that percentage, rounded to "
            "a whole percent. "
            f"Denominator: subjects with that segment classified by that method. Discrete "
            f"colour scale in 10-point bins from 0 to {vmax:g} % (the highest prevalence "
            "rounded up to the next bin, at least 20 %). Segments where a test "
            f"method's prevalence is at least {PREVALENCE_DROP_POINTS:g} percentage points "
            f"below {study.reference}'s in the same group are outlined in black "
            f"({n_outlined} here). Percentages are display summaries; detection statistics "
            "with their CIs are in the findings tables."
            + _names_note(methods, "Columns, left to right")
        )
        yield _Drawn(
            key,
            f"Prevalence of {finding} by segment, group and method",
            caption,
            "findings",
            parameter,
            None,
            grid.fig,
        )


def _default_subjects(table: pd.DataFrame | None, finding: str | None, reference: str) -> list:
    if table is None or finding is None:
        return []
    rows = table[
        (table["finding"].astype(str) == finding)
        & (table["method"].astype(str) == reference)
        & _positive(table).fillna(False).to_numpy(dtype=bool)
    ]
    return sorted(pd.unique(rows["subject"].astype(str)))[:MAX_SUBJECTS_SHOWN]


def _subject_figure(
    study: Study, tables: Mapping[str, pd.DataFrame], subjects_to_show: Sequence[str]
) -> Iterator[_Item]:
    table, reason = _table(tables, FINDINGS_TABLE, FINDINGS_REQUIRED)
    finding = None if table is None else str(table["finding"].astype(str).iloc[0])
    parameter = DEFAULT_SUBJECT_PARAMETER
    if table is not None:
        parameter = _finding_parameter(table[table["finding"].astype(str) == finding]) or parameter
    key = f"bullseye_subjects_{parameter}"
    named = list(dict.fromkeys(str(s) for s in subjects_to_show))
    chosen = named or _default_subjects(table, finding, study.reference)
    if not chosen:
        why = (
            f"no subject was named and {reason}"
            if table is None
            else f"no subject is positive for {finding!r} by {study.reference!r}"
        )
        yield SkippedFigure(key, why)
        return
    known = set(study.subjects["subject"].astype(str).unique())
    unknown = [s for s in chosen if s not in known]
    if unknown:
        raise ValueError(f"subjects_to_show names subjects not in the study: {unknown!r}")
    numbers = _model_numbers(study)
    values = study.values
    part = values[
        (values["parameter"] == parameter)
        & values["subject"].astype(str).isin(chosen)
        & values["segment"].isin(numbers)
    ]
    if part.empty:
        yield SkippedFigure(key, f"no {parameter} values for subjects {chosen!r}")
        return
    present = set(part["method"].unique())
    methods = [m for m in study.methods if m in present]
    strength = study.subjects.set_index(study.subjects["subject"].astype(str))["field_strength"]
    groups = study.subjects.set_index(study.subjects["subject"].astype(str))["group"]
    outlined: set[tuple[str, int]] = set()
    if table is not None:
        pos = table[
            (table["finding"].astype(str) == finding)
            & (table["method"].astype(str) == study.reference)
            & _positive(table).fillna(False).to_numpy(dtype=bool)
        ]
        outlined = set(zip(pos["subject"].astype(str), pos["segment"].astype(int), strict=True))
    limits = _shared_limits(part["value"].to_numpy(dtype=float), signed=False)
    how = (
        f"{len(chosen)} subjects named by the caller"
        if subjects_to_show
        else (
            f"the first {len(chosen)} subjects (in order of ID) positive for {finding} by "
            f"{study.reference}"
        )
    )
    threshold = (
        _threshold_text(table[table["finding"].astype(str) == finding], parameter)
        if table is not None
        else ""
    )
    chunks = [chosen[k : k + MAX_SUBJECTS_SHOWN] for k in range(0, len(chosen), MAX_SUBJECTS_SHOWN)]
    for k, chunk in enumerate(chunks):
        frame = part[part["subject"].astype(str).isin(chunk)]
        frame = frame[["subject", "method", "segment", "value"]].assign(
            subject=frame["subject"].astype(str)
        )
        panel = {(s, m): f"{s}, {_tesla(float(strength[s]))}\n{m}" for s in chunk for m in methods}
        frame["panel"] = [
            panel[(s, m)] for s, m in zip(frame["subject"], frame["method"], strict=True)
        ]
        frame["outlined"] = [
            (s, int(g)) in outlined for s, g in zip(frame["subject"], frame["segment"], strict=True)
        ]
        present = set(frame["panel"].unique())
        order = [panel[(s, m)] for s in chunk for m in methods if panel[(s, m)] in present]
        wrap = min(len(methods) * max(1, 4 // len(methods)), len(order))
        grid = bullseye_grid(
            frame,
            row=None,
            col="panel",
            col_order=order,
            col_wrap=wrap,
            width=_grid_width(wrap),
            kind="value",
            model=study.settings.segment_model,
            parameter=parameter,
            outline="outlined" if table is not None else None,
            outline_label=f"{finding} by {study.reference}" if table is not None else None,
            **limits,
        )
        by_group: dict[str, list[str]] = {}
        for subject in chunk:
            by_group.setdefault(_group_label(study, groups[subject]), []).append(subject)
        listed = "; ".join(f"{g}: {', '.join(ids)}" for g, ids in by_group.items())
        part_text = f", part {k + 1} of {len(chunks)}" if len(chunks) > 1 else ""
        caption = (
            f"{_label(parameter)} ({_unit(parameter)}) per AHA segment of single subjects, "
            f"each method side by side ({', '.join(methods)}), field strength in the title; "
            f"{how}{part_text} ({listed}). One sequential colour scale from 0, shared by all "
            "panels; hatched: no value."
        )
        if table is not None:
            caption += (
                f" Black outlines: segments positive for {finding} by {study.reference} "
                f"({threshold}), drawn on every method's panel so a segment the test method "
                "misses stands out."
            )
        else:
            caption += f" No outlines: {reason}."
        yield _Drawn(
            key if len(chunks) == 1 else f"{key}_part{k + 1}",
            f"{_label(parameter)} maps of single subjects, by method{part_text}",
            caption,
            "findings",
            parameter,
            None,
            grid.fig,
            grid,
        )


# --- the set ------------------------------------------------------------------------------


def make_figures(
    study: Study,
    tables: Mapping[str, pd.DataFrame],
    folder: Path,
    *,
    formats: Sequence[str] = ("png", "svg"),
    dpi: float = 300,
    subjects_to_show: Sequence[str] = (),
    progress: Callable[[str], object] | None = None,
    workers: int = 1,
) -> FigureSet:
    """Draw and save every figure of the report; return their records.

    Parameters
    ----------
    study
        The loaded study (its ``paired`` and ``values`` tables give the points and maps).
    tables
        Already computed tables: ``"agreement"`` (:func:`cohort.analysis.agreement_table.
        agreement_table`) and ``"findings_segment"`` (the ``segments`` table of
        :func:`cohort.analysis.findings.evaluate_findings`). An absent or empty table skips its
        figures.
    folder
        Where the files go (created); each figure is ``<key>.<format>``.
    formats, dpi
        File formats and raster resolution, passed to :func:`cohort.plots.style.save_figure`
        (300 dpi, the usual journal minimum; lower for quick previews).
    subjects_to_show
        Subjects drawn one bullseye per method each, :data:`MAX_SUBJECTS_SHOWN` to a figure;
        default: up to :data:`MAX_SUBJECTS_SHOWN` subjects positive by the reference for the
        first finding of the findings table, in order of subject ID.
    progress
        Called with a short text once per figure written (from the worker processes when
        there are several).
    workers
        Processes drawing the parts of the set (:func:`cohort.parallel.map_shared`; 0 = one
        per core); the figures and records are the same for any number.

    Returns
    -------
    FigureSet
        A list of :class:`FigureRecord` (in drawing order: agreement, findings, maps,
        groups) with ``skipped``, the figures not drawn and why.
    """
    if not isinstance(study, Study):
        raise ValueError(f"study must be a cohort.io.study.Study, got {type(study).__name__}")
    if not isinstance(tables, Mapping):
        raise ValueError(f"tables must be a mapping of name to DataFrame, got {type(tables)}")
    if isinstance(formats, str) or not formats:
        raise ValueError(f"formats must be a non-empty sequence of format names, got {formats!r}")
    if isinstance(subjects_to_show, str):
        raise ValueError(
            f"subjects_to_show must be a sequence of subject IDs, got the string "
            f"{subjects_to_show!r}"
        )
    if progress is not None and not callable(progress):
        raise ValueError(f"progress must be callable or None, got {progress!r}")
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)

    parts = (
        (_agreement_figures, (study, tables)),
        (_prevalence_figures, (study, tables)),
        (_subject_figure, (study, tables, subjects_to_show)),
        (_median_figures, (study,)),
        (_difference_figures, (study,)),
        (_group_figures, (study,)),
        (_paired_figures, (study,)),
    )
    pending = _Pending(parts, folder, tuple(formats), dpi, progress)
    done = map_shared(_draw_part, pending, len(parts), workers)
    records: list[FigureRecord] = []
    skipped: list[SkippedFigure] = []
    for part_records, part_skipped in done:
        records += part_records
        skipped += part_skipped
    keys = [r.key for r in records]
    if len(set(keys)) != len(keys):  # parts draw figures of distinct prefixes
        raise RuntimeError(f"two parts of the figure set wrote the same key: {sorted(keys)}")
    return FigureSet(records, skipped)


@dataclass(frozen=True)
class _Pending:
    parts: tuple[tuple[Callable[..., Iterator[_Item]], tuple[Any, ...]], ...]
    folder: Path
    formats: tuple[str, ...]
    dpi: float
    progress: Callable[[str], object] | None


def _draw_part(pending: _Pending, index: int) -> tuple[list[FigureRecord], list[SkippedFigure]]:
    """Draw and save the figures of one part of the set (in this process or a worker)."""
    source, args = pending.parts[index]
    records: list[FigureRecord] = []
    skipped: list[SkippedFigure] = []
    keys: set[str] = set()
    for item in source(*args):
        if isinstance(item, SkippedFigure):
            skipped.append(item)
            continue
        key = _unique(item.key, keys)
        try:
            paths = _save(item.fig, pending.folder / key, pending.formats, pending.dpi)
        finally:
            plt.close(item.fig)
        records.append(
            FigureRecord(
                key, item.title, item.caption, item.section, item.parameter, item.method, paths
            )
        )
        if pending.progress is not None:
            pending.progress(f"figure: {key}")
    return records, skipped


def _save(fig: Figure, stem: Path, formats: Sequence[str], dpi: float) -> tuple[Path, ...]:
    """Save each format; the layout computed for the first is kept for the others, since
    constrained layout would otherwise be solved again for every file (a third of the time)."""
    paths = list(save_figure(fig, stem, formats=formats[:1], dpi=dpi))
    if len(formats) > 1:
        fig.set_layout_engine("none")
        paths += save_figure(fig, stem, formats=formats[1:], dpi=dpi)
    return tuple(paths)


def _unique(key: str, keys: set[str]) -> str:
    """``key``, or ``key-2``, ``key-3``... when method names give the same file name (compared
    ignoring case, as case-insensitive file systems do)."""
    candidate, k = key, 1
    while candidate.casefold() in keys:
        k += 1
        candidate = f"{key}-{k}"
    keys.add(candidate.casefold())
    return candidate
