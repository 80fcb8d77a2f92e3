"""The scenario run: solve every scenario of a file, compare them, write ``run.json``.

:func:`run_scenario_file` takes a validated
:class:`~ttmap.scenario.ScenarioFile`, hands its solves to
:func:`ttmap.jobs.batch.run_tasks` (serial, a local Dask cluster or a scheduler),
then derives the comparisons from the finished front rasters (envelope,
difference rasters, sites by scenarios) and writes the run record last.
"""

from __future__ import annotations

import os
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ttmap.jobs.batch import TaskSummary
from ttmap.tasks import MediumSpec, check_executor
from ttmap.errors import InputDataError
from ttmap.physics.scaling import SCALING_RELATIONS
from ttmap.scenario import ScenarioFile, scenario_nests, scenario_tasks

if TYPE_CHECKING:
    from ttmap.grid import Grid

__all__ = [
    "run_scenario_file",
    "scenario_site_options",
    "write_difference",
    "write_envelope",
    "sites_table_summary",
    "write_sites_by_scenarios",
    "write_site_table_set",
]


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
    direct: bool = False,
    report: bool = True,
    dask_log: bool = True,
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
        Passed to :func:`ttmap.jobs.batch.run_tasks`.
    command_line : str
        Recorded in ``run.json``.
    direct : bool
        Solve every scenario directly for the table and the envelope, whatever
        ``[outputs] table_method`` says (see
        :func:`ttmap.jobs.scenario_reciprocal.plan_table_method`).
    report : bool
        Write ``report.html`` (rebuilt on every run, like the comparisons);
        ``[products] report = false`` in the file turns it off too.
    dask_log : bool
        Keep the Dask scheduler's log lines in ``dask.log`` in the output
        folder (default); False drops them. They never reach the terminal.

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
    import time

    from ttmap.io.atomic import check_writable
    from ttmap.jobs.staging import staged_output

    t_start = time.perf_counter()
    started = _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat()
    ex = executor or sf.outputs.executor or "local"
    problem = check_executor(ex)
    if problem:
        raise InputDataError(problem)
    nw = n_workers if n_workers is not None else sf.outputs.workers
    # the file's [products] report = false turns the report off as --no-report does
    report = report and bool(dict(sf.product_options).get("report", True))
    from ttmap.jobs.checks import check_out_dir

    check_out_dir(out_dir if out_dir is not None else sf.outputs.folder)
    out = Path(out_dir) if out_dir is not None else Path(sf.outputs.folder)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {str(out)!r} is a file; give a folder name")
    run_json = out / "run.json"
    derived_overwrite = overwrite or resume
    if out.is_dir():
        check_writable([run_json], derived_overwrite)

    from ttmap.jobs.scenario_reciprocal import plan_table_method

    plan = plan_table_method(sf, direct=direct)
    spec, tasks = scenario_tasks(sf)
    if plan.method == "reciprocal":
        keep = set(plan.raster_scenarios)
        tasks = [t for t in tasks if t.meta.get("scenario") in keep
                 and (plan.raster_periods or t.meta.get("product") == "front")]

    from ttmap.jobs.batch import task_output_paths
    from ttmap.jobs.plan import REPORT_NAME, style_files

    # the styles beside the task rasters and the report are derived like run.json
    if out.is_dir():  # a new folder holds nothing to refuse
        check_writable([*style_files(task_output_paths(t.name, out)[0] for t in tasks),
                        *([out / REPORT_NAME] if report else [])], derived_overwrite)
    tasks_before = set(out.glob("*.task.json")) if out.is_dir() else set()

    def stopped_note() -> str:
        kept = len(set(out.glob("*.task.json")) - tasks_before) if out.is_dir() else 0
        if not kept:
            return ""
        return (f"{kept} finished task(s) kept in {str(out)!r} (each whole: raster and task.json); "
                "no comparison or run.json was written; rerun the same command to resume")

    # Tasks write into the folder itself, each whole (raster, then task.json), so
    # a stopped run can resume; the comparisons, report and run.json are staged
    # and appear together, run.json last.
    with staged_output(out, overwrite=overwrite, replace_record=resume, stopped_note=stopped_note) as stage:
        return _run_staged(sf, out, stage, spec, tasks, plan, ex=ex, nw=nw, overwrite=overwrite,
                           resume=resume, progress=progress, command_line=command_line,
                           validate_s=validate_s, started=started, t_start=t_start, report=report,
                           dask_log=dask_log, direct=direct)


