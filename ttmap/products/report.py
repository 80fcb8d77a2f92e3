"""One self-contained HTML report of a run: cautions, inputs, maps, sites, record.

- :class:`ReportContext` - everything the page shows, typed: the cautions,
  what was run, the maps and charts (PNG as ``data:`` URIs), the site table
  with each margin's colour level, the scenario comparison when there is one,
  the run record in short and relative links to every product.
- :func:`report_context_from_record` - builds it from a run record
  (schema v2, jobs ``map``, ``site-map``, ``scenario`` and ``locate``) and the products
  it lists; the jobs call it just before they write ``run.json``.
- :func:`report_context_from_run` - the same from a finished run's folder.
- :func:`render_report` - the HTML text, from the Jinja2 template
  ``ttmap/templates/report.html.j2`` with autoescaping on.

The page needs no network: images, styles and the small table-sorting script
are inline, and links to products are relative, so the folder can be copied
to a USB stick or zipped and mailed as it is. Printed (or saved as PDF) each
section starts on a new page. Write it with :func:`ttmap.io.report.write_report`.

The caution comes first and in full (:data:`ttmap.products.cautions.CAUTION_LINES`).
"""

from __future__ import annotations

import base64
import csv
import datetime as _dt
import io
import json
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ttmap.errors import InputDataError

__all__ = [
    "ReportFigure",
    "ReportTableRow",
    "ReportTable",
    "ReportLink",
    "ReportContext",
    "report_context_from_record",
    "report_context_from_run",
    "render_report",
    "png_data_uri",
    "REPORT_TEMPLATE",
]

#: Template file inside the package (``ttmap/templates``).
REPORT_TEMPLATE = "report.html.j2"

_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"

_KINDS = {
    ".tif": "raster (GeoTIFF)",
    ".gpkg": "vector (GeoPackage)",
    ".shp": "vector (Shapefile)",
    ".geojson": "vector (GeoJSON)",
    ".sld": "style (SLD)",
    ".qml": "style (QGIS)",
    ".png": "image (PNG)",
    ".pdf": "document (PDF)",
    ".csv": "table (CSV)",
    ".json": "record (JSON)",
    ".html": "report (HTML)",
}


@dataclass(frozen=True)
class ReportFigure:
    """A picture on the page: title, the PNG as a ``data:`` URI, relative link to the file."""

    title: str
    data_uri: str
    href: str
    caption: str = ""


@dataclass(frozen=True)
class ReportTableRow:
    """One row: the cells as text, sort keys (number or text) and a colour level.

    ``level`` is ``"alert"``, ``"little"`` or ``"plain"`` (as the timeline
    chart colours margins); ``level_column`` is the cell drawn in that colour.
    """

    cells: tuple[str, ...]
    sort_keys: tuple[str, ...]
    level: str = "plain"
    note: str = ""


@dataclass(frozen=True)
class ReportTable:
    """A table: headers, the unit of each column ("" for none) and rows."""

    headers: tuple[str, ...]
    units: tuple[str, ...]
    rows: tuple[ReportTableRow, ...]
    level_column: int = -1
    numeric: tuple[bool, ...] = ()
    note: str = ""


@dataclass(frozen=True)
class ReportLink:
    """A product file: relative link, kind and size."""

    href: str
    name: str
    kind: str
    size: str


@dataclass(frozen=True)
class ReportContext:
    """Everything the report shows; see :func:`report_context_from_run`.

    Attributes
    ----------
    title : str
        Page title.
    cautions : tuple of str
        The full caution, one entry per paragraph; shown first.
    caution_short : str
        One line repeated in the page footer of every printed page.
    generated_utc : str
        When the report was made (ISO 8601, UTC).
    run_facts : tuple of (label, text)
        What was run: source, bathymetry, speed models, grid, command.
    versions : tuple of (name, version)
        Software versions from the run record.
    maps : tuple of ReportFigure
        The arrival maps.
    timeline : ReportFigure or None
        The per-site timeline chart.
    sites : ReportTable or None
        The site table.
    comparison : tuple of ReportFigure
        Scenario comparison charts (empty when the run compared nothing).
    comparison_table : ReportTable or None
        Earliest scenario per site, when present.
    record : tuple of (label, text)
        The run record in short: times, timings, counts.
    products : tuple of ReportLink
        Every product, linked relative to the report.
    margin_colors : mapping of str to str
        Colour of each margin level (from the timeline chart).
    sites_heading : str
        Heading of the table section (``"Gauges"`` for a locate run).
    """

    title: str
    cautions: tuple[str, ...]
    caution_short: str
    generated_utc: str
    run_facts: tuple[tuple[str, str], ...]
    versions: tuple[tuple[str, str], ...] = ()
    maps: tuple[ReportFigure, ...] = ()
    timeline: ReportFigure | None = None
    sites: ReportTable | None = None
    comparison: tuple[ReportFigure, ...] = ()
    comparison_table: ReportTable | None = None
    record: tuple[tuple[str, str], ...] = ()
    products: tuple[ReportLink, ...] = ()
    margin_colors: Mapping[str, str] = field(default_factory=dict)
    sites_heading: str = "Sites"


