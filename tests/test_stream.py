"""Live feedback over Lab Streaming Layer: file played over LSL vs replay, bounded runs, faults.

All LSL traffic stays on the loopback interface: this module writes an LSL configuration
(``ResolveScope = machine``, ``KnownPeers = {127.0.0.1}``, ``IPv6 = disable``; keys as read by
liblsl's ``api_config.cpp``) and points ``LSLAPICFG`` at it before mne-lsl is imported, so every
outlet and resolver in this process uses it (liblsl reads its configuration once per process).
The tests stream in real time; each is bounded (a few seconds) and stops by itself.
"""

import os
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import pytest

_CFG_DIR = Path(tempfile.mkdtemp(prefix="sourcelab-lsl-"))
LSL_CFG = _CFG_DIR / "lsl_api.cfg"
os.environ["LSLAPICFG"] = str(LSL_CFG)  # before mne_lsl/liblsl is first used

from sourcelab.targets.stream import LOOPBACK_CONFIG, STATUS, write_loopback_config  # noqa: E402

write_loopback_config(LSL_CFG)

mne_lsl = pytest.importorskip(
    "mne_lsl",
    reason="mne-lsl is not installed: LSL streaming tests skipped (pip install 'sourcelab[live]')",
)

from sourcelab.config import SITES_1020  # noqa: E402
from sourcelab.simulate import pink_noise  # noqa: E402

pytestmark = pytest.mark.lsl
SF = 256.0
#: file labels: old temporal names and an EEG prefix, as converters write them (10-20 recognition)
OLD = {"T7": "T3", "T8": "T4", "P7": "T5", "P8": "T6"}
LABELS = [f"EEG {OLD.get(s, s)}-REF" for s in SITES_1020]


def _uid(tag):
    return f"sl-test-{tag}-{os.getpid()}-{time.monotonic_ns() % 10**9}"


@pytest.fixture(scope="module")
def target_file(tmp_path_factory):
    """A target on the shipped head model's sLORETA operator (right BA17 alpha), invented norm."""
    from sourcelab.config import AnalysisConfig
    from sourcelab.analysis import fingerprint_for
    from sourcelab.inverse import inverse_operator
    from sourcelab.rois import load_atlas
    from sourcelab.targets import make_target, write_target

    cfg = AnalysisConfig()
    op = inverse_operator(cfg.method, cfg.orientation, cfg.lambda2)
    roi = [r for r in load_atlas("brodmann").rois if (r.name, r.hemisphere) == ("BA17", "right")][0]
    tg = make_target(
        kernel=op.kernel,
        n_comp=op.n_comp,
        atlas="brodmann",
        roi="BA17",
        hemisphere="right",
        vertices=roi.vertices,
        band="alpha",
        bands=fingerprint_for(cfg).bands,
        measure="absolute",
        fingerprint=fingerprint_for(cfg),
        sfreq=SF,
        norm={"mean": 0.5, "sd": 0.13, "transform": "log10"},
        z=1.0,
        offline={"value": 3.0, "z": 1.0},
    )
    d = tmp_path_factory.mktemp("stream")
    return write_target(tg, d / "ba17_alpha.json"), tg


def _recording(path, *, seconds=14.0, seed=0, flat=None, drop=None):
    """Invented 19-channel mixed pink noise (µV) written as FIF with decorated old labels."""
    import mne

    rng = np.random.default_rng(seed)
    # ~13 µV RMS per channel: peak-to-peak stays below the default 150-µV artefact threshold
    x = 3.0 * rng.standard_normal((19, 19)) @ pink_noise(19, int(seconds * SF), SF, rng)
    labels = list(LABELS)
    if flat is not None:
        x[SITES_1020.index(flat)] = 0.0
    if drop is not None:
        i = SITES_1020.index(drop)
        x = np.delete(x, i, axis=0)
        del labels[i]
    order = np.random.default_rng(1).permutation(len(labels))  # file order != sourcelab order
    raw = mne.io.RawArray(
        x[order] * 1e-6, mne.create_info([labels[i] for i in order], SF, "eeg"), verbose="error"
    )
    raw.save(path, overwrite=True, verbose="error")
    return path


def _player(fname, name, source_id=None, n_repeat=1):
    from mne_lsl.player import PlayerLSL

    return PlayerLSL(
        fname, chunk_size=16, n_repeat=n_repeat, name=name, source_id=source_id or name
    )


def _read_log(path):
    import pandas as pd

    return pd.read_csv(path, sep="\t")


# ------------------------------------------------------------------------------ configuration


