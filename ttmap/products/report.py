"""One self-contained HTML report of a run: cautions, inputs, maps, sites, record.

- :class:`ReportContext` - everything the page shows, typed: the cautions,
  what was run, the maps and charts (PNG as ``data:`` URIs), the site table
  with each margin's colour level, the scenario comparison when there is one,
  the run record in short and relative links to every product.
- :func:`report_context_from_run` - builds it from a finished map run's
  folder (``run.json`` and the products it lists).
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
    """Build the report's content from a finished map run's folder.

    Parameters
    ----------
    out_dir : path-like
        The run's output folder, holding ``run.json`` and the products it
        lists under ``products``.
    title : str, optional
        Page title; by default from the source's label.

    Returns
    -------
    ReportContext

    Raises
    ------
    InputDataError
        No ``run.json``, a record that is not a ttmap run record, or a listed
        picture that is missing or not a PNG.

    Notes
    -----
    Maps are the ``map_*.png`` files of the record; the timeline is
    ``timeline.png``; the site table is ``sites.csv``; a scenario comparison
    is shown when ``sites_x_scenarios.png`` (and ``earliest_by_site.csv``)
    are in the folder. Product links are relative to ``out_dir``, where the
    report belongs.
    """
    from ttmap.products.cautions import CAUTION_LINES, CAUTION_SHORT
    from ttmap.products.timeline import MARGIN_LEVEL_COLORS

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
    if not isinstance(record, dict) or record.get("schema") != "ttmap-run-record":
        raise InputDataError(
            f"{str(run_json)!r} is not a ttmap run record (no 'schema': 'ttmap-run-record'); "
            "give the output folder of a finished run"
        )

    files: list[Path] = []
    for f in record.get("products") or []:
        p = Path(f)
        p = p if p.is_absolute() else out / p
        if p.name != "run.json" and p.exists():
            files.append(p)

    def rel(p: Path) -> str:
        try:
            return p.resolve().relative_to(out.resolve()).as_posix()
        except ValueError:
            return os.path.relpath(p, out).replace(os.sep, "/")

    params = record.get("parameters") or {}
    src = params.get("source") or {}
    sets = record.get("product_sets") or {}

    maps = []
    for p in files:
        if p.suffix == ".png" and p.name.startswith("map_"):
            key = p.stem[len("map_"):]
            set_title = str((sets.get(key) or {}).get("title", key)) if isinstance(sets, Mapping) else key
            maps.append(ReportFigure(title=f"Arrival time: {set_title}", data_uri=png_data_uri(p), href=rel(p)))

    timeline_png = out / "timeline.png"
    timeline = (
        ReportFigure(
            title="Time budget per site", data_uri=png_data_uri(timeline_png), href=rel(timeline_png),
            caption="Bars: waiting for the official message, preparation, walking to safe ground; "
                    "tick: front arrival with its speed-uncertainty band.",
        )
        if timeline_png.is_file() else None
    )
    sites_csv = out / "sites.csv"
    sites = _site_table(sites_csv) if sites_csv.is_file() else None

    comparison = tuple(
        ReportFigure(title="Front arrival per site in each scenario", data_uri=png_data_uri(p), href=rel(p))
        for p in [out / "sites_x_scenarios.png"] if p.is_file()
    )
    earliest_csv = out / "earliest_by_site.csv"
    comparison_table = _comparison_table(earliest_csv) if earliest_csv.is_file() else None

    facts: list[tuple[str, str]] = [
        ("Source", _source_text(src)),
        ("Bathymetry", _bathymetry_text(record.get("inputs") or {})),
        ("Speed models", _speed_text(record)),
        ("Grid", _grid_text(record.get("grid") or {})),
    ]
    site_in = (record.get("inputs") or {}).get("sites")
    if site_in:
        facts.append(("Sites", f"{os.path.basename(str(site_in.get('path', '?')))} "
                               f"({site_in.get('count', '?')} sites)"))
    if record.get("command_line"):
        facts.append(("Command", str(record["command_line"])))
    versions = tuple((str(k), str(v)) for k, v in (record.get("versions") or {}).items() if k != "platform")

    timings = record.get("timings_s") or {}
    summary: list[tuple[str, str]] = [
        ("Started (UTC)", str(record.get("started_utc", ""))),
        ("Finished (UTC)", str(record.get("finished_utc", ""))),
    ]
    if "total_s" in timings:
        summary.append(("Wall time", f"{float(timings['total_s']):.2f} s"))
    if isinstance(sets, Mapping):
        for key, s in sets.items():
            rng = s.get("arrival_min_range") or []
            reached = s.get("cells_reached")
            water = s.get("water_cells")
            text = f"{reached} of {water} water cells reached" if reached is not None else ""
            if len(rng) == 2:
                text += f"; arrivals {rng[0]:.1f} to {rng[1]:.1f} min"
            summary.append((f"Product set {key}", text))
    summary.append(("Files written", str(len(record.get("products") or []))))
    summary.append(("Run record", "run.json (inputs with SHA-256, every parameter, versions, timings)"))

    links = [
        ReportLink(href=rel(p), name=rel(p), kind=_KINDS.get(p.suffix.lower(), p.suffix.lstrip(".")),
                   size=_size_text(p.stat().st_size))
        for p in files
    ]
    if run_json.is_file():
        links.append(ReportLink(href="run.json", name="run.json", kind=_KINDS[".json"],
                                size=_size_text(run_json.stat().st_size)))

    return ReportContext(
        title=title or f"Tsunami arrival times: {src.get('label') or 'map run'}",
        cautions=tuple(CAUTION_LINES),
        caution_short=CAUTION_SHORT,
        generated_utc=_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        run_facts=tuple(facts),
        versions=versions,
        maps=tuple(maps),
        timeline=timeline,
        sites=sites,
        comparison=comparison,
        comparison_table=comparison_table,
        record=tuple(summary),
        products=tuple(links),
        margin_colors=dict(MARGIN_LEVEL_COLORS),
    )


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
        out.append(("sites", "Sites"))
    if context.timeline is not None:
        out.append(("timeline", "Timeline"))
    if context.comparison or context.comparison_table is not None:
        out.append(("comparison", "Scenario comparison"))
    out += [("record", "Run record"), ("products", "Products")]
    return out