# ---------------------------------------------------------------------------
# Pieces
# ---------------------------------------------------------------------------


def png_data_uri(path: str | os.PathLike[str]) -> str:
    """A PNG file as a ``data:image/png;base64,...`` URI.

    Raises
    ------
    InputDataError
        The file is missing or not a PNG.
    """
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError as err:
        raise InputDataError(f"image {str(p)!r} cannot be read ({err.strerror}); re-run the job") from err
    if not data.startswith(_PNG_MAGIC):
        raise InputDataError(f"image {str(p)!r} is not a PNG file; give the run's .png products")
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def _size_text(n_bytes: int) -> str:
    if n_bytes < 1024:
        return f"{n_bytes} B"
    if n_bytes < 1024**2:
        return f"{n_bytes / 1024:.0f} KB"
    return f"{n_bytes / 1024**2:.1f} MB"


def _float(text: Any) -> float:
    try:
        return float(text)
    except (TypeError, ValueError):
        return math.nan


def _fmt(value: float, digits: int = 1) -> str:
    return "" if not math.isfinite(value) else f"{value:.{digits}f}"


def _key(value: float) -> str:
    """Sort key text: numbers sort numerically, missing values last."""
    return "" if not math.isfinite(value) else repr(value)


def _read_csv(path: Path) -> list[dict[str, str]]:
    """Rows of a ttmap CSV (``#`` comment lines skipped)."""
    text = path.read_text(encoding="utf-8")
    lines = [ln for ln in text.splitlines() if not ln.startswith("#")]
    return list(csv.DictReader(io.StringIO("\n".join(lines))))


def _site_table(path: Path) -> ReportTable:
    """The site table, with each margin's level as the timeline chart draws it."""
    from ttmap.products.timeline import margin_note

    rows_in = _read_csv(path)
    periods = [c for c in (rows_in[0].keys() if rows_in else []) if c.startswith("energy_T") and c.endswith("s_min")]
    headers = ["Site", "Front arrival", "Earliest (speed -)", *[
        f"Energy of {c[len('energy_T'):-len('s_min')].replace('p', '.')} s waves" for c in periods
    ], "Message delay", "Minutes left", "Minutes needed", "Margin", "Status", "Read from"]
    units = ["", "min", "min", *["min" for _ in periods], "min", "min", "min", "min", "", "m away"]
    numeric = [False, True, True, *[True for _ in periods], True, True, True, True, False, True]
    rows: list[ReportTableRow] = []
    for r in rows_in:
        front = _float(r.get("front_min"))
        left = _float(r.get("minutes_left"))
        needed = _float(r.get("minutes_needed"))
        margin = _float(r.get("margin_min"))
        status = r.get("budget_status", "") or ""
        note, level = margin_note(margin, left, front, needed, status.startswith("little margin"))
        values: list[str | float] = [
            r.get("name", "") or "",
            front,
            _float(r.get("earliest_min")),
            *[_float(r.get(c)) for c in periods],
            _float(r.get("notification_delay_min")),
            left,
            needed,
            margin,
            status,
            _float(r.get("moved_m")),
        ]
        margin_col, last = 6 + len(periods), len(values) - 1
        cells = tuple(
            v if isinstance(v, str)
            else f"{v:+.1f}" if i == margin_col and math.isfinite(v)
            else _fmt(v, 0 if i == last else 1)
            for i, v in enumerate(values)
        )
        keys = tuple(v.lower() if isinstance(v, str) else _key(v) for v in values)
        rows.append(ReportTableRow(cells=cells, sort_keys=keys, level=level, note=note))
    return ReportTable(
        headers=tuple(headers), units=tuple(units), rows=tuple(rows),
        level_column=6 + len(periods), numeric=tuple(numeric),
        note=(
            "Margin = minutes left after the official message minus the minutes needed to reach safe "
            "ground, counted from the earliest arrival (front arrival less the stated speed "
            "uncertainty). Margins are planning figures, not promises. Click a column heading to sort."
        ),
    )


