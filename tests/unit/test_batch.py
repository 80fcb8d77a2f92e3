"""Unit tests of ttmap.jobs.batch: run_tasks on the serial executor, a local cluster and a scheduler address.

The bathymetry is a tiny invented lon/lat grid (80 x 100 cells of 0.05 degrees,
140-145 E, 36-40 N, elevation -3000 m) with an island, a shelf and a line of
shallow water, written into a temporary folder. The cluster fixtures are
module-scoped: one local cluster of two worker processes (started and stopped
by ``run_tasks``) and one scheduler plus one worker started here as
subprocesses on 127.0.0.1 with a random port, each with a lifetime so that
they stop by themselves even if the test process dies.
"""

from __future__ import annotations

import doctest
import json
import os
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import rasterio
from affine import Affine

import ttmap
from ttmap.jobs import batch as batch_module
from ttmap.jobs.batch import TaskSummary, run_tasks
from ttmap.tasks import MediumSpec, SolveTask, check_executor
from ttmap.errors import InputDataError, OutputExistsError
from ttmap.io.raster import file_sha256, read_bathymetry
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.sources import Source
from ttmap.traveltime import prepare_medium

TRANSFORM = Affine(0.05, 0.0, 140.0, 0.0, -0.05, 40.0)
SHAPE = (80, 100)
LAND_LONLAT = (142.3, 38.0)  # inside the island


def _write_bathymetry(path: Path) -> Path:
    rows, cols = SHAPE
    elev = np.full(SHAPE, -3000.0, dtype=np.float32)
    elev[30:50, 40:55] = 100.0  # island (142.0-142.75 E, 37.5-38.5 N)
    elev[:, 85:] = -150.0  # shelf in the east
    elev[60:62, :30] = -20.0  # a shallow ridge in the south-west
    with rasterio.open(
        path, "w", driver="GTiff", width=cols, height=rows, count=1, dtype="float32",
        crs="EPSG:4326", transform=TRANSFORM,
    ) as dst:
        dst.write(elev, 1)
    return path


def _tasks() -> list[SolveTask]:
    return [
        SolveTask("west", Source.point(140.5, 39.5), meta={"scenario": "west"}),
        SolveTask("east_T600", Source.point(144.0, 37.0), mode="group", period_s=600.0),
        SolveTask("land_src", Source.point(*LAND_LONLAT)),
        SolveTask("south", Source.point(141.0, 36.5), max_time_s=1800.0),
        SolveTask("site_a", Source.point(144.6, 38.5), kind="site"),
        SolveTask("south_T600", Source.point(141.0, 36.5), mode="group", period_s=600.0),
    ]


GOOD = ["west", "east_T600", "south", "site_a", "south_T600"]


