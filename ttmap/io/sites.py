"""Site files in, site tables out.

A *site* is a named coastal point where planners want arrival times and a time
budget. :func:`read_sites` reads them from

- a CSV file (``.csv`` or ``.txt``): one header line, then one site per line.
  Columns, names case-insensitive, in any order:

  ============================  ==============================================
  ``name``                      required (or the column named by ``name_field``)
  ``lon``, ``lat``              WGS84 degrees (``longitude``/``latitude`` also
                                accepted); or
  ``x``, ``y``                  map coordinates in the CRS given as ``crs``
  ``safe_ground_distance_m``    optional: walking distance to safe ground, m
  ``walking_speed_m_s``         optional: walking speed, m/s
  ``preparation_min``           optional: minutes before people start walking
  ``notification_delay_min``    optional: minutes from the earthquake until an
                                official message can reach people
  ============================  ==============================================

  An empty optional value means "use the default". Other columns are
  ignored. Lines starting with ``#`` before the header are skipped. The
  separator is a comma, a semicolon or a tab (the one found in the header).
- any vector file GDAL reads (GeoPackage, GeoJSON, Shapefile, ...) holding
  points, with the same attribute names; the file's CRS is used.

Every problem is reported in one line naming the file, the line (or feature)
number, the column and the fix.

:func:`write_site_table_csv` writes a site table (see
:mod:`ttmap.products.sites`) as CSV with ``#`` comment lines on top.

This module knows no physics.
"""

from __future__ import annotations

import csv
import math
import os
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import numpy as np
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError

from ttmap.defaults import MAX_NOTIFICATION_DELAY_MIN, SITE_CSV_SUFFIXES
from ttmap._typing import FloatArray
from ttmap.errors import InputDataError
from ttmap.io.atomic import atomic_output
from ttmap.io.vector import read_vector_points

__all__ = [
    "Site",
    "SiteList",
    "SITE_FIELDS",
    "read_sites",
    "check_lonlat",
    "sites_from_lonlat",
    "write_site_table_csv",
]

#: Optional per-site values, in column order.
SITE_FIELDS: tuple[str, ...] = (
    "safe_ground_distance_m",
    "walking_speed_m_s",
    "preparation_min",
    "notification_delay_min",
)

_WGS84 = CRS.from_epsg(4326)
_LON_NAMES = ("lon", "longitude")
_LAT_NAMES = ("lat", "latitude")
_UNITS = {
    "safe_ground_distance_m": "m",
    "walking_speed_m_s": "m/s",
    "preparation_min": "min",
    "notification_delay_min": "min",
}


@dataclass(frozen=True)
class Site:
    """One named site.

    Attributes
    ----------
    name : str
    x, y : float
        Position in the list's CRS (longitude, latitude for WGS84).
    safe_ground_distance_m, walking_speed_m_s : float or None
    preparation_min, notification_delay_min : float or None
        Per-site values; None means "use the default".
    line : int or None
        CSV line number, or feature number (from 1) of a vector file.
    """

    name: str
    x: float
    y: float
    safe_ground_distance_m: float | None = None
    walking_speed_m_s: float | None = None
    preparation_min: float | None = None
    notification_delay_min: float | None = None
    line: int | None = None


