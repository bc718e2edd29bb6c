"""The Passing-Bablok point fit and its rank-based interval, from slope order statistics.

Passing H, Bablok W. A new biometrical procedure for testing the equality of measurements
from two different analytical methods. J Clin Chem Clin Biochem 1983;21:709-720. The public
function, its intervals and its validation are :func:`cohort.stats.regression.passing_bablok`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from cohort.stats._slopes import DirectSlopes, FastSlopes

#: Up to this many pairs Passing-Bablok enumerates all slopes (O(n^2) memory and time);
#: above it the selection algorithm of :class:`FastSlopes` is used, which is already faster
#: at 1,700 pairs (benchmarks/regression_speed.py). Both give the same result
#: (tests/stats/test_regression.py checks that they agree exactly).
PB_DIRECT_MAX_N = 1000


def slope_oracle(x: np.ndarray, y: np.ndarray, method: str) -> DirectSlopes | FastSlopes:
    """The slope order statistics: enumerated up to ``PB_DIRECT_MAX_N`` pairs (``"auto"``),
    or as ``method`` (``"direct"`` or ``"fast"``) says."""
    if method == "direct" or (method == "auto" and x.size <= PB_DIRECT_MAX_N):
        return DirectSlopes(x, y)
    return FastSlopes(x, y)


@dataclass(frozen=True)
class PBFit:
    """Slope, intercept and rank-based limits (None when not estimable, ``ci_reason`` says
    why) of one Passing-Bablok fit; ``reason`` says why slope and intercept are NaN."""

    slope: float
    intercept: float
    slope_ci: tuple[float, float] | None
    intercept_ci: tuple[float, float] | None
    reason: str  # why slope/intercept are not estimable ("" if they are)
    ci_reason: str
    notes: tuple[str, ...]


def pb_fit(
    x: np.ndarray, y: np.ndarray, confidence_level: float | None, method: str = "auto"
) -> PBFit:
    """Passing-Bablok slope, intercept and (if confidence_level) the rank-based intervals."""
    n = x.size
    if n < 3:
        return PBFit(math.nan, math.nan, None, None, f"fewer than 3 pairs (n={n})", "", ())
    if np.all(x == x[0]):
        return PBFit(math.nan, math.nan, None, None, "all reference values identical", "", ())
    oracle = slope_oracle(x, y, method)
    k_finite, n_minus_one = oracle.minus_one_counts()
    v_minus, v_plus, n_fin = oracle.v_minus, oracle.v_plus, oracle.n_finite
    shift = v_minus + k_finite  # K: slopes below -1, -inf included
    big_n = n_fin - n_minus_one + v_minus + v_plus  # N: slopes used (S = -1 and 0/0 dropped)
    if big_n == 0:
        return PBFit(
            math.nan,
            math.nan,
            None,
            None,
            "no slopes left: every pair is identical or has slope -1",
            "",
            (),
        )

    def finite_rank(r: int) -> int | float:
        # rank r among the N slopes -> rank among finite slopes, or +-inf
        ell = r if r <= shift else r + n_minus_one
        if ell <= v_minus:
            return -math.inf
        if ell > v_minus + n_fin:
            return math.inf
        return ell - v_minus

    mid = [(big_n + 1) // 2 + shift] if big_n % 2 else [big_n // 2 + shift, big_n // 2 + 1 + shift]
    if mid[-1] > big_n:
        reason = (
            f"{shift} of {big_n} slopes are below -1, so the shifted median falls outside the "
            "slopes (the methods are not positively related, as the procedure requires)"
        )
        return PBFit(math.nan, math.nan, None, None, reason, "", ())
    ranks = list(mid)
    ci_ranks: list[int] = []
    ci_reason = ""
    if confidence_level is not None:
        z = stats.norm.ppf(0.5 + confidence_level / 2.0)
        c_gamma = z * math.sqrt(n * (n - 1) * (2 * n + 5) / 18.0)
        m1 = math.floor((big_n - c_gamma) / 2.0 + 0.5)
        m2 = big_n - m1 + 1
        if m1 < 1 or m2 + shift > big_n:
            ci_reason = (
                f"rank-based interval needs ranks {m1 + shift} and {m2 + shift} of {big_n} "
                f"slopes (too few pairs, n={n}, or too many slopes below -1)"
            )
        else:
            ci_ranks = [m1 + shift, m2 + shift]
            ranks += ci_ranks
    mapped = [finite_rank(r) for r in ranks]
    wanted = sorted({int(m) for m in mapped if not math.isinf(m)})
    got = dict(zip(wanted, oracle.select(wanted), strict=True)) if wanted else {}
    values = [got[int(m)] if not math.isinf(m) else float(m) for m in mapped]
    notes = tuple(dict.fromkeys(oracle.notes))
    slope = float(np.mean(values[: len(mid)]))
    if not math.isfinite(slope):
        return PBFit(math.nan, math.nan, None, None, "the median slope is vertical", "", notes)
    intercept = float(np.median(y - slope * x))
    slope_ci = intercept_ci = None
    if ci_ranks:
        lo, hi = values[len(mid) :]
        slope_ci = (lo, hi)
        if math.isfinite(lo) and math.isfinite(hi):
            intercept_ci = (float(np.median(y - hi * x)), float(np.median(y - lo * x)))
        else:
            ci_reason = "a slope limit is infinite, so the intercept limits are undefined"
    return PBFit(slope, intercept, slope_ci, intercept_ci, "", ci_reason, notes)


def pb_point(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Slope and intercept only (the refit of each bootstrap resample)."""
    fit = pb_fit(x, y, None)
    return fit.slope, fit.intercept
