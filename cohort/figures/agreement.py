"""Agreement figures: Bland-Altman plots (difference and ratio scale) and method-comparison
scatters, one figure per parameter with one panel per test method (in the study's order,
shared axes, one key), drawn from the pairs of ``study.paired`` with the bias, limits,
Passing-Bablok line and CCC of the agreement table (stratum ``all``).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from cohort.domain.units import PARAMETERS
from cohort.figures.captions import (
    _LIMITS_TEXT,
    _RATIO_TEXT,
    _REGRESSION_TEXT,
    _how_text,
    _interval_text,
    _label,
    _level_text,
    _method_title,
    _number,
    _pairs_text,
    _panel_lead,
    _panels_text,
    _unit,
)
from cohort.figures.layout import (
    _fit_height,
    _letter,
    _outer_labels,
    _panel_grid,
    _panel_heading,
    _title_width,
)
from cohort.figures.records import SkippedFigure, _Drawn, _Item, _slug
from cohort.figures.tables import (
    AGREEMENT_REQUIRED,
    AGREEMENT_TABLE,
    ALL_STRATUM,
    CCC,
    CCC_CI,
    CONFIDENCE_LEVEL,
    LIMIT_CI_COLUMNS,
    NOTE,
    PB_CI_METHOD,
    PB_INTERCEPT,
    PB_INTERCEPT_CI,
    PB_SLOPE,
    PB_SLOPE_CI,
    RATIO_COLUMNS,
    _float,
    _group_label,
    _groups_present,
    _table,
    _text,
)
from cohort.io.study import Study
from cohort.plots.agreement_plots import (
    _axis_limits,
    _decimals,
    _ratio_ticks,
    bland_altman_plot,
    method_scatter,
)
from cohort.plots.limit_lines import (
    REGRESSION_KEYS,
    group_key,
    limit_key,
    scatter_key,
    shared_legend,
)
from cohort.plots.style import style_context
from cohort.stats.results import CohortWarning

BLAND_ALTMAN_ASPECT = 0.9
"""Height / width of a Bland-Altman panel."""


@dataclass(frozen=True)
class _Panel:
    """One test method's panel: its agreement row (stratum ``all``) and its pairs."""

    method: str
    title: str
    row: pd.Series
    pairs: pd.DataFrame


def _agreement_rows(table: pd.DataFrame) -> pd.DataFrame:
    rows = table[table["stratum"].astype(str) == ALL_STRATUM]
    duplicated = rows.duplicated(["parameter", "method"])
    if duplicated.any():
        parameter, method = rows.loc[duplicated, ["parameter", "method"]].iloc[0]
        raise ValueError(
            f"tables[{AGREEMENT_TABLE!r}] must hold one stratum {ALL_STRATUM!r} row per "
            f"(parameter, method), got several for ({parameter!r}, {method!r})"
        )
    return rows


def _agreement_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    paired = study.paired
    measured = set(paired["parameter"].astype(str))
    table, reason = _table(tables, AGREEMENT_TABLE, AGREEMENT_REQUIRED)
    if table is None:
        for parameter in (p for p in PARAMETERS if p in measured):
            yield SkippedFigure(f"bland_altman_{parameter}", reason)
            yield SkippedFigure(f"scatter_{parameter}", reason)
        return
    rows = _agreement_rows(table)
    for parameter in sorted(set(rows["parameter"].astype(str)) - set(PARAMETERS)):
        yield SkippedFigure(
            f"bland_altman_{_slug(parameter)}",
            f"unknown parameter {parameter!r} in the agreement table",
        )
    for parameter in PARAMETERS:
        panels, absent = _panels(study, rows, parameter)
        if not panels:
            if absent:
                why = "; ".join(absent.values())
                yield SkippedFigure(f"bland_altman_{parameter}", why)
                yield SkippedFigure(f"scatter_{parameter}", why)
            continue
        yield _bland_altman(study, parameter, panels, absent)
        yield from _ratio_bland_altman(study, parameter, panels, absent)
        yield _scatter(study, parameter, panels, absent)