@dataclass(frozen=True)
class SiteList:
    """Sites read from one file, all in one CRS.

    Attributes
    ----------
    sites : tuple of Site
        In file order; names unique.
    crs : pyproj.CRS
        CRS of every ``(x, y)``; WGS84 for lon/lat input. Axis order is
        always x = easting/longitude, y = northing/latitude.
    path : str
        The file read ("" when built in code).

    Examples
    --------
    >>> sl = SiteList((Site("A", 140.5, 38.2), Site("B", 141.0, 37.9)))
    >>> sl.names
    ('A', 'B')
    >>> lon, lat = sl.lonlat()
    >>> float(lon[1]), float(lat[1])
    (141.0, 37.9)
    """

    sites: tuple[Site, ...]
    crs: CRS = field(default=_WGS84, repr=False)
    path: str = ""

    def __post_init__(self) -> None:
        object.__setattr__(self, "sites", tuple(self.sites))
        try:
            object.__setattr__(self, "crs", CRS.from_user_input(self.crs))
        except CRSError as err:
            raise InputDataError(
                f"site CRS {self.crs!r} is not understood; give e.g. 'EPSG:4326'"
            ) from err
        seen: dict[str, Site] = {}
        for s in self.sites:
            if not isinstance(s, Site):
                raise InputDataError(f"expected Site objects, got {type(s).__name__}")
            if s.name in seen:
                raise InputDataError(f"site name {s.name!r} is used twice; make site names unique")
            seen[s.name] = s

    def __len__(self) -> int:
        return len(self.sites)

    def __iter__(self) -> Iterator[Site]:
        return iter(self.sites)

    def __getitem__(self, i: int) -> Site:
        return self.sites[i]

    @property
    def names(self) -> tuple[str, ...]:
        """Site names in order."""
        return tuple(s.name for s in self.sites)

    @property
    def xs(self) -> FloatArray:
        """x of every site in :attr:`crs`."""
        return np.array([s.x for s in self.sites], dtype=np.float64)

    @property
    def ys(self) -> FloatArray:
        """y of every site in :attr:`crs`."""
        return np.array([s.y for s in self.sites], dtype=np.float64)

    def positions_in(self, crs: Any) -> tuple[FloatArray, FloatArray]:
        """Site positions in another CRS (x first); NaN where they do not convert."""
        target = CRS.from_user_input(crs)
        xs, ys = self.xs, self.ys
        if len(self.sites) == 0 or target.equals(self.crs, ignore_axis_order=True):
            return xs, ys
        tr = Transformer.from_crs(self.crs, target, always_xy=True)
        x, y = tr.transform(xs, ys, errcheck=False)
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        bad = ~(np.isfinite(x) & np.isfinite(y))
        x[bad] = np.nan
        y[bad] = np.nan
        return x, y

    def lonlat(self) -> tuple[FloatArray, FloatArray]:
        """WGS84 longitude and latitude of every site, degrees."""
        return self.positions_in(_WGS84)


# ---------------------------------------------------------------------------
# Reading
# ---------------------------------------------------------------------------


def _parse_number(text: Any, *, where: str, column: str, fix: str) -> float | None:
    """A finite float, None for empty; InputDataError otherwise."""
    if text is None:
        return None
    if isinstance(text, (float, np.floating)) and math.isnan(float(text)):
        return None
    if isinstance(text, (int, float, np.integer, np.floating)) and not isinstance(text, bool):
        value = float(text)
    else:
        s = str(text).strip()
        if not s:
            return None
        try:
            value = float(s)
        except ValueError:
            raise InputDataError(
                f"{where}, column {column!r}: {s!r} is not a number; {fix}"
            ) from None
    if not math.isfinite(value):
        raise InputDataError(f"{where}, column {column!r}: {text!r} is not a finite number; {fix}")
    return value


def _check_site_values(
    values: dict[str, float | None], *, where: str, columns: Mapping[str, str]
) -> None:
    """Range checks of the optional per-site values."""
    checks = (
        (
            "safe_ground_distance_m",
            lambda v: v >= 0.0,
            "must not be negative; give the walking distance in metres",
        ),
        (
            "walking_speed_m_s",
            lambda v: v > 0.0,
            "must be above 0; give the walking speed in m/s (e.g. 0.74)",
        ),
        ("preparation_min", lambda v: v >= 0.0, "must not be negative; give minutes, 0 or more"),
        (
            "notification_delay_min",
            lambda v: 0.0 <= v <= MAX_NOTIFICATION_DELAY_MIN,
            f"must lie in 0...{MAX_NOTIFICATION_DELAY_MIN:g} minutes; give minutes, e.g. 10",
        ),
    )
    for key, ok, fix in checks:
        v = values.get(key)
        if v is not None and not ok(v):
            raise InputDataError(
                f"{where}, column {columns.get(key, key)!r}: {v:g} {_UNITS[key]} {fix}"
            )


