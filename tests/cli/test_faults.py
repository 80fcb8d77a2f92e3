"""Faults in the middle of a run: kills, signals, a full disk, --overwrite.

Each case runs the real ``ttmap`` command in a child process on a coarsened
copy of the invented demo grid, stopped at a named stage through the hooks of
:mod:`ttmap.faults` (``TTMAP_TEST_PAUSE_AT`` / ``TTMAP_TEST_FAIL_AT``):

- SIGKILL at each stage, then a rerun: the stale staging folder is removed
  (one line says so), the rerun succeeds, and no partial set was ever left
  looking complete (no run.json beside a partial set);
- SIGTERM and Ctrl-C (SIGINT) at each stage: exit 143 / 130, one line on
  stderr, no traceback, the folder exactly as before (names and SHA-256 of
  every file);
- ENOSPC at each stage: one line naming the file and the fix, folder as before;
- --overwrite with another configuration: no product of the earlier run is
  left beside the new run.json, and files ttmap did not write are kept.

The expectation (a product set appears whole or not at all, run.json last)
is the project's own contract, stated in README ("What you can rely on").
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from ttmap.faults import STAGES

DEMO_DIR = Path(__file__).resolve().parents[2] / "ttmap" / "demo_data"
DEMO_TIF = DEMO_DIR / "demo_bathymetry.tif"
DEMO_SITES = DEMO_DIR / "demo_sites.csv"
TTMAP = [sys.executable, "-c", "from ttmap.cli.main import cli; cli(prog_name='ttmap')"]

#: Small, quick runs (coarsened invented demo grid).
MAP = ["map", str(DEMO_TIF), "--source", "-144.9,-34.2", "--coarsen", "6"]
SITE_MAP = ["site-map", str(DEMO_TIF), "--sites", str(DEMO_SITES), "--coarsen", "6"]

SCENARIOS = f"""\
# Invented scenarios for the invented demo coast (test copy).
[bathymetry]
path = "{DEMO_TIF.as_posix()}"
coarsen = 6

[[scenario]]
name = "east"
point = [-144.9, -34.2]
max_time_h = 2

[[scenario]]
name = "west"
point = [-146.9, -33.3]
max_time_h = 2

