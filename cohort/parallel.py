"""Independent pieces of work spread over worker processes, with the results of a serial run.

Used for the rows of the agreement table and for the figures: each piece is computed by a
module-level function of its own arguments (its own seed included), so the results do not
depend on which process computed them or in which order; they are returned in input order.
Worker processes are forked (Linux only: elsewhere, and with one worker, the work runs in
this process), so they share the parent's memory until they write to it, and each runs its
numerical libraries single-threaded so that workers do not compete for the same cores.
"""

from __future__ import annotations

import functools
import multiprocessing
import os
import signal
import sys
import warnings
from collections.abc import Callable, Iterable
from concurrent.futures import ProcessPoolExecutor
from typing import TypeVar

Item = TypeVar("Item")
Result = TypeVar("Result")
Shared = TypeVar("Shared")

MAX_DEFAULT_WORKERS = 4
"""Most worker processes chosen automatically (memory grows with each)."""


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system tells it)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        return os.cpu_count() or 1


def resolve_workers(workers: int) -> int:
    """Worker processes to use: ``workers``, or for 0 one per available core (at most
    :data:`MAX_DEFAULT_WORKERS`); always 1 where processes cannot be forked."""
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 0:
        raise ValueError(f"workers must be a non-negative integer (0 = automatic), got {workers!r}")
    if not can_fork():
        return 1
    return workers if workers > 0 else max(1, min(MAX_DEFAULT_WORKERS, available_cores()))


def can_fork() -> bool:
    """Whether worker processes are forked here (Linux; fork is unsafe on macOS)."""
    return sys.platform.startswith("linux") and "fork" in multiprocessing.get_all_start_methods()


def _worker_start(parent: int) -> None:
    """In each worker: the parent alone answers Ctrl-C (SIGINT goes to the whole foreground
    process group) and ends the workers; SIGTERM ends a worker at once; one BLAS thread.

    The worker also ends when its parent dies, however it dies (Linux ``PR_SET_PDEATHSIG``),
    and at once if the parent is already gone: a signal that interrupts the parent while
    the pool forks can leave a worker the pool has not recorded yet, which
    :func:`_end_workers` cannot see.
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, signal.SIG_DFL)
    _end_with_parent(parent)
    _single_threaded()


def _end_with_parent(parent: int) -> None:
    """Ask the kernel for SIGTERM when the parent dies; exit if it already has."""
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGTERM), 0, 0, 0)  # 1 = PR_SET_PDEATHSIG (linux/prctl.h)
    except (OSError, AttributeError):  # pragma: no cover - not Linux
        pass
    if os.getppid() != parent:
        os._exit(1)


def _single_threaded() -> None:
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - a dependency; without it BLAS keeps its threads
        return
    threadpool_limits(1)


def ordered_map(
    func: Callable[[Item], Result], items: Iterable[Item], workers: int = 0
) -> list[Result]:
    """``[func(item) for item in items]``, computed by ``workers`` forked processes.

    ``func`` must be a module-level function; items and results are pickled. The warnings
    each call raises are raised again here, in input order, whichever process ran it. With
    one worker, one item or no fork, the loop runs in this process.
    """
    items = list(items)
    n = min(resolve_workers(workers), len(items))
    job = functools.partial(_capturing, func)
    if n <= 1:
        done = [job(item) for item in items]
    else:
        context = multiprocessing.get_context("fork")
        pool = ProcessPoolExecutor(
            n, mp_context=context, initializer=_worker_start, initargs=(os.getpid(),)
        )
        try:
            # futures are never cancelled: Python 3.11's pool then fails on a cancelled
            # future when its workers are ended (it marks each pending one broken instead)
            futures = [pool.submit(job, item) for item in items]
            done = [future.result() for future in futures]
        except BaseException:
            _end_workers(pool)  # an error or an interruption: no worker outlives this call
            pool.shutdown(wait=True)
            raise
        pool.shutdown(wait=True)
    results = []
    for result, caught in done:
        for category, message in caught:
            warnings.warn(message, category, stacklevel=2)
        results.append(result)
    return results


def _end_workers(pool: ProcessPoolExecutor) -> None:
    """Terminate the pool's worker processes and wait for them to end."""
    terminate = getattr(pool, "terminate_workers", None)  # Python 3.14
    if terminate is not None:
        terminate()
        return
    recorded = list((getattr(pool, "_processes", None) or {}).values())
    # with the children forked but not yet recorded by the pool when a signal came
    processes = list({id(p): p for p in [*recorded, *multiprocessing.active_children()]}.values())
    for process in processes:
        if process.is_alive():
            process.terminate()
    for process in processes:
        process.join(timeout=10)
        if process.is_alive():  # pragma: no cover - SIGTERM is not ignored by workers
            process.kill()
            process.join()


def _capturing(func: Callable[[Item], Result], item: Item):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = func(item)
    return result, [(w.category, str(w.message)) for w in caught]


_SHARED: tuple[Callable[..., object], object] | None = None


def map_shared(
    func: Callable[[Shared, int], Result], shared: Shared, n: int, workers: int = 0
) -> list[Result]:
    """``[func(shared, i) for i in range(n)]`` by :func:`ordered_map`; ``shared`` (large
    inputs: a study, its tables) reaches forked workers through the fork, not by pickling,
    and only the numbers ``i`` and the results are sent between processes."""
    global _SHARED
    outer, _SHARED = _SHARED, (func, shared)  # a call inside another one restores it after
    try:
        return ordered_map(_call_shared, range(n), workers)
    finally:
        _SHARED = outer


def _call_shared(index: int):
    if _SHARED is None:
        raise RuntimeError("_call_shared runs only inside map_shared")
    func, shared = _SHARED
    return func(shared, index)
