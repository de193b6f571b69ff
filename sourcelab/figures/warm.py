"""A figure renderer warmed while the analysis runs.

The analysis uses about one core; on a machine with more, a process forked before it starts
(:func:`warm_renderer`) imports the plotting libraries (matplotlib, nilearn: ~1-2 s) and fills
the figure caches that do not depend on the recording (the template's volume lookup, the
surface layout's face raster, the glass-brain layouts) meanwhile.  A figure set drawn as PNG
inside the block (:func:`sourcelab.figures.result_figures` with ``n_jobs > 1``, as the output
writer draws it) is then drawn by workers forked from that process, which share those caches,
and the PDF report is written there too.  The figures are the same function calls on the same
arguments as without it, so the files are identical (tested); where processes cannot be forked
it does nothing, and a renderer that fails or dies leaves the drawing to the calling process.
"""

from __future__ import annotations

import contextlib
import logging

from ..checks import check_number

log = logging.getLogger("sourcelab")

#: Imported before the renderer is forked: the default analysis imports them anyway, so the
#: renderer shares them instead of importing its own copies (~2 CPU-s).
SHARED_IMPORTS = ("pandas", "scipy.stats", "sklearn.base", "mne")

#: The renderer of the enclosing :func:`warm_renderer` block (None outside one).
_ACTIVE = None


def active():
    """The warmed renderer of the enclosing :func:`warm_renderer` block, or None.

    Returns
    -------
    WarmRenderer | None
    """
    return _ACTIVE


def figure_jobs() -> int:
    """Worker processes for drawing a figure set on this machine: the cores this process may
    use (at most 4), or 1 inside a worker process (a batch worker must not fork its own pool)
    and where processes cannot be forked.

    The environment variable ``SOURCELAB_FIGURE_JOBS`` (an integer >= 1) overrides it.

    Returns
    -------
    int
        >= 1.
    """
    import multiprocessing as mp
    import os

    env = os.environ.get("SOURCELAB_FIGURE_JOBS")
    if env:
        return check_number(
            "SOURCELAB_FIGURE_JOBS", int(env) if env.strip().isdigit() else env, kind=int, low=1
        )
    if mp.parent_process() is not None or "fork" not in mp.get_all_start_methods():
        return 1  # workers share the parent's caches by forking (not on Windows)
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        cores = os.cpu_count() or 1
    return max(1, min(4, cores))


def _warm() -> None:
    """In the renderer process: import the plotting modules and fill the recording-independent
    caches of the default figure set's layouts (those :func:`~.figure_set.result_figures`
    draws by default; other layouts are filled when their figures are queued)."""
    import numpy as np

    from .._threads import thread_limits
    from . import brain, figure_set, geometry, roi, sensor  # noqa: F401  (imports warmed)
    from .colours import power_scale, z_scale

    with thread_limits():
        geometry.sulcal_depth()
        geometry.source_positions_mni305()
        layout = {"resolution": 2, "display_mode": "lyrz", "title": True, "dpi": 90}
        brain.warm_caches(brain.glass_brain, layout)
        brain.warm_caches(brain.surface_views, layout)
        flat = np.ones(geometry.load_head_model().n_src)
        # one glass brain per default layout (power, z) builds the figure kept for it
        for scale in (power_scale(flat, measure="absolute"), z_scale()):
            brain.glass_brain_png(flat, scale=scale, title="warm", resolution=2, dpi=90)
        sensor.sensor_info()


#: In the renderer process: the result and figure set of the last :func:`_result_figures`.
_LAST: dict = {}


def _result_figures(result, n_jobs: int, options: dict) -> dict:
    """In the renderer process: the result's figure set as PNG (drawn by forked workers)."""
    from .figure_set import result_figures

    pngs = result_figures(result, as_png=True, n_jobs=n_jobs, **options)
    _LAST.update(result=result, figures=pngs)
    return pngs


def last_drawn() -> tuple:
    """In the renderer process: the result and PNG figure set it drew last (for the PDF).

    Returns
    -------
    result : AnalysisResult
    figures : dict of str to bytes
    """
    return _LAST["result"], _LAST["figures"]


def _volume_maps() -> dict:
    """In the renderer process: its voxel-to-source lookups (see ``geometry.VOLUME_MAPS``)."""
    from . import geometry

    return dict(geometry.VOLUME_MAPS)


class _WarmUpError(RuntimeError):
    """The renderer's warm-up failed (the caller draws in its own process)."""


def _server(conn) -> None:
    """The renderer process: warm up, then run each ``(func, args, kwargs)`` received and send
    back ``(True, value)`` or ``(False, exception)``, until None (or the parent's end)."""
    try:
        _warm()
        warm_error = None
    except Exception as exc:  # reported with the first request
        warm_error = _WarmUpError(repr(exc))
    while True:
        try:
            msg = conn.recv()
        except (EOFError, OSError):
            break
        if msg is None:
            break
        func, args, kwargs = msg
        try:
            if warm_error is not None:
                raise warm_error
            reply = (True, func(*args, **kwargs))
        except Exception as exc:
            reply = (False, exc)
        conn.send(reply)
    conn.close()