def _panels(
    study: Study, rows: pd.DataFrame, parameter: str
) -> tuple[list[_Panel], dict[str, str]]:
    """The panels of ``parameter`` in the study's order of test methods (then methods only the
    table names), and the methods left out with the reason."""
    paired = study.paired
    paired = paired[paired["parameter"] == parameter]
    own = rows[rows["parameter"].astype(str) == parameter]
    named = set(own["method"].astype(str)) | set(paired["method"].astype(str))
    order = [m for m in study.test_methods if m in named]
    order += sorted(named - set(order))
    panels, absent = [], {}
    for method in order:
        row = own[own["method"].astype(str) == method]
        pairs = paired[paired["method"].astype(str) == method]
        if row.empty:
            absent[method] = (
                f"the agreement table has no {ALL_STRATUM!r} row for {parameter} / {method!r}"
            )
        elif pairs.empty:
            absent[method] = f"study.paired has no {parameter} pairs for method {method!r}"
        else:
            _check_counts(row.iloc[0], pairs)
            panels.append(_Panel(method, _method_title(study, method), row.iloc[0], pairs))
    return panels, absent


def _check_counts(row: pd.Series, pairs: pd.DataFrame) -> None:
    n_pairs, n_subjects = len(pairs), pairs["subject"].nunique()
    if (_float(row, "n_pairs"), _float(row, "n_subjects")) != (n_pairs, n_subjects):
        warnings.warn(
            f"agreement row {row['parameter']} / {row['method']} reports "
            f"{_float(row, 'n_pairs'):g} pairs from {_float(row, 'n_subjects'):g} subjects, "
            f"but study.paired holds {n_pairs} pairs from {n_subjects}; was the table "
            "computed from this study?",
            CohortWarning,
            stacklevel=5,
        )


def _groups(study: Study, panels: Sequence[_Panel]) -> tuple[list[str], dict[str, int] | None]:
    """The group labels of all panels in the study's order (one colour each in every panel),
    and the pairs per group when every panel has the same (for the key), else None."""
    every = pd.concat([p.pairs for p in panels])
    order = [_group_label(study, g) for g in _groups_present(study, every)]
    counts = [_group_counts(study, p.pairs) for p in panels]
    return order, counts[0] if all(c == counts[0] for c in counts) else None


def _group_counts(study: Study, pairs: pd.DataFrame) -> dict[str, int]:
    return {
        _group_label(study, g): int((pairs["group"].astype(str) == g).sum())
        for g in _groups_present(study, pairs)
    }


def _labels(study: Study, pairs: pd.DataFrame) -> np.ndarray:
    return pairs["group"].astype(str).map(lambda g: _group_label(study, g)).to_numpy()


