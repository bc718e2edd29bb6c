"""The Passing-Bablok cluster bootstrap by weighted slopes: enumerate once, weight per resample.

In a resample where subject s is drawn c_s times, the slope between a point of s and a point
of t occurs c_s c_t times (c_s^2 within s; copies of one point are identical and ignored, as
in the procedure), so each resample's shifted median is a weighted order statistic of the
slopes sorted once, and its intercept a weighted median of y - b x. Equal to refitting each
expanded resample (tests/stats/test_pb_bootstrap.py), at a fraction of the cost (about 1 s for
B = 2000 at 800 pairs, benchmarks/regression_speed.py).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence

import numpy as np

#: Resamples located through coarse blocks of all slopes to place the window of slopes the
#: others are located in; the least padding of that window either side; the number of coarse
#: blocks; and c in sqrt(c w) / k, the number of fine blocks of a window of w slopes with k
#: subjects (c = 400 was the fastest of 40, 400, 4,000 and 40,000 on six cohort shapes,
#: benchmarks/regression_speed.py; the result does not depend on any of these).
_PB_WINDOW_PILOT = 32
_PB_WINDOW_MIN_PAD = 1024
_PB_COARSE_BLOCKS = 16
_PB_FINE_FACTOR = 400


class WeightedSlopes:
    """The sorted pairwise slopes (S = -1 and identical points dropped) with the subjects of
    their two points, and their weights in resamples given by subject ``counts``.

    The weight of a block of sorted slopes is a quadratic form c^T M c (M the number of its
    slopes per subject pair: one matrix product for all resamples); per-slope weights
    c_s c_t are formed only in the block that holds a rank. Every weight and sum here is a
    whole number below 2^53, so any grouping and order of summation gives the same floats.
    ``r1`` and ``r2`` are each resample's ranks of the shifted median (equal when odd).
    """

    def __init__(self, x: np.ndarray, y: np.ndarray, codes: np.ndarray, counts: np.ndarray):
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
        self.slope = slope[order]
        self.lo_c, self.hi_c = np.minimum(ci, cj)[order], np.maximum(ci, cj)[order]
        del ci, cj, order
        self.n_clusters = counts.shape[1]
        self.n_slopes = self.slope.size
        self.c_all = counts.astype(float)
        n_below = int(np.searchsorted(self.slope, -1.0, side="left"))
        self.total = self.block_weight(slice(None), 0, self.n_slopes)
        below = self.block_weight(slice(None), 0, n_below)
        odd = self.total % 2 == 1
        self.r1 = np.where(odd, (self.total + 1) // 2, self.total // 2) + below
        self.r2 = np.where(odd, self.r1, self.r1 + 1)

    def block_weight(self, rows, a: int, b: int) -> np.ndarray:
        """Weight of the slopes [a, b) in the resamples ``rows``: c^T M c with M[s, t] the
        number of those slopes between subjects s <= t (one matrix product, O(rows k^2))."""
        k = self.n_clusters
        cells = self.lo_c[a:b].astype(np.int64) * k + self.hi_c[a:b]
        mat = np.bincount(cells, minlength=k * k).astype(float)
        c = self.c_all[rows]
        return np.einsum("bi,bi->b", c @ mat.reshape(k, k), c)

    def edge_weights(self, rows, edges: Sequence[int]) -> np.ndarray:
        """Weight of the slopes before each of the ``edges`` (rows x edges)."""
        # the weight before the first edge; none before slope 0 (no k x k product for it)
        first = edges[0]
        parts = [self.block_weight(rows, 0, first) if first else np.zeros(len(self.c_all[rows]))]
        parts += [self.block_weight(rows, a, b) for a, b in itertools.pairwise(edges)]
        return np.cumsum(np.stack(parts, axis=1), axis=1)

    def position(self, k: int, rank: float, edges: Sequence[int], before: np.ndarray) -> int:
        """Position of the slope of ``rank`` in resample k, given the weights ``before`` the
        ``edges``, or -1 when it is not between the first and the last edge."""
        j = int(np.searchsorted(before, rank, side="left")) - 1
        if j < 0 or j >= len(edges) - 1:
            return -1
        a, b = edges[j], edges[j + 1]
        c = self.c_all[k]
        cum = before[j] + np.cumsum(c[self.lo_c[a:b]] * c[self.hi_c[a:b]])
        return a + int(np.searchsorted(cum, rank, side="left"))

    def locate(self, rows: np.ndarray, edges: Sequence[int]) -> np.ndarray:
        """Positions of the slopes of ranks r1 and r2 in ``rows`` (rows x 2, -1 outside)."""
        before = self.edge_weights(rows, edges)
        return np.array(
            [
                [self.position(k, r, edges, w) for r in (self.r1[k], self.r2[k])]
                for k, w in zip(rows.tolist(), before, strict=True)
            ],
            dtype=np.int64,
        ).reshape(-1, 2)

    def coarse(self, rows: np.ndarray) -> np.ndarray:
        """:meth:`locate` through coarse blocks of all slopes."""
        edges = np.unique(np.linspace(0, self.n_slopes, _PB_COARSE_BLOCKS + 1).astype(int))
        return self.locate(rows, edges.tolist())

    def median_positions(self, usable: np.ndarray, n_boot: int) -> np.ndarray:
        """Positions of the two median slopes of the ``usable`` resamples (n_boot x 2).

        The shifted medians of the resamples lie in a narrow band of the sorted slopes, found
        from the first resamples (located through coarse blocks of all slopes). The others
        are located through fine blocks of that window: block weights are quadratic forms, so
        only the slopes of the one block holding a rank are weighted one by one. Fine blocks
        balance B k^2 per block against B x block size (sqrt(c w) / k blocks,
        c = _PB_FINE_FACTOR). A resample whose ranks fall outside the window is located
        through coarse blocks, so the result does not depend on the window.
        """
        found = np.full((n_boot, 2), -1, dtype=np.int64)
        pilot, rest = usable[:_PB_WINDOW_PILOT], usable[_PB_WINDOW_PILOT:]
        if pilot.size:
            found[pilot] = self.coarse(pilot)
        if rest.size:
            first, last = int(found[pilot, 0].min()), int(found[pilot, 1].max())
            pad = max(_PB_WINDOW_MIN_PAD, (last - first) // 2)
            lo, hi = max(0, first - pad), min(self.n_slopes, last + 1 + pad)
            n_fine = round(math.sqrt(_PB_FINE_FACTOR * (hi - lo)) / self.n_clusters)
            n_fine = max(1, min(256, n_fine))
            edges = np.unique(np.linspace(lo, hi, n_fine + 1).astype(int)).tolist()
            found[rest] = self.locate(rest, edges)
            outside = rest[(found[rest] < 0).any(axis=1)]
            if outside.size:
                found[outside] = self.coarse(outside)
        return found


def _weighted_intercepts(
    x: np.ndarray, y: np.ndarray, pw: np.ndarray, b: np.ndarray, ok: np.ndarray
) -> np.ndarray:
    """(slope, intercept) of each resample: the intercept is the median of y - b x with each
    pair weighted by its subject's count ``pw``; NaN where not ``ok``."""
    n_boot = b.size
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


