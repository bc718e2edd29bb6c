"""Agreement figures: Bland-Altman plots (difference and ratio scale) and method-comparison
scatters, one per parameter and test method, drawn from the pairs of ``study.paired`` with
the bias, limits, Passing-Bablok line and CCC of the agreement table (stratum ``all``).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterator, Mapping

import numpy as np
import pandas as pd

from cohort.domain.units import PARAMETERS
from cohort.figures.captions import (
    _LIMITS_TEXT,
    _RATIO_TEXT,
    _REGRESSION_TEXT,
    _bands_text,
    _ci_text,
    _counts_text,
    _label,
    _level_text,
    _number,
    _unit,
)
from cohort.figures.layout import _fit_width
from cohort.figures.records import SkippedFigure, _Drawn, _Item, _slug
from cohort.figures.tables import (
    AGREEMENT_REQUIRED,
    AGREEMENT_TABLE,
    ALL_STRATUM,
    CCC,
    CCC_CI,
    CI_METHOD,
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
from cohort.plots.agreement_plots import bland_altman_plot, method_scatter
from cohort.plots.limit_lines import REGRESSION_KEYS
from cohort.stats.results import CohortWarning


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