def check_lonlat(lon: float, lat: float, *, where: str, lon_column: str | None = None,
                 lat_column: str | None = None) -> None:
    """Refuse a WGS84 position with latitude outside -90..90 or longitude outside -360..360.

    ``where`` starts the message (a file and line, or a site); the column
    names, when given, are added.

    >>> check_lonlat(174.8, -41.3, where="site 'A'")
    >>> check_lonlat(-41.3, 174.8, where="site 'A'")
    Traceback (most recent call last):
    ...
    ttmap.errors.InputDataError: site 'A': latitude 174.8 lies outside -90..90; check the value (latitude, not longitude? give longitude first)
    """
    if not -90.0 <= lat <= 90.0:
        col = "" if lat_column is None else f", column {lat_column!r}"
        raise InputDataError(
            f"{where}{col}: latitude {lat:g} lies outside -90..90; "
            "check the value (latitude, not longitude? give longitude first)"
        )
    if not -360.0 <= lon <= 360.0:
        col = "" if lon_column is None else f", column {lon_column!r}"
        raise InputDataError(f"{where}{col}: longitude {lon:g} lies outside -360..360; check the value")


def _check_lonlat(lon: float, lat: float, *, where: str, lon_col: str, lat_col: str) -> None:
    check_lonlat(lon, lat, where=where, lon_column=lon_col, lat_column=lat_col)


def sites_from_lonlat(specs: Sequence[tuple[str, float, float]]) -> SiteList:
    """A WGS84 :class:`SiteList` from ``(name, lon, lat)`` triples, positions and names checked.

    Raises
    ------
    InputDataError
        A latitude or longitude out of range, or a name given twice.
    """
    seen: set[str] = set()
    sites = []
    for name, lon, lat in specs:
        check_lonlat(lon, lat, where=f"site {name!r}")
        if name in seen:
            raise InputDataError(f"site name {name!r} is given twice; give each site a unique name")
        seen.add(name)
        sites.append(Site(name, float(lon), float(lat)))
    return SiteList(tuple(sites))


def _user_crs(crs: Any, path: str) -> CRS | None:
    if crs is None:
        return None
    try:
        return CRS.from_user_input(crs)
    except CRSError as err:
        raise InputDataError(
            f"site file {path!r}: CRS {crs!r} is not understood; give e.g. 'EPSG:32754'"
        ) from err


def _numbered_lines(handle: Any, numbers: list[int]) -> Iterator[str]:
    """Lines after leading ``#`` comments and blank lines, recording physical line numbers."""
    header_seen = False
    for i, line in enumerate(handle, start=1):
        if not header_seen:
            stripped = line.strip()
            if not stripped or stripped.startswith("#"):
                continue
            header_seen = True
        numbers.append(i)
        yield line


def _delimiter(header: str) -> str:
    counts = {d: header.count(d) for d in (",", ";", "\t")}
    best = max(counts, key=lambda d: counts[d])
    return best if counts[best] > 0 else ","


def _find(columns: dict[str, str], names: Sequence[str]) -> str | None:
    for n in names:
        if n in columns:
            return columns[n]
    return None


