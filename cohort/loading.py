"""Reading input tables from disk: the I/O edge of the loader.

Every cell is read as text (nothing is converted, so ``0017`` stays ``0017`` and a value that
is not a number can be reported exactly as written). Column names are trimmed and
lower-cased. Each row keeps its spreadsheet row number in the column ``_row`` (header = row 1).
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .problems import Problem, StudyError

ROW = "_row"
"""Column holding each row's spreadsheet row number."""

READERS = {".csv": "csv", ".tsv": "tsv", ".txt": "tsv", ".xlsx": "xlsx", ".parquet": "parquet"}


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
        else:
            frame = pd.read_parquet(path)
            frame = frame.copy(deep=False)
            for i in range(frame.shape[1]):
                frame.isetitem(i, _as_text(frame.iloc[:, i]))
    except StudyError:
        raise
    except Exception as exc:  # any reader failure becomes a located problem
        raise StudyError(
            [Problem("file-unreadable", f"cannot read file: {exc}", file=str(path))]
        ) from None
    numbers = frame.attrs.pop("rows", range(2, len(frame) + 2))
    frame.attrs.clear()  # pandas deep-copies attrs on every operation: keep none
    frame, original, units = _normalise_columns(frame, name)
    frame = frame.fillna("").astype(str)
    if frame.empty:
        raise StudyError([Problem("file-empty", "file has no data rows", file=name)])
    rows = np.arange(2, len(frame) + 2) if isinstance(numbers, range) else list(numbers)
    frame.insert(0, ROW, rows)
    return RawTable(frame, name, original, units, warnings)


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
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        text = path.read_text(encoding="latin-1")
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
    import pyarrow as pa
    from pyarrow import csv as pa_csv

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
