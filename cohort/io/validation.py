"""Checking the values and subjects tables: every problem located, nothing silently changed.

The checks are vectorised (cohorts of 100,000 subjects give millions of records) and each
failing row becomes a :class:`~cohort.domain.problems.Problem` naming file, spreadsheet row,
column, value and expectation. At most :data:`PER_CODE` problems are listed per code and
column; the rest are counted in one further problem.
"""

from __future__ import annotations

import re
from collections.abc import Callable

import numpy as np
import pandas as pd

from cohort.domain.problems import ProblemLog
from cohort.domain.segments import segment_model
from cohort.domain.units import INPUT_PARAMETERS
from cohort.io.loading import ROW, RawTable
from cohort.io.settings import StudySettings

PER_CODE = 20
"""Problems listed individually per (code, column) before the rest are summarised."""

ID_COLUMNS = ("subject", "method", "segment")
LONG_COLUMNS = (*ID_COLUMNS, "parameter", "value")
SUBJECT_COLUMNS = ("subject", "group", "field_strength")

_COMMA_DECIMAL = re.compile(r"^[+-]?\d+,\d+$")
_TESLA = re.compile(r"^\s*([0-9]*\.?[0-9]+)\s*[tT]\s*$")


def _flag(
    log: ProblemLog,
    mask: np.ndarray | pd.Series,
    frame: pd.DataFrame,
    *,
    code: str,
    detail: str,
    file: str,
    column: str,
    values: pd.Series | None = None,
    expected: str | None = None,
) -> None:
    """Add one problem per flagged row (up to :data:`PER_CODE`), then a count of the rest."""
    mask = np.asarray(mask, dtype=bool)
    n = int(mask.sum())
    if not n:
        return
    rows = frame.loc[mask, ROW].to_numpy()
    shown = values[mask].to_numpy() if values is not None else [None] * n
    shown_n = min(n, PER_CODE)
    subjects, methods = (_ids(frame, mask, c, shown_n) for c in ("subject", "method"))
    listed = zip(rows[:shown_n], shown[:shown_n], subjects, methods, strict=True)
    for row, value, subject, method in listed:
        log.add(
            code,
            detail,
            file=file,
            row=int(row),
            column=column,
            value=None if value is None else str(value),
            expected=expected,
            subject=subject,
            method=method,
        )
    if n > PER_CODE:
        log.add(
            code,
            f"{n - PER_CODE} more rows with the same problem ({detail}), "
            f"first at row {rows[PER_CODE]}",
            file=file,
            column=column,
        )


def _flag_per_column(
    log: ProblemLog,
    long: pd.DataFrame,
    mask: pd.Series | np.ndarray,
    *,
    code: str,
    detail: str,
    file: str,
    text_column: str,
    expected: str | Callable[[pd.Index], str],
) -> None:
    """:func:`_flag` over the rows of the long values table under ``mask``, one run per
    source column, so that each problem names the user's column; ``expected`` may depend
    on the flagged rows of a column (a function of their index)."""
    for source_column, part in long[np.asarray(mask, dtype=bool)].groupby(
        "source_column", sort=False
    ):
        _flag(
            log,
            np.ones(len(part), dtype=bool),
            part,
            code=code,
            detail=detail,
            file=file,
            column=str(source_column),
            values=long.loc[part.index, text_column],
            expected=expected(part.index) if callable(expected) else expected,
        )


def _ids(frame: pd.DataFrame, mask: np.ndarray, column: str, n: int) -> list[str | None]:
    """The first ``n`` flagged rows' ``column`` (subject or method) as text, ``None`` where
    blank or absent: problems carry IDs in their own fields, never inside their detail text."""
    if column not in frame.columns:
        return [None] * n
    return [
        None if pd.isna(v) or not str(v).strip() else str(v)
        for v in frame.loc[mask, column].to_numpy()[:n]
    ]