def _run_staged(sf: ScenarioFile, out: Path, stage: Any, spec: MediumSpec, tasks: Sequence[Any],
                plan: Any, *, ex: str, nw: int | None, overwrite: bool, resume: bool, progress: Any,
                command_line: str, validate_s: float | None, started: str, t_start: float,
                report: bool, dask_log: bool, direct: bool) -> dict[str, Any]:
    """The scenario run inside its staging folder: tasks into ``out``, the rest into ``stage.new``."""
    import time

    from ttmap.faults import checkpoint
    from ttmap.jobs.batch import run_tasks
    from ttmap.jobs.plan import REPORT_NAME
    from ttmap.jobs.scenario_reciprocal import run_reciprocal_products

    derived_overwrite = overwrite or resume
    run_json = out / "run.json"
    staged = stage.new

    def raster_progress(done: int, _total: int, name: str) -> None:
        if progress is not None:
            progress(done, plan.total_solves, name)

    t0 = time.perf_counter()
    summaries = run_tasks(
        tasks,
        spec,
        str(out),
        executor=ex,
        n_workers=nw,
        overwrite=overwrite,
        resume=resume,
        progress=raster_progress,
        tags={"SCENARIO_FILE": Path(sf.path).name},
        dask_log=dask_log,
        nests=scenario_nests(sf),
    )
    solve_s = time.perf_counter() - t0
    checkpoint("solved")

    by_name = {t.name: s for t, s in zip(tasks, summaries)}
    fronts: dict[str, str] = {}
    for sc in sf.scenarios:
        s = by_name.get(f"{sc.name}_front")
        if s is not None and s.ok and s.raster:
            fronts[sc.name] = s.raster

    t1 = time.perf_counter()
    products: dict[str, Any] = {"envelope": None, "differences": [], "skipped": []}
    envelope_staged: Mapping[str, str] | None = None  # where the envelope files are until the commit
    reciprocal_sites: dict[str, Any] | None = None
    if plan.method == "reciprocal":
        rec_env, reciprocal_sites, rec_info = run_reciprocal_products(
            sf, spec, staged, plan, fronts=fronts, executor=ex, n_workers=nw,
            overwrite=derived_overwrite, progress=progress, progress_offset=len(tasks),
            dask_log=dask_log, log_dir=out,
        )
        if rec_env["files"] is not None:
            envelope_staged = rec_env["files"]
            products["envelope"] = _product_paths(rec_env["files"], stage)
            products["envelope_method"] = "one solve (union of starts, labels carried)"
            rec_info["envelope"] = rec_env["info"]
        products["reciprocal"] = rec_info
    # scenario names in the order the envelope's first-scenario index uses
    names: list[str] = [sc.name for sc in sf.scenarios] if plan.envelope_one_solve else []
    if sf.outputs.envelope or sf.outputs.compare:
        from ttmap.jobs.scenario_maps import scenario_water_mask

        water = scenario_water_mask(spec) if fronts else None
        if sf.outputs.envelope and not plan.envelope_one_solve:
            if len(fronts) >= 2:
                names = list(fronts)
                kind_of = {sc.name: sc.source.kind for sc in sf.scenarios}
                env = write_envelope(
                    str(staged), [fronts[n] for n in names], names, None, derived_overwrite,
                    water_mask=water, source_kinds=[kind_of[n] for n in names],
                )
                envelope_staged = env
                products["envelope"] = _product_paths(env, stage)
                checkpoint("products")
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
            diff = write_difference(str(staged), fronts[a], fronts[b], a, b, derived_overwrite,
                                    water_mask=water)
            products["differences"].append({"a": a, "b": b, "files": _product_paths(diff, stage)})
    sites_summary: dict[str, Any] | None = None
    if reciprocal_sites is not None:
        sites_summary = reciprocal_sites
    elif sf.sites_path is not None:
        sites_summary = _write_sites_x_scenarios(sf, staged, fronts, by_name, derived_overwrite)
    if sites_summary is not None:
        sites_summary["files"] = _product_paths(sites_summary.get("files") or {}, stage)
        if sites_summary.get("files"):
            products["sites"] = sites_summary["files"]
        else:
            products["skipped"].append(f"sites by scenarios: {sites_summary.get('skipped')}")
    from ttmap.jobs.styling import style_scenario_run

    styles = style_scenario_run(summaries, envelope=envelope_staged, envelope_names=names,
                                overwrite=derived_overwrite)
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
            "table_method": plan.method,
            "table_method_reason": plan.reason,
            "scenario_rasters": sf.outputs.scenario_rasters,
            "table_method_setting": "direct" if direct else sf.outputs.table_method,
        },
        timings_s={
            **({"validate_s": validate_s} if validate_s is not None else {}),
            "solve_s": solve_s,
            "compare_s": compare_s,
            "total_s": time.perf_counter() - t_start + (validate_s or 0.0),
        },
        out_dir=out,
        extra_products=[*(str(stage.final(p)) for p in styles),
                        *([str(out / REPORT_NAME)] if report else [])],
    )
    from ttmap.jobs.styling import write_report_and_record

    write_report_and_record(record, staged, report=report, overwrite=derived_overwrite, record_overwrite=True)
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
    out_dir: Path,
    extra_products: Sequence[str] = (),
) -> dict[str, Any]:
    """The run record of a scenario run, in the one schema (:mod:`ttmap.jobs.record`)."""
    from ttmap.jobs.record import build_run_record, file_entry

    inputs: dict[str, Any] = {
        "scenario_file": file_entry(sf.path),
        "bathymetry": file_entry(sf.bathymetry.path),
    }
    if sf.sites_path is not None:
        inputs["sites"] = file_entry(sf.sites_path, count=sf.sites_count)
    for k, path in enumerate(sorted({sc.source_file for sc in sf.scenarios if sc.source_file})):
        inputs[f"source_file_{k + 1}"] = file_entry(path)
    nest_blocks: dict[str, Any] = {}
    if sf.nests:
        from ttmap.jobs.nests import scenario_nests_record

        for n in sf.nests:
            inputs[f"nest-{n.name}"] = file_entry(n.path)
        nest_blocks["nests"] = scenario_nests_record(sf, summaries, str(options.get("table_method")))
    rasters = [s.raster for s in summaries if s.ok and s.raster]
    rasters += [p for s in summaries if s.ok for p in s.nests.values()]
    task_records = [s.record for s in summaries if s.ok and s.record]
    return build_run_record(
        job="scenario",
        started_utc=started_utc,
        command_line=command_line,
        inputs=inputs,
        parameters={
            "medium": spec.describe(),
            "periods_s": list(sf.speed.periods_s),
            "period_speed": sf.speed.period_speed,
            **options,
        },
        timings_s=timings_s,
        products=[*rasters, *task_records, *_files_written(products), *extra_products],
        out_dir=out_dir,
        scenarios=[sc.describe() for sc in sf.scenarios],
        trenches=[
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
        tasks=[
            {
                "name": s.name,
                "ok": s.ok,
                "skipped": s.skipped,
                "raster": s.raster,
                **({"nest_rasters": dict(s.nests)} if s.nests else {}),
                "seconds": s.seconds,
                "error": s.error,
                "summary": s.summary,
            }
            for s in summaries
        ],
        failed=[{"name": s.name, "error": s.error} for s in summaries if not s.ok],
        comparisons=dict(products),
        sites=sites_summary,
        **nest_blocks,
    )


def scenario_site_options(sf: ScenarioFile) -> Any:
    """The scenario file's ``[sites]`` table as the site option group the map job uses."""
    from ttmap.jobs.options import SiteOptions

    return SiteOptions(path=sf.sites_path, **dict(getattr(sf, "site_options", {}) or {}))


def _write_sites_x_scenarios(
    sf: ScenarioFile,
    out: Path,
    fronts: Mapping[str, str],
    by_name: Mapping[str, Any],
    overwrite: bool,
) -> dict[str, Any]:
    """Sites by scenarios (CSV tables and chart) from the finished fronts; a summary for run.json."""
    from ttmap.io.raster import read_bathymetry
    from ttmap.traveltime import prepare_medium

    if sf.sites_path is None or not fronts:
        return {"path": sf.sites_path, "skipped": "no finished front to read the sites from"}
    energy: dict[tuple[str, float], str] = {}
    for name in fronts:
        for p in sf.speed.periods_s:
            s = by_name.get(f"{name}_{sf.speed.period_speed}_T{p:g}s")
            if s is not None and s.ok and s.raster:
                energy[(name, float(p))] = s.raster
    opts = scenario_site_options(sf)
    try:
        sites = opts.read()
        spec, _ = scenario_tasks(sf)
        # The front's medium: depths at the cells read and the water masks behind the
        # snapping status words, exactly as the map job has them.
        bathy = read_bathymetry(spec.bathymetry, **spec.reading_kwargs())
        medium = prepare_medium(bathy.depth_m, bathy.grid, floor_depth_m=spec.floor_depth_m,
                                far_field=spec.far_field, earth=spec.earth)  # type: ignore[arg-type]
        del bathy
        nest_fields = _nest_site_fields(sf, spec, fronts, energy, by_name)
        site_grids = None
        if nest_fields:
            from ttmap.jobs.nests import grid_of_sites

            site_grids = grid_of_sites(sites, {k: v["grid"] for k, v in nest_fields.items()})
        written = write_sites_by_scenarios(
            str(out), sites, dict(fronts), energy, overwrite=overwrite,
            search_radius_m=opts.search_radius_m,
            notification_delay_min=opts.notification_delay_min,
            preparation_min=opts.preparation_min,
            walking_speed_m_s=opts.walking_speed_m_s,
            little_margin_min=opts.little_margin_min,
            speed_uncertainty=opts.speed_uncertainty,
            origin_time_utc=opts.origin_time_utc,
            depth_m=medium.depth_m, water=medium.water, open_water=medium.open_water,
            nests=nest_fields, site_grids=site_grids,
        )
        del medium, nest_fields
    except InputDataError as err:  # a bad site row must not lose the finished solves
        return {"path": sf.sites_path, "skipped": f"site table not written ({err})"}
    table = written.pop("table")
    from ttmap.jobs.options import options_record

    return {
        **sites_table_summary(sf.sites_path, table, scenarios=list(fronts),
                              periods_s=sorted({p for _, p in energy})),
        "options": {k: v for k, v in options_record(opts).items() if k != "path"},
        "files": {k: v for k, v in written.items() if isinstance(v, str)},
    }


def _nest_site_fields(sf: ScenarioFile, spec: Any, fronts: Mapping[str, str],
                      energy: Mapping[tuple[str, float], str],
                      by_name: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    """Per nest of the run, what the sites inside it are read from (direct path).

    Each nest's arrival rasters of every finished front (and of each energy
    raster whose task wrote one), its grid, and its medium's depths and water
    masks as :func:`ttmap.nesting.solve_nest` builds them (the front's speed
    model), so a site in the nest is snapped as the map job snaps it. A nest
    missing the raster of some finished front is left out (its sites stay on
    the basin grid).
    """
    from ttmap.io.raster import read_bathymetry
    from ttmap.traveltime import prepare_medium

    out: dict[str, dict[str, Any]] = {}
    for n in sf.nests:
        front_paths: dict[str, str] = {}
        for sc in fronts:
            s = by_name.get(f"{sc}_front")
            path = s.nests.get(n.name) if s is not None else None
            if path:
                front_paths[sc] = path
        if not front_paths or len(front_paths) != len(fronts):
            continue
        energy_paths: dict[tuple[str, float], str] = {}
        for sc, p in energy:
            s = by_name.get(f"{sc}_{sf.speed.period_speed}_T{p:g}s")
            path = s.nests.get(n.name) if s is not None else None
            if path:
                energy_paths[(sc, p)] = path
        bathy = read_bathymetry(n.path, band=spec.band, depth_positive=spec.depth_positive)
        medium = prepare_medium(bathy.depth_m, bathy.grid, floor_depth_m=spec.floor_depth_m,
                                far_field=spec.far_field, earth=spec.earth)
        out[n.name] = {"grid": bathy.grid, "fronts": front_paths, "energy": energy_paths,
                       "depth_m": medium.depth_m, "water": medium.water, "open_water": medium.open_water}
        del bathy, medium
    return out


def sites_table_summary(path: str | None, table: Mapping[str, Sequence[Any]], *,
                        scenarios: Sequence[str], periods_s: Sequence[float]) -> dict[str, Any]:
    """The run record's summary of a sites x scenarios table (direct and reciprocal paths alike):
    site count, sites no scenario reaches, snapping status counts, each site's earliest scenario."""
    first: dict[str, Any] = {}
    statuses: dict[str, str] = {}
    for site, sc, front, is_first, status in zip(
        table["name"], table["scenario"], table["front_min"], table["earliest_for_site"],
        table["status"], strict=True,
    ):
        statuses[site] = status
        if is_first and site not in first:
            first[site] = {"scenario": sc, "front_min": round(float(front), 3)}
    return {
        "path": path,
        "count": len(statuses),
        "scenarios": list(scenarios),
        "periods_s": list(periods_s),
        "no_arrival": sorted(s for s in statuses if s not in first),
        "snap_status": {k: sum(1 for v in statuses.values() if v == k)
                        for k in dict.fromkeys(statuses.values())},
        "earliest": first,
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


def _product_paths(value: Any, stage: Any = None) -> Any:
    """Paths returned by a comparison writer, as JSON-ready text (final paths, not staged ones)."""
    if value is None:
        return None
    if isinstance(value, (str, os.PathLike)):
        return str(value) if stage is None else str(stage.final(value))
    if isinstance(value, Mapping):
        return {str(k): _product_paths(v, stage) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_product_paths(v, stage) for v in value]
    return str(value)


# ---------------------------------------------------------------------------
# Comparisons from arrival rasters: read (io), compute (products), write (io)
# ---------------------------------------------------------------------------


def write_envelope(
    out_dir: str | os.PathLike[str],
    paths: Sequence[str | os.PathLike[str]],
    names: Sequence[str],
    grid: Grid | None = None,
    overwrite: bool = False,
    *,
    water_mask: Any = None,
    tie_tolerance_min: float | None = None,
    source_kinds: Sequence[str] | None = None,
) -> dict[str, str]:
    """Write the earliest-arrival envelope of several arrival rasters.

    Writes ``envelope_min.tif`` (float32 minutes), ``envelope_first_scenario.tif``
    (int16, nodata -1, tags ``SCENARIO_<i>=<name>``: the scenario index where
    one scenario alone arrives within the tie tolerance of the earliest, a
    tie class ``n + k`` where two or more do), ``envelope_first_scenario.csv``
    (one row per scenario and one per tie class: index, name, raster, cells,
    earliest minute), ``envelope_first_scenario_tie.tif`` (1 on the tie
    classes, as the one-solve envelope writes it), and their styles and maps (``envelope_min.sld/.png``,
    ``envelope_first_scenario.sld/.png``, :mod:`ttmap.jobs.scenario_maps`;
    ``water_mask`` draws land on the maps).

    Parameters
    ----------
    out_dir : path-like
        Existing output folder.
    paths : sequence of path-like
        Arrival rasters (minutes), all on one grid; read one at a time.
    names : sequence of str
        Scenario name of each raster (file-safe, unique).
    grid : Grid, optional
        The grid the rasters must share; default that of the first raster.
    overwrite : bool
        Replace existing envelope files.
    source_kinds : sequence of str, optional
        Source kind of each scenario ("point", "rupture", "area", "line"): the
        minutes are said to count from "the earthquake" or "the event" as on
        the maps; without them, from the scenarios' shared origin time.

    Returns
    -------
    dict
        ``{"envelope_min": path, "first_scenario": path, "lookup_csv": path,
        "tie_class": path, ...}`` (and the extras: styles, maps).

    Raises
    ------
    InputDataError
        Counts differ, no rasters, bad names, or a raster on another grid
        (the message names it).
    OutputExistsError
        An output exists and ``overwrite`` is False (checked before reading).
    """
    from ttmap.io.atomic import check_writable
    from ttmap.io.compare import (
        ENVELOPE_FILES,
        ENVELOPE_TIE_FILE,
        read_minutes,
        write_envelope_files,
        write_tie_raster,
    )
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.compare import (
        MAX_SCENARIOS,
        check_scenario_names,
        comparison_tags,
        envelope,
    )

    rasters = [os.fspath(p) for p in paths]
    names = check_scenario_names(names, "scenario")
    if len(rasters) != len(names):
        raise InputDataError(
            f"{len(rasters)} rasters but {len(names)} names; give one name per raster"
        )
    if not rasters:
        raise InputDataError("no arrival rasters were given; pass at least one")
    if len(rasters) > MAX_SCENARIOS:
        raise InputDataError(
            f"an envelope indexes at most {MAX_SCENARIOS} scenarios, got {len(rasters)}"
        )
    from ttmap.defaults import ENVELOPE_TIE_TOLERANCE_MIN
    from ttmap.jobs.scenario_maps import envelope_extra_files, write_envelope_extras
    from ttmap.products.scenario_maps import first_scenario_ties

    tol = ENVELOPE_TIE_TOLERANCE_MIN if tie_tolerance_min is None else float(tie_tolerance_min)
    targets = [Path(out_dir) / name for name in ENVELOPE_FILES]
    tie_path = Path(out_dir) / ENVELOPE_TIE_FILE
    check_writable([*targets, tie_path, *envelope_extra_files(out_dir),
                    Path(out_dir) / "envelope_first_scenario.qml"], overwrite)

    ref: dict[str, Grid] = {} if grid is None else {"grid": grid}

    def fields() -> Iterator[Any]:
        for path in rasters:
            values, g, _ = read_minutes(path, ref.get("grid"))
            ref.setdefault("grid", g)
            yield values

    earliest, _ = envelope(fields())
    ties = first_scenario_ties(earliest, fields(), n_scenarios=len(rasters), tolerance_min=tol)
    first = ties.codes
    n = len(names)
    counts = [*ties.cells_first, *ties.tie_cells]
    earliest_by = [
        f"{float(earliest[first == i].min()):.3f}" if counts[i] else "" for i in range(len(counts))
    ]
    scenario_tags = {"SCENARIOS": str(n), **{f"SCENARIO_{i}": x for i, x in enumerate(names)}}
    write_envelope_files(
        targets,
        earliest,
        first,
        ref["grid"],
        minutes_tags={
            **comparison_tags(f"earliest arrival over {n} scenarios, {_when(source_kinds)}"),
            **scenario_tags,
        },
        index_tags={
            **comparison_tags(
                f"index of the scenario that arrives first; {n} and above: a tie class of "
                f"scenarios arriving within {tol:g} min of each other; names in the "
                "SCENARIO_<i> tags and envelope_first_scenario.csv"
            ),
            **scenario_tags,
        },
        lookup={
            "index": list(range(n + len(ties.tie_sets))),
            "name": [*names, *(f"tie: {';'.join(names[i] for i in m)}" for m in ties.tie_sets)],
            "raster": [os.path.basename(p) for p in rasters] + [""] * len(ties.tie_sets),
            "cells_first": [int(c) for c in counts],
            "earliest_min": earliest_by,
        },
        comments=(
            CAUTION_SHORT,
            "index: value in envelope_first_scenario.tif; cells_first: cells where this "
            f"scenario alone arrives within {tol:g} min of the earliest; earliest_min: the "
            "earliest arrival there, minutes",
            f"rows named 'tie: a;b;...' list every tie: cells where those scenarios all arrive "
            f"within {tol:g} min of the earliest (no single first scenario)",
        ),
        overwrite=overwrite,
    )
    # The same near-tie raster as the one-solve envelope writes: 1 on the tie classes.
    write_tie_raster(
        tie_path, first >= 0, first >= n, ref["grid"],
        rule=f"two or more scenarios arrive within {tol:g} min of the earliest (the tie class in "
             "envelope_first_scenario.tif names them)",
        tags={**comparison_tags("which-scenario tie class: 1 = near-tie, 0 = clear first scenario"),
              "TIE_TOLERANCE_S": f"{60.0 * tol:.4f}"},
        overwrite=overwrite,
    )
    extras = write_envelope_extras(out_dir, earliest, ties, names, ref["grid"],
                                   water_mask=water_mask, overwrite=overwrite)
    return {
        "envelope_min": str(targets[0]),
        "first_scenario": str(targets[1]),
        "lookup_csv": str(targets[2]),
        "tie_class": str(tie_path),
        **extras,
    }


def _when(source_kinds: Sequence[str] | None) -> str:
    """Time zero of an envelope in words: its scenarios share one origin time."""
    from ttmap.products.cautions import minutes_after_all

    return minutes_after_all(source_kinds) if source_kinds else "minutes after the scenarios' shared origin time"


def write_site_table_set(
    targets: Sequence[Path],
    table: Mapping[str, Any],
    options: Mapping[str, Any],
    *,
    overwrite: bool,
    method_note: str | None = None,
) -> None:
    """Write a sites x scenarios table, its earliest-by-site table and chart: one format for both paths.

    Parameters
    ----------
    targets : three paths
        :data:`ttmap.io.compare.SITES_X_SCENARIOS_FILES` in the output folder.
    table : mapping of column to values
        From :func:`ttmap.products.compare.sites_by_scenarios` (direct path) or
        :func:`ttmap.products.compare.sites_by_scenarios_from_values`
        (reciprocal path).
    options : mapping
        The site options the table was built with (the notes state them).
    overwrite : bool
    method_note : str, optional
        One more comment line saying how the arrivals were computed.
    """
    from ttmap.io.compare import write_sites_tables
    from ttmap.io.figures import save_figure
    from ttmap.products.compare import earliest_by_site, render_sites_by_scenarios, sites_by_scenarios_notes

    first = earliest_by_site(table)
    base_notes, first_notes = sites_by_scenarios_notes(**options)
    table_notes = [*base_notes, *([method_note] if method_note else [])]
    decimals = {k: 2 for k in table if k.endswith("_min") or k.startswith("minutes_")}
    decimals.update({"lon": 6, "lat": 6, "moved_m": 0, "depth_m": 1, "safe_ground_distance_m": 1,
                     "walking_speed_m_s": 3})
    fig = render_sites_by_scenarios(table)
    write_sites_tables(
        targets,
        [(table, table_notes, decimals), (first, first_notes, {"front_min": 2})],
        lambda path: save_figure(fig, path, format="png"),
        overwrite=overwrite,
    )
    del fig


def write_difference(
    out_dir: str | os.PathLike[str],
    path_a: str | os.PathLike[str],
    path_b: str | os.PathLike[str],
    name_a: str,
    name_b: str,
    overwrite: bool = False,
    *,
    water_mask: Any = None,
) -> dict[str, str]:
    """Write ``difference_<a>_minus_<b>.tif``: arrival of a minus arrival of b, minutes.

    With its style and map (``.sld``, ``.png``: a diverging ramp centred on
    zero, :mod:`ttmap.jobs.scenario_maps`).

    Positive where b arrives earlier (a later) by that many minutes, negative
    where a arrives earlier; nodata where either has no arrival. Tags
    ``SCENARIO_A``, ``SCENARIO_B`` and ``SIGN`` say so in the file.

    Returns
    -------
    dict
        ``{"difference": path, "style": path}``; the style is the QGIS
        ``.qml`` beside the raster (a diverging ramp centred on zero).

    Raises
    ------
    InputDataError
        Bad names, unreadable rasters, or rasters on different grids.
    OutputExistsError
        The output exists and ``overwrite`` is False.
    """
    from ttmap.io.atomic import check_writable
    from ttmap.io.compare import difference_file_name, read_minutes, write_difference_raster
    from ttmap.products.compare import check_scenario_names, comparison_tags, difference

    a_name, b_name = check_scenario_names([name_a, name_b], "scenario")
    from ttmap.jobs.scenario_maps import difference_extra_files, write_difference_extras

    target = Path(out_dir) / difference_file_name(a_name, b_name)
    check_writable([target, *difference_extra_files(target)], overwrite)
    a, grid_a, _ = read_minutes(path_a)
    b, _, _ = read_minutes(path_b, grid_a)
    diff = difference(a, b)
    del a, b
    style = target.with_suffix(".qml")
    check_writable([style], overwrite)
    write_difference_raster(
        target,
        diff,
        grid_a,
        tags={
            **comparison_tags(f"arrival time of {a_name} minus arrival time of {b_name}, minutes"),
            "UNITS": "minutes",
            "SCENARIO_A": a_name,
            "SCENARIO_B": b_name,
            "SIGN": (
                f"positive: {b_name} arrives earlier ({a_name} later) by this many minutes; "
                f"negative: {a_name} arrives earlier"
            ),
            "RASTER_A": os.path.basename(os.fspath(path_a)),
            "RASTER_B": os.path.basename(os.fspath(path_b)),
        },
        band_description=f"arrival of {a_name} minus arrival of {b_name}, minutes",
        overwrite=overwrite,
    )
    from ttmap.jobs.styling import write_difference_style

    write_difference_style(target, diff, a_name, b_name, overwrite=overwrite)
    extras = write_difference_extras(target, diff, grid_a, a_name, b_name,
                                     water_mask=water_mask, overwrite=overwrite)
    return {"difference": str(target), "style": str(style), **extras}


def write_sites_by_scenarios(
    out_dir: str | os.PathLike[str],
    sites: Any,
    front_paths: Mapping[str, str | os.PathLike[str]],
    energy_paths: Mapping[tuple[str, float], str | os.PathLike[str]] | None = None,
    *,
    grid: Grid | None = None,
    overwrite: bool = False,
    nests: Mapping[str, Mapping[str, Any]] | None = None,
    site_grids: Sequence[str] | None = None,
    **options: Any,
) -> dict[str, Any]:
    """Write ``sites_x_scenarios.csv``, ``earliest_by_site.csv`` and ``sites_x_scenarios.png``.

    Parameters
    ----------
    out_dir : path-like
        Existing output folder.
    sites : SiteList
        From :func:`ttmap.io.sites.read_sites`.
    front_paths : mapping of scenario name to path
        Front arrival rasters (minutes), all on one grid; read one at a time.
    energy_paths : mapping of (scenario, period_s) to path, optional
        Energy arrival rasters (minutes).
    grid : Grid, optional
        The grid the rasters must share; default that of the first front.
    overwrite : bool
        Replace existing files (checked before anything is read).
    nests : mapping of nest name to mapping, optional
        Per nest its ``grid``, ``fronts`` (scenario -> nest raster, every
        scenario of ``front_paths``), ``energy`` ((scenario, period_s) ->
        nest raster) and its medium's ``depth_m``, ``water`` and
        ``open_water``.
    site_grids : sequence of str, optional
        Per site the grid covering it (:func:`ttmap.jobs.nests.grid_of_sites`).
        With ``nests``, a site inside a nest is snapped and read on the nest's
        grid, and the table gains ``grid`` and ``basin_front_min``
        (:func:`ttmap.products.compare.sites_by_scenarios_on_grids`).
    **options
        Budget and snapping options of
        :func:`ttmap.products.compare.sites_by_scenarios`.

    Returns
    -------
    dict
        ``{"table_csv", "earliest_csv", "chart_png"}`` paths and ``"table"``
        (the columns).

    Notes
    -----
    Both CSVs start with ``# `` + the short caution; the files are committed
    together (:func:`ttmap.io.atomic.atomic_output_set`).
    """
    from ttmap.io.atomic import check_writable
    from ttmap.io.compare import SITES_X_SCENARIOS_FILES, read_minutes
    from ttmap.products.compare import sites_by_scenarios

    targets = [Path(out_dir) / name for name in SITES_X_SCENARIOS_FILES]
    check_writable(targets, overwrite)
    if not front_paths:
        raise InputDataError("no front arrival fields were given; pass at least one scenario")
    first_name, first_path = next(iter(front_paths.items()))
    ref = grid if grid is not None else read_minutes(first_path, what=f"front of {first_name}")[1]

    def field(path: str | os.PathLike[str], what: str, on: Grid) -> Any:
        return lambda: read_minutes(path, on, what=what)[0]

    def fields(fp: Mapping[str, Any], ep: Mapping[tuple[str, float], Any], on: Grid,
               where: str = "") -> tuple[dict[str, Any], dict[tuple[str, float], Any]]:
        return ({n: field(p, f"front of {n}{where}", on) for n, p in fp.items()},
                {k: field(p, f"energy of {k[0]}, T = {float(k[1]):g} s{where}", on) for k, p in ep.items()})

    fronts, energy = fields(front_paths, energy_paths or {}, ref)
    table = sites_by_scenarios(sites, ref, fronts, energy, **options)
    if nests and site_grids is not None:
        from ttmap.io.sites import SiteList
        from ttmap.products.compare import sites_by_scenarios_on_grids

        parts: dict[str, tuple[list[int], dict[str, list[Any]]]] = {}
        for nest, nf in nests.items():
            idx = [i for i, w in enumerate(site_grids) if w == nest]
            if not idx:
                continue
            sub = SiteList(tuple(sites.sites[i] for i in idx), sites.crs, sites.path)
            nfronts, nenergy = fields({n: nf["fronts"][n] for n in front_paths}, nf.get("energy") or {},
                                      nf["grid"], f" (nest {nest})")
            nopts = {**options, "depth_m": nf.get("depth_m"), "water": nf.get("water"),
                     "open_water": nf.get("open_water")}
            parts[nest] = (idx, sites_by_scenarios(sub, nf["grid"], nfronts, nenergy, **nopts))
        table = sites_by_scenarios_on_grids(table, site_grids, parts)
    write_site_table_set(targets, table, options, overwrite=overwrite)
    return {
        "table_csv": str(targets[0]),
        "earliest_csv": str(targets[1]),
        "chart_png": str(targets[2]),
        "table": table,
    }
