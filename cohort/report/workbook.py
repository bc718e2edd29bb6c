"""The ``tables.xlsx`` workbook: one sheet per table, streamed as SpreadsheetML.

The workbook is streamed as SpreadsheetML (ECMA-376 Part 1) by :func:`write_workbook`: cell
for cell the same worksheet XML that ``DataFrame.to_excel`` writes through openpyxl (inline
strings, numbers as ``%.16g``, booleans, empty cells for missing values; checked in
tests/report/test_outputs.py), at about a twentieth of the time, so that tables of a million
rows are written in seconds. Tables with cells that need openpyxl's own handling (dates,
text that openpyxl turns into formulas or error values, characters a worksheet cannot hold)
are written by ``DataFrame.to_excel`` as before.
"""

from __future__ import annotations

import math
import re
import warnings
import zipfile
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

EXCEL_MAX_ROWS = 1_048_576
"""Rows of an Excel worksheet, the header row included (Excel specifications and limits)."""

EXCEL_MAX_TEXT = 32_767
"""Characters of an Excel cell; openpyxl truncates longer text to this length."""


def write_workbook(sheets: Sequence[tuple[str, pd.DataFrame]], path: Path) -> Path:
    """Write ``(sheet name, table)`` pairs to the workbook ``path``, one sheet per table.

    Each sheet holds the table's column names on row 1 and its rows below (no index), as
    ``DataFrame.to_excel(..., index=False)`` with openpyxl writes them, infinite numbers as
    empty cells. The sheets are streamed (ECMA-376 Part 1, SpreadsheetML); a table that
    needs openpyxl's own handling of a cell makes the whole workbook go through
    ``pandas.ExcelWriter(engine="openpyxl")`` instead, with the same result or error.
    Validated against ``DataFrame.to_excel`` (identical worksheet XML) in
    tests/test_outputs.py.
    """
    path = Path(path)
    if _streamable_names([name for name, _ in sheets]):
        try:
            _stream_workbook(sheets, path)
            return path
        except _NeedsOpenpyxl:
            path.unlink(missing_ok=True)
    with pd.ExcelWriter(path, engine="openpyxl") as writer:
        for name, table in sheets:
            table.replace([np.inf, -np.inf], np.nan).to_excel(writer, sheet_name=name, index=False)
    return path


class _NeedsOpenpyxl(Exception):
    """A cell the streaming writer does not produce as openpyxl would."""


_SHEET_NAME_FORBIDDEN = re.compile(r"[\\*?:/\[\]]")
_ILLEGAL_CHARACTERS = re.compile(r"[\000-\010]|[\013-\014]|[\016-\037]")
"""Characters XML 1.0 cannot hold; openpyxl refuses them (IllegalCharacterError)."""
_ERROR_CODES = frozenset(("#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A"))
_ROWS_PER_BLOCK = 20_000
_EMPTY = ' t="inlineStr" />'
_TRUE = ' t="b"><v>1</v></c>'
_FALSE = ' t="b"><v>0</v></c>'


def _streamable_names(names: Sequence[str]) -> bool:
    lowered = [n.lower() for n in names]
    return (
        bool(names)
        and len(set(lowered)) == len(lowered)
        and all(isinstance(n, str) and n and not _SHEET_NAME_FORBIDDEN.search(n) for n in names)
    )


def _text_piece(value: str) -> str:
    """The end of a text cell's XML after ``<c r="A1"``, as openpyxl writes it."""
    if len(value) > EXCEL_MAX_TEXT:
        warnings.warn(
            f"tables.xlsx: a text cell longer than {EXCEL_MAX_TEXT:,} characters (Excel's "
            "limit) is truncated there; the CSV file holds it in full",
            UserWarning,
            stacklevel=2,
        )
        value = value[:EXCEL_MAX_TEXT]
    if (
        _ILLEGAL_CHARACTERS.search(value)
        or (len(value) > 1 and value.startswith("="))
        or value in _ERROR_CODES
    ):
        raise _NeedsOpenpyxl(value)
    if not value:
        return _EMPTY
    stripped = value.strip()
    space = ' xml:space="preserve"' if stripped and value != stripped else ""
    escaped = value.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return f' t="inlineStr"><is><t{space}>{escaped}</t></is></c>'


_G16 = "%.16g".__mod__
"""How openpyxl writes a number (``safe_string``): 16 significant digits."""


def _number_piece(value: float) -> str:
    if not math.isfinite(value):
        return _EMPTY
    return f' t="n"><v>{_G16(value)}</v></c>'


def _any_piece(value: object) -> str:
    """Piece of a cell of any supported Python or numpy scalar (object columns)."""
    if value is None or value is pd.NA or value is pd.NaT:
        return _EMPTY
    if isinstance(value, bool | np.bool_):  # pandas passes numpy booleans on as bool
        return _TRUE if value else _FALSE
    if isinstance(value, str):
        return _text_piece(value)
    if isinstance(value, float | np.floating):
        return _number_piece(float(value))
    if isinstance(value, int | np.integer):
        return f' t="n"><v>{_G16(value)}</v></c>'
    raise _NeedsOpenpyxl(type(value).__name__)


