"""Scenario files: many sources, periods and comparisons described in one TOML file.

A scenario file names a bathymetry raster, the speed settings, the sources
(written out one by one, or generated as a row of ruptures along a trench),
the coastal sites and the outputs. It is read with the standard library's
:mod:`tomllib` and checked completely before any solve: every problem found
becomes one line ``FILE:LINE: KEY.PATH: what is wrong; how to fix it``, and
all lines are reported together in one :class:`ScenarioFileError`.

Schema (units are part of the key names; paths are relative to the folder of
the scenario file; ``[[scenario]]`` and ``[[trench]]`` tables and the items
of arrays are counted from 1 in messages)::

    [bathymetry]                    # required
    path = "bathy.tif"              # required; any GDAL raster
    band = 1                        # optional; required for multi-band rasters
    depth_positive = false          # true: values are depths, positive down
    crop_lonlat = [W, S, E, N]      # optional window in degrees ...
    crop_xy = [W, S, E, N]          # ... or in the raster's own map units
    coarsen = 1                     # block-average N x N cells first

    [speed]                         # optional
    floor_depth_m = 5.0
    far_field = false               # far-field slowdown (off by default)
    earth = "wgs84"                 # or "sphere"
    periods_s = [600]               # wave periods for energy arrivals
    period_speed = "group"          # or "phase"

    [[scenario]]                    # any number
    name = "north-point"            # letters, digits, _ - . ; unique
    point = [lon, lat]              # one source form of these four:
    rupture = {centre = [lon, lat], strike_deg = 10, length_km = 120, width_km = 60}
    rupture = {centre = [lon, lat], strike_deg = 10, mw = 8.2, scaling_law = "..."}
    source_file = "area.gpkg"       # (with source_layer = "..." if it has several)
    max_time_h = 6                  # optional
    snap_radius_km = 10             # optional: move a source on land to open water

    [[trench]]                      # any number: generated rupture scenarios
    name_prefix = "arc"             # scenarios arc-01, arc-02, ...
    polyline = [[lon, lat], ...]    # where the rupture centres lie
    spacing_km = 75                 # geodesic distance between neighbouring centres
    mw = 8.0
    scaling_law = "strasser2010-interface"   # default
    max_time_h, snap_radius_km      # optional, as for [[scenario]]

    [sites]                         # optional; checked and recorded in run.json
    path = "sites.csv"              # CSV with name, lon, lat (or a vector file of points)

    [outputs]                       # optional
    folder = "out"                  # default: <file stem>_out beside the file
    envelope = true                 # earliest arrival over all scenarios
    compare = [["a", "b"]]          # difference rasters: arrival of a minus arrival of b
    executor = "local"              # "serial", "local" or a scheduler address
    workers = 4

The rectangles of a ``[[trench]]`` are centred on the polyline, each
``spacing_km`` (geodesic, WGS84) from the one before, as many as fit, with
what is left over split between both ends; each has its long side along the
local direction of the polyline and its size from the scaling relation
(median length and width, Strasser et al. 2010 by default; see
:mod:`ttmap.physics.scaling`).
"""

from __future__ import annotations

import csv
import difflib
import hashlib
import itertools
import math
import os
import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ttmap.defaults import FLOOR_DEPTH_M, EARTH_MODELS, EXECUTORS, MAX_TRENCH_RUPTURES, PERIOD_SPEEDS
from ttmap.jobs.batch import MediumSpec, SolveTask
from ttmap.errors import InputDataError, TtmapError
from ttmap.physics.scaling import MW_MAX, MW_MIN, SCALING_RELATIONS, rupture_size_km
from ttmap.defaults import SCALING_RELATION
from ttmap.sources import Source

__all__ = [
    "RUPTURE_KEYS",
    "SECTION_KEYS",
    "BathymetrySettings",
    "GridInfo",
    "OutputSettings",
    "ScenarioFile",
    "ScenarioFileError",
    "ScenarioIssue",
    "ScenarioSpec",
    "SpeedSettings",
    "TrenchSpec",
    "check_executor",
    "format_key_path",
    "load_scenario_file",
    "locate_keys",
    "run_scenario_file",
    "scenario_tasks",
    "summary_lines",
    "trench_centres",
    "validate",
]

#: Keys allowed in each top-level table (``scenario`` and ``trench`` are arrays of tables).
SECTION_KEYS: Mapping[str, tuple[str, ...]] = {
    "bathymetry": ("path", "band", "depth_positive", "crop_lonlat", "crop_xy", "coarsen"),
    "speed": ("floor_depth_m", "far_field", "earth", "periods_s", "period_speed"),
    "scenario": (
        "name",
        "point",
        "rupture",
        "source_file",
        "source_layer",
        "max_time_h",
        "snap_radius_km",
    ),
    "trench": (
        "name_prefix",
        "polyline",
        "spacing_km",
        "mw",
        "scaling_law",
        "max_time_h",
        "snap_radius_km",
    ),
    "sites": ("path",),
    "outputs": ("folder", "compare", "envelope", "executor", "workers"),
}
#: Keys of a scenario's ``rupture`` table.
RUPTURE_KEYS: tuple[str, ...] = (
    "centre",
    "strike_deg",
    "length_km",
    "width_km",
    "mw",
    "scaling_law",
)
_SOURCE_FORMS = ("point", "rupture", "source_file")
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
_STEPS = tuple(k / 8.0 for k in range(9))

KeyPath = tuple[str | int, ...]


# ---------------------------------------------------------------------------
# Issues and their locations
# ---------------------------------------------------------------------------


def format_key_path(path: Sequence[str | int]) -> str:
    """Human key path: array positions counted from 1.

    >>> format_key_path(("scenario", 1, "rupture", "mw"))
    'scenario[2].rupture.mw'
    >>> format_key_path(("trench", 0, "polyline", 3))
    'trench[1].polyline[4]'
    """
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part + 1}]"
        else:
            out += ("." if out else "") + part
    return out


@dataclass(frozen=True)
class ScenarioIssue:
    """One problem found in a scenario file.

    Attributes
    ----------
    file : str
        The scenario file as given.
    line : int or None
        1-based line of the key (or its table) in the file, when known.
    key : str
        Key path, e.g. ``"scenario[2].rupture.mw"`` (tables counted from 1).
    message : str
        What is wrong, the value, and the fix.
    """

    file: str
    line: int | None
    key: str
    message: str

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}" if self.line else self.file
        return f"{where}: {self.key}: {self.message}" if self.key else f"{where}: {self.message}"


class ScenarioFileError(InputDataError):
    """A scenario file has problems; ``issues`` lists them, one line each in ``str()``."""

    def __init__(self, issues: Sequence[ScenarioIssue]) -> None:
        self.issues = tuple(issues)
        super().__init__("\n".join(str(i) for i in self.issues))


