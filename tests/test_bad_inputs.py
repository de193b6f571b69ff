"""The bad-input corpus (``tests/corpus.py``) through the CLI, and the output-safety scenarios.

Contract for every refused input (issue 13; the project rules "never lose a user's data"):
exit code 2, exactly one stderr line ``sourcelab: error: ...`` naming the file or option, no
traceback, nothing partial left, and every file that existed before unchanged byte for byte
(checked by hashing the whole case folder before and after).  Cases run in-process through
``sourcelab.cli.main.main`` (with capsys) for speed; the subprocess tests at the end check the
real stderr, exit codes, SIGKILL during the write phase and concurrent runs on one ``--out``.
"""

from __future__ import annotations

import hashlib
import os
import json
import re
import signal
import stat
import subprocess
import sys
import time
from pathlib import Path

import pytest

import corpus
from sourcelab.cli.main import main
from sourcelab.errors import InputError
from sourcelab import provenance

RESULTS: dict[str, bool] = {}


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    return corpus.build_base(tmp_path_factory.mktemp("corpus") / "base", main)


def snapshot(folder: Path) -> dict:
    """Every entry under ``folder`` (hidden ones too): type and, for files, the sha256."""
    out = {}
    for root, dirs, files in os.walk(folder, followlinks=False):
        for name in dirs + files:
            p = Path(root) / name
            rel = p.relative_to(folder).as_posix()
            st = os.lstat(p)
            if stat.S_ISLNK(st.st_mode):
                out[rel] = "link:" + os.readlink(p)
            elif stat.S_ISDIR(st.st_mode):
                out[rel] = "dir"
            elif stat.S_ISREG(st.st_mode):
                if st.st_size > (64 << 20):  # the sparse "huge file" cases
                    out[rel] = f"big:{st.st_size}:{st.st_mtime_ns}"
                else:
                    out[rel] = "file:" + hashlib.sha256(p.read_bytes()).hexdigest()
            else:
                out[rel] = "special"
    return out


def assert_refused(code, out, err, names, before, after, cid):
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2, f"{cid}: exit {code}; stderr: {err!r}"
    assert "Traceback" not in err + out, f"{cid}: traceback\n{err}"
    assert len(lines) == 1, f"{cid}: {len(lines)} stderr lines: {lines}"
    assert lines[0].startswith("sourcelab: error: "), f"{cid}: {lines[0]}"
    assert any(n in lines[0] for n in names), f"{cid}: {lines[0]!r} names none of {names}"
    changed = {k for k in set(before) | set(after) if before.get(k) != after.get(k)}
    assert not changed, f"{cid}: changed or left behind: {sorted(changed)[:8]}"


def assert_complete_output(folder: Path) -> None:
    """A sourcelab output folder whose marker lists exactly the files on disk."""
    info = provenance.recognise_output_dir(folder)
    assert info is not None and info.files is not None and not info.legacy
    on_disk = {p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file()}
    assert on_disk == set(info.files)
    assert not [p for p in folder.parent.iterdir() if ".tmp-" in p.name]


@pytest.mark.parametrize("cid", corpus.all_ids())
def test_corpus_case(cid, base, tmp_path, monkeypatch, capsys):
    d = tmp_path / "case"
    case = corpus.build(cid, d, base)
    monkeypatch.chdir(d)
    before = snapshot(d)
    capsys.readouterr()
    RESULTS[cid] = False
    code = main(case.argv)
    out, err = capsys.readouterr()
    after = snapshot(d)
    if case.outcome == "either" and code == 0:
        assert "Traceback" not in err
        assert_complete_output(d / case.out)
        changed = {k for k in set(before) | set(after) if before.get(k) != after.get(k)}
        assert all(k.startswith(case.out + "/") for k in changed), sorted(changed)[:8]
    else:
        assert_refused(code, out, err, case.names, before, after, cid)
    RESULTS[cid] = True


def test_corpus_size_and_summary(capsys):
    """Runs after the corpus (file order): at least 80 cases, and the count for the report."""
    n = len(corpus.all_ids())
    assert n >= 80
    ran = len(RESULTS)
    clean = sum(RESULTS.values())
    with capsys.disabled():
        print(
            f"\nbad-input corpus: {ran} cases run / {clean} clean (of {n} defined; "
            f"{corpus.N_FUZZ} seeded EDF-header mutants, seed {corpus.FUZZ_SEED})"
        )
    if ran == n:  # the whole corpus ran in this session
        assert clean == n, sorted(k for k, v in RESULTS.items() if not v)


