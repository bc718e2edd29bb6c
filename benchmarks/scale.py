"""End-to-end scale benchmark of ``cohort run``; prints its figures.

Cohorts (invented, from :func:`cohort.demo.make_demo`): 100, 1,000, 10,000 and 100,000
subjects x 17 segments x (reference + 1 test method) x 3 parameters, written as Parquet
(``values.parquet``, ``subjects.parquet``, ``study.toml``) into a work folder. Each size is
run as a child process, ``python -m cohort.cli run STUDY --out DIR --force`` with the default
bootstrap (B = 2000), with and without figures (with figures up to ``--figures-up-to``
subjects, 10,000 by default), so that the wall time is the whole command
(start-up, loading, analysis, writing) and the peak memory is the larger of the child's own
maximum resident set size (``os.wait4``) and the largest PSS of its process tree sampled
every 0.2 s (the run forks worker processes for the agreement rows and the figures).

Per-step times come from the ``[cohort] ...`` progress lines of the child's stderr, stamped
as they arrive: a step lasts from its line to the next one ("load" is start-up and
``load_study`` before the first line; "report" runs from "writing the report" to the exit).

Printed: one line per (size, figures) with the median wall time and peak memory over
``--repeats`` runs, the growth exponent log(t2/t1)/log(n2/n1) between consecutive sizes,
the per-step medians, the largest memory of the run's process tree (PSS summed over the
command and its forked workers, sampled every 0.2 s) during each step,
and the targets (10,000 subjects with figures under 60 s; 100,000
without figures under 300 s and 8 GB).

Run from the repository root::

    python benchmarks/scale.py [--sizes 100,1000,10000,100000] [--no-figures-only]
                               [--figures-up-to 10000] [--repeats 1] [--work DIR] [--keep]
                               [--verbose]
"""

from __future__ import annotations

import argparse
import itertools
import math
import os
import platform
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from cohort import demo  # noqa: E402

SIZES = (100, 1_000, 10_000, 100_000)
TARGETS = {(10_000, True): (60.0, None), (100_000, False): (300.0, 8.0)}
"""(subjects, figures): (seconds, GB) that a run must stay under (issue 7)."""

_PROGRESS = re.compile(r"^\[cohort\] (.*?)(?: \.\.\.)?$")


def write_cohort(folder: Path, n_subjects: int, seed: int = 20261202) -> Path:
    """Write a demo cohort of ``n_subjects`` as Parquet with its study file; return the file."""
    folder.mkdir(parents=True, exist_ok=True)
    study = folder / "study.toml"
    if study.exists():
        return study
    cohort = demo.make_demo(n_subjects, seed, test_methods=(demo.TEST,))  # one test method
    values = cohort.values.copy()
    values["value"] = pd.to_numeric(values["value"].replace("", np.nan))
    values.to_parquet(folder / "values.parquet", index=False)
    cohort.subjects.astype(str).to_parquet(folder / "subjects.parquet", index=False)
    text = demo.study_toml((demo.TEST,)).replace("values.csv", "values.parquet")
    study.write_text(text.replace("subjects.csv", "subjects.parquet"), encoding="utf-8")
    return study


@dataclass
class Run:
    wall: float
    peak_bytes: int
    """Largest of the run's own maximum resident set size and the sampled PSS of its tree."""
    steps: dict[str, float] = field(default_factory=dict)
    step_peaks: dict[str, int] = field(default_factory=dict)
    """Largest resident set size sampled (every 0.2 s) while each step ran."""


def _tree(pid: int) -> list[int]:
    """``pid`` and its descendants (the worker processes a run forks)."""
    out, todo = [], [pid]
    while todo:
        p = todo.pop()
        out.append(p)
        try:
            for task in Path(f"/proc/{p}/task").iterdir():
                todo += [int(c) for c in (task / "children").read_text().split()]
        except OSError:
            pass
    return out


def _memory(pid: int) -> int:
    """Proportional set size (PSS) summed over the run's process tree: pages shared by the
    forked workers with their parent count once in all, unlike a sum of resident sizes."""
    total = 0
    for p in _tree(pid):
        try:
            for line in Path(f"/proc/{p}/smaps_rollup").read_text().splitlines():
                if line.startswith("Pss:"):
                    total += int(line.split()[1]) * 1024
                    break
        except OSError:
            pass
    return total


def _step_name(line: str) -> str | None:
    match = _PROGRESS.match(line.strip())
    if not match:
        return None
    name = re.sub(r" \(.*\)$", "", match.group(1))
    return re.sub(r"^figure( \d+)?: .*", "figures", name)


