"""Writing a run's outputs: the I/O edge at the far end.

An output folder is written into a temporary sibling folder and moved into place at the end,
so an interrupted run leaves no half report. Tables go to ``tables/<name>.csv`` and to one
``tables.xlsx`` with a sheet per table. Text cells that a spreadsheet program would read as
a formula (starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return) are written
with a leading apostrophe (OWASP, "CSV Injection"); numbers stay numbers.
"""

from __future__ import annotations

import hashlib
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")


class OutputExistsError(FileExistsError):
    """The output folder exists and is not empty, and ``force`` was not given."""


def sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes, as hex."""
    digest = hashlib.sha256()
    with Path(path).open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def staging_folder(out: str | Path, force: bool) -> Path:
    """Check ``out`` and return an empty temporary folder beside it to write into."""
    out = Path(out)
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not force:
        raise OutputExistsError(
            f"output folder {str(out)!r} exists and is not empty; give --force to replace it"
        )
    out.parent.mkdir(parents=True, exist_ok=True)
    return Path(tempfile.mkdtemp(prefix=f".{out.name}-partial-", dir=out.parent))


def publish(staging: Path, out: str | Path) -> Path:
    """Move the finished staging folder to ``out`` (replacing it when it exists)."""
    out = Path(out)
    if out.exists():
        backup = out.with_name(f".{out.name}-old")
        if backup.exists():
            shutil.rmtree(backup)
        out.rename(backup)
        staging.rename(out)
        shutil.rmtree(backup) if backup.is_dir() else backup.unlink()
    else:
        staging.rename(out)
    return out


def guard_text(frame: pd.DataFrame) -> pd.DataFrame:
    """Copy of ``frame`` where text cells that look like formulas start with an apostrophe."""
    guarded = frame.copy()
    for column in guarded.columns:
        series = guarded[column]
        if series.dtype == object or pd.api.types.is_string_dtype(series):
            text = series.astype("string")
            risky = text.str.startswith(FORMULA_PREFIXES).fillna(False)
            # a negative number written as text is still a number, not a formula
            numeric = pd.to_numeric(text, errors="coerce").notna()
            risky = risky & ~numeric
            if risky.any():
                guarded[column] = series.where(~risky, "'" + text)
    guarded.columns = [
        ("'" + c) if isinstance(c, str) and c.startswith(FORMULA_PREFIXES) else c
        for c in guarded.columns
    ]
    return guarded


def write_tables(tables: Mapping[str, pd.DataFrame], folder: Path) -> list[Path]:
    """Write each table as ``folder/tables/<name>.csv`` and all of them to ``tables.xlsx``."""
    csv_folder = folder / "tables"
    csv_folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name, table in tables.items():
        path = csv_folder / f"{name}.csv"
        guard_text(table).to_csv(path, index=False, lineterminator="\n")
        written.append(path)
    xlsx = folder / "tables.xlsx"
    with pd.ExcelWriter(xlsx, engine="openpyxl") as writer:
        for name, table in tables.items():
            sheet = guard_text(table).replace([np.inf, -np.inf], np.nan)
            sheet.to_excel(writer, sheet_name=name[:31], index=False)
    written.append(xlsx)
    return written
