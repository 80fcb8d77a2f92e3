"""Reading observed first-arrival picks of gauges or observers (CSV or vector points).

A pick file names each gauge, its position and the first arrival seen there,
with its standard uncertainty:

- CSV with a header: ``name``, ``lon``, ``lat`` (WGS84 degrees; ``x``/``y``
  columns are read as lon/lat too), the arrival as **one** of
  ``time_utc`` (ISO 8601 clock time, e.g. ``2024-05-01T03:12:30Z``; without
  a zone it is taken as UTC) or ``minutes_after_origin`` (minutes after a
  known origin time), and the uncertainty as ``uncertainty_min`` or
  ``uncertainty_s``. Lines starting with ``#`` are comments.
- Any OGR vector file of points with the same attribute names (positions
  transformed to WGS84).

No physics here: :mod:`ttmap.jobs.locate` turns the picks into seconds and
locates the source (:mod:`ttmap.locate`).
"""

from __future__ import annotations

import csv
import datetime as _dt
import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ttmap.errors import InputDataError

__all__ = ["Pick", "PickList", "read_picks", "parse_utc"]

_TIME_COLUMNS = ("time_utc", "minutes_after_origin")
_SIGMA_COLUMNS = {"uncertainty_min": 60.0, "uncertainty_s": 1.0}


@dataclass(frozen=True)
class Pick:
    """One observed first arrival.

    Attributes
    ----------
    name : str
    lon, lat : float, degrees (WGS84)
    time_utc : datetime or None
        Clock time (timezone-aware, UTC) when the file gives ``time_utc``.
    minutes_after_origin : float or None
        When the file gives ``minutes_after_origin``.
    sigma_s : float, seconds
    line : int
        CSV line (or feature number, from 1).
    """

    name: str
    lon: float
    lat: float
    time_utc: _dt.datetime | None
    minutes_after_origin: float | None
    sigma_s: float
    line: int


@dataclass(frozen=True)
class PickList:
    """The picks of one file: all clock times or all minutes after the origin.

    Attributes
    ----------
    picks : tuple of Pick
    time_kind : {"utc", "minutes"}
    path : str
    """

    picks: tuple[Pick, ...]
    time_kind: str
    path: str

    def __len__(self) -> int:
        return len(self.picks)

    @property
    def names(self) -> list[str]:
        """Gauge names, in file order."""
        return [p.name for p in self.picks]


def parse_utc(text: str, *, what: str) -> _dt.datetime:
    """An ISO 8601 clock time as an aware UTC datetime; no zone means UTC.

    >>> parse_utc("2024-05-01T03:12:30Z", what="t").isoformat()
    '2024-05-01T03:12:30+00:00'
    >>> parse_utc("2024-05-01 05:12:30+02:00", what="t").isoformat()
    '2024-05-01T03:12:30+00:00'
    """
    s = str(text).strip()
    try:
        t = _dt.datetime.fromisoformat(s[:-1] + "+00:00" if s.endswith(("Z", "z")) else s)
    except ValueError as err:
        raise InputDataError(
            f"{what}: time {text!r} is not an ISO 8601 clock time; write it like "
            "2024-05-01T03:12:30Z (UTC)"
        ) from err
    if t.tzinfo is None:
        t = t.replace(tzinfo=_dt.UTC)
    return t.astimezone(_dt.UTC)


def _number(text: Any, *, where: str, column: str) -> float:
    try:
        v = float(str(text).strip())
    except ValueError as err:
        raise InputDataError(f"{where}: {column} {text!r} is not a number; give a plain number") from err
    if not math.isfinite(v):
        raise InputDataError(f"{where}: {column} {text!r} is not a finite number")
    return v


def _find(columns: Sequence[str], wanted: Sequence[str]) -> str | None:
    low = {c.strip().lower(): c for c in columns}
    for w in wanted:
        if w in low:
            return low[w]
    return None


def _columns(columns: Sequence[str], path: str) -> dict[str, str]:
    found: dict[str, str] = {}
    for key, names in (("name", ("name",)), ("lon", ("lon", "longitude", "x")),
                       ("lat", ("lat", "latitude", "y"))):
        col = _find(columns, names)
        if col is None:
            raise InputDataError(
                f"{path}: no {key!r} column (columns: {', '.join(columns)}); the pick file needs "
                "name, lon, lat, time_utc or minutes_after_origin, and uncertainty_min or uncertainty_s"
            )
        found[key] = col
    times = [c for c in _TIME_COLUMNS if _find(columns, (c,))]
    if len(times) != 1:
        raise InputDataError(
            f"{path}: give the arrival in exactly one column, time_utc (clock time) or "
            f"minutes_after_origin; found {', '.join(times) or 'neither'}"
        )
    found["time"] = _find(columns, times) or times[0]
    found["time_kind"] = "utc" if times[0] == "time_utc" else "minutes"
    sig = [c for c in _SIGMA_COLUMNS if _find(columns, (c,))]
    if len(sig) != 1:
        raise InputDataError(
            f"{path}: give the pick uncertainty in exactly one column, uncertainty_min or "
            f"uncertainty_s; found {', '.join(sig) or 'neither'}"
        )
    found["sigma"] = _find(columns, sig) or sig[0]
    found["sigma_kind"] = sig[0]
    return found