def _arrays(pairs: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    return (
        pairs["reference_value"].to_numpy(dtype=float),
        pairs["test_value"].to_numpy(dtype=float),
    )


def _regression(row: pd.Series | Mapping[str, float]) -> bool:
    return all(math.isfinite(_float(pd.Series(row), k)) for k in REGRESSION_KEYS)


def _bands(limits: Sequence[pd.Series | Mapping[str, float]]) -> bool:
    """Whether any panel shades a CI band (both ends of some line's CI finite)."""
    pairs = list(zip(LIMIT_CI_COLUMNS[::2], LIMIT_CI_COLUMNS[1::2], strict=True))
    return any(
        all(math.isfinite(_float(pd.Series(lim), c)) for c in pair)
        for lim in limits
        for pair in pairs
    )


# Long: one loop over the panels with the plot's arguments, headings and shared labels
def _draw_bland_altman(
    study: Study,
    parameter: str,
    panels: Sequence[_Panel],
    limits: Sequence[pd.Series | Mapping[str, float]],
    ratio: bool,
) -> Figure:
    """Bland-Altman panels, one per test method, sharing both axes and one key."""
    order, counts = _groups(study, panels)
    several = len(panels) > 1
    width = _title_width(len(panels))
    decimals = 3 if ratio else max(_panel_decimals(p.pairs) for p in panels)
    with style_context():
        fig, axes = _panel_grid([len(panels)], aspect=BLAND_ALTMAN_ASPECT)
        for k, (ax, panel, lim) in enumerate(zip(axes, panels, limits, strict=True)):
            reference, test = _arrays(panel.pairs)
            bland_altman_plot(
                reference,
                test,
                limits=lim,
                groups=_labels(study, panel.pairs),
                group_order=order,
                parameter=parameter,
                ratio=ratio,
                limit_type="constant" if ratio else "auto",
                reference_name=study.reference,
                test_name=panel.title,
                key="text",
                decimals=decimals,
                ax=ax,
            )
            _panel_heading(ax, panel.title, _letter(k) if several else None, width)
        if ratio:
            _ratio_ticks(axes[-1])  # the shared y axis, now that it spans every panel
        if several:
            axis = PARAMETERS[parameter].axis_label
            ylabel = (
                f"ratio test method / {study.reference}"
                if ratio
                else f"test method \N{MINUS SIGN} {study.reference}, {axis}"
            )
            _outer_labels(fig, axes, f"mean of {study.reference} and test method, {axis}", ylabel)
        regression = not ratio and all(_regression(p.row) for p in panels)
        level = _float(panels[0].row, CONFIDENCE_LEVEL)
        lines = limit_key(ratio=ratio, regression=regression, bands=_bands(limits), level=level)
        shared_legend(fig, lines, group_key(order, counts))
    return fig


def _panel_decimals(pairs: pd.DataFrame) -> int:
    """Decimals a panel's own numbers need (about three significant digits of the range of
    its differences); a figure uses the most any panel needs, so all read alike."""
    reference, test = _arrays(pairs)
    difference = test - reference
    return _decimals(float(np.ptp(difference)) if difference.size > 1 else abs(difference[0]))


def _lead_text(parameter: str, panels: Sequence[_Panel], what: str, axes: str) -> str:
    """The first sentence: the plot, its panels, its axes (``axes``, with "{test}" for the
    test method) and what a point is."""
    if len(panels) > 1:
        axes = axes.format(test="the panel's test method")
        which = (
            f"one panel per test method ({_panels_text([p.title for p in panels])}), "
            f"axes shared by the panels; {axes}"
        )
    else:
        which = axes.format(test=panels[0].title)
    return (
        f"{what} of {_label(parameter)} ({_unit(parameter)}): {which}; one point per "
        "(subject, segment) pair, coloured by group. "
    )


def _count_text(study: Study, panel: _Panel, counts_in_key: bool) -> str:
    text = _pairs_text(panel.pairs)
    if not counts_in_key:
        per = _group_counts(study, panel.pairs)
        text += " (" + ", ".join(f"{g} {n}" for g, n in per.items()) + ")"
    return text


def _absent_text(absent: Mapping[str, str]) -> str:
    if not absent:
        return ""
    return " Not drawn: " + "; ".join(absent.values()) + "."


def _constant_numbers(row: pd.Series | Mapping[str, float], unit: str) -> str:
    """Bias and limits of agreement with their intervals, as a caption says them (a row
    without any interval: the numbers alone; the caption says once why there are none)."""
    row = pd.Series(row)
    with_ci = _bands([row])

    def number(name: str) -> str:
        text = _number(_float(row, name), unit)
        if with_ci:
            text += f" ({_interval_text(row, f'{name}_ci_low', f'{name}_ci_high')})"
        return text

    return f"bias {number('bias')}, limits of agreement {number('loa_low')} to {number('loa_high')}"


def _regression_numbers(row: pd.Series, unit: str) -> str:
    def line(name: str) -> str:
        a, b = _float(row, f"{name}_intercept"), _float(row, f"{name}_slope")
        sign = "\N{MINUS SIGN}" if b < 0 else "+"
        return f"{_number(a)} {sign} {_number(abs(b))} \N{MULTIPLICATION SIGN} mean {unit}"

    return (
        f"bias {line('bias')}, limits of agreement {line('loa_low')} and {line('loa_high')} "
        f"(regression-based, Bland & Altman 1999)"
    )


def _bland_altman(
    study: Study, parameter: str, panels: Sequence[_Panel], absent: Mapping[str, str]
) -> _Drawn:
    fig = _draw_bland_altman(study, parameter, panels, [p.row for p in panels], ratio=False)
    unit, several = _unit(parameter), len(panels) > 1
    counts_in_key = _groups(study, panels)[1] is not None
    regression = [_regression(p.row) for p in panels]
    if all(regression):
        lines = f"{_REGRESSION_TEXT[0].upper()}{_REGRESSION_TEXT[1:]}. "
    else:
        lines = f"{_LIMITS_TEXT[0].upper()}{_LIMITS_TEXT[1:]}. "
        if any(regression):
            lines += f"Where numbers are given as lines in the mean, {_REGRESSION_TEXT}. "
    caption = (
        _lead_text(
            parameter,
            panels,
            "Bland-Altman plot",
            f"{{test}} minus {study.reference} against the mean of the two methods",
        )
        + lines
    )
    for k, panel in enumerate(panels):
        numbers = (
            _regression_numbers(panel.row, unit)
            if _regression(panel.row)
            else _constant_numbers(panel.row, unit)
        )
        caption += (
            f"{_panel_lead(k, panel.title, several)}{_count_text(study, panel, counts_in_key)}; "
            f"{numbers}. "
        )
    caption += _intervals_text(panels, [p.row for p in panels])
    caption += " Dotted line: no difference." + _absent_text(absent)
    return _Drawn(
        f"bland_altman_{parameter}",
        _title("Bland-Altman plot", parameter, panels, study),
        caption,
        "agreement",
        parameter,
        None if several else panels[0].method,
        fig,
    )


def _intervals_text(panels: Sequence[_Panel], limits: Sequence[pd.Series]) -> str:
    if _bands(limits):
        how = _how_text([p.row for p in panels])
        return f"Shaded bands: {_level_text(panels[0].row)} CIs of these lines ({how})."
    # the notes of the rows, each part once (the rows of one run share most of theirs)
    parts = [part for p in panels for part in _text(p.row, NOTE).split("; ") if part]
    notes = list(dict.fromkeys(parts))
    return "No CI bands: the intervals are not available" + (
        f" ({'; '.join(notes)})." if notes else "."
    )


def _title(what: str, parameter: str, panels: Sequence[_Panel], study: Study) -> str:
    if len(panels) == 1:
        return f"{what}: {_label(parameter)}, {panels[0].title} vs {study.reference}"
    return f"{what}s: {_label(parameter)}, {len(panels)} test methods vs {study.reference}"


def _ratio_limits(row: pd.Series) -> dict[str, float]:
    limits = {k: _float(row, c) for k, c in RATIO_COLUMNS.items()}
    limits[CONFIDENCE_LEVEL] = _float(row, CONFIDENCE_LEVEL)
    return limits


def _ratio_bland_altman(
    study: Study, parameter: str, panels: Sequence[_Panel], absent: Mapping[str, str]
) -> Iterator[_Item]:
    key = f"bland_altman_ratio_{parameter}"
    if RATIO_COLUMNS["bias"] not in panels[0].row.index:
        return
    finite = [p for p in panels if math.isfinite(_float(p.row, RATIO_COLUMNS["bias"]))]
    if not finite:
        # NaN for parameters not analysed on the ratio scale: not a figure of this study.
        return
    left_out = dict(absent)
    left_out.update(
        {
            p.method: f"no ratio-scale limits for {p.method!r} in the agreement table"
            for p in panels
            if p not in finite
        }
    )
    drawn = []
    for p in finite:
        reference, test = _arrays(p.pairs)
        if (reference <= 0).any() or (test <= 0).any():
            left_out[p.method] = f"{p.method!r}: ratio plot needs positive values; some are <= 0"
        else:
            drawn.append(p)
    if not drawn:
        yield SkippedFigure(key, "; ".join(left_out.values()))
        return
    limits = [_ratio_limits(p.row) for p in drawn]
    fig = _draw_bland_altman(study, parameter, drawn, limits, ratio=True)
    several = len(drawn) > 1
    counts_in_key = _groups(study, drawn)[1] is not None
    caption = _lead_text(
        parameter,
        drawn,
        "Bland-Altman plot on the ratio scale",
        f"ratio {{test}} / {study.reference} on a log axis against the mean of the two "
        f"methods ({_unit(parameter)})",
    )
    caption += f"{_RATIO_TEXT[0].upper()}{_RATIO_TEXT[1:]}. "
    for k, (panel, lim) in enumerate(zip(drawn, limits, strict=True)):
        numbers = _constant_numbers({**lim, **_ci_level(panel.row)}, "")
        numbers = numbers.replace("bias", "geometric mean ratio", 1)
        caption += (
            f"{_panel_lead(k, panel.title, several)}{_count_text(study, panel, counts_in_key)}; "
            f"{numbers}. "
        )
    caption += _intervals_text(drawn, limits)
    caption += " Dotted line: ratio 1. Use this scale when the differences grow with the level."
    caption += _absent_text(left_out)
    yield _Drawn(
        key,
        _title("Bland-Altman plot (ratio)", parameter, drawn, study),
        caption,
        "agreement",
        parameter,
        None if several else drawn[0].method,
        fig,
    )


def _ci_level(row: pd.Series) -> dict[str, float]:
    return {CONFIDENCE_LEVEL: _float(row, CONFIDENCE_LEVEL)}


def _fit(row: pd.Series) -> dict[str, object] | None:
    slope, intercept = _float(row, PB_SLOPE), _float(row, PB_INTERCEPT)
    if math.isfinite(slope) and math.isfinite(intercept):
        return {"slope": slope, "intercept": intercept, "procedure": "Passing-Bablok"}
    return None


def _draw_scatter(study: Study, parameter: str, panels: Sequence[_Panel]) -> Figure:
    """Method-comparison panels, one per test method, with equal shared axes and one key."""
    order, counts = _groups(study, panels)
    every = np.concatenate([np.concatenate(_arrays(p.pairs)) for p in panels])
    limits = _axis_limits(float(every.min()), float(every.max()))
    several = len(panels) > 1
    width = _title_width(len(panels))
    with style_context():
        fig, axes = _panel_grid([len(panels)], aspect=1.0)
        for k, (ax, panel) in enumerate(zip(axes, panels, strict=True)):
            reference, test = _arrays(panel.pairs)
            ccc = _float(panel.row, CCC) if CCC in panel.row.index else None
            ccc_ci = tuple(_float(panel.row, c) for c in CCC_CI)
            method_scatter(
                reference,
                test,
                line=_fit(panel.row),
                ccc=ccc,
                ccc_ci=ccc_ci if all(c in panel.row.index for c in CCC_CI) else None,
                groups=_labels(study, panel.pairs),
                group_order=order,
                parameter=parameter,
                reference_name=study.reference,
                test_name=panel.title,
                axis_limits=limits,
                key="text",
                ax=ax,
            )
            _panel_heading(ax, panel.title, _letter(k) if several else None, width)
        if several:
            axis = PARAMETERS[parameter].axis_label
            _outer_labels(fig, axes, f"{study.reference}, {axis}", f"test method, {axis}")
        fitted = any(_fit(p.row) is not None for p in panels)
        shared_legend(
            fig, scatter_key("Passing-Bablok" if fitted else None), group_key(order, counts)
        )
        _fit_height(fig, axes)
    return fig


def _scatter_numbers(row: pd.Series, unit: str) -> str:
    """Passing-Bablok line and CCC of one panel with their intervals."""
    fit = _fit(row)
    if fit is not None:
        text = (
            f"Passing-Bablok slope {_number(float(fit['slope']))} "
            f"({_interval_text(row, *PB_SLOPE_CI)}), intercept "
            f"{_number(float(fit['intercept']), unit)} "
            f"({_interval_text(row, *PB_INTERCEPT_CI, unit=unit)})"
        )
    elif PB_SLOPE in row.index:
        note = _text(row, NOTE)
        text = "no regression line: the Passing-Bablok fit is not estimable" + (
            f" ({note})" if note else ""
        )
    else:
        text = "no regression line in the agreement table"
    if CCC in row.index:
        text += f"; CCC {_number(_float(row, CCC))} ({_interval_text(row, *CCC_CI)})"
    return text


def _scatter(
    study: Study, parameter: str, panels: Sequence[_Panel], absent: Mapping[str, str]
) -> _Drawn:
    fig = _draw_scatter(study, parameter, panels)
    unit, several = _unit(parameter), len(panels) > 1
    counts_in_key = _groups(study, panels)[1] is not None
    caption = _lead_text(
        parameter,
        panels,
        "Method comparison",
        f"{{test}} (y) against {study.reference} (x), the same scale on both axes",
    )
    caption += (
        "Dotted line: identity. Solid line: Passing-Bablok regression (Passing & Bablok 1983), "
        "its equation and Lin's concordance correlation coefficient (CCC; Lin 1989) above "
        "the plot. "
    )
    for k, panel in enumerate(panels):
        caption += (
            f"{_panel_lead(k, panel.title, several)}{_count_text(study, panel, counts_in_key)}; "
            f"{_scatter_numbers(panel.row, unit)}. "
        )
    rows = [p.row for p in panels]
    caption += (
        f"Intervals: {_level_text(rows[0])}; Passing-Bablok: {_how_text(rows, PB_CI_METHOD)}; "
        f"CCC: {_how_text(rows)}."
    )
    caption += _absent_text(absent)
    return _Drawn(
        f"scatter_{parameter}",
        _title("Method comparison", parameter, panels, study),
        caption,
        "agreement",
        parameter,
        None if several else panels[0].method,
        fig,
    )
