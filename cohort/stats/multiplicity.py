"""Multiple-testing corrections over a stated family of tests: Holm and Benjamini-Hochberg.

A *family* is the set of tests corrected together; tables carry it in a ``family`` column
beside the raw ``p_value`` and the ``p_adjusted`` value, so a reader sees what was corrected
with what. Missing p-values (tests that were not estimable) stay missing and do not count
towards the size of their family.

- Holm S. A simple sequentially rejective multiple test procedure. Scand J Stat
  1979;6:65-70: controls the family-wise error rate (the default).
- Benjamini Y, Hochberg Y. Controlling the false discovery rate: a practical and powerful
  approach to multiple testing. J R Stat Soc B 1995;57:289-300: controls the false
  discovery rate under independence or positive dependence.

Families are keys as data (:func:`adjust_within_families`): rows are grouped by their key,
never by the wording a table shows for it.

Both corrections return adjusted p-values: reject a hypothesis at level ``alpha`` when its
adjusted p-value is at most ``alpha``. Validated against
``statsmodels.stats.multitest.multipletests(method='holm' / 'fdr_bh')`` and the 15 p-values
example of Benjamini & Hochberg (1995).
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from dataclasses import fields, is_dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

HOLM = "holm"
BENJAMINI_HOCHBERG = "benjamini-hochberg"
NO_CORRECTION = "none"
CORRECTIONS: tuple[str, ...] = (HOLM, BENJAMINI_HOCHBERG, NO_CORRECTION)
"""Corrections known to :func:`adjust_p`; ``"none"`` returns the p-values unchanged."""

ALIASES = {"fdr_bh": BENJAMINI_HOCHBERG, "bh": BENJAMINI_HOCHBERG}
"""Other spellings accepted for a correction (statsmodels' ``"fdr_bh"``); tables show the
canonical name."""


def check_correction(method: str) -> str:
    """The canonical name of ``method``; ValueError unless it is a known correction."""
    canonical = ALIASES.get(method, method)
    if canonical not in CORRECTIONS:
        known = (*CORRECTIONS, *ALIASES)
        raise ValueError(f"correction must be one of {known}, got {method!r}")
    return canonical


def _finite_p(p_values: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    p = np.asarray(p_values, dtype=float)
    if p.ndim != 1:
        raise ValueError(f"p_values must be one-dimensional, got shape {p.shape}")
    finite = np.isfinite(p)
    bad = finite & ((p < 0.0) | (p > 1.0))
    if bad.any():
        raise ValueError(f"p_values must lie in [0, 1], got {p[bad][:3].tolist()}")
    return p, finite


def holm(p_values: ArrayLike) -> np.ndarray:
    """Holm (1979) step-down adjusted p-values; NaN stays NaN and is not counted.

    With the ``m`` finite p-values sorted, ``p_(1) <= ... <= p_(m)``, the adjusted value is
    ``max_{j <= i} min(1, (m - j + 1) p_(j))``. Validated against statsmodels
    ``multipletests(method='holm')`` (not its default, Holm-Sidak).

    Examples
    --------
    >>> [round(float(v), 4) for v in holm([0.01, 0.04, 0.03, 0.005])]
    [0.03, 0.06, 0.06, 0.02]
    >>> [round(float(v), 4) for v in holm([0.01, float("nan"), 0.04])]  # m = 2
    [0.02, nan, 0.04]
    """
    p, finite = _finite_p(p_values)
    out = np.full(p.shape, np.nan)
    q = p[finite]
    m = q.size
    if m:
        order = np.argsort(q, kind="stable")
        stepped = np.minimum(1.0, (m - np.arange(m)) * q[order])
        adjusted = np.empty(m)
        adjusted[order] = np.maximum.accumulate(stepped)
        out[finite] = adjusted
    return out


def benjamini_hochberg(p_values: ArrayLike) -> np.ndarray:
    """Benjamini-Hochberg (1995) step-up adjusted p-values; NaN stays NaN and is not counted.

    With the ``m`` finite p-values sorted, the adjusted value of ``p_(i)`` is
    ``min_{j >= i} min(1, m p_(j) / j)``. Validated against statsmodels
    ``multipletests(method='fdr_bh')`` and the 15 p-values example of the paper.

    Examples
    --------
    >>> [round(float(v), 4) for v in benjamini_hochberg([0.01, 0.04, 0.03, 0.005])]
    [0.02, 0.04, 0.04, 0.02]
    """
    p, finite = _finite_p(p_values)
    out = np.full(p.shape, np.nan)
    q = p[finite]
    m = q.size
    if m:
        order = np.argsort(q, kind="stable")
        scaled = m * q[order] / np.arange(1, m + 1)
        adjusted = np.empty(m)
        adjusted[order] = np.minimum(1.0, np.minimum.accumulate(scaled[::-1])[::-1])
        out[finite] = adjusted
    return out


def adjust_p(p_values: ArrayLike, method: str = HOLM) -> np.ndarray:
    """Adjusted p-values of one family by ``method`` (one of :data:`CORRECTIONS`, or an
    alias of :data:`ALIASES`).

    Examples
    --------
    >>> p = [0.01, 0.04, 0.03, 0.005]
    >>> [round(float(v), 4) for v in adjust_p(p, "fdr_bh")]
    [0.02, 0.04, 0.04, 0.02]
    >>> adjust_p(p, "none").tolist()
    [0.01, 0.04, 0.03, 0.005]
    >>> adjust_p(p, "bonferroni")
    Traceback (most recent call last):
    ...
    ValueError: correction must be one of ('holm', ... got 'bonferroni'
    """
    method = check_correction(method)
    if method == HOLM:
        return holm(p_values)
    if method == BENJAMINI_HOCHBERG:
        return benjamini_hochberg(p_values)
    p, _ = _finite_p(p_values)
    return p.copy()


def _holds_missing(key: object) -> bool:
    """Whether ``key`` is, or holds (in a tuple, list, set or dataclass), a value that does
    not equal itself: NaN, ``pd.NA``, ``NaT``."""
    if isinstance(key, tuple | list | set | frozenset):
        return any(_holds_missing(k) for k in key)
    if is_dataclass(key) and not isinstance(key, type):
        return any(_holds_missing(getattr(key, f.name)) for f in fields(key))
    try:
        return not bool(key == key)
    except (TypeError, ValueError):  # pd.NA == pd.NA is NA, whose truth is undefined
        return True


def adjust_within_families(
    p_values: ArrayLike,
    families: Sequence[Hashable],
    method: str = HOLM,
    *,
    rows: ArrayLike | None = None,
) -> np.ndarray:
    """Adjusted p-values, each corrected only together with the p-values of its own family.

    ``families`` holds one key per p-value: any hashable value that identifies the family as
    data (a tuple such as ``(test, parameter, method)``, a frozen dataclass), never its
    display wording. Keys are compared by equality, so two families never mix unless their
    keys are equal. A key that is or holds a missing value (NaN, ``pd.NA``, ``NaT``) is an
    error naming its row: NaN equals nothing, not even itself, so such rows would each end up
    alone in a family of one. ``rows`` (boolean, one per p-value) restricts the correction
    to some p-values; the others come back NaN.

    Examples
    --------
    >>> p = [0.01, 0.04, 0.01, 0.02, 0.03]
    >>> keys = [("KW", "mean"), ("KW", "mean"), ("KW", "max"), ("KW", "max"), ("KW", "max")]
    >>> [round(float(v), 3) for v in adjust_within_families(p, keys, HOLM)]
    [0.02, 0.04, 0.03, 0.04, 0.04]
    >>> adjust_within_families([0.01, 0.02], [("KW", "mean"), ("KW", float("nan"))])
    Traceback (most recent call last):
    ...
    ValueError: families: the key of row 1 holds a missing value (('KW', nan)); ...
    """
    method = check_correction(method)
    p, _ = _finite_p(p_values)
    keys = list(families)
    if len(keys) != p.size:
        raise ValueError(f"families must hold one key per p-value ({p.size}), got {len(keys)}")
    mask = np.ones(p.size, dtype=bool) if rows is None else np.asarray(rows, dtype=bool)
    if mask.shape != p.shape:
        raise ValueError(f"rows must hold one boolean per row ({p.size}), got {mask.shape}")
    members: dict[Hashable, list[int]] = {}
    for i in np.flatnonzero(mask):
        if _holds_missing(keys[i]):
            raise ValueError(
                f"families: the key of row {i} holds a missing value ({keys[i]!r}); a missing "
                "value equals no other, so the family is undefined: give every row a full key"
            )
        members.setdefault(keys[i], []).append(int(i))
    out = np.full(p.shape, np.nan)
    for index in members.values():
        out[index] = adjust_p(p[index], method)
    return out


def adjust_table(
    table: pd.DataFrame,
    *,
    method: str = HOLM,
    family: str = "family",
    p_value: str = "p_value",
    p_adjusted: str = "p_adjusted",
    rows: ArrayLike | None = None,
) -> pd.DataFrame:
    """A copy of ``table`` with ``p_adjusted`` computed within each level of ``family``.

    The ``family`` column holds the family keys (:func:`adjust_within_families`). ``rows``
    (boolean, one per row) restricts the correction to some rows; the others keep whatever
    ``p_adjusted`` they had (NaN when the column is new). Re-running with another
    ``family`` column corrects over another family, e.g. every test of a table at once.

    Examples
    --------
    >>> table = pd.DataFrame({"family": ["a", "a", "b"], "p_value": [0.01, 0.04, 0.03]})
    >>> adjust_table(table)["p_adjusted"].round(3).tolist()
    [0.02, 0.04, 0.03]
    """
    method = check_correction(method)
    for name in (family, p_value):
        if name not in table.columns:
            raise ValueError(f"table has no column {name!r}; columns are {list(table.columns)}")
    out = table.copy()
    mask = np.ones(len(out), dtype=bool) if rows is None else np.asarray(rows, dtype=bool)
    if mask.shape != (len(out),):
        raise ValueError(f"rows must hold one boolean per row ({len(out)}), got {mask.shape}")
    adjusted = (
        out[p_adjusted].to_numpy(dtype=float, copy=True)
        if p_adjusted in out.columns
        else np.full(len(out), np.nan)
    )
    p = out[p_value].to_numpy(dtype=float)
    within = adjust_within_families(p, out[family].tolist(), method, rows=mask)
    adjusted[mask] = within[mask]
    out[p_adjusted] = adjusted
    return out