def _pick(row: Mapping[str, Any], cols: Mapping[str, str], where: str, line: int) -> Pick:
    name = str(row.get(cols["name"]) or "").strip()
    if not name:
        raise InputDataError(f"{where}: the name is empty; give every gauge a name")
    lon = _number(row.get(cols["lon"]), where=where, column="lon")
    lat = _number(row.get(cols["lat"]), where=where, column="lat")
    if not (-180.0 <= lon <= 360.0 and -90.0 <= lat <= 90.0):
        raise InputDataError(
            f"{where}: position lon {lon:g}, lat {lat:g} is not a WGS84 longitude/latitude"
        )
    raw_t = row.get(cols["time"])
    if raw_t is None or not str(raw_t).strip():
        raise InputDataError(f"{where} ({name}): the arrival time is empty; give one per gauge")
    t_utc: _dt.datetime | None = None
    minutes: float | None = None
    if cols["time_kind"] == "utc":
        t_utc = parse_utc(str(raw_t), what=f"{where} ({name})")
    else:
        minutes = _number(raw_t, where=f"{where} ({name})", column="minutes_after_origin")
    sigma = _number(row.get(cols["sigma"]), where=f"{where} ({name})", column=cols["sigma_kind"])
    if sigma <= 0.0:
        raise InputDataError(
            f"{where} ({name}): {cols['sigma_kind']} {sigma:g} must be positive; give the pick's "
            "standard uncertainty"
        )
    return Pick(name, lon, lat, t_utc, minutes, sigma * _SIGMA_COLUMNS[cols["sigma_kind"]], line)


def read_picks(path: str | os.PathLike[str], *, layer: str | None = None) -> PickList:
    """Read a pick file (CSV, or a vector file of points).

    Parameters
    ----------
    path : path-like
    layer : str, optional
        Layer of a multi-layer vector file.

    Returns
    -------
    PickList

    Raises
    ------
    InputDataError
        Missing file or columns, an unparseable time or number, an empty
        name, a name given twice, a non-positive uncertainty.
    """
    p = Path(path)
    if not p.is_file():
        raise InputDataError(f"pick file {str(p)!r} does not exist; give the path of a CSV or vector file")
    picks: list[Pick] = []
    if p.suffix.lower() in (".csv", ".txt"):
        with p.open(newline="", encoding="utf-8-sig") as f:
            lines = [(i + 1, ln) for i, ln in enumerate(f) if ln.strip() and not ln.lstrip().startswith("#")]
        if not lines:
            raise InputDataError(f"{p}: no header and no picks; see the pick file format in the README")
        reader = csv.DictReader([ln for _, ln in lines])
        cols = _columns(list(reader.fieldnames or []), str(p))
        for (line, _), row in zip(lines[1:], reader):
            picks.append(_pick(row, cols, f"{p.name} line {line}", line))
        kind = cols["time_kind"]
    else:
        from pyproj import CRS, Transformer

        from ttmap.io.vector import read_vector_points

        names, xs, ys, attrs, crs = read_vector_points(p, layer)
        columns = ["name", "lon", "lat", *attrs]
        cols = _columns(columns, str(p))
        if crs is not None and not crs.equals(CRS.from_epsg(4326)):
            xs, ys = Transformer.from_crs(crs, 4326, always_xy=True).transform(xs, ys)
        for i, n in enumerate(names):
            row = {"name": n, "lon": xs[i], "lat": ys[i], **{k: v[i] for k, v in attrs.items()}}
            picks.append(_pick(row, cols, f"{p.name} feature {i + 1}", i + 1))
        kind = cols["time_kind"]
    seen: dict[str, int] = {}
    for pk in picks:
        if pk.name in seen:
            raise InputDataError(
                f"{p.name}: gauge name {pk.name!r} appears twice (lines {seen[pk.name]} and "
                f"{pk.line}); give each gauge one pick"
            )
        seen[pk.name] = pk.line
    return PickList(tuple(picks), kind, str(p))