def _read_csv(path: str, name_field: str | None, crs: Any) -> SiteList:
    numbers: list[int] = []
    try:
        with open(path, encoding="utf-8-sig", newline="") as handle:
            lines = list(_numbered_lines(handle, numbers))
    except UnicodeDecodeError as err:
        raise InputDataError(
            f"site file {path!r} is not UTF-8 text ({err.reason} at byte {err.start}); "
            "save it as UTF-8 CSV"
        ) from err
    except OSError as err:
        raise InputDataError(
            f"site file {path!r} cannot be read ({err.strerror}); check the path"
        ) from err
    for line_no, text in zip(numbers, lines, strict=True):
        if "\x00" in text or any(ord(ch) < 32 and ch not in "\t\r\n" for ch in text):
            raise InputDataError(
                f"site file {path!r} has binary content at line {line_no} (a control byte such as NUL); "
                "save it as UTF-8 CSV text"
            )
    if not lines:
        raise InputDataError(
            f"site file {path!r} is empty; give a header line (name,lon,lat,...) "
            "and one site per line"
        )
    reader = csv.reader(lines, delimiter=_delimiter(lines[0]))
    try:
        header = next(reader)
    except csv.Error as err:
        raise InputDataError(
            f"site file {path!r}, line {numbers[0]}: {err}; fix the header"
        ) from err
    header_line = numbers[0]
    columns: dict[str, str] = {}  # lower-case name -> name as written
    index: dict[str, int] = {}
    for i, raw in enumerate(header):
        key = raw.strip()
        low = key.lower()
        if not key:
            continue
        if low in columns:
            raise InputDataError(
                f"site file {path!r}, line {header_line}: column {key!r} appears twice in the "
                "header (names are case-insensitive); keep one"
            )
        columns[low] = key
        index[low] = i
    shown = ", ".join(columns.values()) or "none"

    name_key = (name_field or "name").strip().lower()
    if name_key not in columns:
        fix = (
            f"choose one of the columns ({shown}) as the name field"
            if name_field
            else "add a 'name' column or choose one with the name-field option"
        )
        raise InputDataError(
            f"site file {path!r}, line {header_line}: no {name_field or 'name'!r} column "
            f"(columns: {shown}); {fix}"
        )
    lon_col, lat_col = _find(columns, _LON_NAMES), _find(columns, _LAT_NAMES)
    x_col, y_col = _find(columns, ("x",)), _find(columns, ("y",))
    user_crs = _user_crs(crs, path)
    if lon_col is not None or lat_col is not None:
        if lon_col is None or lat_col is None:
            missing = "lon" if lon_col is None else "lat"
            other = "lat" if missing == "lon" else "lon"
            raise InputDataError(
                f"site file {path!r}, line {header_line}: a {other!r} "
                f"column but no {missing!r} column (columns: {shown}); give both lon and lat"
            )
        xcol, ycol = lon_col, lat_col
        if user_crs is not None and not user_crs.is_geographic:
            raise InputDataError(
                f"site file {path!r}: lon/lat columns hold degrees but the CRS given "
                f"({user_crs.name}) is projected; use x,y columns for map coordinates "
                "or drop the CRS"
            )
        site_crs = user_crs or _WGS84
        geographic = True
    elif x_col is not None and y_col is not None:
        if user_crs is None:
            raise InputDataError(
                f"site file {path!r}, line {header_line}: columns x,y are map coordinates but no "
                "CRS was given; give their CRS (e.g. crs='EPSG:32754') or use lon,lat columns"
            )
        xcol, ycol = x_col, y_col
        site_crs = user_crs
        geographic = bool(user_crs.is_geographic)
    else:
        raise InputDataError(
            f"site file {path!r}, line {header_line}: no lon/lat (or x/y) columns "
            f"(columns: {shown}); add lon and lat columns in WGS84 degrees"
        )
    name_col = columns[name_key]
    optional = {f: columns[f] for f in SITE_FIELDS if f in columns}
    fixes = {
        xcol: "write a decimal number (degrees for lon/lat)",
        ycol: "write a decimal number (degrees for lon/lat)",
    }

    sites: list[Site] = []
    first_line: dict[str, int] = {}
    width = len(header)
    try:
        for row in reader:
            line = numbers[reader.line_num - 1]
            where = f"site file {path!r}, line {line}"
            if not any(cell.strip() for cell in row):
                continue
            if len(row) > width and any(cell.strip() for cell in row[width:]):
                raise InputDataError(
                    f"{where}: {len(row)} values but the header has {width} columns; "
                    "remove the extra values or quote text that holds the separator"
                )
            cells = row + [""] * (width - len(row))

            def cell(key: str, cells: list[str] = cells) -> str:
                return cells[index[key.lower()]]

            name = cell(name_col).strip()
            if not name:
                raise InputDataError(
                    f"{where}, column {name_col!r}: the name is empty; name every site"
                )
            if name in first_line:
                raise InputDataError(
                    f"site file {path!r}: name {name!r} is used on lines {first_line[name]} and "
                    f"{line}; give each site a unique name"
                )
            first_line[name] = line
            coords = []
            for col in (xcol, ycol):
                v = _parse_number(cell(col), where=where, column=col, fix=fixes[col])
                if v is None:
                    raise InputDataError(
                        f"{where}, column {col!r}: the value is empty; give the site's position"
                    )
                coords.append(v)
            x, y = coords
            if geographic:
                _check_lonlat(x, y, where=where, lon_col=xcol, lat_col=ycol)
            values = {
                f: _parse_number(
                    cell(c),
                    where=where,
                    column=c,
                    fix=f"write a number in {_UNITS[f]}, or leave it empty for the default",
                )
                for f, c in optional.items()
            }
            _check_site_values(values, where=where, columns=optional)
            sites.append(Site(name, x, y, line=line, **values))
    except csv.Error as err:
        raise InputDataError(
            f"site file {path!r}, line {numbers[min(reader.line_num, len(numbers)) - 1]}: {err}; "
            "check the quoting"
        ) from err
    if not sites:
        raise InputDataError(f"site file {path!r} has a header but no sites; add one site per line")
    return SiteList(tuple(sites), site_crs, path)


