"""Speed of the repeated-measures correlation at cohort sizes; prints its figures.

Run: python benchmarks/correlation_speed.py [--repeats 5]

Invented data: S subjects x 17 segments, y = 0.5 x + noise. Each figure is the median of a
few runs, in one process, on whatever machine runs it; the machine's load is printed
alongside. Moved here from the test suite, where a time bound failed on a loaded machine.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import numpy as np

from cohort.stats.correlation import repeated_measures_correlation


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    print(f"load average at start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    print(f"{'subjects':>9} {'pairs':>9} {'median s':>9} {'s per 1e5 pairs':>16}")
    previous = None
    for n_subjects in (100, 1_000, 10_000, 100_000):
        rng = np.random.default_rng(0)
        subject = np.repeat(np.arange(n_subjects), 17)
        x = rng.normal(size=subject.size)
        y = 0.5 * x + rng.normal(size=subject.size)
        times = []
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            repeated_measures_correlation(x, y, subject=subject, n_boot=0)
            times.append(time.perf_counter() - t0)
        median = statistics.median(times)
        per = median / subject.size * 1e5
        line = f"{n_subjects:>9,} {subject.size:>9,} {median:>9.3f} {per:>16.4f}"
        if previous is not None:
            line += f"   x{median / previous:.1f} for 10x the subjects"
        print(line)
        previous = median


if __name__ == "__main__":
    main()
