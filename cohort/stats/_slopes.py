"""Order statistics of the pairwise slopes of n points, with or without enumerating them.

:class:`DirectSlopes` sorts all n(n-1)/2 slopes (O(n^2)); :class:`FastSlopes` selects the
wanted ranks by inversion counts (:mod:`cohort.stats._inversions`) in O(n) memory, exactly
(see its docstring). Both serve the Passing-Bablok fit (:mod:`cohort.stats._pb_fit`).

Selection: the number of slopes below t is an inversion count of y - t x in x order
(O(n log n)); counts at sample quantiles of random pair slopes, then at points from a
monotone interpolation of the counts, narrow a bracket around each wanted rank until it
holds at most about n/8 slopes; those are enumerated (a window in the order of y - t x, or
the discordant pairs of two such orders), the exact count below the bracket is recovered and
the rank read off and verified (see :class:`FastSlopes` for the floating-point argument and
for large clusters of tied slopes).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence

import numpy as np
from scipy import interpolate

from cohort.stats._inversions import (
    count_inversions,
    dense_ranks,
    inversion_pairs,
    ragged_ranges,
)

_U = 2.0**-53  # unit roundoff of float64


def shortest_in(lo: float, hi: float) -> float:
    """A float in [lo, hi] with few significant digits (1.0 rather than 0.9999999999999998)."""
    mid = 0.5 * (lo + hi)
    for digits in range(1, 18):
        cand = float(f"{mid:.{digits}g}")
        if lo <= cand <= hi:
            return cand
    return mid


# ----------------------------------------------------------------------- slope order statistics


class DirectSlopes:
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


class FastSlopes:
    """Order statistics of the finite pairwise slopes without enumerating the pairs.

    Rank of a value t: sort the points by x; pair i < j (x_i < x_j) has S_ij < t exactly when
    v_j < v_i for v = y - t x, so #(S < t) is the number of inversions of v in x order
    (:func:`count_inversions`, O(n log n)). Within a group of equal x the points are sorted by
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
            order = np.argsort(rank_x * n + dense_ranks(y))
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
            self.v_minus = count_inversions(rank_xy[np.argsort(x, kind="stable")])
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
            j = ragged_ranges(first_right, c)
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
            self._cu[t] = count_inversions(dense_ranks(v))
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
                q = ragged_ranges(np.arange(p0 + 1, p1 + 1), cc)
                parts.append(self._keep(order[p], order[q], s_lo, s_hi))
                size += parts[-1][0].size
                if size > self.cap:
                    return None
        else:
            d = 2.0 * self.delta(max(abs(a), abs(b)) + 1.0)
            ra = dense_ranks(self._v_unique(a - d)).astype(np.int64)
            rb = dense_ranks(self._v_unique(b + d))
            order = np.argsort(ra * nu + rb, kind="stable")
            pairs = inversion_pairs(rb[order], 2 * self.cap)
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
            return shortest_in(tl, tr)
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
            return {k: shortest_in(lo, hi) for k in group}
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
            out[k] = shortest_in(lo, hi)
            self.notes.append("a slope rank could not be verified; value from its bracket")
        return [out[k] for k in ks]
