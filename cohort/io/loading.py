"""Reading input tables from disk: the I/O edge of the loader.

Every cell is read as text (nothing is converted, so ``0017`` stays ``0017`` and a value that
is not a number can be reported exactly as written). Column names are trimmed and
lower-cased. Each row keeps its spreadsheet row number in the column ``_row`` (header = row 1).

What is refused rather than guessed, each problem naming file, row and column:

- delimited text that is not UTF-8 (a UTF-8 byte-order mark is fine): the first byte that
  does not decode is located by its line, and the file is never decoded as another encoding;
  UTF-16 and UTF-32 (with a byte-order mark, or NUL bytes without one) are named as such;
- cells holding a spreadsheet error value (:data:`ERROR_VALUES`, e.g. ``#N/A``,
  ``#DIV/0!``), in any format: as error cells in a workbook, as text elsewhere;
- workbook formula cells without a calculated value (a workbook written by a program that
  never calculated it): the value is unknown, so it is not read as a blank.
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from cohort.domain.problems import Problem, StudyError

ROW = "_row"
"""Column holding each row's spreadsheet row number."""

READERS = {".csv": "csv", ".tsv": "tsv", ".txt": "tsv", ".xlsx": "xlsx", ".parquet": "parquet"}

ERROR_VALUES = frozenset({"#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A"})
"""The cell error values of spreadsheets (ECMA-376 Office Open XML, Part 1, cell error
values, and OpenDocument's formula errors; memory). Compared after trimming, ignoring case."""

ERROR_VALUE_CODE = "spreadsheet-error"
"""Problem code of a cell holding a spreadsheet error value."""
UNCALCULATED_CODE = "formula-not-calculated"
"""Problem code of a workbook formula cell without a calculated value."""
ENCODING_CODE = "encoding"
"""Problem code of a delimited file that is not UTF-8."""
MAX_CELL_PROBLEMS = 20
"""Cells with an error value or an uncalculated formula listed one by one per file; the rest
are counted in one more problem."""

_ERROR_EXPECTED = "a value (correct the formula or leave the cell empty for a missing value)"
_UNCALCULATED_EXPECTED = (
    "a value: open and save the workbook in a spreadsheet program, or replace the formula by "
    "its value"
)
_SAVE_AS_UTF8 = (
    "UTF-8 text: save the file as UTF-8 (with or without a byte-order mark) and read it again"
)


@dataclass
class RawTable:
    """A table as read: text cells, normalised column names, row numbers, source name."""

    frame: pd.DataFrame
    name: str
    original_columns: dict[str, str] = field(default_factory=dict)
    header_units: dict[str, str] = field(default_factory=dict)
    """Units written in a column name, e.g. ``{"ff": "%"}`` for a column ``ff (%)``."""
    warnings: list[Problem] = field(default_factory=list)


_UNIT_IN_NAME = re.compile(r"^(.*?)\s*[\(\[]\s*([^\)\]]*?)\s*[\)\]]\s*$")


def _normalise_columns(
    frame: pd.DataFrame, name: str
) -> tuple[pd.DataFrame, dict[str, str], dict[str, str]]:
    original = {}
    units = {}
    normalised = []
    problems = []
    for column in frame.columns:
        key = str(column).strip().lower()
        match = _UNIT_IN_NAME.match(key)
        if match and match.group(1):
            key, units[match.group(1)] = match.group(1), match.group(2)
        if key in original:
            problems.append(
                Problem(
                    "duplicate-column",
                    f"column '{key}' appears twice (as {original[key]!r} and {column!r})",
                    file=name,
                    row=1,
                    column=str(column),
                )
            )
        original[key] = str(column)
        normalised.append(key)
    if problems:
        raise StudyError(problems)
    frame = frame.copy()
    frame.columns = normalised
    return frame, original, units


