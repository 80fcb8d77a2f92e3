"""What a validated scenario file asks for: its solves and a plain-text summary.

:func:`scenario_tasks` expands the scenarios into solves (one front and one
per wave period each); :func:`summary_lines` describes the file in a few
lines for ``ttmap scenario check``.
"""

from __future__ import annotations

import re

from ttmap.tasks import MediumSpec, NestSpec, SolveTask
from ttmap.physics.scaling import SCALING_RELATIONS
from ttmap.scenario.schema import ScenarioFile

__all__ = ["scenario_nests", "scenario_tasks", "summary_lines"]


def scenario_tasks(sf: ScenarioFile) -> tuple[MediumSpec, list[SolveTask]]:
    """The medium and the solves of a scenario file.

    Each scenario gives one front solve (long-wave speed), named
    ``<scenario>_front``, and one solve per wave period with the period speed,
    named ``<scenario>_<speed>_T<period>s`` (e.g. ``north_group_T600s``).

    Returns
    -------
    spec : MediumSpec
    tasks : list of SolveTask
        Scenario by scenario: the front, then the periods in file order.
    """
    b, s = sf.bathymetry, sf.speed
    window = b.crop_lonlat or b.crop_xy
    spec = MediumSpec(
        bathymetry=b.path,
        band=b.band,
        depth_positive=b.depth_positive,
        window=window,
        window_crs=None if b.crop_xy is not None else "EPSG:4326",
        coarsen=b.coarsen,
        nodata=b.nodata,
        refine=b.refine,
        floor_depth_m=s.floor_depth_m,
        far_field=s.far_field,
        earth=s.earth,
    )
    tasks: list[SolveTask] = []
    for sc in sf.scenarios:
        base = {"scenario": sc.name, "origin": sc.origin, "source": sc.source.label}
        if sc.trench:
            base["trench"] = sc.trench
        tasks.append(
            SolveTask(
                name=f"{sc.name}_front",
                source=sc.source,
                mode="long-wave",
                period_s=None,
                max_time_s=sc.max_time_s,
                snap_radius_m=sc.snap_radius_m,
                kind="scenario",
                meta=dict(base, product="front"),
            )
        )
        for p in s.periods_s:
            key = f"{s.period_speed}_T{p:g}s"
            tasks.append(
                SolveTask(
                    name=f"{sc.name}_{key}",
                    source=sc.source,
                    mode=s.period_speed,
                    period_s=p,
                    max_time_s=sc.max_time_s,
                    snap_radius_m=sc.snap_radius_m,
                    kind="scenario",
                    meta=dict(base, product=key),
                )
            )
    return spec, tasks


def scenario_nests(sf: ScenarioFile) -> tuple[NestSpec, ...]:
    """The file's ``[[nest]]`` tables as the nests every task solves (file order)."""
    return tuple(NestSpec(name=n.name, path=n.path) for n in sf.nests)


def summary_lines(
    sf: ScenarioFile,
    *,
    out_dir: str | None = None,
    executor: str | None = None,
    n_workers: int | None = None,
) -> list[str]:
    """A short plain-text description of a validated scenario file.

    Counts of scenarios and solves, the trench rupture sizes from the scaling
    law, the sites and the output folder.
    """
    b, s, o = sf.bathymetry, sf.speed, sf.outputs
    rows, cols = sf.grid.shape
    n_hand = sum(1 for x in sf.scenarios if x.trench is None)
    n_trench = len(sf.scenarios) - n_hand
    lines = [f"{sf.path}: valid"]
    crop = ""
    if b.crop_lonlat is not None:
        crop = f", cropped to lon/lat {list(b.crop_lonlat)}"
    elif b.crop_xy is not None:
        crop = f", cropped to x/y {list(b.crop_xy)}"
    lines.append(
        f"bathymetry: {b.path} ({cols} x {rows} cells, {sf.grid.crs}, {sf.grid.bounds_text()}"
        f"{crop}{f', coarsened by {b.coarsen}' if b.coarsen > 1 else ''}"
        f"{f', each cell split into {b.refine} x {b.refine} for the solve' if b.refine > 1 else ''})"
    )
    periods = ", ".join(f"{p:g}" for p in s.periods_s)
    lines.append(
        "speed: front (long-wave speed)"
        + (f" and {s.period_speed} speed for periods {periods} s" if s.periods_s else "")
        + f"; floor depth {s.floor_depth_m:g} m; "
        f"far-field slowdown {'on' if s.far_field else 'off'}; earth {s.earth}"
    )
    lines.append(
        f"scenarios: {len(sf.scenarios)} ({n_hand} written out, {n_trench} generated along "
        f"{len(sf.trenches)} trench(es))"
    )
    for t in sf.trenches:
        rel = SCALING_RELATIONS[t.scaling_law]
        lines.append(
            f"  trench {t.name_prefix!r}: {len(t.scenario_names)} ruptures "
            f"({t.scenario_names[0]} .. {t.scenario_names[-1]}) every {t.spacing_km:g} km along "
            f"{t.polyline_length_km:.0f} km; Mw {t.mw:g} -> {t.length_km:.0f} x "
            f"{t.width_km:.0f} km "
            f"each ({rel.key}, {_short_citation(rel.citation)})"
        )
    for x in sf.scenarios:
        if x.trench is None:
            lines.append(f"  {x.label_line()}")
    n_p = len(s.periods_s)
    lines.append(
        f"solves: {sf.solve_count} ({len(sf.scenarios)} fronts"
        + (f" + {len(sf.scenarios)} x {n_p} period(s))" if n_p else ")")
    )
    for n in sf.nests:
        lines.append(f"nest {n.name!r}: {n.path} (solved in every task from its basin times on the "
                     f"nest's edge; arrival_<task>_nest-{n.name}.tif)")
    if sf.sites_path:
        lines.append(f"sites: {sf.sites_count} in {sf.sites_path}")
    comp = ", ".join(f"{a} vs {c}" for a, c in o.compare) or "none"
    lines.append(
        f"outputs: {out_dir or o.folder} (envelope: {'yes' if o.envelope else 'no'}; "
        f"differences: {comp})"
    )
    ex = executor or o.executor or "local"
    nw = n_workers or o.workers
    lines.append(f"executor: {ex}" + (f", {nw} workers" if nw and ex != "serial" else ""))
    return lines


def _short_citation(citation: str) -> str:
    """``"Strasser et al. 2010"`` from a full citation.

    >>> _short_citation("Wells, D. L. and Coppersmith, K. J. (1994). New ...")
    'Wells and Coppersmith 1994'
    """
    authors, _, rest = citation.partition("(")
    names = re.findall(r"([A-Z][A-Za-z'-]+), [A-Z]\.", authors)
    year = rest[:4]
    if not names:
        return citation
    if len(names) == 1:
        return f"{names[0]} {year}"
    if len(names) == 2:
        return f"{names[0]} and {names[1]} {year}"
    return f"{names[0]} et al. {year}"

