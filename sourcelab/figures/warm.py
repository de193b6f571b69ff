"""A figure renderer warmed while the analysis runs.

The analysis uses about one core; on a machine with more, a process forked before it starts
(:func:`warm_renderer`) imports the plotting libraries (matplotlib, nilearn: ~1-2 s) and fills
the figure caches that do not depend on the recording (the template's volume lookup, the
surface layout's face raster, the glass-brain layouts) meanwhile.  A figure set drawn as PNG
inside the block (:func:`sourcelab.figures.result_figures` with ``n_jobs > 1``, as the output
writer draws it) is then drawn by workers forked from that process, which share those caches,
and the PDF report is written there too, as soon as the figures it shows are drawn (while the
workers draw the others).  The source and sensor power maps are drawn there while the analysis
still runs (:func:`early_maps`: the analysis hands them over as soon as it has them) and taken
over by the figure set when their arguments are the same.  The figures are the same function
calls on the same arguments as without it, so the files are identical (tested); where processes
cannot be forked it does nothing, and a renderer that fails or dies leaves the drawing to the
calling process.
"""

from __future__ import annotations

import contextlib
import logging
import queue
import threading

from .._threads import available_cores
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
    return max(1, min(4, available_cores()))


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
        dpi = figure_set.FIGURE_DPI
        layout = {"resolution": 2, "display_mode": "lyrz", "title": True, "dpi": dpi}
        brain.warm_caches(brain.glass_brain, layout)
        brain.warm_caches(brain.surface_views, layout)
        flat = np.ones(geometry.load_head_model().n_src)
        # one glass brain per default layout (power, z) builds the figure kept for it
        for scale in (power_scale(flat, measure="absolute"), z_scale()):
            brain.glass_brain_png(flat, scale=scale, title="warm", resolution=2, dpi=dpi)
        sensor.sensor_info()


#: In the renderer process: the result and figure set of the last :func:`_result_figures`.
_LAST: dict = {}


def _result_figures(result, n_jobs: int, options: dict, side=None) -> tuple[dict, bool]:
    """In the renderer process: the result's figure set as PNG (drawn by forked workers; those
    :func:`_early_figures` drew with the same arguments are taken from there), and whether
    ``side`` ran (``(needs, func, args)``: ``func(result, pngs, *args)`` runs here as soon as
    the figures named by ``needs(result, names)`` are drawn, while the workers draw the rest)."""
    from . import figure_set

    dpi = int(options.get("dpi", figure_set.FIGURE_DPI))
    jobs = figure_set.queued_figures(result, **options)
    then = None
    if side is not None:
        needs, func, args = side
        then = (needs(result, [job[0] for job in jobs]), lambda got: func(result, got, *args))
    pngs = figure_set._run(jobs, as_png=True, dpi=dpi, n_jobs=n_jobs, drawn=dict(_EARLY), then=then)
    _EARLY.clear()
    _LAST.update(result=result, figures=pngs)
    return pngs, side is not None


#: In the renderer process: figures drawn by :func:`_early_figures`, by name:
#: ``(function, args, kwargs, png)``.
_EARLY: dict = {}
#: In the renderer process: its end of the pipe (a waiting request stops the early drawing).
_CONN = None


class _Early:
    """What the analysis knows once it has the source maps: the attributes of a result that the
    power maps of the figure set read (no tables yet, so no z figures are queued)."""

    def __init__(self, config, ch_names, source_abs, source_rel, sensor_abs, sensor_rel):
        import pandas as pd

        self.config = config
        self.ch_names = tuple(ch_names)
        self.source_abs, self.source_rel = source_abs, source_rel
        self.sensor_abs, self.sensor_rel = sensor_abs, sensor_rel
        self.roi_table = pd.DataFrame(columns=["atlas", "measure"])
        self.sensor_table = pd.DataFrame(columns=["measure"])
        self.quality = None

    @property
    def bands(self):
        return self.config.bands

    def source_map(self, band: str, measure: str = "absolute"):
        i = self.bands.names.index(band)
        return (self.source_abs if measure == "absolute" else self.source_rel)[i]


def _early_figures(early: _Early, options: dict) -> int:
    """In the renderer process: draw the figures of the set that ``early`` allows (with the
    keywords ``options`` of :func:`~.figure_set.result_figures`), one by one, until a new
    request arrives; returns how many were drawn."""
    from . import figure_set

    jobs = figure_set.queued_figures(early, **options)
    dpi = int(options.get("dpi", figure_set.FIGURE_DPI))
    with figure_set.thread_limits(), figure_set._gc_frozen():
        for key, f, a, k in jobs:
            if _CONN is not None and _CONN.poll():  # the figure set is asked for: stop here
                break
            _EARLY[key] = (f, a, k, figure_set._render(f, a, k, dpi))
    return len(_EARLY)