def _require(log: ProblemLog, raw: RawTable, columns: tuple[str, ...], what: str) -> bool:
    missing = [c for c in columns if c not in raw.frame.columns]
    hint = ""
    if missing and len(raw.frame):
        first = {str(v).strip().lower() for v in raw.frame.iloc[0].tolist()}
        if set(missing) & first:
            hint = "; the header seems to be on row 2: remove the line(s) above it"
    for column in missing:
        log.add(
            "missing-column",
            f"the {what} table needs a column '{column}'",
            file=raw.name,
            row=1,
            column=column,
            expected=f"columns {list(columns)}; found {list(raw.original_columns.values())}" + hint,
        )
    return not missing


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


def _trim_ids(log: ProblemLog, frame: pd.DataFrame, name: str, columns: tuple[str, ...]) -> None:
    for column in columns:
        text = frame[column]
        if not text.isna().any():  # decided once per distinct ID (millions of cells, few IDs)
            distinct = pd.Series(text.unique(), dtype=text.dtype)
            if distinct.str.strip().eq(distinct).all():
                continue  # nothing to trim: the column stays as it is
        trimmed = text.str.strip()
        changed = trimmed != text
        if changed.any():
            first = int(frame.loc[changed, ROW].iloc[0])
            log.warn(
                "whitespace-trimmed",
                f"white space around {int(changed.sum())} value(s) removed",
                file=name,
                row=first,
                column=column,
            )
        frame[column] = trimmed


def parse_numbers(text: pd.Series) -> tuple[pd.Series, pd.Series, pd.Series]:
    """Parse text cells as floats: ``(values, blank, bad)``; blanks are missing, not errors.

    Each distinct text is parsed once (a column of millions of cells holds far fewer
    distinct texts); cell by cell the result is the same.
    """
    if len(text) > 1000 and not text.isna().any():
        codes, uniques = pd.factorize(text)
        if len(uniques) < len(text) // 2:
            distinct = pd.Series(uniques, dtype=text.dtype, name=text.name)
            parsed = _parse_numbers(distinct)
            return tuple(
                pd.Series(part.to_numpy()[codes], index=text.index, name=text.name)
                for part in parsed
            )  # type: ignore[return-value]
    return _parse_numbers(text)


BLANK_TEXTS = ("", "na", "nan", "n/a")
"""Cell texts (trimmed, any case) read as a blank cell: missing data, not an error."""


def _is_blank(text: pd.Series) -> pd.Series:
    return text.str.strip().str.lower().isin(BLANK_TEXTS)


def _parse_numbers(text: pd.Series) -> tuple[pd.Series, pd.Series, pd.Series]:
    stripped = text.str.strip()
    blank = _is_blank(text)
    numbers = pd.to_numeric(stripped.where(~blank), errors="coerce").astype(float)
    bad = numbers.isna() & ~blank
    return numbers, blank, bad


