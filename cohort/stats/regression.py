"""Method-comparison regression of the test method (y) on the reference method (x).

Two procedures, each returning a :class:`MethodRegression`:

* :func:`passing_bablok`: the shifted median of the pairwise slopes (Passing & Bablok 1983),
  computed without enumerating the n(n-1)/2 slopes so that a cohort of 10^5 subjects x 17
  segments (1.7 million pairs) fits in memory and in seconds.
* :func:`deming`: the closed-form Deming (1943) estimator with a known ratio of error
  variances.

x is always the reference method and y the test method (data contract). Intervals are the
analytic ones by default; with ``subject`` and ``n_boot > 0`` they are subject-cluster bootstrap
percentile intervals (Field & Welsh, J R Stat Soc B 2007), because segments of one subject are
not independent.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import interpolate, stats

from cohort.stats.bootstrap import ResampleCounts
from cohort.stats.results import ConfidenceInterval, warn_not_estimable

try:  # private, but stable for years; without it the numpy merge count is used
    from scipy.stats._stats import _kendall_dis
except ImportError:  # pragma: no cover
    _kendall_dis = None

__all__ = [
    "PB_BOOTSTRAP_MIN_B",
    "PB_BOOTSTRAP_PAIR_BUDGET",
    "PB_DIRECT_MAX_N",
    "PB_WEIGHTED_MAX_N",
    "MethodRegression",
    "deming",
    "passing_bablok",
]

#: Up to this many pairs Passing-Bablok enumerates all slopes (O(n^2) memory and time);
#: above it the selection algorithm of :class:`_FastSlopes` is used, which is already faster
#: at 1,700 pairs (benchmarks/regression_speed.py). Both give the same result
#: (tests/test_regression.py checks that they agree exactly).
PB_DIRECT_MAX_N = 1000

#: Largest n_pairs x B (pairs re-fitted over all bootstrap resamples) that a Passing-Bablok
#: cluster bootstrap may cost. Measured by benchmarks/regression_speed.py on a shared 2-core
#: machine: one resample of 170,000 pairs takes 0.5-0.6 s, so 2e8 pair fits (B = 1176 at
#: 170,000 pairs) take 10-12 minutes there, and B = 2000 would take 17-21. Above the budget
#: fewer resamples are run and the CI says how many; at 1.7 million pairs only 117 fit.
PB_BOOTSTRAP_PAIR_BUDGET = 200_000_000

#: Up to this many pairs the Passing-Bablok cluster bootstrap enumerates the slopes once and
#: weights them per resample (``_pb_weighted_draws``: each slope between a point of subject s
#: and one of subject t counts c_s c_t times when s is drawn c_s times), instead of refitting:
#: B = 2000 takes about 1 s at 800 pairs; memory O(n^2) for the slopes (about 0.2 GB at
#: the limit).
PB_WEIGHTED_MAX_N = 4000

#: ``_pb_weighted_draws``: resamples located through coarse blocks of all slopes to place
#: the window of slopes the others are located in; the least padding of that window either
#: side; the number of coarse blocks; and c in sqrt(c w) / k, the number of fine blocks of
#: a window of w slopes with k subjects (c = 400 was the fastest of 40, 400, 4,000 and
#: 40,000 on six cohort shapes, benchmarks/regression_speed.py; the result does not
#: depend on any of these).
_PB_WINDOW_PILOT = 32
_PB_WINDOW_MIN_PAD = 1024
_PB_COARSE_BLOCKS = 16
_PB_FINE_FACTOR = 400

#: Fewest resamples for which a 95 % percentile interval is still reported; below it the
#: bootstrap is not run at all and the analytic interval is returned with a note.
PB_BOOTSTRAP_MIN_B = 200

_PB = "Passing-Bablok"
_DEMING = "Deming"
_U = 2.0**-53  # unit roundoff of float64


@dataclass(frozen=True)
class MethodRegression:
    """Slope and intercept of test = intercept + slope x reference, with their intervals."""

    procedure: str  # "Passing-Bablok" or "Deming"
    slope: float
    intercept: float
    slope_ci: ConfidenceInterval
    intercept_ci: ConfidenceInterval
    n: int
    note: str = ""

    def to_frame(self) -> pd.DataFrame:
        """One tidy row; ``ci_method`` names the interval construction(s)."""
        if self.slope_ci.method == self.intercept_ci.method:
            ci_method = self.slope_ci.method
        else:
            ci_method = f"slope: {self.slope_ci.method}; intercept: {self.intercept_ci.method}"
        notes = [self.note, self.slope_ci.note, self.intercept_ci.note]
        note = "; ".join(dict.fromkeys(s for s in notes if s))
        return pd.DataFrame(
            {
                "procedure": [self.procedure],
                "slope": [self.slope],
                "slope_ci_low": [self.slope_ci.low],
                "slope_ci_high": [self.slope_ci.high],
                "intercept": [self.intercept],
                "intercept_ci_low": [self.intercept_ci.low],
                "intercept_ci_high": [self.intercept_ci.high],
                "n": [self.n],
                "confidence_level": [self.slope_ci.level],
                "ci_method": [ci_method],
                "note": [note],
            }
        )


# --------------------------------------------------------------------------- input checks


def _paired_arrays(reference: ArrayLike, test: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    x = np.asarray(reference, dtype=float)
    y = np.asarray(test, dtype=float)
    for name, a in (("reference", x), ("test", y)):
        if a.ndim != 1:
            raise ValueError(f"{name} must be one-dimensional, got shape {a.shape}")
    if x.size != y.size:
        raise ValueError(f"reference and test must have the same length, got {x.size} and {y.size}")
    for name, a in (("reference", x), ("test", y)):
        bad = int(np.count_nonzero(~np.isfinite(a)))
        if bad:
            raise ValueError(f"{name} must be finite, got {bad} non-finite value(s)")
    # -0.0 + 0.0 == +0.0: one zero, so x_j - x_i of tied zeros is always +0.0
    return x + 0.0, y + 0.0


def _check_common(confidence_level: float, n_boot: int, subject, n: int) -> np.ndarray | None:
    if not (isinstance(confidence_level, int | float) and 0.0 < confidence_level < 1.0):
        raise ValueError(
            f"confidence_level must be a number strictly between 0 and 1, got {confidence_level!r}"
        )
    if isinstance(n_boot, bool) or not isinstance(n_boot, int | np.integer) or n_boot < 0:
        raise ValueError(f"n_boot must be a non-negative integer, got {n_boot!r}")
    if subject is None:
        return None
    codes, _ = pd.factorize(np.asarray(subject, dtype=object), use_na_sentinel=True)
    if codes.size != n:
        raise ValueError(f"subject must have one id per pair: got {codes.size} ids for {n} pairs")
    if np.any(codes < 0):
        raise ValueError(f"subject must not contain missing ids, got {int(np.sum(codes < 0))}")
    return codes


def _nan_result(procedure: str, n: int, what: str, reason: str, cl: float, method: str):
    note = warn_not_estimable(what, reason, stacklevel=3)
    ci = ConfidenceInterval.not_estimable(reason, cl, method)
    return MethodRegression(procedure, math.nan, math.nan, ci, ci, n, note)


# ------------------------------------------------------------ inversion counting primitives


def _dense_ranks(v: np.ndarray) -> np.ndarray:
    """Ranks 0..m-1 of v, equal values sharing a rank (int32)."""
    order = np.argsort(v)
    sv = v[order]
    step = np.empty(v.size, dtype=np.int32)
    step[:1] = 0
    np.not_equal(sv[1:], sv[:-1], out=step[1:], casting="unsafe")
    ranks = np.empty(v.size, dtype=np.int32)
    ranks[order] = np.cumsum(step, dtype=np.int32)
    return ranks


_LEAF = 16


def _count_inversions(r: np.ndarray) -> int:
    """Number of positions p < q with r[p] > r[q] (ties are not inversions), O(n log n).

    With scipy's compiled Fenwick-tree count of discordant pairs (``_kendall_dis``, the
    kernel of ``scipy.stats.kendalltau``; 10-20 times faster at 10^5-10^6 values): the
    pairs discordant between the positions 1..n and r are exactly these inversions.
    Otherwise :func:`_merge_inversions`. Both are checked against a brute-force count in
    tests/test_regression.py.
    """
    n = r.size
    if n < 2:
        return 0
    if _kendall_dis is None:
        return _merge_inversions(r)
    low, high = int(r.min()), int(r.max())
    if high - low > 4 * n:  # the tree has one slot per value: compress sparse values first
        r, low = _dense_ranks(r), 0
    ranks = np.asarray(r, dtype=np.intp) - (low - 1)  # values from 1 (the tree's first slot)
    return int(_kendall_dis(np.arange(1, n + 1, dtype=np.intp), ranks))


def _merge_inversions(r: np.ndarray) -> int:
    """:func:`_count_inversions` by a bottom-up merge sort in numpy.

    Leaf blocks of 16 are compared directly; each merge level sorts rows of two sorted
    halves with a stable sort (linear for two runs), and the level's inversions are
    sum |p - perm[p]| / 2 (a left element moves right by the number of smaller right
    elements, right elements move left by as much in total).
    """
    n = r.size
    if n < 2:
        return 0
    size = max(_LEAF, 1 << (n - 1).bit_length())
    a = np.full(size, np.iinfo(np.int32).max, dtype=np.int32)  # padding: no new inversions
    a[:n] = r
    rows = a.reshape(-1, _LEAF)
    total = 0
    for i in range(_LEAF - 1):
        total += int(np.count_nonzero(rows[:, i : i + 1] > rows[:, i + 1 :]))
    a = np.sort(rows, axis=1).reshape(-1)
    w = _LEAF
    while w < size:
        rows = a.reshape(-1, 2 * w)
        perm = np.argsort(rows, axis=1, kind="stable")
        total += int(np.abs(np.arange(2 * w) - perm).sum(dtype=np.int64)) // 2
        a = np.take_along_axis(rows, perm, axis=1).reshape(-1)
        w *= 2
    return total


def _inversion_pairs(r: np.ndarray, cap: int) -> tuple[np.ndarray, np.ndarray] | None:
    """All (p, q), p < q, with r[p] > r[q]; None as soon as there are more than ``cap``.

    Same merge levels as :func:`_count_inversions`; a left element that moves right by c
    positions forms inversions with the c smallest elements of the right half.
    """
    n = r.size
    empty = np.empty(0, dtype=np.int64)
    if n < 2:
        return empty, empty
    size = 1 << (n - 1).bit_length()
    a = np.full(size, np.iinfo(np.int32).max, dtype=np.int32)
    a[:n] = r
    idx = np.arange(size, dtype=np.int64)
    ps: list[np.ndarray] = []
    qs: list[np.ndarray] = []
    total = 0
    w = 1
    while w < size:
        rows = a.reshape(-1, 2 * w)
        irows = idx.reshape(-1, 2 * w)
        perm = np.argsort(rows, axis=1, kind="stable")
        inv = int(np.abs(np.arange(2 * w) - perm).sum(dtype=np.int64)) // 2
        if inv:
            total += inv
            if total > cap:
                return None
            nrow = rows.shape[0]
            merged_pos = np.flatnonzero(perm < w).reshape(nrow, w)
            merged_pos -= (np.arange(nrow, dtype=np.int64) * (2 * w))[:, None]
            shift = (merged_pos - np.arange(w)).ravel()
            sel = np.flatnonzero(shift)
            c = shift[sel]
            row = sel // w
            ps.append(np.repeat(irows[row, sel % w], c))
            first = row * (2 * w) + w
            qs.append(irows.ravel()[np.repeat(first - (np.cumsum(c) - c), c) + np.arange(inv)])
        a = np.take_along_axis(rows, perm, axis=1).reshape(-1)
        idx = np.take_along_axis(irows, perm, axis=1).reshape(-1)
        w *= 2
    if not ps:
        return empty, empty
    return np.concatenate(ps), np.concatenate(qs)


def _ragged_ranges(starts: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """Concatenation of arange(s, s + l) for each (s, l)."""
    lengths = lengths.astype(np.int64)
    total = int(lengths.sum())
    if total == 0:
        return np.empty(0, dtype=np.int64)
    offsets = np.cumsum(lengths) - lengths
    return np.repeat(starts.astype(np.int64) - offsets, lengths) + np.arange(total)


def _shortest_in(lo: float, hi: float) -> float:
    """A float in [lo, hi] with few significant digits (1.0 rather than 0.9999999999999998)."""
    mid = 0.5 * (lo + hi)
    for digits in range(1, 18):
        cand = float(f"{mid:.{digits}g}")
        if lo <= cand <= hi:
            return cand
    return mid


# ----------------------------------------------------------------------- slope order statistics


class _DirectSlopes:
    """All pairwise slopes S_ij = (y_j - y_i) / (x_j - x_i), i < j, enumerated (O(n^2))."""

    def __init__(self, x: np.ndarray, y: np.ndarray) -> None:
        i, j = np.triu_indices(x.size, 1)
        dx = x[j] - x[i]
        dy = y[j] - y[i]
        finite = dx != 0
        self.s = dy[finite] / dx[finite] + 0.0  # one zero: no -0.0
        vertical = ~finite & (dy != 0)
        self.v_minus = int(np.count_nonzero(dy[vertical] < 0))
        self.v_plus = int(np.count_nonzero(dy[vertical] > 0))
        self.n_finite = int(self.s.size)
        self.notes: list[str] = []

    def minus_one_counts(self) -> tuple[int, int]:
        return int(np.count_nonzero(self.s < -1.0)), int(np.count_nonzero(self.s == -1.0))

    def select(self, ks: Sequence[int]) -> list[float]:
        part = np.partition(self.s, [k - 1 for k in ks])
        return [float(part[k - 1]) for k in ks]


class _FastSlopes:
    """Order statistics of the finite pairwise slopes without enumerating the pairs.

    Rank of a value t: sort the points by x; pair i < j (x_i < x_j) has S_ij < t exactly when
    v_j < v_i for v = y - t x, so #(S < t) is the number of inversions of v in x order
    (:func:`_count_inversions`, O(n log n)). Within a group of equal x the points are sorted by
    y, so v is non-decreasing there and vertical pairs never count.

    Exactness. The targets are order statistics of the float64 slopes fl(fl(y_j - y_i) /
    fl(x_j - x_i)), the numbers a direct computation sorts. Rounding in v can misclassify only
    a pair whose exact slope lies within ``delta(t)`` = O(eps (|y| + |t||x|) / dx) of t. Pairs
    with 0 < dx < h (a ``close`` set of at most about n pairs) are kept explicitly with their
    float slopes, so for all other pairs that band is narrow. A bracket [lo, hi] around a
    wanted rank is narrowed with approximate counts, then every pair with slope in
    [lo - delta, hi + delta] is enumerated (:meth:`_band`), the count below lo is corrected to
    the exact one, and the rank is read off and verified to lie in the bracket (else the
    bracket is redone). So the result equals the direct computation's. Enumerations run over
    distinct points, each pair weighted by the product of the points' multiplicities.

    Exact ties at scale. When more than ``cap`` slopes lie within 12 ``tie_width`` (relative
    1e-10, or 2 delta if larger) of a wanted rank, which happens when large data sets are
    recorded to a few decimals and many pairs share one slope, those slopes are not
    enumerated: exact counts at 5 ``tie_width`` either side of the cluster place the rank
    inside it and one of its slopes is returned, so the value is exact to the cluster's width
    (about 2e-9 relative; a note says so if that width exceeds 1e-7). Slopes that differ only
    by the rounding of decimal inputs to binary are then treated as the tie they are in
    decimal; a cluster at -1 is discarded whole.
    """

    def __init__(self, x: np.ndarray, y: np.ndarray, cap: int | None = None) -> None:
        n = x.size
        self.n = n
        order = np.argsort(x)
        xs = x[order]
        if np.any(xs[1:] == xs[:-1]):  # ties in x: sort by y within them (cheaper than lexsort)
            rank_x = np.empty(n, dtype=np.int64)
            rank_x[order] = np.cumsum(np.concatenate(([0], xs[1:] != xs[:-1])))
            order = np.argsort(rank_x * n + _dense_ranks(y))
            xs = x[order]
        ys = y[order]
        self.xs, self.ys = xs, ys
        new_x = np.ones(n, dtype=bool)
        new_x[1:] = xs[1:] != xs[:-1]
        new_xy = new_x.copy()
        new_xy[1:] |= ys[1:] != ys[:-1]
        g = np.diff(np.append(np.flatnonzero(new_x), n))
        tied = int((g * (g - 1) // 2).sum())
        first = np.flatnonzero(new_xy)  # distinct points, in (x, y) order
        mult = np.diff(np.append(first, n))
        identical = int((mult * (mult - 1) // 2).sum())
        self.n_finite = n * (n - 1) // 2 - tied
        self.notes: list[str] = []
        # vertical pairs: S_ij = -inf when y_j < y_i for i < j in the order given
        if tied > identical:
            rank_xy = np.empty(n, dtype=np.int32)
            rank_xy[order] = np.cumsum(new_xy) - 1
            self.v_minus = _count_inversions(rank_xy[np.argsort(x, kind="stable")])
        else:
            self.v_minus = 0
        self.v_plus = tied - identical - self.v_minus
        self.cap = cap if cap is not None else max(200_000, 2 * n)
        if self.n_finite == 0:
            return
        self.xc = xs - xs[n // 2]  # centring shrinks the rounding error of v
        self.yc = ys - np.median(ys)
        self.first = first
        self.mult = mult.astype(np.int64)
        self.xu, self.yu = xs[first], ys[first]
        self.xcu, self.ycu = self.xc[first], self.yc[first]
        self.xmax = float(np.abs(self.xc).max())
        self.ymax = float(np.abs(self.yc).max())
        self.span_x = float(xs[-1] - xs[0])
        dxmin = float(np.diff(xs[new_x]).min())
        span_y = float(ys.max() - ys.min())
        self.t_bound = min(2.0 * span_y / dxmin + 1.0, 1e300 / (self.xmax + self.ymax + 1.0))
        self._init_close(dxmin)
        self._cu: dict[float, int] = {}
        self._approx: dict[float, int] = {-self.t_bound: 0, self.t_bound: self.n_finite}
        self._sample = np.empty(0)
        self._clusters = np.empty((0, 2))

    # -- setup
    def _init_close(self, dxmin: float) -> None:
        xu = self.xu
        nu = xu.size
        first_right = np.searchsorted(xu, xu, side="right")
        budget = max(50_000, self.n)

        probe = np.unique(np.linspace(0, nu - 1, min(nu, 20_000)).astype(np.int64))

        def n_close(h: float) -> float:  # estimated from evenly spaced probe points
            c = np.searchsorted(xu, xu[probe] + h) - first_right[probe]
            return float(np.maximum(c, 0).sum()) * nu / probe.size

        # largest h = span 2^-k whose close set fits the budget (bisection on k)
        lo_k, hi_k = 1, 60
        if n_close(self.span_x * 2.0**-lo_k) <= budget:
            hi_k = lo_k
        while hi_k - lo_k > 1:
            mid = (lo_k + hi_k) // 2
            if n_close(self.span_x * 2.0**-mid) <= budget:
                hi_k = mid
            else:
                lo_k = mid
        h = self.span_x * 2.0**-hi_k
        if h < 64 * _U * max(abs(float(xu[0])), abs(float(xu[-1]))):
            h = 0.0  # below the resolution of x: no close set, delta uses dxmin
        self.h = h
        self.h_eff = max(h, dxmin)
        if h > dxmin:
            stop = np.searchsorted(xu, xu + 2.0 * h, side="right")
            c = np.maximum(stop - first_right, 0)
            i = np.repeat(np.arange(nu, dtype=np.int64), c)
            j = _ragged_ranges(first_right, c)
            keep = (xu[j] - xu[i]) < h
            i, j = i[keep], j[keep]
        else:
            i = j = np.empty(0, dtype=np.int64)
        self.ci, self.cj = i, j
        self.cw = self.mult[i] * self.mult[j]
        s = (self.yu[j] - self.yu[i]) / (xu[j] - xu[i])
        o = np.argsort(s)
        self.cs = s[o]
        self.ccum = np.concatenate(([0], np.cumsum(self.cw[o])))

    def _close_below(self, t: float, side: str = "left") -> int:
        return int(self.ccum[np.searchsorted(self.cs, t, side)])

    # -- classification by v = y - t x
    def _v(self, t: float) -> np.ndarray:
        return self.yc - t * self.xc

    def _v_unique(self, t: float) -> np.ndarray:
        return self.ycu - t * self.xcu  # the same numbers as _v(t)[first]

    def _count_u(self, t: float, v: np.ndarray) -> int:
        """#(pairs with v_j < v_i) minus the close pairs so classified."""
        if t not in self._cu:
            self._cu[t] = _count_inversions(_dense_ranks(v))
        vu = v[self.first]
        return self._cu[t] - int(self.cw[vu[self.ci] > vu[self.cj]].sum())

    def approx_below(self, t: float) -> int:
        """#(S < t): exact except for pairs in the band of half-width delta(t) around t."""
        if t not in self._approx:
            self._approx[t] = self._count_u(t, self._v(t)) + self._close_below(t)
        return self._approx[t]

    def _err_v(self, t: float) -> float:
        return _U * (2.1 * self.ymax + 3.2 * abs(t) * self.xmax)

    def delta(self, t: float) -> float:
        """Half-width of the band of slopes that v-rounding at t may misclassify (x2 margin)."""
        at = abs(t)
        return 2.0 * (2.0 * self._err_v(at) / self.h_eff + 7.0 * _U * at) + 1e-300

    def _delta_vec(self, t: np.ndarray) -> np.ndarray:
        at = np.abs(t)
        err = _U * (2.1 * self.ymax + 3.2 * at * self.xmax)
        return 2.0 * (2.0 * err / self.h_eff + 7.0 * _U * at) + 1e-300

    def tie_width(self, t: float) -> float:
        return max(2.0 * self.delta(t), 1e-10 * max(1.0, abs(t)))

    # -- enumeration of the pairs in a band of slopes (over distinct points, weighted)
    def _keep(self, p: np.ndarray, q: np.ndarray, s_lo: float, s_hi: float):
        i, j = np.minimum(p, q), np.maximum(p, q)
        dx = self.xu[j] - self.xu[i]  # >= 0: sorted by x
        ok = (dx != 0) & (dx >= self.h)
        i, j, dx = i[ok], j[ok], dx[ok]
        s = (self.yu[j] - self.yu[i]) / dx
        inside = (s >= s_lo) & (s <= s_hi)
        i, j = i[inside], j[inside]
        return i, j, s[inside], self.mult[i] * self.mult[j]

    def _band(self, a: float, b: float, expected: int = 0):
        """Every non-close pair with exact slope in [a, b]: (i, j, slope, weight) or None.

        Such a pair has 0 <= v_j - v_i <= span_x (b - a) at t = a, so it is among the pairs of
        points that close in v order (a window, enumerated in chunks); if the window holds many
        more pairs than the ``expected`` band, the band's pairs are found as the discordant
        pairs between the orders of v at a - 2 delta and b + 2 delta (output-sensitive merge).
        None if there are more than ``cap`` pairs of distinct points.
        """
        nu = self.xu.size
        wide = 4.0 * _U * max(abs(a), abs(b)) + 1e-300
        s_lo, s_hi = a - wide, b + wide
        v = self._v_unique(a)
        order = np.argsort(v)
        sv = v[order]
        width = (self.span_x * (b - a) + 2.0 * self._err_v(a)) * (1.0 + 1e-9)
        width += 4.0 * _U * float(np.abs(sv).max()) + 1e-300
        c = np.searchsorted(sv, sv + width, side="right") - np.arange(1, nu + 1)
        total = int(c.sum())
        parts = []
        if total <= max(4_000_000, 16 * expected):
            chunk = 4_000_000
            cum = np.cumsum(c)
            marks = np.searchsorted(cum, np.arange(chunk, total, chunk)) + 1
            bounds = np.unique(np.concatenate(([0], marks, [nu])))
            size = 0
            for p0, p1 in itertools.pairwise(bounds):
                cc = c[p0:p1]
                p = np.repeat(np.arange(p0, p1), cc)
                q = _ragged_ranges(np.arange(p0 + 1, p1 + 1), cc)
                parts.append(self._keep(order[p], order[q], s_lo, s_hi))
                size += parts[-1][0].size
                if size > self.cap:
                    return None
        else:
            d = 2.0 * self.delta(max(abs(a), abs(b)) + 1.0)
            ra = _dense_ranks(self._v_unique(a - d)).astype(np.int64)
            rb = _dense_ranks(self._v_unique(b + d))
            order = np.argsort(ra * nu + rb, kind="stable")
            pairs = _inversion_pairs(rb[order], 2 * self.cap)
            if pairs is None:
                return None
            parts.append(self._keep(order[pairs[0]], order[pairs[1]], s_lo, s_hi))
            if parts[-1][0].size > self.cap:
                return None
        return tuple(np.concatenate(z) for z in zip(*parts, strict=True))

    def _exact_below(self, t: float, band) -> int:
        """#(S < t) exactly, given a band containing every pair within delta(t) of t."""
        i, j, s, w = band
        v = self._v(t)
        vu = v[self.first]
        below_u = self._count_u(t, v) - int(w[vu[i] > vu[j]].sum())
        exact = below_u + int(w[s < t].sum()) + self._close_below(t)
        self._approx[t] = exact
        return exact

    def _exact_at(self, t: float) -> int | None:
        d = self.delta(t)
        band = self._band(t - d, t + d)
        return None if band is None else self._exact_below(t, band)

    def _safe_edges(self, lo: float, hi: float) -> tuple[float, int, float, int] | None:
        """Points just outside [lo, hi] with exact counts (their delta-bands enumerable)."""
        w0 = self.tie_width(max(abs(lo), abs(hi)))
        for g in (5.0, 40.0, 320.0):
            tl, tr = lo - g * w0, hi + g * w0
            cl = self._exact_at(tl)
            cr = self._exact_at(tr) if cl is not None else None
            if cl is not None and cr is not None:
                return tl, cl, tr, cr
        return None

    def _member(self, tl: float, tr: float) -> float:
        """One float slope in [tl, tr] (a tie cluster): from neighbours in v order."""
        order = np.argsort(self._v_unique(0.5 * (tl + tr)))
        i = np.minimum(order[:-1], order[1:])
        j = np.maximum(order[:-1], order[1:])
        dx = self.xu[j] - self.xu[i]
        ok = dx != 0
        s = (self.yu[j] - self.yu[i])[ok] / dx[ok]
        cs = self.cs
        cand = np.concatenate([s[(s >= tl) & (s <= tr)], cs[(cs >= tl) & (cs <= tr)]])
        if cand.size == 0:
            return _shortest_in(tl, tr)
        return float(np.sort(cand)[cand.size // 2])

    # -- what the estimator needs
    def minus_one_counts(self) -> tuple[int, int]:
        """(#S < -1, #S == -1) among the finite slopes."""
        d = self.delta(1.0)
        band = self._band(-1.0 - d, -1.0 + d)
        if band is not None:
            s, w = band[2], band[3]
            eq = int(w[s == -1.0].sum())
            eq += self._close_below(-1.0, "right") - self._close_below(-1.0)
            return self._exact_below(-1.0, band), eq
        edges = self._safe_edges(-1.0, -1.0)
        if edges is None:
            self.notes.append("slopes at -1 too many to count exactly; counted approximately")
            return self.approx_below(-1.0), 0
        _, cl, _, cr = edges
        return cl, cr - cl  # the whole cluster at -1 (to input rounding) is discarded

    def _bracket(self, k: int) -> tuple[float, float, int, int]:
        ts = np.array(sorted(self._approx))
        cs = np.array([self._approx[t] for t in ts])
        hi = int(np.argmax(cs >= k))  # first point with count >= k; count(-T) = 0 < k
        return float(ts[hi - 1]), float(ts[hi]), int(cs[hi - 1]), int(cs[hi])

    def _groups(self, ks: Sequence[int]) -> dict[tuple[float, float, int, int], list[int]]:
        groups: dict[tuple[float, float, int, int], list[int]] = {}
        for k in ks:
            groups.setdefault(self._bracket(k), []).append(k)
        return groups

    def _seed_points(self, ks: Sequence[int]) -> None:
        """Count at quantiles of a random sample of pair slopes around each target.

        The sample also reveals clusters of tied slopes (three or more sample slopes within
        a tenth of ``tie_width``); their edges are candidate count points.
        """
        rng = np.random.default_rng(20_231_983)  # only speed depends on it, never the result
        m = int(min(1_000_000, max(2_000, 20 * self.n)))
        i = rng.integers(0, self.n, m)
        j = rng.integers(0, self.n, m)
        dx = self.xs[j] - self.xs[i]
        ok = dx != 0
        s = np.sort((self.ys[j] - self.ys[i])[ok] / dx[ok])
        self._sample = s
        if s.size < 10:
            return
        tol = 0.1 * np.maximum(2.0 * self._delta_vec(s), 1e-10 * np.maximum(1.0, np.abs(s)))
        joined = (np.diff(s) <= tol[1:]).astype(np.int8)
        starts = np.flatnonzero(np.diff(np.concatenate(([0], joined))) == 1)
        ends = np.flatnonzero(np.diff(np.concatenate((joined, [0]))) == -1) + 1
        big = ends - starts >= 2  # at least three members
        self._clusters = np.column_stack([s[starts[big]], s[ends[big]]])
        points = set()
        for k in ks:
            q = (k - 0.5) / self.n_finite
            half = 4.0 * math.sqrt(q * (1.0 - q) / s.size) + 2.0 / s.size
            for qq in (q - half, q + half):
                if 0.0 < qq < 1.0:
                    points.add(float(s[int(qq * s.size)]))
        for t in sorted(points):
            if -self.t_bound < t < self.t_bound:
                self.approx_below(t)

    def _cluster_edges(self, lo: float, hi: float, clo: int, chi: int, k: float) -> set[float]:
        """Edges of the sample cluster (if any) at the sample's estimate of rank k."""
        s = self._sample
        a, b = int(np.searchsorted(s, lo, "right")), int(np.searchsorted(s, hi))
        if b - a < 3 or self._clusters.size == 0:
            return set()
        est = s[a + min(int((k - clo) / (chi - clo) * (b - a)), b - a - 1)]
        c = int(np.searchsorted(self._clusters[:, 0], est, "right")) - 1
        if c < 0 or est > self._clusters[c, 1]:
            return set()
        tol = self.tie_width(abs(est))
        edges = {float(self._clusters[c, 0]) - 5 * tol, float(self._clusters[c, 1]) + 5 * tol}
        return {t for t in edges if lo < t < hi}

    def _inverse_count(self, lo: float, hi: float, aims: list[float]) -> list[float]:
        """t where the count reaches each aim: monotone cubic (PCHIP) through the counts."""
        ts = np.array(sorted(t for t in self._approx if abs(t) < self.t_bound))
        cs = np.array([self._approx[t] for t in ts], dtype=float)
        keep = np.concatenate(([True], np.diff(cs) > 0))  # strictly increasing counts
        ts, cs = ts[keep], cs[keep]
        if ts.size >= 3:
            t_of = interpolate.PchipInterpolator(cs, ts, extrapolate=False)
            got = [float(t_of(a)) for a in aims]
        else:
            got = [math.nan] * len(aims)
        clo, chi = self._approx[lo], self._approx[hi]
        out = []
        for a, t in zip(aims, got, strict=True):
            if not lo < t < hi:  # outside the data of the spline: linear inside the bracket
                t = lo + (hi - lo) * (a - clo) / (chi - clo)
            out.append(t)
        return out

    def _narrow(self, ks: Sequence[int]) -> None:
        """Add count points until each bracket holds at most cap/16 slopes or is a tie cluster."""
        stop = min(self.cap // 2, max(10_000, self.cap // 16))
        tries: dict[int, int] = {}
        for _ in range(200):
            proposals: set[float] = set()
            for (lo, hi, clo, chi), group in self._groups(ks).items():
                m = chi - clo
                if m <= stop or hi - lo <= 12.0 * self.tie_width(max(abs(lo), abs(hi))):
                    continue
                kmin, kmax = min(group), max(group)
                tries[kmin] = tries.get(kmin, 0) + 1
                if lo <= -self.t_bound or hi >= self.t_bound:
                    # an open end: bisect the angle of the slope
                    proposals.add(math.tan(0.5 * (math.atan(lo) + math.atan(hi))))
                    continue
                proposals |= self._cluster_edges(lo, hi, clo, chi, 0.5 * (kmin + kmax))
                if tries[kmin] > 8:
                    proposals.add(0.5 * (lo + hi))
                    continue
                # aim a little either side of each run of nearby targets
                gap = max(4.0 * math.sqrt(m), 0.4 * stop)
                aims: list[float] = []
                run_lo = run_hi = group[0]
                for k in [*sorted(group)[1:], None]:
                    if k is not None and k - run_hi <= 2.0 * gap:
                        run_hi = k
                        continue
                    aims += [kk for kk in (run_lo - gap, run_hi + gap) if clo < kk < chi]
                    if k is not None:
                        run_lo = run_hi = k
                proposals |= set(self._inverse_count(lo, hi, aims or [0.5 * (kmin + kmax)]))
            new = [t for t in proposals if t not in self._approx]
            if not new:
                return
            for t in new:
                self.approx_below(t)

    def _resolve(self, lo: float, hi: float, clo: int, chi: int, group: list[int]):
        """Values for the ranks in ``group`` whose bracket is [lo, hi]; None to retry."""
        band = None
        if chi - clo <= self.cap:
            d = self.delta(max(abs(lo), abs(hi)))
            band = self._band(lo - d, hi + d, expected=chi - clo)
        if band is not None:
            c0 = self._exact_below(lo, band)
            s, w = band[2], band[3]
            a, b = np.searchsorted(self.cs, lo), np.searchsorted(self.cs, hi, "right")
            inside = (s >= lo) & (s <= hi)
            vals = np.concatenate([s[inside], self.cs[a:b]])
            wts = np.concatenate([w[inside], np.diff(self.ccum[a : b + 1])])
            o = np.argsort(vals, kind="stable")
            vals, cum = vals[o], np.cumsum(wts[o])
            total = int(cum[-1]) if cum.size else 0
            if all(c0 < k <= c0 + total for k in group):
                return {k: float(vals[np.searchsorted(cum, k - c0)]) for k in group}
            self._approx[float(np.nextafter(hi, np.inf))] = c0 + total
            return None
        if hi - lo > 12.0 * self.tie_width(max(abs(lo), abs(hi))):
            self.approx_below(0.5 * (lo + hi))  # not a tie cluster, only too many: split it
            return None
        edges = self._safe_edges(lo, hi)
        if edges is None:
            self.notes.append(
                f"about {chi - clo} slopes within {hi - lo:.1e} of a selected slope could not "
                "be counted exactly; that value is located to this width"
            )
            return {k: _shortest_in(lo, hi) for k in group}
        tl, cl, tr, cr = edges
        if not all(cl < k <= cr for k in group):
            return None
        value = self._member(tl, tr)
        if tr - tl > 1e-7 * max(1.0, abs(value)):  # else immaterial; see the class docstring
            self.notes.append(
                f"{cr - cl} slopes tie within {tr - tl:.1e} of a selected slope; that value is "
                "one of them"
            )
        return dict.fromkeys(group, value)

    def select(self, ks: Sequence[int]) -> list[float]:
        """The k-th smallest finite slopes (1-based); see the class docstring on exactness."""
        self._seed_points(ks)
        out: dict[int, float] = {}
        todo = sorted(set(ks))
        for _ in range(40):
            if not todo:
                break
            self._narrow(todo)
            retry = []
            for (lo, hi, clo, chi), group in self._groups(todo).items():
                got = self._resolve(lo, hi, clo, chi, group)
                if got is None:
                    retry += group
                else:
                    out.update(got)
            todo = retry
        for k in todo:  # never seen: a bracket that kept failing verification
            lo, hi, _, _ = self._bracket(k)
            out[k] = _shortest_in(lo, hi)
            self.notes.append("a slope rank could not be verified; value from its bracket")
        return [out[k] for k in ks]


def _slope_oracle(x: np.ndarray, y: np.ndarray, method: str):
    if method == "direct" or (method == "auto" and x.size <= PB_DIRECT_MAX_N):
        return _DirectSlopes(x, y)
    return _FastSlopes(x, y)


# -------------------------------------------------------------------------- Passing-Bablok


@dataclass(frozen=True)
class _PBFit:
    slope: float
    intercept: float
    slope_ci: tuple[float, float] | None
    intercept_ci: tuple[float, float] | None
    reason: str  # why slope/intercept are not estimable ("" if they are)
    ci_reason: str
    notes: tuple[str, ...]


def _pb_fit(
    x: np.ndarray, y: np.ndarray, confidence_level: float | None, method: str = "auto"
) -> _PBFit:
    """Passing-Bablok slope, intercept and (if confidence_level) the rank-based intervals."""
    n = x.size
    if n < 3:
        return _PBFit(math.nan, math.nan, None, None, f"fewer than 3 pairs (n={n})", "", ())
    if np.all(x == x[0]):
        return _PBFit(math.nan, math.nan, None, None, "all reference values identical", "", ())
    oracle = _slope_oracle(x, y, method)
    k_finite, n_minus_one = oracle.minus_one_counts()
    v_minus, v_plus, n_fin = oracle.v_minus, oracle.v_plus, oracle.n_finite
    shift = v_minus + k_finite  # K: slopes below -1, -inf included
    big_n = n_fin - n_minus_one + v_minus + v_plus  # N: slopes used (S = -1 and 0/0 dropped)
    if big_n == 0:
        return _PBFit(
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
        return _PBFit(math.nan, math.nan, None, None, reason, "", ())
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
        return _PBFit(math.nan, math.nan, None, None, "the median slope is vertical", "", notes)
    intercept = float(np.median(y - slope * x))
    slope_ci = intercept_ci = None
    if ci_ranks:
        lo, hi = values[len(mid) :]
        slope_ci = (lo, hi)
        if math.isfinite(lo) and math.isfinite(hi):
            intercept_ci = (float(np.median(y - hi * x)), float(np.median(y - lo * x)))
        else:
            ci_reason = "a slope limit is infinite, so the intercept limits are undefined"
    return _PBFit(slope, intercept, slope_ci, intercept_ci, "", ci_reason, notes)


def passing_bablok(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    confidence_level: float = 0.95,
    subject: ArrayLike | None = None,
    n_boot: int = 0,
    seed: int | None = None,
    max_pair_resamples: int = PB_BOOTSTRAP_PAIR_BUDGET,
) -> MethodRegression:
    """Passing-Bablok regression of test (y) on reference (x).

    Slope b = shifted median of the pairwise slopes S_ij = (y_j - y_i) / (x_j - x_i),
    i < j: pairs of identical points are ignored, S_ij = -1 is discarded, a vertical pair
    (x_i = x_j) has S_ij = +inf or -inf by the sign of y_j - y_i in the order given; with N
    slopes, K of them below -1, b = S_((N+1)/2+K) (N odd) or the mean of S_(N/2+K) and
    S_(N/2+1+K). Intercept a = median(y_i - b x_i). Rank-based interval: C = z_(1-alpha/2)
    sqrt(n(n-1)(2n+5)/18), M1 = round((N - C)/2) (half up), M2 = N - M1 + 1, slope limits
    S_(M1+K), S_(M2+K); intercept limits median(y - b_U x), median(y - b_L x).

    Reference: Passing H, Bablok W. A new biometrical procedure for testing the equality of
    measurements from two different analytical methods. J Clin Chem Clin Biochem
    1983;21:709-720.

    Algorithm: up to ``PB_DIRECT_MAX_N`` pairs all slopes are sorted; above, the order
    statistics are found by selection without enumerating them: the number of slopes below t
    is an inversion count of y - t x in x order (O(n log n), numpy merge levels); counts at
    sample quantiles of random pair slopes, then at points from a monotone interpolation of
    the counts, narrow a bracket around each wanted rank until it holds at most about n/8
    slopes; those are enumerated (a window in the order of y - t x, or the discordant pairs
    of two such orders), the exact count below the bracket is recovered and the rank read off
    and verified (see ``_FastSlopes`` for the floating-point argument and for large clusters
    of tied slopes). Memory O(n); on a shared 2-core machine about 0.04 s at 1,700 pairs,
    1 s at 170,000 and 16 s at 1.7 million, slope and interval together.

    Intervals: by default the rank-based interval above, which treats pairs as independent.
    With ``n_boot > 0``: percentile interval of a bootstrap that resamples subjects with
    replacement (``subject``; without it every pair is its own cluster), numpy
    ``default_rng(seed)``. A cluster bootstrap refits the whole estimator B times; if
    n_pairs x n_boot exceeds ``max_pair_resamples`` only as many resamples as fit are run
    (the interval's ``method`` gives the B actually run and a note says so), and below
    ``PB_BOOTSTRAP_MIN_B`` resamples the analytic interval is returned with a note (with the
    default budget: B up to 1176 at 170,000 pairs; none at 1.7 million, where 117 would fit).
    Raise ``max_pair_resamples`` to run more, knowingly.

    Validated against: an independent O(n^2) computation with ties, vertical slopes and
    slopes of -1 (exact equality, also for the selection algorithm); the creatinine example
    of the R package mcr as printed by Wicklin (2022) (slope, intercept, lower slope and upper
    intercept limits; mcr's other two limits follow its own documented interpolated-rank
    rule, which the tests reproduce); and the invariants of an exact line, swapping x and y,
    and a common shift.
    """
    x, y = _paired_arrays(reference, test)
    codes = _check_common(confidence_level, n_boot, subject, x.size)
    if not isinstance(max_pair_resamples, int | np.integer) or max_pair_resamples < 0:
        raise ValueError(
            f"max_pair_resamples must be a non-negative integer, got {max_pair_resamples!r}"
        )
    cl = float(confidence_level)
    analytic = "rank-based (Passing & Bablok 1983), pairs treated as independent"
    analytic_a = "from the slope limits (Passing & Bablok 1983), pairs treated as independent"
    fit = _pb_fit(x, y, cl)
    n = int(x.size)
    if fit.reason:
        return _nan_result(_PB, n, _PB, fit.reason, cl, analytic)
    notes = list(fit.notes)
    if n_boot > 0 and n <= PB_WEIGHTED_MAX_N:
        slope_ci, int_ci = _bootstrap(x, y, codes, int(n_boot), seed, cl, weighted_pb=True)
        return MethodRegression(
            _PB, fit.slope, fit.intercept, slope_ci, int_ci, n, "; ".join(notes)
        )
    if n_boot > 0:
        b_fit = max(0, int(max_pair_resamples) // max(n, 1))
        b_run = min(int(n_boot), b_fit)
        if b_run >= PB_BOOTSTRAP_MIN_B or b_run == n_boot:
            if b_run < n_boot:
                notes.append(
                    f"bootstrap reduced from B={n_boot} to B={b_run}: {n} pairs x {n_boot} "
                    f"resamples exceeds the budget of {max_pair_resamples} pair fits"
                )
            slope_ci, int_ci = _bootstrap(x, y, codes, b_run, seed, cl, refit=_pb_point)
            return MethodRegression(
                _PB, fit.slope, fit.intercept, slope_ci, int_ci, n, "; ".join(notes)
            )
        budget = (
            f"more than {PB_WEIGHTED_MAX_N} pairs and no refit budget"
            if max_pair_resamples == 0
            else f"{n} pairs allow only B={b_run} resamples within the budget of "
            f"{max_pair_resamples} pair fits (minimum {PB_BOOTSTRAP_MIN_B})"
        )
        notes.append(
            f"cluster bootstrap not run ({budget}); the rank-based interval ignores the "
            "clustering of segments in subjects"
        )
    elif codes is not None:
        notes.append("rank-based interval ignores the clustering of segments in subjects")
    if fit.slope_ci is None:
        what = f"{_PB} slope interval"
        s_ci = ConfidenceInterval.not_estimable(fit.ci_reason, cl, analytic)
        warn_not_estimable(what, fit.ci_reason)
    else:
        s_ci = ConfidenceInterval(*fit.slope_ci, cl, analytic)
    if fit.intercept_ci is None:
        reason = fit.ci_reason or "slope interval not estimable"
        a_ci = ConfidenceInterval.not_estimable(reason, cl, analytic_a)
        if fit.slope_ci is not None:
            warn_not_estimable(f"{_PB} intercept interval", reason)
    else:
        a_ci = ConfidenceInterval(*fit.intercept_ci, cl, analytic_a)
    return MethodRegression(_PB, fit.slope, fit.intercept, s_ci, a_ci, n, "; ".join(notes))


def _pb_point(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    fit = _pb_fit(x, y, None)
    return fit.slope, fit.intercept


# ------------------------------------------------------------------------------- Deming


def _deming_slope(sxx, syy, sxy, ratio: float):
    """Closed-form Deming slope from (co)variances; arrays broadcast. NaN where sxy == 0.

    Root of sxy b^2 + (ratio sxx - syy) b - ratio sxy = 0 with the sign of sxy, written in
    the form that avoids cancellation (the two roots multiply to -ratio).
    """
    sxx, syy, sxy = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (sxx, syy, sxy)))
    d = syy - ratio * sxx
    root = np.sqrt(d * d + 4.0 * ratio * sxy * sxy)
    with np.errstate(divide="ignore", invalid="ignore"):
        b = np.where(d >= 0, (d + root) / (2.0 * sxy), 2.0 * ratio * sxy / (root - d))
    return np.where(sxy == 0, np.nan, b)


def deming(
    reference: ArrayLike,
    test: ArrayLike,
    *,
    error_ratio: float = 1.0,
    confidence_level: float = 0.95,
    subject: ArrayLike | None = None,
    n_boot: int = 0,
    seed: int | None = None,
    resample_counts: ResampleCounts | None = None,
) -> MethodRegression:
    """Deming regression of test (y) on reference (x) with a known error-variance ratio.

    Model x_i = X_i + d_i, y_i = a + b X_i + e_i; ``error_ratio`` = var(e) / var(d), the
    variance of the test method's error over that of the reference method's error (some
    software uses the reciprocal). Default 1: orthogonal regression. Closed form:
    b = [s_yy - r s_xx + sqrt((s_yy - r s_xx)^2 + 4 r s_xy^2)] / (2 s_xy), a = ybar - b xbar.
    As r -> infinity (all error in y) b tends to the OLS slope of y on x, s_xy / s_xx; as
    r -> 0 (all error in x) to the inverse of the OLS slope of x on y, s_yy / s_xy.

    Interval: by default jackknife (leave one pair out, closed-form updates, O(n)) standard
    errors with a t quantile on n - 2 degrees of freedom (Linnet K. Estimation of the linear
    relationship between the measurements of two methods with proportional errors. Stat Med
    1990;9:1463-1473; Linnet K. Evaluation of regression procedures for methods comparison
    studies. Clin Chem 1993;39:424-432; bibliographic details from memory; the n - 2 df are
    our choice), pairs treated as independent. With ``n_boot > 0``:
    subject-cluster bootstrap percentile interval, numpy ``default_rng(seed)``, computed from
    per-subject sums. ``resample_counts`` (:class:`cohort.stats.bootstrap.ResampleCounts` of the
    same ``n_boot`` and ``seed``) reuses subject counts drawn for other statistics: they
    are the very resamples this function would draw, so the interval is the same.

    Reference: Deming WE. Statistical adjustment of data. Wiley, 1943.

    Validated against: an independent closed-form computation and a leave-one-out loop, the
    first principal component (numpy SVD) after scaling y by 1/sqrt(error_ratio), scipy.odr
    while it still imports, and the two OLS limits (tests).
    """
    x, y = _paired_arrays(reference, test)
    codes = _check_common(confidence_level, n_boot, subject, x.size)
    if not (isinstance(error_ratio, int | float) and 0.0 < error_ratio < math.inf):
        raise ValueError(f"error_ratio must be positive and finite, got {error_ratio!r}")
    ratio = float(error_ratio)
    cl = float(confidence_level)
    n = int(x.size)
    jack = "jackknife SE (Linnet 1990), t on n-2 df, pairs treated as independent"
    if n < 3:
        return _nan_result(_DEMING, n, _DEMING, f"fewer than 3 pairs (n={n})", cl, jack)
    if np.all(x == x[0]):
        return _nan_result(_DEMING, n, _DEMING, "all reference values identical", cl, jack)
    xbar, ybar = x.mean(), y.mean()
    dx, dy = x - xbar, y - ybar
    sxx, syy, sxy = float(dx @ dx), float(dy @ dy), float(dx @ dy)
    if sxy == 0.0:
        reason = "zero covariance between the methods, so the slope is undetermined"
        return _nan_result(_DEMING, n, _DEMING, reason, cl, jack)
    slope = float(_deming_slope(sxx, syy, sxy, ratio))
    intercept = float(ybar - slope * xbar)
    note = ""
    if n_boot > 0:
        shared = None
        if (
            resample_counts is not None
            and seed is not None
            and (resample_counts.n_boot, resample_counts.seed) == (int(n_boot), seed)
            and np.array_equal(codes, np.asarray(subject))
        ):  # subjects numbered 0..k-1 in order, as the shared counts number them
            shared = resample_counts
        s_ci, a_ci = _bootstrap(
            x, y, codes, int(n_boot), seed, cl, deming_ratio=ratio, shared_counts=shared
        )
        return MethodRegression(_DEMING, slope, intercept, s_ci, a_ci, n, note)
    if codes is not None:
        note = "jackknife interval ignores the clustering of segments in subjects"
    # leave-one-out sums: S_(i) = S - n/(n-1) d_i d_i, means shift by -d_i/(n-1)
    f = n / (n - 1.0)
    b_i = _deming_slope(sxx - f * dx * dx, syy - f * dy * dy, sxy - f * dx * dy, ratio)
    a_i = (ybar - dy / (n - 1.0)) - b_i * (xbar - dx / (n - 1.0))
    tq = stats.t.ppf(0.5 + cl / 2.0, n - 2)
    cis = []
    for est, loo, what in ((slope, b_i, "slope"), (intercept, a_i, "intercept")):
        if not np.all(np.isfinite(loo)):
            reason = "a leave-one-out slope is undefined (zero covariance without one pair)"
            warn_not_estimable(f"{_DEMING} {what} interval", reason)
            cis.append(ConfidenceInterval.not_estimable(reason, cl, jack))
            continue
        se = math.sqrt((n - 1.0) / n * float(np.sum((loo - loo.mean()) ** 2)))
        cis.append(ConfidenceInterval(est - tq * se, est + tq * se, cl, jack))
    return MethodRegression(_DEMING, slope, intercept, cis[0], cis[1], n, note)


# ---------------------------------------------------------------------------- bootstrap


def _pb_weighted_draws(
    x: np.ndarray, y: np.ndarray, codes: np.ndarray, counts: np.ndarray
) -> np.ndarray:
    """Passing-Bablok (slope, intercept) of each resample given its subject counts.

    The slopes are enumerated and sorted once; in a resample where subject s is drawn c_s
    times, the slope between a point of s and a point of t occurs c_s c_t times (c_s^2
    within s; copies of one point are identical and ignored, as in the procedure), so the
    shifted median is a weighted order statistic and the intercept a weighted median of
    y - b x. The weight of a block of sorted slopes is a quadratic form c^T M c (M the number
    of its slopes per subject pair: one matrix product for all resamples); per-slope weights
    c_s c_t are formed only in the block that holds a rank. Cost O(n^2 log n) once, then
    about O(B k^2 sqrt(w) / k + B sqrt(w) k) for k subjects and a window of w slopes around
    the resamples' medians. Equal to refitting the expanded resample (tests/test_regression.py),
    except that the sign of a vertical slope follows the original order of the pair.
    """
    i, j = np.triu_indices(x.size, 1)
    dx, dy = x[j] - x[i], y[j] - y[i]
    keep = (dx != 0) | (dy != 0)
    i, j, dx, dy = i[keep], j[keep], dx[keep], dy[keep]
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.where(dx != 0, dy / dx, np.where(dy > 0, np.inf, -np.inf)) + 0.0
    keep = slope != -1.0
    slope, ci, cj = slope[keep], codes[i[keep]], codes[j[keep]]
    del i, j, dx, dy, keep
    order = np.argsort(slope)  # the order among equal slopes does not change their value
    slope = slope[order]
    lo_c, hi_c = np.minimum(ci, cj)[order], np.maximum(ci, cj)[order]
    del ci, cj, order
    n_clusters = counts.shape[1]
    n_slopes = slope.size
    n_below = int(np.searchsorted(slope, -1.0, side="left"))
    c_all = counts.astype(float)
    n_boot = counts.shape[0]
    # Every weight and sum here is a whole number below 2^53, so any grouping and order of
    # summation gives the same floats exactly.

    def block_weight(rows, a: int, b: int) -> np.ndarray:
        """Weight of the slopes [a, b) in the resamples ``rows``: c^T M c with M[s, t] the
        number of those slopes between subjects s <= t (one matrix product, O(rows k^2))."""
        cells = lo_c[a:b].astype(np.int64) * n_clusters + hi_c[a:b]
        mat = np.bincount(cells, minlength=n_clusters * n_clusters).astype(float)
        c = c_all[rows]
        return np.einsum("bi,bi->b", c @ mat.reshape(n_clusters, n_clusters), c)

    def edge_weights(rows, edges: Sequence[int]) -> np.ndarray:
        """Weight of the slopes before each of the ``edges`` (rows x edges)."""
        # the weight before the first edge; none before slope 0 (no k x k product for it)
        parts = [block_weight(rows, 0, edges[0]) if edges[0] else np.zeros(len(c_all[rows]))]
        parts += [block_weight(rows, a, b) for a, b in itertools.pairwise(edges)]
        return np.cumsum(np.stack(parts, axis=1), axis=1)

    def position(k: int, rank: float, edges: Sequence[int], before: np.ndarray) -> int:
        """Position of the slope of ``rank`` in resample k, given the weights ``before`` the
        ``edges``, or -1 when it is not between the first and the last edge."""
        j = int(np.searchsorted(before, rank, side="left")) - 1
        if j < 0 or j >= len(edges) - 1:
            return -1
        a, b = edges[j], edges[j + 1]
        cum = before[j] + np.cumsum(c_all[k, lo_c[a:b]] * c_all[k, hi_c[a:b]])
        return a + int(np.searchsorted(cum, rank, side="left"))

    def locate(rows: np.ndarray, edges: Sequence[int]) -> np.ndarray:
        """Positions of the slopes of ranks r1 and r2 in ``rows`` (rows x 2, -1 outside)."""
        before = edge_weights(rows, edges)
        return np.array(
            [
                [position(k, r, edges, w) for r in (r1[k], r2[k])]
                for k, w in zip(rows.tolist(), before, strict=True)
            ],
            dtype=np.int64,
        ).reshape(-1, 2)

    def coarse(rows: np.ndarray) -> np.ndarray:
        edges = np.unique(np.linspace(0, n_slopes, _PB_COARSE_BLOCKS + 1).astype(int))
        return locate(rows, edges.tolist())

    total = block_weight(slice(None), 0, n_slopes)
    below = block_weight(slice(None), 0, n_below)
    odd = total % 2 == 1
    r1 = np.where(odd, (total + 1) // 2, total // 2) + below
    r2 = np.where(odd, r1, r1 + 1)
    pw = counts[:, codes]
    m = pw.sum(axis=1)
    drawn = pw > 0
    x_span = np.where(drawn, x[None, :], -np.inf).max(axis=1) - np.where(
        drawn, x[None, :], np.inf
    ).min(axis=1)
    ok = (total > 0) & (r2 <= total) & (m >= 3) & (x_span > 0)

    # The shifted medians of the resamples lie in a narrow band of the sorted slopes, found
    # from the first resamples (located through coarse blocks of all slopes). The others are
    # located through fine blocks of that window: block weights are quadratic forms, so only
    # the slopes of the one block holding a rank are weighted one by one. Fine blocks balance
    # B k^2 per block against B x block size (sqrt(c w) / k blocks, c = _PB_FINE_FACTOR). A
    # resample whose ranks fall outside the window is located through coarse blocks, so the
    # result does not depend on the window.
    usable = np.flatnonzero(ok)
    found = np.full((n_boot, 2), -1, dtype=np.int64)
    pilot, rest = usable[:_PB_WINDOW_PILOT], usable[_PB_WINDOW_PILOT:]
    if pilot.size:
        found[pilot] = coarse(pilot)
    if rest.size:
        first, last = int(found[pilot, 0].min()), int(found[pilot, 1].max())
        pad = max(_PB_WINDOW_MIN_PAD, (last - first) // 2)
        lo, hi = max(0, first - pad), min(n_slopes, last + 1 + pad)
        n_fine = max(1, min(256, round(math.sqrt(_PB_FINE_FACTOR * (hi - lo)) / n_clusters)))
        edges = np.unique(np.linspace(lo, hi, n_fine + 1).astype(int)).tolist()
        found[rest] = locate(rest, edges)
        outside = rest[(found[rest] < 0).any(axis=1)]
        if outside.size:
            found[outside] = coarse(outside)
    b = np.full(n_boot, np.nan)
    b[usable] = 0.5 * (slope[found[usable, 0]] + slope[found[usable, 1]])
    ok &= np.isfinite(b)
    out = np.full((n_boot, 2), np.nan)
    chunk = max(1, 2_000_000 // max(x.size, 1))
    for begin in range(0, n_boot, chunk):
        rows = slice(begin, begin + chunk)
        v = y[None, :] - np.where(ok[rows], b[rows], 0.0)[:, None] * x[None, :]
        vo = np.argsort(v, axis=1, kind="stable")
        vs = np.take_along_axis(v, vo, axis=1)
        cw = np.cumsum(np.take_along_axis(pw[rows], vo, axis=1), axis=1)
        mm = cw[:, -1]
        lo_rank = np.where(mm % 2 == 1, (mm + 1) // 2, mm // 2)
        hi_rank = np.where(mm % 2 == 1, lo_rank, lo_rank + 1)
        a_lo = np.take_along_axis(vs, (cw < lo_rank[:, None]).sum(axis=1)[:, None], axis=1)[:, 0]
        a_hi = np.take_along_axis(vs, (cw < hi_rank[:, None]).sum(axis=1)[:, None], axis=1)[:, 0]
        out[rows, 0] = np.where(ok[rows], b[rows], np.nan)
        out[rows, 1] = np.where(ok[rows], 0.5 * (a_lo + a_hi), np.nan)
    return out


def _bootstrap(
    x: np.ndarray,
    y: np.ndarray,
    codes: np.ndarray | None,
    n_boot: int,
    seed: int | None,
    cl: float,
    *,
    refit=None,
    deming_ratio: float | None = None,
    weighted_pb: bool = False,
    shared_counts: ResampleCounts | None = None,
) -> tuple[ConfidenceInterval, ConfidenceInterval]:
    """Cluster bootstrap percentile intervals for (slope, intercept).

    Each resample draws as many clusters as there are, with replacement
    (``rng.integers(0, n_clusters, n_clusters)``), and refits ``refit`` on all their pairs
    (Deming: from per-cluster sums, the same numbers). Percentiles by ``numpy.quantile``
    (linear interpolation); non-estimable resamples are left out and counted in the note.
    """
    if seed is None:
        seed = int(np.random.SeedSequence().entropy)  # recorded, so the run can be repeated
    if codes is None:
        codes = np.arange(x.size)
        kind = "pair bootstrap (no subject given)"
    else:
        kind = "subject cluster bootstrap"
    method = f"{kind}, percentile, B={n_boot}, seed={seed}"
    n_clusters = int(codes.max()) + 1
    if n_clusters < 2:
        reason = "fewer than 2 subjects for the cluster bootstrap"
        warn_not_estimable("bootstrap interval", reason, stacklevel=3)
        ci = ConfidenceInterval.not_estimable(reason, cl, method)
        return ci, ci
    rng = np.random.default_rng(seed)
    boot = np.empty((n_boot, 2))
    if deming_ratio is not None:
        # Deming from per-cluster sums of centred values: O(clusters) per resample
        xc, yc = x - x.mean(), y - y.mean()
        sums = np.stack(
            [
                np.bincount(codes, weights=w, minlength=n_clusters)
                for w in (np.ones_like(xc), xc, yc, xc * xc, yc * yc, xc * yc)
            ],
            axis=1,
        )
        if shared_counts is not None:
            draws = shared_counts.rows(n_clusters)  # the same draws as below, made once
        else:
            draws = (
                np.bincount(rng.integers(0, n_clusters, n_clusters), minlength=n_clusters)
                for _ in range(n_boot)
            )
        totals = np.empty((n_boot, 6))
        for b, counts in enumerate(draws):
            totals[b] = counts @ sums  # one product per resample, as the sums were validated
        m, sx, sy, sxx, syy, sxy = totals.T
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = _deming_slope(
                sxx - sx * sx / m, syy - sy * sy / m, sxy - sx * sy / m, deming_ratio
            )
            boot[:, 0] = slope
            boot[:, 1] = (y.mean() + sy / m) - slope * (x.mean() + sx / m)
    elif weighted_pb:
        draws = np.stack(
            [np.bincount(rng.integers(0, n_clusters, n_clusters), minlength=n_clusters)
             for _ in range(n_boot)]
        )  # fmt: skip
        boot[:] = _pb_weighted_draws(x, y, codes, draws)
    else:
        order = np.argsort(codes, kind="stable")
        size = np.bincount(codes, minlength=n_clusters)
        start = np.cumsum(size) - size
        for b in range(n_boot):
            draw = rng.integers(0, n_clusters, n_clusters)
            idx = order[_ragged_ranges(start[draw], size[draw])]
            boot[b] = refit(x[idx], y[idx])
    ok = np.all(np.isfinite(boot), axis=1)
    n_bad = int(n_boot - ok.sum())
    note = f"{n_bad} of {n_boot} resamples not estimable and left out" if n_bad else ""
    if ok.sum() < 2:
        reason = f"only {int(ok.sum())} estimable resamples"
        warn_not_estimable("bootstrap interval", reason, stacklevel=3)
        ci = ConfidenceInterval.not_estimable(reason, cl, method)
        return ci, ci
    alpha = 1.0 - cl
    lo, hi = np.quantile(boot[ok], [alpha / 2.0, 1.0 - alpha / 2.0], axis=0)
    return (
        ConfidenceInterval(float(lo[0]), float(hi[0]), cl, method, note),
        ConfidenceInterval(float(lo[1]), float(hi[1]), cl, method, note),
    )