def read_table(path: str | Path) -> RawTable:
    """Read a CSV, TSV, XLSX or Parquet file into text cells; raise :class:`StudyError`."""
    path = Path(path)
    name = path.name
    if not path.is_file():
        raise StudyError([Problem("file-missing", "file not found", file=str(path))])
    kind = READERS.get(path.suffix.lower())
    if kind is None:
        raise StudyError(
            [
                Problem(
                    "file-format",
                    "file type not supported",
                    file=str(path),
                    value=path.suffix,
                    expected=f"one of {sorted(READERS)}",
                )
            ]
        )
    warnings: list[Problem] = []
    cell_problems: list[Problem] = []
    try:
        if kind in ("csv", "tsv"):
            frame = _read_delimited(path, "," if kind == "csv" else "\t")
        elif kind == "xlsx":
            sheets = pd.read_excel(path, sheet_name=None, dtype=str, keep_default_na=False)
            if not sheets:
                raise StudyError([Problem("file-empty", "workbook has no sheets", file=name)])
            first = next(iter(sheets))
            if len(sheets) > 1:
                warnings.append(
                    Problem(
                        "extra-sheets",
                        f"read sheet '{first}', ignored {list(sheets)[1:]}",
                        file=name,
                        severity="warning",
                    )
                )
            frame = sheets[first]
            cell_problems = _workbook_cell_problems(path, first)
        else:
            frame = pd.read_parquet(path)
            frame = frame.copy(deep=False)
            for i in range(frame.shape[1]):
                frame.isetitem(i, _as_text(frame.iloc[:, i]))
    except StudyError:
        raise
    except Exception as exc:  # any reader failure becomes a located problem
        # the readers' messages repeat the path given: name the file only (it may sit in
        # a folder whose name identifies a person)
        message = str(exc)
        for spelling in {str(path), str(path.resolve())}:
            message = message.replace(spelling, name)
        raise StudyError(
            [Problem("file-unreadable", f"cannot read file: {message}", file=name)]
        ) from None
    numbers = frame.attrs.pop("rows", range(2, len(frame) + 2))
    frame.attrs.clear()  # pandas deep-copies attrs on every operation: keep none
    frame, original, units = _normalise_columns(frame, name)
    frame = frame.fillna("").astype(str)
    if frame.empty:
        raise StudyError([Problem("file-empty", "file has no data rows", file=name)])
    rows = np.arange(2, len(frame) + 2) if isinstance(numbers, range) else list(numbers)
    frame.insert(0, ROW, rows)
    problems = _cap(cell_problems + _error_value_problems(frame, name, original), name)
    if problems:
        raise StudyError(problems)
    return RawTable(frame, name, original, units, warnings)


def _error_value_problems(
    frame: pd.DataFrame, name: str, original: dict[str, str]
) -> list[Problem]:
    """A problem for each text cell that is a spreadsheet error value (:data:`ERROR_VALUES`).

    Workbook error cells are found by :func:`_workbook_cell_problems` (pandas reads them as
    blanks); this finds the same values written as text (CSV, TSV, Parquet, text cells).
    """
    found: list[tuple[int, int, str, str]] = []
    rows = frame[ROW].to_numpy()
    for j, column in enumerate(frame.columns):
        if column == ROW:
            continue
        cells = frame[column]
        for position in np.flatnonzero(cells.str.contains("#", regex=False).to_numpy()):
            text = cells.iloc[position]  # few cells hold '#': a loop over them only
            if text.strip().upper() in ERROR_VALUES:
                found.append((int(rows[position]), j, column, text))
    found.sort(key=lambda item: (item[0], item[1]))
    return [
        Problem(
            ERROR_VALUE_CODE,
            f"the cell holds the spreadsheet error {text.strip().upper()}, not a value",
            file=name,
            row=row,
            column=original.get(column, column),
            value=text,
            expected=_ERROR_EXPECTED,
        )
        for row, _, column, text in found
    ]


def _workbook_cell_problems(path: Path, sheet: str) -> list[Problem]:
    """Error cells and formula cells without a calculated value in a workbook's sheet.

    A formula's value is read from the value the spreadsheet program stored when it last
    calculated the workbook; a workbook written by a program that never calculated it holds
    the formula alone, which a reader sees as an empty cell. A formula whose stored result
    is an empty text (type ``str``) is a calculated blank, not a problem.
    """
    from openpyxl import load_workbook
    from openpyxl.utils import get_column_letter

    def cells(data_only: bool) -> Iterator[Any]:
        book = load_workbook(path, read_only=True, data_only=data_only)
        try:
            yield from book[sheet].iter_rows()
        finally:
            book.close()

    problems: list[Problem] = []
    header: dict[int, str] | None = None
    for stored_row, formula_row in zip(cells(True), cells(False), strict=True):
        if header is None:
            if any(c.value is not None for c in stored_row):
                header = {
                    c.column: str(c.value).strip()
                    for c in stored_row
                    if c.value is not None and hasattr(c, "column")
                }
            continue
        for stored, formula in zip(stored_row, formula_row, strict=True):
            if not hasattr(stored, "row"):  # an empty cell of a row with gaps
                continue
            where = f"{get_column_letter(stored.column)}{stored.row}"
            column = header.get(stored.column, get_column_letter(stored.column))
            if stored.data_type == "e":
                code, shown, expected = ERROR_VALUE_CODE, stored.value, _ERROR_EXPECTED
                detail = f"cell {where} holds the spreadsheet error {stored.value}, not a value"
            elif formula.data_type == "f" and stored.value is None and stored.data_type != "str":
                code, shown, expected = UNCALCULATED_CODE, formula.value, _UNCALCULATED_EXPECTED
                detail = (
                    f"cell {where} holds a formula without a calculated value (the workbook "
                    "was written by a program that did not calculate it)"
                )
            else:
                continue
            problems.append(
                Problem(
                    code,
                    detail,
                    file=path.name,
                    row=stored.row,
                    column=column,
                    value=str(shown),
                    expected=expected,
                )
            )
    return problems


