"""Speed of Passing-Bablok (and Deming) on cohort-sized data; prints its figures.

Run: python benchmarks/regression_speed.py [--quick]

Data are invented cohorts of S subjects x 17 segments (a subject effect plus segment noise,
fat-fraction-like values in %), once as float64 exports and once rounded to 0.1 as
spreadsheet exports are (many tied slopes). Each figure is the median of a few runs, in one
process, on whatever machine runs it; the machine's load is printed alongside.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import numpy as np

from cohort.stats import _inversions, _pb_bootstrap, _pb_fit, regression


def cohort(n_subjects: int, decimals: int | None, seed: int = 1):
    rng = np.random.default_rng(seed)
    subject = np.repeat(np.arange(n_subjects), 17)
    truth = np.repeat(rng.gamma(2.0, 2.5, n_subjects), 17) + rng.normal(0, 1.0, 17 * n_subjects)
    x = truth + rng.normal(0, 0.5, truth.size)
    y = 0.3 + 0.95 * truth + rng.normal(0, 0.5, truth.size)
    if decimals is not None:
        x, y = np.round(x, decimals), np.round(y, decimals)
    return x + 0.0, y + 0.0, subject


def timed(fn, repeats: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="skip the 1.7M-pair runs")
    args = parser.parse_args()
    print(f"load average at start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    sizes = [100, 1_000, 10_000] + ([] if args.quick else [100_000])
    print("\nPassing-Bablok, point estimate + rank-based CI (median of runs, seconds)")
    print(f"{'pairs':>10} {'data':>8} {'runs':>4} {'selection':>10} {'direct':>8} {'ratio':>6}")
    for n_subjects in sizes:
        for decimals, label in ((None, "float"), (1, "0.1")):
            x, y, _ = cohort(n_subjects, decimals)
            n = x.size
            repeats = 5 if n <= 20_000 else 3
            t_fast, fast = timed(lambda x=x, y=y: _pb_fit.pb_fit(x, y, 0.95, "fast"), repeats)
            direct = ""
            ratio = ""
            if n <= 5_100:
                t_dir, slow = timed(lambda x=x, y=y: _pb_fit.pb_fit(x, y, 0.95, "direct"), 3)
                assert slow.slope == fast.slope and slow.slope_ci == fast.slope_ci
                direct, ratio = f"{t_dir:8.3f}", f"{t_dir / t_fast:6.1f}"
            print(f"{n:>10} {label:>8} {repeats:>4} {t_fast:10.3f} {direct:>8} {ratio:>6}")
    # the direct method at 300 subjects (5,100 pairs, 13 million slopes) for the O(n^2) trend
    x, y, _ = cohort(300, 1)
    t_dir, _ = timed(lambda: _pb_fit.pb_fit(x, y, 0.95, "direct"), 3)
    t_fast, _ = timed(lambda: _pb_fit.pb_fit(x, y, 0.95, "fast"), 3)
    print(f"{x.size:>10} {'0.1':>8} {3:>4} {t_fast:10.3f} {t_dir:8.3f} {t_dir / t_fast:6.1f}")

    print("\nOne subject-cluster bootstrap resample, 10,000 subjects x 17 = 170,000 pairs")
    for decimals, label in ((None, "float"), (1, "0.1")):
        x, y, subject = cohort(10_000, decimals)
        rng = np.random.default_rng(5)
        order = np.argsort(subject, kind="stable")
        size = np.bincount(subject)
        start = np.cumsum(size) - size
        resamples = []
        for _ in range(5):
            draw = rng.integers(0, size.size, size.size)
            resamples.append(order[_inversions.ragged_ranges(start[draw], size[draw])])
        times = []
        for idx in resamples:
            t0 = time.perf_counter()
            _pb_fit.pb_point(x[idx], y[idx])
            times.append(time.perf_counter() - t0)
        per = statistics.median(times)
        budget = regression.PB_BOOTSTRAP_PAIR_BUDGET
        b_fit = budget // x.size
        print(
            f"  {label:>5} data: {per:.3f} s per resample (median of 5); B=2000 would take "
            f"{2000 * per / 60:.0f} min; the budget of {budget:.0e} pair fits allows "
            f"B={b_fit} here ({b_fit * per / 60:.1f} min)"
        )
        t_dem, _ = timed(
            lambda x=x, y=y, s=subject: regression.deming(x, y, subject=s, n_boot=2000, seed=1),
            1,
        )
        print(f"  {label:>5} data: Deming cluster bootstrap, B=2000: {t_dem:.2f} s in total")
    print(
        "\nPassing-Bablok weighted-slope cluster bootstrap, B=2000 "
        "(_pb_bootstrap.pb_weighted_draws; median of 3, seconds)"
    )
    print(f"{'subjects':>9} {'per subject':>11} {'pairs':>6} {'slopes':>10} {'seconds':>8}")
    for n_subjects, per_subject in ((48, 17), (100, 17), (235, 17), (1_000, 1), (4_000, 1)):
        codes = np.repeat(np.arange(n_subjects), per_subject)
        x, y, _ = cohort(-(-codes.size // 17), 1)  # values of a 0.1-rounded export
        x, y = x[: codes.size], y[: codes.size]
        rng = np.random.default_rng(7)
        counts = np.stack(
            [np.bincount(rng.integers(0, n_subjects, n_subjects), minlength=n_subjects)
             for _ in range(2000)]
        )  # fmt: skip
        t_w, _ = timed(
            lambda x=x, y=y, c=codes, k=counts: _pb_bootstrap.pb_weighted_draws(x, y, c, k), 3
        )
        n_slopes = codes.size * (codes.size - 1) // 2
        print(f"{n_subjects:>9} {per_subject:>11} {codes.size:>6} {n_slopes:>10,} {t_w:8.2f}")
    print(f"\nload average at end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
