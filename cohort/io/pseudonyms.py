"""Pseudonymisation of subject IDs: stable keyed codes in every output.

Subject IDs are often hospital identifiers that must not leave the institution in a shared
report. A code is ``"P"`` followed by the first 12 hex digits of HMAC-SHA256(key, text)
(RFC 2104 keyed hashing): the same key gives the same code in every run, and without the key
a code cannot be traced back by hashing candidate IDs. The key comes from a file or the
environment variable :data:`KEY_VARIABLE`; it is never written to any output. The list
linking IDs to codes is written to a separate file, outside the report folder.

What :func:`pseudonymize_study` does, and never does:

- replaces whole cell values, never parts of a text: the ``subject`` column of every table,
  the ``subject`` field of every warning, a warning's ``value`` when it is a subject ID or
  comes from the subject column or an identifying column, and every non-blank cell of the
  extra columns declared in ``[study] identifying_columns``;
- drops any other extra input column in which a cell equals a subject ID (trimmed, case
  ignored) or contains a subject ID of at least :data:`MIN_SUBSTRING_ID` characters, with a
  warning naming the column and the rule (shorter IDs such as ``"7"`` cannot be told apart
  from numbers inside a text);
- withholds, whole, a warning's free text that contains a subject ID of that length;
- names input files by their role (:data:`ROLES`), since a file or folder name can hold an
  identifier;
- leaves measurement text (``value_text`` of the records) as it was: numbers are not IDs.
"""

from __future__ import annotations

import hashlib
import hmac
import os
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, replace
from pathlib import Path

import pandas as pd

from cohort.domain.problems import Problem, StudyError
from cohort.domain.thresholds import CULPRIT_COLUMN
from cohort.io.settings import StudySettings
from cohort.io.study import RECORD_COLUMNS, Study
from cohort.io.validation import SUBJECT_COLUMNS

KEY_VARIABLE = "COHORT_PSEUDONYM_KEY"
MIN_KEY_BYTES = 16
"""A shorter key could be guessed by trying keys (RFC 2104 recommends at least the hash
output length; 16 bytes is a floor)."""

MIN_SUBSTRING_ID = 4
"""Subject IDs of at least this many characters are looked for inside texts; a shorter ID
(``"7"``) cannot be told apart from the digits of a number."""

DROPPED_COLUMN_CODE = "identifying-column-dropped"
"""Problem code of the warning for a dropped extra column (the remedy is the study option
``identifying_columns``)."""

ROLES: Mapping[str, str] = {
    "values": "values table",
    "subjects": "subjects table",
    "study_file": "study file",
}
"""How a pseudonymised run names each input (settings attribute -> role)."""
OTHER_INPUT = "input file"
"""The name of any other file a warning names."""

WITHHELD = "(withheld in a pseudonymised run: holds a subject ID)"
"""What replaces, whole, a warning text that holds a subject ID."""

CODE_LIST_COLUMNS = ("kind", "column", "value", "code")
"""Columns of the code list: what kind of value, its input column, the value, its code."""
SUBJECT_KIND = "subject ID"
IDENTIFYING_KIND = "identifying value"

DEFINED_SUBJECT_COLUMNS = frozenset((*SUBJECT_COLUMNS, CULPRIT_COLUMN))
"""Columns of the subjects table that cohort itself defines; the others are extra."""


def load_key(key_file: str | Path | None = None) -> bytes:
    """The pseudonymisation key from ``key_file`` or the environment.

    The key is text (UTF-8), surrounding white space removed. Raises
    :class:`~cohort.domain.problems.StudyError` when the file is missing, not a readable file, not
    UTF-8 text, or the key is shorter than :data:`MIN_KEY_BYTES` bytes.
    """
    if key_file is not None:
        path = Path(key_file)
        where = str(path)
        if not path.exists():
            raise StudyError([Problem("file-missing", "pseudonym key file not found", file=where)])
        if not path.is_file():
            raise StudyError(
                [Problem("file-unreadable", "pseudonym key path is not a file", file=where)]
            )
        try:
            key = path.read_bytes().decode("utf-8").strip().encode("utf-8")
        except OSError as exc:
            raise StudyError(
                [
                    Problem(
                        "file-unreadable",
                        f"pseudonym key file cannot be read ({exc.strerror or exc})",
                        file=where,
                    )
                ]
            ) from None
        except UnicodeDecodeError:
            raise StudyError(
                [
                    Problem(
                        "file-unreadable",
                        "pseudonym key file is not UTF-8 text",
                        file=where,
                        expected="a text secret (e.g. a long random passphrase)",
                    )
                ]
            ) from None
    else:
        key = os.environ.get(KEY_VARIABLE, "").strip().encode("utf-8")
        where = f"environment variable {KEY_VARIABLE}"
    if len(key) < MIN_KEY_BYTES:
        raise StudyError(
            [
                Problem(
                    "study-option",
                    f"pseudonym key from {where} is missing or shorter than {MIN_KEY_BYTES} bytes",
                    expected=f"a secret of at least {MIN_KEY_BYTES} characters in --key-file or "
                    f"{KEY_VARIABLE}",
                )
            ]
        )
    return key