def run_once(study: Path, out: Path, figures: bool, verbose: bool = False) -> Run:
    """One ``cohort run`` as a child process: wall time, its peak RSS, per-step times."""
    command = [sys.executable, "-m", "cohort.cli", "run", str(study), "--out", str(out)]
    command += ["--force"] + ([] if figures else ["--no-figures"])
    start = time.perf_counter()
    child = subprocess.Popen(
        command, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True
    )
    marks: list[tuple[str, float]] = [("load", start)]
    peaks: dict[str, int] = {}
    done = threading.Event()

    def sample() -> None:  # attribute memory to the step under way
        while not done.wait(0.2):
            name = marks[-1][0]
            peaks[name] = max(peaks.get(name, 0), _memory(child.pid))

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    lines = []
    assert child.stderr is not None
    for line in child.stderr:
        lines.append(line)
        if verbose:
            print(f"    {time.perf_counter() - start:7.1f} s  {line.rstrip()}", flush=True)
        name = _step_name(line)
        if name is not None:
            marks.append((name, time.perf_counter()))
    done.set()
    sampler.join()
    _, status, usage = os.wait4(child.pid, 0)
    end = time.perf_counter()
    child.returncode = os.waitstatus_to_exitcode(status)
    if child.returncode != 0:
        raise RuntimeError(f"{' '.join(command)} failed:\n{''.join(lines[-30:])}")
    marks.append(("end", end))
    steps: dict[str, float] = {}
    for (name, t0), (_, t1) in itertools.pairwise(marks):
        steps[name] = steps.get(name, 0.0) + (t1 - t0)
    steps["report"] = steps.pop("writing the report", 0.0)
    if "writing the report" in peaks:
        peaks["report"] = peaks.pop("writing the report")
    peak = max(usage.ru_maxrss * 1024, *peaks.values(), 0)
    return Run(end - start, peak, steps, peaks)


def machine() -> str:
    cpu = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    memory = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**30
    return (
        f"{os.cpu_count()} cores (nproc {len(os.sched_getaffinity(0))}), {memory:.1f} GiB, "
        f"CPU {cpu}; Python {platform.python_version()}, numpy {np.__version__}, "
        f"pandas {pd.__version__}"
    )


def growth(sizes: list[int], walls: list[float]) -> list[str]:
    out = []
    for (n1, t1), (n2, t2) in itertools.pairwise(zip(sizes, walls, strict=True)):
        out.append(f"{n1:,} -> {n2:,}: {math.log(t2 / t1) / math.log(n2 / n1):.2f}")
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", default=",".join(str(s) for s in SIZES))
    parser.add_argument("--no-figures-only", action="store_true")
    parser.add_argument(
        "--figures-up-to",
        type=int,
        default=10_000,
        help="largest size also run with figures (default 10,000; the target at 100,000 "
        "is without figures)",
    )
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--work", default=None, help="folder for cohorts and outputs")
    parser.add_argument("--keep", action="store_true", help="keep the work folder")
    parser.add_argument("--verbose", action="store_true", help="echo the progress lines")
    args = parser.parse_args(argv)
    sizes = [int(s.replace("_", "")) for s in args.sizes.split(",") if s.strip()]
    work = Path(args.work) if args.work else Path(tempfile.mkdtemp(prefix="cohort-scale-"))
    print(f"machine: {machine()}")
    print(f"work folder: {work}; repeats: {args.repeats}; bootstrap B = 2000 (default)\n")
    modes = [False] if args.no_figures_only else [False, True]
    results: dict[tuple[int, bool], list[Run]] = {}
    try:
        for n in sizes:
            t0 = time.perf_counter()
            study = write_cohort(work / f"cohort-{n}", n)
            print(f"{n:,} subjects: cohort written in {time.perf_counter() - t0:.1f} s", flush=True)
            for figures in modes:
                if figures and n > args.figures_up_to:
                    continue
                runs = [
                    run_once(study, work / f"out-{n}-{int(figures)}", figures, args.verbose)
                    for _ in range(args.repeats)
                ]
                results[(n, figures)] = runs
                wall = statistics.median(r.wall for r in runs)
                peak = statistics.median(r.peak_bytes for r in runs) / 1e9
                label = "with figures" if figures else "no figures"
                print(f"  {label:13s} wall {wall:8.1f} s   peak memory {peak:6.2f} GB", flush=True)
        print("\nsubjects  figures   wall (s)  peak (GB)  target")
        for (n, figures), runs in results.items():
            wall = statistics.median(r.wall for r in runs)
            peak = statistics.median(r.peak_bytes for r in runs) / 1e9
            target = TARGETS.get((n, figures))
            verdict = ""
            if target:
                seconds, gigabytes = target
                ok = wall < seconds and (gigabytes is None or peak < gigabytes)
                limit = f"< {seconds:g} s" + (f", < {gigabytes:g} GB" if gigabytes else "")
                verdict = f"{limit}: {'met' if ok else 'NOT met'}"
            print(f"{n:>8,}  {'yes' if figures else 'no':7s}  {wall:9.1f}  {peak:9.2f}  {verdict}")
        for figures in modes:
            done = [n for n in sizes if (n, figures) in results]
            walls = [statistics.median(r.wall for r in results[(n, figures)]) for n in done]
            label = "with figures" if figures else "no figures"
            if len(done) > 1:
                print(f"growth exponent of wall time, {label}: " + "; ".join(growth(done, walls)))
        print("\nper-step median seconds (share of the wall time):")
        for (n, figures), runs in results.items():
            names = list(dict.fromkeys(k for r in runs for k in r.steps))
            wall = statistics.median(r.wall for r in runs)
            parts = []
            for name in names:
                t = statistics.median(r.steps.get(name, 0.0) for r in runs)
                parts.append(f"{name} {t:.1f} ({100 * t / wall:.0f}%)")
            print(f"  {n:,} {'figures' if figures else 'no figures'}: " + ", ".join(parts))
        print("\nper-step largest memory sampled (PSS of the process tree, GB), last repeat:")
        for (n, figures), runs in results.items():
            peaks = runs[-1].step_peaks
            parts = [f"{name} {peak / 1e9:.2f}" for name, peak in peaks.items()]
            print(f"  {n:,} {'figures' if figures else 'no figures'}: " + ", ".join(parts))
    finally:
        if not args.keep and not args.work:
            shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
