"""Quiet, clean parallel runs: a local Dask cluster at -q prints nothing; Ctrl-C prints one line.

Both run ``ttmap scenario run`` in a real subprocess (its own process group,
like a terminal's foreground job) on the invented demo scenario file; the
interrupt is a real SIGINT sent to the whole process group, as Ctrl-C does.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

import ttmap

DEMO_TOML = Path(ttmap.__file__).parent / "demo_data" / "demo_scenarios.toml"
TTMAP = [sys.executable, "-c", "from ttmap.cli.main import main; main()"]

pytestmark = pytest.mark.skipif(os.name != "posix", reason="process groups and SIGINT are POSIX")


def _start(out: Path, *extra: str) -> subprocess.Popen[bytes]:
    return subprocess.Popen(
        [*TTMAP, "scenario", "run", str(DEMO_TOML), "--executor", "local", "--workers", "2",
         "--out", str(out), *extra],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True,
    )


def test_local_cluster_run_at_quiet_prints_nothing(tmp_path):
    p = _start(tmp_path / "out", "-q")
    out, err = p.communicate(timeout=600)
    assert p.returncode == 0, err.decode()
    assert out.decode() == "" and err.decode() == ""
    assert (tmp_path / "out" / "run.json").is_file()
    assert not (tmp_path / "out" / "dask.log").exists()  # -q: the Dask log goes nowhere


def test_local_cluster_run_keeps_one_dask_log_beside_the_products(tmp_path):
    """Without -q the direct solves and the site solves both log to one dask.log (appended).

    It once made the commit of the staged set refuse its own log ("dask.log exists").
    """
    out_dir = tmp_path / "out"
    p = _start(out_dir)
    out, err = p.communicate(timeout=600)
    assert p.returncode == 0, err.decode()
    assert (out_dir / "run.json").is_file() and (out_dir / "dask.log").is_file()
    assert not list(out_dir.glob(".ttmap-staging-*"))


def test_ctrl_c_prints_one_line_and_no_traceback(tmp_path):
    out_dir = tmp_path / "out"
    p = _start(out_dir)
    deadline = time.monotonic() + 300
    # Interrupt once the cluster is working: the first finished solve's record appears.
    while time.monotonic() < deadline and p.poll() is None:
        if any(out_dir.glob("*.task.json")):
            break
        time.sleep(0.05)
    assert p.poll() is None, "the run ended before it could be interrupted"
    os.killpg(p.pid, signal.SIGINT)
    out, err = p.communicate(timeout=120)
    text = err.decode()
    assert p.returncode == 130, text
    assert "Traceback" not in text and "asyncio" not in text and "Lost all workers" not in text
    lines = [ln for ln in text.splitlines() if ln.strip()]
    last = lines[-1]
    assert last.startswith("ttmap: stopped by Ctrl-C") and "resume" in last, text
    # Before the interrupt only the progress lines; after it, the one line.
    assert all(ln.startswith("ttmap: ") for ln in lines), text
    assert sum("stopped by" in ln for ln in lines) == 1
    kept = int(__import__("re").search(r"(\d+) finished task", last).group(1))
    assert kept >= 1 and (out_dir / "dask.log").is_file()
    assert not (out_dir / "run.json").exists()