def _comparison_table(path: Path) -> ReportTable:
    rows_in = _read_csv(path)
    cols = list(rows_in[0].keys()) if rows_in else []
    numeric = tuple(all(math.isfinite(_float(r.get(c))) or r.get(c) in ("", None) for r in rows_in)
                    and any(math.isfinite(_float(r.get(c))) for r in rows_in) for c in cols)
    rows = tuple(
        ReportTableRow(
            cells=tuple(r.get(c, "") or "" for c in cols),
            sort_keys=tuple(_key(_float(r.get(c))) if num else (r.get(c, "") or "").lower()
                            for c, num in zip(cols, numeric, strict=True)),
        )
        for r in rows_in
    )
    return ReportTable(headers=tuple(cols), units=tuple("" for _ in cols), rows=rows, numeric=numeric)


def _source_text(src: Mapping[str, Any]) -> str:
    params = src.get("params") or {}
    where = ", ".join(f"{k} {v}" for k, v in params.items())
    text = f"{src.get('label', '')} ({src.get('kind', '?')} source"
    text += f"; {where}" if where else ""
    crs = src.get("crs")
    return text + (f", {crs})" if crs else ")")


def _speed_text(record: Mapping[str, Any]) -> str:
    sets = record.get("product_sets") or {}
    titles = [str(v.get("title", k)) for k, v in sets.items()] if isinstance(sets, Mapping) else []
    params = (record.get("parameters") or {}).get("speed") or {}
    extra = []
    if params.get("far_field"):
        extra.append("far-field slowdown on")
    if params.get("floor_depth_m") is not None:
        extra.append(f"floor depth {params['floor_depth_m']:g} m")
    if params.get("earth"):
        extra.append(f"earth model {params['earth']}")
    return "; ".join(titles) + (f" ({', '.join(extra)})" if extra else "")


def _grid_text(grid: Mapping[str, Any]) -> str:
    shape = grid.get("shape") or {}
    cell = grid.get("cell_size_m") or {}
    bounds = grid.get("bounds") or {}
    text = f"{shape.get('rows', '?')} x {shape.get('cols', '?')} cells, {grid.get('crs', '?')}"
    if "row_m" in cell and "col_m" in cell:
        text += f", cells about {cell['col_m'] / 1000:.2f} x {cell['row_m'] / 1000:.2f} km"
    if all(k in bounds for k in ("left", "bottom", "right", "top")):
        text += (f"; bounds {bounds['left']:g}, {bounds['bottom']:g} to "
                 f"{bounds['right']:g}, {bounds['top']:g}")
    if grid.get("geographic"):
        text += "; solved on the ellipsoid (geographic grid)"
    return text


def _bathymetry_text(inputs: Mapping[str, Any]) -> str:
    b = inputs.get("bathymetry") or {}
    name = os.path.basename(str(b.get("path", "?")))
    sha = str(b.get("sha256") or "")
    text = f"{name} (band {b.get('band', 1)}"
    text += f", SHA-256 {sha[:12]}...)" if sha else ")"
    notes = b.get("notes") or []
    return text + ("; " + "; ".join(str(n) for n in notes) if notes else "")


# ---------------------------------------------------------------------------
# Public
# ---------------------------------------------------------------------------


def report_context_from_run(out_dir: str | os.PathLike[str], *, title: str | None = None) -> ReportContext:
    """Build the report's content from a finished run's folder (its ``run.json``).

    Parameters
    ----------
    out_dir : path-like
        The run's output folder, holding ``run.json`` and the products it
        lists under ``products``.
    title : str, optional
        Page title; by default from the run (source, sites or scenario file).

    Returns
    -------
    ReportContext

    Raises
    ------
    InputDataError
        No ``run.json``, a record that is not a ttmap run record, or a listed
        picture that is missing or not a PNG.
    """
    out = Path(out_dir)
    run_json = out / "run.json"
    try:
        record = json.loads(run_json.read_text(encoding="utf-8"))
    except FileNotFoundError as err:
        raise InputDataError(
            f"{str(run_json)!r} does not exist; give the output folder of a finished run"
        ) from err
    except (OSError, ValueError) as err:
        raise InputDataError(f"{str(run_json)!r} cannot be read as JSON ({err}); re-run the job") from err
    return report_context_from_record(record, out, title=title)


