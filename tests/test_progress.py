"""Stage progress on a terminal, none when piped, none with -q (issue 16, part 4).

The commands run as users run them: a child process whose standard error is a pseudo-terminal
(python ``pty``), or a pipe.  tqdm draws on a terminal only (``disable=None``: common practice
for command-line tools; tqdm documentation).
"""

import fcntl
import os
import pty
import select
import struct
import subprocess
import sys
import termios

import pytest

from corpus import FAST, FAST_TOML, simulated_raw, write_edf

#: Runs the console script's entry point in a child process.
_CLI = [sys.executable, "-c", "from sourcelab.cli.main import run; run()"]


def _run(args, *, tty: bool, cwd) -> tuple[int, str]:
    """Run the CLI; return (exit code, everything written to standard error)."""
    env = {**os.environ, "COLUMNS": "100"}
    if not tty:
        r = subprocess.run(
            _CLI + args, cwd=cwd, capture_output=True, text=True, env=env, timeout=600
        )
        return r.returncode, r.stderr
    master, slave = pty.openpty()
    # a real terminal has a size; a fresh pseudo-terminal reports 0 x 0 (tqdm then draws nothing)
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))
    p = subprocess.Popen(
        _CLI + args,
        cwd=cwd,
        stdout=subprocess.DEVNULL,
        stderr=slave,
        stdin=subprocess.DEVNULL,
        env=env,
    )
    os.close(slave)
    chunks = []
    while True:
        ready, _, _ = select.select([master], [], [], 1.0)
        if ready:
            try:
                data = os.read(master, 65536)
            except OSError:  # the child closed its end (Linux raises EIO)
                break
            if not data:
                break
            chunks.append(data)
        elif p.poll() is not None:
            break
    os.close(master)
    return p.wait(timeout=600), b"".join(chunks).decode("utf-8", "replace")


@pytest.fixture(scope="module")
def recording(tmp_path_factory):
    d = tmp_path_factory.mktemp("progress")
    write_edf(simulated_raw(), d / "rec.edf")
    (d / "fast.toml").write_text(FAST_TOML)
    return d


def _analyze(out):
    return ["analyze", "rec.edf", "--out", out, "--config", "fast.toml", *FAST]


def test_analyze_shows_stage_progress_on_a_terminal(recording):
    code, err = _run(_analyze("tty"), tty=True, cwd=recording)
    assert code == 0, err
    # the analysis bar names its stages (sourcelab.analysis.STAGES) as it goes
    assert "analysis:" in err
    from sourcelab.analysis import STAGES

    assert sum(s in err for s in STAGES) >= 3
    assert "writing:" in err  # the output stage bar


def test_piped_and_quiet_runs_show_no_progress(recording):
    code, err = _run(_analyze("piped"), tty=False, cwd=recording)
    assert code == 0, err
    assert "analysis:" not in err and "\r" not in err and "writing:" not in err
    code, err = _run(["-q", *_analyze("quiet")], tty=True, cwd=recording)
    assert code == 0, err
    assert "analysis:" not in err and "writing:" not in err
