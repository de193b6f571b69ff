"""Run the analysis for every recording of a batch: resumable, streamed, on any engine.

Output folder layout::

    OUT/<name>/                    one folder per recording (as ``sourcelab analyze`` writes it)
    OUT/group_roi_table.tsv        every recording's ROI table, with recording/participant/age
    OUT/group_sensor_table.tsv     the same for the sensor tables
    OUT/group_*.parquet            the same as Parquet, when pyarrow is installed
    OUT/batch_status.tsv           one line per recording: done / skipped / failed, seconds, message
    OUT/failures.tsv               one line per failed recording (header only when none failed)

Memory stays flat as the cohort grows: a worker keeps one recording at a time and returns a small
:class:`Outcome`; the group tables are appended from the per-recording TSV files in input order.
"""

from __future__ import annotations

import contextlib
import functools
import json
import logging
import os
import sys
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

from ..config import AnalysisConfig
from ..errors import InputError
from ..provenance import atomic_write_text, prepare_output_root, sha256_file
from .engines import Engine, SerialEngine, run_unordered
from .inputs import BatchItem

log = logging.getLogger("sourcelab")

#: Columns put in front of every group table.
ID_COLUMNS = ("recording", "participant", "age")
STATUS_COLUMNS = ("recording", "participant", "path", "status", "seconds", "peak_rss_mb", "message")
DONE, SKIPPED, FAILED = "done", "skipped", "failed"


@dataclass(frozen=True)
class Task:
    """Everything a worker needs for one recording (small and picklable)."""

    path: str
    out_dir: str
    name: str
    participant: str
    age: float | None
    config: AnalysisConfig
    norms: str | None = None
    condition: str | None = None
    figures: bool = False
    report: bool = False
    exports: bool = False
    force: bool = False
    command: tuple[str, ...] = ()


@dataclass(frozen=True)
class Outcome:
    """What a worker hands back for one recording.

    Attributes
    ----------
    status : {"done", "skipped", "failed"}
        ``skipped``: outputs with the same input sha256, fingerprint and parameters existed.
    seconds : float
        Wall time in the worker, s.
    peak_rss_mb : float
        Peak resident memory of the worker process so far, MiB.
    message : str
        One line: why it failed, or how many warnings the analysis recorded, or empty.
    """

    name: str
    participant: str
    path: str
    status: str
    seconds: float = 0.0
    peak_rss_mb: float = float("nan")
    message: str = ""
    worker: str = ""


