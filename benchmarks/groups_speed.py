"""Speed of the whole group comparison; prints its figures.

Cohort (invented demo, cohort.demo.make_demo): 10,000 subjects x 17 segments x 2 methods
(reference and one test method) x 3 parameters = 1,020,000 values, three groups. The
study tables are built from the demo in memory in the layout of ``Study.values``,
``Study.subjects`` and ``Study.paired`` (field referenced to the subject median, as the
loader does), so only the group comparison (cohort.analysis.group_comparison) is timed.
Findings for the timing (benchmark definitions, not study defaults): hemorrhage = R2* > 50
1/s at 1.5 T or > 79 1/s at 3 T (O'Regan 2009; Storey 2007 scaling, see DOMAIN.md), and
|field| > 20 Hz, per segment; a subject is positive when any segment is.

Timed: ``group_comparison_table`` with per-subject summaries, descriptives, Kruskal-Wallis
+ Mann-Whitney + Cliff's delta, Welch ANOVA + Games-Howell + Hedges' g, Fisher tests of
proportions (exact or Monte Carlo, see ``p_method``), the group models and the method x
group models (path chosen automatically: prints which) and GEE models of both findings.
Then the mixed-model path is timed on a smaller cohort for the per-fit cost.

Run from the repository root: ``python benchmarks/groups_speed.py [--subjects 10000]``.
Target: well under 60 s for 10,000 subjects.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from cohort.analysis.group_comparison import group_comparison_table
from cohort.analysis.group_tables import ALL_GROUPS
from cohort.demo import REFERENCE, TEST, make_demo
from cohort.domain.segments import SEGMENTS
from cohort.stats.models import GEE_PATH, JOINT_GROUP, MIXED_PATH
from tests.analysis.group_data import demo_findings as findings


def study_frames(n_subjects: int, seed: int = 20261202):
    """values, subjects and paired tables of the demo cohort (benchmark only)."""
    demo = make_demo(n_subjects, seed, test_methods=(TEST,))  # one test method
    values = demo.values[demo.values["value"].astype(str) != ""].copy()
    values["value"] = values["value"].astype(float)
    subjects = demo.subjects.astype({"age": str, "days_since_infarction": str})
    info = subjects.set_index("subject")
    fld = values["parameter"].eq("field")
    median = values[fld].groupby(["subject", "method"])["value"].transform("median")
    values.loc[fld, "value"] = values.loc[fld, "value"] - median
    values["group"] = values["subject"].map(info["group"])
    values["field_strength"] = values["subject"].map(info["field_strength"])
    values["territory"] = values["segment"].map({n: s.territory for n, s in SEGMENTS.items()})
    key = ["subject", "segment", "parameter"]
    ref = values[values["method"].eq(REFERENCE)][[*key, "value"]]
    paired = values[~values["method"].eq(REFERENCE)].merge(ref, on=key, suffixes=("", "_ref"))
    paired = paired.rename(columns={"value": "test_value", "value_ref": "reference_value"})
    paired["reference"] = REFERENCE
    return values.reset_index(drop=True), subjects, paired


def run(values, subjects, paired, segment, subject, **options):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # not-estimable rows carry their notes
        start = time.perf_counter()
        result = group_comparison_table(
            values,
            subjects,
            ("control", "acute", "chronic"),
            paired=paired,
            subject_findings=subject,
            segment_findings=segment,
            **options,
        )
        return time.perf_counter() - start, result


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--subjects", type=int, default=10_000)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--mixed-subjects", type=int, default=600)
    args = parser.parse_args()

    start = time.perf_counter()
    frames = study_frames(args.subjects)
    segment, subject = findings(frames[0])
    print(f"cohort: {args.subjects:,} subjects, {len(frames[0]):,} values, built in "
          f"{time.perf_counter() - start:.1f} s")  # fmt: skip

    times = []
    for _ in range(args.repeats):
        elapsed, result = run(*frames, segment, subject)
        times.append(elapsed)
    print(f"group_comparison_table: median {statistics.median(times):.1f} s over "
          f"{len(times)} run(s) (target well under 60 s)")  # fmt: skip
    print(f"  linear-model path: {result.model_path}")
    tests = result.proportion_tests
    for row in tests[tests["comparison"].eq(ALL_GROUPS)].itertuples():
        print(f"  proportions {row.method} / {row.finding}: {row.p_method}")
    gee = result.models[result.models["path"].eq(GEE_PATH)]
    joint = gee[gee["term"].eq(JOINT_GROUP)]
    print(f"  GEE fits: {len(joint)}, estimable {int(joint['p_value'].notna().sum())} "
          "(the others: separation, see their notes)")  # fmt: skip
    print(f"  rows: comparisons {len(result.comparisons)}, models {len(result.models)}, "
          f"proportion tests {len(tests)}")  # fmt: skip

    small = study_frames(args.mixed_subjects)
    seg_small, subj_small = findings(small[0])
    elapsed, result = run(*small, seg_small, subj_small, model_path="mixed")
    n_fits = int(result.models["path"].eq(MIXED_PATH).groupby(
        [result.models["parameter"], result.models["method"], result.models["model"]]
    ).any().sum())  # fmt: skip
    print(f"mixed-model path at {args.mixed_subjects:,} subjects: {elapsed:.1f} s for the whole "
          f"table with {n_fits} MixedLM fits")  # fmt: skip
    auto_elapsed, _ = run(*small, seg_small, subj_small, model_path="subject-means")
    print(f"  same cohort on the subject-means path: {auto_elapsed:.1f} s "
          f"(ratio {elapsed / auto_elapsed:.1f}x)")  # fmt: skip


if __name__ == "__main__":
    main()