def report_context_from_record(record: Mapping[str, Any], out_dir: str | os.PathLike[str], *,
                               title: str | None = None) -> ReportContext:
    """Build the report's content from a run record (schema v2) and the products in ``out_dir``.

    The jobs call this with the record they are about to write, so the report
    is written before ``run.json``; :func:`report_context_from_run` reads the
    record from a finished folder.

    Parameters
    ----------
    record : mapping
        A run record (``docs/run-record.md``) of job ``"map"``, ``"site-map"``,
        ``"scenario"`` or ``"locate"``.
    out_dir : path-like
        The run's output folder; product paths in the record are relative to it.
    title : str, optional
        Page title.

    Returns
    -------
    ReportContext

    Raises
    ------
    InputDataError
        Not a ttmap run record, an unknown job kind, or a listed picture that
        is missing or not a PNG.

    Notes
    -----
    - map: maps are the ``map_*.png`` files, the timeline ``timeline.png``,
      the site table ``sites.csv`` (margins coloured as in the timeline chart);
    - site-map: maps are the ``map_site_*.png`` files, the site table lists
      each site's solve (where it was solved from, notification delay, range
      of minutes from a source to it), skipped sites in its note;
    - scenario: maps are any ``map_*.png`` files; the site table is
      ``sites_x_scenarios.csv`` (one row per site and scenario, margins
      coloured); the comparison shows ``sites_x_scenarios.png`` and
      ``earliest_by_site.csv``; the record in short counts finished and
      failed solves and what the comparison skipped;
    - locate: the facts are the best cell, origin time, confidence region
      and its shape; the map is ``locate_map.png``; the table (headed
      "Gauges") the residual per gauge from ``record["picks"]``; the
      record's location caution comes before the common one.

    Product links are relative to ``out_dir``, where the report belongs;
    files listed but absent (the report itself, while it is being written)
    are left out.
    """
    from ttmap.products.cautions import CAUTION_LINES, CAUTION_SHORT
    from ttmap.products.timeline import MARGIN_LEVEL_COLORS

    out = Path(out_dir)
    if not isinstance(record, Mapping) or record.get("schema") != "ttmap-run-record":
        raise InputDataError(
            f"the record for {str(out)!r} is not a ttmap run record (no 'schema': 'ttmap-run-record'); "
            "give the output folder of a finished run"
        )
    job = str(record.get("job", "map"))
    if job not in _JOB_BUILDERS:
        raise InputDataError(f"run record job {job!r} is unknown; the report knows {', '.join(_JOB_BUILDERS)}")

    files: list[Path] = []
    for f in record.get("products") or []:
        p = Path(f)
        p = p if p.is_absolute() else out / p
        if p.name not in ("run.json", _REPORT_NAME) and p.exists() and p not in files:
            files.append(p)

    def rel(p: Path) -> str:
        try:
            return p.resolve().relative_to(out.resolve()).as_posix()
        except ValueError:
            return os.path.relpath(p, out).replace(os.sep, "/")

    parts = _JOB_BUILDERS[job](record, out, files, rel)
    versions = tuple((str(k), str(v)) for k, v in (record.get("versions") or {}).items() if k != "platform")

    timings = record.get("timings_s") or {}
    summary: list[tuple[str, str]] = [
        ("Job", _JOB_TITLES[job]),
        ("Started (UTC)", str(record.get("started_utc", ""))),
        ("Finished (UTC)", str(record.get("finished_utc", ""))),
    ]
    if "total_s" in timings:
        summary.append(("Wall time", f"{float(timings['total_s']):.2f} s"))
    summary += parts.record
    for note in record.get("notes") or []:
        summary.append(("Note", str(note)))
    summary.append(("Files written", str(len(record.get("products") or []))))
    summary.append(("Run record", "run.json (inputs with SHA-256, every parameter, versions, timings)"))

    links = [
        ReportLink(href=rel(p), name=rel(p), kind=_KINDS.get(p.suffix.lower(), p.suffix.lstrip(".")),
                   size=_size_text(p.stat().st_size))
        for p in files
    ]
    run_json = out / "run.json"
    links.append(ReportLink(href="run.json", name="run.json", kind=_KINDS[".json"],
                            size=_size_text(run_json.stat().st_size) if run_json.is_file() else "written last"))

    return ReportContext(
        title=title or parts.title,
        cautions=(*parts.cautions, *CAUTION_LINES),
        caution_short=CAUTION_SHORT,
        generated_utc=_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        run_facts=tuple(parts.facts),
        versions=versions,
        maps=tuple(parts.maps),
        timeline=parts.timeline,
        sites=parts.sites,
        comparison=tuple(parts.comparison),
        comparison_table=parts.comparison_table,
        record=tuple(summary),
        products=tuple(links),
        margin_colors=dict(MARGIN_LEVEL_COLORS),
        sites_heading=parts.sites_heading,
    )


_REPORT_NAME = "report.html"

_JOB_TITLES = {
    "map": "map run (arrival times from one source)",
    "site-map": "site-map run (minutes from any source location to each site)",
    "scenario": "scenario run (many sources, compared)",
    "locate": "locate run (where the waves came from, from observed first arrivals)",
}


@dataclass
class _Parts:
    """What differs between job kinds."""

    title: str
    facts: list[tuple[str, str]]
    record: list[tuple[str, str]] = field(default_factory=list)
    maps: list[ReportFigure] = field(default_factory=list)
    timeline: ReportFigure | None = None
    sites: ReportTable | None = None
    comparison: list[ReportFigure] = field(default_factory=list)
    comparison_table: ReportTable | None = None
    cautions: list[str] = field(default_factory=list)
    sites_heading: str = "Sites"


