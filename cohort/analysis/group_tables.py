"""What the group-comparison tables share: input checks, group order, families, notes.

The families of tests corrected together for multiplicity are data (:class:`Family`):
rows are grouped for Holm or Benjamini-Hochberg by the key
(:func:`cohort.stats.multiplicity.adjust_within_families`), and the wording of the tables'
``family`` column is made from the key here only (:attr:`Family.text`).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np
import pandas as pd

from cohort.stats.multiplicity import adjust_within_families
from cohort.stats.results import NotEstimableWarning

ALL_GROUPS = "all groups"

# kinds of family: what a family of p-values spans
OMNIBUS_PER_SUMMARY = "omnibus tests of one summary"
OMNIBUS_PER_TABLE = "omnibus tests of the table"
PAIRS = "pairs of one omnibus test"
GROUP_TERMS = "group terms of one fit"
JOINT_TESTS = "joint group tests of the table"


@dataclass(frozen=True)
class Family:
    """A family of tests corrected together, as data.

    ``kind`` is one of the kinds above; ``test`` the test or model; ``cell`` the values
    that fix the family in its table (a summary; a parameter, method and summary; a method
    and finding ...); ``across`` the table dimensions the family spans; ``reference`` the
    reference group of a model's group terms.

    Examples
    --------
    >>> Family(PAIRS, "Fisher", cell=("quickmap", "hemorrhage")).text
    'Fisher pairs: quickmap, hemorrhage'
    >>> Family(OMNIBUS_PER_SUMMARY, "Welch ANOVA", ("max",), ("parameter", "method")).text
    'Welch ANOVA all groups, summary max: every parameter x method'
    """

    kind: str
    test: str
    cell: tuple[str, ...] = ()
    across: tuple[str, ...] = ()
    reference: str = ""

    @property
    def text(self) -> str:
        """The wording of the ``family`` column (the one place it is made)."""
        every = " x ".join(self.across)
        cell = ", ".join(self.cell)
        if self.kind == OMNIBUS_PER_SUMMARY:
            return f"{self.test} {ALL_GROUPS}, summary {cell}: every {every}"
        if self.kind == OMNIBUS_PER_TABLE:
            return f"{self.test} all-groups tests: every {every}"
        if self.kind == PAIRS:
            return f"{self.test} pairs: {cell}"
        if self.kind == GROUP_TERMS:
            return f"{self.test} group terms vs {self.reference}: {cell}"
        if self.kind == JOINT_TESTS:
            return f"{self.test} joint group tests: every {every}"
        raise ValueError(f"unknown kind of family {self.kind!r}")


def adjust_by_family(table: pd.DataFrame, correction: str) -> pd.DataFrame:
    """Correct the rows with a family and no correction yet, within each family key; then
    name the correction in ``correction`` and write each family as its text.

    Rows that carry their own adjustment (Games-Howell pairs) keep their ``p_adjusted``.
    """
    out = table.copy()
    keys = out["family"].tolist()
    has_family = np.array([isinstance(k, Family) for k in keys], dtype=bool)
    adjustable = has_family & out["correction"].eq("").to_numpy()
    out.loc[adjustable, "correction"] = correction
    adjusted = out["p_adjusted"].to_numpy(dtype=float, copy=True)
    p = out["p_value"].to_numpy(dtype=float)
    within = adjust_within_families(p, keys, correction, rows=adjustable)
    adjusted[adjustable] = within[adjustable]
    out["p_adjusted"] = adjusted
    out["family"] = [k.text if isinstance(k, Family) else k for k in keys]
    return out


def blank_row(columns: Sequence[str], texts: Sequence[str], **cells: object) -> dict[str, object]:
    """A table row: NaN in ``columns``, empty ``texts``, then ``cells``."""
    row: dict[str, object] = dict.fromkeys(columns, math.nan)
    row.update(dict.fromkeys(texts, ""))
    row.update(cells)
    return row


def join_notes(*notes: str) -> str:
    """The non-empty notes joined by ``"; "``."""
    return "; ".join(n for n in notes if n)


def omnibus_label(included: Sequence[str], order: Sequence[str]) -> str:
    """``"all groups"``, or the groups an omnibus test included when some were left out."""
    return ALL_GROUPS if list(included) == list(order) else "groups " + ", ".join(included)


def require_columns(frame: pd.DataFrame, name: str, columns: Sequence[str]) -> pd.DataFrame:
    """Check that ``frame`` is a DataFrame with ``columns``; return it.

    Examples
    --------
    >>> require_columns(pd.DataFrame({"a": [1]}), "summaries", ["a", "value"])
    Traceback (most recent call last):
    ...
    ValueError: summaries has no column(s) ['value']; columns are ['a']
    """
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"{name} must be a pandas DataFrame, got {type(frame).__name__}")
    absent = [c for c in columns if c not in frame.columns]
    if absent:
        raise ValueError(f"{name} has no column(s) {absent}; columns are {list(frame.columns)}")
    return frame


def ordered_groups(present: Sequence[object], order: Sequence[str] | None, name: str) -> list[str]:
    """The order of the groups: ``order`` checked against the groups ``present``, or the
    groups in order of first appearance.

    Examples
    --------
    >>> ordered_groups(["acute", "control", "acute"], None, "summaries")
    ['acute', 'control']
    >>> ordered_groups(["acute", "control"], ["control", "acute", "chronic"], "summaries")
    ['control', 'acute', 'chronic']
    """
    if isinstance(present, pd.Series | pd.Index | np.ndarray):
        present = pd.unique(present)  # first appearances, before the Python-level pass
    seen = [str(g) for g in pd.unique(pd.Series(list(present), dtype=object))]
    if order is None:
        return seen
    order = [str(g) for g in order]
    if len(set(order)) != len(order):
        raise ValueError(f"group_order must not repeat a group, got {order}")
    absent = [g for g in seen if g not in order]
    if absent:
        raise ValueError(f"group_order must list every group of {name}, missing {absent}")
    return order


@contextmanager
def one_warning_per_reason() -> Iterator[None]:
    """Re-emit each distinct NotEstimableWarning once (tables repeat the same reason)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NotEstimableWarning)
        yield
    counts: dict[str, int] = {}
    others = []
    for w in caught:
        if issubclass(w.category, NotEstimableWarning):
            counts[str(w.message)] = counts.get(str(w.message), 0) + 1
        else:
            others.append(w)
    for w in others:
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    for message, n in counts.items():
        suffix = f" ({n} rows)" if n > 1 else ""
        warnings.warn(message + suffix, NotEstimableWarning, stacklevel=3)


def positive_flags(frame: pd.DataFrame, name: str) -> tuple[pd.DataFrame, int]:
    """The rows of ``frame`` with a ``positive`` flag, as booleans, and how many had none.

    Examples
    --------
    >>> frame = pd.DataFrame({"positive": [1, None, 0]})
    >>> known, n_missing = positive_flags(frame, "subject_findings")
    >>> known["positive"].tolist(), n_missing
    ([True, False], 1)
    """
    flags = frame["positive"]
    missing = flags.isna().to_numpy()
    known = frame[~missing]
    values = known["positive"]
    if values.dtype == bool or str(values.dtype) == "boolean":
        as_bool = values.astype(bool)
    else:
        numeric = pd.to_numeric(values, errors="coerce")
        if not numeric.isin([0, 1]).all():
            examples = sorted({str(v) for v in values[~numeric.isin([0, 1])]})[:5]
            raise ValueError(f"{name}['positive'] must be boolean (or 0/1), got {examples}")
        as_bool = numeric.astype(bool)
    return known.assign(positive=as_bool.to_numpy()), int(missing.sum())
