"""A step's process: a loop's items computed in forked worker processes, each on one thread,
and freed memory kept for reuse.

The image step's windows are independent, and half of a window's time is Python and numpy
between the compiled kernels (geometry, gains, unit sources' set-up): on two threads one core
waited through it. Two forked workers, each imaging whole windows on one thread, keep both
busy. Forked, they share the loaded pass (copy-on-write) and need no pickling of it; only
each item's result comes back.
"""

from __future__ import annotations

import ctypes
import multiprocessing
import os
import signal
import sys
from collections.abc import Callable, Iterator, Sequence

_LOOP: tuple[Callable, Sequence] | None = None     # the forked workers' function and items
_PR_SET_PDEATHSIG = 1
_M_TRIM_THRESHOLD, _M_MMAP_MAX = -1, -4            # glibc's mallopt parameters


def can_fork() -> bool:
    """Whether forked workers can run here: on Linux (fork, and a signal at the parent's
    death), in a process that has not started numba's threads (GNU OpenMP, numba's threading
    layer where present, ends a fork that uses them: a test session that imaged before)."""
    if not sys.platform.startswith("linux"):
        return False
    import numba
    try:
        numba.threading_layer()
    except ValueError:      # no parallel kernel has run here yet
        return True
    return False


def keep_freed_memory() -> None:
    """Have glibc's malloc keep freed memory for the next allocation instead of handing it back
    to the system (large blocks come from the heap, not from mmap, and the heap is not
    trimmed): a step that allocates the same large arrays window after window otherwise has
    the kernel zero their pages again each time (image step of an outside-sized pass: 3.7-5.3 s
    of system time -> 0.8-1.9 s, the same peak memory; the track check 0.96 -> 0.19 s). Set
    for every step's process by ``flyover stage``; inherited by forked workers; nothing
    where the C library is not glibc."""
    if not sys.platform.startswith("linux"):
        return
    try:
        libc = ctypes.CDLL(None)
        libc.mallopt(_M_MMAP_MAX, 0)
        libc.mallopt(_M_TRIM_THRESHOLD, 2 ** 31 - 1)
    except (OSError, AttributeError):     # another C library (musl): nothing to tune
        pass


def forked_map(func: Callable, items: Sequence, *, processes: int,
               threads_each: int = 1) -> Iterator:
    """``func(item)`` for each item, in the items' order.

    With ``processes`` > 1 (and more than one item, on Linux), that many forked workers take
    the items one at a time; each runs numba on ``threads_each`` threads. ``func`` and the
    items need not pickle (the workers are forks); the results must. An exception in a worker
    is raised here. Otherwise (one process, or :func:`can_fork` says no) the items run here,
    one after another. One loop at a time per process: the workers find it in a module global.
    """
    global _LOOP
    n = min(processes, len(items))
    if n <= 1 or not can_fork():
        yield from map(func, items)
        return
    _LOOP = (func, items)
    try:
        pool = multiprocessing.get_context("fork").Pool(
            n, initializer=_start_worker, initargs=(os.getpid(), threads_each))
        with pool:
            yield from pool.imap(_run_item, range(len(items)))
    finally:
        _LOOP = None


def _start_worker(parent_pid: int, threads: int) -> None:
    # A worker must not outlive its step: stopped by Snakemake (SIGTERM, SIGKILL), the step
    # cannot close its pool, and an orphan would wait for items forever.
    ctypes.CDLL(None).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    if os.getppid() != parent_pid:
        os._exit(1)
    import numba
    numba.set_num_threads(threads)


def _run_item(k: int):
    func, items = _LOOP
    return func(items[k])