class _Scanner:
    """Find the line of every key, array item and table in TOML text.

    ``tomllib`` gives no positions, so this walks the text once more with a
    small, lenient reader of the same grammar (the text has already been
    parsed, so it is valid TOML). Any surprise ends the walk quietly: lines
    found so far are kept.
    """

    def __init__(self, text: str) -> None:
        self.s = text
        self.i = 0
        self.line = 1
        self.lines: dict[KeyPath, int] = {}
        self._aot_index: dict[KeyPath, int] = {}

    # -- low-level reading
    def _peek(self, k: int = 0) -> str:
        j = self.i + k
        return self.s[j] if j < len(self.s) else ""

    def _advance(self, n: int = 1) -> None:
        for _ in range(n):
            if self.i < len(self.s):
                if self.s[self.i] == "\n":
                    self.line += 1
                self.i += 1

    def _skip_space(self, newlines: bool) -> None:
        while self.i < len(self.s):
            c = self.s[self.i]
            if c in " \t\r" or (newlines and c == "\n"):
                self._advance()
            elif c == "#":
                while self.i < len(self.s) and self.s[self.i] != "\n":
                    self.i += 1
            else:
                return

    def _string(self) -> str:
        q = self._peek()
        if self.s.startswith(q * 3, self.i):
            self._advance(3)
            end = self.s.find(q * 3, self.i)
            if end < 0:
                raise ValueError("unterminated string")
            while self.s.startswith(q, end + 3):  # up to two quotes may close the string
                end += 1
            value = self.s[self.i : end]
            self._advance(end + 3 - self.i)
            return value
        self._advance()
        out = []
        while self.i < len(self.s) and self.s[self.i] != q:
            if q == '"' and self.s[self.i] == "\\":
                out.append(self.s[self.i : self.i + 2])
                self._advance(2)
                continue
            out.append(self.s[self.i])
            self._advance()
        self._advance()
        return "".join(out)

    def _key(self) -> list[str]:
        parts: list[str] = []
        while True:
            self._skip_space(False)
            c = self._peek()
            if c in "\"'":
                parts.append(self._string())
            else:
                m = re.compile(r"[A-Za-z0-9_-]+").match(self.s, self.i)
                if not m:
                    raise ValueError("bad key")
                parts.append(m.group(0))
                self._advance(m.end() - self.i)
            self._skip_space(False)
            if self._peek() == ".":
                self._advance()
                continue
            return parts

    def _record(self, path: KeyPath, line: int) -> None:
        self.lines.setdefault(path, line)

    def _value(self, path: KeyPath) -> None:
        c = self._peek()
        if c in "\"'":
            self._string()
        elif c == "[":
            self._advance()
            n = 0
            while True:
                self._skip_space(True)
                if self._peek() in ("]", ""):
                    self._advance()
                    return
                self._record(path + (n,), self.line)
                self._value(path + (n,))
                self._skip_space(True)
                if self._peek() == ",":
                    self._advance()
                    n += 1
        elif c == "{":
            self._advance()
            while True:
                self._skip_space(True)  # (newlines are allowed here from TOML 1.1 on)
                if self._peek() in ("}", ""):
                    self._advance()
                    return
                if self._peek() == ",":
                    self._advance()
                    continue
                line = self.line
                key = path + tuple(self._key())
                self._record(key, line)
                self._skip_space(False)
                self._advance()  # '='
                self._skip_space(False)
                self._value(key)
        else:
            while self.i < len(self.s) and self.s[self.i] not in ",]}\n#":
                self.i += 1

    def _resolve(self, names: Sequence[str]) -> KeyPath:
        path: KeyPath = ()
        for name in names:
            path = path + (name,)
            if path in self._aot_index:
                path = path + (self._aot_index[path],)
        return path

    def scan(self) -> dict[KeyPath, int]:
        table: KeyPath = ()
        try:
            while True:
                self._skip_space(True)
                if self.i >= len(self.s):
                    break
                line = self.line
                if self._peek() == "[":
                    double = self._peek(1) == "["
                    self._advance(2 if double else 1)
                    names = self._key()
                    self._advance(2 if double else 1)
                    if double:
                        base = self._resolve(names[:-1]) + (names[-1],)
                        idx = self._aot_index.get(base, -1) + 1
                        self._aot_index[base] = idx
                        self._record(base, line)
                        table = base + (idx,)
                    else:
                        table = self._resolve(names)
                    self._record(table, line)
                    continue
                key = table + tuple(self._key())
                self._record(key, line)
                self._skip_space(False)
                self._advance()  # '='
                self._skip_space(False)
                self._value(key)
        except (ValueError, IndexError):
            pass
        return self.lines


def locate_keys(text: str) -> dict[KeyPath, int]:
    """Line (1-based) of each key path in TOML text; array positions are 0-based ints.

    >>> lines = locate_keys('[a]\\nx = 1\\n[[s]]\\nname = "p"\\n[[s]]\\nr = {mw = 8}\\n')
    >>> lines[("a", "x")], lines[("s", 1)], lines[("s", 1, "r", "mw")]
    (2, 5, 6)
    """
    return _Scanner(text).scan()


# ---------------------------------------------------------------------------
# The parsed file
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class BathymetrySettings:
    """The ``[bathymetry]`` table, with ``path`` made absolute."""

    path: str
    band: int | None = None
    depth_positive: bool = False
    crop_lonlat: tuple[float, float, float, float] | None = None
    crop_xy: tuple[float, float, float, float] | None = None
    coarsen: int = 1


@dataclass(frozen=True)
class SpeedSettings:
    """The ``[speed]`` table."""

    floor_depth_m: float = FLOOR_DEPTH_M
    far_field: bool = False
    earth: str = "wgs84"
    periods_s: tuple[float, ...] = ()
    period_speed: str = "group"


@dataclass(frozen=True)
class ScenarioSpec:
    """One scenario: a named source and its limits (SI units).

    Attributes
    ----------
    name : str
    source : Source
    origin : str
        Key path of the table it came from, e.g. ``"scenario[2]"`` or ``"trench[1]"``.
    line : int or None
        Line of that table in the file.
    max_time_s, snap_radius_m : float or None
    trench : str or None
        ``name_prefix`` of the generating ``[[trench]]``.
    """

    name: str
    source: Source
    origin: str
    line: int | None = None
    max_time_s: float | None = None
    snap_radius_m: float | None = None
    trench: str | None = None
    source_file: str | None = None

    def label_line(self) -> str:
        """One line: name, source and limits."""
        extra = []
        if self.max_time_s is not None:
            extra.append(f"max {self.max_time_s / 3600.0:g} h")
        if self.snap_radius_m is not None:
            extra.append(f"snap radius {self.snap_radius_m / 1000.0:g} km")
        label = self.source.label
        if label.startswith(f"{self.name}: "):
            label = label[len(self.name) + 2 :]
        return f"{self.name}: {label}" + (f" ({', '.join(extra)})" if extra else "")

    def describe(self) -> dict[str, Any]:
        """A JSON-ready description for the run record."""
        return {
            "name": self.name,
            "origin": self.origin,
            "line": self.line,
            "trench": self.trench,
            "max_time_s": self.max_time_s,
            "snap_radius_m": self.snap_radius_m,
            "source_file": self.source_file,
            "source": self.source.describe(),
        }


@dataclass(frozen=True)
class TrenchSpec:
    """One ``[[trench]]`` table and what it generated."""

    name_prefix: str
    polyline: tuple[tuple[float, float], ...]
    spacing_km: float
    mw: float
    scaling_law: str
    length_km: float
    width_km: float
    scenario_names: tuple[str, ...]
    polyline_length_km: float


@dataclass(frozen=True)
class OutputSettings:
    """The ``[outputs]`` table, with ``folder`` made absolute."""

    folder: str
    compare: tuple[tuple[str, str], ...] = ()
    envelope: bool = True
    executor: str | None = None
    workers: int | None = None


@dataclass(frozen=True)
class GridInfo:
    """What validation learned about the bathymetry raster (no data read)."""

    shape: tuple[int, int]
    bounds: tuple[float, float, float, float]
    crs: str
    is_geographic: bool
    band_count: int

    def bounds_text(self) -> str:
        w, s, e, n = self.bounds
        if self.is_geographic:
            return f"lon {w:g} to {e:g}, lat {s:g} to {n:g}"
        return f"x {w:g} to {e:g}, y {s:g} to {n:g} ({self.crs})"


