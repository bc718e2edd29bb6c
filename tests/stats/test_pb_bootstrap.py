"""The Passing-Bablok machinery: inversion counts and the weighted-slope cluster bootstrap.

Checked against their definitions (brute-force counts) and against refitting each resample
(cohort.stats._inversions, cohort.stats._pb_bootstrap).
"""

from __future__ import annotations

import numpy as np
import pytest

from cohort.stats import _inversions, _pb_bootstrap
from cohort.stats.regression import passing_bablok

# ----------------------------------------------------------------- primitives of the algorithm


@pytest.mark.parametrize("n", [0, 1, 2, 15, 16, 17, 100, 1025])
def test_inversion_count_and_pairs_equal_the_definition(n):
    # the definition: pairs p < q with r[p] > r[q]; ties (common with ranks) are not counted
    rng = np.random.default_rng(n)
    r = rng.integers(0, 9, n).astype(np.int32)
    expected = {(p, q) for p in range(n) for q in range(p + 1, n) if r[p] > r[q]}
    assert _inversions.count_inversions(r) == len(expected)
    assert _inversions.merge_inversions(r) == len(expected)  # the fallback without scipy's
    # negative and widely spread values (the compiled count shifts and compresses them)
    assert _inversions.count_inversions(r.astype(np.int64) * 10**6 - 5) == len(expected)
    p, q = _inversions.inversion_pairs(r, cap=10**9)
    assert len(p) == len(expected) and set(zip(p.tolist(), q.tolist(), strict=True)) == expected
    if len(expected) > 1:
        assert _inversions.inversion_pairs(r, cap=len(expected) - 1) is None


def test_weighted_slope_bootstrap_equals_refitting_each_resample():
    # the weighted-slope cluster bootstrap must give the Passing-Bablok fit (Passing & Bablok
    # 1983) of each expanded resample, ties and not-estimable resamples included
    from cohort.stats._inversions import ragged_ranges as _ragged_ranges
    from cohort.stats._pb_bootstrap import pb_weighted_draws as _pb_weighted_draws
    from cohort.stats._pb_fit import pb_point as _pb_point

    rng = np.random.default_rng(3)
    for trial in range(60):
        n_subj, per = int(rng.integers(2, 8)), int(rng.integers(1, 6))
        codes = np.repeat(np.arange(n_subj), per)
        x = np.round(rng.normal(10, 3, codes.size), 0 if trial % 2 else 1)
        y = np.round(0.5 + 1.1 * x + rng.normal(0, 1, codes.size), 1)
        counts = np.stack(
            [np.bincount(rng.integers(0, n_subj, n_subj), minlength=n_subj) for _ in range(4)]
        )
        got = _pb_weighted_draws(x, y, codes, counts)
        order = np.argsort(codes, kind="stable")
        size = np.bincount(codes, minlength=n_subj)
        start = np.cumsum(size) - size
        for k, c in enumerate(counts):
            draw = np.repeat(np.arange(n_subj), c)
            idx = order[_ragged_ranges(start[draw], size[draw])]
            np.testing.assert_allclose(got[k], _pb_point(x[idx], y[idx]), equal_nan=True)


def test_weighted_slope_bootstrap_blocks_and_window_give_the_same_numbers(monkeypatch):
    # the window of slopes placed from the first resamples, its blocks, and the resamples
    # located through coarse blocks when they fall outside it add the same whole numbers, so
    # the draws must be identical to locating every resample through coarse blocks
    from cohort.stats._pb_bootstrap import pb_weighted_draws as _pb_weighted_draws

    rng = np.random.default_rng(11)
    n_subj = 150  # 600 points: 179,700 slopes
    codes = np.repeat(np.arange(n_subj), 4)
    x = np.round(rng.normal(20, 4, codes.size), 1)
    y = np.round(1.0 + 0.9 * x + rng.normal(0, 1.5, codes.size), 1)
    counts = np.stack(
        [np.bincount(rng.integers(0, n_subj, n_subj), minlength=n_subj) for _ in range(25)]
    )
    monkeypatch.setattr(_pb_bootstrap, "_PB_WINDOW_PILOT", 25)  # every resample, coarse blocks
    coarse = _pb_weighted_draws(x, y, codes, counts)
    monkeypatch.setattr(_pb_bootstrap, "_PB_COARSE_BLOCKS", 1)  # one block: slope by slope
    np.testing.assert_array_equal(_pb_weighted_draws(x, y, codes, counts), coarse)
    monkeypatch.setattr(_pb_bootstrap, "_PB_COARSE_BLOCKS", 16)
    monkeypatch.setattr(_pb_bootstrap, "_PB_WINDOW_PILOT", 4)
    np.testing.assert_array_equal(_pb_weighted_draws(x, y, codes, counts), coarse)
    # a window placed from one resample with little padding leaves others outside it
    monkeypatch.setattr(_pb_bootstrap, "_PB_WINDOW_PILOT", 1)
    monkeypatch.setattr(_pb_bootstrap, "_PB_WINDOW_MIN_PAD", 1)
    coarse_calls = []
    linspace = np.linspace

    def spy(start, stop, num, *args, **kwargs):
        if start == 0 and num == _pb_bootstrap._PB_COARSE_BLOCKS + 1:
            coarse_calls.append(stop)
        return linspace(start, stop, num, *args, **kwargs)

    monkeypatch.setattr(np, "linspace", spy)
    np.testing.assert_array_equal(_pb_weighted_draws(x, y, codes, counts), coarse)
    assert len(coarse_calls) == 2  # the pilot, then the resamples outside the window
    assert np.isfinite(coarse).all()


def test_passing_bablok_cluster_interval_above_the_weighted_limit_says_why():
    from cohort.stats.regression import PB_WEIGHTED_MAX_N

    rng = np.random.default_rng(0)
    n = PB_WEIGHTED_MAX_N + 10
    x = rng.normal(30, 8, n)
    y = x + rng.normal(0, 2, n)
    fit = passing_bablok(x, y, subject=np.arange(n) // 17, n_boot=50, seed=1, max_pair_resamples=0)
    assert "rank-based" in fit.slope.ci.method
    assert "cluster bootstrap not run" in fit.note