@pytest.fixture(scope="module")
def bathy(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return _write_bathymetry(tmp_path_factory.mktemp("bathy") / "bathy.tif")


@pytest.fixture(scope="module")
def serial_run(bathy: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[TaskSummary]]:
    out = tmp_path_factory.mktemp("serial")
    return out, run_tasks(_tasks(), MediumSpec(str(bathy)), out, executor="serial")


@pytest.fixture(scope="module")
def local_run(bathy: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[TaskSummary]]:
    out = tmp_path_factory.mktemp("local")
    return out, run_tasks(_tasks(), MediumSpec(str(bathy)), out, executor="local", n_workers=2)


@pytest.fixture(scope="module")
def scheduler_address(tmp_path_factory: pytest.TempPathFactory) -> Any:
    """A Dask scheduler and one worker on 127.0.0.1 (random port), as subprocesses.

    Both stop by themselves (scheduler idle timeout, worker lifetime) and are
    terminated at the end of the module.
    """
    from distributed import Client

    folder = tmp_path_factory.mktemp("scheduler")
    sched_file = folder / "scheduler.json"
    env = dict(os.environ)
    repo = str(Path(ttmap.__file__).resolve().parents[1])
    env["PYTHONPATH"] = os.pathsep.join([repo, env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    logs = [open(folder / "scheduler.log", "w"), open(folder / "worker.log", "w")]
    sched = subprocess.Popen(
        [sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
         "--port", "0", "--no-dashboard", "--dashboard-address", "127.0.0.1:0",
         "--scheduler-file", str(sched_file),
         "--idle-timeout", "120s"],
        cwd=folder, env=env, stdout=logs[0], stderr=subprocess.STDOUT,
    )
    procs = [sched]
    try:
        deadline = time.monotonic() + 30.0
        while not sched_file.exists() and time.monotonic() < deadline and sched.poll() is None:
            time.sleep(0.1)
        if not sched_file.exists():
            pytest.fail("the Dask scheduler did not start: " + (folder / "scheduler.log").read_text())
        time.sleep(0.2)  # the file is written in one go, but give the writer a moment
        address = json.loads(sched_file.read_text())["address"]
        assert address.startswith("tcp://127.0.0.1:")
        worker = subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_worker", address, "--nthreads", "1",
             "--nworkers", "1", "--no-nanny", "--no-dashboard", "--dashboard-address",
             "127.0.0.1:0", "--host", "127.0.0.1",
             "--lifetime", "180s"],
            cwd=folder, env=env, stdout=logs[1], stderr=subprocess.STDOUT,
        )
        procs.append(worker)
        with Client(address, timeout="20s") as client:
            client.wait_for_workers(1, timeout=60)
        yield address
    finally:
        for p in reversed(procs):
            p.terminate()
        for p in reversed(procs):
            try:
                p.wait(timeout=15)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait(timeout=5)
        for fh in logs:
            fh.close()


@pytest.fixture(scope="module")
def address_run(
    bathy: Path, scheduler_address: str, tmp_path_factory: pytest.TempPathFactory
) -> tuple[Path, list[TaskSummary]]:
    out = tmp_path_factory.mktemp("address")
    return out, run_tasks(_tasks(), MediumSpec(str(bathy)), out, executor=scheduler_address)


def _read(path: str) -> tuple[np.ndarray, float, dict[str, str]]:
    with rasterio.open(path) as src:
        return src.read(1), src.nodata, src.tags()


def _by_name(summaries: list[TaskSummary]) -> dict[str, TaskSummary]:
    return {s.name: s for s in summaries}


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(batch_module)
    assert attempted > 0 and failed == 0


def test_serial_rasters_equal_a_direct_solve(bathy, serial_run):
    _, summaries = serial_run
    b = read_bathymetry(bathy)
    s = _by_name(summaries)
    for task in _tasks():
        if task.name not in GOOD:
            continue
        medium = prepare_medium(b.depth_m, b.grid, mode=task.mode, period_s=task.period_s)
        want = medium.travel_time(task.source, max_time_s=task.max_time_s).arrival_time_min
        got, nodata, _ = _read(s[task.name].raster)
        assert nodata == -9999.0
        np.testing.assert_array_equal(got == nodata, ~np.isfinite(want))
        np.testing.assert_array_equal(got[got != nodata], want[np.isfinite(want)].astype(np.float32))
    # the period solve is slower than the front from the same point (group speed <= sqrt(g h);
    # 0.05 min allows for second-order marching on the shallow ridge)
    front, _, _ = _read(s["south"].raster)
    energy, _, _ = _read(s["south_T600"].raster)
    both = (front != -9999.0) & (energy != -9999.0)
    assert (energy[both] >= front[both] - 0.05).all()
    assert (energy[both] - front[both]).max() > 0.1
    # the maximum time is respected
    assert front[front != -9999.0].max() <= 30.0


@pytest.mark.parametrize("other", ["local_run", "address_run"])
def test_cluster_rasters_are_identical_to_serial(request, serial_run, other):
    _, serial = serial_run
    _, cluster = request.getfixturevalue(other)
    assert [s.name for s in cluster] == [t.name for t in _tasks()]
    for a, b in zip(serial, cluster):
        assert (a.ok, b.ok) == (a.name in GOOD, b.name in GOOD)
        if not a.ok:
            assert a.error == b.error
            continue
        va, na, ta = _read(a.raster)
        vb, nb, tb = _read(b.raster)
        assert va.dtype == vb.dtype == np.float32
        assert na == nb == -9999.0
        assert np.array_equal(va, vb), a.name
        assert ta == tb
        assert a.summary["cells_reached"] == b.summary["cells_reached"] > 0


@pytest.mark.parametrize("which", ["serial_run", "local_run", "address_run"])
def test_failing_task_is_reported_and_the_others_succeed(request, which):
    out, summaries = request.getfixturevalue(which)
    s = _by_name(summaries)
    bad = s["land_src"]
    assert not bad.ok and bad.raster is None and not bad.skipped
    assert bad.error.startswith("task land_src: ")
    assert "lies on land" in bad.error and "\n" not in bad.error
    assert not (out / "arrival_land_src.tif").exists()
    assert not (out / "land_src.task.json").exists()
    for name in GOOD:
        assert s[name].ok and s[name].error is None
        assert Path(s[name].raster) == out / f"arrival_{name}.tif"
        assert (out / f"{name}.task.json").exists()
    # no temporary files are left behind
    assert not [p for p in out.iterdir() if p.name.startswith(".")]


@pytest.mark.parametrize("which", ["serial_run", "local_run", "address_run"])
def test_each_worker_reads_the_bathymetry_once(request, which):
    _, summaries = request.getfixturevalue(which)
    workers = [s.summary["worker"] for s in summaries]
    pids = {w["pid"] for w in workers}
    assert 1 <= len(pids) <= 2
    assert all(w["bathymetry_reads"] == 1 for w in workers)
    # two (mode, period) media at most per worker, not one per task
    last = {}
    for w in workers:
        last[w["pid"]] = max(last.get(w["pid"], 0), w["media_built"])
    assert all(1 <= n <= 2 for n in last.values())
    if which != "serial_run":
        assert os.getpid() not in pids
    if which == "serial_run":
        assert pids == {os.getpid()}


def test_a_running_worker_keeps_its_medium_across_runs(bathy, scheduler_address, address_run, tmp_path):
    summaries = run_tasks(
        [SolveTask("again", Source.point(140.5, 39.5))], MediumSpec(str(bathy)), tmp_path,
        executor=scheduler_address,
    )
    assert summaries[0].ok
    assert summaries[0].summary["worker"]["bathymetry_reads"] == 1
    pid = summaries[0].summary["worker"]["pid"]
    assert pid in {s.summary["worker"]["pid"] for s in address_run[1]}


def test_raster_tags_and_task_record(bathy, serial_run):
    out, summaries = serial_run
    s = _by_name(summaries)
    _, _, tags = _read(s["east_T600"].raster)
    assert tags["TASK"] == "east_T600"
    assert tags["SOURCE"] == Source.point(144.0, 37.0).label
    assert tags["SPEED_MODE"] == "group" and tags["PERIOD_S"] == "600"
    assert tags["CAUTION"] == CAUTION_SHORT
    assert tags["SOFTWARE"] == f"ttmap {ttmap.__version__}"
    assert tags["UNITS"] == "minutes"
    _, _, site_tags = _read(s["site_a"].raster)
    assert site_tags["TASK_KIND"] == "site" and "reciprocity" in site_tags["QUANTITY"]
    rec = json.loads((out / "east_T600.task.json").read_text())
    assert rec["inputs"]["bathymetry_sha256"] == file_sha256(bathy)
    assert rec["inputs"]["ttmap_version"] == ttmap.__version__
    assert rec["inputs"]["task"]["period_s"] == 600.0
    # The path is recorded for people; the content (SHA-256) identifies the input.
    assert rec["bathymetry"] == str(bathy.resolve())
    assert "bathymetry" not in rec["inputs"]["medium"]
    assert rec["inputs_sha256"] == tags["TASK_INPUTS_SHA256"]
    assert rec["summary"]["cells_reached"] == s["east_T600"].summary["cells_reached"]
    assert s["west"].summary["task"]["meta"] == {"scenario": "west"}


# ---------------------------------------------------------------------------
# Resume and overwrite
# ---------------------------------------------------------------------------


def _mtimes(out: Path) -> dict[str, int]:
    return {p.name: p.stat().st_mtime_ns for p in out.iterdir()}


def test_resume_skips_finished_tasks_and_reruns_incomplete_ones(bathy, tmp_path):
    spec = MediumSpec(str(bathy))
    first = run_tasks(_tasks(), spec, tmp_path)
    before = _mtimes(tmp_path)
    calls: list[tuple[int, int, str]] = []
    second = run_tasks(_tasks(), spec, tmp_path, progress=lambda *a: calls.append(a))
    s = _by_name(second)
    assert all(s[n].skipped and s[n].ok for n in GOOD)
    assert not s["land_src"].skipped and not s["land_src"].ok  # failed tasks are tried again
    assert _mtimes(tmp_path) == before
    assert s["west"].summary["cells_reached"] == _by_name(first)["west"].summary["cells_reached"]
    assert [c[0] for c in calls] == list(range(1, 7)) and {c[1] for c in calls} == {6}
    assert sorted(c[2] for c in calls) == sorted(t.name for t in _tasks())

    # a task whose record is missing (interrupted after its raster) runs again
    (tmp_path / "south.task.json").unlink()
    third = _by_name(run_tasks(_tasks(), spec, tmp_path))
    assert third["south"].ok and not third["south"].skipped
    assert (tmp_path / "south.task.json").exists()
    assert all(third[n].skipped for n in GOOD if n != "south")
    # ... and one whose raster is missing too
    (tmp_path / "arrival_west.tif").unlink()
    fourth = _by_name(run_tasks(_tasks(), spec, tmp_path))
    assert fourth["west"].ok and not fourth["west"].skipped
    assert (tmp_path / "arrival_west.tif").exists()


def test_changed_inputs_are_refused_up_front_without_overwrite(bathy, tmp_path):
    run_tasks(_tasks()[:2], MediumSpec(str(bathy)), tmp_path)
    before = _mtimes(tmp_path)
    changed = MediumSpec(str(bathy), floor_depth_m=20.0)
    with pytest.raises(OutputExistsError, match=r"2 task\(s\).*west.*--overwrite"):
        run_tasks(_tasks()[:2], changed, tmp_path)
    assert _mtimes(tmp_path) == before
    # a third, new task is not run either: the refusal comes before any work
    with pytest.raises(OutputExistsError):
        run_tasks(_tasks()[:2] + [_tasks()[3]], changed, tmp_path)
    assert not (tmp_path / "arrival_south.tif").exists()
    rerun = run_tasks(_tasks()[:2], changed, tmp_path, overwrite=True)
    assert all(s.ok and not s.skipped for s in rerun)
    rec = json.loads((tmp_path / "west.task.json").read_text())
    assert rec["inputs"]["medium"]["floor_depth_m"] == 20.0
    # now the new inputs resume
    assert all(s.skipped for s in run_tasks(_tasks()[:2], changed, tmp_path))


def test_resume_off_needs_overwrite(bathy, tmp_path):
    spec = MediumSpec(str(bathy))
    run_tasks(_tasks()[:1], spec, tmp_path)
    with pytest.raises(OutputExistsError, match="--overwrite"):
        run_tasks(_tasks()[:1], spec, tmp_path, resume=False)
    again = run_tasks(_tasks()[:1], spec, tmp_path, resume=False, overwrite=True)
    assert again[0].ok and not again[0].skipped


def test_foreign_raster_is_not_replaced(bathy, tmp_path):
    (tmp_path / "arrival_west.tif").write_bytes(b"not ours")
    with pytest.raises(OutputExistsError, match=r"west .*other inputs.*--overwrite"):
        run_tasks(_tasks()[:1], MediumSpec(str(bathy)), tmp_path)
    assert (tmp_path / "arrival_west.tif").read_bytes() == b"not ours"


# ---------------------------------------------------------------------------
# Checks and small behaviours
# ---------------------------------------------------------------------------


def test_warnings_are_carried_in_the_summary(bathy, tmp_path):
    task = SolveTask("snapped", Source.point(*LAND_LONLAT), snap_radius_m=60_000.0)
    (s,) = run_tasks([task], MediumSpec(str(bathy)), tmp_path)
    assert s.ok
    assert any("source moved" in w for w in s.warnings)
    assert s.summary["source_moved_m"] > 0


def test_a_bad_medium_fails_every_task_with_its_reason(tmp_path):
    spec = MediumSpec(str(tmp_path / "missing.tif"))
    out = run_tasks(_tasks()[:2], spec, tmp_path / "out")
    assert [s.ok for s in out] == [False, False]
    assert all("does not exist" in s.error and s.error.startswith(f"task {s.name}:") for s in out)


def test_bad_arguments_are_refused(bathy, tmp_path):
    spec = MediumSpec(str(bathy))
    t = _tasks()[0]
    with pytest.raises(InputDataError, match="used twice"):
        run_tasks([t, t], spec, tmp_path)
    with pytest.raises(InputDataError, match="not file-safe"):
        run_tasks([SolveTask("a/b", t.source)], spec, tmp_path)
    with pytest.raises(InputDataError, match="neither 'serial', 'local'"):
        run_tasks([t], spec, tmp_path, executor="paralel")
    with pytest.raises(InputDataError, match="whole number"):
        run_tasks([t], spec, tmp_path, executor="local", n_workers=0)
    assert run_tasks([], spec, tmp_path) == []
    assert check_executor("tcp://127.0.0.1:8786") is None
    assert check_executor("127.0.0.1:8786") is None
    assert check_executor(3) is not None


def test_unreachable_scheduler_is_reported(bathy, tmp_path, monkeypatch):
    import socket

    monkeypatch.setattr(batch_module, "CONNECT_TIMEOUT_S", 2.0)
    with socket.socket() as sock:  # a free port with nobody listening
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    t0 = time.monotonic()
    with pytest.raises(InputDataError, match="cannot reach the Dask scheduler"):
        run_tasks(_tasks()[:1], MediumSpec(str(bathy)), tmp_path, executor=f"tcp://127.0.0.1:{port}")
    assert time.monotonic() - t0 < 20.0


def test_medium_spec_list_window_is_hashable(bathy):
    spec = MediumSpec(str(bathy), window=[140, 36, 145, 40])  # type: ignore[arg-type]
    assert spec.window == (140.0, 36.0, 145.0, 40.0)
    assert hash(spec) == hash(MediumSpec(str(bathy), window=(140.0, 36.0, 145.0, 40.0)))