[outputs]
folder = "out"
envelope = true
executor = "serial"
"""


def snapshot(folder: Path) -> dict[str, str]:
    """Relative path -> SHA-256 of every file below ``folder`` (hidden ones too); {} if absent."""
    if not folder.exists():
        return {}
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    } | {p.relative_to(folder).as_posix() + "/": "dir" for p in folder.rglob("*") if p.is_dir()}


def run(args: list[str], env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run([*TTMAP, *args], capture_output=True, text=True, timeout=120,
                          env={**os.environ, **(env or {})})


def run_until(args: list[str], stage: str, tmp: Path) -> subprocess.Popen[str]:
    """Start ttmap and return once it pauses at ``stage``."""
    ready = tmp / f"ready-{stage}-{time.monotonic_ns()}"
    env = {**os.environ, "TTMAP_TEST_PAUSE_AT": stage, "TTMAP_TEST_READY_FILE": str(ready)}
    proc = subprocess.Popen([*TTMAP, *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    deadline = time.monotonic() + 90
    while not ready.exists():
        if proc.poll() is not None:
            out, err = proc.communicate()
            pytest.fail(f"ttmap ended before stage {stage!r}: {err}")
        if time.monotonic() > deadline:
            proc.kill()
            pytest.fail(f"ttmap never reached stage {stage!r}")
        time.sleep(0.05)
    return proc


def error_lines(stderr: str) -> list[str]:
    assert "Traceback" not in stderr, stderr
    return [ln for ln in stderr.splitlines() if ln.startswith(("Error:", "ttmap: stopped"))]


def staging_left(folder: Path) -> list[str]:
    return [p.name for p in folder.iterdir() if p.name.startswith(".ttmap-staging-")] if folder.exists() else []


def looks_complete_but_partial(folder: Path) -> bool:
    """A run.json whose listed products are not all there (a partial set looking complete)."""
    rec = folder / "run.json"
    if not rec.exists():
        return False
    listed = json.loads(rec.read_text())["products"]
    return not all((folder / p).is_file() for p in listed)


def prepared(kind: str, tmp: Path, earlier: bool) -> tuple[list[str], Path]:
    """The command of a job kind and its output folder (holding an earlier run when asked)."""
    out = tmp / "out"
    if kind == "map":
        args = [*MAP, "--out", str(out)]
    elif kind == "site-map":
        args = [*SITE_MAP, "--out", str(out)]
    else:
        toml = tmp / "small.toml"
        toml.write_text(textwrap.dedent(SCENARIOS))
        args = ["scenario", "run", str(toml), "--out", str(out)]
    if earlier:
        first = run(args)
        assert first.returncode == 0, first.stderr
        (out / "my_notes.txt").write_text("the user's own file")
        args = [*args, "--overwrite"]
    return args, out


# Which (job, stage) pairs run: every stage for the map job, one or two for the others
# (the staging code is shared; each extra case costs a few seconds of start-up).
KILL_CASES = [("map", s) for s in STAGES] + [("site-map", "commit"), ("scenario", "commit")]
SIGNAL_CASES = [("map", s, sig) for s in STAGES for sig in ("SIGTERM", "SIGINT")] + [
    ("site-map", "products", "SIGTERM"), ("site-map", "commit", "SIGINT"), ("scenario", "solved", "SIGTERM")]
DISK_CASES = [("map", s) for s in STAGES] + [("site-map", "record"), ("scenario", "products")]


@pytest.mark.parametrize("kind,stage", KILL_CASES)
def test_sigkill_then_rerun(kind: str, stage: str, tmp_path: Path) -> None:
    args, out = prepared(kind, tmp_path, earlier=False)
    proc = run_until(args, stage, tmp_path)
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=30)
    assert staging_left(out), "a killed run leaves its staging folder (cleaned by the next run)"
    assert not looks_complete_but_partial(out)
    if stage != "commit":
        assert not (out / "run.json").exists()
    again = run(args)
    assert again.returncode == 0, again.stderr
    assert "removed 1 staging folder(s) left by an interrupted ttmap run" in again.stderr
    if stage == "commit":
        assert "undid 1 half-done move into place" in again.stderr
    assert staging_left(out) == []
    assert not looks_complete_but_partial(out)
    listed = set(json.loads((out / "run.json").read_text())["products"]) | {"run.json"}
    assert set(snapshot(out)) == listed  # nothing beside the record it does not list


@pytest.mark.parametrize("kind,stage,name", SIGNAL_CASES)
def test_signal_leaves_the_folder_as_before(kind: str, stage: str, name: str, tmp_path: Path) -> None:
    sig = getattr(signal, name)
    code = 128 + sig  # 143 for SIGTERM, 130 for Ctrl-C
    # Over an earlier run with --overwrite: the harder case (the old set is moved aside during commit).
    args, out = prepared(kind, tmp_path, earlier=kind != "scenario")
    before = snapshot(out)
    proc = run_until(args, stage, tmp_path)
    proc.send_signal(sig)
    _, stderr = proc.communicate(timeout=60)
    assert proc.returncode == code, stderr
    lines = error_lines(stderr)
    assert len(lines) == 1, stderr
    assert lines[0].startswith("ttmap: stopped by " + ("SIGTERM" if sig == signal.SIGTERM else "Ctrl-C"))
    after = snapshot(out)
    if kind != "scenario":
        assert after == before
    else:
        # Stopped after its tasks finished: each finished task is kept whole for resuming;
        # no comparison and no run.json appeared.
        added = set(after) - set(before)
        assert added and all(n.endswith((".tif", ".task.json")) for n in added), added
        assert {k: v for k, v in after.items() if k in before} == before
        assert "rerun the same command to resume" in lines[0]
        resumed = run(args)
        assert resumed.returncode == 0, resumed.stderr
        assert (out / "run.json").exists() and (out / "envelope_min.tif").exists()


@pytest.mark.parametrize("kind,stage", DISK_CASES)
def test_disk_full_leaves_the_folder_as_before(kind: str, stage: str, tmp_path: Path) -> None:
    args, out = prepared(kind, tmp_path, earlier=kind == "map")
    before = snapshot(out)
    done = run(args, env={"TTMAP_TEST_FAIL_AT": f"{stage}:ENOSPC"})
    assert done.returncode == 1, done.stderr
    lines = error_lines(done.stderr)
    assert len(lines) == 1, done.stderr
    assert "no space left on device while writing" in lines[0]
    assert "free space or choose another --out" in lines[0]
    if kind != "scenario":
        assert snapshot(out) == before
    else:
        # finished tasks are kept whole (for resuming); nothing else appeared
        assert not (out / "run.json").exists()
        assert not (out / "envelope_min.tif").exists()
        assert staging_left(out) == []


def test_overwrite_with_fewer_products_leaves_none_of_the_old(tmp_path: Path) -> None:
    out = tmp_path / "out"
    first = run([*MAP, "--period-s", "300", "--period-s", "600", "--sites", str(DEMO_SITES), "--out", str(out)])
    assert first.returncode == 0, first.stderr
    (out / "my_notes.txt").write_text("the user's own file")
    old = set(json.loads((out / "run.json").read_text())["products"])
    refused = run([*MAP, "--out", str(out)])
    assert refused.returncode == 1 and "--overwrite" in refused.stderr
    second = run([*MAP, "--no-map", "--out", str(out), "--overwrite"])
    assert second.returncode == 0, second.stderr
    new = set(json.loads((out / "run.json").read_text())["products"])
    assert new < old
    assert set(snapshot(out)) == new | {"run.json", "my_notes.txt"}
    assert (out / "my_notes.txt").read_text() == "the user's own file"
    assert "left alone 1 file(s)" in second.stderr and "my_notes.txt" in second.stderr


def test_overwrite_site_map_with_fewer_sites(tmp_path: Path) -> None:
    out = tmp_path / "out"
    two = tmp_path / "two.csv"
    two.write_text("".join(DEMO_SITES.read_text().splitlines(keepends=True)[:3]))
    one = tmp_path / "one.csv"
    one.write_text("".join(DEMO_SITES.read_text().splitlines(keepends=True)[:2]))
    base = ["site-map", str(DEMO_TIF), "--coarsen", "6", "--out", str(out)]
    assert run([*base, "--sites", str(two)]).returncode == 0
    again = run([*base, "--sites", str(one), "--overwrite"])
    assert again.returncode == 0, again.stderr
    new = set(json.loads((out / "run.json").read_text())["products"])
    assert set(snapshot(out)) == new | {"run.json"}


def test_incomplete_set_is_named_in_the_refusal(tmp_path: Path) -> None:
    out = tmp_path / "out"
    assert run([*MAP, "--out", str(out)]).returncode == 0
    (out / "run.json").unlink()  # as a run of an older version stopped before its record
    refused = run([*MAP, "--out", str(out)])
    assert refused.returncode == 1
    (line,) = error_lines(refused.stderr)
    assert "holds an incomplete product set" in line and "--overwrite" in line
    fixed = run([*MAP, "--out", str(out), "--overwrite"])
    assert fixed.returncode == 0, fixed.stderr
    assert set(snapshot(out)) == set(json.loads((out / "run.json").read_text())["products"]) | {"run.json"}


def test_a_live_runs_staging_is_left_alone(tmp_path: Path) -> None:
    """Only staging of a process that is gone is removed; a running one keeps its folder."""
    out = tmp_path / "out"
    out.mkdir()
    live = out / f".ttmap-staging-{os.getpid()}-0123abcd"  # this test process is alive ...
    other = out / ".ttmap-staging-notapid-0123abcd"  # ... and this is not ttmap's name
    for d in (live, other):
        (d / "new").mkdir(parents=True)
    done = run([*MAP, "--out", str(out)])
    assert done.returncode == 0, done.stderr
    assert live.is_dir() and other.is_dir()
    assert "staging folder" not in done.stderr
    shutil.rmtree(live)