# --------------------------------------------------------------------------------------------
# Specific messages (the misleading-message cases)
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "cid, words",
    [
        ("edf-record-duration-zero", "data-record duration is 0 s"),
        ("edf-record-duration-negative", "data-record duration is -0.5 s"),
        ("edf-record-duration-nan", "not a finite number"),
        ("edf-samples-per-record-zero", "0 samples per data record"),
        ("edf-samples-per-record-negative", "-128 samples per data record"),
        ("edf-ten-samples", "too short"),
        ("vhdr-ten-samples", "too short"),
        ("fif-ten-samples", "too short"),
        ("config-band-above-lowpass", "outside the filter pass band"),
        ("config-lfreq-above-hfreq", "must be below h_freq"),
        ("config-nboot-fraction", "n_boot: must be an integer"),
        ("config-min-clean-negative", "min_clean_s"),
        ("config-hfreq-above-nyquist", "Nyquist"),
        ("target-norm-sd-text", "norm.sd: must be a number"),
        ("target-step-tiny", "power.step_s"),
        ("target-nested-deep", "nested"),
        ("norms-fingerprint-nested-deep", "nested"),
        ("cli-select-negative-range", "cannot be negative"),
        ("vhdr-datafile-outside-folder", "outside the header's folder"),
        ("out-user-folder", "not a sourcelab output folder"),
    ],
)
def test_messages_say_what_is_wrong(cid, words, base, tmp_path, monkeypatch, capsys):
    d = tmp_path / "case"
    case = corpus.build(cid, d, base)
    monkeypatch.chdir(d)
    assert main(case.argv) == 2
    err = capsys.readouterr().err
    assert words in err, err
    assert "implausible amplitude" not in err


def test_config_errors_name_file_and_field(base, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "c.toml").write_text("snr = -2\n")
    corpus.rec_copy(base, tmp_path)
    assert main(["analyze", "rec.edf", "--out", "o", "--config", "c.toml", *corpus.FAST]) == 2
    err = capsys.readouterr().err
    assert "c.toml: snr: must be > 0" in err
    assert main(["analyze", "rec.edf", "--out", "o", "--snr", "-2", *corpus.FAST]) == 2
    assert "--snr: must be > 0" in capsys.readouterr().err


def test_argparse_error_is_one_line_with_help_hint(capsys):
    assert main(["analyze", "--no-such-option", "x.edf"]) == 2
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert len(err) == 1 and "--help" in err[0] and err[0].startswith("sourcelab: error:")


# --------------------------------------------------------------------------------------------
# Output folders: replaced only when sourcelab's, removed file by file
# --------------------------------------------------------------------------------------------


