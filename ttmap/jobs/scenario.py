"""The scenario run: solve every scenario of a file, compare them, write ``run.json``.

:func:`run_scenario_file` takes a validated
:class:`~ttmap.scenario.ScenarioFile`, hands its solves to
:func:`ttmap.batch.run_tasks` (serial, a local Dask cluster or a scheduler),
then derives the comparisons from the finished front rasters (envelope,
difference rasters, sites by scenarios) and writes the run record last.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from ttmap.batch import MediumSpec, TaskSummary, check_executor
from ttmap.errors import InputDataError
from ttmap.physics.scaling import SCALING_RELATIONS
from ttmap.scenario import ScenarioFile, scenario_tasks

__all__ = ["run_scenario_file"]


def _json_default(value: Any) -> Any:
    if hasattr(value, "tolist"):
        return value.tolist()
    if isinstance(value, (set, frozenset, tuple)):
        return list(value)
    if isinstance(value, Path):
        return str(value)
    return str(value)


def run_scenario_file(
    sf: ScenarioFile,
    *,
    out_dir: str | os.PathLike[str] | None = None,
    executor: str | None = None,
    n_workers: int | None = None,
    overwrite: bool = False,
    resume: bool = True,
    progress: Any = None,
    command_line: str = "",
    validate_s: float | None = None,
) -> dict[str, Any]:
    """Solve every scenario of a file, then write the comparisons and ``run.json``.

    Parameters
    ----------
    sf : ScenarioFile
        From :func:`load_scenario_file`.
    out_dir : path-like, optional
        Output folder; default ``[outputs] folder``.
    executor : {"serial", "local"} or scheduler address, optional
        Default ``[outputs] executor``, else ``"local"``.
    n_workers : int, optional
        Default ``[outputs] workers``.
    overwrite : bool
        Replace existing rasters (and solve again).
    resume : bool
        Keep rasters of solves that finished before and skip them. The
        envelope, difference rasters and ``run.json`` are derived from the
        rasters and rebuilt on every run.
    progress : callable, optional
        Passed to :func:`ttmap.batch.run_tasks`.
    command_line : str
        Recorded in ``run.json``.

    Returns
    -------
    dict
        The run record (as written to ``run.json``); ``record["failed"]``
        lists the solves that failed, with their errors.

    Raises
    ------
    OutputExistsError
        ``run.json`` exists and neither ``overwrite`` nor ``resume`` is set.
    """
    import datetime as _dt
    import json
    import time

    from ttmap.batch import run_tasks
    from ttmap.io.atomic import atomic_output, check_writable

    t_start = time.perf_counter()
    started = _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat()
    ex = executor or sf.outputs.executor or "local"
    problem = check_executor(ex)
    if problem:
        raise InputDataError(problem)
    nw = n_workers if n_workers is not None else sf.outputs.workers
    out = Path(out_dir) if out_dir is not None else Path(sf.outputs.folder)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {str(out)!r} is a file; give a folder name")
    out.mkdir(parents=True, exist_ok=True)
    run_json = out / "run.json"
    derived_overwrite = overwrite or resume
    check_writable([run_json], derived_overwrite)

    spec, tasks = scenario_tasks(sf)
    t0 = time.perf_counter()
    summaries = run_tasks(
        tasks,
        spec,
        str(out),
        executor=ex,
        n_workers=nw,
        overwrite=overwrite,
        resume=resume,
        progress=progress,
        tags={"SCENARIO_FILE": Path(sf.path).name},
    )
    solve_s = time.perf_counter() - t0

    by_name = {t.name: s for t, s in zip(tasks, summaries)}
    fronts: dict[str, str] = {}
    for sc in sf.scenarios:
        s = by_name.get(f"{sc.name}_front")
        if s is not None and s.ok and s.raster:
            fronts[sc.name] = s.raster

    t1 = time.perf_counter()
    products: dict[str, Any] = {"envelope": None, "differences": [], "skipped": []}
    if sf.outputs.envelope or sf.outputs.compare:
        from ttmap.products.compare import write_difference, write_envelope

        if sf.outputs.envelope:
            if len(fronts) >= 2:
                names = list(fronts)
                env = write_envelope(
                    str(out), [fronts[n] for n in names], names, None, derived_overwrite
                )
                products["envelope"] = _product_paths(env)
            else:
                products["skipped"].append(
                    f"envelope: needs at least two finished fronts, got {len(fronts)}"
                )
        for a, b in sf.outputs.compare:
            missing = [n for n in (a, b) if n not in fronts]
            if missing:
                products["skipped"].append(
                    f"difference {a} vs {b}: no front for {', '.join(missing)} (failed)"
                )
                continue
            diff = write_difference(str(out), fronts[a], fronts[b], a, b, derived_overwrite)
            products["differences"].append({"a": a, "b": b, "files": _product_paths(diff)})
    sites_summary: dict[str, Any] | None = None
    if sf.sites_path is not None:
        sites_summary = _write_sites_x_scenarios(sf, out, fronts, by_name, derived_overwrite)
        if sites_summary.get("files"):
            products["sites"] = sites_summary["files"]
        else:
            products["skipped"].append(f"sites by scenarios: {sites_summary.get('skipped')}")
    compare_s = time.perf_counter() - t1

    record = _scenario_record(
        sf,
        spec,
        summaries,
        products=products,
        sites_summary=sites_summary,
        started_utc=started,
        command_line=command_line,
        options={
            "executor": ex,
            "workers": nw,
            "overwrite": overwrite,
            "resume": resume,
            "out_dir": str(out),
        },
        timings_s={
            **({"validate": validate_s} if validate_s is not None else {}),
            "solve": solve_s,
            "compare": compare_s,
            "total": time.perf_counter() - t_start + (validate_s or 0.0),
        },
    )
    with atomic_output(run_json, overwrite=True) as tmp:
        Path(tmp).write_text(json.dumps(record, indent=2, default=_json_default) + "\n")
    record["run_json"] = str(run_json)
    return record


def _scenario_record(
    sf: ScenarioFile,
    spec: MediumSpec,
    summaries: Sequence[TaskSummary],
    *,
    products: Mapping[str, Any],
    sites_summary: Mapping[str, Any] | None,
    started_utc: str,
    command_line: str,
    options: Mapping[str, Any],
    timings_s: Mapping[str, float],
) -> dict[str, Any]:
    """The run record of a scenario run (written as ``run.json``); built here and only here."""
    from ttmap.io.raster import file_sha256
    from ttmap.mapjob import software_versions
    from ttmap.products.cautions import CAUTION_SHORT

    def _file(path: str | None) -> dict[str, Any] | None:
        if path is None:
            return None
        return {"path": path, "sha256": file_sha256(path)}

    source_files = sorted({sc.source_file for sc in sf.scenarios if sc.source_file})
    record: dict[str, Any] = {
        "ttmap_record": "scenario run",
        "started_utc": started_utc,
        "command_line": command_line,
        "caution": CAUTION_SHORT,
        "inputs": {
            "scenario_file": _file(sf.path),
            "bathymetry": _file(sf.bathymetry.path),
            "sites": None
            if sf.sites_path is None
            else dict(_file(sf.sites_path) or {}, count=sf.sites_count),
            "source_files": [_file(p) for p in source_files],
        },
        "parameters": {
            "medium": {k: getattr(spec, k) for k in spec.__dataclass_fields__},
            "periods_s": list(sf.speed.periods_s),
            "period_speed": sf.speed.period_speed,
            **options,
        },
        "scenarios": [sc.describe() for sc in sf.scenarios],
        "trenches": [
            {
                "name_prefix": t.name_prefix,
                "polyline": [list(p) for p in t.polyline],
                "polyline_length_km": t.polyline_length_km,
                "spacing_km": t.spacing_km,
                "mw": t.mw,
                "scaling_law": t.scaling_law,
                "scaling_citation": SCALING_RELATIONS[t.scaling_law].citation,
                "length_km": t.length_km,
                "width_km": t.width_km,
                "scenarios": list(t.scenario_names),
            }
            for t in sf.trenches
        ],
        "tasks": [
            {
                "name": s.name,
                "ok": s.ok,
                "skipped": s.skipped,
                "raster": s.raster,
                "seconds": s.seconds,
                "error": s.error,
                "summary": s.summary,
            }
            for s in summaries
        ],
        "failed": [{"name": s.name, "error": s.error} for s in summaries if not s.ok],
        "products": products,
        "files_written": _files_written(products),
        "sites": sites_summary,
        "versions": software_versions(),
        "timings_s": dict(timings_s),
    }
    return record


def _write_sites_x_scenarios(
    sf: ScenarioFile,
    out: Path,
    fronts: Mapping[str, str],
    by_name: Mapping[str, Any],
    overwrite: bool,
) -> dict[str, Any]:
    """Sites by scenarios (CSV tables and chart) from the finished fronts; a summary for run.json."""
    from ttmap.io.sites import read_sites
    from ttmap.products.compare import write_sites_by_scenarios

    if sf.sites_path is None or not fronts:
        return {"path": sf.sites_path, "skipped": "no finished front to read the sites from"}
    energy: dict[tuple[str, float], str] = {}
    for name in fronts:
        for p in sf.speed.periods_s:
            s = by_name.get(f"{name}_{sf.speed.period_speed}_T{p:g}s")
            if s is not None and s.ok and s.raster:
                energy[(name, float(p))] = s.raster
    try:
        sites = read_sites(sf.sites_path)
        written = write_sites_by_scenarios(
            str(out), sites, dict(fronts), energy, overwrite=overwrite
        )
    except InputDataError as err:  # a bad site row must not lose the finished solves
        return {"path": sf.sites_path, "skipped": f"site table not written ({err})"}
    table = written.pop("table")
    first: dict[str, Any] = {}
    statuses: dict[str, str] = {}
    for site, sc, front, is_first, status in zip(
        table["site"], table["scenario"], table["front_min"], table["earliest_for_site"],
        table["status"], strict=True,
    ):
        statuses[site] = status
        if is_first and site not in first:
            first[site] = {"scenario": sc, "front_min": round(float(front), 3)}
    return {
        "path": sf.sites_path,
        "count": len(statuses),
        "scenarios": list(fronts),
        "periods_s": sorted({p for _, p in energy}),
        "no_arrival": sorted(s for s in statuses if s not in first),
        "snap_status": {k: sum(1 for v in statuses.values() if v == k)
                        for k in dict.fromkeys(statuses.values())},
        "earliest": first,
        "files": {k: v for k, v in written.items() if isinstance(v, str)},
        "caution": "margins are planning figures, not promises",
    }


def _files_written(products: Mapping[str, Any]) -> list[str]:
    """Every derived file in ``products`` (envelope, differences, site tables), in order."""
    out: list[str] = []

    def walk(value: Any) -> None:
        if isinstance(value, str):
            if value not in out:
                out.append(value)
        elif isinstance(value, Mapping):
            for v in value.values():
                walk(v)
        elif isinstance(value, (list, tuple)):
            for v in value:
                walk(v)

    walk(products.get("envelope"))
    for d in products.get("differences", []):
        walk(d.get("files"))
    walk(products.get("sites"))
    return out


def _product_paths(value: Any) -> Any:
    """Paths returned by a comparison writer, as JSON-ready text."""
    if value is None:
        return None
    if isinstance(value, (str, os.PathLike)):
        return str(value)
    if isinstance(value, Mapping):
        return {str(k): _product_paths(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_product_paths(v) for v in value]
    return str(value)