def _peak_rss_mb() -> float:
    """Peak resident memory of this process, MiB.

    Linux: ``VmHWM`` from ``/proc/self/status`` (reset at exec; ``ru_maxrss`` is not, so a
    spawned worker would report its parent's peak).  Elsewhere ``ru_maxrss``.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0
    except (OSError, ValueError, IndexError):
        pass
    try:
        import resource
    except ImportError:  # pragma: no cover - Windows
        return float("nan")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / (1024.0**2 if sys.platform == "darwin" else 1024.0)


def input_sha256(path: str | Path) -> str:
    """sha256 of a recording as :func:`sourcelab.intake.read_recording` records it.

    Header and data files are combined for BrainVision/EEGLAB.

    Parameters
    ----------
    path : str | Path
        Recording file, or a BIDS folder resolved to its one recording.

    Returns
    -------
    str
        Hexadecimal sha256 digest (64 characters).
    """
    from ..intake import files

    p = Path(path)
    if p.is_dir():
        p = files.bids_resolve(p)
    fmt = files.READERS.get(files._suffix(p), ("?", None))[0]
    return files.hash_files(files._companions(p, fmt))


def _plain(obj):
    """JSON round trip, so that values compare as they were stored in provenance.json."""
    from ..outputs import _json_default

    return json.loads(json.dumps(obj, default=_json_default))


@functools.lru_cache(maxsize=4)
def _norms(path: str, mtime_ns: int):
    """Norms read once per worker process (keyed by path and modification time)."""
    from ..norms import read_norms

    return read_norms(path)


@functools.lru_cache(maxsize=4)
def _fingerprint(config: AnalysisConfig):
    from ..analysis import fingerprint_for

    return fingerprint_for(config)  # loads the head model once per worker (cached)


def is_up_to_date(task: Task) -> bool:
    """True when ``task.out_dir`` holds this recording's outputs from the same pipeline.

    Compared: the recording's sha256, the pipeline fingerprint, the effective parameters, the
    norms file's sha256, age and condition; and the presence of the tables (and of figures,
    report and maps when asked for).

    Parameters
    ----------
    task : Task
        One recording's batch task.

    Returns
    -------
    bool
        ``False`` also when the stored provenance cannot be read or parsed.
    """
    out = Path(task.out_dir)
    need = ["roi_table.tsv", "sensor_table.tsv", "provenance.json"]
    need += ["figures"] if task.figures else []
    need += ["report.html"] if task.report else []
    need += ["maps"] if task.exports else []
    if not all((out / n).exists() for n in need):
        return False
    try:
        prov = json.loads((out / "provenance.json").read_text(encoding="utf-8"))
        from ..provenance import Fingerprint

        fp = Fingerprint.from_dict(prov["fingerprint"])
        if fp.differences(_fingerprint(task.config)):
            return False
        if prov["parameters"] != _plain(task.config.to_dict()):
            return False
        if prov["inputs"]["recording"]["sha256"] != input_sha256(task.path):
            return False
        old_norms = (prov["inputs"].get("norms") or {}).get("sha256")
        new_norms = sha256_file(task.norms) if task.norms else None
        if (old_norms or None) != new_norms:
            return False
        rec = prov.get("recording", {})
        return rec.get("age") == task.age and rec.get("condition") == task.condition
    except (OSError, ValueError, KeyError, TypeError, InputError):
        return False


def process_one(task: Task) -> Outcome:
    """Analyse one recording and write its folder; never raises for a bad recording.

    This is the function every engine runs per recording.  The head model, the inverse operator
    and the norms are cached in the worker process, so they are loaded once per worker.

    Parameters
    ----------
    task : Task
        One recording's batch task (input path, output folder, config, age, norms, options).

    Returns
    -------
    Outcome
        Status ``"done"``, ``"skipped"`` (outputs up to date) or ``"failed"`` (with a one-line
        message), wall time in s and peak resident memory in MB.
    """
    from ..analysis import analyze

    t0 = time.perf_counter()
    base = dict(
        name=task.name,
        participant=task.participant,
        path=task.path,
        worker=f"{os.uname().nodename}:{os.getpid()}" if hasattr(os, "uname") else "",
    )
    try:
        if not task.force and is_up_to_date(task):
            return Outcome(
                status=SKIPPED, seconds=time.perf_counter() - t0, peak_rss_mb=_peak_rss_mb(), **base
            )
        norms = None
        if task.norms:
            if task.age is None:
                raise InputError(
                    f"no age for participant {task.participant!r} "
                    "(z-scores need one: give --participants with an age column)"
                )
            norms = _norms(task.norms, os.stat(task.norms).st_mtime_ns)
        result = analyze(
            task.path, config=task.config, age=task.age, norms=norms, condition=task.condition
        )
        result.write(
            task.out_dir,
            figures=task.figures,
            report=task.report,
            maps=task.exports,
            command=list(task.command),
        )
        n_warn = len(result.warnings)
        del result
        if task.figures:
            import matplotlib.pyplot as plt

            plt.close("all")
        note = (
            f"{n_warn} warning{'s' if n_warn != 1 else ''} (see provenance.json)" if n_warn else ""
        )
        return Outcome(
            status=DONE,
            seconds=time.perf_counter() - t0,
            peak_rss_mb=_peak_rss_mb(),
            message=note,
            **base,
        )
    except Exception as exc:  # one bad recording never stops the batch
        text = str(exc).strip().splitlines()
        msg = " ".join(text[0].split()) if text else type(exc).__name__
        if not isinstance(exc, InputError):
            msg = f"{type(exc).__name__}: {msg}"
            log.debug("batch: %s failed", task.path, exc_info=True)
        return Outcome(
            status=FAILED,
            seconds=time.perf_counter() - t0,
            peak_rss_mb=_peak_rss_mb(),
            message=msg,
            **base,
        )


class _GroupTable:
    """A tidy table appended one recording at a time (TSV, and Parquet when pyarrow is present).

    Written under temporary names and renamed by :meth:`close`.
    """

    def __init__(self, out: Path, stem: str, *, parquet: bool):
        self.path = out / f"{stem}.tsv"
        self.tmp = out / f".{stem}.tsv.tmp-{os.getpid()}"
        self._f = open(self.tmp, "w", encoding="utf-8", newline="")
        self._header: list[str] | None = None
        self._pq = None
        self.pq_path = out / f"{stem}.parquet" if parquet else None
        self.pq_tmp = out / f".{stem}.parquet.tmp-{os.getpid()}" if parquet else None
        self.n_rows = 0
        self.sidecar: dict | None = None

    def append(self, table, ident: dict, *, sidecar: dict | None = None) -> None:
        for k, v in reversed(list(ident.items())):
            table.insert(0, k, v)
        if self._header is None:
            self._header = list(table.columns)
            if sidecar is not None:  # the first recording's column descriptions, and ours
                self.sidecar = {
                    **{c: {"Description": _IDENT_NOTES[c]} for c in ident},
                    **{c: d for c, d in sidecar.items() if c in self._header},
                }
                self.sidecar["age"]["Units"] = "years"
                from .. import __version__

                # marks the file as sourcelab's (a rerun may replace it)
                self.sidecar["GeneratedBy"] = [{"Name": "sourcelab", "Version": __version__}]
            self._f.write("\t".join(self._header) + "\n")
        table = table.reindex(columns=self._header)
        table.to_csv(self._f, sep="\t", index=False, header=False, na_rep="", float_format="%.6g")
        if self.pq_path is not None:
            try:
                self._append_parquet(table.astype({"age": "float64"}))
            except (ImportError, TypeError, ValueError) as exc:  # pyarrow's errors subclass these
                log.warning(
                    "batch: %s: Parquet copy dropped (%s); the TSV is complete",
                    self.pq_path.name,
                    " ".join(str(exc).split())[:200],
                )
                if self._pq is not None:
                    self._pq.close()
                    self._pq = None
                self.pq_path = None
        self.n_rows += len(table)

    def _append_parquet(self, table) -> None:
        import pyarrow as pa
        import pyarrow.parquet as pq

        if self._pq is None:
            self._schema = pa.Table.from_pandas(table, preserve_index=False).schema
            self._pq = pq.ParquetWriter(self.pq_tmp, self._schema)
        self._pq.write_table(pa.Table.from_pandas(table, schema=self._schema, preserve_index=False))

    def close(self, *, keep: bool) -> None:
        self._f.close()
        if self._pq is not None:
            self._pq.close()
        if keep and self._header is not None:
            os.replace(self.tmp, self.path)
            if self.sidecar is not None:
                atomic_write_text(
                    self.path.with_suffix(".json"),
                    json.dumps(self.sidecar, indent=2, ensure_ascii=False) + "\n",
                )
            if self._pq is not None and self.pq_path is not None:
                os.replace(self.pq_tmp, self.pq_path)
        for p in (self.tmp, self.pq_tmp):
            if p is not None:
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(p)


def _has_pyarrow() -> bool:
    try:
        import pyarrow
        import pyarrow.parquet  # noqa: F401
    except ImportError:
        return False
    return True


@dataclass(frozen=True)
class BatchSummary:
    """Outcome of :func:`run_batch`.

    Attributes
    ----------
    out : Path
    outcomes : tuple of Outcome
        In input order.
    tables : dict
        ``"roi"``/``"sensor"`` (and ``"roi_parquet"``/``"sensor_parquet"``) -> written path.
    seconds : float
        Wall time of the whole batch, s.
    engine : str
    """

    out: Path
    outcomes: tuple[Outcome, ...]
    tables: dict = field(default_factory=dict)
    seconds: float = 0.0
    engine: str = ""

    def count(self, status: str) -> int:
        """Number of recordings with this status.

        Parameters
        ----------
        status : {"done", "skipped", "failed"}
            Outcome status.

        Returns
        -------
        int
            How many outcomes have it.
        """
        return sum(o.status == status for o in self.outcomes)

    @property
    def failures(self) -> tuple[Outcome, ...]:
        return tuple(o for o in self.outcomes if o.status == FAILED)

    @property
    def exit_code(self) -> int:
        """0 when every recording is done or up to date, 1 when any failed."""
        return 1 if self.failures else 0


def _status_tsv(outcomes: Sequence[Outcome]) -> str:
    lines = ["\t".join(STATUS_COLUMNS)]
    for o in outcomes:
        lines.append(
            "\t".join(
                [
                    o.name,
                    o.participant,
                    o.path,
                    o.status,
                    f"{o.seconds:.3f}",
                    f"{o.peak_rss_mb:.0f}",
                    " ".join(o.message.split()),
                ]
            )
        )
    return "\n".join(lines) + "\n"


def run_batch(
    items: Sequence[BatchItem],
    out: str | Path,
    *,
    config: AnalysisConfig | None = None,
    norms: str | Path | None = None,
    condition: str | None = None,
    engine: Engine | None = None,
    force: bool = False,
    figures: bool = False,
    report: bool = False,
    exports: bool = False,
    progress: bool | None = None,
    command: Sequence[str] | None = None,
) -> BatchSummary:
    """Analyse every recording; one folder each, group tables, status and failures files.

    Parameters
    ----------
    items : sequence of BatchItem
        From :func:`sourcelab.batch.discover`.
    out : str | Path
        Batch output folder (created).
    config : AnalysisConfig, optional
    norms : str | Path, optional
        Norms file; every recording then needs an age.
    condition : str, optional
        Recording condition, passed to the norms check.
    engine : Engine, optional
        From :func:`sourcelab.batch.make_engine`; default serial in this process.
    force : bool
        Recompute recordings whose outputs are up to date.
    figures, report, exports : bool
        Write each recording's figures, HTML report and source maps (``maps/``: STC, GIfTI,
        NIfTI); slower and larger, off by default.
    progress : bool | None
        tqdm progress bar on stderr; None shows it only on a terminal.
    command : sequence of str, optional
        Command line recorded in each recording's provenance; default ``sys.argv``.

    Returns
    -------
    BatchSummary
        ``exit_code`` 0 when all recordings are done or up to date, 1 when any failed.
    """
    from tqdm import tqdm

    t0 = time.perf_counter()
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError("output path exists and is not a folder", path=out)
    if not items:
        raise InputError("no recordings to analyse")
    if norms is not None:
        from ..norms import read_norms

        norms = str(Path(norms).resolve())
        read_norms(norms)  # a bad norms file is an input error, not one failure per recording
    config = config or AnalysisConfig()
    out = prepare_output_root(out, kind="batch")  # new, empty or a sourcelab batch folder
    command = tuple(command if command is not None else sys.argv)
    tasks = [
        Task(
            path=str(it.path),
            out_dir=str((out / it.name).resolve()),
            name=it.name,
            participant=it.participant,
            age=it.age,
            config=config,
            norms=norms,
            condition=condition,
            figures=figures,
            report=report,
            exports=exports,
            force=force,
            command=command,
        )
        for it in items
    ]
    engine = engine or SerialEngine()
    parquet = _has_pyarrow()
    groups = {k: _GroupTable(out, f"group_{k}_table", parquet=parquet) for k in ("roi", "sensor")}
    results: dict[int, Outcome] = {}
    next_i = 0
    ok = False
    bar = tqdm(
        total=len(tasks),
        desc="sourcelab batch",
        unit="rec",
        file=sys.stderr,
        disable=(not progress) if progress is not None else None,
        dynamic_ncols=True,
    )
    try:
        for i, res, err in run_unordered(engine, process_one, tasks):
            if err is not None:  # the worker itself died or the engine failed
                t = tasks[i]
                res = Outcome(
                    name=t.name,
                    participant=t.participant,
                    path=t.path,
                    status=FAILED,
                    message=f"worker error: {type(err).__name__}: "
                    f"{' '.join(str(err).split())[:200]}",
                )
            results[i] = res
            if res.status == FAILED:
                log.info("batch: %s failed: %s", res.name, res.message)
            bar.update(1)
            bar.set_postfix(failed=sum(r.status == FAILED for r in results.values()), refresh=False)
            while next_i in results:  # group tables in input order, streamed from disk
                _append_group(groups, results[next_i], items[next_i], tasks[next_i])
                next_i += 1
        ok = True
    finally:
        bar.close()
        for g in groups.values():
            g.close(keep=ok)
    outcomes = tuple(results[i] for i in range(len(tasks)))
    atomic_write_text(out / "batch_status.tsv", _status_tsv(outcomes))
    atomic_write_text(
        out / "failures.tsv", _status_tsv([o for o in outcomes if o.status == FAILED])
    )
    tables = {}
    for k, g in groups.items():
        if g.path.exists() and g.n_rows:
            tables[k] = g.path
            if g.pq_path is not None and g.pq_path.exists():
                tables[k + "_parquet"] = g.pq_path
    return BatchSummary(
        out=out,
        outcomes=outcomes,
        tables=tables,
        seconds=time.perf_counter() - t0,
        engine=engine.describe(),
    )


#: Descriptions of the columns the group tables add in front of each recording's rows.
_IDENT_NOTES = {
    "recording": "recording (file name without its suffix)",
    "participant": "participant identifier (participants.tsv), if given",
    "age": "participant age, if given",
}


def _append_group(groups: dict, outcome: Outcome, item: BatchItem, task: Task) -> None:
    import pandas as pd

    if outcome.status == FAILED:
        return
    ident = {
        "recording": item.name,
        "participant": item.participant,
        "age": float("nan") if item.age is None else item.age,
    }
    for kind, g in groups.items():
        path = Path(task.out_dir) / f"{kind}_table.tsv"
        try:
            table = pd.read_csv(path, sep="\t", keep_default_na=False, na_values=[""])
        except (OSError, ValueError) as exc:
            log.warning(
                "batch: %s: cannot read %s for the group table (%s)", item.name, path.name, exc
            )
            continue
        sidecar = None
        if g.sidecar is None and path.with_suffix(".json").is_file():
            with contextlib.suppress(OSError, ValueError):
                sidecar = json.loads(path.with_suffix(".json").read_text(encoding="utf-8"))
        g.append(table, ident, sidecar=sidecar if isinstance(sidecar, dict) else None)