class _Numbers:
    """Cell pieces of a column of numbers only: just the ``%.16g`` texts (the worksheet's row
    template holds the rest of each cell)."""

    def __init__(self, texts: Callable[[int, int], list[str]]) -> None:
        self.texts = texts

    def __call__(self, a: int, b: int) -> list[str]:
        return self.texts(a, b)


def _column_pieces(series: pd.Series) -> Callable[[int, int], list[str]]:
    """A function giving the cell pieces of rows ``start:stop`` of one column: the end of
    each cell's XML after ``<c r="A1"``, or the bare numbers for a :class:`_Numbers` column."""
    dtype = series.dtype
    kind = dtype.kind if isinstance(dtype, np.dtype) else ""
    if kind == "b" or isinstance(dtype, pd.BooleanDtype):
        values = series.to_numpy(dtype=object, na_value=None)
        lookup = {True: _TRUE, False: _FALSE, None: _EMPTY}
        return lambda a, b: [lookup[v] for v in values[a:b].tolist()]
    if kind and kind in "iu":
        values = series.to_numpy()
        return _Numbers(lambda a, b: list(map(_G16, values[a:b].tolist())))
    if kind == "f":
        values = series.to_numpy()
        if np.isfinite(values).all():
            return _Numbers(lambda a, b: list(map(_G16, values[a:b].tolist())))
        finite = math.isfinite
        return lambda a, b: [
            f' t="n"><v>{_G16(v)}</v></c>' if finite(v) else _EMPTY for v in values[a:b].tolist()
        ]
    text = pd.api.types.is_string_dtype(dtype) and (
        kind != "O" or pd.api.types.infer_dtype(series, skipna=True) in ("string", "empty")
    )
    if text:

        def pieces(a: int, b: int) -> list[str]:
            codes, uniques = pd.factorize(series.iloc[a:b])
            lookup = [_text_piece(u) for u in np.asarray(uniques, dtype=object)] + [_EMPTY]
            return [lookup[c] for c in codes.tolist()]

        return pieces
    if (
        kind == "O"
        or isinstance(dtype, pd.CategoricalDtype)
        or (isinstance(dtype, pd.api.extensions.ExtensionDtype) and dtype.kind in "iuf")
    ):
        values = series.astype(object).to_numpy()
        return lambda a, b: [_any_piece(v) for v in values[a:b].tolist()]
    raise _NeedsOpenpyxl(str(dtype))


def _column_letter(index: int) -> str:
    letters = ""
    index += 1
    while index:
        index, remainder = divmod(index - 1, 26)
        letters = chr(65 + remainder) + letters
    return letters


_WORKSHEET_HEAD = (
    '<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
    '<sheetPr><outlinePr summaryBelow="1" summaryRight="1" /><pageSetUpPr /></sheetPr>'
    '<dimension ref="{dimension}" /><sheetViews><sheetView workbookViewId="0">'
    '<selection activeCell="A1" sqref="A1" /></sheetView></sheetViews>'
    '<sheetFormatPr baseColWidth="8" defaultRowHeight="15" /><sheetData>'
)
_WORKSHEET_TAIL = (
    '</sheetData><pageMargins left="0.75" right="0.75" top="1" bottom="1" header="0.5" '
    'footer="0.5" /></worksheet>'
)
_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_RELATIONSHIPS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_PACKAGE_RELATIONSHIPS = "http://schemas.openxmlformats.org/package/2006/relationships"
_SPREADSHEET_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml"
_STYLES = (
    f'<styleSheet xmlns="{_MAIN}"><numFmts count="0" /><fonts count="1"><font>'
    '<name val="Calibri" /><family val="2" /><sz val="11" /><scheme val="minor" /></font>'
    '</fonts><fills count="2"><fill><patternFill /></fill><fill>'
    '<patternFill patternType="gray125" /></fill></fills><borders count="1"><border><left />'
    '<right /><top /><bottom /><diagonal /></border></borders><cellStyleXfs count="1">'
    '<xf numFmtId="0" fontId="0" fillId="0" borderId="0" /></cellStyleXfs>'
    '<cellXfs count="1"><xf numFmtId="0" fontId="0" fillId="0" borderId="0" xfId="0" />'
    '</cellXfs><cellStyles count="1"><cellStyle name="Normal" xfId="0" builtinId="0" />'
    "</cellStyles></styleSheet>"
)


def _attribute(text: str) -> str:
    return (
        text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace('"', "&quot;")
    )


