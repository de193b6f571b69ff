"""One home for the BLAS/OpenMP thread limit (:data:`sourcelab.constants.BLAS_THREADS`).

Every place that runs linear algebra under a thread limit (the analysis, the coupling step, the
ocular ICA, figure drawing, batch workers) goes through :func:`thread_limits` or
:func:`limited_threads`; ``threadpoolctl`` is imported only when a limit is set.

Bottom layer: imports nothing from sourcelab but :mod:`sourcelab.constants` and
:mod:`sourcelab._docs`.
"""

from __future__ import annotations

import functools
import os
import threading

from ._docs import fill_doc
from .constants import BLAS_THREADS


@fill_doc
def thread_limits(n_threads: int = BLAS_THREADS, *, user_api: str | None = None):
    """Limit the thread pools of the loaded BLAS/OpenMP libraries.

    Parameters
    ----------
    %(thread_limit)s

    Returns
    -------
    threadpoolctl.threadpool_limits
        The limit, already in force: use it as a context manager (``with thread_limits():``)
        to restore the previous counts on exit, or keep it to leave the limit in place.
    """
    from threadpoolctl import threadpool_limits

    return threadpool_limits(n_threads, user_api=user_api)


@fill_doc
def limited_threads(n_threads: int = BLAS_THREADS, *, user_api: str | None = None):
    """Decorator: run the function under :func:`thread_limits` (same arguments).

    Parameters
    ----------
    %(thread_limit)s

    Returns
    -------
    callable
        ``decorate(fn) -> fn'``, where ``fn'`` calls ``fn`` with the limit in force (set once
        for nested calls of functions decorated with the same limit).
    """

    key = (n_threads, user_api)

    def decorate(fn):
        @functools.wraps(fn)
        def limited(*args, **kwargs):
            active = _ACTIVE.__dict__.setdefault("keys", [])
            if key in active:  # a decorated caller has this limit in force: no second scan
                return fn(*args, **kwargs)
            active.append(key)
            try:
                with thread_limits(n_threads, user_api=user_api):
                    return fn(*args, **kwargs)
            finally:
                active.pop()

        return limited

    return decorate


#: Thread-count variables of OpenMP and the BLAS libraries numpy and scipy load; set to 1 they pin
#: a process to one thread (batch workers get them, with the others of
#: ``sourcelab.batch.engines.THREAD_ENV``).
BLAS_THREAD_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system reports it).

    Returns
    -------
    int
        >= 1.
    """
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # not on Linux
        return os.cpu_count() or 1


def parallel_stages() -> bool:
    """May this process run two independent stages at once, each with its own core?

    True when more than one core is available to the process, no thread variable
    (``OMP_NUM_THREADS``, ``OPENBLAS_NUM_THREADS``, ``MKL_NUM_THREADS``) pins it to one thread,
    as batch workers are (one worker per core), and the machine's load (one-minute average,
    where the system reports one) leaves at least :data:`IDLE_CORES` of a core idle besides
    this process's own.  On a busy machine a second thread only queues behind the other
    processes (measured on 2 shared cores at load 2.7: +6 % wall for the same tables).

    Returns
    -------
    bool
    """
    cores = available_cores()
    pinned = any(os.environ.get(k, "").strip() == "1" for k in BLAS_THREAD_ENV)
    if cores < 2 or pinned:
        return False
    try:
        load = os.getloadavg()[0]
    except (AttributeError, OSError):  # not reported (Windows): assume the cores are free
        return True
    return cores - load >= IDLE_CORES


#: Idle cores (machine cores minus the one-minute load average) needed to run a stage beside
#: the others: half a core, so that the process's own load (about one core) still allows it.
IDLE_CORES = 0.5


#: Per thread: the limits in force through :func:`limited_threads` (a decorated function called
#: from another with the same limit runs under it without re-scanning the loaded libraries,
#: which costs milliseconds per call).
_ACTIVE = threading.local()