def early_maps(config, ch_names, source_abs, source_rel, sensor_abs, sensor_rel, **options):
    """Hand the power maps to the warmed renderer of the enclosing :func:`warm_renderer` block
    (nothing happens outside one): it draws their figures while the analysis goes on.

    Called by the analysis once it has them; the arrays must be those the result will hold
    (figures are reused only for identical arguments).

    Parameters
    ----------
    config : AnalysisConfig
    ch_names : sequence of str
    source_abs, source_rel : ndarray, shape (n_bands, n_src)
        As :attr:`AnalysisResult.source_abs` and ``source_rel`` will hold them.
    sensor_abs, sensor_rel : ndarray, shape (n_bands, n_ch)
    **options
        Keywords of :func:`~.figure_set.result_figures` (none: the output writer's set).

    Returns
    -------
    _Pending | None
        The request (its answer: how many figures were drawn), or None when no renderer
        was asked.
    """
    if _ACTIVE is None or not _ACTIVE.usable:
        return None
    early = _Early(config, ch_names, source_abs, source_rel, sensor_abs, sensor_rel)
    return _ACTIVE.submit(_early_figures, early, options)


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
    global _CONN
    _CONN = conn
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
        self._reply = None

    def result(self):
        """The value the call returned (its exception is raised here); the answers of earlier
        requests are read first (and kept for them).

        Returns
        -------
        object
        """
        r = self._renderer
        while self._reply is None:
            if r._conn.closed or not r._pending:
                raise EOFError("the renderer process is gone")
            r._pending.pop(0)._reply = r._conn.recv()
            r._waiting -= 1
        ok, value = self._reply
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
        # requests are sent by a thread: a large one (a result, the early maps) waits in the
        # pipe until the renderer reads it (after its warm-up), not the caller
        self._outbox: queue.SimpleQueue = queue.SimpleQueue()
        self._sender = threading.Thread(target=self._send_all, daemon=True)
        self._sender.start()
        self._waiting = 0  # requests whose answer was not read
        self._pending: list = []  # their _Pending, oldest first
        self._volumes = None  # the request for the volume lookups (start_figures)
        #: Whether the ``side`` task of the last :meth:`finish_figures` ran in the renderer.
        self.side_ran = False

    @property
    def usable(self) -> bool:
        """False once the renderer failed or died."""
        return not self._lost

    def start_figures(self, result, *, n_jobs: int, side=None, **options) -> _Pending:
        """Start drawing ``result``'s figure set as PNG with ``n_jobs`` workers forked from the
        warmed process, after copying its volume lookups here (:meth:`volume_maps`).

        Parameters
        ----------
        result : AnalysisResult
        n_jobs : int
            Drawing workers.
        side : (callable, callable, tuple) | None
            ``(needs, func, args)``: ``func(result, pngs, *args)`` runs in the renderer as soon
            as the figures named by ``needs(result, names)`` (from the queued ``names``) are
            drawn, while the workers draw the others (e.g. the PDF report).  Module-level
            functions (they are sent to the renderer by name).
        **options
            Further keywords of :func:`~.figure_set.result_figures` (none: the output writer's
            figure set).

        Returns
        -------
        _Pending
            Pass it to :meth:`finish_figures`.
        """
        # the lookups first, read here: a large answer sent while this process sends the
        # result would leave both waiting for the other to read
        self._volumes = self.submit(_volume_maps)
        self.volume_maps()
        return self.submit(_result_figures, result, n_jobs, options, side)

    def volume_maps(self) -> bool:
        """Copy the renderer's volume lookups (~1 CPU-s each to build) into this process for
        the NIfTI maps (asked for by :meth:`start_figures`, which waits for them).

        Returns
        -------
        bool
            False when the renderer is unusable.
        """
        from . import geometry

        if self._volumes is None:
            return self.usable
        try:
            geometry.VOLUME_MAPS.update(self._volumes.result())
            return True
        except (EOFError, OSError, _WarmUpError) as exc:
            log.info("warm figure renderer unusable (%r)", exc)
            self._lost = True
            return False

    def finish_figures(self, pending: _Pending) -> dict | None:
        """The figure set started by :meth:`start_figures`, its volume lookups copied into this
        process (see :meth:`volume_maps`); :attr:`side_ran` tells whether its ``side`` task ran.

        Returns
        -------
        dict of str to bytes | None
            None when the renderer is unusable (its warm-up failed, or it died): the caller
            draws in its own process.
        """
        self.side_ran = False
        if not self.volume_maps():
            return None
        try:
            pngs, self.side_ran = pending.result()
            return pngs
        except (EOFError, OSError, _WarmUpError) as exc:
            log.info("warm figure renderer unusable (%r): drawing in this process", exc)
            self._lost = True
            return None

    def submit(self, func, *args, **kwargs) -> _Pending:
        """Start ``func(*args, **kwargs)`` in the warmed process (after its warm-up and the
        requests before it); read the answer with ``.result()``.

        Returns
        -------
        _Pending
        """
        pending = _Pending(self)
        if not self._lost and not self._conn.closed:
            self._outbox.put((func, args, kwargs))
            self._waiting += 1
            self._pending.append(pending)
        return pending

    def _send_all(self) -> None:
        """The sending thread: each request put in the outbox, in order, until the stop mark."""
        while True:
            msg = self._outbox.get()
            if msg is _STOP:
                return
            try:
                self._conn.send(msg)
            except (OSError, ValueError):  # the process is gone (or the pipe closed)
                self._lost = True
                return

    def close(self, *, abort: bool = False) -> None:
        """Stop the renderer process: at once when ``abort`` (the caller failed: nothing more
        will be asked, so its warm-up is not waited for) or when an answer is still awaited
        (the caller failed meanwhile); otherwise once it has finished what it was asked."""
        if abort or self._waiting:
            self._process.terminate()
        else:
            self._outbox.put(None)  # the renderer's end
        self._outbox.put(_STOP)
        self._sender.join(timeout=10)
        self._conn.close()
        self._process.join(timeout=10)
        if self._process.is_alive():
            self._process.terminate()
            self._process.join()


#: Put in a renderer's outbox: its sending thread ends.
_STOP = object()


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
