"""Tests of cohort.parallel: order, warnings and worker counts of ordered_map."""

from __future__ import annotations

import os
import warnings

import pytest

from cohort.parallel import (
    MAX_DEFAULT_WORKERS,
    can_fork,
    map_shared,
    ordered_map,
    resolve_workers,
)
from cohort.stats.results import NotEstimableWarning


def _square_and_pid(x: int) -> tuple[int, int]:
    if x % 3 == 0:
        warnings.warn(f"item {x} is a multiple of three", NotEstimableWarning, stacklevel=2)
    return x * x, os.getpid()


def test_serial_results_and_warnings_in_input_order():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        got = ordered_map(_square_and_pid, range(7), workers=1)
    assert [r for r, _ in got] == [x * x for x in range(7)]
    assert {pid for _, pid in got} == {os.getpid()}
    assert [str(w.message) for w in caught] == [
        f"item {x} is a multiple of three" for x in (0, 3, 6)
    ]
    assert all(issubclass(w.category, NotEstimableWarning) for w in caught)


@pytest.mark.skipif(not can_fork(), reason="worker processes are forked on Linux only")
def test_workers_give_the_serial_results_and_warnings():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        got = ordered_map(_square_and_pid, range(40), workers=2)
    assert [r for r, _ in got] == [x * x for x in range(40)]
    assert os.getpid() not in {pid for _, pid in got}  # computed in the workers
    assert [str(w.message) for w in caught] == [
        f"item {x} is a multiple of three" for x in range(0, 40, 3)
    ]


def test_worker_counts():
    assert resolve_workers(1) == 1
    if can_fork():
        assert resolve_workers(3) == 3
        assert 1 <= resolve_workers(0) <= MAX_DEFAULT_WORKERS
    else:
        assert resolve_workers(3) == 1
    for bad in (-1, 1.5, True, "2"):
        with pytest.raises(ValueError, match="workers must be a non-negative integer"):
            resolve_workers(bad)
    assert ordered_map(_square_and_pid, [], workers=2) == []


def _outer(shared: list[int], index: int) -> list[int]:
    inner = map_shared(_times, shared[index], 3, workers=1)  # nested: the outer state stays
    return [*inner, shared[index]]


def _times(factor: int, index: int) -> int:
    return factor * index


@pytest.mark.parametrize("workers", [1, 2])
def test_map_shared_gives_each_call_the_shared_input_and_nests(workers):
    assert map_shared(_outer, [10, 20], 2, workers=workers) == [[0, 10, 20, 10], [0, 20, 40, 20]]


_KILLED_PARENT = """
import os, sys, time
from cohort.parallel import ordered_map

def nap(x):
    os.write(1, f"{os.getpid()}\\n".encode())  # one write: lines of two workers never mix
    time.sleep(60)
    return x

ordered_map(nap, range(2), workers=2)
"""


@pytest.mark.skipif(
    not can_fork() or not os.path.exists("/proc/self"), reason="forked workers, Linux /proc"
)
def test_no_worker_outlives_a_parent_killed_without_warning(tmp_path):
    """A parent that dies without running any cleanup (SIGKILL) takes its workers with it:
    they would otherwise wait for work forever, holding the run's pipes and memory."""
    import signal
    import subprocess
    import sys
    import time

    script = tmp_path / "parent.py"
    script.write_text(_KILLED_PARENT)
    parent = subprocess.Popen([sys.executable, str(script)], stdout=subprocess.PIPE, text=True)
    workers = {int(parent.stdout.readline()) for _ in range(2)}  # both workers are napping
    assert all(os.path.exists(f"/proc/{pid}") for pid in workers)
    parent.send_signal(signal.SIGKILL)
    parent.wait(timeout=30)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and any(_alive(pid) for pid in workers):
        time.sleep(0.05)
    assert not [pid for pid in workers if _alive(pid)], "a worker outlived its parent"


def _alive(pid: int) -> bool:
    """Whether ``pid`` runs (a zombie, ended but not yet reaped by init, counts as ended)."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False