@dataclass(frozen=True)
class ScenarioFile:
    """A validated scenario file.

    Attributes
    ----------
    path : str
        Absolute path of the TOML file.
    sha256 : str
        SHA-256 of its bytes.
    scenarios : tuple of ScenarioSpec
        Written-out scenarios first, in file order, then each trench's.
    sites_path : str or None
        Absolute path of the site file.
    """

    path: str
    sha256: str
    bathymetry: BathymetrySettings
    speed: SpeedSettings
    scenarios: tuple[ScenarioSpec, ...]
    trenches: tuple[TrenchSpec, ...]
    sites_path: str | None
    sites_count: int | None
    outputs: OutputSettings
    grid: GridInfo

    @property
    def solve_count(self) -> int:
        """Number of solves: one front and one per period for each scenario."""
        return len(self.scenarios) * (1 + len(self.speed.periods_s))

    def scenario(self, name: str) -> ScenarioSpec:
        """The scenario called ``name``."""
        for s in self.scenarios:
            if s.name == name:
                return s
        raise KeyError(name)


# ---------------------------------------------------------------------------
# Trench generator
# ---------------------------------------------------------------------------


def trench_centres(
    polyline: Sequence[Sequence[float]], spacing_km: float
) -> tuple[list[tuple[float, float, float]], float]:
    """Rupture centres at equal geodesic spacing along a lon/lat polyline.

    Parameters
    ----------
    polyline : sequence of (lon, lat), WGS84 degrees
        At least two points, no two consecutive points equal.
    spacing_km : float
        Geodesic distance (WGS84 ellipsoid, pyproj.Geod) between neighbouring
        centres.

    Returns
    -------
    centres : list of (lon, lat, strike_deg)
        Walking along the polyline, each centre lies on it exactly
        ``spacing_km`` from the one before (measured straight, not along the
        line, so a bend does not bring neighbours closer). As many centres as
        fit; what is left over is split evenly between both ends of the line.
        ``strike_deg`` is the forward azimuth of the polyline at the centre,
        in [0, 360).
    length_km : float
        Geodesic length of the polyline.

    Raises
    ------
    InputDataError
        Fewer than two points, a repeated point, or a spacing that is not positive.

    Examples
    --------
    >>> c, length = trench_centres([(-145.0, -32.0), (-145.0, -34.0)], 100.0)
    >>> len(c), round(length), [round(s) for _, _, s in c]
    (3, 222, [180, 180, 180])
    """
    from pyproj import Geod

    pts = [(float(p[0]), float(p[1])) for p in polyline]
    if len(pts) < 2:
        raise InputDataError(f"a polyline needs at least two [lon, lat] points, got {len(pts)}")
    if not (math.isfinite(spacing_km) and spacing_km > 0):
        raise InputDataError(f"spacing_km = {spacing_km!r} must be a positive number of km")
    geod = Geod(ellps="WGS84")
    segs: list[tuple[float, float, float, float]] = []  # lon, lat, azimuth, length_m
    for (lo0, la0), (lo1, la1) in itertools.pairwise(pts):
        az, _, dist = geod.inv(lo0, la0, lo1, la1)
        if dist <= 0.0:
            raise InputDataError(
                f"polyline repeats the point (lon {lo0:g}, lat {la0:g}); remove the repeat"
            )
        segs.append((lo0, la0, az, dist))
    total_m = sum(seg[3] for seg in segs)
    spacing_m = 1000.0 * float(spacing_km)

    def at(s: float) -> tuple[float, float, float]:
        """Position and forward azimuth at arc length ``s`` along the polyline."""
        for j, (lo, la, az, dist) in enumerate(segs):
            if s <= dist or j == len(segs) - 1:
                lon, lat, back = geod.fwd(lo, la, az, min(max(s, 0.0), dist))
                return float(lon), float(lat), float((back + 180.0) % 360.0)
            s -= dist
        raise AssertionError("unreachable")  # pragma: no cover

    def chord(p: tuple[float, float, float], s: float) -> float:
        q = at(s)
        return float(geod.inv(p[0], p[1], q[0], q[1])[2])

    def walk(s0: float) -> list[float]:
        """Arc lengths of the centres, the first at ``s0``."""
        out = [s0]
        step = spacing_m / 16.0
        while True:
            p = at(out[-1])
            lo, hi = out[-1], None
            s = out[-1]
            while s < total_m:
                s_next = min(s + step, total_m)
                if chord(p, s_next) >= spacing_m:
                    lo, hi = s, s_next
                    break
                s = s_next
            if hi is None:
                return out
            for _ in range(60):  # bisection to well below a millimetre
                mid = 0.5 * (lo + hi)
                if chord(p, mid) >= spacing_m:
                    hi = mid
                else:
                    lo = mid
            out.append(hi)

    arcs = walk(0.0)
    n = len(arcs)
    s0 = 0.0
    for _ in range(8):  # balance the two ends; keep the number of centres
        gap_end = total_m - arcs[-1]
        trial_s0 = 0.5 * (s0 + gap_end) if abs(gap_end - s0) > 1.0 else s0
        if trial_s0 == s0:
            break
        trial = walk(trial_s0)
        if len(trial) != n:
            break
        s0, arcs = trial_s0, trial
    return [at(s) for s in arcs], total_m / 1000.0


# ---------------------------------------------------------------------------
# Small checks shared with the command line
# ---------------------------------------------------------------------------


def check_executor(value: Any) -> str | None:
    """None if ``value`` names an executor, else the reason and fix.

    The same rule as :func:`ttmap.jobs.batch.check_executor`, with a suggestion.

    >>> check_executor("local") is None, check_executor("tcp://10.0.0.5:8786") is None
    (True, True)
    >>> check_executor("lokal").endswith("; did you mean 'local'?")
    True
    """
    from ttmap.jobs.batch import check_executor as _batch_check

    problem = _batch_check(value)
    if problem is None:
        return None
    if isinstance(value, str):
        close = difflib.get_close_matches(value, list(EXECUTORS), n=1, cutoff=0.6)
        if close:
            problem += f"; did you mean {close[0]!r}?"
    return problem


def _suggest(word: str, choices: Sequence[str]) -> str:
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    if close:
        return f"; did you mean {close[0]!r}?"
    return "; choose one of: " + ", ".join(choices)


def _describe(value: Any) -> str:
    if isinstance(value, bool):
        return f"a boolean ({str(value).lower()})"
    if isinstance(value, int):
        return f"a whole number ({value})"
    if isinstance(value, float):
        return f"a number ({value:g})"
    if isinstance(value, str):
        return f"text {value!r}"
    if isinstance(value, list):
        return f"an array of {len(value)} item(s)"
    if isinstance(value, dict):
        return "a table"
    return f"a {type(value).__name__}"


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


# ---------------------------------------------------------------------------
# The loader: collects issues instead of stopping at the first
# ---------------------------------------------------------------------------


