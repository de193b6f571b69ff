"""Execution engines: one interface over in-process, process-pool and Dask execution.

Every engine runs a module-level function on one small, picklable task at a time and hands back a
small result; :func:`run_unordered` keeps a bounded number of tasks in flight and yields results as
they finish, so the same batch code runs serially, on the cores of one machine, or on a Dask
cluster.

Engines (dispatch table :data:`ENGINES`):

``serial``
    In the calling process (no pickling; easiest to debug).
``processes``
    :class:`concurrent.futures.ProcessPoolExecutor` with ``spawn`` workers, one BLAS thread each.
``dask``
    A ``distributed.Client`` on an existing scheduler (``address``) or on a ``LocalCluster`` of
    ``workers`` single-threaded worker processes.  Needs the optional ``dask[distributed]``.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import itertools
import logging
import multiprocessing
import os
import threading
from collections.abc import Callable, Iterable, Iterator
from typing import Any

from .._threads import BLAS_THREAD_ENV, thread_limits
from ..errors import InputError

log = logging.getLogger("sourcelab")

DASK_MISSING = (
    "the Dask engine needs dask[distributed], which is not installed; "
    "install it with: pip install 'sourcelab[dist]'"
)


#: Thread-count variables of the BLAS and OpenMP libraries.  Each library reads its variable once,
#: when it is loaded, so a worker must have them in its environment from the start: a spawned
#: worker imports numpy (with the parent's main module) before its initialiser runs.
THREAD_ENV = (
    *BLAS_THREAD_ENV,
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
)
_ENV_LOCK = threading.Lock()


@contextlib.contextmanager
def one_thread_environment():
    """One BLAS/OpenMP thread in the processes started inside the block.

    Sets each variable of :data:`THREAD_ENV` that the user has not set to ``"1"`` while the block
    runs (processes started meanwhile inherit it) and restores the environment afterwards; a
    value the user set is kept.

    Yields
    ------
    None
        Control returns to the ``with`` block while the variables are set.
    """
    with _ENV_LOCK:
        added = [k for k in THREAD_ENV if k not in os.environ]
        for k in added:
            os.environ[k] = "1"
        try:
            yield
        finally:
            for k in added:
                os.environ.pop(k, None)


def worker_threads(_task=None) -> dict:
    """Thread counts of this process's BLAS/OpenMP libraries and its thread variables.

    Counts come from ``threadpoolctl`` after loading numpy, with the variables of
    :data:`THREAD_ENV` (a diagnostic for the worker set-up; the argument is ignored, so that an
    engine can run it as a task).

    Parameters
    ----------
    _task : object, optional
        Ignored.

    Returns
    -------
    dict
        ``{"pools": {"<user_api>:<internal_api>": n_threads}, "env": {name: value or None}}``;
        ``pools`` is empty when ``threadpoolctl`` is not installed.
    """
    import numpy  # noqa: F401 - loads BLAS

    info = {}
    try:
        from threadpoolctl import threadpool_info
    except ImportError:  # pragma: no cover - optional
        pass
    else:
        for lib in threadpool_info():
            info[f"{lib['user_api']}:{lib['internal_api']}"] = int(lib["num_threads"])
    return {"pools": info, "env": {k: os.environ.get(k) for k in THREAD_ENV}}


def _init_worker(log_level: int = logging.ERROR) -> None:
    """Worker initialiser: one BLAS thread per worker process (workers == cores), and the
    ``sourcelab`` log level of the parent (per-recording warnings are in each provenance.json)."""
    logger = logging.getLogger("sourcelab")
    logger.setLevel(log_level)
    if not logger.handlers:
        h = logging.StreamHandler()
        h.setFormatter(logging.Formatter(f"sourcelab[{os.getpid()}]: %(levelname)s: %(message)s"))
        logger.addHandler(h)
    # the environment (see one_thread_environment) limits every library loaded later; this
    # limits the ones already loaded in case the user's environment asked for more
    try:
        thread_limits()  # kept in force (not a context): for the worker's lifetime
    except ImportError:  # pragma: no cover - optional
        return


class Engine:
    """Common interface: ``submit(fn, task) -> future``, ``wait_first(futures)``, ``close()``."""

    kind = "base"
    n_workers = 1

    def submit(self, fn: Callable, task: Any):
        """Start ``fn(task)``; return a future-like handle (subclasses implement this).

        Parameters
        ----------
        fn : callable
            Module-level function of one argument (picklable for process and Dask engines).
        task : object
            Its argument (small and picklable).

        Returns
        -------
        future
            Handle passed to :meth:`wait_first` and :meth:`result`.
        """
        raise NotImplementedError

    def wait_first(self, futures: set) -> tuple[set, set]:
        """Block until at least one future is done; return ``(done, not_done)``.

        Parameters
        ----------
        futures : set
            Handles returned by :meth:`submit`.

        Returns
        -------
        done, not_done : set
            The finished handles (at least one) and the others.
        """
        done, pending = cf.wait(futures, return_when=cf.FIRST_COMPLETED)
        return set(done), set(pending)

    def result(self, future):
        """The value of a finished task; re-raises the task's exception.

        Parameters
        ----------
        future : future
            A handle from :meth:`submit` that :meth:`wait_first` reported done.

        Returns
        -------
        object
            What ``fn(task)`` returned.
        """
        return future.result()

    def close(self) -> None:
        pass

    def describe(self) -> str:
        """One-line description of the engine for logs.

        Returns
        -------
        str
            Engine kind and number of workers, e.g. ``"processes (4 workers)"``.
        """
        return f"{self.kind} ({self.n_workers} worker{'s' if self.n_workers != 1 else ''})"

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class _Deferred:
    """A task run in the calling process when it is first waited for."""

    _counter = itertools.count()

    def __init__(self, fn, task):
        self.fn, self.task, self.done, self.value, self.error = fn, task, False, None, None
        self.order = next(self._counter)

    def run(self):
        if not self.done:
            try:
                self.value = self.fn(self.task)
            except Exception as exc:  # handed to the caller like a worker's exception
                self.error = exc
            self.done = True


class SerialEngine(Engine):
    """Run each task in the calling process."""

    kind = "serial"

    def submit(self, fn, task):
        """Defer ``fn(task)`` until it is first waited for (no pickling).

        Parameters
        ----------
        fn : callable
            Function of one argument.
        task : object
            Its argument.

        Returns
        -------
        _Deferred
            Handle that runs the task in this process when waited for.
        """
        return _Deferred(fn, task)

    def wait_first(self, futures):
        """Run the earliest-submitted task; return ``({it}, the others)``.

        Parameters
        ----------
        futures : set of _Deferred
            Handles from :meth:`submit`.

        Returns
        -------
        done, not_done : set
            The one task just run and the remaining handles.
        """
        first = min(futures, key=lambda f: f.order)
        first.run()
        return {first}, set(futures) - {first}

    def result(self, future):
        """The value of a task (running it now if needed); re-raises its exception.

        Parameters
        ----------
        future : _Deferred
            A handle from :meth:`submit`.

        Returns
        -------
        object
            What ``fn(task)`` returned.
        """
        future.run()
        if future.error is not None:
            raise future.error
        return future.value


class ProcessEngine(Engine):
    """``ProcessPoolExecutor`` with ``spawn`` workers (same behaviour on Linux, macOS, Windows)."""

    kind = "processes"

    def __init__(self, n_workers: int, *, log_level: int = logging.ERROR):
        if n_workers < 1:
            raise InputError(f"workers: must be >= 1, got {n_workers}")
        self.n_workers = int(n_workers)
        self._pool = cf.ProcessPoolExecutor(
            max_workers=self.n_workers,
            mp_context=multiprocessing.get_context("spawn"),
            initializer=_init_worker,
            initargs=(log_level,),
        )

    def submit(self, fn, task):
        """Submit ``fn(task)`` to the pool, starting workers with one BLAS thread each.

        Parameters
        ----------
        fn : callable
            Module-level (picklable) function of one argument.
        task : object
            Its picklable argument.

        Returns
        -------
        concurrent.futures.Future
            The pool's future.
        """
        # the pool starts its worker processes inside submit (spawn: on demand)
        with one_thread_environment():
            return self._pool.submit(fn, task)

    def close(self):
        self._pool.shutdown(wait=True, cancel_futures=True)


#: Dask settings of a local cluster's workers, so that they run the analysis as the process
#: pool's workers do.  Dask's nannies start workers with ``MALLOC_TRIM_THRESHOLD_=65536``, which
#: also fixes glibc's mmap threshold at 128 kB: every larger temporary array is then mapped and
#: unmapped afresh, and its pages faulted in again (measured: three analyses of a 30-s recording
#: took 7.7-8.4 CPU-s with it against 5.5-7.3 without, with 7.5x the page faults and 2.1-2.5 s of
#: system time against 0.3-0.5 s).  Unset here, the worker inherits the caller's environment
#: (a value the user exported is kept).  The workers' statistical profiler (a thread sampling
#: the task's stack every 10 ms for the dashboard) is off: batch results do not use it.
LOCAL_CLUSTER_CONFIG = {
    "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
    "distributed.worker.profile.enabled": False,
}


class DaskEngine(Engine):
    """A Dask ``distributed`` client on a scheduler address or on a local cluster.

    Parameters
    ----------
    address : str, optional
        Scheduler address (``tcp://host:8786``).  Workers must be able to import the same
        sourcelab version and to read the input and write the output paths.
    n_workers : int
        Local cluster size when no address is given (one thread per worker).
    processes : bool
        Local cluster workers as processes (default) or as threads of this process.
    log_level : int
        The ``sourcelab`` log level in a local cluster's workers (``logging`` constant; a remote
        cluster's workers keep theirs).

    Notes
    -----
    A local cluster's workers are set up as the process pool's: one BLAS/OpenMP thread each,
    the caller's memory-allocator settings, no statistical profiler (see
    :data:`LOCAL_CLUSTER_CONFIG`).
    """

    kind = "dask"

    def __init__(
        self,
        address: str | None = None,
        *,
        n_workers: int = 1,
        processes: bool = True,
        log_level: int = logging.ERROR,
    ):
        try:
            import dask
            import distributed  # (before dask.config.set: it adds its defaults on import)
        except ImportError:
            raise InputError(DASK_MISSING) from None
        self._dist = distributed
        self._cluster = None
        if address:
            try:
                self._client = distributed.Client(address, timeout="20s")
            except (OSError, TimeoutError) as exc:
                raise InputError(f"cannot reach the Dask scheduler ({exc})", path=address) from None
        else:
            if n_workers < 1:
                raise InputError(f"workers: must be >= 1, got {n_workers}")
            # loopback only, also for threads: the in-process transport names itself after the
            # machine's outward IP address, which fails (with a warning) on an offline machine
            where = {"host": "127.0.0.1", "protocol": "tcp://"}
            with one_thread_environment(), dask.config.set(LOCAL_CLUSTER_CONFIG):
                self._cluster = distributed.LocalCluster(
                    n_workers=int(n_workers),
                    threads_per_worker=1,
                    processes=processes,
                    # a free loopback port: the default (":8787", also used when None is given)
                    # warns and moves when another cluster holds it
                    dashboard_address="127.0.0.1:0",
                    **where,
                )
            self._client = distributed.Client(self._cluster)
            if processes:  # (threads share this process's logger)
                self._client.run(_init_worker, log_level)
        self.address = self._client.scheduler.address

    @property
    def n_workers(self) -> int:
        """Worker threads on the cluster now (workers may join a remote scheduler later)."""
        return max(1, sum(self._client.nthreads().values()))

    def submit(self, fn, task):
        """Submit ``fn(task)`` to the cluster (``pure=False``: never deduplicated).

        Parameters
        ----------
        fn : callable
            Module-level function of one argument, importable on the workers.
        task : object
            Its picklable argument.

        Returns
        -------
        distributed.Future
            The client's future.
        """
        return self._client.submit(fn, task, pure=False)

    def wait_first(self, futures):
        """Block until at least one future is done; return ``(done, not_done)``.

        Parameters
        ----------
        futures : set of distributed.Future
            Handles from :meth:`submit`.

        Returns
        -------
        done, not_done : set
            The finished futures (at least one) and the others.
        """
        done, pending = self._dist.wait(list(futures), return_when="FIRST_COMPLETED")
        return set(done), set(pending)

    def describe(self):
        """One-line description: local cluster or scheduler address, and worker threads.

        Returns
        -------
        str
            E.g. ``"dask, local cluster (2 worker threads)"``.
        """
        where = "local cluster" if self._cluster is not None else self.address
        return f"dask, {where} ({self.n_workers} worker threads)"

    def close(self):
        self._client.close()
        if self._cluster is not None:
            self._cluster.close()


#: engine name -> factory(workers, scheduler, log_level)
ENGINES: dict[str, Callable[..., Engine]] = {
    "serial": lambda workers, scheduler, log_level: SerialEngine(),
    "processes": lambda workers, scheduler, log_level: ProcessEngine(workers, log_level=log_level),
    "dask": lambda workers, scheduler, log_level: DaskEngine(
        scheduler, n_workers=workers, log_level=log_level
    ),
}


def make_engine(
    kind: str | None = None,
    *,
    workers: int = 1,
    scheduler: str | None = None,
    log_level: int = logging.ERROR,
) -> Engine:
    """An engine by name.

    ``None`` picks ``dask`` with a scheduler, ``serial`` for one worker, else ``processes``.

    Parameters
    ----------
    kind : {"serial", "processes", "dask"}, optional
        Engine name (a key of :data:`ENGINES`); ``None`` chooses as above.
    workers : int
        Number of worker processes (``processes``) or local-cluster workers (``dask`` without a
        scheduler); must be >= 1.
    scheduler : str, optional
        Dask scheduler address (``tcp://host:8786``); only with the ``dask`` engine.
    log_level : int
        The ``sourcelab`` log level in worker processes (``logging`` constant).

    Returns
    -------
    Engine
        The engine; use it as a context manager so that it is closed.

    Raises
    ------
    InputError
        Unknown ``kind``, a scheduler with another engine, or ``workers < 1``.
    """
    if kind is None:
        kind = "dask" if scheduler else ("serial" if workers <= 1 else "processes")
    if kind not in ENGINES:
        raise InputError(f"engine: {kind!r} is not one of {', '.join(ENGINES)}")
    if scheduler and kind != "dask":
        raise InputError(f"--scheduler needs the dask engine, not {kind!r}")
    if workers < 1:
        raise InputError(f"workers: must be >= 1, got {workers}")
    return ENGINES[kind](workers, scheduler, log_level)


def run_unordered(
    engine: Engine, fn: Callable, tasks: Iterable, *, max_in_flight: int | None = None
) -> Iterator[tuple[int, Any, BaseException | None]]:
    """Run ``fn(task)`` for every task; yield ``(index, result, error)`` as tasks finish.

    At most ``max_in_flight`` tasks (default ``2 * n_workers``) are submitted at once, so
    memory does not grow with the number of tasks.  A task whose worker raised (or died) yields
    its exception as ``error`` and the others go on.

    Parameters
    ----------
    engine : Engine
        Where to run the tasks.
    fn : callable
        Module-level function of one argument.
    tasks : iterable
        The arguments; consumed lazily.
    max_in_flight : int, optional
        Most tasks submitted and not yet collected; default ``2 * engine.n_workers``.

    Yields
    ------
    index : int
        Position of the task in ``tasks``.
    result : object
        What ``fn(task)`` returned, or ``None`` when it failed.
    error : BaseException or None
        The task's exception, or ``None`` on success.
    """
    it = iter(enumerate(tasks))
    pending: dict = {}
    exhausted = False
    while True:
        limit = max_in_flight or 2 * engine.n_workers
        while not exhausted and len(pending) < limit:
            try:
                i, task = next(it)
            except StopIteration:
                exhausted = True
                break
            pending[engine.submit(fn, task)] = i
        if not pending:
            return
        done, _ = engine.wait_first(set(pending))
        for fut in sorted(done, key=lambda f: pending[f]):
            i = pending.pop(fut)
            try:
                res, err = engine.result(fut), None
            except Exception as exc:  # worker error, broken pool, lost Dask worker
                res, err = None, exc
            yield i, res, err