def pseudonym(text: str, key: bytes) -> str:
    """The code of one ID or identifying value: ``"P"`` + 12 hex digits of
    HMAC-SHA256(key, text)."""
    return "P" + hmac.new(key, text.encode("utf-8"), hashlib.sha256).hexdigest()[:12]


def code_list(entries: Iterable[tuple[str, str, str]], key: bytes) -> pd.DataFrame:
    """The code list (:data:`CODE_LIST_COLUMNS`) of ``(kind, column, value)`` entries.

    Raises ``RuntimeError`` if two different values would share a code (48-bit codes:
    vanishingly rare, but never silent).
    """
    rows = [(*entry, pseudonym(entry[2], key)) for entry in dict.fromkeys(entries)]
    frame = pd.DataFrame(rows, columns=list(CODE_LIST_COLUMNS), dtype=object)
    distinct = frame.drop_duplicates("value")
    if distinct["code"].duplicated().any():
        raise RuntimeError("two values share a pseudonym code; use a longer code")
    return frame


@dataclass(frozen=True)
class _IdIndex:
    """Subject IDs prepared for whole-text and inside-text look-ups (case ignored)."""

    whole: frozenset[str]
    long: frozenset[str]
    lengths: tuple[int, ...]

    @classmethod
    def of(cls, ids: Iterable[str]) -> _IdIndex:
        whole = frozenset(i.strip().casefold() for i in ids if i.strip())
        long = frozenset(i for i in whole if len(i) >= MIN_SUBSTRING_ID)
        return cls(whole, long, tuple(sorted({len(i) for i in long})))

    def equals(self, text: str) -> bool:
        return text.strip().casefold() in self.whole

    def contains(self, text: str) -> bool:
        """Whether ``text`` holds an ID of at least :data:`MIN_SUBSTRING_ID` characters;
        every window of each ID length is looked up (no pattern over all IDs)."""
        folded = text.casefold()
        return any(
            folded[i : i + n] in self.long for n in self.lengths for i in range(len(folded) - n + 1)
        )

    def holds(self, text: str) -> bool:
        return self.equals(text) or self.contains(text)


def _name(column: object) -> str:
    """A column name as the loader normalises it (trimmed, lower case)."""
    return str(column).strip().lower()


def _roles(settings: StudySettings) -> dict[str, str]:
    """Every way an input file can be named (file name, relative name, path) -> its role."""
    names: dict[str, str] = {}
    for attribute, role in ROLES.items():
        path = getattr(settings, attribute)
        if path is None:
            continue
        path = Path(path)
        for name in (path.name, settings.input_name(path), str(path), str(path.resolve())):
            if name:
                names.setdefault(name, role)
    return names


def _role(file: str | None, roles: Mapping[str, str]) -> str | None:
    return None if file is None else roles.get(str(file), OTHER_INPUT)


def _distinct(column: pd.Series) -> list[str]:
    """The distinct texts of a column (a categorical's categories: no pass over its rows)."""
    if isinstance(column.dtype, pd.CategoricalDtype):
        return [str(c) for c in column.cat.categories]
    return [str(c) for c in pd.unique(column)]


def _recode_subjects(column: pd.Series, mapping: Mapping[str, str]) -> pd.Series:
    """Whole-cell replacement of subject IDs (categories renamed, or text mapped)."""
    if isinstance(column.dtype, pd.CategoricalDtype):
        return column.cat.rename_categories(lambda c: mapping[str(c)])
    return column.astype(str).map(mapping)


def _screen_extras(
    frame: pd.DataFrame, extras: list[str], identifying: frozenset[str], ids: _IdIndex
) -> tuple[list[str], list[str]]:
    """``(identifying, dropped)`` extra columns of ``frame``: declared ones, then those holding
    a subject ID in a cell or in their name."""
    coded, dropped = [], []
    for column in extras:
        if _name(column) in identifying:
            coded.append(column)
        elif ids.holds(str(column)) or any(ids.holds(cell) for cell in _distinct(frame[column])):
            dropped.append(column)
    return coded, dropped


def _code_cells(column: pd.Series, key: bytes) -> tuple[pd.Series, list[str]]:
    """Every non-blank cell replaced by the code of its trimmed text; the coded texts."""
    text = column.astype(object).where(column.notna(), "").astype(str).str.strip()
    distinct = [t for t in pd.unique(text) if t]
    mapping = {t: pseudonym(t, key) for t in distinct}
    mapping[""] = ""
    return text.map(mapping), distinct


def _dropped_warning(column: str, role: str, ids: _IdIndex) -> Problem:
    named = not ids.holds(column)
    return Problem(
        DROPPED_COLUMN_CODE,
        f"{'column ' + repr(column) if named else 'a column whose name holds a subject ID'} "
        "of the "
        f"{role} left out of every output of this pseudonymised run: a cell equals a subject "
        f"ID or contains one of at least {MIN_SUBSTRING_ID} characters",
        file=role,
        column=column if named else None,
        expected="list the column in [study] identifying_columns to keep it as keyed codes, "
        "or remove it from the input",
        severity="warning",
    )


