"""Checking a scenario file completely before any solve.

:func:`load_scenario_file` parses the TOML text (:mod:`tomllib`), finds the
line of every key (:func:`ttmap.scenario.locator.locate_keys`) and checks
every table: types, ranges, names, sources inside the grid and in the water,
and the files it names. Every problem found becomes one
:class:`~ttmap.scenario.schema.ScenarioIssue`
(``FILE:LINE: KEY.PATH: what is wrong; how to fix it``), and all of them are
reported together in one :class:`~ttmap.scenario.schema.ScenarioFileError`.

The files are checked with the readers the run uses, so a check and a run
never disagree: the bathymetry through
:func:`ttmap.io.header.read_bathymetry_header` (its metadata only), the sites
through :func:`ttmap.io.sites.read_sites`, and source files through
:func:`ttmap.io.vector.read_vector_geometries`.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import math
import os
import re
import tomllib
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from ttmap.tasks import check_executor
from ttmap.defaults import (
    EARTH_MODELS,
    EXECUTORS,
    FLOOR_DEPTH_M,
    MAP_FORMATS,
    MAX_NOTIFICATION_DELAY_MIN,
    MAX_PERIOD_S,
    MAX_TIME_LIMIT_S,
    MAX_TRENCH_RUPTURES,
    MIN_PERIOD_S,
    PERIOD_SPEEDS,
    SCALING_RELATION,
    VECTOR_FORMATS,
)
from ttmap.errors import InputDataError, TtmapError
from ttmap.physics.scaling import MW_MAX, MW_MIN, SCALING_RELATIONS, rupture_size_km
from ttmap.scenario.locator import KeyPath, format_key_path, locate_keys
from ttmap.scenario.schema import (
    NAME_PATTERN,
    OPTION_KEYS,
    RUPTURE_KEYS,
    SECTION_KEYS,
    SOURCE_FORMS,
    TABLE_METHODS,
    BathymetrySettings,
    NestSettings,
    GridInfo,
    OutputSettings,
    ScenarioFile,
    ScenarioFileError,
    ScenarioIssue,
    ScenarioSpec,
    SpeedSettings,
    TrenchSpec,
)
from ttmap.scenario.trench import trench_centres
from ttmap.sources import Source

__all__ = ["did_you_mean", "load_scenario_file", "validate"]

_STEPS = tuple(k / 8.0 for k in range(9))


def did_you_mean(word: Any, choices: Sequence[str]) -> str:
    """``"; did you mean 'x'?"`` for the closest of ``choices``, or ``""`` when none is close.

    >>> did_you_mean("lokal", ("serial", "local"))
    "; did you mean 'local'?"
    >>> did_you_mean(3, ("serial", "local"))
    ''
    """
    if not isinstance(word, str):
        return ""
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


def _suggest(word: str, choices: Sequence[str]) -> str:
    return did_you_mean(word, choices) or "; choose one of: " + ", ".join(choices)


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
            rng = (f"below {lo:g}; give {lo:g} or more" if hi is None
                   else f"above {hi:g}; give {hi:g} or less" if lo is None
                   else f"outside {lo:g} to {hi:g}; give a value in that range")
            self.err(p, f"{key} = {v:g} is {rng}")
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
        refine = self.number(tbl, "refine", path, integer=True, positive=True)
        if refine is not None and coarsen is not None and int(refine) > 1 and int(coarsen) > 1:
            self.err(path + ("refine",), f"coarsen = {int(coarsen)} and refine = {int(refine)} cannot be "
                     "combined; keep one (coarsen to solve faster, refine to solve finer)")
        nodata = self.number(tbl, "nodata", path)
        depth_positive = self.boolean(tbl, "depth_positive", path, False)
        crop_ll = self.bbox(tbl, "crop_lonlat", path)
        crop_xy = self.bbox(tbl, "crop_xy", path)
        if crop_ll is not None and crop_xy is not None:
            self.err(path + ("crop_xy",), "give crop_lonlat or crop_xy, not both; remove one")
        if file is not None:
            self._open_raster(file, path, band, coarsen, crop_ll, crop_xy, nodata, refine)
        if file is None:
            return None
        return BathymetrySettings(
            path=file,
            band=None if band is None else int(band),
            depth_positive=depth_positive,
            crop_lonlat=crop_ll,
            crop_xy=crop_xy if crop_ll is None else None,
            coarsen=1 if coarsen is None else int(coarsen),
            nodata=None if nodata is None else float(nodata),
            refine=1 if refine is None else int(refine),
        )

    def nests(self, data: Mapping[str, Any], bathy: BathymetrySettings | None,
              specs: Sequence[ScenarioSpec]) -> tuple[NestSettings, ...]:
        """The ``[[nest]]`` tables: each a readable raster with water, inside the basin (and its
        crop window), not overlapping another, and not containing a scenario's source."""
        if "nest" not in data:
            return ()
        tables = data["nest"]
        if not isinstance(tables, list):
            self.err(("nest",), f"must be written as [[nest]] (an array of tables), got {_describe(tables)}")
            return ()
        out: list[NestSettings] = []
        grids: dict[str, Any] = {}
        seen: dict[str, int] = {}
        for i, tbl in enumerate(tables):
            path: KeyPath = ("nest", i)
            if not isinstance(tbl, dict):
                self.err(path, f"must be a table, got {_describe(tbl)}; write it as [[nest]] with path = \"...\"")
                continue
            self.known_keys(tbl, SECTION_KEYS["nest"], path)
            file = self.existing_file(tbl, "path", path, required=True, what="nest raster")
            if "name" in tbl:
                name = self.name(tbl, "name", path, "nest name")
            elif file is not None:
                name = _file_safe_stem(Path(file).stem)
                if name is None:
                    self.err(path + ("path",), f"the file name {Path(file).name!r} has no letter or digit "
                                               "to name the nest's rasters by; add name = \"...\"")
            else:
                name = None
            if name is None or file is None:
                continue
            if name in seen:
                self.err(path + ("name",) if "name" in tbl else path,
                         f"nest name {name!r} is already used by nest[{seen[name] + 1}] (line "
                         f"{self.line_of(('nest', seen[name]))}); give each nest its own name = \"...\"")
                continue
            seen[name] = i
            grid = self._nest_grid(file, name, path, bathy)
            if grid is None:
                continue
            grids[name] = grid
            out.append(NestSettings(name=name, path=file, line=self.line_of(path)))
        if self.grid is None or not grids:
            return tuple(out)
        self._nest_layout(grids, out, specs)
        return tuple(out)

    def _nest_grid(self, file: str, name: str, path: KeyPath, bathy: BathymetrySettings | None) -> Any:
        """The nest's grid after checking it reads and holds water (None after an issue)."""
        import numpy as np

        from ttmap.io.raster import read_bathymetry

        try:
            nb = read_bathymetry(file, band=None if bathy is None else bathy.band,
                                 depth_positive=False if bathy is None else bathy.depth_positive)
        except TtmapError as err:
            self.err(path + ("path",), f"nest {name!r}: {err}")
            return None
        with np.errstate(invalid="ignore"):
            wet = bool((np.asarray(nb.depth_m) > 0.0).any())
        if not wet:
            self.err(path + ("path",), f"nest {name!r} ({Path(file).name}) has no water (every cell is land "
                                       "or nodata); check its extent, or depth_positive in [bathymetry]")
            return None
        return nb.grid

    def _nest_layout(self, grids: Mapping[str, Any], nests: Sequence[NestSettings],
                     specs: Sequence[ScenarioSpec]) -> None:
        """Inside the basin and its crop window, no overlap, no scenario's source inside."""
        from ttmap.nesting import check_nests, nest_footprint

        index = {n.name: i for i, n in enumerate(nests)}
        good: dict[str, Any] = {}
        for name, g in grids.items():
            path: KeyPath = ("nest", index[name])
            try:
                check_nests(self.grid, {name: g})
                fp = nest_footprint(g, self.grid)
            except TtmapError as err:
                self.err(path + ("path",), str(err))
                continue
            if self._crop != (None, None) and not self._footprint_in_crop(fp):
                key, box = (("crop_lonlat", self._crop[0]) if self._crop[0] is not None
                            else ("crop_xy", self._crop[1]))
                self.err(path + ("path",), f"nest {name!r} reaches outside the crop window {key} = "
                                           f"{list(box)}; widen the window or crop the nest raster")
                continue
            good[name] = fp
            for sc in specs:
                try:
                    src = sc.source.in_crs(self.grid.crs)
                except Exception:  # noqa: BLE001 - a source that cannot be carried is reported elsewhere
                    continue
                if fp.intersects(src):
                    self.err(path + ("path",),
                             f"nest {name!r} contains the source of scenario {sc.name!r} ({sc.origin}, line "
                             f"{sc.line}); a nest is solved from the basin's times on its edge and cannot "
                             "start a wave inside it: use a nest that leaves the source outside, or "
                             "remove that scenario (run the nest raster as its own bathymetry for it)")
        names = list(good)
        for i, a in enumerate(names):
            for b in names[i + 1:]:
                try:
                    check_nests(self.grid, {a: grids[a], b: grids[b]})
                except TtmapError as err:
                    self.err(("nest", index[b], "path"), str(err))

    def _footprint_in_crop(self, footprint: Any) -> bool:
        """True if every vertex of a footprint (basin CRS) lies inside the crop window."""
        import numpy as np

        xy = np.asarray(footprint.exterior.coords, dtype=np.float64)
        crop_ll, crop_xy = self._crop
        if crop_xy is not None:
            w, s, e, n = crop_xy
            return bool(((xy[:, 0] >= w) & (xy[:, 0] <= e) & (xy[:, 1] >= s) & (xy[:, 1] <= n)).all())
        if self.grid.is_geographic:
            lon, lat = xy[:, 0], xy[:, 1]
        else:
            from pyproj import Transformer

            tr = Transformer.from_crs(self.grid.crs, "EPSG:4326", always_xy=True)
            lon, lat = (np.asarray(v, dtype=np.float64) for v in tr.transform(xy[:, 0], xy[:, 1]))
        w, s, e, n = crop_ll
        inside_lon = np.zeros(lon.shape, dtype=bool)
        for k in (-360.0, 0.0, 360.0):
            inside_lon |= (lon + k >= w) & (lon + k <= e)
        return bool((inside_lon & (lat >= s) & (lat <= n)).all())

    def _check_memory(self, path: tuple[Any, ...], grid: Any, coarsen: float | None,
                      refine: float | None = None) -> None:
        """Refuse a grid whose solve would not fit in memory (crop window ignored: an upper bound)."""
        from affine import Affine

        from ttmap.errors import GridError
        from ttmap.grid import Grid
        from ttmap.memory import check_memory

        c = int(coarsen) if coarsen else 1
        n = int(refine) if refine else 1
        if c < 1 or min(grid.rows // c, grid.cols // c) < 2:
            return
        try:
            if n > 1:
                solved = Grid((grid.rows * n, grid.cols * n), grid.transform @ Affine.scale(1.0 / n), grid.crs)
                check_memory(solved, refine=n)
            else:
                coarse = Grid((grid.rows // c, grid.cols // c), grid.transform @ Affine.scale(c), grid.crs)
                check_memory(coarse)
        except InputDataError as err:
            self.err(path + ("refine" if n > 1 else "coarsen",),
                     str(err).replace("--refine", "refine =").replace("--crop-lonlat", "crop_lonlat"))
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
        nodata: float | None = None,
        refine: float | None = None,
    ) -> None:
        from ttmap.io.header import choose_band, read_bathymetry_header
        from ttmap.io.raster import sample_fill_values
        from ttmap.memory import check_read_memory

        try:  # the opening rules of the run's reader, on the metadata only
            header = read_bathymetry_header(file)
            if crop_ll is None and crop_xy is None:  # a crop window is checked by the run's reader
                check_read_memory(file, (header.grid.rows, header.grid.cols), header.itemsize)
        except TtmapError as err:
            self.err(path + ("path",), str(err))
            return
        try:  # an undeclared fill value, on a decimated read (at most about a million cells)
            sample_fill_values(file, None if band is None else int(band), nodata=nodata)
        except TtmapError as err:
            key = "nodata" if "beyond the deepest" in str(err) else "path"
            self.err(path + (key,), re.sub(r"with --nodata (\S+) \(nodata = \S+ in a scenario file\)",
                                                 r"with nodata = \1 in [bathymetry]", str(err)))
        grid, count = header.grid, header.band_count
        shape = (grid.rows, grid.cols)
        self._check_memory(path, grid, coarsen, refine)
        try:
            chosen = choose_band(count, None if band is None else int(band), file, hint="band = N")
        except TtmapError as err:
            self.err(path if band is None else path + ("band",), str(err))
            chosen = 1
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
        self._raster_band = chosen
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

        if self.grid is None:  # the raster could not be opened: reported once, at [bathymetry] path
            return
        xy = self._to_grid(lon, lat)
        if xy is None:
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
        if "far_field" in tbl and "far_field_correction" in tbl:
            self.err(path + ("far_field",), "give far_field_correction or far_field, not both "
                     "(far_field_correction is the command line's name)")
        far = self.boolean(tbl, "far_field_correction" if "far_field_correction" in tbl else "far_field",
                           path, False)
        max_h = self.number(tbl, "max_time_h", path, positive=True)
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
                    elif not MIN_PERIOD_S <= p <= MAX_PERIOD_S:
                        self.err(
                            pp,
                            f"period {p:g} s is outside {MIN_PERIOD_S:g}...{MAX_PERIOD_S:g} s, where an "
                            "energy-arrival map of long waves makes sense; give e.g. 600",
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
            max_time_s=None if max_h is None else max_h * 3600.0,
        )

    def common_limits(
        self, tbl: Mapping[str, Any], path: KeyPath
    ) -> tuple[float | None, float | None]:
        h = self.number(tbl, "max_time_h", path, positive=True)
        if h is not None and h * 3600.0 > MAX_TIME_LIMIT_S:
            self.err(path + ("max_time_h",), f"max_time_h = {h:g} is longer than {MAX_TIME_LIMIT_S / 3600:g} h "
                     "(a tsunami crosses the widest ocean in about a day); give e.g. 24")
            h = None
        r = self.number(tbl, "snap_radius_km", path, positive=True)
        return (None if h is None else h * 3600.0), (None if r is None else r * 1000.0)

    def name(self, tbl: Mapping[str, Any], key: str, path: KeyPath, what: str) -> str | None:
        name = self.text(tbl, key, path, required=True, what=what)
        if name is not None and not NAME_PATTERN.match(name):
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
        forms = [k for k in SOURCE_FORMS if k in tbl]
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

    def sites(self, data: Mapping[str, Any]) -> tuple[str | None, int | None, dict[str, Any]]:
        path: KeyPath = ("sites",)
        tbl = self.table(data, "sites", path, required=False)
        if tbl is None:
            return None, None, {}
        self.known_keys(tbl, SECTION_KEYS["sites"], path)
        opts: dict[str, Any] = {}
        numbers = {
            "search_radius_km": {"lo": 0.0},
            "notification_delay_min": {"lo": 0.0, "hi": MAX_NOTIFICATION_DELAY_MIN},
            "preparation_min": {"lo": 0.0},
            "walking_speed_m_s": {"positive": True},
            "little_margin_min": {"lo": 0.0},
            "speed_uncertainty_pct": {"lo": 0.0, "hi": 99.0},
        }
        for key, bounds in numbers.items():
            v = self.number(tbl, key, path, **bounds)  # type: ignore[arg-type]
            if v is not None:
                _, fld, factor = OPTION_KEYS[("sites", key)]
                opts[fld] = v * factor
        for key in ("name_field", "layer", "crs"):
            t = self.text(tbl, key, path)
            if t is not None:
                opts[OPTION_KEYS[("sites", key)][1]] = t
        if "crs" in opts:
            from pyproj import CRS
            from pyproj.exceptions import CRSError

            try:
                CRS.from_user_input(opts["crs"])
            except CRSError:
                self.err(path + ("crs",), f"crs {opts['crs']!r} is not a CRS PROJ knows; give e.g. "
                         '"EPSG:32759"')
                del opts["crs"]
        origin = self.text(tbl, "origin_time", path)
        if origin is not None:
            import datetime as _dt

            when: _dt.datetime | None
            try:
                when = _dt.datetime.fromisoformat(origin.strip())
            except ValueError:
                when = None
            if when is None or when.tzinfo is None or when.utcoffset() is None:
                self.err(path + ("origin_time",), f"origin_time = {origin!r} is not an ISO 8601 time "
                         'with a zone; give e.g. "2026-03-01T03:12:00Z"')
            else:
                opts["origin_time_utc"] = when.astimezone(_dt.UTC)
        file = self.existing_file(tbl, "path", path, required=True, what="site file")
        if file is None:
            return None, None, opts
        from ttmap.io.sites import read_sites

        try:  # the reader of the run: what it refuses is refused here, and the reverse
            sites = read_sites(file, name_field=opts.get("name_field"), crs=opts.get("crs"),
                               layer=opts.get("layer"))
        except TtmapError as err:
            self.err(path + ("path",), str(err))
            return None, None, opts
        return file, len(sites), opts

    def products(self, data: Mapping[str, Any]) -> dict[str, Any]:
        path: KeyPath = ("products",)
        tbl = self.table(data, "products", path, required=False) or {}
        self.known_keys(tbl, SECTION_KEYS["products"], path)
        opts: dict[str, Any] = {}
        for key in ("isochrone_interval_min", "coast_interval_min"):
            v = self.number(tbl, key, path, positive=True)
            if v is not None:
                opts[key] = v
        for key in ("coast", "report"):
            if key in tbl:
                opts[key] = self.boolean(tbl, key, path, True)
        for key, choices in (("vector_formats", tuple(VECTOR_FORMATS)), ("map_formats", MAP_FORMATS)):
            if key not in tbl:
                continue
            v = tbl[key]
            if not (isinstance(v, list) and all(isinstance(x, str) for x in v)):
                self.err(path + (key,), f'must be an array of format names, e.g. ["{choices[0]}"], '
                         f"got {_describe(v)}")
                continue
            bad = [x for x in v if x not in choices]
            if bad:
                self.err(path + (key,), f"format {bad[0]!r} is unknown; choose from {', '.join(choices)}"
                         + _suggest(bad[0], choices))
                continue
            opts[key] = tuple(v)
        return opts

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
        scenario_rasters = self.boolean(tbl, "scenario_rasters", path, True)
        table_method = "auto"
        if "table_method" in tbl:
            tm = tbl["table_method"]
            if tm not in TABLE_METHODS:
                self.err(
                    path + ("table_method",),
                    f"must be one of {', '.join(repr(m) for m in TABLE_METHODS)}, got {_describe(tm)}",
                )
            else:
                table_method = tm
        executor = None
        if "executor" in tbl:
            problem = check_executor(tbl["executor"])
            if problem:
                self.err(path + ("executor",), problem + did_you_mean(tbl["executor"], EXECUTORS))
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
            table_method=table_method,
            scenario_rasters=scenario_rasters,
        )


def _file_safe_stem(stem: str) -> str | None:
    """A nest's default name from its file name: ASCII letters, digits, ``_ - .``; None if empty.

    >>> _file_safe_stem("Harbour fine (2 m)")
    'Harbour_fine_2_m'
    """
    from ttmap.io.names import ascii_name

    name = re.sub(r"[^A-Za-z0-9.-]+", "_", ascii_name(stem)).strip("_-.")[:64]
    return name if name and NAME_PATTERN.match(name) else None


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
        if isinstance(sc_name, str) and NAME_PATTERN.match(sc_name) is not None:
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
    sites_path, sites_count, site_options = ld.sites(data)
    product_options = ld.products(data)
    if speed.max_time_s is not None:  # the [speed] default limit, where a scenario has none
        specs = [s if s.max_time_s is not None else dataclasses.replace(s, max_time_s=speed.max_time_s)
                 for s in specs]
    nests = ld.nests(data, bathy, specs)
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
        site_options=site_options,
        product_options=product_options,
        nests=nests,
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

