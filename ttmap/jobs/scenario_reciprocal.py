"""The reciprocal path of a scenario run: sites x scenarios and the envelope without N solves.

:func:`plan_table_method` decides how the sites x scenarios table and the
envelope of a scenario file are computed (``[outputs] table_method`` /
``--direct``, ``[outputs] scenario_rasters``):

- ``"direct"``: every scenario is solved (one raster each, and per period);
  the table and the envelope are read from those rasters.
- ``"reciprocal"``: one solve per site and speed model (the front, and the
  group-speed medium of each period), each reduced in its worker to one table
  row (:func:`ttmap.reciprocal.reduce_over_starts`); the envelope comes from
  the per-scenario rasters when they are written anyway (exact and free),
  otherwise from one solve over the union of the starts with which-scenario
  labels (:func:`ttmap.reciprocal.envelope_one_solve`). Scenarios named in
  ``compare`` pairs still get their front raster (a difference raster needs it).
- ``"auto"`` (default): direct when the file has ``[[nest]]`` tables (every
  scenario's nest rasters are solved from its basin raster); otherwise
  reciprocal when per-scenario rasters are not asked for, or when there are
  more scenarios than sites; otherwise direct. The reciprocal table and
  envelope ignore the nests (they are on the basin grid); a run that asks
  for ``"reciprocal"`` with nests says so in its reason.

Method, reasons and accuracy: docs/reciprocal.md.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ttmap.errors import InputDataError
from ttmap.io.compare import ENVELOPE_TIE_FILE
from ttmap.jobs.batch import map_calls, medium_for_spec
from ttmap.scenario import ScenarioFile
from ttmap.tasks import MediumSpec

if TYPE_CHECKING:
    import numpy as np
    from numpy.typing import NDArray

    from ttmap.reciprocal import ScenarioStarts
    from ttmap.traveltime import Medium

__all__ = [
    "TablePlan",
    "plan_table_method",
    "run_reciprocal_products",
]

#: Tie class raster written beside the one-solve envelope.


@dataclass(frozen=True)
class TablePlan:
    """How a scenario run computes its table and envelope.

    Attributes
    ----------
    method : {"reciprocal", "direct"}
    reason : str
        Why, in words (printed and recorded).
    raster_scenarios : tuple of str
        Scenarios whose rasters are solved (all of them on the direct path).
    raster_periods : bool
        Whether the per-period rasters of those scenarios are solved.
    envelope_one_solve : bool
        The envelope comes from one union solve (no per-scenario rasters).
    site_solves : int
        Site solves of the reciprocal table (sites x speed models).
    envelope_solves : int
        Solves of the one-solve envelope (1 for all areas and ruptures,
        plus one per point or line scenario).
    raster_solves : int
        Solves that write a raster.
    """

    method: str
    reason: str
    raster_scenarios: tuple[str, ...]
    raster_periods: bool
    envelope_one_solve: bool
    site_solves: int
    envelope_solves: int
    raster_solves: int

    @property
    def total_solves(self) -> int:
        """Every solve of the run (rasters, site solves, envelope)."""
        return self.raster_solves + self.site_solves + self.envelope_solves


def plan_table_method(sf: ScenarioFile, *, direct: bool = False) -> TablePlan:
    """Choose the direct or reciprocal path for ``sf`` (see the module notes).

    Parameters
    ----------
    sf : ScenarioFile
    direct : bool
        Force the direct path (``--direct``), whatever the file says.
    """
    o = sf.outputs
    n_sc = len(sf.scenarios)
    n_sites = int(sf.sites_count or 0)
    n_p = len(sf.speed.periods_s)
    setting = "direct" if direct else o.table_method
    if setting == "direct":
        method = "direct"
        reason = "--direct given" if direct else "table_method = \"direct\" in the file"
        if not o.scenario_rasters:
            reason += "; the direct path needs every scenario's raster, so they are written"
    elif setting == "reciprocal":
        method, reason = "reciprocal", "table_method = \"reciprocal\" in the file"
        if sf.nests:
            reason += ("; the table and the envelope ignore the nests (basin grid only); nest rasters "
                       "are written for the scenarios whose rasters are solved")
    elif sf.nests:
        method = "direct"
        reason = (f"{len(sf.nests)} nest(s) given: every scenario is solved with its nest rasters "
                  "(the reciprocal table would ignore the nests)")
        if not o.scenario_rasters:
            reason += "; so the per-scenario rasters are written although scenario_rasters = false"
    elif not o.scenario_rasters:
        method, reason = "reciprocal", "no per-scenario rasters asked for (scenario_rasters = false)"
    elif n_sites and n_sc > n_sites:
        method, reason = "reciprocal", f"{n_sc} scenarios > {n_sites} sites"
    else:
        method = "direct"
        reason = (
            "no sites, and the per-scenario rasters give the envelope" if not n_sites
            else f"{n_sc} scenarios <= {n_sites} sites, and the rasters are written anyway"
        )
    names = tuple(sc.name for sc in sf.scenarios)
    if method == "direct" or o.scenario_rasters:
        rasters, periods = names, True
    else:
        wanted = {n for pair in o.compare for n in pair}
        rasters, periods = tuple(n for n in names if n in wanted), False
    one_solve = method == "reciprocal" and o.envelope and not o.scenario_rasters and n_sc >= 2
    env_solves = 0
    if one_solve:
        singles = sum(1 for sc in sf.scenarios if sc.source.kind not in ("area", "rupture"))
        env_solves = singles + (1 if singles < n_sc else 0)
    site_solves = n_sites * (1 + n_p) if (method == "reciprocal" and sf.sites_path) else 0
    return TablePlan(
        method, reason, rasters, periods, one_solve, site_solves, env_solves,
        len(rasters) * (1 + (n_p if periods else 0)),
    )


# ---------------------------------------------------------------------------
# Worker side: one site solve, reduced to one table row
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _SiteSolve:
    """One site solve (small, pickled to a worker)."""

    spec: MediumSpec
    sha256: str | None
    mode: str
    period_s: float | None
    cell: tuple[int, int]
    name: str
    max_time_s: float | None


def _site_row(item: _SiteSolve, starts: Mapping[tuple[str, float | None], ScenarioStarts]) -> Any:
    """Arrival (s) of every scenario at one site: its solve, reduced in the worker."""
    from ttmap.reciprocal import reduce_over_starts, site_field_s

    medium = medium_for_spec(item.spec, item.mode, item.period_s, item.sha256)
    field_s = site_field_s(medium, item.cell, max_time_s=item.max_time_s, name=item.name)
    return reduce_over_starts(field_s, starts[(item.mode, item.period_s)])


# ---------------------------------------------------------------------------
# Client side
# ---------------------------------------------------------------------------


def _starts_of(medium: Medium, sf: ScenarioFile) -> ScenarioStarts:
    """Start cells (and exact points on each source) of every scenario on ``medium``,
    each with its own snap radius."""
    from ttmap.reciprocal import scenario_starts

    return scenario_starts(medium, [sc.source for sc in sf.scenarios],
                           snap_radius_m=[sc.snap_radius_m for sc in sf.scenarios])


def _max_time_s(sf: ScenarioFile) -> float | None:
    times = [sc.max_time_s for sc in sf.scenarios]
    if any(t is None for t in times):
        return None
    return max(float(t) for t in times if t is not None)


def _one_solve_envelope(
    medium: Medium, sf: ScenarioFile
) -> tuple[NDArray[np.float64], NDArray[np.int32], NDArray[np.bool_], dict[str, Any]]:
    """The union-solve envelope (seconds), labels and tie mask; grouped by snap radius."""
    import numpy as np

    from ttmap.reciprocal import NO_LABEL, envelope_one_solve

    groups: dict[float | None, list[int]] = {}
    for i, sc in enumerate(sf.scenarios):
        groups.setdefault(sc.snap_radius_m, []).append(i)
    max_t = _max_time_s(sf)
    arrival: Any = None
    first: Any = None
    tie: Any = None
    info: dict[str, Any] = {"relaxed_start_cells": 0, "unlabelled_cells": 0, "groups": len(groups)}
    for radius, idx in groups.items():
        env = envelope_one_solve(
            medium, [sf.scenarios[i].source for i in idx], snap_radius_m=radius, max_time_s=max_t
        )
        info["relaxed_start_cells"] += env.relaxed_start_cells
        info["unlabelled_cells"] += env.unlabelled_cells
        info["tie_tolerance_s"] = env.tie_tolerance_s
        lab = np.where(env.first_scenario >= 0, np.asarray(idx)[np.maximum(env.first_scenario, 0)],
                       NO_LABEL).astype(np.int32)
        if arrival is None:
            arrival, first, tie = env.arrival_time_s, lab, env.tie.copy()
            continue
        a = env.arrival_time_s
        with np.errstate(invalid="ignore"):
            close = np.isfinite(a) & (np.abs(a - arrival) <= env.tie_tolerance_s)
            better = np.isfinite(a) & ~(arrival <= a)
        tie |= env.tie | (close & (first != lab))
        first[better] = lab[better]
        arrival[better] = a[better]
    # Each scenario's own time limit: the union solve ran to the largest.
    limits = {sc.max_time_s for sc in sf.scenarios}
    if len(limits) > 1:
        info["note"] = (
            "scenarios have different max_time_h; the one-solve envelope runs to the largest"
        )
    return arrival, first, tie, info


def _write_one_solve_envelope(
    out: Path, sf: ScenarioFile, medium: Medium, overwrite: bool
) -> tuple[dict[str, str], Any, dict[str, Any]]:
    """Write ``envelope_min.tif``, ``envelope_first_scenario.tif`` (+ csv) and the tie raster."""
    import numpy as np

    from ttmap.io.atomic import atomic_output, check_writable
    from ttmap.io.compare import ENVELOPE_FILES, write_envelope_files, write_tie_raster
    from ttmap.products.cautions import minutes_after_all
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.compare import MAX_SCENARIOS, comparison_tags

    names = [sc.name for sc in sf.scenarios]
    if len(names) > MAX_SCENARIOS:
        raise InputDataError(
            f"an envelope indexes at most {MAX_SCENARIOS} scenarios, got {len(names)}; "
            "split the file or set envelope = false"
        )
    targets = [out / n for n in ENVELOPE_FILES]
    tie_path = out / ENVELOPE_TIE_FILE
    from ttmap.jobs.scenario_maps import envelope_extra_files

    check_writable([*targets, tie_path, *envelope_extra_files(out), out / "envelope_first_scenario.qml"],
                   overwrite)
    arrival_s, first, tie, info = _one_solve_envelope(medium, sf)
    earliest = arrival_s / 60.0
    counts = np.bincount(first[first >= 0].astype(np.int64), minlength=len(names))
    earliest_by = [
        f"{float(np.nanmin(earliest[first == i])):.3f}" if counts[i] else ""
        for i in range(len(names))
    ]
    n = len(names)
    scenario_tags = {"SCENARIOS": str(n), **{f"SCENARIO_{i}": x for i, x in enumerate(names)}}
    method_tag = {"METHOD": "one solve from the union of the scenario starts (docs/reciprocal.md)"}
    # The tie raster is committed only once the envelope files are in place.
    with atomic_output(tie_path, overwrite=overwrite) as tmp_tie:
        tol = float(info.get("tie_tolerance_s", math.nan))
        write_tie_raster(
            tmp_tie, np.isfinite(arrival_s), tie, medium.grid,
            rule=f"two scenarios arrive within {tol:.2f} s (a quarter of a cell's crossing time; "
                 "the lower index is labelled in envelope_first_scenario.tif)",
            tags={**comparison_tags("which-scenario tie class: 1 = near-tie, 0 = clear first scenario"),
                  "TIE_TOLERANCE_S": f"{tol:.4f}", **method_tag},
            overwrite=True,
        )
        write_envelope_files(
            targets,
            earliest,
            first,
            medium.grid,
            minutes_tags={
                **comparison_tags(f"earliest arrival over {n} scenarios, "
                                  f"{minutes_after_all(sc.source.kind for sc in sf.scenarios)}"),
                **scenario_tags, **method_tag,
            },
            index_tags={
                **comparison_tags(
                    "index of the scenario that arrives first (labels carried along the solve; "
                    f"near-ties: lowest index, marked in {ENVELOPE_TIE_FILE}); names in the "
                    "SCENARIO_<i> tags and envelope_first_scenario.csv"
                ),
                **scenario_tags, **method_tag,
            },
            lookup={
                "index": list(range(n)),
                "name": names,
                "raster": ["" for _ in names],
                "cells_first": [int(c) for c in counts],
                "earliest_min": earliest_by,
            },
            comments=(
                CAUTION_SHORT,
                "index: value in envelope_first_scenario.tif; cells_first: cells where this "
                "scenario arrives first; earliest_min: its earliest arrival there, minutes; "
                "raster: blank (one-solve envelope, no per-scenario raster)",
            ),
            overwrite=overwrite,
        )
    info["tie_cells"] = int(tie.sum())
    # Styles and maps as for the envelope from rasters (one scheme for both paths); the
    # near-ties of the labels are in the tie raster, so the first-scenario classes here
    # are the labels alone.
    from ttmap.jobs.scenario_maps import write_envelope_extras
    from ttmap.products.scenario_maps import FirstScenario

    labels = FirstScenario(first.astype(np.int16), [], [int(c) for c in counts], [], tol / 60.0)
    extras = write_envelope_extras(out, earliest, labels, names, medium.grid,
                                   water_mask=medium.water, overwrite=overwrite)
    paths = {
        "envelope_min": str(targets[0]),
        "first_scenario": str(targets[1]),
        "lookup_csv": str(targets[2]),
        "tie_class": str(tie_path),
        **extras,
    }
    return paths, np.isfinite(arrival_s), info


def _reach_from_rasters(paths: Sequence[str]) -> Any:
    """Cells any of the front rasters reaches (the direct path's snapping mask)."""
    import numpy as np

    from ttmap.io.compare import read_minutes

    reach: Any = None
    ref: Any = None
    for p in paths:
        values, g, _ = read_minutes(p, ref)
        ref = g
        fin = np.isfinite(values)
        reach = fin if reach is None else (reach | fin)
    return reach


def run_reciprocal_products(
    sf: ScenarioFile,
    spec: MediumSpec,
    out: Path,
    plan: TablePlan,
    *,
    fronts: Mapping[str, str],
    executor: str,
    n_workers: int | None,
    overwrite: bool,
    progress: Callable[[int, int, str], None] | None = None,
    progress_offset: int = 0,
    dask_log: bool = True,
    log_dir: Path | None = None,
) -> tuple[dict[str, Any], dict[str, Any] | None, dict[str, Any]]:
    """Envelope (one solve, when planned) and the reciprocal sites x scenarios table.

    Parameters
    ----------
    sf, spec
        The scenario file and its medium spec (:func:`ttmap.scenario.scenario_tasks`).
    out : Path
        Output folder.
    plan : TablePlan
        From :func:`plan_table_method`, method ``"reciprocal"``.
    fronts : mapping of scenario name to raster path
        Front rasters solved directly (all scenarios when rasters are on).
    executor, n_workers
        As for :func:`ttmap.jobs.batch.map_calls`.
    overwrite : bool
        Replace the derived files.
    progress : callable, optional
        ``progress(done, total, name)``; counts continue from ``progress_offset``.
    dask_log : bool
        Append the Dask machinery's log lines to ``dask.log`` (else drop them).
    log_dir : Path, optional
        Folder of ``dask.log`` (default ``out``). A staged run passes its
        final folder: the log is one file shared with the direct solves,
        appended to, and not part of the staged product set.

    Returns
    -------
    envelope : dict
        ``{"files": paths or None, "info": ...}`` (files None when not made here).
    sites_summary : dict or None
        As the direct path's summary in run.json (None without sites).
    info : dict
        Timings and counts of the reciprocal work.
    """
    import time

    import numpy as np

    from ttmap.io.raster import file_sha256

    sha = file_sha256(spec.bathymetry) if os.path.isfile(spec.bathymetry) else None
    front_medium = medium_for_spec(spec, "long-wave", None, sha)
    total = plan.total_solves
    done = [progress_offset]

    def tick(name: str) -> None:
        done[0] += 1
        if progress is not None:
            progress(done[0], total, name)

    info: dict[str, Any] = {}
    envelope: dict[str, Any] = {"files": None, "info": None}
    reach: Any = None
    if plan.envelope_one_solve:
        t0 = time.perf_counter()
        files, reach, env_info = _write_one_solve_envelope(out, sf, front_medium, overwrite)
        for _ in range(plan.envelope_solves):
            tick("envelope (one solve)")
        env_info["seconds"] = round(time.perf_counter() - t0, 4)
        envelope = {"files": files, "info": env_info}
    if sf.sites_path is None:
        return envelope, None, info
    if reach is None:
        if fronts and len(fronts) == len(sf.scenarios):
            reach = _reach_from_rasters(list(fronts.values()))
        else:
            reach = front_medium.open_water  # docs/reciprocal.md: snapping without an envelope

    from ttmap.jobs.scenario import scenario_site_options
    from ttmap.products.site_eval import snap_sites

    # The same site options, snapping and status words as the direct path and the map job.
    opts = scenario_site_options(sf)
    try:
        sites = opts.read()
    except InputDataError as err:
        return envelope, {"path": sf.sites_path, "skipped": f"site table not written ({err})"}, info
    snapped = snap_sites(sites, front_medium.grid, reach, search_radius_m=opts.search_radius_m,
                         depth_m=front_medium.depth_m, water=front_medium.water,
                         open_water=front_medium.open_water)
    models: list[tuple[str, float | None]] = [("long-wave", None)]
    models += [(sf.speed.period_speed, float(p)) for p in sf.speed.periods_s]
    t0 = time.perf_counter()
    starts: dict[tuple[str, float | None], ScenarioStarts] = {}
    for mode, period in models:
        medium = front_medium if mode == "long-wave" else medium_for_spec(spec, mode, period, sha)
        starts[(mode, period)] = _starts_of(medium, sf)
    info["starts_s"] = round(time.perf_counter() - t0, 4)
    info["start_cells"] = {f"{m}" + (f"_T{p:g}s" if p else ""): int(s.flat_index.size)
                           for (m, p), s in starts.items()}
    max_t = _max_time_s(sf)
    items: list[_SiteSolve] = []
    where: list[tuple[int, int]] = []  # (model index, site index)
    for mi, (mode, period) in enumerate(models):
        for si, snap in enumerate(snapped):
            if snap.row < 0:
                continue
            items.append(_SiteSolve(spec, sha, mode, period, (snap.row, snap.col), snap.name, max_t))
            where.append((mi, si))
    names = [f"site {it.name} ({it.mode}{'' if it.period_s is None else f' T{it.period_s:g}s'})"
             for it in items]
    skipped = plan.site_solves - len(items)

    def prog(d: int, _t: int, name: str) -> None:
        tick(name)

    t0 = time.perf_counter()
    rows = map_calls(
        _site_row, items, starts, executor=executor, n_workers=n_workers, progress=prog,
        names=names, log_path=(log_dir or out) / "dask.log" if dask_log else None,
    )
    for _ in range(skipped):
        tick("site not on water (no solve)")
    info["site_solves_s"] = round(time.perf_counter() - t0, 4)
    info["site_solves"] = len(items)
    table_s = np.full((len(models), len(snapped), len(sf.scenarios)), np.nan)
    for (mi, si), row in zip(where, rows, strict=True):
        table_s[mi, si] = row
    # Each scenario's own time limit, as its direct solve would apply.
    for k, sc in enumerate(sf.scenarios):
        if sc.max_time_s is not None:
            with np.errstate(invalid="ignore"):
                table_s[:, :, k][table_s[:, :, k] > sc.max_time_s] = np.nan
    table_min = table_s / 60.0
    front_at = {sc.name: table_min[0, :, k].tolist() for k, sc in enumerate(sf.scenarios)}
    energy_at = {
        (sc.name, float(p)): table_min[mi + 1, :, k].tolist()
        for mi, p in enumerate(sf.speed.periods_s)
        for k, sc in enumerate(sf.scenarios)
    }
    summary = _write_table(out, sf, sites, snapped, front_at, energy_at, overwrite)
    return envelope, summary, info


def _write_table(
    out: Path,
    sf: ScenarioFile,
    sites: Any,
    snapped: Sequence[Any],
    front_at: Mapping[str, Sequence[float]],
    energy_at: Mapping[tuple[str, float], Sequence[float]],
    overwrite: bool,
) -> dict[str, Any]:
    """The site tables and chart (same files as the direct path), and the run.json summary."""
    import math as _m

    from ttmap.jobs.scenario import scenario_site_options

    opts = scenario_site_options(sf)

    from ttmap.io.atomic import check_writable
    from ttmap.io.compare import SITES_X_SCENARIOS_FILES
    from ttmap.jobs.scenario import write_site_table_set
    from ttmap.products.compare import sites_by_scenarios_from_values

    targets = [out / name for name in SITES_X_SCENARIOS_FILES]
    check_writable(targets, overwrite)
    options = {
        "notification_delay_min": opts.notification_delay_min, "preparation_min": opts.preparation_min,
        "walking_speed_m_s": opts.walking_speed_m_s, "little_margin_min": opts.little_margin_min,
        "speed_uncertainty": opts.speed_uncertainty, "origin_time_utc": opts.origin_time_utc,
    }
    table = sites_by_scenarios_from_values(sites, snapped, front_at, energy_at, **options)
    write_site_table_set(targets, table, options, overwrite=overwrite,
                         method_note="arrivals by reciprocity: one solve per site and speed model "
                                     "(docs/reciprocal.md)")
    from ttmap.jobs.scenario import sites_table_summary

    return {
        **sites_table_summary(sf.sites_path, table, scenarios=list(front_at),
                              periods_s=sorted({p for _, p in energy_at if not _m.isnan(p)})),
        "files": {
            "table_csv": str(targets[0]),
            "earliest_csv": str(targets[1]),
            "chart_png": str(targets[2]),
        },
        "method": "reciprocal",
    }