def _cap(problems: list[Problem], name: str) -> list[Problem]:
    """At most :data:`MAX_CELL_PROBLEMS` problems, then one that counts the rest."""
    if len(problems) <= MAX_CELL_PROBLEMS:
        return problems
    rest = len(problems) - MAX_CELL_PROBLEMS
    return [
        *problems[:MAX_CELL_PROBLEMS],
        Problem(
            problems[MAX_CELL_PROBLEMS].code,
            f"{rest} more cell(s) with a spreadsheet error or an uncalculated formula",
            file=name,
        ),
    ]


def _as_text(column: pd.Series) -> pd.Series:
    """A column's cells as text: what ``str`` gives for each value, ``""`` for missing.

    Text columns are kept as they are; numbers are converted once per distinct value (a
    Parquet file of 100,000 subjects holds millions of cells but few distinct values).
    """
    if isinstance(column.dtype, pd.StringDtype):
        return column.fillna("").astype(str)
    kind = column.dtype.kind if isinstance(column.dtype, np.dtype) else ""
    if kind in ("i", "u") or column.dtype == np.float64:
        values = column.to_numpy()
        codes, uniques = pd.factorize(values)  # missing (NaN): code -1
        text = np.array([str(v) for v in uniques.tolist()] + [""], dtype=object)[codes]
        if kind == "f":  # 0.0 and -0.0 are one value to factorize but two texts to str
            zero = values == 0
            text[zero] = np.where(np.signbit(values[zero]), "-0.0", "0.0")
        return pd.Series(text, index=column.index, name=column.name).astype(str)
    return column.astype(object).where(column.notna(), "").astype(str)


def _read_delimited(path: Path, delimiter: str) -> pd.DataFrame:
    name = path.name
    text = _decode(path.read_bytes(), name)
    if not text.strip():
        raise StudyError([Problem("file-empty", "file is empty", file=name)])
    header = text.splitlines()[0]
    if delimiter not in header:
        others = {";": "semicolon", "\t": "tab", ",": "comma", "|": "bar"}
        found = [label for sep, label in others.items() if sep != delimiter and sep in header]
        if found:
            expected = "comma-separated" if delimiter == "," else "tab-separated"
            raise StudyError(
                [
                    Problem(
                        "delimiter",
                        f"the header looks {found[0]}-separated",
                        file=name,
                        row=1,
                        value=header[:80],
                        expected=f"a {expected} file (or rename the file to match)",
                    )
                ]
            )
    plain = _read_plain(text, delimiter) if FAST_PLAIN_CSV else None
    if plain is not None:
        return plain
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    columns: list[str] | None = None
    body: list[list[str]] = []
    numbers: list[int] = []
    problems = []
    start = 1
    for row in reader:
        number, start = start, reader.line_num + 1  # a quoted cell may span lines
        if not any(cell.strip() for cell in row):
            continue
        if columns is None:
            columns = row
            continue
        if len(row) != len(columns) and not body and not problems and len(row) > len(columns):
            raise StudyError(
                [
                    Problem(
                        "missing-column",
                        f"the first row has {len(columns)} cell(s) but the next has {len(row)}: "
                        "the header seems to be on row 2: remove the line(s) above it",
                        file=name,
                        row=1,
                        value=",".join(columns)[:80],
                        expected="the column names on the first row",
                    )
                ]
            )
        if len(row) != len(columns):
            if len(problems) == 20:
                problems.append(
                    Problem("file-unreadable", "more rows with a wrong number of cells", file=name)
                )
            if len(problems) > 20:
                continue
            problems.append(
                Problem(
                    "file-unreadable",
                    f"row has {len(row)} cells, the header has {len(columns)}",
                    file=name,
                    row=number,
                    expected=f"{len(columns)} cells",
                )
            )
            continue
        body.append(row)
        numbers.append(number)
    if problems:
        raise StudyError(problems)
    if columns is None or not body:
        raise StudyError([Problem("file-empty", "file has no data rows", file=name)])
    frame = pd.DataFrame(body, columns=columns, dtype=str)
    frame.attrs["rows"] = numbers
    return frame


_WIDE_BOMS = (
    (b"\xff\xfe\x00\x00", "UTF-32"),  # before UTF-16 LE: same first two bytes
    (b"\x00\x00\xfe\xff", "UTF-32"),
    (b"\xff\xfe", "UTF-16"),
    (b"\xfe\xff", "UTF-16"),
)
"""Byte-order marks of the encodings a spreadsheet program may save text as (Unicode
Standard, section 23.8 'Specials', byte order mark; memory)."""