def _common_facts(record: Mapping[str, Any]) -> list[tuple[str, str]]:
    facts = [("Bathymetry", _bathymetry_text(record.get("inputs") or {}))]
    grid = record.get("grid")
    if grid:
        facts.append(("Grid", _grid_text(grid)))
    site_in = (record.get("inputs") or {}).get("sites")
    if site_in:
        facts.append(("Sites", f"{os.path.basename(str(site_in.get('path', '?')))} "
                               f"({site_in.get('count', '?')} sites)"))
    return facts


def _command_fact(record: Mapping[str, Any]) -> list[tuple[str, str]]:
    return [("Command", str(record["command_line"]))] if record.get("command_line") else []


def _timeline_figure(out: Path, rel: Any) -> ReportFigure | None:
    timeline_png = out / "timeline.png"
    if not timeline_png.is_file():
        return None
    return ReportFigure(
        title="Time budget per site", data_uri=png_data_uri(timeline_png), href=rel(timeline_png),
        caption="Bars: waiting for the official message, preparation, walking to safe ground; "
                "tick: front arrival with its speed-uncertainty band.",
    )


def _comparison_parts(out: Path, rel: Any, files: list[Path]) -> tuple[list[ReportFigure], ReportTable | None]:
    listed = {p.name for p in files}
    figs = [
        ReportFigure(title="Front arrival per site in each scenario", data_uri=png_data_uri(p), href=rel(p))
        for p in [out / "sites_x_scenarios.png"] if p.is_file() and p.name in listed
    ]
    earliest_csv = out / "earliest_by_site.csv"
    table = _comparison_table(earliest_csv) if earliest_csv.is_file() and earliest_csv.name in listed else None
    return figs, table


def _map_parts(record: Mapping[str, Any], out: Path, files: list[Path], rel: Any) -> _Parts:
    params = record.get("parameters") or {}
    src = params.get("source") or {}
    sets = record.get("product_sets") or {}
    maps = []
    for p in files:
        if p.suffix == ".png" and p.name.startswith("map_"):
            key = p.stem[len("map_"):]
            set_title = str((sets.get(key) or {}).get("title", key)) if isinstance(sets, Mapping) else key
            maps.append(ReportFigure(title=f"Arrival time: {set_title}", data_uri=png_data_uri(p), href=rel(p)))
    sites_csv = out / "sites.csv"
    facts = [("Source", _source_text(src)), ("Speed models", _speed_text(record)), *_common_facts(record),
             *_command_fact(record)]
    summary: list[tuple[str, str]] = []
    if isinstance(sets, Mapping):
        for key, s in sets.items():
            rng = s.get("arrival_min_range") or []
            reached = s.get("cells_reached")
            water = s.get("water_cells")
            text = f"{reached} of {water} water cells reached" if reached is not None else ""
            if len(rng) == 2:
                text += f"; arrivals {rng[0]:.1f} to {rng[1]:.1f} min"
            summary.append((f"Product set {key}", text))
    comparison, comparison_table = _comparison_parts(out, rel, files)
    return _Parts(
        title=f"Tsunami arrival times: {src.get('label') or 'map run'}",
        facts=facts, record=summary, maps=maps, timeline=_timeline_figure(out, rel),
        sites=_site_table(sites_csv) if sites_csv.is_file() else None,
        comparison=comparison, comparison_table=comparison_table,
    )