def to_long(raw: RawTable, log: ProblemLog) -> pd.DataFrame | None:
    """Values table in long layout (one record per value) with source row and column.

    In the wide layout (one column per parameter) a method with every cell of a parameter
    column blank does not measure that parameter: those cells give no records, as an
    absent column gives none. Blank cells of a method that measures the parameter in other
    rows are records of missing data.
    """
    frame = raw.frame
    if "parameter" in frame.columns and "value" in frame.columns:
        if not _require(log, raw, LONG_COLUMNS, "values"):
            return None
        long = frame.copy()
        long["source_column"] = raw.original_columns["value"]
        return long
    wide = [c for c in INPUT_PARAMETERS if c in frame.columns]
    if not wide:
        _require(log, raw, LONG_COLUMNS, "values")
        return None
    if not _require(log, raw, ID_COLUMNS, "values"):
        return None
    extra = [c for c in frame.columns if c not in (*ID_COLUMNS, *wide, ROW)]
    method = frame["method"].str.strip()
    parts = []
    for parameter in wide:
        # A method whose every cell of this column is blank does not measure the parameter
        # (e.g. no field map): its cells are no input values, as if the column were absent.
        # A blank cell of a method that measures it elsewhere is missing data.
        measured = (~_is_blank(frame[parameter])).groupby(method).transform("any")
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
    name = raw.name
    _trim_ids(log, long, name, ("subject", "method"))
    for column in ("subject", "method"):
        _flag(
            log,
            long[column].eq(""),
            long,
            code="blank-id",
            detail=f"{column} is blank",
            file=name,
            column=raw.original_columns[column],
            expected=f"a {column} name",
        )

    model = segment_model(settings.segment_model)
    seg_num, _, _ = parse_numbers(long["segment"])
    valid = seg_num.isin(model.numbers)
    _flag(
        log,
        ~valid.to_numpy(),
        long,
        code="segment-invalid",
        detail="segment must be a whole number of the segment model",
        file=name,
        column=raw.original_columns["segment"],
        values=long["segment"],
        expected=f"an integer {model.numbers[0]}-{model.numbers[-1]} ({model.name})",
    )
    long["segment"] = seg_num.where(valid).round().astype("Int64")

    parameter = long["parameter"].str.strip().str.lower()
    known = parameter.isin(INPUT_PARAMETERS)
    _flag(
        log,
        ~known.to_numpy(),
        long,
        code="unknown-parameter",
        detail="parameter not recognised",
        file=name,
        column=raw.original_columns.get("parameter", "parameter"),
        values=long["parameter"],
        expected=f"one of {list(INPUT_PARAMETERS)}",
    )
    long["parameter"] = parameter

    numbers, blank, bad = parse_numbers(long["value"])
    comma = long["value"].str.strip().str.match(_COMMA_DECIMAL)
    _flag_per_column(
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
    _flag_per_column(
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
    _check_ranges(long, settings, log, name)
    return long


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
    _flag_per_column(
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


def check_subjects(raw: RawTable, settings: StudySettings, log: ProblemLog) -> pd.DataFrame | None:
    """Check the subjects table; return it with ``field_strength`` as float, or ``None``."""
    if not _require(log, raw, SUBJECT_COLUMNS, "subjects"):
        return None
    frame = raw.frame.copy()
    name = raw.name
    col = raw.original_columns
    _check_group_spelling(log, frame, name, col["group"])
    _trim_ids(log, frame, name, ("subject", "group"))
    _flag(
        log,
        frame["subject"].eq(""),
        frame,
        code="blank-id",
        detail="subject is blank",
        file=name,
        column=col["subject"],
        expected="a subject ID",
    )
    named = frame[frame["subject"].ne("")]
    dup = named.duplicated("subject", keep=False)
    for subject, rows in list(named[dup].groupby("subject", sort=False))[:PER_CODE]:
        groups = sorted(set(rows["group"]))
        conflict = f"; conflicting groups {groups}" if len(groups) > 1 else ""
        first, *others = rows[ROW].tolist()
        log.add(
            "duplicate-subject",
            f"subject also in row(s) {others}{conflict}",
            file=name,
            row=int(first),
            column=col["subject"],
            expected="one row per subject",
            subject=str(subject),
        )
    if settings.groups:
        unknown = ~frame["group"].isin(settings.groups)
        _flag(
            log,
            unknown,
            frame,
            code="unknown-group",
            detail="group is not one of the declared groups",
            file=name,
            column=col["group"],
            values=frame["group"],
            expected=f"one of {list(settings.groups)} ([study] groups)",
        )
    else:
        _flag(
            log,
            frame["group"].eq(""),
            frame,
            code="unknown-group",
            detail="group is blank",
            file=name,
            column=col["group"],
            values=frame["group"],
            expected="a group name",
        )
    text = frame["field_strength"].str.strip()
    tesla = text.str.extract(_TESLA, expand=False)
    with_unit = tesla.notna() & pd.to_numeric(text, errors="coerce").isna()
    if with_unit.any():
        log.warn(
            "unit-in-text",
            f"'T' removed from {int(with_unit.sum())} field strength(s), "
            f"e.g. {text[with_unit].iloc[0]!r}",
            file=name,
            row=int(frame.loc[with_unit, ROW].iloc[0]),
            column=col["field_strength"],
        )
        text = text.where(~with_unit, tesla)
    numbers, blank, bad = parse_numbers(text)
    invalid = blank | bad | ~(numbers > 0) | np.isinf(numbers)
    _flag(
        log,
        invalid,
        frame,
        code="field-strength",
        detail="field strength missing, not a number or not positive",
        file=name,
        column=col["field_strength"],
        values=frame["field_strength"],
        expected="the main field in tesla, e.g. 1.5 or 3",
    )
    frame["field_strength"] = numbers.where(~invalid)
    return frame


def _group_key(name: str) -> str:
    """A group name without case and with runs of white space as one space."""
    return " ".join(name.split()).casefold()


def _check_group_spelling(log: ProblemLog, frame: pd.DataFrame, name: str, column: str) -> None:
    """Warn about group names that differ only in case or spacing ("Acute", "acute ",
    "acute  mi"): a typing slip would otherwise split one group in two (common practice)."""
    spellings = pd.Series(frame["group"].unique(), dtype=object)
    spellings = spellings[spellings.map(lambda g: isinstance(g, str) and g.strip() != "")]
    keys = spellings.map(_group_key)
    for _, names in spellings.groupby(keys.to_numpy(), sort=False):
        if len(names) < 2:
            continue
        listed = list(names)  # in order of first appearance
        kept = len({n.strip() for n in listed})
        first = frame.loc[frame["group"].isin(listed[1:]), ROW].iloc[0]
        log.warn(
            "group-spelling",
            f"group names {listed} differ only in case or spacing; "
            + (
                f"they count as {kept} different groups: write one spelling if they are one group"
                if kept > 1
                else "surrounding spaces are removed, so they count as one group"
            ),
            file=name,
            row=int(first),
            column=column,
        )


def check_across(
    values: pd.DataFrame,
    subjects: pd.DataFrame,
    settings: StudySettings,
    log: ProblemLog,
    values_name: str,
    subjects_name: str,
) -> None:
    """Checks that need both tables: subjects on both sides, methods, reference."""
    known = set(subjects["subject"])
    present = values["subject"].ne("")
    orphan = values[present & ~values["subject"].isin(known)]
    for subject, rows in list(orphan.groupby("subject", sort=False))[:PER_CODE]:
        log.add(
            "subject-without-info",
            f"subject with {len(rows)} value(s) is not in {subjects_name}",
            file=values_name,
            row=int(rows[ROW].iloc[0]),
            column="subject",
            expected=f"a row for this subject in {subjects_name}",
            subject=str(subject),
        )
    n_orphans = orphan["subject"].nunique()
    if n_orphans > PER_CODE:
        log.add(
            "subject-without-info", f"{n_orphans - PER_CODE} more such subjects", file=values_name
        )
    with_values = set(values["subject"].unique())
    lonely = subjects[subjects["subject"].ne("") & ~subjects["subject"].isin(with_values)]
    _flag(
        log,
        np.ones(len(lonely), dtype=bool),
        lonely,
        code="subject-without-values",
        detail=f"subject has no values in {values_name}",
        file=subjects_name,
        column="subject",
        expected=f"values for this subject in {values_name}, or remove the row",
    )
    methods = sorted(m for m in values["method"].unique() if m)
    if len(methods) < 2:
        log.add(
            "too-few-methods",
            f"found method(s) {methods}",
            file=values_name,
            column="method",
            expected="a reference method and at least one method to compare with it",
        )
    if settings.reference not in methods:
        log.add(
            "unknown-reference",
            f"reference method {settings.reference!r} is not in the values table",
            file=values_name,
            column="method",
            value=settings.reference,
            expected=f"one of {methods}",
        )
