"""Input problems as data: a catalogue of codes, one problem type, one error that lists them all.

Validation never stops at the first problem: it collects :class:`Problem` records, each
naming the file, spreadsheet row, column, the offending value and what was expected, and
raises one :class:`StudyError` holding all of them. Warnings (usable input that needed a
documented adjustment) are :class:`Problem` records too, with ``severity="warning"``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType

import pandas as pd

CATALOGUE: MappingProxyType[str, str] = MappingProxyType(
    {
        # files and study file
        "file-missing": "file not found",
        "file-unreadable": "file cannot be read",
        "file-empty": "file has no data rows",
        "file-format": "file type not supported",
        "encoding": "file is not UTF-8 text",
        "delimiter": "columns not separated by the expected delimiter",
        "study-file": "study file is invalid",
        "study-option": "study-file option is invalid",
        # columns
        "missing-column": "required column missing",
        "duplicate-column": "column name appears twice",
        # values table
        "blank-id": "subject or method is blank",
        "unknown-parameter": "parameter not recognised",
        "segment-invalid": "segment is not a segment number of the model",
        "duplicate-value": "value given twice for the same subject, method, segment, parameter",
        "not-numeric": "value is not a number",
        "not-finite": "value is infinite",
        "spreadsheet-error": "cell holds a spreadsheet error value",
        "formula-not-calculated": "workbook formula cell has no calculated value",
        "implausible-value": "value outside the plausible range",
        "unit-mismatch": "values look like another unit than the one declared",
        "t2star-r2star-conflict": "T2* and R2* both given and they disagree",
        # subjects table
        "duplicate-subject": "subject listed twice in the subjects table",
        "unknown-group": "group not among the declared groups",
        "field-strength": "field strength missing, not a number or not positive",
        # across tables
        "subject-without-info": "subject has values but no row in the subjects table",
        "subject-without-values": "subject in the subjects table has no values",
        "unknown-reference": "reference method not present in the values table",
        "too-few-methods": "fewer than two methods in the values table",
        # warnings
        "whitespace-trimmed": "surrounding white space removed from identifiers",
        "group-spelling": "group names differ only in case or spacing",
        "unit-in-text": "unit written next to a number was removed",
        "extra-sheets": "workbook has more than one sheet; only one was read",
        "identifying-column-dropped": "extra column holding subject IDs left out of a "
        "pseudonymised run",
    }
)
"""Problem codes and their titles. Codes are stable: tests and users may match on them."""

MAX_LISTED = 50
"""How many problems a :class:`StudyError` message lists before it summarises the rest."""


@dataclass(frozen=True)
class Problem:
    """One problem in the input, located as precisely as possible.

    ``row`` is the spreadsheet row number as a person sees it in a spreadsheet program
    (the header is row 1, the first data row is row 2).
    """

    code: str
    detail: str
    file: str | None = None
    row: int | None = None
    column: str | None = None
    value: str | None = None
    expected: str | None = None
    severity: str = "error"
    subject: str | None = None
    """The subject the problem concerns, when it concerns one (pseudonymisation replaces
    this field whole; detail texts therefore never embed a subject ID)."""
    method: str | None = None

    def __post_init__(self) -> None:
        if self.code not in CATALOGUE:
            raise ValueError(f"unknown problem code {self.code!r}")

    @property
    def title(self) -> str:
        return CATALOGUE[self.code]

    @property
    def location(self) -> str:
        parts = []
        if self.file:
            parts.append(self.file)
        if self.row is not None:
            parts.append(f"row {self.row}")
        if self.column:
            parts.append(f"column '{self.column}'")
        if self.subject is not None:
            parts.append(f"subject '{self.subject}'")
        if self.method is not None:
            parts.append(f"method '{self.method}'")
        return ", ".join(parts)

    def __str__(self) -> str:
        text = f"{self.location}: " if self.location else ""
        text += self.detail
        if self.value is not None:
            text += f"; got {self.value!r}"
        if self.expected:
            text += f"; expected {self.expected}"
        return f"{text} [{self.code}]"


@dataclass
class ProblemLog:
    """Collects problems during validation."""

    problems: list[Problem] = field(default_factory=list)

    def add(self, code: str, detail: str, **where: object) -> None:
        self.problems.append(Problem(code, detail, **where))  # type: ignore[arg-type]

    def warn(self, code: str, detail: str, **where: object) -> None:
        self.problems.append(Problem(code, detail, severity="warning", **where))  # type: ignore[arg-type]

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "warning"]

    def raise_if_errors(self) -> None:
        if self.errors:
            raise StudyError(self.errors)


class StudyError(ValueError):
    """The study's input is not usable; ``problems`` lists every problem found."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        super().__init__(format_problems(self.problems))


def format_problems(problems: list[Problem], limit: int = MAX_LISTED) -> str:
    """Human-readable list of problems, at most ``limit`` lines plus a count of the rest."""
    n = len(problems)
    lines = [f"{n} problem{'s' if n != 1 else ''} in the input:"]
    lines += [f"  - {p}" for p in problems[:limit]]
    if n > limit:
        lines.append(f"  ... and {n - limit} more (see the problems table)")
    return "\n".join(lines)


def problems_frame(problems: list[Problem]) -> pd.DataFrame:
    """Problems as a tidy table (one row each), for reports and exports."""
    columns = [
        "severity",
        "code",
        "title",
        "file",
        "row",
        "column",
        "subject",
        "method",
        "value",
        "expected",
        "detail",
    ]
    rows = [
        [
            p.severity,
            p.code,
            p.title,
            p.file,
            p.row,
            p.column,
            p.subject,
            p.method,
            p.value,
            p.expected,
            p.detail,
        ]
        for p in problems
    ]
    frame = pd.DataFrame(rows, columns=columns)
    frame["row"] = frame["row"].astype("Int64")
    return frame
