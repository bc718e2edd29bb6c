"""Writing a run's tables: ``tables/<name>.csv`` and the workbook ``tables.xlsx``.

Which folder a run may write, and how it is moved into place, is
:mod:`cohort.report.destination`. Every table is guarded against spreadsheet formulas first
(:mod:`cohort.report.formula_guard`). A worksheet holds at most :data:`EXCEL_MAX_ROWS` rows
(header included; Microsoft, "Excel specifications and limits"). A longer table is written
in full to its CSV file only; its sheet holds a note saying so, and a
:class:`~cohort.stats.results.CohortWarning` is emitted. The workbook is
:mod:`cohort.report.workbook`'s.
"""

from __future__ import annotations

import shutil
import warnings
from collections.abc import Mapping
from pathlib import Path

import pandas as pd

from cohort.parallel import map_shared
from cohort.report.formula_guard import guard_text
from cohort.report.workbook import EXCEL_MAX_ROWS, write_workbook
from cohort.stats.results import CohortWarning


def _too_long_note(name: str, n_rows: int) -> str:
    return (
        f"table '{name}' has {n_rows:,} rows, more than an Excel worksheet holds "
        f"({EXCEL_MAX_ROWS - 1:,} below the header): it is written in full to "
        f"tables/{name}.csv only, and this sheet is left without its rows"
    )


def write_tables(
    tables: Mapping[str, pd.DataFrame], folder: Path, *, workers: int = 1
) -> list[Path]:
    """Write each table as ``folder/tables/<name>.csv`` and all of them to ``tables.xlsx``.

    A table longer than an Excel worksheet (:data:`EXCEL_MAX_ROWS`, header included) gets a
    sheet with a note instead of its rows, and a :class:`~cohort.stats.results.CohortWarning`.
    With ``workers`` > 1 the workbook and pieces of the CSV files are written by several
    processes (:func:`cohort.parallel.map_shared`); the files are the same.
    """
    csv_folder = folder / "tables"
    csv_folder.mkdir(parents=True, exist_ok=True)
    csvs = []
    sheets = []
    for name, table in tables.items():
        guarded = guard_text(table)
        csvs.append((csv_folder / f"{name}.csv", guarded))
        if len(guarded) + 1 > EXCEL_MAX_ROWS:
            note = _too_long_note(name, len(guarded))
            warnings.warn(f"tables.xlsx: {note}", CohortWarning, stacklevel=2)
            guarded = pd.DataFrame({"note": [note]})
        sheets.append((name[:31], guarded))
    xlsx = folder / "tables.xlsx"
    # the workbook, then the CSV files in pieces of rows (a long table's pieces are written
    # side by side and joined): pandas writes each row the same whatever the piece
    pieces: list[tuple[int, int, int, Path]] = [(-1, 0, 0, xlsx)]
    for t, (path, guarded) in enumerate(csvs):
        starts = range(0, max(len(guarded), 1), _CSV_ROWS_PER_PIECE)
        for k, start in enumerate(starts):
            part = path if len(starts) == 1 else path.with_name(f"{path.name}.part{k}")
            pieces.append((t, start, start + _CSV_ROWS_PER_PIECE, part))
    map_shared(_write_piece, (csvs, sheets, pieces), len(pieces), workers)
    for t, (path, _) in enumerate(csvs):
        parts = [part for table, _, _, part in pieces if table == t and part != path]
        if parts:
            with path.open("wb") as out:
                for part in parts:
                    with part.open("rb") as handle:
                        shutil.copyfileobj(handle, out, 1 << 24)
                    part.unlink()
    return [path for path, _ in csvs] + [xlsx]


_CSV_ROWS_PER_PIECE = 250_000


def _write_piece(shared, index: int) -> None:
    """One piece of :func:`write_tables`: the workbook, or rows of one CSV file."""
    csvs, sheets, pieces = shared
    table, start, stop, path = pieces[index]
    if table < 0:
        write_workbook(sheets, path)
        return
    guarded = csvs[table][1]
    guarded.iloc[start:stop].to_csv(path, index=False, header=start == 0, lineterminator="\n")