def test_loopback_configuration_is_loaded_and_streams_resolve(tmp_path):
    # The keys are those liblsl's api_config.cpp reads (checked against the liblsl source and
    # the strings of the bundled liblsl 1.17.7): ports.IPv6, multicast.ResolveScope,
    # multicast.MachineAddresses, lab.KnownPeers, tuning.WatchdogCheckInterval,
    # tuning.WatchdogTimeThreshold.  A child process with the same file and
    # log level 0 must report "Configuration loaded from <file>" (liblsl falls back to defaults
    # and logs an error on a bad key value) and must resolve an outlet of its own.
    import subprocess
    import sys

    for key in (
        "ResolveScope = machine",
        "KnownPeers = {127.0.0.1}",
        "IPv6 = disable",
        "WatchdogTimeThreshold = 2.0",
    ):
        assert key in LOOPBACK_CONFIG
    verbose = tmp_path / "lsl_verbose.cfg"
    verbose.write_text(LOOPBACK_CONFIG.replace("level = -1", "level = 0"))
    code = (
        "import numpy as np\n"
        "from mne_lsl.lsl import StreamInfo, StreamOutlet, resolve_streams\n"
        "o = StreamOutlet(StreamInfo('cfgcheck', 'EEG', 2, 100.0, 'float32', 'cfgcheck'))\n"
        "s = resolve_streams(timeout=5, name='cfgcheck')\n"
        "print('RESOLVED', len(s))\n"
    )
    env = dict(os.environ, LSLAPICFG=str(verbose))
    p = subprocess.run(
        [sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=60
    )
    assert "RESOLVED 1" in p.stdout, p.stderr[-2000:]
    assert f"Configuration loaded from {verbose}" in p.stderr
    assert "rolling back to defaults" not in p.stderr
    # and in this process (LSLAPICFG set at import): an outlet resolves under the configuration
    from mne_lsl.lsl import StreamInfo, StreamOutlet, resolve_streams

    name = _uid("cfg")
    outlet = StreamOutlet(StreamInfo(name, "EEG", 2, 100.0, "float32", name))
    found = resolve_streams(timeout=5, name=name)
    assert len(found) == 1 and found[0].name == name
    del outlet


# ------------------------------------------------------------------------------ equality


def test_streamed_values_equal_replay_of_the_same_file(tmp_path, target_file, capsys):
    # A file played over LSL (mne-lsl PlayerLSL) through `sourcelab targets stream`: every
    # published value must equal `replay` of the same file started at the first streamed
    # sample, to 1e-6 (relative; both run the same float64 arithmetic on the same samples, so
    # the expected difference is rounding, ~1e-12).  The run is bounded by --duration and stops
    # by itself.
    from mne_lsl.lsl import local_clock

    from sourcelab.cli.main import main
    from sourcelab.intake import read_recording
    from sourcelab.targets import read_target, replay_array

    path, _ = target_file
    fif = _recording(tmp_path / "rec_raw.fif", seconds=14.0)
    name = _uid("eq")
    player = _player(fif, name)
    t0a = local_clock()
    player.start()
    t0b = local_clock()
    try:
        t = time.perf_counter()
        rc = main(
            [
                "targets",
                "stream",
                str(path),
                "--name",
                name,
                "--duration",
                "7",
                "--log",
                str(tmp_path / "stream.tsv"),
            ]
        )
        took = time.perf_counter() - t
    finally:
        player.stop()
    out = capsys.readouterr()
    assert rc == 0, out.err
    assert took < 7 + 5 + 2  # duration + resolution timeout + margin: it stopped by itself
    assert "latency" in out.out and "published" in out.out
    log = _read_log(tmp_path / "stream.tsv")
    # 4 Hz for 7 s, plus rows of samples the inlet received as a backlog on connecting
    assert 20 <= len(log) <= 4 * (7 + 2)
    # alignment: PlayerLSL stamps the last sample of chunk j with T0 + (j + 1) chunk / sfreq,
    # T0 = its start time (between t0a and t0b), so sample n carries T0 + (n + 1) / sfreq.  The
    # first row's window ends at the first streamed sample k plus one step (64 samples) minus 1.
    tg = read_target(path)
    step = int(tg.step_s * SF)
    ts1 = log["lsl_time"].iloc[0]
    k_hi = int(np.ceil((ts1 - t0a) * SF)) - step
    k_lo = int(np.floor((ts1 - t0b) * SF)) - step
    data = read_recording(fif).raw.get_data() * 1e6
    best = None
    for k in range(max(0, k_lo - 1), k_hi + 2):
        ref = replay_array(data[:, k:], SF, tg)
        n = min(len(ref.power), len(log))
        a = np.c_[ref.power[:n], ref.z[:n], ref.clean[:n], ref.smoothed[:n], ref.smoothed_z[:n]]
        b = log[["power", "z", "clean", "smoothed", "smoothed_z"]].to_numpy()[:n]
        same_nan = np.array_equal(np.isnan(a), np.isnan(b))
        ok = np.isfinite(a)
        err = (
            np.max(np.abs(a[ok] - b[ok]) / np.maximum(np.abs(a[ok]), 1e-12)) if ok.any() else np.inf
        )
        if same_nan and (best is None or err < best[1]):
            best = (k, err, int(ref.clean[:n].sum()))
    assert best is not None, "no alignment found"
    assert best[1] <= 1e-6, best
    assert best[2] >= 15  # clean rows were compared, not only warm-up NaNs
    print(f"stream vs replay: offset {best[0]} samples, max relative difference {best[1]:.2e}")


def test_bounded_run_by_updates_stops_by_itself(tmp_path, target_file):
    from sourcelab.targets import read_target
    from sourcelab.targets.stream import run_stream

    path, _ = target_file
    fif = _recording(tmp_path / "rec_raw.fif", seconds=10.0, seed=3)
    name = _uid("bound")
    player = _player(fif, name)
    player.start()
    try:
        s = run_stream(
            read_target(path),
            name=name,
            max_updates=10,
            log_path=tmp_path / "s.tsv",
            say=lambda m: None,
        )
    finally:
        player.stop()
    assert s["rows"] == 10 and len(_read_log(tmp_path / "s.tsv")) == 10
    assert s["by_status"].get("warmup", 0) == 7  # windows ending before 2 s


# ------------------------------------------------------------------------------ faults


def _run_in_thread(target, **kw):
    from sourcelab.targets.stream import run_stream

    box, msgs = {}, []

    def go():
        try:
            box["summary"] = run_stream(target, say=msgs.append, **kw)
        except Exception as exc:  # surfaced by the test
            box["error"] = exc

    th = threading.Thread(target=go, daemon=True)
    th.start()
    return th, box, msgs


def test_dropped_then_restored_input_is_flagged_and_recovers(tmp_path, target_file):
    # The input outlet disappears for 1.5 s and comes back with the same name and source id:
    # flagged 'dropped' rows (NaN) keep coming, one line says so, liblsl reconnects the inlet,
    # the filters restart and clean values return after the warm-up.  No crash.
    from sourcelab.targets import read_target

    path, _ = target_file
    fif = _recording(tmp_path / "rec_raw.fif", seconds=40.0, seed=4)
    name = _uid("drop")
    # The run waits for the event it tests, not for a fixed time: liblsl reconnects the inlet
    # within about 2 s when the broken connection is noticed at once, but only at its watchdog
    # check (15-s interval and threshold by default, from memory) when it is not, which a
    # loaded machine hits.
    # The run stops after three clean rows past the last dropped one, or after 120 s.
    seen = {"dropped": False, "clean_after": 0}
    done = threading.Event()

    def watch(row):
        status = int(row.values[-1])
        if status & STATUS["dropped"]:
            seen["dropped"], seen["clean_after"] = True, 0
        elif seen["dropped"] and row.values[2] == 1.0:
            seen["clean_after"] += 1
            if seen["clean_after"] >= 3:
                done.set()

    p1 = _player(fif, name)
    p1.start()
    time.sleep(0.3)
    th, box, msgs = _run_in_thread(
        read_target(path),
        name=name,
        duration_s=120.0,
        log_path=tmp_path / "s.tsv",
        on_row=watch,
        stop=done,
    )
    time.sleep(5.0)  # past the 2-s warm-up with room for a slow start on a busy machine
    p1.stop()
    time.sleep(1.5)
    p2 = _player(fif, name, n_repeat=4)  # keeps playing for the longest reconnection
    p2.start()
    th.join(timeout=130)
    p2.stop()
    assert not th.is_alive() and "error" not in box, box.get("error")
    log = _read_log(tmp_path / "s.tsv")
    st = log["status"].astype(int).to_numpy()
    dropped = (st & STATUS["dropped"]) > 0
    assert dropped.any() and log.loc[dropped, "power"].isna().all()
    assert (log.loc[dropped, "clean"] == 0).all()
    first_drop = np.flatnonzero(dropped)[0]
    after = log.iloc[np.flatnonzero(dropped)[-1] + 1 :]
    assert (after["clean"] == 1).any(), "no clean value after the stream came back"
    assert (log.iloc[:first_drop]["clean"] == 1).any()
    assert any("dropped" in m for m in msgs) and any("back after" in m for m in msgs)
    assert all("\n" not in m for m in msgs)


def test_flat_channel_is_flagged_with_a_one_line_message(tmp_path, target_file):
    from sourcelab.targets import read_target
    from sourcelab.targets.stream import run_stream

    path, _ = target_file
    fif = _recording(tmp_path / "rec_raw.fif", seconds=10.0, seed=5, flat="O2")
    name = _uid("flat")
    player = _player(fif, name)
    player.start()
    msgs = []
    try:
        s = run_stream(
            read_target(path),
            name=name,
            max_updates=14,
            say=msgs.append,
            log_path=tmp_path / "s.tsv",
        )
    finally:
        player.stop()
    log = _read_log(tmp_path / "s.tsv")
    past = log.iloc[8:]  # past the 2-s warm-up
    assert ((past["status"].astype(int) & STATUS["flat"]) > 0).all()
    assert past["power"].isna().all() and (past["clean"] == 0).all()
    assert s["clean"] == 0
    flat_msgs = [m for m in msgs if "flat" in m]
    assert len(flat_msgs) == 1 and "O2" in flat_msgs[0] and "\n" not in flat_msgs[0]


def test_missing_channel_is_flagged(tmp_path, target_file):
    from sourcelab.targets import read_target
    from sourcelab.targets.stream import run_stream

    path, _ = target_file
    fif = _recording(tmp_path / "rec_raw.fif", seconds=8.0, seed=6, drop="Pz")
    name = _uid("miss")
    player = _player(fif, name)
    player.start()
    msgs = []
    try:
        s = run_stream(read_target(path), name=name, max_updates=10, say=msgs.append)
    finally:
        player.stop()
    assert s["rows"] == 10 and s["clean"] == 0 and s["by_status"]["missing"] == 10
    assert s["input"]["missing"] == ["Pz"]
    assert any("lacks Pz" in m for m in msgs)


def test_wrong_rate_is_flagged(tmp_path, target_file):
    # An outlet that declares 256 Hz but delivers 200 samples per second (chunks of 10 every
    # 50 ms, stamped at push time): once 4 s of time stamps are in, the measured rate is off by
    # 22 %, far beyond the tolerance (0.25 Hz at 12 Hz = 2.1 %), so values are withheld.
    from mne_lsl.lsl import StreamInfo, StreamOutlet

    from sourcelab.targets import read_target

    path, _ = target_file
    name = _uid("rate")
    info = StreamInfo(name, "EEG", 19, SF, "float64", name)
    info.set_channel_names(LABELS)
    info.set_channel_types("eeg")
    info.set_channel_units("microvolts")
    outlet = StreamOutlet(info, chunk_size=10)
    rng = np.random.default_rng(8)
    x = 3.0 * rng.standard_normal((19, 19)) @ pink_noise(19, int(12 * 200), SF, rng)
    stop = threading.Event()

    def push():
        i = 0
        while not stop.is_set() and i + 10 <= x.shape[1]:
            outlet.push_chunk(np.ascontiguousarray(x[:, i : i + 10].T))
            i += 10
            time.sleep(0.05)

    pusher = threading.Thread(target=push, daemon=True)
    pusher.start()
    try:
        th, box, msgs = _run_in_thread(
            read_target(path),
            name=name,
            duration_s=7.0,
            drop_after_s=1.0,
            log_path=tmp_path / "s.tsv",
        )
        th.join(timeout=20)
    finally:
        stop.set()
        pusher.join(timeout=5)
    assert "error" not in box, box.get("error")
    log = _read_log(tmp_path / "s.tsv")
    rate = (log["status"].astype(int) & STATUS["rate"]) > 0
    assert rate.any() and log.loc[rate, "power"].isna().all()
    rmsg = [m for m in msgs if "declares 256 Hz" in m]
    assert len(rmsg) == 1
    import re

    measured = float(re.search(r"arrive at ([0-9.]+) Hz", rmsg[0]).group(1))
    assert 180 < measured < 205  # 200/s pushed; the pusher's sleeps only lengthen the period


def test_readme_shows_the_configuration_that_sourcelab_writes():
    # The README's configuration block is what users copy; it must be the file
    # write_loopback_config writes (comment line aside).
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    body = "\n".join(ln for ln in LOOPBACK_CONFIG.splitlines() if not ln.startswith(";"))
    assert body.strip() in readme