def test_sourcelab_output_is_replaced_atomically(base, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    corpus._fast(tmp_path)
    corpus.rec_copy(base, tmp_path)
    prev = corpus.prev_copy(base, tmp_path)
    old_inode = os.stat(prev).st_ino
    (prev / "leakage_brodmann.tsv").write_text("stale")  # a file sourcelab wrote, changed
    assert main(corpus.analyze()) == 0
    assert_complete_output(prev)
    assert os.stat(prev).st_ino != old_inode  # a new folder swapped in, not edited in place
    assert (prev / "leakage_brodmann.tsv").read_text() != "stale"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fast.toml", "prev", "rec.edf"]


def test_empty_existing_folder_is_used(base, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    corpus._fast(tmp_path)
    corpus.rec_copy(base, tmp_path)
    (tmp_path / "res").mkdir()
    assert main(corpus.analyze(out="res")) == 0
    assert_complete_output(tmp_path / "res")


def test_user_file_appearing_during_the_run_is_kept(tmp_path):
    out = tmp_path / "out"
    with provenance.atomic_output_dir(out) as tmp:
        (tmp / "provenance.json").write_text('{"sourcelab_provenance": 1}')
    with pytest.raises(InputError, match="did not write"):
        with provenance.atomic_output_dir(out) as tmp:
            (tmp / "provenance.json").write_text('{"sourcelab_provenance": 1}')
            (out / "draft.txt").write_text("typed while sourcelab ran")
    assert (out / "draft.txt").read_text() == "typed while sourcelab ran"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_removal_touches_only_listed_files(tmp_path):
    folder = tmp_path / "old"
    (folder / "figures").mkdir(parents=True)
    for rel in ("roi_table.tsv", "figures/a.png", "mine.txt", "figures/mine.png"):
        (folder / rel).write_text(rel)
    (tmp_path / "precious").write_text("x")
    os.symlink(tmp_path / "precious", folder / "roi_link.tsv")
    info = provenance.OutputFolder(
        kind="analysis", files=frozenset({"roi_table.tsv", "figures/a.png", "roi_link.tsv"})
    )
    kept = provenance._remove_listed(folder, info)
    assert sorted(kept) == ["figures/mine.png", "mine.txt", "roi_link.tsv"]
    assert (tmp_path / "precious").read_text() == "x"
    assert not (folder / "roi_table.tsv").exists() and (folder / "mine.txt").exists()


def test_live_temporary_folder_is_not_cleaned(tmp_path):
    out = tmp_path / "res"
    with provenance.atomic_output_dir(out) as tmp:
        assert provenance.clean_stale_temporaries(tmp_path, "res") == []
        assert tmp.is_dir()
        (tmp / "provenance.json").write_text('{"sourcelab_provenance": 1}')
    assert_complete_output(out)


def test_stale_folders_of_both_roles_are_cleaned(tmp_path, monkeypatch):
    """A run killed while building (role build: removed whole) and one killed while removing a
    replaced output (role old: only its listed files go; a user file there is kept, visible)."""
    monkeypatch.chdir(tmp_path)
    with provenance.atomic_output_dir("res") as tmp:
        (tmp / "maps").mkdir()
        (tmp / "maps" / "absolute_alpha-lh.stc").write_text("x")
        (tmp / "provenance.json").write_text('{"sourcelab_provenance": 1}')
    old = tmp_path / ".res.tmp-old00001"
    os.rename("res", old)
    (old / "late_user_note.txt").write_text("mine")
    os.close(provenance._write_tmp_marker(old, "res", role="old"))
    build = tmp_path / ".res.tmp-bld00001"
    (build / "maps" / ".sourcelab-export-x").mkdir(parents=True)
    (build / "maps" / ".sourcelab-export-x" / "part.stc").write_text("partial")
    os.close(provenance._write_tmp_marker(build, "res"))
    provenance.clean_stale_temporaries(tmp_path, "res")
    left = sorted(p.name for p in tmp_path.iterdir())
    assert len(left) == 1 and left[0].startswith("res.kept-")
    assert sorted(p.name for p in (tmp_path / left[0]).rglob("*")) == ["late_user_note.txt"]


def test_bids_participant_folder_is_marked_and_replaced(tmp_path):
    sub = tmp_path / "derivatives" / "sourcelab" / "sub-01"
    for value in ("first", "second"):
        with provenance.atomic_output_dir(sub, kind="bids") as tmp:
            (tmp / "eeg").mkdir()
            (tmp / "eeg" / "sub-01_desc-roi_power.tsv").write_text(value)
    assert (sub / "eeg" / "sub-01_desc-roi_power.tsv").read_text() == "second"
    assert (sub / provenance.HIDDEN_MARKER_NAME).is_file()  # BIDS leaves hidden files alone
    assert not (sub / "provenance.json").exists()
    assert_complete_output(sub)


def test_library_writes_never_overwrite_foreign_files(tmp_path):
    mine = tmp_path / "norms.tsv"
    mine.write_text("the user's own table\n")
    with pytest.raises(InputError, match="not written by sourcelab"):
        provenance.atomic_write_text(mine, "# sourcelab-norms 1\n")
    assert mine.read_text() == "the user's own table\n"
    os.symlink(mine, tmp_path / "link.tsv")
    with pytest.raises(InputError):
        provenance.atomic_write_text(tmp_path / "link.tsv", "# sourcelab-norms 1\n")
    assert (tmp_path / "link.tsv").is_symlink()
    ours = tmp_path / "n2.tsv"
    provenance.atomic_write_text(ours, "# sourcelab-norms 1\n")
    provenance.atomic_write_text(ours, "# sourcelab-norms 1\nagain\n")  # its own: replaced
    assert sorted(p.name for p in tmp_path.iterdir()) == ["link.tsv", "n2.tsv", "norms.tsv"]


def test_batch_folder_is_marked_and_reused(base, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    corpus._fast(tmp_path)
    corpus.rec_copy(base, tmp_path)
    argv = [
        "batch",
        "rec.edf",
        "--out",
        "b",
        "--config",
        "fast.toml",
        "--no-progress",
        *corpus.FAST,
    ]
    assert main(argv) == 0
    info = provenance.recognise_output_dir(tmp_path / "b")
    assert info is not None and info.kind == "batch"
    assert main(argv) == 0  # up to date: reused, not refused
    assert (
        main(["analyze", "rec.edf", "--out", "b", "--config", "fast.toml", *corpus.FAST]) == 2
    )  # an analysis may not replace a batch folder
    assert "batch output" in capsys.readouterr().err


# --------------------------------------------------------------------------------------------
# Provenance hashes what is actually read
# --------------------------------------------------------------------------------------------


def _sha(*paths) -> str:
    from sourcelab.intake.files import hash_files

    return hash_files(paths)


def test_brainvision_hash_covers_the_named_data_file(base, tmp_path):
    from sourcelab.batch.runner import input_sha256
    from sourcelab.intake.files import read_file

    v = corpus._brainvision(tmp_path, base)
    os.replace(tmp_path / "rec.eeg", tmp_path / "data_renamed.eeg")
    text = v.read_text(encoding="latin-1").replace("DataFile=rec.eeg", "DataFile=data_renamed.eeg")
    v.write_text(text, encoding="latin-1")
    (tmp_path / "other.eeg").write_bytes(b"decoy")  # a file named like the header is NOT read
    _, _, sha, _, _ = read_file(v)
    assert sha == _sha(v, tmp_path / "data_renamed.eeg", tmp_path / "rec.vmrk")
    assert input_sha256(v) == sha  # the batch up-to-date check agrees
    with open(tmp_path / "data_renamed.eeg", "r+b") as f:  # the data change: the hash changes
        f.seek(100)
        f.write(b"\x01\x02")
    assert input_sha256(v) != sha


def test_eeglab_hash_covers_the_fdt(base, tmp_path):
    from sourcelab.batch.runner import input_sha256
    from sourcelab.intake.files import read_file

    s = corpus.write_eeglab_with_fdt(base.raw, tmp_path / "rec.set", "rec_data.fdt")
    _, _, sha, _, _ = read_file(s)
    assert sha == _sha(s, tmp_path / "rec_data.fdt")
    assert input_sha256(s) == sha
    with open(tmp_path / "rec_data.fdt", "r+b") as f:
        f.seek(64)
        f.write(b"\x00\x00\x80\x7f")
    assert input_sha256(s) != sha


# --------------------------------------------------------------------------------------------
# Nothing in sourcelab deletes or moves what it did not create (audit of every call)
# --------------------------------------------------------------------------------------------

#: Every deleting or moving call in the package (the code of its line), with why it can only
#: touch what sourcelab created.  A new or changed call makes the test fail until it is
#: audited here.
AUDITED = {
    "provenance.py": [
        ("os.rmdir(probe)", "the pre-flight's own mkdtemp probe, removed at once"),
        (
            "os.unlink(p)",
            "_remove_listed: a regular file listed in the marker of a recognised "
            "sourcelab folder (or a sourcelab-0.1 name); links/unlisted are kept",
        ),
        ("os.rmdir(root)", "_remove_listed: a sub-folder, only when empty"),
        ("os.unlink(old / TMP_MARKER_NAME)", "_dispose_old: the marker sourcelab wrote"),
        ("os.unlink(old / TMP_MARKER_NAME)", "_dispose_old: the marker sourcelab wrote"),
        ("os.unlink(old / TMP_MARKER_NAME)", "_dispose_old: the marker sourcelab wrote"),
        ("os.rmdir(old)", "_dispose_old: the replaced folder, only when empty"),
        ("os.rmdir(old)", "_dispose_old: the replaced folder, only when empty"),
        (
            "os.rename(old, keep)",
            "_dispose_old: a replaced folder that still holds unlisted "
            "files (they appeared after the last check) is made visible "
            "as NAME.kept-<time>, never deleted",
        ),
        ("os.unlink(p / TMP_MARKER_NAME)", "cleaner: sourcelab's marker in a stale folder"),
        ("os.rmdir(p)", "cleaner: stale folder, only when empty"),
        (
            "shutil.rmtree(p, ignore_errors=True)",
            "cleaner: a stale build folder: created by sourcelab's mkdtemp, marked, lock free",
        ),
        ("os.rmdir(p)", "cleaner: unmarked stale folder, only when empty"),
        ("os.rmdir(p)", "cleaner: recognised old output after its listed files went"),
        ("os.rmdir(d)", "parent folders this call created, only when still empty"),
        ("shutil.rmtree(tmp, ignore_errors=True)", "the run's own mkdtemp folder on failure"),
        ("os.unlink(tmp / TMP_MARKER_NAME)", "the run's own marker before the swap"),
        ("os.rename(tmp, out)", "own folder to a path that does not exist (under the lock)"),
        ("os.rename(out, old)", "fallback swap: a recognised, checked sourcelab output"),
        ("os.rename(tmp, out)", "fallback swap: own folder into place"),
        ("os.rename(old, out)", "fallback swap undone"),
        (
            "os.unlink(e.path)",
            "pid-named group-table temporaries of a dead batch, in a recognised batch folder",
        ),
        (
            "os.replace(tmp, path)",
            "own mkstemp file onto a path that is new or recognised as "
            "sourcelab's (atomic_write_bytes checks first)",
        ),
        ("os.unlink(tmp)", "own mkstemp file on failure"),
    ],
    "exports.py": [
        (
            "os.replace(f, out_dir / f.name)",
            "own staged export files into a maps folder inside an output being built",
        ),
        ("shutil.rmtree(tmp, ignore_errors=True)", "own mkdtemp staging folder"),
    ],
    "batch/runner.py": [
        ("os.replace(self.tmp, self.path)", "own pid-named group table into a batch folder"),
        ("os.replace(self.pq_tmp, self.pq_path)", "the same for Parquet"),
        ("os.unlink(p)", "own pid-named group-table temporaries"),
    ],
    "headmodel/build.py": [
        ("os.replace(tmp, out_path)", "developer rebuild of the shipped head model"),
        ("tmp.unlink()", "its own temporary file"),
    ],
    "demo.py": [("tmp.replace(path)", "own temporary EDF inside the demo's temporary folder")],
    "simulate/mismatch.py": [
        (
            "os.replace(tmp, path)",
            "benchmark cache: its own temporary file "
            "into its own cache folder (outside any "
            "user folder)",
        )
    ],
    "data/__init__.py": [
        (
            "tmp.replace(path)",
            "developer rebuild: the shipped data manifest, written through its own temporary file",
        )
    ],
}
_CALL = re.compile(
    r"\b(?:shutil\.(?:rmtree|move)|os\.(?:remove|unlink|rmdir|removedirs|replace|"
    r"rename|renames))\(|\.(?:unlink|rmdir|rename)\((?!['\"]|columns=)|"
    r"\btmp\w*\.replace\("
)


def test_every_deleting_call_is_audited():
    from collections import Counter

    root = Path(__import__("sourcelab").__file__).parent
    found: dict = {}
    for p in sorted(root.rglob("*.py")):
        rel = p.relative_to(root).as_posix()
        for line in p.read_text(encoding="utf-8").splitlines():
            code = line.split("  #")[0].strip()
            if _CALL.search(code) and not code.startswith("#"):
                found.setdefault(rel, Counter())[code] += 1
    audited = {f: Counter(c for c, _ in calls) for f, calls in AUDITED.items()}
    assert found == audited


# --------------------------------------------------------------------------------------------
# Real processes: stderr, exit codes, closed stdout, SIGKILL, concurrency
# --------------------------------------------------------------------------------------------


def _cli(*args, cwd, **kw):
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run(
        [sys.executable, "-m", "sourcelab.cli.main", *args],
        cwd=cwd,
        capture_output=True,
        text=True,
        env=env,
        timeout=300,
        **kw,
    )


def _popen(*args, cwd, **kw):
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.Popen(
        [sys.executable, "-m", "sourcelab.cli.main", *args], cwd=cwd, env=env, **kw
    )


def test_subprocess_refusals_are_one_line(base, tmp_path):
    d = tmp_path / "a"
    case = corpus.build("edf-record-duration-zero", d, base)
    before = snapshot(d)
    r = _cli(*case.argv, cwd=d)
    assert_refused(r.returncode, r.stdout, r.stderr, case.names, before, snapshot(d), "dur0")
    r = _cli("analyze", cwd=d)
    lines = r.stderr.strip().splitlines()
    assert r.returncode == 2 and len(lines) == 1 and "--help" in lines[0], r.stderr


def test_closed_stdout_is_quiet_and_files_are_written(tmp_path):
    p = _popen(
        "atlas", "show", "brodmann", cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE
    )
    p.stdout.close()  # the reader is gone before anything is printed (like `| head -0`)
    err = p.stderr.read().decode()
    p.stderr.close()
    assert p.wait(timeout=300) == 0 and err == "", err
    p = _popen(
        "leakage",
        "BA17",
        "--hemisphere",
        "left",
        "--plot",
        "l.png",
        "--tsv",
        "l.tsv",
        cwd=tmp_path,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    p.stdout.close()
    err = p.stderr.read().decode()
    p.stderr.close()
    assert p.wait(timeout=300) == 0 and err == "", err
    assert provenance.recognise_output_file(tmp_path / "l.png", "png")
    assert provenance.recognise_output_file(tmp_path / "l.tsv", "leakage")
    assert sorted(x.name for x in tmp_path.iterdir()) == ["l.png", "l.tsv"]


def _wait_for(pattern_dir: Path, glob: str, proc, timeout=240.0):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        hits = list(pattern_dir.glob(glob))
        if hits:
            return hits
        if proc.poll() is not None:
            return []
        time.sleep(0.005)
    return []


def test_kill_during_write_then_rerun_cleans_up(base, tmp_path, monkeypatch, capsys):
    d = tmp_path
    corpus._fast(d)
    corpus.rec_copy(base, d)
    prev = corpus.prev_copy(base, d)
    before = snapshot(prev)
    # source maps on: the write phase lasts long enough for the kill to land inside it
    p = _popen(
        "analyze",
        "rec.edf",
        "--out",
        "prev",
        "--config",
        "fast.toml",
        "--no-figures",
        "--no-report",
        cwd=d,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    hits = _wait_for(d, ".prev.tmp-*/provenance.json", p)
    os.kill(p.pid, signal.SIGKILL)
    p.wait()
    assert hits, "the write phase was not reached"
    assert p.returncode == -signal.SIGKILL
    assert [x for x in d.iterdir() if x.name.startswith(".prev.tmp-")]  # left by the kill
    assert snapshot(prev) == before  # the previous output is intact
    monkeypatch.chdir(d)
    assert main(corpus.analyze()) == 0  # the rerun cleans the stale folder
    assert_complete_output(prev)
    assert sorted(x.name for x in d.iterdir()) == ["fast.toml", "prev", "rec.edf"]


def test_concurrent_runs_on_one_out(base, tmp_path):
    """Two processes on one new --out: both succeed, the result is one complete output (the
    last to finish wins), nothing is left behind.  B starts while A is writing, so B's
    stale-folder cleaning meets A's live temporary folder and must leave it alone."""
    d = tmp_path
    corpus._fast(d)
    corpus.rec_copy(base, d)
    args = (
        "analyze",
        "rec.edf",
        "--out",
        "res",
        "--config",
        "fast.toml",
        "--no-figures",
        "--no-report",
    )
    a = _popen(*args, cwd=d, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    assert _wait_for(d, ".res.tmp-*/provenance.json", a), "A never reached its write phase"
    b = _popen(*args, "--no-maps", cwd=d, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    ended = {}
    while len(ended) < 2:
        for name, p in (("A", a), ("B", b)):
            if name not in ended and p.poll() is not None:
                ended[name] = time.monotonic()
        time.sleep(0.005)
    for p in (a, b):
        err = p.stderr.read().decode()
        p.stderr.close()
        assert p.returncode == 0, err
    assert_complete_output(d / "res")
    # the folder is one whole output of one of the two runs: its maps match its own command
    # (end times of the processes do not order their commits on a loaded machine)
    command = json.loads((d / "res" / "provenance.json").read_text())["command"]
    assert (d / "res" / "maps").is_dir() == ("--no-maps" not in command)
    assert sorted(x.name for x in d.iterdir()) == ["fast.toml", "rec.edf", "res"]