def _site_map_parts(record: Mapping[str, Any], out: Path, files: list[Path], rel: Any) -> _Parts:
    params = record.get("parameters") or {}
    solved = [s for s in (record.get("sites") or []) if isinstance(s, Mapping)]
    skipped = [s for s in (record.get("sites_skipped") or []) if isinstance(s, Mapping)]
    speed = params.get("speed") or {}
    mode = str(params.get("speed_mode", "long-wave"))
    periods = speed.get("periods_s") or []
    speed_text = ("long-wave speed (front, earliest arrival)" if mode == "long-wave"
                  else f"{mode} speed of {float(periods[0]):g} s waves" if periods else f"{mode} speed")
    extra = []
    if speed.get("far_field"):
        extra.append("far-field slowdown on")
    if speed.get("floor_depth_m") is not None:
        extra.append(f"floor depth {float(speed['floor_depth_m']):g} m")
    names = [str(s.get("name", "")) for s in solved]
    facts = [
        ("Sites solved from", ", ".join(names) or "none"),
        ("Method", str(record.get("reciprocity") or "site-centred solves (reciprocity)")),
        ("Speed model", speed_text + (f" ({', '.join(extra)})" if extra else "")),
        *_common_facts(record),
        *_command_fact(record),
    ]
    maps = []
    for p in files:
        if p.suffix == ".png" and p.name.startswith("map_site_"):
            label = p.stem[len("map_site_"):].replace("_", " ")
            maps.append(ReportFigure(title=f"Minutes from a source here to {label}", data_uri=png_data_uri(p),
                                     href=rel(p)))
    headers = ("Site", "Moved to water", "Message delay", "Delay from", "Earliest", "Latest", "Cells reached")
    units = ("", "m", "min", "", "min", "min", "")
    numeric = (False, True, True, False, True, True, True)
    rows = []
    for s in solved:
        rng = s.get("minutes_range") or [math.nan, math.nan]
        values: list[str | float] = [
            str(s.get("name", "")), _float(s.get("moved_m")), _float(s.get("notification_delay_min")),
            str(s.get("notification_delay_from", "")), _float(rng[0]), _float(rng[1]),
            _float(s.get("cells_reached")),
        ]
        cells = tuple(v if isinstance(v, str) else _fmt(v, 0 if i in (1, 6) else 1) for i, v in enumerate(values))
        keys = tuple(v.lower() if isinstance(v, str) else _key(v) for v in values)
        rows.append(ReportTableRow(cells=cells, sort_keys=keys))
    note = ("Earliest and latest: minutes from a source anywhere on the grid to the site (by reciprocity). "
            "Click a column heading to sort.")
    if skipped:
        note += " Not placed (no map): " + "; ".join(f"{s.get('name')}: {s.get('reason')}" for s in skipped)
    table = ReportTable(headers=headers, units=units, rows=tuple(rows), numeric=numeric, note=note) if rows else None
    summary = [("Sites solved", f"{len(solved)} ({len(skipped)} not placed)"),
               ("Several-site products", "written" if record.get("combined_written") else "not written")]
    for s in solved:
        rng = s.get("minutes_range") or []
        if len(rng) == 2:
            summary.append((f"Site {s.get('name')}", f"{s.get('cells_reached')} cells reached; "
                                                      f"{rng[0]:.1f} to {rng[1]:.1f} min"))
    first = out / "site_centred_min.tif"
    if first.is_file():
        summary.append(("Earliest over sites", rel(first)))
    return _Parts(
        title="Minutes from a source anywhere to "
              + (names[0] if len(names) == 1 else f"{len(names)} sites"),
        facts=facts, record=summary, maps=maps, sites=table,
    )


def _scenario_parts(record: Mapping[str, Any], out: Path, files: list[Path], rel: Any) -> _Parts:
    params = record.get("parameters") or {}
    inputs = record.get("inputs") or {}
    scenarios = [s for s in (record.get("scenarios") or []) if isinstance(s, Mapping)]
    tasks = [t for t in (record.get("tasks") or []) if isinstance(t, Mapping)]
    failed = [t for t in (record.get("failed") or []) if isinstance(t, Mapping)]
    comparisons = record.get("comparisons") or {}
    medium = params.get("medium") or {}
    sf_name = os.path.basename(str((inputs.get("scenario_file") or {}).get("path", "scenario file")))
    names = [str(s.get("name", "")) for s in scenarios]
    shown = ", ".join(names[:12]) + (f" and {len(names) - 12} more" if len(names) > 12 else "")
    periods = params.get("periods_s") or []
    speed = "front (long-wave speed)"
    if periods:
        speed += f"; {params.get('period_speed', 'group')} speed of " + ", ".join(f"{float(p):g}" for p in periods) + " s waves"
    extra = []
    if medium.get("far_field"):
        extra.append("far-field slowdown on")
    if medium.get("floor_depth_m") is not None:
        extra.append(f"floor depth {float(medium['floor_depth_m']):g} m")
    facts = [
        ("Scenario file", sf_name),
        ("Scenarios", f"{len(names)}: {shown}" if names else "none"),
        ("Speed models", speed + (f" ({', '.join(extra)})" if extra else "")),
        *_common_facts(record),
        ("Executor", f"{params.get('executor', '?')} ({params.get('workers') or 'default'} workers)"),
        *_command_fact(record),
    ]
    maps = []
    for p in files:
        if p.suffix == ".png" and p.name.startswith("map_"):
            maps.append(ReportFigure(title=p.stem[len("map_"):].replace("_", " "), data_uri=png_data_uri(p),
                                     href=rel(p)))
    sites_csv = out / "sites_x_scenarios.csv"
    sites = _scenario_site_table(sites_csv) if sites_csv.is_file() and sites_csv in files else None
    comparison, comparison_table = _comparison_parts(out, rel, files)
    ok = sum(1 for t in tasks if t.get("ok"))
    summary: list[tuple[str, str]] = [
        ("Solves", f"{ok} of {len(tasks)} finished ({sum(1 for t in tasks if t.get('skipped'))} kept from "
                   f"an earlier run), {len(failed)} failed"),
    ]
    for t in failed[:10]:
        summary.append(("Failed", str(t.get("error") or t.get("name"))))
    env = comparisons.get("envelope") if isinstance(comparisons, Mapping) else None
    if env:
        summary.append(("Envelope", "earliest arrival over the scenarios and the scenario arriving first"))
    for d in (comparisons.get("differences") or []) if isinstance(comparisons, Mapping) else []:
        summary.append(("Difference", f"{d.get('a')} minus {d.get('b')}"))
    for text in (comparisons.get("skipped") or []) if isinstance(comparisons, Mapping) else []:
        summary.append(("Skipped", str(text)))
    return _Parts(
        title=f"Tsunami arrival times: {len(names)} scenarios ({sf_name})",
        facts=facts, record=summary, maps=maps, sites=sites,
        comparison=comparison, comparison_table=comparison_table,
    )


