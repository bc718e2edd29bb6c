"""The computed tables the figures read: their names, the columns each figure needs, and
small readers of rows, of the study's groups and field strengths.

A table that is given but lacks a required column is an error (``ValueError`` naming the
columns): that is a bug upstream, not a study without that analysis.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from types import MappingProxyType

import pandas as pd

from cohort.analysis.display import (  # noqa: F401 (the display table names, read by the parts)
    DIFFERENCE_MEDIANS,
    FIELD_DEPENDENT_PARAMETERS,
    PAIRED_SUBJECT_MEANS,
    SEGMENT_MEDIANS,
    SEGMENT_PREVALENCE,
    SUBJECT_MEANS,
)
from cohort.domain.segments import segment_model
from cohort.domain.units import PARAMETERS
from cohort.io.study import Study

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


def _group_label(study: Study, group: object) -> str:
    return study.group_label(group)


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


def _model_numbers(study: Study) -> tuple[int, ...]:
    return segment_model(study.settings.segment_model).numbers


def _positive(frame: pd.DataFrame) -> pd.Series:
    """Positivity as nullable boolean: NA where a segment was not classified."""
    return frame["positive"].astype("boolean")


def _finding_parameter(rows: pd.DataFrame) -> str | None:
    if "parameter" not in rows.columns:
        return None
    codes = [str(c) for c in pd.unique(rows["parameter"].dropna())]
    return codes[0] if len(codes) == 1 and codes[0] in PARAMETERS else None


def _display_table(
    tables: Mapping[str, pd.DataFrame], name: str, make: Callable[[], pd.DataFrame]
) -> pd.DataFrame:
    """The display summary ``name`` from ``tables`` (a report's run computes them all in the
    analysis, :func:`cohort.analysis.display.display_tables`), or ``make()``, the same
    function of :mod:`cohort.analysis.display`, when a caller gave only the result tables."""
    table = tables.get(name)
    return make() if table is None else table
