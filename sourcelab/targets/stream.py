"""Live ROI feedback over Lab Streaming Layer: read an EEG stream, publish the target's value.

:class:`StreamProcessor` is the pure part (chunks and time stamps in, rows out) and applies the
target exactly as ``replay`` does (:class:`~sourcelab.targets.replay.OnlineTarget`, then
:class:`~sourcelab.targets.live.LiveValue`).  :func:`run_stream` is the LSL edge: an
``mne_lsl.stream.StreamLSL`` inlet read by manual acquisition (every pulled chunk is processed
once, in order, in this thread) and an ``mne_lsl.lsl.StreamOutlet`` publishing one sample per
step (default 4 Hz) with the channels of :data:`OUTPUT_CHANNELS`.  Each published sample carries
as LSL time stamp the acquisition time of the newest input sample in its window, so a recorder
can align feedback and EEG.

What is flagged (``clean`` = 0, values NaN, a bit in ``status``, one line on the console when the
condition starts and when it ends):

* warm-up (2 s after a start or restart), artefact (peak-to-peak above ``reject_uv``);
* a **flat** channel (0.5-45 Hz peak-to-peak below 0.5 µV in its recorded reference);
* a **missing** channel (a 10-20 site the stream does not carry; matched as for files by
  :func:`sourcelab.intake.channels.match_channels`);
* a **dropped** input (no sample for ``drop_after_s``): flagged rows keep coming at the step rate
  until data return; then the filters restart (new warm-up);
* a **sampling-rate mismatch**: the rate measured from the time stamps over the last
  :data:`RATE_SPAN_S` seconds differs from the declared rate by more than half the offline
  frequency resolution at the highest band edge used (``1/(2 epoch_s)`` Hz, i.e. 0.25 Hz at
  2-s epochs: a larger error moves the band edges by more than the analysis can resolve).  A
  declared rate other than the target's design rate is not an error: the band-pass is
  re-designed for it, as ``replay`` does for a file.

Network: LSL finds streams by multicast and broadcast.  To keep all traffic on this machine, point
the ``LSLAPICFG`` environment variable at a file like :data:`LOOPBACK_CONFIG` before starting
(:func:`write_loopback_config` writes one).
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from .definition import TargetDefinition
from .live import LiveValue
from .replay import FLAT_UV, WARMUP_S, OnlineTarget

log = logging.getLogger("sourcelab")

#: Channels of the published stream, in order.
OUTPUT_CHANNELS = ("power", "z", "clean", "smoothed", "smoothed_z", "threshold_met", "status")
#: Status bits of the ``status`` channel.
STATUS = {"warmup": 1, "artefact": 2, "flat": 4, "missing": 8, "dropped": 16, "rate": 32}
#: Span of time stamps (s) over which the sampling rate is measured.  Chunked LSL time stamps
#: jitter by a few ms; over 4 s that is < 0.25 % of the rate.
RATE_SPAN_S = 4.0
#: An LSL configuration that keeps discovery and data on the loopback interface (liblsl
#: ``api_config.cpp``: ResolveScope = machine uses only MachineAddresses with TTL 0; KnownPeers
#: adds unicast queries to the listed hosts; IPv6 = disable keeps to IPv4; log level -1 keeps
#: liblsl's console output to warnings and errors).  The watchdog keys shorten the reconnection
#: of an inlet whose outlet went away unnoticed: liblsl re-resolves the stream once no data has
#: come for ``WatchdogTimeThreshold`` s, checked every ``WatchdogCheckInterval`` s (15 s and
#: 15 s by default, from memory; with the defaults a restarted amplifier came back after
#: 16-30 s in 3 of 5 runs here, measured).
LOOPBACK_CONFIG = """\
; sourcelab: keep Lab Streaming Layer on this machine (loopback only)
[ports]
IPv6 = disable

[multicast]
ResolveScope = machine
MachineAddresses = {127.0.0.1}

[lab]
KnownPeers = {127.0.0.1}

[tuning]
WatchdogCheckInterval = 1.0
WatchdogTimeThreshold = 2.0