def _package_parts(names: Sequence[str]) -> dict[str, str]:
    """The workbook's parts other than the worksheets (ECMA-376 Part 2, packaging)."""
    n = len(names)
    overrides = "".join(
        f'<Override PartName="/xl/worksheets/sheet{i}.xml" '
        f'ContentType="{_SPREADSHEET_TYPE}.worksheet+xml" />'
        for i in range(1, n + 1)
    )
    sheets = "".join(
        f'<sheet name="{_attribute(name)}" sheetId="{i}" state="visible" r:id="rId{i}" />'
        for i, name in enumerate(names, start=1)
    )
    worksheet_rels = "".join(
        f'<Relationship Type="{_RELATIONSHIPS}/worksheet" '
        f'Target="/xl/worksheets/sheet{i}.xml" Id="rId{i}" />'
        for i in range(1, n + 1)
    )
    return {
        "[Content_Types].xml": (
            '<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
            '<Default Extension="rels" '
            'ContentType="application/vnd.openxmlformats-package.relationships+xml" />'
            '<Default Extension="xml" ContentType="application/xml" />'
            f'<Override PartName="/xl/styles.xml" ContentType="{_SPREADSHEET_TYPE}.styles+xml" />'
            f"{overrides}"
            '<Override PartName="/xl/workbook.xml" '
            f'ContentType="{_SPREADSHEET_TYPE}.sheet.main+xml" /></Types>'
        ),
        "_rels/.rels": (
            f'<Relationships xmlns="{_PACKAGE_RELATIONSHIPS}">'
            f'<Relationship Type="{_RELATIONSHIPS}/officeDocument" Target="xl/workbook.xml" '
            'Id="rId1" /></Relationships>'
        ),
        "xl/workbook.xml": (
            f'<workbook xmlns:r="{_RELATIONSHIPS}" xmlns="{_MAIN}"><workbookPr />'
            '<bookViews><workbookView visibility="visible" activeTab="0" /></bookViews>'
            f'<sheets>{sheets}</sheets><calcPr calcId="124519" fullCalcOnLoad="1" /></workbook>'
        ),
        "xl/_rels/workbook.xml.rels": (
            f'<Relationships xmlns="{_PACKAGE_RELATIONSHIPS}">{worksheet_rels}'
            f'<Relationship Type="{_RELATIONSHIPS}/styles" Target="styles.xml" '
            f'Id="rId{n + 1}" /></Relationships>'
        ),
        "xl/styles.xml": _STYLES,
    }


def _write_worksheet(handle, table: pd.DataFrame) -> None:
    """Stream one table's worksheet XML into the open zip member ``handle``."""
    n_rows, n_columns = table.shape
    letters = [_column_letter(j) for j in range(n_columns)]
    columns = [_column_pieces(table.iloc[:, j]) for j in range(n_columns)]
    dimension = f"A1:{letters[-1]}{n_rows + 1}" if n_columns else "A1:A1"
    handle.write(_WORKSHEET_HEAD.replace("{dimension}", dimension).encode())
    if n_columns:
        header = "".join(
            f'<c r="{letter}1"{_any_piece(label)}'
            for letter, label in zip(letters, table.columns, strict=True)
        )
        handle.write(f'<row r="1">{header}</row>'.encode())
    # one row: '<row r="{0}"><c r="A{0}"{1}<c r="B{0}"{2}...</row>', filled per row
    cells = [
        f'<c r="{letter}{{0}}" t="n"><v>{{{j + 1}}}</v></c>'
        if isinstance(column, _Numbers)
        else f'<c r="{letter}{{0}}"{{{j + 1}}}'
        for j, (letter, column) in enumerate(zip(letters, columns, strict=True))
    ]
    row_template = '<row r="{0}">' + "".join(cells) + "</row>"
    for start in range(0, n_rows if n_columns else 0, _ROWS_PER_BLOCK):
        stop = min(start + _ROWS_PER_BLOCK, n_rows)
        numbers = [str(r) for r in range(start + 2, stop + 2)]
        pieces = [column(start, stop) for column in columns]
        handle.write("".join(map(row_template.format, numbers, *pieces)).encode())
    handle.write(_WORKSHEET_TAIL.encode())


def _stream_workbook(sheets: Sequence[tuple[str, pd.DataFrame]], path: Path) -> None:
    names = [name for name, _ in sheets]
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=1) as book:
        parts = _package_parts(names)
        book.writestr("[Content_Types].xml", parts.pop("[Content_Types].xml"))
        for i, (_, table) in enumerate(sheets, start=1):
            # about 40 bytes of XML per cell; zip64 only where a sheet may pass 2 GiB
            big = table.shape[0] * max(table.shape[1], 1) * 40 > 1 << 30
            with book.open(f"xl/worksheets/sheet{i}.xml", "w", force_zip64=big) as handle:
                _write_worksheet(handle, table)
        for name, text in parts.items():
            book.writestr(name, text)
