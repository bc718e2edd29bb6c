"""Fat-water swap screen of paired fat fractions, and an explicit exclusion step.

A fat-water swap makes a region read about ``100 - f`` instead of ``f`` (common practice).
A paired fat fraction (test ``y``, reference ``x``, both in %) is flagged:

- ``swap-suspect``: ``|y - (100 - x)| + margin < |y - x|``: the test value is closer to the
  swapped reference than to the reference by more than ``margin`` percentage points
  (default :data:`cohort.domain.thresholds.DEFAULT_SWAP_MARGIN_PP`);
- ``not-comparable``: the test method is declared magnitude-only, so its fat fraction is
  confined to 0-50 % by construction (Hussain et al., Radiology 2005 (memory); common
  practice), and the reference is above 50 %: the pair cannot agree whatever the tissue;
- ``above-magnitude-limit``: a declared magnitude-only method reports more than 50 %, which
  it cannot by construction (the declaration or the data are wrong).

Each flagged pair gets one reason, in the order ``not-comparable``, ``above-magnitude-limit``,
``swap-suspect``. Nothing is removed here: :func:`exclude_flagged` removes flagged rows only
when called, and reports what it removed.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from cohort.domain.thresholds import DEFAULT_SWAP_MARGIN_PP, MAGNITUDE_ONLY_FF_LIMIT, SwapOptions
from cohort.io.method_order import levels

REASONS: tuple[str, ...] = ("not-comparable", "above-magnitude-limit", "swap-suspect")

FLAG_COLUMNS: tuple[str, ...] = (
    "method", "reference", "subject", "group", "segment", "segment_name", "reference_value",
    "test_value", "swapped_reference", "distance_to_reference", "distance_to_swapped",
    "reason",
)  # fmt: skip
"""Columns of :attr:`SwapScreen.flags`."""


def _count_column(reason: str) -> str:
    """The :data:`COUNT_COLUMNS` column counting ``reason``, e.g. ``n_swap_suspect``."""
    return f"n_{reason.replace('-', '_')}"


COUNT_COLUMNS: tuple[str, ...] = (
    "method", "magnitude_only", "n_pairs", "n_flagged", *(_count_column(r) for r in REASONS),
)  # fmt: skip
"""Columns of :attr:`SwapScreen.counts`."""

SCREENED_PARAMETER = "ff"
"""The parameter the screen looks at: fat fraction in % (canonical unit)."""

_UNIT = ("method", "subject", "segment")
"""What a flag marks: one segment of one subject measured by one test method."""


@dataclass(frozen=True)
class SwapScreen:
    """Flagged fat-fraction pairs and counts per test method."""

    flags: pd.DataFrame
    counts: pd.DataFrame
    margin: float
    magnitude_only_methods: tuple[str, ...]
    magnitude_limit: float

    def to_frame(self) -> pd.DataFrame:
        """The flagged rows (columns :data:`FLAG_COLUMNS`)."""
        return self.flags


def _check_screen_options(
    paired: pd.DataFrame, margin: float, magnitude_only_methods: Sequence[str], limit: float
) -> None:
    if isinstance(magnitude_only_methods, str):
        raise ValueError(
            "magnitude_only_methods must be a list of method names, "
            f"got the text {magnitude_only_methods!r}"
        )
    if not (isinstance(margin, int | float) and math.isfinite(margin) and margin >= 0):
        raise ValueError(f"margin must be a number >= 0 (percentage points), got {margin!r}")
    if not (isinstance(limit, int | float) and 0 < limit <= 100):
        raise ValueError(f"magnitude_limit must be in (0, 100] percent, got {limit!r}")
    need = ("parameter", *_UNIT, "reference", "reference_value", "test_value")
    missing = [c for c in need if c not in paired]
    if missing:
        raise ValueError(f"paired is missing columns {missing}")
    methods = [str(m) for m in levels(paired["method"])]
    unknown = [m for m in magnitude_only_methods if m not in methods]
    if unknown:
        raise ValueError(
            f"magnitude_only_methods must name test methods of paired {methods}, got {unknown}"
        )


def _counts(
    ff: pd.DataFrame, methods: list, reason: np.ndarray, magnitude_only: Sequence[str]
) -> pd.DataFrame:
    """One row per test method: pairs screened, flagged, and flagged for each reason."""
    rows = []
    for method in methods:
        rows_m = ff["method"].eq(method).to_numpy()
        row = {
            "method": method,
            "magnitude_only": method in magnitude_only,
            "n_pairs": int(rows_m.sum()),
            "n_flagged": int((rows_m & (reason != "")).sum()),
        }
        for r in REASONS:
            row[_count_column(r)] = int((rows_m & (reason == r)).sum())
        rows.append(row)
    return pd.DataFrame(rows, columns=list(COUNT_COLUMNS))


def swap_screen(
    paired: pd.DataFrame,
    *,
    margin: float = DEFAULT_SWAP_MARGIN_PP,
    magnitude_only_methods: Sequence[str] = (),
    magnitude_limit: float = MAGNITUDE_ONLY_FF_LIMIT,
) -> SwapScreen:
    """Screen the fat-fraction pairs of ``paired`` for fat-water swaps (rules above).

    ``magnitude_only_methods`` names the test methods whose fat fraction is confined to
    0-``magnitude_limit`` %. A method named there but absent from ``paired`` is an error
    (a misspelt name would otherwise silently disable the check). Validated in the tests
    against the rules applied by hand and against a simulated magnitude-only reconstruction,
    ``min(f, 100 - f)``, which must be flagged exactly where the reference exceeds 50 %.

    Examples
    --------
    Reference 80 %, test 21 %: 1 pp from ``100 - 80``, 59 pp from the reference.

    >>> paired = pd.DataFrame({
    ...     "parameter": "ff", "method": "fast", "reference": "ref", "subject": "s1",
    ...     "segment": [1, 2], "reference_value": [80.0, 5.0], "test_value": [21.0, 6.0]})
    >>> screen = swap_screen(paired)
    >>> print(screen.flags[["segment", "reason"]].to_string(index=False))
     segment       reason
           1 swap-suspect
    >>> print(screen.counts[["n_pairs", "n_flagged"]].to_string(index=False))
     n_pairs  n_flagged
           2          1
    """
    _check_screen_options(paired, margin, magnitude_only_methods, magnitude_limit)
    ff = paired[paired["parameter"].eq(SCREENED_PARAMETER)]
    x = ff["reference_value"].to_numpy(dtype=float)
    y = ff["test_value"].to_numpy(dtype=float)
    swapped = 100.0 - x
    d_ref, d_swap = np.abs(y - x), np.abs(y - swapped)
    magnitude = ff["method"].isin(list(magnitude_only_methods)).to_numpy()
    # assigned from the last of REASONS to the first, so that the first that applies wins
    reason = np.full(x.size, "", dtype=object)
    reason[d_swap + margin < d_ref] = "swap-suspect"
    reason[magnitude & (y > magnitude_limit)] = "above-magnitude-limit"
    reason[magnitude & (x > magnitude_limit)] = "not-comparable"
    hit = reason != ""
    flags = ff.loc[hit].copy()
    flags["swapped_reference"] = swapped[hit]
    flags["distance_to_reference"] = d_ref[hit]
    flags["distance_to_swapped"] = d_swap[hit]
    flags["reason"] = reason[hit]
    flags = flags.reindex(columns=list(FLAG_COLUMNS)).reset_index(drop=True)
    counts = _counts(ff, [str(m) for m in levels(paired["method"])], reason, magnitude_only_methods)
    return SwapScreen(flags, counts, float(margin), tuple(magnitude_only_methods), magnitude_limit)


def swap_screen_with(paired: pd.DataFrame, options: SwapOptions) -> SwapScreen:
    """:func:`swap_screen` with options read from the study file (``parse_swap_options``).

    Examples
    --------
    >>> from cohort.domain.thresholds import SwapOptions
    >>> paired = pd.DataFrame({
    ...     "parameter": "ff", "method": "two-point", "reference": "ref", "subject": "s1",
    ...     "segment": [1, 2], "reference_value": [70.0, 5.0], "test_value": [30.0, 6.0]})
    >>> screen = swap_screen_with(paired, SwapOptions(magnitude_only_methods=("two-point",)))
    >>> print(screen.flags["reason"].tolist())
    ['not-comparable']
    """
    return swap_screen(
        paired,
        margin=options.margin,
        magnitude_only_methods=options.magnitude_only_methods,
        magnitude_limit=options.magnitude_limit,
    )


@dataclass(frozen=True)
class Exclusion:
    """Paired rows after an explicit exclusion, and the rows removed."""

    paired: pd.DataFrame
    removed: pd.DataFrame
    parameters: tuple[str, ...]

    def summary(self) -> str:
        """What was removed, e.g. ``"removed 3 paired rows (ff): quickmap 3"``."""
        if self.removed.empty:
            return f"removed no paired rows ({', '.join(self.parameters)})"
        per = self.removed.groupby("method").size()
        listed = ", ".join(f"{m} {n}" for m, n in per.items())
        return (
            f"removed {len(self.removed)} paired rows ({', '.join(self.parameters)}) of "
            f"{self.removed['subject'].nunique()} subjects flagged by the swap screen: {listed}"
        )

    def to_frame(self) -> pd.DataFrame:
        """The removed rows."""
        return self.removed


def exclude_flagged(
    paired: pd.DataFrame,
    flags: pd.DataFrame | SwapScreen,
    *,
    parameters: Sequence[str] = (SCREENED_PARAMETER,),
    reasons: Sequence[str] = REASONS,
) -> Exclusion:
    """Remove the paired rows of flagged (method, subject, segment), for ``parameters``.

    Never called automatically: the user decides. ``parameters=("ff", "r2star")`` also drops
    the R2* of a swapped segment (a swap also corrupts the R2* of a joint fit). Only flags
    whose ``reason`` is in ``reasons`` count. The result lists every removed row.

    Examples
    --------
    >>> paired = pd.DataFrame({
    ...     "parameter": ["ff", "ff", "r2star"], "method": "fast", "reference": "ref",
    ...     "subject": "s1", "segment": [1, 2, 1], "reference_value": [80.0, 5.0, 40.0],
    ...     "test_value": [21.0, 6.0, 41.0]})
    >>> kept = exclude_flagged(paired, swap_screen(paired))
    >>> print(kept.summary())
    removed 1 paired rows (ff) of 1 subjects flagged by the swap screen: fast 1
    >>> print(len(kept.paired), len(exclude_flagged(paired, swap_screen(paired),
    ...                                              parameters=("ff", "r2star")).paired))
    2 1
    """
    frame = flags.flags if isinstance(flags, SwapScreen) else flags
    if isinstance(parameters, str) or isinstance(reasons, str):
        raise ValueError("parameters and reasons must be lists, not text")
    bad = [r for r in reasons if r not in REASONS]
    if bad:
        raise ValueError(f"reasons must be among {list(REASONS)}, got {bad}")
    for column in (*_UNIT, "reason"):
        if column not in frame.columns:
            raise ValueError(f"flags must have column {column!r} (use swap_screen)")
    chosen = frame[frame["reason"].isin(list(reasons))]
    keys = pd.MultiIndex.from_frame(chosen[list(_UNIT)].astype(object))
    row_keys = pd.MultiIndex.from_frame(paired[list(_UNIT)].astype(object))
    drop = row_keys.isin(keys) & paired["parameter"].isin(list(parameters)).to_numpy()
    return Exclusion(
        paired.loc[~drop].reset_index(drop=True),
        paired.loc[drop].reset_index(drop=True),
        tuple(parameters),
    )