class _Loader:
    def __init__(self, path: str | os.PathLike[str]) -> None:
        self.given = str(path)
        self.path = Path(path)
        self.folder = self.path.resolve().parent
        self.issues: list[ScenarioIssue] = []
        self.lines: dict[KeyPath, int] = {}
        self.grid: Any = None  # ttmap.grid.Grid of the raster, when it could be opened
        self.grid_info: GridInfo | None = None
        self._raster_band: int | None = None
        self._crop: tuple[Any, Any] = (None, None)

    # -- reporting
    def line_of(self, path: KeyPath) -> int | None:
        p = tuple(path)
        while p:
            if p in self.lines:
                return self.lines[p]
            p = p[:-1]
        return None

    def err(self, path: KeyPath, message: str, line: int | None = None) -> None:
        self.issues.append(
            ScenarioIssue(self.given, line or self.line_of(path), format_key_path(path), message)
        )

    # -- typed getters; each returns None after recording an issue
    def table(
        self, data: Mapping[str, Any], key: str, path: KeyPath, *, required: bool, hint: str = ""
    ) -> dict[str, Any] | None:
        if key not in data:
            if required:
                self.err(path, f"missing required table [{key}]; add it{hint}")
            return None
        value = data[key]
        if not isinstance(value, dict):
            self.err(
                path,
                f"must be a table, got {_describe(value)}; write it as [{key}] with keys below it",
            )
            return None
        return value

    def known_keys(self, tbl: Mapping[str, Any], allowed: Sequence[str], path: KeyPath) -> None:
        for key in tbl:
            if key not in allowed:
                self.err(path + (key,), f"unknown key {key!r}" + _suggest(key, allowed))

    def number(
        self,
        tbl: Mapping[str, Any],
        key: str,
        path: KeyPath,
        *,
        required: bool = False,
        what: str = "",
        positive: bool = False,
        integer: bool = False,
        lo: float | None = None,
        hi: float | None = None,
    ) -> float | None:
        p = path + (key,)
        if key not in tbl:
            if required:
                self.err(
                    path,
                    f"missing required key {key!r}{' (' + what + ')' if what else ''}; add "
                    f"{key} = ...",
                )
            return None
        v = tbl[key]
        kind = "a whole number" if integer else "a number"
        hint = (
            f"; write it without quotes: {key} = {v}" if isinstance(v, str) and _parses(v) else ""
        )
        if integer and not (isinstance(v, int) and not isinstance(v, bool)):
            self.err(p, f"must be {kind}, got {_describe(v)}{hint or f'; write e.g. {key} = 2'}")
            return None
        if not _is_number(v):
            self.err(
                p, f"must be {kind}{' (' + what + ')' if what else ''}, got {_describe(v)}{hint}"
            )
            return None
        f = float(v)
        if not math.isfinite(f):
            self.err(p, f"{key} = {v} is not finite; give a finite number")
            return None
        if positive and f <= 0:
            self.err(p, f"{key} = {v:g} must be greater than 0; give a positive value")
            return None
        if (lo is not None and f < lo) or (hi is not None and f > hi):
            self.err(p, f"{key} = {v:g} is outside {lo:g} to {hi:g}; give a value in that range")
            return None
        return f

    def boolean(self, tbl: Mapping[str, Any], key: str, path: KeyPath, default: bool) -> bool:
        if key not in tbl:
            return default
        v = tbl[key]
        if not isinstance(v, bool):
            self.err(path + (key,), f"must be true or false (no quotes), got {_describe(v)}")
            return default
        return v

    def text(
        self,
        tbl: Mapping[str, Any],
        key: str,
        path: KeyPath,
        *,
        required: bool = False,
        choices: Sequence[str] | None = None,
        what: str = "",
    ) -> str | None:
        if key not in tbl:
            if required:
                self.err(
                    path,
                    f"missing required key {key!r}{' (' + what + ')' if what else ''}; add "
                    f'{key} = "..."',
                )
            return None
        v = tbl[key]
        if not isinstance(v, str):
            self.err(path + (key,), f"must be text in quotes, got {_describe(v)}")
            return None
        if choices is not None and v not in choices:
            self.err(
                path + (key,),
                f"{key} = {v!r} is not one of {', '.join(choices)}" + _suggest(v, choices),
            )
            return None
        return v

    def existing_file(
        self, tbl: Mapping[str, Any], key: str, path: KeyPath, *, required: bool, what: str
    ) -> str | None:
        name = self.text(tbl, key, path, required=required, what=what)
        if name is None:
            return None
        full = (self.folder / name) if not Path(name).is_absolute() else Path(name)
        if not full.is_file():
            where = "" if Path(name).is_absolute() else f" (looked in {self.folder})"
            self.err(
                path + (key,),
                f"{what} {name!r} not found{where}; give a path relative to the scenario file's "
                "folder",
            )
            return None
        return str(full)

    def lonlat(
        self, value: Any, path: KeyPath, what: str = "[lon, lat]"
    ) -> tuple[float, float] | None:
        if not (isinstance(value, list) and len(value) == 2 and all(_is_number(v) for v in value)):
            self.err(
                path,
                f"must be {what}: two numbers in degrees, longitude first; got {_describe(value)}",
            )
            return None
        lon, lat = float(value[0]), float(value[1])
        if not (
            math.isfinite(lon) and math.isfinite(lat) and abs(lat) <= 90.0 and abs(lon) <= 540.0
        ):
            self.err(
                path,
                f"({lon:g}, {lat:g}) is not a longitude/latitude; give [lon, lat] with |lat| <= 90",
            )
            return None
        return lon, lat

    def bbox(
        self, tbl: Mapping[str, Any], key: str, path: KeyPath
    ) -> tuple[float, float, float, float] | None:
        if key not in tbl:
            return None
        v = tbl[key]
        if not (isinstance(v, list) and len(v) == 4 and all(_is_number(x) for x in v)):
            self.err(
                path + (key,),
                f"must be [west, south, east, north] (four numbers), got {_describe(v)}",
            )
            return None
        w, s, e, n = (float(x) for x in v)
        if not (w < e and s < n):
            self.err(
                path + (key,),
                f"[{w:g}, {s:g}, {e:g}, {n:g}] needs west < east and south < north; swap the "
                "values",
            )
            return None
        return w, s, e, n

    # -- sections
    def bathymetry(self, data: Mapping[str, Any]) -> BathymetrySettings | None:
        path: KeyPath = ("bathymetry",)
        tbl = self.table(
            data,
            "bathymetry",
            path,
            required=True,
            hint=' with at least path = "bathy.tif" (the raster)',
        )
        if tbl is None:
            return None
        self.known_keys(tbl, SECTION_KEYS["bathymetry"], path)
        file = self.existing_file(tbl, "path", path, required=True, what="bathymetry raster")
        band = self.number(tbl, "band", path, integer=True, positive=True)
        coarsen = self.number(tbl, "coarsen", path, integer=True, positive=True)
        depth_positive = self.boolean(tbl, "depth_positive", path, False)
        crop_ll = self.bbox(tbl, "crop_lonlat", path)
        crop_xy = self.bbox(tbl, "crop_xy", path)
        if crop_ll is not None and crop_xy is not None:
            self.err(path + ("crop_xy",), "give crop_lonlat or crop_xy, not both; remove one")
        if file is not None:
            self._open_raster(file, path, band, coarsen, crop_ll, crop_xy)
        if file is None:
            return None
        return BathymetrySettings(
            path=file,
            band=None if band is None else int(band),
            depth_positive=depth_positive,
            crop_lonlat=crop_ll,
            crop_xy=crop_xy if crop_ll is None else None,
            coarsen=1 if coarsen is None else int(coarsen),
        )


    def _check_memory(self, path: tuple[Any, ...], grid: Any, coarsen: float | None) -> None:
        """Refuse a grid whose solve would not fit in memory (crop window ignored: an upper bound)."""
        from affine import Affine

        from ttmap.errors import GridError
        from ttmap.grid import Grid
        from ttmap.memory import check_memory

        c = int(coarsen) if coarsen else 1
        if c < 1 or min(grid.rows // c, grid.cols // c) < 2:
            return
        try:
            coarse = Grid((grid.rows // c, grid.cols // c), grid.transform @ Affine.scale(c), grid.crs)
            check_memory(coarse)
        except InputDataError as err:
            self.err(path + ("coarsen",), str(err))
        except GridError:
            return
    def _open_raster(
        self,
        file: str,
        path: KeyPath,
        band: float | None,
        coarsen: float | None,
        crop_ll: tuple[float, ...] | None,
        crop_xy: tuple[float, ...] | None,
    ) -> None:
        import warnings

        import rasterio
        from rasterio.errors import NotGeoreferencedWarning, RasterioError

        from ttmap.errors import GridError
        from ttmap.grid import Grid

        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", NotGeoreferencedWarning)
                with rasterio.open(file) as src:
                    shape = (int(src.height), int(src.width))
                    transform, crs, count = src.transform, src.crs, int(src.count)
        except (RasterioError, OSError) as err:
            self.err(
                path + ("path",),
                f"{file!r} is not a raster GDAL can read ({err}); give a GeoTIFF or another "
                "GDAL raster",
            )
            return
        if crs is None:
            self.err(
                path + ("path",),
                f"raster {file!r} has no CRS; assign one (e.g. gdal_edit.py -a_srs EPSG:4326)",
            )
            return
        try:
            grid = Grid(shape, transform, crs.to_wkt())
        except GridError as err:
            self.err(path + ("path",), str(err))
            return
        self._check_memory(path, grid, coarsen)
        if band is not None and band > count:
            self.err(
                path + ("band",),
                f"band = {int(band)} but {Path(file).name!r} has {count} band(s); choose 1 to "
                f"{count}",
            )
        elif band is None and count > 1:
            self.err(
                path,
                f"raster {Path(file).name!r} has {count} bands; choose one with band = N (1 to "
                f"{count})",
            )
        if coarsen is not None and min(shape[0] // int(coarsen), shape[1] // int(coarsen)) < 2:
            self.err(
                path + ("coarsen",),
                f"coarsen = {int(coarsen)} leaves fewer than 2 x 2 of the {shape[0]} x "
                f"{shape[1]} cells; use a smaller factor",
            )
        self.grid = grid
        code = grid.crs.to_epsg()
        self.grid_info = GridInfo(
            shape=shape,
            bounds=tuple(float(b) for b in grid.bounds),  # type: ignore[arg-type]
            crs=f"EPSG:{code}" if code else (grid.crs.name or "custom CRS"),
            is_geographic=grid.is_geographic,
            band_count=count,
        )
        self._raster_band = int(band) if band is not None and band <= count else 1
        self._crop = (crop_ll, crop_xy)
        # A window that misses the grid is found here, before any solve.
        gw, gs, ge, gn = grid.bounds
        for key, box in (("crop_lonlat", crop_ll), ("crop_xy", crop_xy)):
            if box is None:
                continue
            w, s, e, n = box
            if key == "crop_lonlat" and not grid.is_geographic:
                edge = [(w + (e - w) * f, s) for f in _STEPS] + [
                    (w + (e - w) * f, n) for f in _STEPS
                ]
                edge += [(w, s + (n - s) * f) for f in _STEPS] + [
                    (e, s + (n - s) * f) for f in _STEPS
                ]
                xy = [p for p in (self._to_grid(lo, la) for lo, la in edge) if p is not None]
                if not xy:
                    w = s = e = n = math.nan
                else:
                    w, e = min(p[0] for p in xy), max(p[0] for p in xy)
                    s, n = min(p[1] for p in xy), max(p[1] for p in xy)
            shifts = (-360.0, 0.0, 360.0) if grid.is_geographic else (0.0,)
            overlaps = s < gn and n > gs and any(w + k < ge and e + k > gw for k in shifts)
            if not overlaps:
                self.err(
                    path + (key,),
                    f"window {list(box)} misses the grid ({self.grid_info.bounds_text()}); "
                    "choose a window that overlaps it",
                )

    def _to_grid(
        self, lon: float, lat: float, *, lonlat: bool = True
    ) -> tuple[float, float] | None:
        """Map coordinates of a lon/lat position in the raster's CRS (None if not transformable)."""
        if not lonlat or self.grid.is_geographic:
            return lon, lat
        from pyproj import Transformer
        from pyproj.exceptions import CRSError, ProjError

        try:
            tr = Transformer.from_crs("EPSG:4326", self.grid.crs, always_xy=True)
            x, y = tr.transform(lon, lat, errcheck=True)
        except (CRSError, ProjError):
            return None
        if not (math.isfinite(x) and math.isfinite(y)):
            return None
        return float(x), float(y)

    def inside(self, lon: float, lat: float) -> bool:
        """True if (lon, lat) lies in the grid and the crop window (or nothing is known)."""
        if self.grid is None:
            return True
        xy = self._to_grid(lon, lat)
        if xy is None or not bool(self.grid.contains(*xy)):
            return False
        crop_ll, crop_xy = self._crop
        if crop_ll is not None:
            w, s, e, n = crop_ll
            return s <= lat <= n and any(w <= lon + k <= e for k in (-360.0, 0.0, 360.0))
        if crop_xy is not None:
            w, s, e, n = crop_xy
            return w <= xy[0] <= e and s <= xy[1] <= n
        return True

    def bounds_text(self) -> str:
        text = self.grid_info.bounds_text() if self.grid_info else "unknown bounds"
        crop_ll, crop_xy = self._crop
        if crop_ll is not None:
            text += f"; crop_lonlat {list(crop_ll)}"
        elif crop_xy is not None:
            text += f"; crop_xy {list(crop_xy)}"
        return text

    def check_inside(self, lon: float, lat: float, path: KeyPath, what: str) -> bool:
        """Record an issue if (lon, lat) lies outside the grid or the crop window."""
        if self.inside(lon, lat):
            return True
        xy = self._to_grid(lon, lat)
        in_grid = xy is not None and bool(self.grid.contains(*xy))
        if in_grid:
            crop_ll, crop_xy = self._crop
            key, box = ("crop_lonlat", crop_ll) if crop_ll is not None else ("crop_xy", crop_xy)
            self.err(
                path,
                f"{what} at (lon {lon:g}, lat {lat:g}) lies outside the crop window "
                f"{key} = {list(box)}; move it inside or widen the window",
            )
        else:
            self.err(
                path,
                f"{what} at (lon {lon:g}, lat {lat:g}) lies outside the grid "
                f"({self.bounds_text()}); move it inside or use a larger bathymetry",
            )
        return False

    def check_water(
        self, lon: float, lat: float, path: KeyPath, depth_positive: bool, bathy: str
    ) -> None:
        """Record an issue if a point source's raster cell is land or nodata."""
        import rasterio
        from rasterio.errors import RasterioError
        from rasterio.windows import Window

        xy = self._to_grid(lon, lat)
        if xy is None or self.grid is None:
            return
        row, col = (int(v) for v in self.grid.rowcol(*xy))
        try:
            with rasterio.open(bathy) as src:
                band = self._raster_band or 1
                win = Window(col, row, 1, 1)
                value = float(src.read(band, window=win, masked=True).filled(math.nan)[0, 0])
        except (RasterioError, OSError, ValueError):  # reading problems are reported by the solve
            return
        if not math.isfinite(value):
            self.err(
                path,
                f"source at (lon {lon:g}, lat {lat:g}) lies on a nodata cell of the bathymetry; "
                "move it into the water or set snap_radius_km",
            )
            return
        water = value > 0 if depth_positive else value < 0
        if not water:
            label = f"depth {value:g} m" if depth_positive else f"elevation {value:g} m"
            self.err(
                path,
                f"source at (lon {lon:g}, lat {lat:g}) lies on land ({label} in the "
                "bathymetry); move it offshore or set snap_radius_km to move it to the nearest "
                "open water",
            )

    def speed(self, data: Mapping[str, Any]) -> SpeedSettings:
        path: KeyPath = ("speed",)
        tbl = self.table(data, "speed", path, required=False) or {}
        self.known_keys(tbl, SECTION_KEYS["speed"], path)
        floor = self.number(tbl, "floor_depth_m", path, positive=True)
        far = self.boolean(tbl, "far_field", path, False)
        earth = self.text(tbl, "earth", path, choices=EARTH_MODELS)
        mode = self.text(tbl, "period_speed", path, choices=PERIOD_SPEEDS)
        periods: list[float] = []
        if "periods_s" in tbl:
            v = tbl["periods_s"]
            if _is_number(v):
                self.err(
                    path + ("periods_s",),
                    f"must be an array of periods in seconds, got {_describe(v)}; write "
                    f"periods_s = [{v}]",
                )
            elif not isinstance(v, list):
                self.err(
                    path + ("periods_s",),
                    f"must be an array of periods in seconds, e.g. [300, 600], got {_describe(v)}",
                )
            else:
                for i, p in enumerate(v):
                    pp = path + ("periods_s", i)
                    if not _is_number(p):
                        self.err(pp, f"period must be a number of seconds, got {_describe(p)}")
                    elif not (math.isfinite(p) and p > 0):
                        self.err(
                            pp,
                            f"period {p:g} s must be positive and finite; give the wave period "
                            "in seconds, e.g. 600",
                        )
                    elif float(p) in periods:
                        self.err(pp, f"period {p:g} s is listed twice; give each period once")
                    else:
                        periods.append(float(p))
        return SpeedSettings(
            floor_depth_m=FLOOR_DEPTH_M if floor is None else floor,
            far_field=far,
            earth=earth or "wgs84",
            periods_s=tuple(periods),
            period_speed=mode or "group",
        )

    def common_limits(
        self, tbl: Mapping[str, Any], path: KeyPath
    ) -> tuple[float | None, float | None]:
        h = self.number(tbl, "max_time_h", path, positive=True)
        r = self.number(tbl, "snap_radius_km", path, positive=True)
        return (None if h is None else h * 3600.0), (None if r is None else r * 1000.0)

    def name(self, tbl: Mapping[str, Any], key: str, path: KeyPath, what: str) -> str | None:
        name = self.text(tbl, key, path, required=True, what=what)
        if name is not None and not _NAME_RE.match(name):
            self.err(
                path + (key,),
                f"{key} = {name!r} must be 1-64 letters, digits, '_', '-' or '.', starting with "
                "a letter or digit (it names the output files); rename it",
            )
            return None
        return name

    def mw(self, tbl: Mapping[str, Any], path: KeyPath, *, required: bool) -> float | None:
        v = self.number(tbl, "mw", path, required=required, what="moment magnitude")
        if v is not None and not (MW_MIN <= v <= MW_MAX):
            self.err(
                path + ("mw",),
                f"Mw {v:g} is outside {MW_MIN:.1f} to {MW_MAX:.1f}, the range of the scaling "
                "relations; "
                "give a magnitude in that range",
            )
            return None
        return v

    def scaling_law(self, tbl: Mapping[str, Any], path: KeyPath) -> str | None:
        if "scaling_law" not in tbl:
            return SCALING_RELATION
        return self.text(tbl, "scaling_law", path, choices=tuple(SCALING_RELATIONS))

    def scenario(self, tbl: Any, i: int, bathy: BathymetrySettings | None) -> ScenarioSpec | None:
        path: KeyPath = ("scenario", i)
        if not isinstance(tbl, dict):
            self.err(
                path, f"must be a table, got {_describe(tbl)}; write each scenario as [[scenario]]"
            )
            return None
        self.known_keys(tbl, SECTION_KEYS["scenario"], path)
        name = self.name(tbl, "name", path, "the scenario's name")
        max_t, snap = self.common_limits(tbl, path)
        forms = [k for k in _SOURCE_FORMS if k in tbl]
        if len(forms) != 1:
            have = ", ".join(forms) if forms else "none"
            self.err(
                path,
                "give exactly one source: point = [lon, lat], rupture = {...} or source_file "
                f'= "..." (found: {have})',
            )
            return None
        form = forms[0]
        label = name or ""
        source: Source | None = None
        source_file: str | None = None
        if form == "point":
            ll = self.lonlat(tbl["point"], path + ("point",))
            if ll is not None and self.check_inside(*ll, path + ("point",), "point source"):
                if snap is None and bathy is not None:
                    self.check_water(*ll, path + ("point",), bathy.depth_positive, bathy.path)
                source = Source.point(*ll, label=f"{label}: point (lon {ll[0]:g}, lat {ll[1]:g})")
        elif form == "rupture":
            source = self.rupture(tbl["rupture"], path + ("rupture",), label)
        else:
            if "source_layer" in tbl:
                self.text(tbl, "source_layer", path)
            source, source_file = self.source_file(tbl, path, label)
        if "source_layer" in tbl and form != "source_file":
            self.err(path + ("source_layer",), "source_layer belongs with source_file; remove it")
        if name is None or source is None:
            return None
        return ScenarioSpec(
            name=name,
            source=source,
            origin=format_key_path(path),
            line=self.line_of(path),
            max_time_s=max_t,
            snap_radius_m=snap,
            source_file=source_file,
        )

    def rupture(self, tbl: Any, path: KeyPath, label: str) -> Source | None:
        if not isinstance(tbl, dict):
            self.err(
                path,
                "must be a table such as {centre = [lon, lat], strike_deg = 10, mw = 8.0}, "
                f"got {_describe(tbl)}",
            )
            return None
        self.known_keys(tbl, RUPTURE_KEYS, path)
        centre = None
        if "centre" not in tbl:
            self.err(
                path,
                "missing required key 'centre' ([lon, lat] of the rectangle's centre); add "
                "centre = [lon, lat]",
            )
        else:
            centre = self.lonlat(tbl["centre"], path + ("centre",))
        strike = self.number(
            tbl,
            "strike_deg",
            path,
            required=True,
            what="azimuth of the long side, degrees clockwise from north",
        )
        sized = [k for k in ("length_km", "width_km") if k in tbl]
        by_mw = [k for k in ("mw", "scaling_law") if k in tbl]
        if sized and by_mw:
            self.err(
                path,
                "give either mw (with an optional scaling_law) or length_km and width_km, not "
                f"both (found {', '.join(sized + by_mw)})",
            )
            return None
        if not sized and "mw" not in tbl:
            self.err(
                path,
                "missing the size: give mw = ... (sized by a scaling law) or both length_km and "
                "width_km",
            )
            return None
        ok_inside = centre is not None and self.check_inside(
            *centre, path + ("centre",), "rupture centre"
        )
        if sized:
            length = self.number(
                tbl, "length_km", path, required=True, positive=True, what="along-strike length"
            )
            width = self.number(
                tbl, "width_km", path, required=True, positive=True, what="across-strike width"
            )
            if centre is None or strike is None or length is None or width is None or not ok_inside:
                return None
            return Source.rupture(
                *centre,
                strike_deg=strike,
                length_km=length,
                width_km=width,
                label=f"{label}: rupture {length:g} x {width:g} km",
            )
        mw = self.mw(tbl, path, required=True)
        law = self.scaling_law(tbl, path)
        if centre is None or strike is None or mw is None or law is None or not ok_inside:
            return None
        src = Source.rupture_from_magnitude(*centre, strike_deg=strike, mw=mw, relation=law)
        return Source(src.geometry, src.crs, src.kind, f"{label}: {src.label}", src.params)

    def source_file(
        self, tbl: Mapping[str, Any], path: KeyPath, label: str
    ) -> tuple[Source | None, str | None]:
        import shapely
        from shapely import affinity

        from ttmap.io.vector import read_vector_geometries

        file = self.existing_file(tbl, "source_file", path, required=True, what="source file")
        if file is None:
            return None, None
        layer = tbl.get("source_layer") if isinstance(tbl.get("source_layer"), str) else None
        try:
            geoms, crs = read_vector_geometries(file, layer)
            geom = shapely.union_all([g for g in geoms if g is not None])
            src = Source.from_geometry(
                geom, crs=crs, label=f"{label}: source from {Path(file).name}"
            )
        except TtmapError as err:
            self.err(path + ("source_file",), str(err))
            return None, None
        if self.grid is not None:
            gcrs = self.grid.crs
            from pyproj.exceptions import CRSError, ProjError

            try:
                g = src.in_crs(gcrs)
            except (CRSError, ProjError) as err:
                self.err(
                    path + ("source_file",),
                    f"source geometry cannot be carried to the grid's CRS ({err}); check the "
                    "file's CRS",
                )
                return None, None
            box = shapely.box(*self.grid.bounds)
            if self.grid.is_geographic:
                hits = any(
                    shapely.intersects(affinity.translate(g, xoff=k * 360.0), box)
                    for k in (-1, 0, 1)
                )
            else:
                hits = bool(shapely.intersects(g, box))
            if not hits:
                self.err(
                    path + ("source_file",),
                    f"source geometry (bounds {tuple(round(b, 4) for b in g.bounds)}) lies "
                    f"outside the grid ({self.bounds_text()}); check its coordinates and CRS",
                )
                return None, None
        return src, file

    def trench(self, tbl: Any, i: int) -> tuple[TrenchSpec, list[ScenarioSpec]] | None:
        path: KeyPath = ("trench", i)
        if not isinstance(tbl, dict):
            self.err(
                path, f"must be a table, got {_describe(tbl)}; write each trench as [[trench]]"
            )
            return None
        self.known_keys(tbl, SECTION_KEYS["trench"], path)
        prefix = self.name(tbl, "name_prefix", path, "prefix of the generated scenario names")
        spacing = self.number(
            tbl,
            "spacing_km",
            path,
            required=True,
            positive=True,
            what="distance between rupture centres",
        )
        mw = self.mw(tbl, path, required=True)
        law = self.scaling_law(tbl, path)
        max_t, snap = self.common_limits(tbl, path)
        pts: list[tuple[float, float]] | None = None
        if "polyline" not in tbl:
            self.err(
                path,
                "missing required key 'polyline' (the line the rupture centres lie on); add "
                "polyline = [[lon, lat], [lon, lat], ...]",
            )
        else:
            v = tbl["polyline"]
            if not isinstance(v, list) or len(v) < 2:
                self.err(
                    path + ("polyline",),
                    f"must be an array of at least two [lon, lat] points, got {_describe(v)}",
                )
            else:
                got = [self.lonlat(p, path + ("polyline", k)) for k, p in enumerate(v)]
                if all(g is not None for g in got):
                    pts = [g for g in got if g is not None]
                    for k in range(1, len(pts)):
                        if pts[k] == pts[k - 1]:
                            self.err(
                                path + ("polyline", k),
                                f"point {list(pts[k])} repeats the one before it; remove it",
                            )
                            pts = None
                            break
        if prefix is None or spacing is None or mw is None or law is None or pts is None:
            return None
        centres, total_km = trench_centres(pts, spacing)
        if len(centres) > MAX_TRENCH_RUPTURES:
            self.err(
                path + ("spacing_km",),
                f"spacing_km = {spacing:g} gives {len(centres)} ruptures along the "
                f"{total_km:.0f} km polyline, more than {MAX_TRENCH_RUPTURES}; give a larger "
                "spacing",
            )
            return None
        length, width = rupture_size_km(mw, law)
        specs: list[ScenarioSpec] = []
        digits = 2 if len(centres) < 100 else 3
        outside = [
            f"{prefix}-{k + 1:0{digits}d} (lon {lon:.3f}, lat {lat:.3f})"
            for k, (lon, lat, _) in enumerate(centres)
            if not self.inside(lon, lat)
        ]
        if outside:
            self.err(
                path + ("polyline",),
                f"the centres of generated rupture(s) {', '.join(outside)} lie outside the grid "
                f"or crop window ({self.bounds_text()}); shorten the polyline or move it inside",
            )
            return None
        for k, (lon, lat, strike) in enumerate(centres):
            name = f"{prefix}-{k + 1:0{digits}d}"
            src = Source.rupture_from_magnitude(lon, lat, strike_deg=strike, mw=mw, relation=law)
            params = dict(src.params, trench=prefix, along_trench_index=k + 1)
            src = Source(src.geometry, src.crs, src.kind, f"{name}: {src.label}", params)
            specs.append(
                ScenarioSpec(
                    name=name,
                    source=src,
                    origin=format_key_path(path),
                    line=self.line_of(path),
                    max_time_s=max_t,
                    snap_radius_m=snap,
                    trench=prefix,
                )
            )
        spec = TrenchSpec(
            name_prefix=prefix,
            polyline=tuple(pts),
            spacing_km=spacing,
            mw=mw,
            scaling_law=law,
            length_km=length,
            width_km=width,
            scenario_names=tuple(s.name for s in specs),
            polyline_length_km=total_km,
        )
        return spec, specs

    def sites(self, data: Mapping[str, Any]) -> tuple[str | None, int | None]:
        path: KeyPath = ("sites",)
        tbl = self.table(data, "sites", path, required=False)
        if tbl is None:
            return None, None
        self.known_keys(tbl, SECTION_KEYS["sites"], path)
        file = self.existing_file(tbl, "path", path, required=True, what="site file")
        if file is None:
            return None, None
        if file.lower().endswith(".csv"):
            try:
                with open(file, newline="", encoding="utf-8-sig") as fh:
                    rows = list(csv.reader(fh))
            except (OSError, UnicodeDecodeError) as err:
                self.err(
                    path + ("path",),
                    f"site file {Path(file).name!r} cannot be read ({err}); give a UTF-8 CSV",
                )
                return None, None
            header = [h.strip().lower() for h in rows[0]] if rows else []
            missing = [c for c in ("name", "lon", "lat") if c not in header]
            if missing:
                self.err(
                    path + ("path",),
                    f"site file {Path(file).name!r} lacks the column(s) {', '.join(missing)} "
                    f"(found: {', '.join(header) or 'none'}); add a header row name,lon,lat",
                )
                return None, None
            return file, sum(1 for r in rows[1:] if any(c.strip() for c in r))
        try:
            from ttmap.io.vector import read_vector_points

            names = read_vector_points(file)[0]
        except TtmapError as err:
            self.err(path + ("path",), str(err))
            return None, None
        return file, len(names)

    def outputs(
        self, data: Mapping[str, Any], names: Sequence[str], unknown_prefixes: tuple[str, ...] = ()
    ) -> OutputSettings:
        path: KeyPath = ("outputs",)
        tbl = self.table(data, "outputs", path, required=False) or {}
        self.known_keys(tbl, SECTION_KEYS["outputs"], path)
        folder = self.text(tbl, "folder", path)
        if folder is None:
            folder_path = self.folder / f"{self.path.stem}_out"
        else:
            folder_path = Path(folder) if Path(folder).is_absolute() else self.folder / folder
            if folder_path.exists() and not folder_path.is_dir():
                self.err(
                    path + ("folder",),
                    f"{folder!r} exists and is not a folder; choose another output folder",
                )
        envelope = self.boolean(tbl, "envelope", path, True)
        executor = None
        if "executor" in tbl:
            problem = check_executor(tbl["executor"])
            if problem:
                self.err(path + ("executor",), problem)
            else:
                executor = tbl["executor"]
        workers = self.number(tbl, "workers", path, integer=True, positive=True)
        pairs: list[tuple[str, str]] = []
        if "compare" in tbl:
            v = tbl["compare"]
            if not isinstance(v, list):
                self.err(
                    path + ("compare",),
                    f'must be an array of ["a", "b"] name pairs, got {_describe(v)}',
                )
            else:
                known = set(names)
                for k, pair in enumerate(v):
                    pp = path + ("compare", k)
                    if not (
                        isinstance(pair, list)
                        and len(pair) == 2
                        and all(isinstance(x, str) for x in pair)
                    ):
                        self.err(
                            pp,
                            f'must be a pair of scenario names ["a", "b"], got {_describe(pair)}',
                        )
                        continue
                    a, b = pair
                    if a == b:
                        self.err(pp, f"compares {a!r} with itself; name two different scenarios")
                        continue
                    bad = False
                    for x in (a, b):
                        if x not in known and unknown_prefixes and x.startswith(unknown_prefixes):
                            bad = True  # from a [[trench]] with problems of its own
                        elif x not in known:
                            self.err(
                                pp, f"no scenario is called {x!r}" + _suggest(x, sorted(known))
                            )
                            bad = True
                    if not bad:
                        if (a, b) in pairs:
                            self.err(pp, f"the pair [{a!r}, {b!r}] is listed twice; give it once")
                        else:
                            pairs.append((a, b))
        return OutputSettings(
            folder=str(folder_path),
            compare=tuple(pairs),
            envelope=envelope,
            executor=executor,
            workers=None if workers is None else int(workers),
        )


def _parses(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _load(path: str | os.PathLike[str]) -> tuple[ScenarioFile | None, list[ScenarioIssue]]:
    ld = _Loader(path)
    given = str(path)
    try:
        raw = Path(path).read_bytes()
    except OSError as err:
        reason = (
            "not found"
            if isinstance(err, FileNotFoundError)
            else f"cannot be read ({err.strerror})"
        )
        return None, [ScenarioIssue(given, None, "", f"scenario file {reason}; check the path")]
    try:
        text = raw.decode("utf-8")
        data = tomllib.loads(text)
    except UnicodeDecodeError:
        return None, [
            ScenarioIssue(given, None, "", "scenario file is not UTF-8 text; save it as UTF-8")
        ]
    except tomllib.TOMLDecodeError as err:
        msg = str(err)
        m = re.search(r"\(at line (\d+), column \d+\)", msg)
        line = int(m.group(1)) if m else None
        msg = re.sub(r"\s*\(at (line \d+, column \d+|end of document)\)", "", msg)
        return None, [
            ScenarioIssue(given, line, "", f"not valid TOML: {msg}; fix the syntax there")
        ]
    ld.lines = locate_keys(text)

    for key in data:
        if key not in SECTION_KEYS:
            ld.err((key,), f"unknown table or key {key!r}" + _suggest(key, tuple(SECTION_KEYS)))
    bathy = ld.bathymetry(data)
    speed = ld.speed(data)
    specs: list[ScenarioSpec] = []
    trenches: list[TrenchSpec] = []
    for name in ("scenario", "trench"):
        if name in data and not isinstance(data[name], list):
            ld.err(
                (name,),
                f"must be written as [[{name}]] (an array of tables), got {_describe(data[name])}",
            )
    scen_tables = data.get("scenario", []) if isinstance(data.get("scenario"), list) else []
    trench_tables = data.get("trench", []) if isinstance(data.get("trench"), list) else []
    names_seen: dict[str, str] = {}
    for i, tbl in enumerate(scen_tables):
        spec = ld.scenario(tbl, i, bathy)
        sc_name = tbl.get("name") if isinstance(tbl, dict) else None
        if isinstance(sc_name, str) and _NAME_RE.match(sc_name) is not None:
            if sc_name in names_seen:
                ld.err(
                    ("scenario", i, "name"),
                    f"scenario name {sc_name!r} is already used by {names_seen[sc_name]}; give "
                    "each scenario its own name",
                )
                continue
            names_seen[sc_name] = (
                f"{format_key_path(('scenario', i))} (line {ld.line_of(('scenario', i, 'name'))})"
            )
        if spec is not None:
            specs.append(spec)
    failed_prefixes: list[str] = []
    for i, tbl in enumerate(trench_tables):
        got = ld.trench(tbl, i)
        if got is None:
            prefix = tbl.get("name_prefix") if isinstance(tbl, dict) else None
            if isinstance(prefix, str):
                failed_prefixes.append(prefix + "-")  # its names are not known: no follow-on errors
            continue
        tspec, generated = got
        clash = [s.name for s in generated if s.name in names_seen]
        if clash:
            ld.err(
                ("trench", i, "name_prefix"),
                f"generated name(s) {', '.join(clash)} already used by {names_seen[clash[0]]}; "
                "choose another name_prefix",
            )
            continue
        for s in generated:
            names_seen[s.name] = (
                f"{format_key_path(('trench', i))} (line {ld.line_of(('trench', i))})"
            )
        trenches.append(tspec)
        specs.extend(generated)
    if not scen_tables and not trench_tables:
        ld.err((), "no scenarios: add at least one [[scenario]] or [[trench]] table")
    sites_path, sites_count = ld.sites(data)
    outputs = ld.outputs(data, list(names_seen), tuple(failed_prefixes))
    if ld.issues or bathy is None or ld.grid_info is None:
        if not ld.issues:  # pragma: no cover - every path to None records an issue
            ld.err(("bathymetry",), "the bathymetry could not be opened; check [bathymetry] path")
        ld.issues.sort(key=lambda s: s.line or 0)
        return None, ld.issues
    sf = ScenarioFile(
        path=str(Path(path).resolve()),
        sha256=hashlib.sha256(raw).hexdigest(),
        bathymetry=bathy,
        speed=speed,
        scenarios=tuple(specs),
        trenches=tuple(trenches),
        sites_path=sites_path,
        sites_count=sites_count,
        outputs=outputs,
        grid=ld.grid_info,
    )
    return sf, []


def validate(path: str | os.PathLike[str]) -> list[ScenarioIssue]:
    """Check a scenario file completely; return its problems (empty when valid).

    Nothing is solved and no output is written. The bathymetry raster is only
    opened for its size, bounds and CRS (and one value under each point source).

    Parameters
    ----------
    path : path-like
        The TOML file.

    Returns
    -------
    list of ScenarioIssue
        In file order; ``str(issue)`` is ``FILE:LINE: KEY.PATH: message; fix``.
    """
    return _load(path)[1]


def load_scenario_file(path: str | os.PathLike[str]) -> ScenarioFile:
    """Read and validate a scenario file.

    Parameters
    ----------
    path : path-like
        The TOML file. Paths inside it are relative to its folder.

    Returns
    -------
    ScenarioFile

    Raises
    ------
    ScenarioFileError
        (an :class:`~ttmap.errors.InputDataError`) listing every problem,
        one per line, each with file, line, key path and fix.
    """
    sf, issues = _load(path)
    if issues or sf is None:
        raise ScenarioFileError(issues)
    return sf


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


# ---------------------------------------------------------------------------
# Summary text and the whole run
# ---------------------------------------------------------------------------


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
        f"{crop}{f', coarsened by {b.coarsen}' if b.coarsen > 1 else ''})"
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
        Passed to :func:`ttmap.jobs.batch.run_tasks`.
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

    from ttmap.jobs.batch import run_tasks
    from ttmap.io.atomic import atomic_output, check_writable
    from ttmap.io.raster import file_sha256
    from ttmap.jobs.record import software_versions
    from ttmap.products.cautions import CAUTION_SHORT

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
    failed = [{"name": s.name, "error": s.error} for s in summaries if not s.ok]

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

    def _file(path: str | None) -> dict[str, Any] | None:
        if path is None:
            return None
        return {"path": path, "sha256": file_sha256(path)}

    source_files = sorted({sc.source_file for sc in sf.scenarios if sc.source_file})
    record: dict[str, Any] = {
        "ttmap_record": "scenario run",
        "started_utc": started,
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
            "executor": ex,
            "workers": nw,
            "overwrite": overwrite,
            "resume": resume,
            "out_dir": str(out),
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
        "failed": failed,
        "products": products,
        "files_written": _files_written(products),
        "sites": sites_summary,
        "versions": software_versions(),
        "timings_s": {
            **({"validate": validate_s} if validate_s is not None else {}),
            "solve": solve_s,
            "compare": compare_s,
            "total": time.perf_counter() - t_start + (validate_s or 0.0),
        },
    }
    with atomic_output(run_json, overwrite=True) as tmp:
        Path(tmp).write_text(json.dumps(record, indent=2, default=_json_default) + "\n")
    record["run_json"] = str(run_json)
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
