"""Speed and memory of the agreement engine; prints its figures.

Cohort (invented): 10,000 subjects x 17 segments x 2 test methods (plus the reference) x 3
parameters = 1,020,000 pairs; B = 2000 subject cluster bootstrap resamples.

1. The agreement engine: ``agreement_table`` with every statistic of cohort.stats.agreement,
   cohort.stats.correlation and cohort.stats.concordance and its
   B = 2000 bootstrap (one pass per row),
   strata ("all",) and ("all", "group"), with the two cohort.stats.regression calls replaced by a
   stand-in that returns at once (they are another module's cost).
2. The whole table with Passing-Bablok and Deming at their analytic intervals
   (``regression_n_boot=0``; their cluster bootstrap refits per resample, see
   cohort.stats.regression and its own benchmark).
3. Peak memory of the engine runs (tracemalloc, separate run) and the process peak RSS.
4. A straightforward per-resample pandas implementation of the same bootstrap
   (tests/test_bootstrap.py:naive_bootstrap, checked there to give identical numbers) against
   the fast one on a smaller cohort, and the speed ratio.

Run from the repository root: ``python benchmarks/agreement_speed.py [--repeats 3]``.
Targets: engine under 20 s and 2 GB; speed ratio at least 20x.
"""

from __future__ import annotations

import argparse
import contextlib
import math
import resource
import statistics
import sys
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from cohort.analysis import agreement_table as table_module
from cohort.analysis.agreement_table import agreement_table
from cohort.domain.segments import SEGMENTS
from cohort.stats.regression import MethodRegression
from cohort.stats.results import ConfidenceInterval, Estimate
from tests.stats.test_bootstrap import fast_bootstrap, invented_cohort, naive_bootstrap

GROUPS = ("control", "acute", "chronic")
PARAMETERS = {"ff": (2.0, 1.0, 1.0), "r2star": (30.0, 5.0, 4.0), "field": (0.0, 10.0, 5.0)}


def invented_paired(n_subjects: int, methods=("fast", "short"), seed: int = 1) -> pd.DataFrame:
    """Invented paired table in the data-contract layout (benchmark only)."""
    rng = np.random.default_rng(seed)
    subject = np.repeat([f"B{i:05d}" for i in range(n_subjects)], 17)
    group = np.repeat(np.array(GROUPS)[np.arange(n_subjects) % 3], 17)
    segment = np.tile(np.arange(1, 18), n_subjects)
    ring = np.array([SEGMENTS[s].ring for s in range(1, 18)])[segment - 1]
    territory = np.array([SEGMENTS[s].territory for s in range(1, 18)])[segment - 1]
    name = np.array([SEGMENTS[s].name for s in range(1, 18)])[segment - 1]
    frames = []
    for parameter, (mu, sd_subject, sd_segment) in PARAMETERS.items():
        truth = mu + np.repeat(rng.normal(0, sd_subject, n_subjects), 17)
        truth = truth + rng.normal(0, sd_segment, subject.size)
        reference = truth + rng.normal(0, 0.5 * sd_segment, subject.size)
        for j, method in enumerate(methods):
            offset = np.repeat(rng.normal(0, 0.3 * sd_subject, n_subjects), 17)
            test = 0.3 * (j + 1) + 1.05 * truth + offset
            test = test + rng.normal(0, 0.6 * sd_segment, subject.size)
            frames.append(
                pd.DataFrame(
                    {
                        "parameter": parameter,
                        "method": method,
                        "reference": "reference",
                        "subject": subject,
                        "group": group,
                        "field_strength": 1.5,
                        "segment": segment,
                        "segment_name": name,
                        "ring": ring,
                        "territory": territory,
                        "reference_value": reference,
                        "test_value": test,
                    }
                )
            )
    return pd.concat(frames, ignore_index=True)


def timed(function, repeats: int) -> tuple[float, object]:
    times, result = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result


def peak_mb(function) -> float:
    tracemalloc.start()
    function()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / 2**20


def _stand_in(reference, test, **_options) -> MethodRegression:
    """Returns at once: isolates the agreement engine from the regression module's cost."""
    missing = ConfidenceInterval.not_estimable("benchmark stand-in")
    n = len(reference)
    slope, intercept = (
        Estimate(q, math.nan, missing, missing, n, n) for q in ("slope", "intercept")
    )
    return MethodRegression("stand-in", slope, intercept, n, n)


@contextlib.contextmanager
def patched_regressions():
    saved = table_module.passing_bablok, table_module.deming
    table_module.passing_bablok = table_module.deming = _stand_in
    try:
        yield
    finally:
        table_module.passing_bablok, table_module.deming = saved


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--subjects", type=int, default=10_000)
    parser.add_argument("--n-boot", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    warnings.simplefilter("ignore")
    paired = invented_paired(args.subjects)
    print(
        f"cohort: {args.subjects} subjects x 17 segments x 2 test methods x 3 parameters = "
        f"{len(paired):,} pairs; B = {args.n_boot}; {args.repeats} repeats (medians)"
    )
    for strata in (("all",), ("all", "group")):

        def run(strata=strata):
            return agreement_table(
                paired, strata=strata, n_boot=args.n_boot, seed=7, regression_n_boot=0
            )

        with patched_regressions():
            engine, table = timed(run, args.repeats)
            memory = peak_mb(run)
        whole, _ = timed(run, args.repeats)
        print(
            f"strata {strata}: {len(table)} rows; agreement engine {engine:.1f} s "
            f"(target < 20 s), peak traced memory {memory:.0f} MB (target < 2048 MB); whole "
            f"table with analytic Passing-Bablok and Deming {whole:.1f} s"
        )
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"process peak RSS so far: {rss:.0f} MB (includes the invented cohort)")

    # Straightforward per-resample implementation against the fast one, same resamples.
    small = invented_cohort(n_subjects=300, seed=2)
    boot = 100
    naive_seconds, naive = timed(lambda: naive_bootstrap(small, boot, seed=3), 1)
    fast_seconds, fast = timed(lambda: fast_bootstrap(small, boot, seed=3), args.repeats)
    worst = max(float(np.max(np.abs(fast[k] - naive[k]))) for k in naive)
    print(
        f"per-resample pandas bootstrap, {small['subject'].nunique()} subjects, "
        f"{len(small)} pairs, B = {boot}: {naive_seconds:.2f} s; sufficient statistics: "
        f"{fast_seconds * 1000:.1f} ms; ratio {naive_seconds / fast_seconds:.0f}x "
        f"(target >= 20x); largest difference of any draw {worst:.1e}"
    )
    print(f"table columns: {len(table_module.AGREEMENT_COLUMNS)}")


if __name__ == "__main__":
    main()
