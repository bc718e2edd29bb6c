"""Checks of the subjects table: IDs, groups (declared, spelled consistently) and field
strengths (see :mod:`cohort.io.validation` for how problems are listed)."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from cohort.domain.problems import ProblemLog
from cohort.io.loading import ROW, RawTable
from cohort.io.settings import StudySettings
from cohort.io.validation import (
    PER_CODE,
    SUBJECT_COLUMNS,
    flag_rows,
    parse_numbers,
    require_columns,
    trim_ids,
)

_TESLA = re.compile(r"^\s*([0-9]*\.?[0-9]+)\s*[tT]\s*$")


def check_subjects(raw: RawTable, settings: StudySettings, log: ProblemLog) -> pd.DataFrame | None:
    """Check the subjects table; return it with ``field_strength`` as float, or ``None``."""
    if not require_columns(log, raw, SUBJECT_COLUMNS, "subjects"):
        return None
    frame = raw.frame.copy()
    _check_group_spelling(log, frame, raw.name, raw.original_columns["group"])
    trim_ids(log, frame, raw.name, ("subject", "group"))
    _check_subject_ids(frame, raw, log)
    _check_groups(frame, raw, settings, log)
    frame["field_strength"] = _field_strengths(frame, raw, log)
    return frame


def _check_subject_ids(frame: pd.DataFrame, raw: RawTable, log: ProblemLog) -> None:
    """Subject IDs are not blank and each is in one row."""
    name, col = raw.name, raw.original_columns
    flag_rows(
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


def _check_groups(
    frame: pd.DataFrame, raw: RawTable, settings: StudySettings, log: ProblemLog
) -> None:
    """Groups are declared ones (``[study] groups``), or at least not blank."""
    name, col = raw.name, raw.original_columns
    if settings.groups:
        unknown = ~frame["group"].isin(settings.groups)
        flag_rows(
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
        flag_rows(
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


def _field_strengths(frame: pd.DataFrame, raw: RawTable, log: ProblemLog) -> pd.Series:
    """Field strengths in tesla ('1.5 T' read with a warning); NaN where invalid."""
    name, col = raw.name, raw.original_columns
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
    flag_rows(
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
    return numbers.where(~invalid)


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