def _read_vector(path: str, layer: str | None, name_field: str | None, crs: Any) -> SiteList:
    names, xs, ys, attributes, file_crs = read_vector_points(path, layer, name_field=name_field)
    user_crs = _user_crs(crs, path)
    if file_crs is None and user_crs is None:
        raise InputDataError(
            f"site file {path!r} declares no CRS; give the CRS of its coordinates "
            "(e.g. crs='EPSG:4326') or add one to the file"
        )
    if (
        file_crs is not None
        and user_crs is not None
        and not file_crs.equals(user_crs, ignore_axis_order=True)
    ):
        raise InputDataError(
            f"site file {path!r} declares CRS {file_crs.name!r} but {user_crs.name!r} was given; "
            "drop the CRS option or fix the file"
        )
    site_crs = file_crs if file_crs is not None else user_crs
    assert site_crs is not None
    lower = {k.lower(): k for k in attributes}
    optional = {f: lower[f] for f in SITE_FIELDS if f in lower}
    sites: list[Site] = []
    for i, name in enumerate(names):
        where = f"site file {path!r}, feature {i + 1}"
        x, y = float(xs[i]), float(ys[i])
        if not (math.isfinite(x) and math.isfinite(y)):
            raise InputDataError(f"{where} ({name!r}): the point has no finite coordinates; fix it")
        if site_crs.is_geographic:
            _check_lonlat(x, y, where=where, lon_col="geometry x", lat_col="geometry y")
        values = {
            f: _parse_number(
                attributes[c][i],
                where=where,
                column=c,
                fix=f"give a number in {_UNITS[f]}, or leave it empty for the default",
            )
            for f, c in optional.items()
        }
        _check_site_values(values, where=where, columns=optional)
        sites.append(Site(name, x, y, line=i + 1, **values))
    return SiteList(tuple(sites), site_crs, path)