def _decode(data: bytes, name: str) -> str:
    """The text of a delimited file: UTF-8, with or without a byte-order mark, else refused.

    Another encoding is never guessed (Latin-1 would decode anything, wrongly): the problem
    names the line of the first byte that is not UTF-8, which is the row when no quoted cell
    spans lines before it.
    """
    for bom, encoding in _WIDE_BOMS:
        if data.startswith(bom):
            raise StudyError(
                [
                    Problem(
                        ENCODING_CODE,
                        f"the file is {encoding} text (it starts with a {encoding} byte-order "
                        "mark)",
                        file=name,
                        row=1,
                        expected=_SAVE_AS_UTF8,
                    )
                ]
            )
    nul = data.find(b"\x00")
    if nul >= 0:  # UTF-16 or UTF-32 without a byte-order mark, or not a text file
        line = _line_of(data, nul)
        raise StudyError(
            [
                Problem(
                    ENCODING_CODE,
                    f"line {line} holds a NUL byte (byte {nul + 1}): the file looks like "
                    "UTF-16 or UTF-32 text, or is not a text file",
                    file=name,
                    row=line,
                    expected=_SAVE_AS_UTF8,
                )
            ]
        )
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = _line_of(data, exc.start)
        raise StudyError(
            [
                Problem(
                    ENCODING_CODE,
                    f"line {line} is not UTF-8 text: byte {exc.start + 1} of the file "
                    f"(0x{data[exc.start]:02X}) cannot be decoded (the file may be Latin-1 "
                    "or Windows-1252 text)",
                    file=name,
                    row=line,
                    value=_line_text(data, exc.start),
                    expected=_SAVE_AS_UTF8,
                )
            ]
        ) from None


def _line_text(data: bytes, offset: int, width: int = 80) -> str:
    """The line holding byte ``offset``, undecodable bytes shown as U+FFFD, cut to ``width``."""
    start = max(data.rfind(b"\n", 0, offset), data.rfind(b"\r", 0, offset)) + 1
    end = min(
        (i for i in (data.find(b"\n", offset), data.find(b"\r", offset)) if i >= 0),
        default=len(data),
    )
    return data[start:end].decode("utf-8", errors="replace")[:width]


def _line_of(data: bytes, offset: int) -> int:
    """The line (1 = first) holding byte ``offset``; CR LF, LF and a lone CR end a line."""
    head = data[:offset]
    return head.count(b"\n") + head.count(b"\r") - head.count(b"\r\n") + 1


FAST_PLAIN_CSV = True
"""Read plain delimited files (:func:`_read_plain`) with pyarrow's parser; the tests switch
it off to compare with the csv-module path."""


def _read_plain(text: str, delimiter: str) -> pd.DataFrame | None:
    """The frame the csv-module path gives, for a plain file, by pyarrow's CSV parser.

    Plain: no quote character, lines ended by LF or CR LF, every line holding as many
    delimiters as the header and at least one non-blank cell, and a data row. Then every
    line is one row and row numbers are line numbers (10 to 20 times faster on millions of
    rows). Anything else returns None, and the careful path reads the file and reports its
    problems with their rows.
    """
    if '"' in text or text.count("\r") != text.count("\r\n"):
        return None
    lines = text.replace("\r\n", "\n").split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    if len(lines) < 2:
        return None
    n_cells = lines[0].count(delimiter) + 1
    for line in lines:
        if line.count(delimiter) != n_cells - 1 or not line.replace(delimiter, "").strip():
            return None
    try:  # an optional speed-up: without pyarrow the csv module reads the file
        import pyarrow as pa
        from pyarrow import csv as pa_csv
    except ImportError:
        return None

    try:
        table = pa_csv.read_csv(
            io.BytesIO("\n".join(lines[1:]).encode("utf-8")),
            read_options=pa_csv.ReadOptions(
                column_names=[f"c{i}" for i in range(n_cells)], block_size=1 << 26
            ),
            parse_options=pa_csv.ParseOptions(
                delimiter=delimiter, quote_char=False, ignore_empty_lines=False
            ),
            convert_options=pa_csv.ConvertOptions(
                column_types={f"c{i}": pa.string() for i in range(n_cells)},
                strings_can_be_null=False,
            ),
        )
    except (pa.ArrowInvalid, UnicodeError):
        return None
    if table.num_rows != len(lines) - 1:
        return None
    header = next(csv.reader([lines[0]], delimiter=delimiter))
    text_dtype = pd.StringDtype("pyarrow", na_value=np.nan)  # pandas' "str"
    frame = table.to_pandas(types_mapper={pa.string(): text_dtype}.get)
    frame.columns = header
    frame.attrs["rows"] = range(2, len(lines) + 1)
    return frame
