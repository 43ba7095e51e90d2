"""Worker threads for the hot paths (internal).

Several steps of one analysis are independent of each other and spend their time in numpy's
element-wise loops and matrix products, which run without the GIL: the rate laws fitted to the
same courses, the Monte Carlo chunks of the ranking. On a machine with two or more CPUs they run
side by side through :func:`executor`:

* **the same numbers as a serial run.** A task shares no mutable state with the others, and the
  caller takes the results in a fixed order, so nothing depends on which thread finishes first;
* **the caller's numpy error state.** ``np.errstate`` is a context variable (numpy >= 2), which a
  new thread does not inherit: each task runs in a copy of the submitting thread's context, so a
  step written under ``np.errstate(all="ignore")`` stays silent in a worker too;
* **one CPU, or one task:** an inline stand-in runs each task in the calling thread when its
  result is first asked for, so the order of the work is the order of the results read.
"""
from __future__ import annotations

import contextvars
import os
from concurrent.futures import ThreadPoolExecutor

#: the most worker threads one pool starts
MAX_WORKERS = 4


def n_workers(n_tasks: int) -> int:
    """Worker threads for ``n_tasks`` independent tasks: at most the usable CPUs, at most
    :data:`MAX_WORKERS`."""
    try:
        cpus = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cpus = os.cpu_count() or 1
    return max(1, min(n_tasks, cpus, MAX_WORKERS))


class _Pool(ThreadPoolExecutor):
    """A thread pool whose tasks run in a copy of the submitting thread's context."""

    def submit(self, fn, /, *args, **kwargs):
        return super().submit(contextvars.copy_context().run, fn, *args, **kwargs)


class _Deferred:
    """A future run in the calling thread when its result is first asked for."""

    def __init__(self, fn, args, kwargs):
        self._fn, self._args, self._kwargs, self._done, self._value = fn, args, kwargs, False, None

    def result(self):
        if not self._done:
            self._value, self._done = self._fn(*self._args, **self._kwargs), True
            self._fn = self._args = self._kwargs = None
        return self._value


class _Inline:
    """The part of a thread pool's interface used here, run in the calling thread (one task or one
    CPU): ``submit`` is deferred until its result is asked for, so tasks run in the order their
    results are read, as a pool's workers would let them finish."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    @staticmethod
    def submit(fn, /, *args, **kwargs):
        return _Deferred(fn, args, kwargs)


def executor(n_tasks: int):
    """A thread pool of :func:`n_workers` threads, or the inline stand-in when that is one."""
    n = n_workers(n_tasks)
    return _Pool(max_workers=n) if n > 1 else _Inline()


__all__ = ["MAX_WORKERS", "executor", "n_workers"]
