"""The run record: one builder, one versioned schema, one validator.

Every job writes ``run.json`` last in its output folder: what was read (with
SHA-256 hashes), every parameter, the grid, versions, timings, the cautions
and the products written. The layout is the same for every job and is
described field by field in ``docs/run-record.md``; a script can rely on

- ``record["schema"] == "ttmap-run-record"`` and
  ``record["schema_version"] == 2``;
- the common fields below, with the types :func:`validate_run_record` checks;
- job-specific blocks named after the job (``product_sets`` and ``sites``
  for ``map``; ``sites``, ``sites_skipped`` and ``combined_written`` for
  ``site-map``).

Build a record with :func:`build_run_record` (keyword-only; it fills in the
schema, version, versions of the dependencies and the cautions), check it with
:func:`validate_run_record` and write it with :func:`write_run_record`.

Examples
--------
>>> rec = build_run_record(job="map", started_utc="2026-01-01T00:00:00+00:00",
...                        inputs={}, parameters={"speed": {"floor_depth_m": 5.0}},
...                        timings_s={"total_s": 1.0}, products=[], versions={"ttmap": "0"},
...                        product_sets={})
>>> rec["schema"], rec["schema_version"], validate_run_record(rec)
('ttmap-run-record', 2, [])
>>> validate_run_record({**rec, "grid": {"crs": "EPSG:4326"}})[0]
'grid: missing field shape'
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
import platform
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

__all__ = [
    "RUN_RECORD_SCHEMA",
    "RUN_RECORD_SCHEMA_VERSION",
    "JOB_KINDS",
    "build_run_record",
    "file_entry",
    "grid_entry",
    "software_versions",
    "utc_now",
    "validate_run_record",
    "write_run_record",
]

#: Value of the record's ``schema`` field.
RUN_RECORD_SCHEMA: str = "ttmap-run-record"
#: Version of the layout; raised whenever a field changes meaning or type.
RUN_RECORD_SCHEMA_VERSION: int = 2
#: Values of the record's ``job`` field, with the blocks each job adds.
JOB_KINDS: dict[str, tuple[str, ...]] = {
    "map": ("product_sets",),
    "site-map": ("sites", "sites_skipped", "combined_written"),
    "scenario": ("scenarios", "tasks", "failed", "comparisons"),
    "locate": ("location", "picks"),
}

_VERSION_PACKAGES = ("numpy", "scipy", "scikit-fmm", "rasterio", "shapely", "pyproj", "pyogrio",
                     "contourpy", "matplotlib", "click")


def utc_now() -> str:
    """The current time, UTC, ISO 8601 to the second (``2026-01-01T12:00:00+00:00``)."""
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat()


def software_versions() -> dict[str, str]:
    """Versions of ttmap, Python and the libraries that shape the results."""
    import importlib.metadata as md

    import ttmap

    v: dict[str, str] = {"ttmap": ttmap.__version__, "python": sys.version.split()[0]}
    for pkg in _VERSION_PACKAGES:
        try:
            v[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            v[pkg] = "not installed"
    try:
        import rasterio

        v["gdal"] = rasterio.__gdal_version__
    except Exception:  # pragma: no cover - optional detail
        pass
    try:
        import pyproj
        import shapely

        v["geos"] = shapely.geos_version_string
        v["proj"] = pyproj.proj_version_str
    except Exception:  # pragma: no cover - optional detail
        pass
    v["platform"] = platform.platform()
    return v


def file_entry(path: str | os.PathLike[str], *, sha256: str | None = None, **extra: Any) -> dict[str, Any]:
    """An ``inputs`` entry: absolute path, SHA-256 and size of a file, plus ``extra`` fields.

    ``sha256`` is computed when not given (None for a GDAL dataset name that
    is not a plain file); ``size_bytes`` is None then too.
    """
    p = os.path.abspath(os.fspath(path))
    is_file = os.path.isfile(p)
    if sha256 is None and is_file:
        from ttmap.io.raster import file_sha256

        sha256 = file_sha256(p)
    return {"path": p, "sha256": sha256, "size_bytes": os.path.getsize(p) if is_file else None, **extra}


def grid_entry(grid: Any) -> dict[str, Any]:
    """The ``grid`` block of a record from a :class:`ttmap.Grid`, with named axes."""
    row_m, col_m = grid.cell_size_m()
    left, bottom, right, top = (float(v) for v in grid.bounds)
    return {
        "crs": grid.crs.to_string(),
        "shape": {"rows": int(grid.shape[0]), "cols": int(grid.shape[1])},
        "cell_size_m": {"row_m": round(float(row_m), 3), "col_m": round(float(col_m), 3)},
        "bounds": {"left": left, "bottom": bottom, "right": right, "top": top},
        "transform": [float(v) for v in list(grid.transform)[:6]],
        "geographic": bool(grid.is_geographic),
        "wraps_x": bool(grid.wraps_x),
    }


def _relative(path: str | os.PathLike[str], out_dir: Path) -> str:
    p = Path(path)
    try:
        return p.absolute().relative_to(out_dir.absolute()).as_posix()
    except ValueError:
        return p.as_posix()


def build_run_record(
    *,
    job: str,
    started_utc: str,
    inputs: Mapping[str, Any],
    parameters: Mapping[str, Any],
    timings_s: Mapping[str, float],
    products: Sequence[str | os.PathLike[str]],
    out_dir: str | os.PathLike[str] | None = None,
    grid: Any = None,
    command_line: str = "",
    finished_utc: str | None = None,
    cautions: Sequence[str] | None = None,
    notes: Sequence[str] = (),
    versions: Mapping[str, str] | None = None,
    **blocks: Any,
) -> dict[str, Any]:
    """A run record in the one schema (``docs/run-record.md``).

    Parameters
    ----------
    job : {"map", "site-map", "scenario", "locate"}
        The job that ran.
    started_utc : str
        From :func:`utc_now` when the job started.
    inputs : mapping
        Name -> :func:`file_entry` of each file read (``bathymetry``, ``sites``, ...).
    parameters : mapping
        Every setting of the run, JSON-ready (option groups as dicts).
    timings_s : mapping
        Stage -> seconds; ``total_s`` is the whole job. Rounded to 0.1 ms.
    products : sequence of path-like
        Files written, stored relative to ``out_dir`` (POSIX separators);
        the record itself is not among them.
    out_dir : path-like, optional
        The output folder; without it the products are stored as given.
    grid : Grid or mapping, optional
        The grid solved on (a :class:`ttmap.Grid` is turned into
        :func:`grid_entry`); None when the job has no single grid.
    command_line : str
        The command that ran the job ("" when called from Python).
    finished_utc : str, optional
        Defaults to now.
    cautions : sequence of str, optional
        Defaults to :data:`ttmap.products.cautions.CAUTION_LINES`.
    notes : sequence of str
        What the run left out or changed, in words.
    versions : mapping, optional
        Defaults to :func:`software_versions`.
    **blocks
        Job-specific blocks (see :data:`JOB_KINDS`), stored as given.

    Returns
    -------
    dict
        JSON-ready except for numpy scalars, which :func:`write_run_record` converts.
    """
    import ttmap

    if cautions is None:
        from ttmap.products.cautions import CAUTION_LINES

        cautions = CAUTION_LINES
    out = None if out_dir is None else Path(out_dir)
    if grid is not None and not isinstance(grid, Mapping):
        grid = grid_entry(grid)
    record: dict[str, Any] = {
        "schema": RUN_RECORD_SCHEMA,
        "schema_version": RUN_RECORD_SCHEMA_VERSION,
        "ttmap_version": ttmap.__version__,
        "job": job,
        "command_line": command_line,
        "started_utc": started_utc,
        "finished_utc": finished_utc or utc_now(),
        "cautions": list(cautions),
        "notes": list(notes),
        "inputs": dict(inputs),
        "parameters": dict(parameters),
        "grid": None if grid is None else dict(grid),
        "versions": dict(versions) if versions is not None else software_versions(),
        "timings_s": {k: round(float(v), 4) for k, v in timings_s.items()},
        "products": [Path(p).as_posix() if out is None else _relative(p, out) for p in products],
    }
    for name, value in blocks.items():
        if name in record:
            raise ValueError(f"job block {name!r} would replace a common field; rename it")
        record[name] = value
    return record


def _json_default(o: Any) -> Any:
    import numpy as np

    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return float(o)
    if isinstance(o, np.bool_):
        return bool(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, (set, frozenset)):
        return sorted(o)
    return str(o)


def write_run_record(record: Mapping[str, Any], path: str | os.PathLike[str], *, overwrite: bool) -> Path:
    """Write ``record`` as indented JSON, atomically (temporary name, then rename)."""
    from ttmap.io.atomic import atomic_output

    target = Path(path)
    text = json.dumps(record, indent=2, default=_json_default) + "\n"
    with atomic_output(target, overwrite=overwrite) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")
    return target


# ---------------------------------------------------------------------------
# Validation (pure Python, no schema library)
# ---------------------------------------------------------------------------

_NUMBER = (int, float)

#: Common fields: name -> (accepted types, may be None).
_FIELDS: dict[str, tuple[tuple[type, ...], bool]] = {
    "schema": ((str,), False),
    "schema_version": ((int,), False),
    "ttmap_version": ((str,), False),
    "job": ((str,), False),
    "command_line": ((str,), False),
    "started_utc": ((str,), False),
    "finished_utc": ((str,), False),
    "cautions": ((list,), False),
    "notes": ((list,), False),
    "inputs": ((dict,), False),
    "parameters": ((dict,), False),
    "grid": ((dict,), True),
    "versions": ((dict,), False),
    "timings_s": ((dict,), False),
    "products": ((list,), False),
}


def _is_number(v: Any) -> bool:
    return isinstance(v, _NUMBER) and not isinstance(v, bool) and math.isfinite(v)


def _check_time(name: str, value: Any) -> list[str]:
    try:
        t = _dt.datetime.fromisoformat(value)
    except (TypeError, ValueError):
        return [f"{name}: {value!r} is not an ISO 8601 time"]
    if t.utcoffset() != _dt.timedelta(0):
        return [f"{name}: {value!r} is not in UTC"]
    return []


def _check_grid(grid: Mapping[str, Any]) -> list[str]:
    problems: list[str] = []
    for key in ("crs", "shape", "cell_size_m", "bounds", "transform", "geographic", "wraps_x"):
        if key not in grid:
            problems.append(f"grid: missing field {key}")
    if problems:
        return problems
    named = {"shape": ("rows", "cols"), "cell_size_m": ("row_m", "col_m"),
             "bounds": ("left", "bottom", "right", "top")}
    for key, axes in named.items():
        block = grid[key]
        if not isinstance(block, dict) or set(block) != set(axes):
            problems.append(f"grid: {key} must be an object with {', '.join(axes)}")
            continue
        for axis in axes:
            if not _is_number(block[axis]):
                problems.append(f"grid: {key}.{axis} is not a finite number")
    if any(not isinstance(grid["shape"].get(a), int) or grid["shape"][a] < 1
           for a in ("rows", "cols") if isinstance(grid["shape"], dict)):
        problems.append("grid: shape rows and cols must be whole numbers from 1")
    if not isinstance(grid["crs"], str) or not grid["crs"]:
        problems.append("grid: crs must be a non-empty string")
    if not (isinstance(grid["transform"], list) and len(grid["transform"]) == 6
            and all(_is_number(v) for v in grid["transform"])):
        problems.append("grid: transform must be 6 finite numbers")
    for key in ("geographic", "wraps_x"):
        if not isinstance(grid[key], bool):
            problems.append(f"grid: {key} must be true or false")
    return problems


def validate_run_record(record: Any) -> list[str]:
    """Problems of a run record against the schema; an empty list when it is valid.

    Checks every common field (presence, type, ISO 8601 UTC times, the named
    axes of the grid block, relative product paths, number timings with a
    ``total_s``) and the presence of the job's own blocks. Pure Python: no
    schema library is needed.

    Parameters
    ----------
    record : object
        A record as read from ``run.json`` (``json.load``).

    Returns
    -------
    list of str
        One line per problem, each naming the field.
    """
    if not isinstance(record, dict):
        return [f"record is a {type(record).__name__}, not a JSON object"]
    problems: list[str] = []
    for name, (types, nullable) in _FIELDS.items():
        if name not in record:
            problems.append(f"missing field {name}")
            continue
        value = record[name]
        if value is None and nullable:
            continue
        if not isinstance(value, types) or isinstance(value, bool):
            problems.append(f"{name}: expected {' or '.join(t.__name__ for t in types)}, "
                            f"got {type(value).__name__}")
    if problems:
        return problems
    if record["schema"] != RUN_RECORD_SCHEMA:
        problems.append(f"schema: {record['schema']!r} is not {RUN_RECORD_SCHEMA!r}")
    if record["schema_version"] != RUN_RECORD_SCHEMA_VERSION:
        problems.append(f"schema_version: {record['schema_version']!r} is not {RUN_RECORD_SCHEMA_VERSION}")
    job = record["job"]
    if job not in JOB_KINDS:
        problems.append(f"job: {job!r} is not one of {', '.join(JOB_KINDS)}")
    else:
        problems += [f"missing {job} block {b}" for b in JOB_KINDS[job] if b not in record]
    problems += _check_time("started_utc", record["started_utc"])
    problems += _check_time("finished_utc", record["finished_utc"])
    if not record["cautions"] or not all(isinstance(c, str) and c for c in record["cautions"]):
        problems.append("cautions: must be a non-empty list of text")
    if not all(isinstance(n, str) for n in record["notes"]):
        problems.append("notes: must be a list of text")
    for name, entry in record["inputs"].items():
        if not isinstance(entry, dict) or not isinstance(entry.get("path"), str):
            problems.append(f"inputs.{name}: must be an object with a path")
            continue
        sha = entry.get("sha256")
        if sha is not None and not (isinstance(sha, str) and len(sha) == 64):
            problems.append(f"inputs.{name}: sha256 must be 64 hex characters or null")
        size = entry.get("size_bytes")
        if size is not None and not (isinstance(size, int) and size >= 0):
            problems.append(f"inputs.{name}: size_bytes must be a whole number or null")
    if record["grid"] is not None:
        problems += _check_grid(record["grid"])
    if not all(isinstance(k, str) and isinstance(v, str) for k, v in record["versions"].items()):
        problems.append("versions: must map names to version text")
    if "ttmap" not in record["versions"]:
        problems.append("versions: missing ttmap")
    for k, v in record["timings_s"].items():
        if not _is_number(v) or v < 0:
            problems.append(f"timings_s.{k}: {v!r} is not a non-negative number of seconds")
    if "total_s" not in record["timings_s"]:
        problems.append("timings_s: missing total_s")
    for p in record["products"]:
        if not isinstance(p, str) or not p or p.startswith("/") or "\\" in p or ".." in p.split("/"):
            problems.append(f"products: {p!r} is not a path relative to the output folder")
    return problems
