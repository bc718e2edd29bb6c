"""Checks of the values table: columns, IDs, segments, parameters, numbers, duplicates and
plausible ranges (see :mod:`cohort.io.validation` for how problems are listed)."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from cohort.domain.problems import ProblemLog
from cohort.domain.segments import segment_model
from cohort.domain.units import INPUT_PARAMETERS
from cohort.io.loading import ROW, RawTable
from cohort.io.settings import StudySettings
from cohort.io.validation import (
    ID_COLUMNS,
    LONG_COLUMNS,
    PER_CODE,
    flag_per_column,
    flag_rows,
    is_blank,
    parse_numbers,
    require_columns,
    trim_ids,
)

_COMMA_DECIMAL = re.compile(r"^[+-]?\d+,\d+$")


HEADER_UNITS = {
    ("ff", "percent"): ("%", "percent", "pct", "pp"),
    ("ff", "fraction"): ("fraction", "frac", "0-1"),
    ("r2star", None): ("1/s", "s-1", "s^-1", "/s", "hz"),
    ("t2star", None): ("ms", "msec"),
    ("field", "Hz"): ("hz",),
    ("field", "ppm"): ("ppm",),
}
"""Units accepted in a column name for each parameter and declared unit (lower case)."""


def check_header_units(raw: RawTable, settings: StudySettings, log: ProblemLog) -> None:
    """A unit written in a column name must be the declared one; it is then removed."""
    declared = {"ff": settings.ff_unit, "field": settings.field_unit}
    for column, unit in raw.header_units.items():
        original = raw.original_columns[column]
        if column not in INPUT_PARAMETERS:
            log.warn(
                "unit-in-text",
                f"'{unit}' in the column name {original!r} ignored: units are declared "
                "in the study file ([units])",
                file=raw.name,
                row=1,
                column=original,
            )
            continue
        accepted = HEADER_UNITS[(column, declared.get(column))]
        if unit.lower() in accepted:
            log.warn(
                "unit-in-text",
                f"unit '{unit}' read from the column name {original!r}",
                file=raw.name,
                row=1,
                column=original,
            )
        else:
            log.add(
                "unit-mismatch",
                f"the column name {original!r} gives the unit '{unit}'",
                file=raw.name,
                row=1,
                column=original,
                expected=f"one of {list(accepted)} for {column}"
                + (
                    f" as declared (units.{column} = '{declared[column]}')"
                    if column in declared
                    else ""
                ),
            )


def to_long(raw: RawTable, log: ProblemLog) -> pd.DataFrame | None:
    """Values table in long layout (one record per value) with source row and column.

    In the wide layout (one column per parameter) a method with every cell of a parameter
    column blank does not measure that parameter: those cells give no records, as an
    absent column gives none. Blank cells of a method that measures the parameter in other
    rows are records of missing data.
    """
    frame = raw.frame
    if "parameter" in frame.columns and "value" in frame.columns:
        if not require_columns(log, raw, LONG_COLUMNS, "values"):
            return None
        long = frame.copy()
        long["source_column"] = raw.original_columns["value"]
        return long
    wide = [c for c in INPUT_PARAMETERS if c in frame.columns]
    if not wide:
        require_columns(log, raw, LONG_COLUMNS, "values")
        return None
    if not require_columns(log, raw, ID_COLUMNS, "values"):
        return None
    extra = [c for c in frame.columns if c not in (*ID_COLUMNS, *wide, ROW)]
    method = frame["method"].str.strip()
    parts = []
    for parameter in wide:
        # A method whose every cell of this column is blank does not measure the parameter
        # (e.g. no field map): its cells are no input values, as if the column were absent.
        # A blank cell of a method that measures it elsewhere is missing data.
        measured = (~is_blank(frame[parameter])).groupby(method).transform("any")
        keep = (measured | method.eq("")).to_numpy()
        part = frame.loc[keep, [ROW, *ID_COLUMNS, *extra]].copy()
        part["parameter"] = parameter
        part["value"] = frame.loc[keep, parameter]
        part["source_column"] = raw.original_columns[parameter]
        parts.append(part)
    return pd.concat(parts, ignore_index=True)


def check_values(raw: RawTable, settings: StudySettings, log: ProblemLog) -> pd.DataFrame | None:
    """Check the values table and return its records, or ``None`` when columns are missing.

    Columns of the result: ``_row, subject, method, segment (Int64), parameter,
    value_text, input_value (float, input unit), blank (bool), source_column`` and any extra
    columns of the input.
    """
    check_header_units(raw, settings, log)
    long = to_long(raw, log)
    if long is None:
        return None
    _check_ids(long, raw, log)
    _check_segments(long, raw, settings, log)
    known = _check_parameters(long, raw, log)
    long = _check_numbers(long, raw.name, log)
    _check_duplicates(long, known, raw.name, log)
    _check_ranges(long, settings, log, raw.name)
    return long


def _check_ids(long: pd.DataFrame, raw: RawTable, log: ProblemLog) -> None:
    """Subject and method names: trimmed (with a warning), never blank."""
    trim_ids(log, long, raw.name, ("subject", "method"))
    for column in ("subject", "method"):
        flag_rows(
            log,
            long[column].eq(""),
            long,
            code="blank-id",
            detail=f"{column} is blank",
            file=raw.name,
            column=raw.original_columns[column],
            expected=f"a {column} name",
        )


def _check_segments(
    long: pd.DataFrame, raw: RawTable, settings: StudySettings, log: ProblemLog
) -> None:
    """Segments are whole numbers of the segment model; ``segment`` becomes Int64."""
    model = segment_model(settings.segment_model)
    seg_num, _, _ = parse_numbers(long["segment"])
    valid = seg_num.isin(model.numbers)
    flag_rows(
        log,
        ~valid.to_numpy(),
        long,
        code="segment-invalid",
        detail="segment must be a whole number of the segment model",
        file=raw.name,
        column=raw.original_columns["segment"],
        values=long["segment"],
        expected=f"an integer {model.numbers[0]}-{model.numbers[-1]} ({model.name})",
    )
    long["segment"] = seg_num.where(valid).round().astype("Int64")


def _check_parameters(long: pd.DataFrame, raw: RawTable, log: ProblemLog) -> pd.Series:
    """Parameters are known names (case and spaces ignored); returns which rows are known."""
    parameter = long["parameter"].str.strip().str.lower()
    known = parameter.isin(INPUT_PARAMETERS)
    flag_rows(
        log,
        ~known.to_numpy(),
        long,
        code="unknown-parameter",
        detail="parameter not recognised",
        file=raw.name,
        column=raw.original_columns.get("parameter", "parameter"),
        values=long["parameter"],
        expected=f"one of {list(INPUT_PARAMETERS)}",
    )
    long["parameter"] = parameter
    return known


def _check_numbers(long: pd.DataFrame, name: str, log: ProblemLog) -> pd.DataFrame:
    """Values are finite numbers or blank; adds ``value_text``, ``input_value``, ``blank``."""
    numbers, blank, bad = parse_numbers(long["value"])
    comma = long["value"].str.strip().str.match(_COMMA_DECIMAL)
    flag_per_column(
        log,
        long,
        bad,
        code="not-numeric",
        detail="value is not a number",
        file=name,
        text_column="value",
        expected=lambda index: (
            "a number with a decimal point (e.g. 12.5), or a blank cell for missing"
            + ("; decimal commas are not read" if comma[index].any() else "")
        ),
    )
    flag_per_column(
        log,
        long,
        np.isinf(numbers.to_numpy()),
        code="not-finite",
        detail="value is infinite",
        file=name,
        text_column="value",
        expected="a finite number, or a blank cell for missing",
    )
    long["value_text"] = long["value"]
    long["input_value"] = numbers.where(~np.isinf(numbers))
    long["blank"] = blank
    long = long.drop(columns=["value"])
    return long


def _check_duplicates(long: pd.DataFrame, known: pd.Series, name: str, log: ProblemLog) -> None:
    """One value per subject, method, segment and parameter."""
    key = ["subject", "method", "segment", "parameter"]
    checkable = long["segment"].notna() & known & long["subject"].ne("") & long["method"].ne("")
    dup = long[checkable].duplicated(key, keep=False)
    if dup.any():
        dups = long[checkable][dup.to_numpy()]
        for _, rows in list(dups.groupby(key, sort=False))[:PER_CODE]:
            first, *others = rows[ROW].tolist()
            log.add(
                "duplicate-value",
                f"segment {rows['segment'].iloc[0]}, parameter {rows['parameter'].iloc[0]!r} "
                f"also in row(s) {others}",
                file=name,
                row=int(first),
                column=str(rows["source_column"].iloc[0]),
                expected="one value per subject, method, segment and parameter",
                subject=str(rows["subject"].iloc[0]),
                method=str(rows["method"].iloc[0]),
            )
        n_groups = dups.groupby(key, sort=False).ngroups
        if n_groups > PER_CODE:
            log.add("duplicate-value", f"{n_groups - PER_CODE} more duplicated keys", file=name)


IMPLAUSIBLE = "_implausible"
"""Column of the checked values table: why a value is implausible (empty when it is not);
filled only with ``[checks] implausible = "exclude"``, else each such value is an error."""


def flag_implausible(
    long: pd.DataFrame,
    mask: pd.Series | np.ndarray,
    settings: StudySettings,
    log: ProblemLog,
    name: str,
    *,
    detail: str,
    expected: str,
    rule: str,
) -> None:
    """Apply the ``[checks] implausible`` policy to the rows of ``long`` under ``mask``.

    ``"refuse"``: one ``implausible-value`` error per row (:func:`_flag`, per source column).
    ``"exclude"``: the row's :data:`IMPLAUSIBLE` reason becomes ``"implausible: <rule>"``
    (the first rule a value breaks), for the loader to list it as excluded.
    """
    mask = np.asarray(mask, dtype=bool)
    if not mask.any():
        return
    if settings.checks.implausible == "exclude":
        if IMPLAUSIBLE not in long.columns:
            long[IMPLAUSIBLE] = ""
        fresh = mask & long[IMPLAUSIBLE].eq("").to_numpy()
        long.loc[fresh, IMPLAUSIBLE] = f"implausible: {rule}"
        return
    flag_per_column(
        log,
        long,
        mask,
        code="implausible-value",
        detail=detail,
        file=name,
        text_column="value_text",
        expected=expected,
    )


def report_excluded_implausible(long: pd.DataFrame, log: ProblemLog, name: str) -> None:
    """One summary warning for the values excluded as implausible (policy ``"exclude"``)."""
    if IMPLAUSIBLE not in long.columns:
        return
    reasons = long.loc[long[IMPLAUSIBLE].ne(""), IMPLAUSIBLE].value_counts(sort=False)
    if not reasons.sum():
        return
    log.warn(
        "implausible-value",
        f"{int(reasons.sum())} implausible value(s) excluded ([checks] implausible = "
        "'exclude'): "
        + "; ".join(
            f"{n} x {reason.removeprefix('implausible: ')}" for reason, n in reasons.items()
        )
        + "; each is listed in the exclusions table",
        file=name,
    )


def _check_ranges(long: pd.DataFrame, settings: StudySettings, log: ProblemLog, name: str) -> None:
    checks = settings.checks
    v = long["input_value"]

    def flag(mask: pd.Series, detail: str, expected: str, rule: str) -> None:
        flag_implausible(
            long, mask, settings, log, name, detail=detail, expected=expected, rule=rule
        )

    ff = long["parameter"].eq("ff") & v.notna()
    if settings.ff_unit == "percent":
        low, high = checks.ff_limits("percent")
        _check_percent_scale(long, ff, checks.ff_percent_confirmed, log, name)
        flag(
            ff & ((v < low) | (v > high)),
            "fat fraction outside the plausible range",
            f"{low:g} to {high:g} % (small negative values are noise; see [checks])",
            f"fat fraction outside {low:g} to {high:g} % ([checks] ff_below_zero_tolerance, "
            "ff_above_100_tolerance)",
        )
    else:
        low, high = checks.ff_limits("fraction")
        above = ff & (v > high)
        if above.sum() > 0.5 * ff.sum():
            rows = long[above]
            log.add(
                "unit-mismatch",
                f"{int(above.sum())} of {int(ff.sum())} fat fractions exceed 1: they look like "
                "percent, but units.ff = 'fraction' was declared",
                file=name,
                row=int(rows[ROW].iloc[0]),
                column=str(rows["source_column"].iloc[0]),
                expected="fractions 0-1, or declare units.ff = 'percent'",
            )
            above = above & False
        flag(
            above,
            "fat fraction above 1 (fraction)",
            f"at most {high:g}",
            f"fat fraction above the plausible maximum {high:g} (fraction; "
            "[checks] ff_above_100_tolerance)",
        )
        flag(
            ff & (v < low),
            "fat fraction below 0",
            f"at least {low:g}",
            f"fat fraction below the plausible minimum {low:g} (fraction; "
            "[checks] ff_below_zero_tolerance)",
        )
    r2 = long["parameter"].eq("r2star") & v.notna()
    flag(r2 & (v < 0), "R2* is negative", "R2* >= 0 1/s", "R2* is negative")
    flag(
        r2 & (v > checks.r2star_max),
        "R2* above the plausible maximum",
        f"at most {checks.r2star_max:g} 1/s ([checks] r2star_max)",
        f"R2* above the plausible maximum {checks.r2star_max:g} 1/s ([checks] r2star_max)",
    )
    fld = long["parameter"].eq("field") & v.notna()
    if settings.field_unit == "Hz":
        flag_field(long, fld & (v.abs() > checks.field_max_abs_hz), settings, log, name)
    t2 = long["parameter"].eq("t2star") & v.notna()
    flag(t2 & (v <= 0), "T2* must be positive", "T2* > 0 ms", "T2* is not positive")
    t2_min = 1000.0 / checks.r2star_max
    flag(
        t2 & (v > 0) & (v < t2_min),
        "T2* below the plausible minimum",
        f"at least {t2_min:g} ms ([checks] r2star_max)",
        f"T2* below the plausible minimum {t2_min:g} ms ([checks] r2star_max)",
    )


def flag_field(
    long: pd.DataFrame,
    mask: pd.Series | np.ndarray,
    settings: StudySettings,
    log: ProblemLog,
    name: str,
) -> None:
    """Field offsets beyond ``[checks] field_max_abs_hz``: in Hz as given, or after the
    conversion from ppm (which needs the subjects' field strengths, hence a function of its
    own that the loader calls once the values are in Hz)."""
    limit = settings.checks.field_max_abs_hz
    flag_implausible(
        long,
        mask,
        settings,
        log,
        name,
        detail="field offset beyond the plausible range"
        + (" (after conversion from ppm)" if settings.field_unit == "ppm" else ""),
        expected=f"|field| at most {limit:g} Hz ([checks] field_max_abs_hz)",
        rule=f"field offset beyond the plausible {limit:g} Hz ([checks] field_max_abs_hz)",
    )


def _check_percent_scale(
    long: pd.DataFrame, ff: pd.Series, confirmed: bool, log: ProblemLog, name: str
) -> None:
    """Fat fractions declared in percent that look like 0-1 fractions.

    One method within 0-1 while another reaches beyond 1.5 %: an error naming the method.
    Every fat fraction within 0-1 (but not all exactly 0, which reads the same in either
    unit): an error, or a warning with ``[checks] ff_percent_confirmed = true``.
    """
    v = long["input_value"]
    size = v[ff].abs()
    scale_by_method = size.groupby(long.loc[ff, "method"], observed=True).max()
    small = scale_by_method[scale_by_method <= 1.0]
    large = scale_by_method[scale_by_method > 1.5]
    for method in small.index if len(large) else []:
        rows = long[ff & long["method"].eq(method)]
        log.add(
            "unit-mismatch",
            f"fat fractions of method {method!r} are all within 0-1 while "
            f"{list(large.index)} reach {large.max():.3g}: they look like fractions",
            file=name,
            row=int(rows[ROW].iloc[0]),
            column=str(rows["source_column"].iloc[0]),
            expected="all methods in percent as declared (units.ff = 'percent'), "
            "or convert this method to percent",
            method=str(method),
        )
    if not (len(small) and len(small) == len(scale_by_method) and small.max() > 0):
        return
    largest = long.loc[size.idxmax()]
    detail = (
        f"every fat fraction is within 0-1 (largest {largest['value_text']!s}, this row) while "
        "units.ff = 'percent' is declared: they look like fractions"
    )
    where = {
        "file": name,
        "row": int(largest[ROW]),
        "column": str(largest["source_column"]),
    }
    if confirmed:
        log.warn(
            "unit-mismatch",
            detail + "; accepted as percent ([checks] ff_percent_confirmed = true)",
            **where,
        )
    else:
        log.add(
            "unit-mismatch",
            detail,
            expected="declare units.ff = 'fraction' if these are 0-1 fractions; if they "
            "really are percent (a cohort with almost no fat), set "
            "[checks] ff_percent_confirmed = true",
            **where,
        )
