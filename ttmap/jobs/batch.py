"""Many independent solves (scenarios, periods, site-centred maps), serially or on Dask.

- :class:`MediumSpec` says how every worker builds the speed field: which
  bathymetry file and read options, floor depth, far-field flag, earth model.
- :class:`SolveTask` is one solve: a unique file-safe name, a source, a speed
  mode and period, and limits.
- :func:`run_tasks` runs tasks and returns one :class:`TaskSummary` each;
  workers write their rasters straight to the output folder and the client
  gathers only the summaries.

Executors
---------
``"serial"`` runs every task in this process. ``"local"`` starts a
``distributed.LocalCluster`` of worker *processes* (scikit-fmm holds the GIL,
so threads would not run solves in parallel) with one thread each, sized to
the machine, and stops it afterwards. Any other text is taken as the address
of a running Dask scheduler (``tcp://host:8786``); its workers must be able to
read the bathymetry path and write to the output folder (a shared file
system), and should run one thread each (``dask worker --nthreads 1``).
Every executor runs the same function per task, so the rasters are identical
bit for bit.

The medium on the workers
-------------------------
No array travels with a task: each worker process reads the bathymetry file
itself, once, and keeps the depth grid and the prepared
:class:`~ttmap.traveltime.Medium` of each (speed mode, period) in a
module-level cache: at most :data:`MEDIA_PER_WORKER` media (default one, least
recently used dropped first, before the next is built). Tasks are queued
grouped by mode and period, so a worker builds each medium about once. The cache
is keyed on the spec and the file's SHA-256, so a changed file is read again,
and a worker whose file differs from the client's refuses the task. The
serial executor empties the cache when the run ends; a worker process keeps it
for later runs with the same spec.

Files and resuming
------------------
Task ``name`` writes ``arrival_<name>.tif`` (float32 minutes) and then, last,
``<name>.task.json``: the task's *inputs* - its content: source geometry,
speed mode and period, limits, the medium spec with the bathymetry's SHA-256
in place of its path, the ttmap version; never the scenario file's name, the
source's label or extra raster tags - their SHA-256 (also stored in the
raster's ``TASK_INPUTS_SHA256`` tag), and the summary. A renamed copy of a
scenario file therefore resumes every finished task; when an input differs
the message names it (:func:`inputs_difference`). Before
anything runs, every task's existing outputs are classified:

- both files present, recording the same inputs: complete; skipped when
  ``resume`` (``TaskSummary.skipped``);
- files from the same inputs but incomplete (raster without record after an
  interruption, or record without raster): solved again, replacing them,
  when ``resume``;
- anything else present (other inputs, unreadable record, or ``resume`` off):
  replaced only with ``overwrite``. Otherwise the **whole run is refused up
  front** with :class:`~ttmap.errors.OutputExistsError` naming the tasks and
  ``--overwrite``, so a run never stops half-way over someone else's files.

With ``nests`` (:class:`~ttmap.tasks.NestSpec`, e.g. a scenario file's
``[[nest]]`` tables) every task also solves each nest from its basin field
and writes ``arrival_<name>_nest-<nest>.tif`` before its record; a task is
complete only with every nest raster, and the nests' SHA-256s are part of its
inputs (docs/nesting.md).

A task that fails (source on land, unreadable file ...) is reported in its
summary (``ok=False``, one-line ``error`` naming the task) and writes nothing;
the other tasks go on, and a later resumed run tries it again.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import json
import os
import re
import threading
import time
import warnings
from collections import Counter, OrderedDict
from collections.abc import Iterator, Callable, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ttmap.defaults import CONNECT_TIMEOUT_S, EXECUTORS, MEDIA_PER_WORKER
from ttmap.errors import InputDataError, OutputExistsError, TtmapError, TtmapWarning
from ttmap.tasks import MediumSpec, NestSpec, SolveTask, check_executor

if TYPE_CHECKING:
    from ttmap.io.raster import Bathymetry
    from ttmap.traveltime import Medium

__all__ = [
    "BatchInterrupted",
    "DASK_LOGGERS",
    "TaskSummary",
    "map_calls",
    "medium_for_spec",
    "inputs_difference",
    "nest_output_path",
    "run_tasks",
    "task_output_paths",
]

_NAME_RE = re.compile(r"^[A-Za-z0-9_.-]+$")
_RECORD_VERSION = 1

ProgressFn = Callable[[int, int, str], None]


@dataclass(frozen=True)
class TaskSummary:
    """What came back from one task (the client gathers only these).

    Attributes
    ----------
    name : str
    ok : bool
        The raster and record exist (written now, or earlier when skipped).
    raster : str or None
        Path of ``arrival_<name>.tif``.
    summary : dict
        JSON-ready: the task description, what the solve reached
        (:meth:`ttmap.traveltime.TravelTimeSummary.as_dict`), the range of
        arrival minutes, and ``worker`` (process id, bathymetry reads and
        media built by that process).
    error : str or None
        One line naming the task, when ``ok`` is False.
    skipped : bool
        Outputs of a finished earlier run with the same inputs were kept.
    seconds : float
        Wall time of the task on its worker (0 when skipped).
    warnings : tuple of str
        Warnings the solve raised (e.g. a source moved to open water).
    record : str or None
        Path of ``<name>.task.json``.
    nests : dict
        Nest name -> path of ``arrival_<name>_nest-<nest>.tif`` (runs with nests).
    """

    name: str
    ok: bool
    raster: str | None
    summary: dict[str, Any]
    error: str | None = None
    skipped: bool = False
    seconds: float = 0.0
    warnings: tuple[str, ...] = ()
    record: str | None = None
    nests: dict[str, str] = dataclasses.field(default_factory=dict)


# ---------------------------------------------------------------------------
# Small helpers
# ---------------------------------------------------------------------------


def task_output_paths(name: str, out_dir: str | os.PathLike[str]) -> tuple[Path, Path]:
    """``(arrival_<name>.tif, <name>.task.json)`` in ``out_dir``.

    Examples
    --------
    >>> [p.name for p in task_output_paths("north_front", "out")]
    ['arrival_north_front.tif', 'north_front.task.json']
    """
    out = Path(out_dir)
    return out / f"arrival_{name}.tif", out / f"{name}.task.json"


def nest_output_path(name: str, nest: str, out_dir: str | os.PathLike[str]) -> Path:
    """``arrival_<name>_nest-<nest>.tif`` in ``out_dir``: task ``name``'s raster on nest ``nest``.

    Examples
    --------
    >>> nest_output_path("north_front", "harbour", "out").name
    'arrival_north_front_nest-harbour.tif'
    """
    return Path(out_dir) / f"arrival_{name}_nest-{nest}.tif"


def _json_default(value: Any) -> Any:
    if hasattr(value, "tolist"):
        return value.tolist()
    if isinstance(value, (set, frozenset, tuple)):
        return list(value)
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    return str(value)


def _canonical(value: Any) -> Any:
    """``value`` as plain JSON types (tuples to lists, numpy to Python)."""
    return json.loads(json.dumps(value, sort_keys=True, default=_json_default))


def _digest(value: Any) -> str:
    text = json.dumps(value, sort_keys=True, separators=(",", ":"), default=_json_default)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _now_utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


def _fmt_number(value: float | None) -> str:
    return "" if value is None else f"{value:g}"


# ---------------------------------------------------------------------------
# The worker side: one cache per process, one function per task
# ---------------------------------------------------------------------------

_CACHE_LOCK = threading.RLock()
#: (spec, sha256) -> Bathymetry; at most one entry.
_BATHY: dict[tuple[MediumSpec, str | None], Bathymetry] = {}
#: (spec, sha256, mode, period_s) -> Medium, least recently used first.
_MEDIA: OrderedDict[tuple[MediumSpec, str | None, str, float | None], Medium] = OrderedDict()
#: (spec, sha256, mode, period_s) -> error message of a medium that cannot be built.
_MEDIA_ERRORS: dict[tuple[MediumSpec, str | None, str, float | None], str] = {}
#: How often this process read each (spec, sha256), and built each medium.
_READS: Counter[tuple[MediumSpec, str | None]] = Counter()
_BUILDS: Counter[tuple[MediumSpec, str | None]] = Counter()
#: (nest path, sha256, band, depth_positive) -> Bathymetry of the run's nests.
_NESTS: dict[tuple[str, str | None, int | None, bool], Bathymetry] = {}


def _clear_cache() -> None:
    """Drop every cached bathymetry and medium of this process."""
    with _CACHE_LOCK:
        _BATHY.clear()
        _MEDIA.clear()
        _MEDIA_ERRORS.clear()
        _NESTS.clear()


def _bathymetry_for(spec: MediumSpec, sha256: str | None) -> Bathymetry:
    from ttmap.io.raster import read_bathymetry

    key = (spec, sha256)
    bathy = _BATHY.get(key)
    if bathy is not None:
        return bathy
    # Another spec or file version: drop it and its media before reading.
    _BATHY.clear()
    for k in [k for k in _MEDIA if (k[0], k[1]) != key]:
        del _MEDIA[k]
    _READS[key] += 1
    bathy = read_bathymetry(spec.bathymetry, **spec.reading_kwargs())
    if sha256 is not None and bathy.sha256 is not None and bathy.sha256 != sha256:
        raise InputDataError(
            f"bathymetry {spec.bathymetry!r} on this worker (sha256 {bathy.sha256[:12]}...) differs "
            f"from the client's (sha256 {sha256[:12]}...); the file changed during the run or the "
            "workers see another copy: give every worker the same file and run again"
        )
    _BATHY[key] = bathy
    return bathy


def _medium_for(spec: MediumSpec, sha256: str | None, mode: str, period_s: float | None) -> Medium:
    """The prepared medium, built at most once per process (and LRU-kept)."""
    from ttmap.traveltime import prepare_medium

    key = (spec, sha256, mode, period_s)
    with _CACHE_LOCK:
        medium = _MEDIA.get(key)
        if medium is not None:
            _MEDIA.move_to_end(key)
            return medium
        if key in _MEDIA_ERRORS:
            raise InputDataError(_MEDIA_ERRORS[key])
        # Make room first, so a worker never holds more media than allowed.
        while _MEDIA and len(_MEDIA) >= max(1, MEDIA_PER_WORKER):
            _MEDIA.popitem(last=False)
        try:
            bathy = _bathymetry_for(spec, sha256)
            medium = prepare_medium(
                bathy.depth_m, bathy.grid, mode=mode, period_s=period_s,
                floor_depth_m=spec.floor_depth_m, far_field=spec.far_field,
                earth=spec.earth,  # type: ignore[arg-type]
            )
        except TtmapError as err:
            # The same spec fails the same way for every later task: remember it.
            _MEDIA_ERRORS[key] = _one_line(str(err))
            raise
        _BUILDS[(spec, sha256)] += 1
        _MEDIA[key] = medium
        return medium


def _nest_bathymetry(nest: NestSpec, sha256: str | None, spec: MediumSpec) -> Bathymetry:
    """The nest raster, read once per process (the medium's band and sign convention)."""
    from ttmap.io.raster import read_bathymetry

    key = (nest.path, sha256, spec.band, spec.depth_positive)
    with _CACHE_LOCK:
        bathy = _NESTS.get(key)
        if bathy is not None:
            return bathy
        for k in [k for k in _NESTS if k[0] == nest.path]:
            del _NESTS[k]
        bathy = read_bathymetry(nest.path, band=spec.band, depth_positive=spec.depth_positive)
        if sha256 is not None and bathy.sha256 is not None and bathy.sha256 != sha256:
            raise InputDataError(
                f"nest {nest.name!r} ({nest.path}) on this worker differs from the client's "
                "(sha256); the file changed during the run or the workers see another copy: give "
                "every worker the same file and run again"
            )
        _NESTS[key] = bathy
        return bathy


def _solve_task_nests(job: _Job, result: Any) -> dict[str, Any]:
    """Nest name -> NestResult of one task: each nest solved from the task's basin field."""
    from ttmap.nesting import solve_nest

    out: dict[str, Any] = {}
    for nest, sha in job.nests:
        bathy = _nest_bathymetry(nest, sha, job.spec)
        out[nest.name] = solve_nest(
            result.grid, result.arrival_time_s, bathy.grid, bathy.depth_m, name=nest.name,
            mode=job.task.mode, period_s=job.task.period_s, floor_depth_m=job.spec.floor_depth_m,
            far_field=job.spec.far_field, earth=job.spec.earth,  # type: ignore[arg-type]
            max_time_s=job.task.max_time_s,
        )
    return out


def _worker_info(spec: MediumSpec, sha256: str | None) -> dict[str, Any]:
    key = (spec, sha256)
    return {"pid": os.getpid(), "bathymetry_reads": _READS[key], "media_built": _BUILDS[key]}


@dataclass(frozen=True)
class _Job:
    """Everything a worker needs for one task (small: no arrays)."""

    task: SolveTask
    spec: MediumSpec
    bathymetry_sha256: str | None
    out_dir: str
    replace: bool
    inputs: dict[str, Any]
    inputs_sha256: str
    extra_tags: dict[str, str]
    #: (nest, its SHA-256) of every nest the task solves after its basin solve.
    nests: tuple[tuple[NestSpec, str | None], ...] = ()


def _raster_tags(job: _Job, result: Any) -> dict[str, str]:
    import ttmap
    from ttmap.products.cautions import CAUTION_SHORT

    task, spec = job.task, job.spec
    quantity = (
        "travel time between the site and each cell (by reciprocity: from a source at the "
        "cell to the site), after the origin time"
        if task.kind == "site"
        else "arrival time after the origin time"
    )
    earth = result.settings.get("earth")
    tags = dict(job.extra_tags)
    tags.update({
        "QUANTITY": quantity,
        "TASK": task.name,
        "TASK_KIND": task.kind,
        "SOURCE": task.source.label,
        "SPEED_MODE": task.mode,
        "PERIOD_S": _fmt_number(task.period_s),
        "FLOOR_DEPTH_M": f"{spec.floor_depth_m:g}",
        "FAR_FIELD_CORRECTION": (
            "effective depth h(1-gh/cs^2), cs=1500 m/s" if spec.far_field else "none"
        ),
        "EARTH_MODEL": str(earth or "projected grid (plane)"),
        "MAX_TIME_MIN": "" if task.max_time_s is None else f"{task.max_time_s / 60.0:g}",
        "BATHYMETRY": os.path.basename(spec.bathymetry),
        "BATHYMETRY_SHA256": job.bathymetry_sha256 or "",
        "TASK_INPUTS_SHA256": job.inputs_sha256,
        "SOFTWARE": f"ttmap {ttmap.__version__}",
        "CAUTION": CAUTION_SHORT,
    })
    return tags


def _band_description(task: SolveTask) -> str:
    what = "front (long-wave speed)" if task.mode == "long-wave" else (
        f"{'energy' if task.mode == 'group' else 'phase'} of {_fmt_number(task.period_s)} s waves "
        f"({task.mode} speed)"
    )
    if task.kind == "site":
        return f"travel time of the {what} between the site and each cell, minutes"
    from ttmap.products.cautions import minutes_after

    return f"arrival time of the {what}, {minutes_after(task.source.kind)}"


def _run_task(job: _Job) -> TaskSummary:
    """Solve one task and write its raster and record; never raises for a task's own failure."""
    import numpy as np

    from ttmap.io.atomic import atomic_output
    from ttmap.io.raster import write_arrival_geotiff

    task = job.task
    t0 = time.perf_counter()
    base: dict[str, Any] = {"task": job.task.describe()}
    caught: list[warnings.WarningMessage] = []
    tif, rec_path = task_output_paths(task.name, job.out_dir)
    written: list[Path] = []
    nest_paths: dict[str, str] = {}
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", TtmapWarning)
            medium = _medium_for(job.spec, job.bathymetry_sha256, task.mode, task.period_s)
            result = medium.travel_time(
                task.source, max_time_s=task.max_time_s, snap_radius_m=task.snap_radius_m
            )
            time_min = result.arrival_time_min
            finite = time_min[np.isfinite(time_min)]
            summary = dict(
                base,
                **result.summary.as_dict(),
                arrival_min_range=(
                    None if finite.size == 0
                    else [round(float(finite.min()), 3), round(float(finite.max()), 3)]
                ),
            )
            del finite
            # every nest is solved before anything is written: a failing nest writes nothing
            solved = _solve_task_nests(job, result) if job.nests else {}
            if solved:
                summary["nests"] = {k: v.summary.as_dict() for k, v in solved.items()}
            tags = _raster_tags(job, result)
            write_arrival_geotiff(
                tif, time_min, result.grid, tags=tags,
                band_description=_band_description(task), overwrite=job.replace,
            )
            written.append(tif)
            for (nest, sha), nres in zip(job.nests, solved.values(), strict=True):
                path = nest_output_path(task.name, nest.name, job.out_dir)
                write_arrival_geotiff(
                    path, nres.arrival_time_min, nres.grid,
                    tags=dict(tags, NEST=nest.name, NEST_RASTER=os.path.basename(nest.path),
                              NEST_SHA256=sha or ""),
                    band_description=f"{_band_description(task)} (nest {nest.name}, from the basin's "
                                     "times on its edge)",
                    overwrite=job.replace,
                )
                written.append(path)
                nest_paths[nest.name] = str(path)
    except Exception as err:  # a task's failure is reported, never lost
        _remove_partial(written)
        kind = "" if isinstance(err, TtmapError) else f"{type(err).__name__}: "
        summary = dict(base, worker=_worker_info(job.spec, job.bathymetry_sha256))
        return TaskSummary(
            name=task.name, ok=False, raster=None, summary=summary,
            error=_one_line(f"task {task.name}: {kind}{err}"),
            seconds=time.perf_counter() - t0,
            warnings=tuple(_one_line(str(w.message)) for w in caught
                           if issubclass(w.category, TtmapWarning)),
        )
    seconds = time.perf_counter() - t0
    warns = tuple(_one_line(str(w.message)) for w in caught if issubclass(w.category, TtmapWarning))
    summary["worker"] = _worker_info(job.spec, job.bathymetry_sha256)
    record = {
        "ttmap_task_record": _RECORD_VERSION,
        "inputs": job.inputs,
        "inputs_sha256": job.inputs_sha256,
        "raster_tags": job.extra_tags,
        "bathymetry": job.spec.bathymetry,
        "raster": tif.name,
        **({"nests": {k: Path(v).name for k, v in nest_paths.items()}} if nest_paths else {}),
        "summary": summary,
        "warnings": list(warns),
        "seconds": round(seconds, 4),
        "finished_utc": _now_utc(),
    }
    try:
        with atomic_output(rec_path, overwrite=job.replace) as tmp:
            Path(tmp).write_text(json.dumps(record, indent=2, default=_json_default) + "\n")
    except Exception as err:
        return TaskSummary(
            name=task.name, ok=False, raster=str(tif), summary=summary,
            error=_one_line(f"task {task.name}: writing its record failed: {err}"),
            seconds=seconds, warnings=warns,
        )
    return TaskSummary(
        name=task.name, ok=True, raster=str(tif), summary=summary, seconds=seconds,
        warnings=warns, record=str(rec_path), nests=nest_paths,
    )


def _remove_partial(paths: Sequence[Path]) -> None:
    """Remove the rasters a failed task wrote this time, so that a task is whole or absent."""
    for p in paths:
        try:
            p.unlink(missing_ok=True)
        except OSError:
            pass


# ---------------------------------------------------------------------------
# The client side
# ---------------------------------------------------------------------------


def _check_tasks(tasks: Sequence[SolveTask]) -> None:
    seen: set[str] = set()
    for i, t in enumerate(tasks):
        if not isinstance(t, SolveTask):
            raise InputDataError(f"task {i} is a {type(t).__name__}, not a SolveTask")
        if not isinstance(t.name, str) or not _NAME_RE.match(t.name):
            raise InputDataError(
                f"task name {t.name!r} is not file-safe; use letters, digits, '_', '-' and '.' only"
            )
        if t.name in seen:
            raise InputDataError(f"task name {t.name!r} is used twice; give every task its own name")
        seen.add(t.name)


def _check_tags(tags: Mapping[str, Any] | None) -> dict[str, str]:
    out: dict[str, str] = {}
    for key, value in (tags or {}).items():
        if not isinstance(key, str) or not re.match(r"^[^\s=]+$", key):
            raise InputDataError(f"raster tag name {key!r} is empty or holds spaces or '='")
        out[key] = str(value)
    return out


def _absolute_spec(spec: MediumSpec) -> MediumSpec:
    """The spec with a local file path made absolute (workers may run elsewhere)."""
    if os.path.exists(spec.bathymetry):
        return dataclasses.replace(spec, bathymetry=os.path.abspath(spec.bathymetry))
    return spec


def _task_inputs(task: SolveTask, spec: MediumSpec, sha: str | None, tags: dict[str, str],
                 nests: Sequence[tuple[NestSpec, str | None]] = ()) -> dict[str, Any]:
    """What identifies a finished task: its content, not where it was described.

    The source geometry, speed model, period and limits; the medium spec with
    the bathymetry's SHA-256 standing for its path; the nests (name and
    SHA-256, so a changed nest raster solves the task again); the ttmap version. Not the
    scenario file's name or path, the source's label, the task's place in the
    file or the extra raster tags, so a renamed copy of a scenario file resumes.
    """
    import ttmap

    described = task.describe()
    described.pop("meta", None)
    source = dict(described.get("source") or {})
    source.pop("label", None)
    described["source"] = source
    medium = spec.describe()
    if sha is not None:
        medium.pop("bathymetry", None)  # the content (sha) identifies it, not the path
    if medium.get("refine") == 1:
        medium.pop("refine")  # absent when off: records of runs before refine stay valid
    inputs: dict[str, Any] = {
        "task": described,
        "medium": medium,
        "bathymetry_sha256": sha,
        "ttmap_version": ttmap.__version__,
    }
    if nests:  # absent without nests: records of runs without nests stay valid
        inputs["nests"] = {n.name: h if h is not None else n.path for n, h in nests}
    return _canonical(inputs)


def _flatten(value: Any, prefix: str = "") -> dict[str, Any]:
    if isinstance(value, Mapping):
        out: dict[str, Any] = {}
        for k, v in value.items():
            out.update(_flatten(v, f"{prefix}.{k}" if prefix else str(k)))
        return out
    return {prefix: value}


def _short(value: Any) -> str:
    if isinstance(value, str) and re.fullmatch(r"[0-9a-f]{64}", value):
        return value[:12] + ".."
    text = json.dumps(value, default=_json_default) if not isinstance(value, str) else value
    return text if len(text) <= 60 else text[:57] + "..."


def inputs_difference(recorded: Any, now: Mapping[str, Any]) -> str:
    """One line naming the first input that differs between a task record and this run.

    Examples
    --------
    >>> inputs_difference({"bathymetry_sha256": "1a" * 32}, {"bathymetry_sha256": "3c" * 32})
    'bathymetry SHA-256 differs: recorded 1a1a1a1a1a1a.., now 3c3c3c3c3c3c..'
    >>> inputs_difference({"task": {"period_s": 300}}, {"task": {"period_s": 600}})
    'task.period_s differs: recorded 300, now 600'
    """
    if not isinstance(recorded, Mapping):
        return "the record holds no inputs"
    old, new = _flatten(recorded), _flatten(now)
    missing = object()
    for key in [*new, *(k for k in old if k not in new)]:
        a, b = old.get(key, missing), new.get(key, missing)
        if a != b:
            what = "bathymetry SHA-256" if key == "bathymetry_sha256" else key
            if key.startswith("nests."):
                what = f"nest {key[6:]!r} (its raster's SHA-256)"
            return (f"{what} differs: recorded {'(absent)' if a is missing else _short(a)}, "
                    f"now {'(absent)' if b is missing else _short(b)}")
    return "recorded inputs differ"


def _load_record(path: Path) -> dict[str, Any] | None:
    try:
        rec = json.loads(path.read_text())
    except (OSError, ValueError):
        return None
    return rec if isinstance(rec, dict) else None


def _raster_inputs_sha(path: Path) -> str | None:
    try:
        import rasterio

        with rasterio.open(path) as src:
            value = src.tags().get("TASK_INPUTS_SHA256")
    except Exception:
        return None
    return value or None


def _plan(
    task: SolveTask, inputs_sha: str, out_dir: Path, *, resume: bool, overwrite: bool,
    inputs: Mapping[str, Any] | None = None, nest_names: Sequence[str] = (),
) -> tuple[str, Any]:
    """("run", replace) | ("skip", record) | ("conflict", reason) for one task.

    The task's rasters are its basin raster and one per nest: "has" means
    any of them exists, "same" that every one that exists records these inputs,
    and a task is complete only with all of them and its record.
    """
    tif, rec_path = task_output_paths(task.name, out_dir)
    rasters = [tif, *(nest_output_path(task.name, n, out_dir) for n in nest_names)]
    present = [p for p in rasters if p.exists()]
    has_tif, has_rec = bool(present), rec_path.exists()
    if not has_tif and not has_rec:
        return "run", False
    rec = _load_record(rec_path) if has_rec else None
    rec_same = rec is not None and rec.get("inputs_sha256") == inputs_sha
    tif_same = has_tif and all(_raster_inputs_sha(p) == inputs_sha for p in present)
    if resume and len(present) == len(rasters) and has_rec and rec_same and tif_same:
        return "skip", rec
    if overwrite:
        return "run", True
    if resume and (not has_rec or rec_same) and (not has_tif or tif_same):
        return "run", True  # our own outputs, left incomplete by an interrupted run
    if not resume:
        reason = "outputs exist (resume is off)"
    elif has_rec and rec is None:
        reason = f"{rec_path.name} is unreadable"
    elif has_rec and not rec_same:
        reason = inputs_difference(rec.get("inputs") if rec else None, inputs or {})
    else:
        other = [p.name for p in present if _raster_inputs_sha(p) != inputs_sha]
        reason = f"{other[0] if other else tif.name} was made from other inputs"
    return "conflict", reason


def _skipped_summary(task: SolveTask, out_dir: Path, rec: dict[str, Any]) -> TaskSummary:
    tif, rec_path = task_output_paths(task.name, out_dir)
    stored = rec.get("summary")
    summary: dict[str, Any] = stored if isinstance(stored, dict) else {}
    nests = rec.get("nests") if isinstance(rec.get("nests"), dict) else {}
    return TaskSummary(
        name=task.name, ok=True, raster=str(tif), summary=dict(summary), skipped=True,
        warnings=tuple(str(w) for w in rec.get("warnings", []) or []), record=str(rec_path),
        nests={str(k): str(out_dir / str(v)) for k, v in (nests or {}).items()},
    )


def _check_nests(nests: Sequence[NestSpec]) -> tuple[tuple[NestSpec, str | None], ...]:
    """Each nest with its path made absolute and its SHA-256; names file-safe and unique."""
    from ttmap.io.raster import file_sha256

    out: list[tuple[NestSpec, str | None]] = []
    seen: set[str] = set()
    for n in nests:
        if not isinstance(n, NestSpec):
            raise InputDataError(f"nest {n!r} is a {type(n).__name__}, not a NestSpec")
        if not _NAME_RE.match(n.name):
            raise InputDataError(
                f"nest name {n.name!r} is not file-safe; use letters, digits, '_', '-' and '.' only"
            )
        if n.name in seen:
            raise InputDataError(f"nest name {n.name!r} is used twice; give every nest its own name")
        seen.add(n.name)
        if os.path.isfile(n.path):
            out.append((dataclasses.replace(n, path=os.path.abspath(n.path)), file_sha256(n.path)))
        else:
            out.append((n, None))
    return tuple(out)


def _bathymetry_digest(spec: MediumSpec) -> str | None:
    from ttmap.io.raster import file_sha256

    if os.path.isfile(spec.bathymetry):
        return file_sha256(spec.bathymetry)
    return None


def _import_distributed() -> Any:
    try:
        import distributed
    except ImportError as err:  # pragma: no cover - dask is a dependency
        raise InputDataError(
            "the 'local' executor and scheduler addresses need dask.distributed; install it with "
            "pip install 'dask[distributed]', or use --executor serial"
        ) from err
    return distributed


def _group_order(jobs: list[_Job]) -> list[_Job]:
    """Jobs grouped by (mode, period), groups in order of first appearance."""
    first: dict[tuple[str, float | None], int] = {}
    for i, j in enumerate(jobs):
        first.setdefault((j.task.mode, j.task.period_s), i)
    return sorted(jobs, key=lambda j: first[(j.task.mode, j.task.period_s)])


def run_tasks(
    tasks: Sequence[SolveTask],
    spec: MediumSpec,
    out_dir: str | os.PathLike[str],
    *,
    executor: str = EXECUTORS[0],
    n_workers: int | None = None,
    overwrite: bool = False,
    resume: bool = True,
    progress: ProgressFn | None = None,
    tags: Mapping[str, Any] | None = None,
    dask_log: bool = True,
    nests: Sequence[NestSpec] = (),
) -> list[TaskSummary]:
    """Run independent solves and write one raster and one record per task.

    Parameters
    ----------
    tasks : sequence of SolveTask
        Unique, file-safe names.
    spec : MediumSpec
        The medium every task shares.
    out_dir : path-like
        Output folder (created if missing). With a scheduler address it must
        be a folder every worker can write.
    executor : {"serial", "local"} or str
        ``"serial"``: this process. ``"local"``: a local cluster of worker
        processes, one thread each, started and stopped here. Otherwise the
        address of a running Dask scheduler, e.g. ``"tcp://10.0.0.5:8786"``.
    n_workers : int, optional
        Worker processes of the local cluster; default
        ``min(cpu_count, tasks to run)``. Ignored by the other executors.
    overwrite : bool
        Replace outputs made from other inputs (see the module notes).
    resume : bool
        Skip tasks whose outputs exist from the same inputs, and finish
        interrupted ones (default True).
    progress : callable, optional
        ``progress(done, total, name)`` after each task, skipped ones first;
        ``total`` is ``len(tasks)``.
    tags : mapping, optional
        Extra raster tags for every output (e.g. the scenario file name);
        recorded, but not part of what identifies a finished task (a task
        kept by a resumed run keeps the tags it was written with).
        ttmap's own tags take precedence over equal names.
    dask_log : bool
        Write the scheduler's and workers' log lines to ``dask.log`` in the
        output folder (default); False sends them nowhere. They never reach
        the terminal.
    nests : sequence of NestSpec, optional
        Finer rasters inside the basin: every task solves each of them from
        its basin field and writes ``arrival_<task>_nest-<nest>.tif`` (before
        its record, so a task is whole with all its rasters). Their SHA-256s
        are part of the task's inputs. The layout (inside the basin, no
        overlap, water) is the caller's to check before the run.

    Returns
    -------
    list of TaskSummary
        One per task, in the order of ``tasks``.

    Raises
    ------
    InputDataError
        Bad task names, executor or worker count; a scheduler that cannot be
        reached.
    OutputExistsError
        Some tasks' outputs exist from other inputs (or ``resume`` is off)
        and ``overwrite`` is False; nothing has run.
    BatchInterrupted
        Ctrl-C (a :class:`KeyboardInterrupt`): finished tasks are kept; the
        message says how many and how to resume.

    Notes
    -----
    A task's own failure (e.g. a :class:`~ttmap.errors.SourceError`) does not
    raise: it is reported in its summary and the other tasks go on.
    """
    tasks = list(tasks)
    _check_tasks(tasks)
    if not isinstance(spec, MediumSpec):
        raise InputDataError(f"spec must be a MediumSpec, got {type(spec).__name__}")
    problem = check_executor(executor)
    if problem:
        raise InputDataError(problem)
    if n_workers is not None and (
        isinstance(n_workers, bool) or not isinstance(n_workers, int) or n_workers < 1
    ):
        raise InputDataError(f"number of workers {n_workers!r} must be a whole number >= 1")
    extra_tags = _check_tags(tags)
    out = Path(out_dir).absolute()
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {str(out)!r} is a file; give a folder name")
    if not tasks:
        return []

    spec = _absolute_spec(spec)
    sha = _bathymetry_digest(spec)
    nest_list = _check_nests(nests)
    nest_names = [n.name for n, _ in nest_list]
    total = len(tasks)
    results: dict[str, TaskSummary] = {}
    jobs: list[_Job] = []
    conflicts: list[tuple[str, str]] = []
    for task in tasks:
        inputs = _task_inputs(task, spec, sha, extra_tags, nest_list)
        inputs_sha = _digest(inputs)
        action, detail = _plan(task, inputs_sha, out, resume=resume, overwrite=overwrite, inputs=inputs,
                               nest_names=nest_names)
        if action == "skip":
            results[task.name] = _skipped_summary(task, out, detail)
        elif action == "conflict":
            conflicts.append((task.name, detail))
        else:
            jobs.append(_Job(task, spec, sha, str(out), bool(detail), inputs, inputs_sha, extra_tags,
                             nest_list))
    if conflicts:
        shown = "; ".join(f"{n} ({why})" for n, why in conflicts[:5])
        more = f" and {len(conflicts) - 5} more" if len(conflicts) > 5 else ""
        raise OutputExistsError(
            f"{len(conflicts)} task(s) would replace existing outputs in {str(out)!r}: "
            f"{shown}{more}; pass --overwrite to replace them, or choose another output folder"
        )
    if jobs:
        out.mkdir(parents=True, exist_ok=True)

    done = 0
    for task in tasks:
        if task.name in results:
            done += 1
            if progress is not None:
                progress(done, total, task.name)

    def _finished(summary: TaskSummary) -> None:
        nonlocal done
        results[summary.name] = summary
        done += 1
        if progress is not None:
            progress(done, total, summary.name)

    jobs = _group_order(jobs)
    if jobs and executor == "serial":
        try:
            for job in jobs:
                _finished(_run_task(job))
        except KeyboardInterrupt:
            raise BatchInterrupted(_kept_on_disk(tasks, out), total, str(out)) from None
        finally:
            _clear_cache()
    elif jobs:
        try:
            _run_on_dask(jobs, executor, n_workers, _finished,
                         out / "dask.log" if dask_log else None)
        except KeyboardInterrupt:
            raise BatchInterrupted(_kept_on_disk(tasks, out), total, str(out)) from None
    return [results[t.name] for t in tasks]


def _kept_on_disk(tasks: Sequence[SolveTask], out: Path) -> int:
    """Tasks whose raster and record are both in ``out``: what a resumed run keeps.

    Counted on disk, not from the results gathered so far: a worker may have
    finished (record written last) before its result reached this process.
    """
    return sum(1 for t in tasks if all(p.is_file() for p in task_output_paths(t.name, out)))


#: Loggers of the Dask machinery (and the libraries under it) sent to ``dask.log``.
DASK_LOGGERS: tuple[str, ...] = ("distributed", "dask", "tornado", "asyncio", "bokeh")


class BatchInterrupted(KeyboardInterrupt):
    """Ctrl-C during a run: one line with what was kept and how to resume."""

    def __init__(self, finished: int, total: int, out_dir: str) -> None:
        self.finished, self.total, self.out_dir = finished, total, out_dir
        super().__init__(
            f"interrupted: {finished} of {total} solves are finished and kept in {out_dir}; "
            "run the same command again to resume (finished solves are kept, the rest are solved)"
        )

    def __str__(self) -> str:
        return str(self.args[0])


class _DaskLogs:
    """Route the Dask loggers to a file in the output folder (or nowhere), for one run."""

    def __init__(self, path: Path | None) -> None:
        import logging

        self.path = path
        self.saved: list[tuple[Any, list[Any], int, bool]] = []
        self.handler: Any = None
        if path is not None:
            path.parent.mkdir(parents=True, exist_ok=True)
            self.handler = logging.FileHandler(path, encoding="utf-8")
            self.handler.setFormatter(logging.Formatter("%(asctime)s %(name)s %(levelname)s %(message)s"))
        for name in DASK_LOGGERS:
            lg = logging.getLogger(name)
            self.saved.append((lg, list(lg.handlers), lg.level, lg.propagate))
            for h in list(lg.handlers):
                lg.removeHandler(h)
            lg.propagate = False
            if self.handler is not None:
                lg.addHandler(self.handler)
        self.apply()

    def apply(self) -> None:
        """(Re)set the levels: Dask resets them when it starts a cluster."""
        import logging

        if self.handler is not None:
            self.handler.setLevel(logging.INFO)  # LocalCluster(silence_logs=...) lowers it
        for name in DASK_LOGGERS:
            lg = logging.getLogger(name)
            lg.setLevel(logging.INFO if self.handler is not None else logging.CRITICAL + 1)
            for h in list(lg.handlers):
                if h is not self.handler:
                    lg.removeHandler(h)

    def close(self) -> None:
        for lg, handlers, level, propagate in self.saved:
            for h in list(lg.handlers):
                lg.removeHandler(h)
            for h in handlers:
                lg.addHandler(h)
            lg.setLevel(level)
            lg.propagate = propagate
        if self.handler is not None:
            self.handler.close()


@contextmanager
def _dask_client(
    executor: str, n_workers: int | None, n_tasks: int, log_path: Path | None,
) -> Iterator[tuple[Any, Any]]:
    """``(distributed, client)`` for one run: a quiet local cluster or a scheduler address.

    Dask's loggers go to ``log_path`` (or nowhere), never to the terminal; the
    cluster is stopped on the way out, also after Ctrl-C.
    """
    import logging
    import signal

    import dask

    distributed = _import_distributed()
    logs = _DaskLogs(log_path)
    cluster = None
    client = None
    settings = dask.config.set({
        "distributed.logging.distributed": "error",
        "distributed.admin.tick.limit": "1h",  # no "event loop unresponsive" chatter during solves
    })
    try:
        if executor == "local":
            n = n_workers or max(1, min(os.cpu_count() or 1, n_tasks))
            # Worker processes start with SIGINT ignored (a disposition inherited across exec,
            # and kept by Python): Ctrl-C reaches only this process, which stops the cluster
            # cleanly, instead of every worker printing its own traceback.
            main_thread = threading.current_thread() is threading.main_thread()
            old = signal.signal(signal.SIGINT, signal.SIG_IGN) if main_thread else None
            try:
                # Loopback only; no dashboard (so no web-proxy suggestion); the scheduler's
                # small HTTP endpoint on a free port.
                cluster = distributed.LocalCluster(
                    n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                    host="127.0.0.1", scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                    silence_logs=logging.CRITICAL,
                )
            finally:
                if old is not None:
                    signal.signal(signal.SIGINT, old)
            logs.apply()
            client = distributed.Client(cluster)
        else:
            try:
                client = distributed.Client(executor, timeout=f"{CONNECT_TIMEOUT_S:g}s")
            except (OSError, TimeoutError) as err:
                raise InputDataError(
                    f"cannot reach the Dask scheduler at {executor!r} ({_one_line(str(err))}); "
                    "start it (dask scheduler) and its workers, or use --executor local"
                ) from err
        yield distributed, client
    finally:
        # Stopping the cluster after Ctrl-C: a second Ctrl-C must not leave workers behind.
        main_thread = threading.current_thread() is threading.main_thread()
        old = signal.signal(signal.SIGINT, signal.SIG_IGN) if main_thread else None
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                if client is not None:
                    try:
                        client.close(timeout=10)
                    except Exception:  # noqa: BLE001 - closing after a failure: best effort
                        pass
                if cluster is not None:
                    try:
                        cluster.close(timeout=10)
                    except Exception:  # noqa: BLE001
                        pass
        finally:
            if old is not None:
                signal.signal(signal.SIGINT, old)
            settings.__exit__(None, None, None)
            logs.close()


def _run_on_dask(
    jobs: list[_Job], executor: str, n_workers: int | None, finished: Callable[[TaskSummary], None],
    log_path: Path | None = None,
) -> None:
    with _dask_client(executor, n_workers, len(jobs), log_path) as (distributed, client):
        token = hashlib.sha256(f"{time.time_ns()}-{os.getpid()}".encode()).hexdigest()[:10]
        futures = {}
        for i, job in enumerate(jobs):
            # Descending priority keeps the queue in submission order (grouped by medium).
            fut = client.submit(
                _run_task, job, key=f"ttmap-{job.task.name}-{token}", pure=False,
                priority=len(jobs) - i,
            )
            futures[fut] = job
        for fut in distributed.as_completed(list(futures)):
            job = futures[fut]
            try:
                summary = fut.result()
            except Exception as err:  # the worker died, was lost, or could not unpickle
                summary = TaskSummary(
                    name=job.task.name, ok=False, raster=None,
                    summary={"task": job.task.describe()},
                    error=_one_line(
                        f"task {job.task.name}: the worker failed ({type(err).__name__}: {err}); "
                        "if it ran out of memory, crop or coarsen the grid or use fewer workers"
                    ),
                )
            finished(summary)


# ---------------------------------------------------------------------------
# Calls that return small results (reciprocal site solves, gauge solves)
# ---------------------------------------------------------------------------


def medium_for_spec(
    spec: MediumSpec, mode: str = "long-wave", period_s: float | None = None,
    bathymetry_sha256: str | None = None,
) -> Medium:
    """The prepared medium of ``spec`` in this process, built once and cached.

    For functions run through :func:`map_calls`: every task of one worker
    shares the bathymetry read and the medium built (and the file's SHA-256,
    when given, is checked as for :func:`run_tasks`).
    """
    return _medium_for(spec, bathymetry_sha256, mode, period_s)


def map_calls(
    fn: Callable[[Any, Any], Any],
    items: Sequence[Any],
    shared: Any = None,
    *,
    executor: str = EXECUTORS[0],
    n_workers: int | None = None,
    progress: ProgressFn | None = None,
    names: Sequence[str] | None = None,
    log_path: Path | None = None,
) -> list[Any]:
    """``[fn(item, shared) for item in items]``, serially or on Dask, in order.

    For tasks whose results are small (a table row, running sums): nothing is
    written, the results come back to the caller. ``shared`` (e.g. the
    scenario start cells) is sent to each worker once (``scatter``,
    broadcast). ``fn`` must be a module-level function (it is pickled).
    A failing call raises its error here (the first one, by item order).

    Parameters
    ----------
    fn : callable ``(item, shared) -> result``
    items : sequence
    shared : any, optional
    executor, n_workers
        As for :func:`run_tasks`.
    progress : callable, optional
        ``progress(done, total, name)`` after each call.
    names : sequence of str, optional
        Names for ``progress`` (default ``"call <i>"``).
    log_path : Path, optional
        Where Dask's log lines go (default: nowhere; never the terminal).
    """
    problem = check_executor(executor)
    if problem:
        raise InputDataError(problem)
    items = list(items)
    labels = list(names) if names is not None else [f"call {i}" for i in range(len(items))]
    total = len(items)
    if not items:
        return []
    if executor == "serial":
        out = []
        try:
            for i, item in enumerate(items):
                out.append(fn(item, shared))
                if progress is not None:
                    progress(i + 1, total, labels[i])
        finally:
            _clear_cache()
        return out
    with _dask_client(executor, n_workers, total, log_path) as (distributed, client):
        shared_f = client.scatter(shared, broadcast=True) if shared is not None else None
        token = hashlib.sha256(f"{time.time_ns()}-{os.getpid()}".encode()).hexdigest()[:10]
        futures = [
            client.submit(fn, item, shared_f, key=f"ttmap-call-{i}-{token}", pure=False,
                          priority=total - i)
            for i, item in enumerate(items)
        ]
        index = {f.key: i for i, f in enumerate(futures)}
        results: list[Any] = [None] * total
        errors: dict[int, BaseException] = {}
        done = 0
        for fut in distributed.as_completed(futures):
            i = index[fut.key]
            try:
                results[i] = fut.result()
            except Exception as err:  # noqa: BLE001 - re-raised below, first by order
                errors[i] = err
            done += 1
            if progress is not None:
                progress(done, total, labels[i])
        if errors:
            raise errors[min(errors)]
        return results