def _scenario_site_table(path: Path) -> ReportTable:
    """Sites by scenarios: one row per site and scenario, margins coloured as in the timeline chart."""
    from ttmap.products.timeline import margin_note

    rows_in = _read_csv(path)
    headers = ("Site", "Scenario", "Front arrival", "Minutes left", "Minutes needed", "Margin", "Status",
               "First here")
    units = ("", "", "min", "min", "min", "min", "", "")
    numeric = (False, False, True, True, True, True, False, False)
    rows: list[ReportTableRow] = []
    for r in rows_in:
        front = _float(r.get("front_min"))
        left = _float(r.get("minutes_left"))
        needed = _float(r.get("minutes_needed"))
        margin = _float(r.get("margin_min"))
        status = r.get("budget_status", "") or ""
        note, level = margin_note(margin, left, front, needed, status.startswith("little margin"))
        first = str(r.get("earliest_for_site", "")).strip().lower() in ("true", "1", "yes")
        values: list[str | float] = [r.get("site", "") or "", r.get("scenario", "") or "", front, left, needed,
                                     margin, status, "yes" if first else ""]
        cells = tuple(
            v if isinstance(v, str) else f"{v:+.1f}" if i == 5 and math.isfinite(v) else _fmt(v, 1)
            for i, v in enumerate(values)
        )
        keys = tuple(v.lower() if isinstance(v, str) else _key(v) for v in values)
        rows.append(ReportTableRow(cells=cells, sort_keys=keys, level=level, note=note))
    return ReportTable(
        headers=headers, units=units, rows=tuple(rows), level_column=5, numeric=numeric,
        note=("Margin = minutes left after the official message minus the minutes needed to reach safe "
              "ground, for each scenario. Margins are planning figures, not promises. Click a column "
              "heading to sort."),
    )