def read_sites(
    path: str | os.PathLike[str],
    *,
    name_field: str | None = None,
    crs: Any = None,
    layer: str | None = None,
) -> SiteList:
    """Read named coastal sites from a CSV file or a vector file of points.

    Parameters
    ----------
    path : path-like
        ``.csv``/``.txt`` text (see the module notes for the columns), or any
        vector file GDAL reads.
    name_field : str, optional
        Column holding the site names (default ``name``, any case).
    crs : CRS-like, optional
        CSV: the CRS of ``x,y`` columns (required for them), or a geographic
        CRS for ``lon,lat`` columns (default WGS84). Vector file: the CRS of a
        file that declares none; it must agree with a declared one.
    layer : str, optional
        Layer of a multi-layer vector file.

    Returns
    -------
    SiteList

    Raises
    ------
    InputDataError
        With one line naming the file, the line or feature, the column and
        the fix: missing file, no name or position columns, empty or
        non-numeric values, latitude outside -90..90, a negative distance or
        delay, a walking speed of 0 or less, a repeated name (both line
        numbers given), no sites.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "sites.csv"
    >>> text = "Name,LON,lat,walking_speed_m_s\\nPier,142.1,-33.5,\\nHill,142.2,-33.6,1.1\\n"
    >>> _ = p.write_text(text)
    >>> sl = read_sites(p)
    >>> sl.names, sl[0].walking_speed_m_s, sl[1].walking_speed_m_s, sl[1].line
    (('Pier', 'Hill'), None, 1.1, 3)
    """
    name = os.fspath(path)
    if not os.path.exists(name) and not name.startswith("/vsi"):
        raise InputDataError(f"site file {name!r} does not exist; check the path")
    if Path(name).suffix.lower() in SITE_CSV_SUFFIXES:
        if layer is not None:
            raise InputDataError(
                f"site file {name!r} is CSV text and has no layers; drop the layer option"
            )
        return _read_csv(name, name_field, crs)
    return _read_vector(name, layer, name_field, crs)


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------


class _TableLike(Protocol):
    columns: Mapping[str, Sequence[Any]]
    comments: Sequence[str]


def _format(value: Any, decimals: int | None) -> str:
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if not math.isfinite(v):
            return ""
        if decimals is None:
            return format(v, ".10g")
        text = f"{v:.{decimals}f}"
        if text.startswith("-") and float(text) == 0.0:
            text = text[1:]
        return text
    return str(value)


def write_site_table_csv(
    path: str | os.PathLike[str],
    table: _TableLike,
    *,
    overwrite: bool = False,
) -> Path:
    """Write a site table as CSV, with ``#`` comment lines on top.

    Parameters
    ----------
    path : path-like
        Output file (``.csv``).
    table : SiteTable or any object with ``columns`` and ``comments``
        ``columns``: ordered mapping of column name to one value per site
        (str, int, float or None); ``comments``: lines written first, each
        as ``# `` + text (a :class:`ttmap.products.sites.SiteTable` puts the
        caution first, then the units and defaults). An optional ``decimals``
        mapping gives the decimals of float columns (others: 10 significant
        digits).
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    OutputExistsError
        ``path`` exists and ``overwrite`` is False.
    InputDataError
        Columns of different lengths, a missing folder.

    Notes
    -----
    Missing numbers (None, NaN) are written as empty fields. Lines end with
    ``\\n``; the file is UTF-8. Read it back with ``csv.reader`` after
    skipping the lines that start with ``#``. Written under a temporary
    name and renamed when complete (:func:`ttmap.io.atomic.atomic_output`).
    """
    columns = dict(table.columns)
    if not columns:
        raise InputDataError("the site table has no columns; nothing to write")
    lengths = {k: len(v) for k, v in columns.items()}
    if len(set(lengths.values())) > 1:
        raise InputDataError(
            f"site table columns differ in length ({lengths}); "
            "give one value per site in every column"
        )
    decimals: Mapping[str, int] = getattr(table, "decimals", None) or {}
    n = next(iter(lengths.values()))
    final = Path(path)
    with atomic_output(final, overwrite=overwrite) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            handle.writelines("# " + " ".join(str(line).split()) + "\n" for line in table.comments)
            writer = csv.writer(handle, lineterminator="\n")
            writer.writerow(list(columns))
            for i in range(n):
                writer.writerow([_format(columns[k][i], decimals.get(k)) for k in columns])
    return final