def pseudonymize_study(study: Study, key: bytes) -> tuple[Study, pd.DataFrame]:
    """A copy of ``study`` for a pseudonymised run, and its code list.

    See the module docstring for what is replaced, dropped and withheld. Only whole values
    are replaced: no text is searched and replaced, so numbers (``value_text``, warning
    values) are never altered because they contain the digits of a short ID.

    Returns
    -------
    study : the pseudonymised copy (the input ``study`` is not changed).
    codes : the code list, columns :data:`CODE_LIST_COLUMNS`: one row per subject ID
        (``kind`` = :data:`SUBJECT_KIND`) and per distinct identifying value of each
        identifying column (``kind`` = :data:`IDENTIFYING_KIND`).
    """
    subject_ids: dict[str, None] = {}
    for frame in (study.subjects, study.values, study.paired, study.records):
        subject_ids.update(dict.fromkeys(_distinct(frame["subject"])))
    named = (str(w.subject) for w in study.warnings if w.subject is not None)
    subject_ids.update(dict.fromkeys(named))
    coder = _Coder(study.settings, key, {s: pseudonym(s, key) for s in subject_ids})
    subjects = coder.clean(study.subjects, DEFINED_SUBJECT_COLUMNS, ROLES["subjects"])
    records = coder.clean(study.records, RECORD_COLUMNS, ROLES["values"])
    coder.code_records(records)
    warnings = [coder.warning(w) for w in study.warnings]
    mapping = coder.mapping
    pseudo = replace(
        study,
        subjects=subjects,
        values=study.values.assign(subject=_recode_subjects(study.values["subject"], mapping)),
        paired=study.paired.assign(subject=_recode_subjects(study.paired["subject"], mapping)),
        records=records,
        warnings=[*warnings, *coder.added],
    )
    return pseudo, code_list(coder.entries, key)


class _Coder:
    """The codes of one pseudonymised run: what it replaced (the code list's entries), the
    columns it dropped and the warnings it adds."""

    def __init__(self, settings: StudySettings, key: bytes, mapping: dict[str, str]) -> None:
        self.key = key
        self.mapping = mapping
        self.ids = _IdIndex.of(mapping)
        self.identifying = frozenset(_name(c) for c in settings.identifying_columns)
        self.entries: list[tuple[str, str, str]] = [(SUBJECT_KIND, "subject", s) for s in mapping]
        self.roles = _roles(settings)
        self.added: list[Problem] = []
        self.dropped_names: set[str] = set()

    def clean(self, frame: pd.DataFrame, defined: Iterable[str], role: str) -> pd.DataFrame:
        """``frame`` with subject IDs coded, identifying columns coded, ID columns dropped."""
        extras = [c for c in frame.columns if c not in set(defined)]
        coded, dropped = _screen_extras(frame, extras, self.identifying, self.ids)
        out = frame.drop(columns=dropped)
        out["subject"] = _recode_subjects(out["subject"], self.mapping)
        for column in coded:
            out[column], texts = _code_cells(out[column], self.key)
            self.entries.extend((IDENTIFYING_KIND, column, t) for t in texts)
        self.added.extend(_dropped_warning(str(c), role, self.ids) for c in dropped)
        self.dropped_names.update(_name(c) for c in dropped)
        return out

    def code_records(self, records: pd.DataFrame) -> None:
        """Input files named by role; measurement cells of identifying columns coded."""
        # categorical columns: each category mapped once, not each of millions of rows
        source = records["source_file"].map(lambda f: _role(str(f), self.roles))
        records["source_file"] = source.astype("category")
        for column in _distinct(records["source_column"]):
            if _name(column) in self.identifying:  # a measurement cell of an identifying column
                rows = records["source_column"].astype(str).eq(column).to_numpy()
                records.loc[rows, "value_text"], texts = _code_cells(
                    records.loc[rows, "value_text"], self.key
                )
                self.entries.extend((IDENTIFYING_KIND, column, t) for t in texts)

    def warning(self, w: Problem) -> Problem:
        """An input warning with IDs coded and texts naming an ID or an input file withheld."""
        return replace(
            w,
            subject=None if w.subject is None else self.mapping[str(w.subject)],
            value=self._value(w),
            detail=self._withhold(w.detail),
            expected=self._withhold(w.expected),
            column=self._withhold(w.column),
            file=_role(w.file, self.roles),
        )

    def _value(self, problem: Problem) -> str | None:
        value, column = problem.value, _name(problem.column or "")
        if value is None or not value.strip():
            return value
        if column == "subject" or self.ids.equals(value):
            self.entries.append((SUBJECT_KIND, "subject", value.strip()))
            return pseudonym(value.strip(), self.key)
        if column in self.identifying:
            self.entries.append((IDENTIFYING_KIND, column, value.strip()))
            return pseudonym(value.strip(), self.key)
        return WITHHELD if column in self.dropped_names else self._withhold(value)

    def _withhold(self, text: str | None) -> str | None:
        """``text``, or :data:`WITHHELD` when it holds a subject ID or names an input file."""
        if text is None or not (self.ids.holds(text) or any(n in text for n in self.roles)):
            return text
        return WITHHELD
