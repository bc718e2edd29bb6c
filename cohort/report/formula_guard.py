"""Text guards against spreadsheet formulas in written tables.

Text cells that a spreadsheet program would read as a formula (starting with ``=``, ``+``,
``-``, ``@``, a tab or a carriage return) are written with a leading apostrophe (OWASP, "CSV
Injection"); numbers stay numbers, a negative number written as text included.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")
"""First characters that make a spreadsheet program read a cell as a formula (OWASP)."""


def guard_text(frame: pd.DataFrame) -> pd.DataFrame:
    """Copy of ``frame`` where text cells that look like formulas start with an apostrophe.

    Examples
    --------
    >>> frame = pd.DataFrame({"method": ["=HYPERLINK()", "plain", "-1.5"], "x": [1, 2, 3]})
    >>> guard_text(frame)["method"].tolist()
    ["'=HYPERLINK()", 'plain', '-1.5']
    """
    # A shallow copy suffices: columns are replaced, never written into (copy-on-write).
    guarded = frame.copy(deep=False)
    for column in range(guarded.shape[1]):
        series = guarded.iloc[:, column]
        if isinstance(series.dtype, pd.CategoricalDtype):
            # guard each category once; the column keeps its dtype and order
            categories = pd.Series(series.cat.categories)
            risky = _formula_like(categories)
            if risky.any():
                renamed = categories.astype(object).where(~risky, "'" + categories.astype(str))
                guarded.isetitem(
                    column,
                    series.cat.rename_categories(renamed.tolist())
                    if renamed.is_unique
                    else series.astype(object).map(dict(zip(categories, renamed, strict=True))),
                )
        elif series.dtype == object or pd.api.types.is_string_dtype(series):
            risky = _formula_like(series)
            if risky.any():
                guarded.isetitem(column, series.where(~risky, "'" + series.astype("string")))
    guarded.columns = [
        ("'" + c) if isinstance(c, str) and c.startswith(FORMULA_PREFIXES) else c
        for c in guarded.columns
    ]
    return guarded


def _formula_like(series: pd.Series) -> np.ndarray:
    """Cells whose text starts with a formula prefix and is not a number (boolean array)."""
    if pd.api.types.infer_dtype(series, skipna=True) not in ("string", "empty"):
        text = series.astype("string")
        risky = text.str.startswith(FORMULA_PREFIXES).fillna(False).to_numpy(dtype=bool)
        if risky.any():
            # a negative number written as text is still a number, not a formula
            numeric = pd.to_numeric(text[risky], errors="coerce").notna().to_numpy()
            risky[np.flatnonzero(risky)[numeric]] = False
        return risky
    # All cells are text: decide once per distinct text (tables repeat their labels).
    codes, uniques = pd.factorize(series)
    text = pd.Series(np.asarray(uniques, dtype=object), dtype="string")
    risky_unique = text.str.startswith(FORMULA_PREFIXES).fillna(False).to_numpy(dtype=bool)
    if risky_unique.any():
        numeric = pd.to_numeric(text[risky_unique], errors="coerce").notna().to_numpy()
        risky_unique[np.flatnonzero(risky_unique)[numeric]] = False
    return np.append(risky_unique, False)[codes]  # code -1 (missing) is never risky