def _locate_parts(record: Mapping[str, Any], out: Path, files: list[Path], rel: Any) -> _Parts:
    """A locate run: the best cell, origin time, region, the residual per gauge, the map."""
    loc = record.get("location") or {}
    params = record.get("parameters") or {}
    inputs = record.get("inputs") or {}
    region = loc.get("region") or {}
    picks = [p for p in (record.get("picks") or []) if isinstance(p, Mapping)]
    level = _float(loc.get("confidence"))
    pct = f"{100 * level:g} %" if math.isfinite(level) else "?"
    known = bool(loc.get("origin_known"))
    if loc.get("best_origin_time_utc"):
        origin = f"{loc['best_origin_time_utc']} ({'known' if known else 'estimated'})"
    else:
        origin = (f"{_float(loc.get('best_origin_time_min')):+.2f} min after {loc.get('origin_time_reference', '?')} "
                  f"({'known' if known else 'estimated'})")
    picks_in = inputs.get("picks") or {}
    facts = [
        ("Best cell", f"lon {_float(loc.get('best_lon')):.4f}, lat {_float(loc.get('best_lat')):.4f} "
                      f"(row {loc.get('best_row')}, col {loc.get('best_col')})"),
        ("Origin time", origin),
        ("Confidence region",
         f"{pct}: misfit up to the best cell's chi-square + {_float(loc.get('delta_chi2')):.2f} "
         f"(2 degrees of freedom); {region.get('region_cells', '?')} cells; one-sigma axes "
         f"{_float(region.get('major_km')):.0f} x {_float(region.get('minor_km')):.0f} km "
         f"(ratio {_float(region.get('axis_ratio')):.1f}, long axis azimuth "
         f"{_float(region.get('major_azimuth_deg')):.0f} deg)"),
        ("Region shape", str(loc.get("message", ""))),
        ("Fit", f"chi-square {_float(loc.get('best_misfit_chi2')):.2f} on "
                f"{loc.get('degrees_of_freedom_fit', '?')} degree(s) of freedom at the best cell"),
        ("Picks", f"{os.path.basename(str(picks_in.get('path', '?')))} ({len(picks)} gauges; "
                  f"{params.get('pick_time_base', '')})"),
        ("Speed model", str(loc.get("speed_model") or params.get("speed_model", "?"))
         + (f" (floor depth {float(params['floor_depth_m']):g} m)" if params.get("floor_depth_m") is not None
            else "")),
        *_common_facts(record),
        *_command_fact(record),
    ]
    maps = [
        ReportFigure(title="Source location", data_uri=png_data_uri(p), href=rel(p),
                     caption="Colours: misfit above the best cell (chi-square); outline: the confidence "
                             "region; cross: best cell; triangles: gauges with their residual at the best cell.")
        for p in files if p.suffix == ".png" and p.name == "locate_map.png"
    ]
    headers = ("Gauge", "Observed", "Predicted", "Residual", "Uncertainty", "Residual / uncertainty",
               "Moved to water")
    units = ("", "min", "min", "min", "min", "", "m")
    numeric = (False, True, True, True, True, True, True)
    rows = []
    for p in picks:
        values: list[str | float] = [
            str(p.get("name", "")), _float(p.get("observed_min")), _float(p.get("predicted_min")),
            _float(p.get("residual_min")), _float(p.get("sigma_min")), _float(p.get("normalised")),
            _float(p.get("moved_m")),
        ]
        cells = tuple(
            v if isinstance(v, str) else f"{v:+.2f}" if i in (3, 5) and math.isfinite(v)
            else _fmt(v, 0 if i == 6 else 2)
            for i, v in enumerate(values)
        )
        keys = tuple(v.lower() if isinstance(v, str) else _key(v) for v in values)
        rows.append(ReportTableRow(cells=cells, sort_keys=keys))
    table = ReportTable(
        headers=headers, units=units, rows=tuple(rows), numeric=numeric,
        note=(f"Observed: minutes after {loc.get('origin_time_reference', 'the reference')}. Predicted: travel "
              "time from the best cell to the gauge (where it was moved to open water). Residual = observed - "
              f"origin time ({_float(loc.get('best_origin_time_min')):+.2f} min) - predicted. "
              "Click a column heading to sort."),
    ) if rows else None
    timings = record.get("timings_s") or {}
    summary = [("Gauge solves", f"{len(picks)}, one per gauge (reciprocity), executor "
                                f"{params.get('executor', '?')}")]
    parts = [f"{k[:-2]} {float(timings[k]):.2f} s" for k in ("read_s", "solve_s", "locate_s", "write_s")
             if k in timings]
    if parts:
        summary.append(("Timings", ", ".join(parts)))
    return _Parts(
        title=f"Source location from observed first arrivals ({len(picks)} gauges)",
        facts=facts, record=summary, maps=maps, sites=table,
        cautions=[str(loc["caution"])] if loc.get("caution") else [],
        sites_heading="Gauges",
    )


_JOB_BUILDERS = {"map": _map_parts, "site-map": _site_map_parts, "scenario": _scenario_parts,
                 "locate": _locate_parts}


def render_report(context: ReportContext) -> str:
    """The report as one HTML document (UTF-8 text).

    Parameters
    ----------
    context : ReportContext
        The content; every text is escaped (Jinja2 autoescaping).

    Returns
    -------
    str
        A complete HTML5 page with inline styles, images and script.

    Raises
    ------
    InputDataError
        The context has no caution (every product carries it).
    """
    from importlib import resources

    import jinja2

    if not context.cautions or not context.caution_short:
        raise InputDataError("the report context has no caution text; build it with report_context_from_run")
    env = jinja2.Environment(
        loader=jinja2.FunctionLoader(
            lambda name: resources.files("ttmap").joinpath("templates", name).read_text(encoding="utf-8")
        ),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    template = env.get_template(REPORT_TEMPLATE)
    return template.render(ctx=context, sections=_sections(context))


def _sections(context: ReportContext) -> list[tuple[str, str]]:
    """(anchor, heading) of the sections present, in page order, for the contents list."""
    out = [("caution", "Caution"), ("run", "What was run")]
    if context.maps:
        out.append(("maps", "Maps"))
    if context.sites is not None:
        out.append(("sites", context.sites_heading))
    if context.timeline is not None:
        out.append(("timeline", "Timeline"))
    if context.comparison or context.comparison_table is not None:
        out.append(("comparison", "Scenario comparison"))
    out += [("record", "Run record"), ("products", "Products")]
    return out