class _Pending:
    """The answer of one request to the renderer process (:meth:`WarmRenderer.submit`)."""

    def __init__(self, renderer):
        self._renderer = renderer

    def result(self):
        """The value the call returned (its exception is raised here).

        Returns
        -------
        object
        """
        if self._renderer._conn.closed:
            raise EOFError("the renderer process is gone")
        ok, value = self._renderer._conn.recv()
        self._renderer._waiting -= 1
        if not ok:
            raise value
        return value


class WarmRenderer:
    """A forked process that warms the figure caches, then draws figure sets and writes PDF
    reports (one request at a time).

    Made by :func:`warm_renderer`; the output writer finds it through :func:`active`.
    """

    def __init__(self):
        import importlib
        import multiprocessing as mp

        for name in SHARED_IMPORTS:
            with contextlib.suppress(ImportError):
                importlib.import_module(name)
        ctx = mp.get_context("fork")
        self._conn, child = ctx.Pipe()
        # not a daemon: it forks its own drawing workers
        self._process = ctx.Process(target=_server, args=(child,), name="sourcelab-figures")
        self._process.start()
        child.close()
        self._lost = False
        self._waiting = 0  # requests whose answer was not read

    @property
    def usable(self) -> bool:
        """False once the renderer failed or died."""
        return not self._lost

    def start_figures(self, result, *, n_jobs: int, **options) -> _Pending:
        """Start drawing ``result``'s figure set as PNG with ``n_jobs`` workers forked from the
        warmed process.

        Parameters
        ----------
        result : AnalysisResult
        n_jobs : int
            Drawing workers.
        **options
            Further keywords of :func:`~.figure_set.result_figures` (none: the output writer's
            figure set).

        Returns
        -------
        _Pending
            Pass it to :meth:`finish_figures`.
        """
        return self.submit(_result_figures, result, n_jobs, options)

    def finish_figures(self, pending: _Pending) -> dict | None:
        """The figure set started by :meth:`start_figures`, and the renderer's volume lookups
        (~1 CPU-s each to build) copied into this process for the NIfTI maps.

        Returns
        -------
        dict of str to bytes | None
            None when the renderer is unusable (its warm-up failed, or it died): the caller
            draws in its own process.
        """
        try:
            pngs = pending.result()
            from . import geometry

            geometry.VOLUME_MAPS.update(self.submit(_volume_maps).result())
            return pngs
        except (EOFError, OSError, _WarmUpError) as exc:
            log.info("warm figure renderer unusable (%r): drawing in this process", exc)
            self._lost = True
            return None

    def submit(self, func, *args, **kwargs) -> _Pending:
        """Start ``func(*args, **kwargs)`` in the warmed process (after its warm-up); read the
        answer with ``.result()`` before the next request.

        Returns
        -------
        _Pending
        """
        try:
            self._conn.send((func, args, kwargs))
        except OSError:  # the process is gone: the answer reads as the end of the pipe
            self._lost = True
            self._conn.close()
        else:
            self._waiting += 1
        return _Pending(self)

    def close(self, *, abort: bool = False) -> None:
        """Stop the renderer process: at once when ``abort`` (the caller failed: nothing more
        will be asked, so its warm-up is not waited for) or when an answer is still awaited
        (the caller failed meanwhile); otherwise once it has finished what it was asked."""
        if abort or self._waiting:
            self._process.terminate()
        elif not self._conn.closed:
            with contextlib.suppress(OSError):
                self._conn.send(None)
        self._conn.close()
        self._process.join(timeout=10)
        if self._process.is_alive():
            self._process.terminate()
            self._process.join()


@contextlib.contextmanager
def warm_renderer(enabled: bool = True):
    """Warm a figure renderer in a forked process for the duration of the block.

    Use it around an analysis whose figures will be written: the renderer's warm-up runs on a
    core the analysis leaves idle.  Nothing happens when ``enabled`` is false, when the figure
    set would be drawn in one process anyway (:func:`figure_jobs` is 1: one
    core, no ``fork``, inside a worker process) or inside another such block.

    Parameters
    ----------
    enabled : bool
        False: do nothing (e.g. figures not requested).

    Yields
    ------
    WarmRenderer | None
        The renderer, or None when none was started.
    """
    global _ACTIVE
    if not enabled or _ACTIVE is not None or figure_jobs() < 2:
        yield None
        return
    renderer = WarmRenderer()
    _ACTIVE = renderer
    try:
        yield renderer
    except BaseException:  # e.g. a refused input: exit without waiting for the warm-up
        _ACTIVE = None
        renderer.close(abort=True)
        raise
    _ACTIVE = None
    renderer.close()