[log]
level = -1
"""


def write_loopback_config(path) -> str:
    """Write :data:`LOOPBACK_CONFIG` to ``path``; set ``LSLAPICFG`` to it before using LSL.

    Parameters
    ----------
    path : str | Path
        The configuration file to write (overwritten).

    Returns
    -------
    str
        ``path`` as text, for ``os.environ["LSLAPICFG"]``.
    """
    from pathlib import Path

    Path(path).write_text(LOOPBACK_CONFIG, encoding="utf-8")
    return str(path)


def unit_scale(unit_mul: int | None, unit: str) -> float:
    """Factor to µV for one channel: ``unit`` "uV"/"V" forces, "auto" uses the stream's unit.

    Parameters
    ----------
    unit_mul : int or None
        Power of ten of the channel's declared unit relative to volts (MNE's ``unit_mul``:
        0 for V, -6 for µV); only read for ``unit="auto"``.
    unit : {"auto", "uV", "V"}

    Returns
    -------
    float
        Multiply stream values by this to get µV.

    Raises
    ------
    InputError
        For another ``unit``, or ``"auto"`` when the stream declares no unit.
    """
    if unit == "uV":
        return 1.0
    if unit == "V":
        return 1e6
    if unit != "auto":
        raise InputError(f"unit: {unit!r} is not one of auto, uV, V")
    if unit_mul is None:
        raise InputError("the stream declares no channel units; pass --unit uV or --unit V")
    return 10.0 ** (int(unit_mul) + 6)


@dataclass
class Row:
    """One published sample: LSL time stamp and the values of :data:`OUTPUT_CHANNELS`."""

    timestamp: float
    values: np.ndarray


@dataclass
class StreamStats:
    """What a run did: rows by status, latency per update (ms), messages."""

    rows: int = 0
    clean: int = 0
    by_status: dict = field(default_factory=dict)
    latency_ms: list = field(default_factory=list)
    age_ms: list = field(default_factory=list)
    messages: list = field(default_factory=list)

    def summary(self) -> dict:
        """Counts and latency percentiles of the run.

        Returns
        -------
        dict
            ``rows``, ``clean``, ``by_status``, ``latency_ms_median`` / ``latency_ms_p95`` and
            ``age_ms_median`` / ``age_ms_p95`` (ms; NaN without data) and ``messages`` (count).
        """
        lat = np.asarray(self.latency_ms)
        age = np.asarray(self.age_ms)

        def q(a, p):
            return float(np.percentile(a, p)) if a.size else float("nan")

        return {
            "rows": self.rows,
            "clean": self.clean,
            "by_status": dict(self.by_status),
            "latency_ms_median": q(lat, 50),
            "latency_ms_p95": q(lat, 95),
            "age_ms_median": q(age, 50),
            "age_ms_p95": q(age, 95),
            "messages": len(self.messages),
        }


class StreamProcessor:
    """Apply a target to chunks of a live stream (no I/O).

    Parameters
    ----------
    target : TargetDefinition
    ch_names : sequence of str
        The stream's channel labels.
    sfreq : float
        The stream's declared sampling rate, Hz.
    scale : ndarray, shape (n_stream_channels,) | float
        Factor from stream units to µV per channel.
    drop_after_s : float
        No sample for this long counts as a dropped input (default: two steps).
    say : callable
        Receives each one-line message.
    name : str
        Stream name used in messages.
    """

    def __init__(
        self,
        target: TargetDefinition,
        ch_names,
        sfreq: float,
        *,
        scale=1.0,
        drop_after_s: float | None = None,
        say=None,
        name: str = "input",
    ):
        from ..intake.channels import match_channels

        if not sfreq > 0:
            raise InputError(
                f"stream {name!r} has an irregular sampling rate; a regular EEG stream is needed"
            )
        self.target = target
        self.sfreq = float(sfreq)
        self.name = name
        self.say = say or (lambda msg: None)
        m = match_channels(list(ch_names))
        index = {lab: i for i, lab in enumerate(ch_names)}
        self.picks = np.array(
            [index[m.channel_map[s]] if s in m.channel_map else -1 for s in target.channels]
        )
        self.missing = tuple(m.missing)
        self.scale = np.broadcast_to(np.asarray(scale, dtype=float), (len(ch_names),))
        self.drop_after_s = float(drop_after_s if drop_after_s is not None else 2 * target.step_s)
        hi = (
            max(b[2] for b in target.bands)
            if target.measure == "relative"
            else target.band_edges[1]
        )
        self.rate_tolerance = (1.0 / (2.0 * target.fingerprint.epoch_s)) / hi
        if not math.isclose(self.sfreq, target.sfreq, rel_tol=1e-9):
            self.say(
                f"stream {name!r} runs at {self.sfreq:g} Hz, the target was designed at "
                f"{target.sfreq:g} Hz: band-pass re-designed for {self.sfreq:g} Hz"
            )
        self.online = OnlineTarget(target, self.sfreq)
        self.live = LiveValue(target)
        if self.missing:
            self.say(
                f"stream {name!r} lacks {', '.join(self.missing)}: values withheld "
                "(flagged 'missing') until a stream with all 19 sites is connected"
            )
        self._restart(first=True)

    # -- state

    def _restart(self, *, first: bool = False) -> None:
        if not first:
            self.online = OnlineTarget(self.target, self.sfreq)
            self.live.reset()
        self._ts_pending = np.zeros(0)
        self._rate_hist: list[tuple[int, float]] = []
        self._n_in = 0
        self._last_ts = None
        self._last_arrival = None
        self._dropped = False
        self._last_dropped_emit = None
        self._flat: tuple[str, ...] = ()
        self._rate_bad = False

    def _measured_rate(self) -> float | None:
        h = self._rate_hist
        if len(h) < 2 or h[-1][1] - h[0][1] < RATE_SPAN_S:
            return None
        return (h[-1][0] - h[0][0]) / (h[-1][1] - h[0][1])

    # -- input

    def push(self, data: np.ndarray, timestamps: np.ndarray, arrival: float) -> list[Row]:
        """Process one chunk.

        Parameters
        ----------
        data : ndarray, shape (n_times, n_stream_channels)
            As pulled from the inlet (stream units).
        timestamps : ndarray, shape (n_times,)
            LSL time stamps of the samples, s.
        arrival : float
            Local LSL clock when the chunk was pulled, s.

        Returns
        -------
        list of Row
            One per completed step: LSL time stamp of its last sample and the values of
            :data:`OUTPUT_CHANNELS` (power and z NaN unless clean; ``status`` bits of
            :data:`STATUS`).  A gap in the time stamps restarts the filters first.
        """
        ts = np.asarray(timestamps, dtype=float)
        if ts.size == 0:
            return []
        data = np.asarray(data, dtype=float)
        gap = None
        if self._last_ts is not None:
            d = ts[0] - self._last_ts
            if d > max(self.target.step_s, 5.0 / self.sfreq) or d <= 0:
                gap = d
        if self._dropped or gap is not None:
            since = (arrival - self._last_arrival) if self._last_arrival is not None else 0.0
            self.say(
                f"stream {self.name!r}: data back after {max(since, gap or 0):.1f} s; "
                f"filters restarted ({WARMUP_S:g}-s warm-up)"
            )
            self._restart()
        self._last_ts = float(ts[-1])
        self._last_arrival = float(arrival)
        self._rate_hist.append((self._n_in + ts.size - 1, float(ts[-1])))
        if self._n_in == 0:
            self._rate_hist.insert(0, (0, float(ts[0])))
        self._n_in += ts.size
        while len(self._rate_hist) > 2 and (
            self._rate_hist[-1][1] - self._rate_hist[1][1] >= RATE_SPAN_S
        ):
            self._rate_hist.pop(0)
        x = np.zeros((len(self.target.channels), ts.size))
        have = self.picks >= 0
        x[have] = (data[:, self.picks[have]] * self.scale[self.picks[have]]).T
        all_ts = np.concatenate([self._ts_pending, ts])
        rows = self.online.push(x)
        used = len(rows) * self.online.step
        self._ts_pending = all_ts[used:]
        rate = self._measured_rate()
        out = []
        for j, (t_end, power, z, clean) in enumerate(rows):
            status = 0
            if t_end < WARMUP_S:
                status |= STATUS["warmup"]
            flat = tuple(
                s
                for s, p in zip(self.target.channels, self.online.last_ptp)
                if p < FLAT_UV and s not in self.missing
            )
            self._note_flat(flat)
            if flat:
                status |= STATUS["flat"]
            if not clean and status == 0:
                status |= STATUS["artefact"]
            if self.missing:
                status |= STATUS["missing"]
            if rate is not None:
                self._note_rate(rate)
            if self._rate_bad:
                status |= STATUS["rate"]
            ok = clean and status == 0
            out.append(
                self._row(float(all_ts[(j + 1) * self.online.step - 1]), power, z, ok, status)
            )
        return out

    def _note_flat(self, flat) -> None:
        if flat != self._flat:
            if flat:
                self.say(
                    f"stream {self.name!r}: channel {', '.join(flat)} flat (peak-to-peak < "
                    f"{FLAT_UV:g} µV over the last {self.target.window_s:g} s); values "
                    "withheld"
                )
            else:
                self.say(
                    f"stream {self.name!r}: channel {', '.join(self._flat)} carries signal again"
                )
            self._flat = flat

    def _note_rate(self, rate: float) -> None:
        bad = abs(rate / self.sfreq - 1.0) > self.rate_tolerance
        if bad != self._rate_bad:
            if bad:
                self.say(
                    f"stream {self.name!r}: samples arrive at {rate:.1f} Hz but the stream "
                    f"declares {self.sfreq:g} Hz; values withheld (check the amplifier's "
                    "rate setting)"
                )
            else:
                self.say(f"stream {self.name!r}: sampling rate back to {rate:.1f} Hz")
            self._rate_bad = bad

    def _row(self, timestamp, power, z, ok, status) -> Row:
        if not ok:
            power = z = float("nan")
        s, sz, met = self.live.update(power, ok)
        return Row(timestamp, np.array([power, z, float(ok), s, sz, met, float(status)]))

    def idle(self, now: float) -> list[Row]:
        """Rows for a time without input.

        Flagged ``dropped`` at the step rate after ``drop_after_s`` without a sample.

        Parameters
        ----------
        now : float
            Current time on the local LSL clock, s.

        Returns
        -------
        list of Row
            Empty while data is arriving (or within one step of the last dropped row); else one
            row of NaN values with the ``dropped`` (and ``missing``) status bits.
        """
        if self._last_arrival is None or now - self._last_arrival < self.drop_after_s:
            return []
        if not self._dropped:
            self._dropped = True
            self.say(
                f"stream {self.name!r} dropped: no data for {self.drop_after_s:g} s; "
                "publishing flagged values until it returns"
            )
        if (
            self._last_dropped_emit is not None
            and now - self._last_dropped_emit < self.target.step_s
        ):
            return []
        self._last_dropped_emit = now
        status = STATUS["dropped"] | (STATUS["missing"] if self.missing else 0)
        nan = float("nan")
        return [Row(float(now), np.array([nan, nan, 0.0, nan, nan, nan, float(status)]))]


def _decode_status(status: int) -> list[str]:
    return [k for k, v in STATUS.items() if int(status) & v]


def run_stream(
    target: TargetDefinition,
    *,
    name: str | None = None,
    stype: str | None = None,
    source_id: str | None = None,
    out_name: str | None = None,
    duration_s: float | None = None,
    max_updates: int | None = None,
    unit: str = "auto",
    timeout_s: float = 5.0,
    poll_s: float = 0.005,
    drop_after_s: float | None = None,
    log_path=None,
    say=None,
    on_row=None,
    stop=None,
) -> dict:
    """Read an EEG stream over LSL, apply ``target``, publish the feedback stream.

    Parameters
    ----------
    target : TargetDefinition
    name, stype, source_id : str, optional
        Identify the input stream (must match exactly one; default type ``EEG``).
    out_name : str, optional
        Name of the published stream (default ``sourcelab-feedback``); type ``Feedback``.
    duration_s, max_updates : optional
        Stop after this many seconds or published rows (a bounded run stops by itself); without
        either the run lasts until interrupted.
    unit : {"auto", "uV", "V"}
        Input unit; "auto" reads the stream's channel units.
    timeout_s : float
        Time allowed to find the input stream, s.
    poll_s : float
        Pause between pulls from the inlet, s (CPU use vs latency).
    drop_after_s : float, optional
        See :class:`StreamProcessor`.
    log_path : path, optional
        Write every published row as TSV (time stamps, values, latency).
    say : callable, optional
        Receives the one-line messages (default: log at WARNING).
    on_row : callable, optional
        Called with each :class:`Row` after it is published.
    stop : threading.Event, optional
        The run ends at the next pull once this is set (from another thread, e.g. a user
        interface); ``duration_s`` and ``max_updates`` still apply.

    Returns
    -------
    dict
        :meth:`StreamStats.summary` plus ``input`` (name, sfreq, channels) and ``output`` name.
    """
    import os

    from mne_lsl.lsl import StreamInfo, StreamOutlet, local_clock
    from mne_lsl.stream import StreamLSL

    stats = StreamStats()

    def _say(msg):
        stats.messages.append(msg)
        (say or (lambda m: log.warning("%s", m)))(msg)

    if duration_s is None and max_updates is None:
        log.info("no --duration or --updates: running until interrupted")
    if not os.environ.get("LSLAPICFG"):
        _say(
            "LSL discovery uses multicast/broadcast on your network; set LSLAPICFG to a "
            "configuration file to keep it on this machine (see the README)"
        )
    if name is None and source_id is None and stype is None:
        stype = "EEG"
    stream = StreamLSL(bufsize=2.0, name=name, stype=stype, source_id=source_id)
    try:
        stream.connect(acquisition_delay=None, processing_flags=["clocksync"], timeout=timeout_s)
    except RuntimeError as exc:
        what = ", ".join(
            f"{k}={v!r}"
            for k, v in (("name", name), ("type", stype), ("source_id", source_id))
            if v
        )
        raise InputError(
            f"no unique LSL stream with {what} within {timeout_s:g} s "
            f"({' '.join(str(exc).split())[:160]})"
        ) from None
    chunks: list = []

    def _collect(data, timestamps, info):
        chunks.append(
            (np.array(data, copy=True), np.array(timestamps, copy=True), time.perf_counter())
        )
        return data, timestamps

    try:
        stream.add_callback(_collect)
        sinfo = stream.sinfo
        units = sinfo.get_channel_info().get("chs") if sinfo is not None else None
        declared = sinfo.get_channel_units() if sinfo is not None else None
        ch_names = list(stream.ch_names)
        if unit == "auto" and declared is None:
            raise InputError(
                f"stream {stream.name!r} declares no channel units; pass --unit uV or --unit V"
            )
        scale = (
            np.array([unit_scale(ch["unit_mul"] if unit == "auto" else 0, unit) for ch in units])
            if units
            else unit_scale(None, unit)
        )
        proc = StreamProcessor(
            target,
            ch_names,
            float(stream.info["sfreq"]),
            scale=scale,
            drop_after_s=drop_after_s,
            say=_say,
            name=stream.name,
        )
        oname = out_name or "sourcelab-feedback"
        oinfo = StreamInfo(
            oname,
            "Feedback",
            len(OUTPUT_CHANNELS),
            1.0 / target.step_s,
            "float64",
            f"sourcelab-{oname}",
        )
        oinfo.set_channel_names(list(OUTPUT_CHANNELS))
        oinfo.set_channel_types("misc")
        oinfo.set_channel_units("none")
        outlet = StreamOutlet(oinfo)
        logf = None
        if log_path is not None:
            from ..provenance import check_output_file

            check_output_file(
                log_path, kind="stream-log", name="log file", suffixes=(".tsv", ".txt")
            )
            Path(log_path).parent.mkdir(parents=True, exist_ok=True)
            logf = open(log_path, "w", encoding="utf-8")
            logf.write("\t".join(("lsl_time", *OUTPUT_CHANNELS, "latency_ms", "age_ms")) + "\n")
        t_start = time.perf_counter()
        try:
            while True:
                if duration_s is not None and time.perf_counter() - t_start >= duration_s:
                    break
                if max_updates is not None and stats.rows >= max_updates:
                    break
                if stop is not None and stop.is_set():
                    break
                stream.acquire()
                rows_t = []
                while chunks:
                    data, ts, t_arr = chunks.pop(0)
                    rows_t += [(r, t_arr) for r in proc.push(data, ts, local_clock())]
                if not rows_t:
                    rows_t = [(r, time.perf_counter()) for r in proc.idle(local_clock())]
                for r, t_arr in rows_t:
                    if max_updates is not None and stats.rows >= max_updates:
                        break
                    outlet.push_sample(r.values, timestamp=r.timestamp)
                    lat = (time.perf_counter() - t_arr) * 1e3
                    age = (local_clock() - r.timestamp) * 1e3
                    status = int(r.values[-1])
                    stats.rows += 1
                    stats.clean += int(r.values[2] == 1.0)
                    for k in _decode_status(status) or ["clean"]:
                        stats.by_status[k] = stats.by_status.get(k, 0) + 1
                    if not status & STATUS["dropped"]:
                        stats.latency_ms.append(lat)
                        stats.age_ms.append(age)
                    if logf is not None:
                        logf.write(
                            "\t".join(
                                [
                                    f"{r.timestamp:.6f}",
                                    *(f"{v:.17g}" for v in r.values),
                                    f"{lat:.3f}",
                                    f"{age:.3f}",
                                ]
                            )
                            + "\n"
                        )
                    if on_row is not None:
                        on_row(r)
                time.sleep(poll_s)
        finally:
            if logf is not None:
                logf.close()
            del outlet
    finally:
        try:
            stream.disconnect()
        except Exception:  # noqa: BLE001 - disconnecting a lost stream must not mask the result
            pass
    out = stats.summary()
    out.update(
        input={
            "name": proc.name,
            "sfreq": proc.sfreq,
            "channels": len(ch_names),
            "missing": list(proc.missing),
        },
        output=oname,
        message_lines=list(stats.messages),
    )
    return out
