"""Cohorts: analyse many recordings, resumably, serially, on local processes or on Dask.

Public API::

    items = discover(["data/*.edf"], participants="participants.tsv")   # -> tuple[BatchItem]
    with make_engine("processes", workers=2) as engine:                 # or "serial", "dask"
        summary = run_batch(items, "out/", config=AnalysisConfig(), engine=engine)
    summary.exit_code, summary.failures, summary.tables["roi"]

The same per-recording function (:func:`process_one`, returning a small :class:`Outcome`) runs
on every engine; the head model, inverse operator and norms are cached once per worker process.
"""

from .engines import ENGINES, DaskEngine, Engine, ProcessEngine, SerialEngine, make_engine
from .inputs import BatchItem, discover, expand_inputs
from .runner import BatchSummary, Outcome, Task, input_sha256, is_up_to_date, process_one, run_batch

__all__ = [
    "ENGINES",
    "BatchItem",
    "BatchSummary",
    "DaskEngine",
    "Engine",
    "Outcome",
    "ProcessEngine",
    "SerialEngine",
    "Task",
    "discover",
    "expand_inputs",
    "input_sha256",
    "is_up_to_date",
    "make_engine",
    "process_one",
    "run_batch",
]
