"""The column names the figures read are columns the analysis writes.

The agreement table's columns are declared once (:mod:`cohort.analysis.agreement_columns`);
the figure and plot modules name the ones they read, and this test keeps the two in step, so
a renamed column fails here instead of silently dropping a band or a line from a figure.
"""

from __future__ import annotations

from cohort.analysis.agreement_columns import AGREEMENT_COLUMNS
from cohort.figures import tables
from cohort.plots import limit_lines


def _read_by_figures() -> set[str]:
    names = {
        *tables.AGREEMENT_REQUIRED,
        *tables.LIMIT_CI_COLUMNS,
        tables.CONFIDENCE_LEVEL,
        tables.CI_METHOD,
        tables.NOTE,
        tables.CCC,
        *tables.CCC_CI,
        tables.PB_SLOPE,
        tables.PB_INTERCEPT,
        *tables.PB_SLOPE_CI,
        *tables.PB_INTERCEPT_CI,
        tables.PB_CI_METHOD,
        *tables.RATIO_COLUMNS.values(),
        *limit_lines.REGRESSION_KEYS,
    }
    for pair in limit_lines._CI_KEYS.values():
        names.update(pair)
    return names


def _unknown(names: set[str]) -> list[str]:
    return sorted(names - set(AGREEMENT_COLUMNS))


def test_every_agreement_column_a_figure_reads_is_written_by_the_analysis():
    missing = _unknown(_read_by_figures())
    assert not missing, f"figures read columns the agreement table does not have: {missing}"


def test_the_check_sees_a_misspelt_column(monkeypatch):
    monkeypatch.setattr(tables, "PB_SLOPE", "pb_slop")
    assert _unknown(_read_by_figures()) == ["pb_slop"]