def pb_weighted_draws(
    x: np.ndarray, y: np.ndarray, codes: np.ndarray, counts: np.ndarray
) -> np.ndarray:
    """Passing-Bablok (slope, intercept) of each resample given its subject counts.

    See the module docstring and :class:`WeightedSlopes`. Cost O(n^2 log n) once, then
    about O(B k^2 sqrt(w) / k + B sqrt(w) k) for k subjects and a window of w slopes around
    the resamples' medians. Equal to refitting the expanded resample
    (tests/stats/test_pb_bootstrap.py), except that the sign of a vertical slope follows the
    original order of the pair.
    """
    weights = WeightedSlopes(x, y, codes, counts)
    n_boot = counts.shape[0]
    pw = counts[:, codes]
    m = pw.sum(axis=1)
    drawn = pw > 0
    x_span = np.where(drawn, x[None, :], -np.inf).max(axis=1) - np.where(
        drawn, x[None, :], np.inf
    ).min(axis=1)
    total, r2 = weights.total, weights.r2
    ok = (total > 0) & (r2 <= total) & (m >= 3) & (x_span > 0)
    usable = np.flatnonzero(ok)
    found = weights.median_positions(usable, n_boot)
    b = np.full(n_boot, np.nan)
    b[usable] = 0.5 * (weights.slope[found[usable, 0]] + weights.slope[found[usable, 1]])
    ok &= np.isfinite(b)
    return _weighted_intercepts(x, y, pw, b, ok)
