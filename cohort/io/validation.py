"""Checking the input tables: shared machinery, and the checks that need both tables.

The checks are vectorised (cohorts of 100,000 subjects give millions of records) and each
failing row becomes a :class:`~cohort.domain.problems.Problem` naming file, spreadsheet row,
column, value and expectation. At most :data:`PER_CODE` problems are listed per code and
column; the rest are counted in one further problem. The values table's checks are in
:mod:`cohort.io.value_checks`, the subjects table's in :mod:`cohort.io.subject_checks`.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from cohort.domain.problems import ProblemLog
from cohort.io.loading import ROW, RawTable
from cohort.io.settings import StudySettings

PER_CODE = 20
"""Problems listed individually per (code, column) before the rest are summarised."""

ID_COLUMNS = ("subject", "method", "segment")
LONG_COLUMNS = (*ID_COLUMNS, "parameter", "value")
SUBJECT_COLUMNS = ("subject", "group", "field_strength")


def flag_rows(
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


def flag_per_column(
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
        flag_rows(
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


def require_columns(log: ProblemLog, raw: RawTable, columns: tuple[str, ...], what: str) -> bool:
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


def trim_ids(log: ProblemLog, frame: pd.DataFrame, name: str, columns: tuple[str, ...]) -> None:
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


def is_blank(text: pd.Series) -> pd.Series:
    return text.str.strip().str.lower().isin(BLANK_TEXTS)


def _parse_numbers(text: pd.Series) -> tuple[pd.Series, pd.Series, pd.Series]:
    stripped = text.str.strip()
    blank = is_blank(text)
    numbers = pd.to_numeric(stripped.where(~blank), errors="coerce").astype(float)
    bad = numbers.isna() & ~blank
    return numbers, blank, bad


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
    flag_rows(
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
