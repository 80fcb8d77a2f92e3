"""Styles where GIS clients find them on their own, and the HTML report, for each job.

Every raster and vector layer a job writes should open already styled in
QGIS (3.22 and newer), with no style file loaded by hand (``docs/styles.md``):

- a ``.qml`` of the same base name beside each GeoTIFF, Shapefile and
  GeoJSON file (names from :func:`ttmap.jobs.plan.style_files`);
- a default row in the ``layer_styles`` table inside each GeoPackage, with the
  layer's SLD stored beside the QML.

The styles are built from what the job holds in memory when it writes the
layer (isochrone levels, band classes, coast classes and colours, site
names), with the same colours as the SLD files, which stay for other clients.
One function per job and product group:

- map job: :func:`style_map_set` (arrival raster, isochrones),
  :func:`style_map_coast` (coastal layer) and :func:`style_map_sites` (site
  table points);
- site-map job: :func:`style_site_set` (site-centred and minutes-left
  rasters, isochrones) and :func:`style_site_combined` (earliest time over the
  sites, site reached first);
- scenario run: :func:`style_scenario_run` (task rasters, envelope, scenario
  arriving first) and :func:`write_difference_style` (difference rasters);
- every job: :func:`write_run_report` writes ``report.html`` from the run
  record just before ``run.json``.

Each function returns the style files it wrote (GeoPackage styles live inside
files already listed), for the run record's ``products``.
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ttmap.jobs.plan import ISOCHRONE_LAYERS, REPORT_NAME

if TYPE_CHECKING:
    from ttmap.jobs.plan import CombinedNames, ProductSetNames, SiteNames, SiteTableNames

__all__ = [
    "difference_limit_min",
    "style_map_coast",
    "style_map_set",
    "style_map_sites",
    "style_scenario_run",
    "style_site_combined",
    "style_site_set",
    "style_wave_paths",
    "write_arrival_raster_style",
    "write_difference_style",
    "write_isochrone_styles",
    "write_report_and_record",
    "write_run_report",
]


def _caution() -> str:
    from ttmap.products.cautions import CAUTION_SHORT

    return CAUTION_SHORT


def _beside(layer: Path, qml_text: str, overwrite: bool, done: list[Path]) -> None:
    """Write ``<layer>.qml`` once (a Shapefile and a GeoJSON of one base name share it)."""
    from ttmap.io.styles import qml_path_for, write_qml_beside

    target = qml_path_for(layer)
    if target in done:
        return
    write_qml_beside(layer, qml_text, overwrite=overwrite)
    done.append(target)


def write_arrival_raster_style(tif: Path, levels: Sequence[float] | np.ndarray, *, title: str,
                               overwrite: bool = False) -> Path:
    """``<tif base>.qml``: the arrival ramp (0 over ``levels``) of :func:`ttmap.jobs.layers.arrival_ramp`.

    The same stops and colours as the raster's SLD; nodata transparent.
    """
    from ttmap.io.styles import write_qml_beside
    from ttmap.jobs.layers import arrival_ramp
    from ttmap.products.qml import raster_qml

    ramp, colors = arrival_ramp(levels)
    return write_qml_beside(tif, raster_qml(ramp, colors, layer_name=tif.stem, title=title), overwrite=overwrite)


def write_isochrone_styles(names: Any, bands: Sequence[Any], *, lines_title: str, bands_title: str,
                           overwrite: bool = False) -> list[Path]:
    """Styles of one isochrone output in every vector format.

    ``names`` is the isochrone part of a plan (``ProductSetNames.isochrones``
    or ``SiteNames.isochrones``); ``bands`` the bands written. A GeoPackage
    gets a default ``layer_styles`` row per layer (with its SLD); Shapefile
    and GeoJSON layers a ``.qml`` beside them. The bands' ``.qml`` classifies
    on ``minutes`` (the band's upper bound), a field name both formats keep.
    """
    from ttmap.io.styles import write_gpkg_layer_style
    from ttmap.io.vector import vector_output_paths
    from ttmap.jobs.layers import band_classes
    from ttmap.products.qml import bands_qml, lines_qml
    from ttmap.products.styles import bands_sld, lines_sld

    rows, colors = band_classes(bands)
    lines_q = lines_qml(title=lines_title)
    done: list[Path] = []
    for target in names.targets.values():
        target = Path(target)
        if target.suffix.lower() == ".gpkg":
            write_gpkg_layer_style(target, ISOCHRONE_LAYERS[0], lines_q, description=_caution(),
                                   sld_text=lines_sld(layer_name=ISOCHRONE_LAYERS[0], title=lines_title))
            write_gpkg_layer_style(target, ISOCHRONE_LAYERS[1], bands_qml(rows, colors, title=bands_title),
                                   description=_caution(),
                                   sld_text=bands_sld(rows, colors, layer_name=ISOCHRONE_LAYERS[1],
                                                      title=bands_title))
            continue
        lines_file, bands_file = vector_output_paths(target, ISOCHRONE_LAYERS)
        _beside(lines_file, lines_q, overwrite, done)
        _beside(bands_file, bands_qml(rows, colors, title=bands_title, attribute="minutes", bound="upper"),
                overwrite, done)
    return done


def style_map_set(
    names: ProductSetNames,
    *,
    title: str,
    levels: Sequence[float] | np.ndarray,
    bands: Sequence[Any],
    overwrite: bool = False,
) -> list[Path]:
    """Styles of one map-job product set: the arrival raster and the isochrones.

    Parameters
    ----------
    names : ProductSetNames
        The set's plan (:func:`ttmap.jobs.plan.product_set_names`).
    title : str
        The set's title (``front (long-wave speed, earliest arrival)``, ...).
    levels : sequence of float, minutes
        The isochrone levels the set was drawn with (the raster's SLD ramp
        runs from 0 over them).
    bands : sequence of IsochroneBand
        The bands written.
    overwrite : bool

    Returns
    -------
    list of Path
        The ``.qml`` files written.
    """
    written = [write_arrival_raster_style(names.arrival_tif, levels, title=f"Arrival time: {title}",
                                          overwrite=overwrite)]
    written += write_isochrone_styles(names.isochrones, bands, lines_title=f"Isochrones: {title}",
                                      bands_title=f"Arrival bands: {title}", overwrite=overwrite)
    return written


def style_map_coast(
    names: ProductSetNames,
    classes: Sequence[tuple[float, float | None, str]],
    colors: Sequence[str],
    *,
    title: str,
    overwrite: bool = False,
) -> list[Path]:
    """Styles of one set's coastal arrival layer: the classes and colours given to its SLD.

    ``classes`` from :func:`ttmap.products.coast.coast_classes`; the
    unreached coast (no class) is drawn grey and dashed.
    """
    from ttmap.io.styles import write_gpkg_layer_style
    from ttmap.products.coast import COAST_LAYER_NAME, coast_sld
    from ttmap.products.qml import coast_qml

    rows, cols = list(classes), list(colors)
    qml = coast_qml(rows, cols, title=f"Coastal arrival: {title}")
    done: list[Path] = []
    for target in names.coast.values():
        if target.suffix.lower() == ".gpkg":
            write_gpkg_layer_style(target, COAST_LAYER_NAME, qml, description=_caution(),
                                   sld_text=coast_sld(rows, cols, title=f"Coastal arrival: {title}"))
        else:
            _beside(target, qml, overwrite, done)
    return done


def style_map_sites(names: SiteTableNames, *, little_margin_min: float, overwrite: bool = False) -> list[Path]:
    """Styles of the map job's site points: coloured by time-budget status, labelled with the name.

    ``little_margin_min`` is the threshold the table was built with (its
    status text carries it).
    """
    from ttmap.io.styles import write_gpkg_layer_style
    from ttmap.products.qml import site_status_colors, sites_qml

    qml = sites_qml(title="Sites: time budget", status_colors=site_status_colors(little_margin_min))
    done: list[Path] = []
    for target in names.layers:
        if target.suffix.lower() == ".gpkg":
            write_gpkg_layer_style(target, "sites", qml, description=_caution())
        else:
            _beside(target, qml, overwrite, done)
    return done


def style_wave_paths(gpkg: Path, *, sld_text: str | None = None) -> None:
    """The wave-path layer's default style inside its GeoPackage: one line symbol, labelled by site."""
    from ttmap.io.styles import write_gpkg_layer_style
    from ttmap.products.qml import wave_paths_qml

    write_gpkg_layer_style(gpkg, "wave_paths",
                           wave_paths_qml(title="Path of the first wave to each site", label_attribute="name"),
                           description=_caution(), sld_text=sld_text)


def style_site_set(
    names: SiteNames,
    *,
    name: str,
    levels: Sequence[float] | np.ndarray,
    bands: Sequence[Any],
    left_min: np.ndarray,
    delay_min: float,
    overwrite: bool = False,
) -> list[Path]:
    """Styles of one site's site-centred products.

    The site-centred raster gets the arrival ramp over ``levels``; the
    minutes-left raster the classes of its SLD
    (:func:`ttmap.products.site_maps.minutes_left_classes`: dark red below
    0); the isochrones as :func:`write_isochrone_styles`.
    """
    from ttmap.io.styles import write_qml_beside
    from ttmap.products.qml import raster_qml
    from ttmap.products.site_maps import MINUTES_LEFT_NODATA, minutes_left_classes, minutes_left_title

    written = [write_arrival_raster_style(names.site_tif, levels, title=f"Minutes from a source here to {name}",
                                          overwrite=overwrite)]
    left_levels, left_colors = minutes_left_classes(left_min, delay_min)
    written.append(write_qml_beside(
        names.left_tif,
        raster_qml(left_levels, left_colors, layer_name=names.left_tif.stem,
                   title=minutes_left_title(name, delay_min), color_map_type="intervals",
                   nodata=MINUTES_LEFT_NODATA),
        overwrite=overwrite,
    ))
    written += write_isochrone_styles(names.isochrones, bands, lines_title=f"Minutes to reach {name}",
                                      bands_title=f"Minutes from a source here to {name}", overwrite=overwrite)
    return written


def style_site_combined(names: CombinedNames, *, levels: Sequence[float] | np.ndarray, site_names: Sequence[str],
                        overwrite: bool = False) -> list[Path]:
    """Styles of the several-site rasters: the earliest time (arrival ramp) and the site reached first."""
    from ttmap.io.styles import write_qml_beside
    from ttmap.products.qml import paletted_qml
    from ttmap.products.site_maps import INDEX_NODATA

    written = [write_arrival_raster_style(names.min_tif, levels,
                                          title="Minutes from a source here to the first site reached",
                                          overwrite=overwrite)]
    written.append(write_qml_beside(
        names.first_tif,
        paletted_qml(list(range(len(site_names))), list(site_names), layer_name=names.first_tif.stem,
                     title="Site reached first from a source here", nodata=INDEX_NODATA),
        overwrite=overwrite,
    ))
    return written


def _levels_up_to(latest_min: float | None) -> np.ndarray:
    from ttmap.products.isochrones import default_levels_min

    if latest_min is None or not math.isfinite(latest_min) or latest_min <= 0.0:
        return np.zeros(0)
    return default_levels_min(latest_min)


def style_scenario_run(
    summaries: Sequence[Any],
    *,
    envelope: Mapping[str, str] | None = None,
    envelope_names: Sequence[str] = (),
    overwrite: bool = False,
) -> list[Path]:
    """Styles of a scenario run's rasters: every finished task, the envelope and the scenario first.

    Parameters
    ----------
    summaries : sequence of TaskSummary
        From :func:`ttmap.jobs.batch.run_tasks`; each finished task's raster
        gets the arrival ramp up to its latest arrival (``arrival_min_range``
        of its summary, levels at the default isochrone spacing).
    envelope : mapping, optional
        What :func:`ttmap.jobs.scenario.write_envelope` returned. The envelope
        gets the ramp up to the latest arrival of the fronts it was built from
        (an upper bound of its own latest value), the first-scenario index
        one colour per scenario, labelled with its name.
    envelope_names : sequence of str
        Scenario names by index of the envelope.
    overwrite : bool

    Returns
    -------
    list of Path
        The ``.qml`` files written.
    """
    from ttmap.io.styles import write_qml_beside
    from ttmap.products.qml import paletted_qml

    written: list[Path] = []
    latest_by_raster: dict[str, float] = {}
    for s in summaries:
        if not (s.ok and s.raster):
            continue
        rng = (s.summary or {}).get("arrival_min_range")
        latest = float(rng[1]) if rng else None
        if latest is not None:
            latest_by_raster[Path(s.raster).name] = latest
        tif = Path(s.raster)
        if tif.is_file():
            written.append(write_arrival_raster_style(tif, _levels_up_to(latest), title=f"Arrival time: {s.name}",
                                                      overwrite=overwrite))
        for nest_name, nest_tif in (getattr(s, "nests", None) or {}).items():  # nested coastal grids
            if Path(nest_tif).is_file():
                from ttmap.io.compare import read_minutes
                from ttmap.jobs.layers import arrival_levels

                written.append(write_arrival_raster_style(
                    Path(nest_tif), arrival_levels(read_minutes(nest_tif)[0], None),
                    title=f"Arrival time: {s.name}, nest {nest_name}", overwrite=overwrite))
    if envelope:
        from ttmap.io.compare import read_minutes
        from ttmap.jobs.layers import arrival_levels

        env_tif = Path(envelope["envelope_min"])
        # the envelope's own levels, computed as for its SLD and map (one class scheme)
        env_levels = arrival_levels(read_minutes(env_tif)[0], None)
        written.append(write_arrival_raster_style(env_tif, env_levels,
                                                  title=f"Earliest arrival over {len(envelope_names)} scenarios",
                                                  overwrite=overwrite))
        tie = envelope.get("tie_class")
        if tie and Path(tie).is_file():
            from ttmap.io.styles import write_sld
            from ttmap.products.scenario_maps import TIE_CLASSES, tie_raster_sld

            tie_sld = Path(tie).with_suffix(".sld")
            write_sld(tie_sld, tie_raster_sld(), overwrite=overwrite)
            written.append(tie_sld)
            written.append(write_qml_beside(
                Path(tie),
                paletted_qml([v for v, _, _ in TIE_CLASSES], [lab for _, lab, _ in TIE_CLASSES],
                             layer_name=Path(tie).stem, title="Near-ties of the first scenario",
                             colors_hex=[c for _, _, c in TIE_CLASSES], nodata=255),
                overwrite=overwrite,
            ))
        first = Path(envelope["first_scenario"])
        if envelope.get("first_scenario_qml"):  # written with its tie classes beside the SLD
            return written
        written.append(write_qml_beside(
            first,
            paletted_qml(list(range(len(envelope_names))), list(envelope_names), layer_name=first.stem,
                         title="Scenario arriving first", nodata=-1),
            overwrite=overwrite,
        ))
    return written


def difference_limit_min(diff_min: np.ndarray) -> float:
    """Half-width of a difference ramp: the largest absolute difference rounded up to 1, 2 or 5 x 10^k.

    >>> difference_limit_min(np.array([-3.2, 0.5, np.nan]))
    5.0
    >>> difference_limit_min(np.array([np.nan]))
    1.0
    """
    finite = np.abs(diff_min[np.isfinite(diff_min)])
    top = float(finite.max()) if finite.size else 0.0
    if not top > 0.0:
        return 1.0
    exp = math.floor(math.log10(top))
    for step in (1.0, 2.0, 5.0, 10.0):
        value = step * 10.0**exp
        if value >= top * (1.0 - 1e-12):
            return float(round(value, 12))
    return float(10.0 ** (exp + 1))  # pragma: no cover - the loop always returns


def write_difference_style(tif: Path, diff_min: np.ndarray, name_a: str, name_b: str, *,
                           overwrite: bool = False) -> Path:
    """``<tif base>.qml`` for ``a - b``: a diverging ramp centred on zero, half-width from the data."""
    from ttmap.io.styles import write_qml_beside
    from ttmap.products.qml import difference_qml

    return write_qml_beside(
        tif,
        difference_qml(difference_limit_min(diff_min), name_a=name_a, name_b=name_b, layer_name=tif.stem,
                       title=f"Arrival of {name_a} minus arrival of {name_b}"),
        overwrite=overwrite,
    )


def write_run_report(record: Mapping[str, Any], out_dir: str | Path, *, overwrite: bool = False) -> tuple[Path, float]:
    """Write ``report.html`` from a run record held in memory, before ``run.json`` is written.

    Returns
    -------
    (Path, float)
        The report and the seconds it took.
    """
    from ttmap.io.report import write_report
    from ttmap.products.report import render_report, report_context_from_record

    t0 = time.perf_counter()
    out = Path(out_dir)
    path = write_report(out / REPORT_NAME, render_report(report_context_from_record(record, out)),
                        overwrite=overwrite)
    return path, time.perf_counter() - t0


def write_report_and_record(record: dict[str, Any], out_dir: str | Path, *, report: bool, overwrite: bool,
                            record_overwrite: bool | None = None,
                            say: Any = None) -> Path:
    """The last two products of every job: ``report.html`` (when asked) and then ``run.json``.

    The report's time goes into the record's ``timings_s.report_s``; the fault
    hook ``record`` fires just before the record is written. Returns the
    record's path.
    """
    from ttmap.faults import checkpoint
    from ttmap.jobs.plan import RUN_RECORD_NAME
    from ttmap.jobs.record import write_run_record

    out = Path(out_dir)
    if report:
        if say is not None:
            say("writing report.html")
        record["timings_s"]["report_s"] = round(write_run_report(record, out, overwrite=overwrite)[1], 4)
    checkpoint("record", out / RUN_RECORD_NAME)
    return write_run_record(record, out / RUN_RECORD_NAME,
                            overwrite=overwrite if record_overwrite is None else record_overwrite)
