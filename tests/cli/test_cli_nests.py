"""``ttmap map --nest``: a finer lon/lat grid inside the projected basin, end to end.

The basin is the invented UTM fixture of ``tests/cli/conftest.py`` (1 km cells,
100 m deep, a land strip from x = 410 km). The nest is an invented lon/lat grid
(EPSG:4326, 0.002 x 0.0018 degrees, about 180-200 m) over x 392-414 km,
y 6150-6168 km, in a different CRS on purpose, with the same 100 m depth and
its land where the basin's is (west of x = 410 km water, east of it land).

External checks:
- constant depth: the first arrival is the straight-line distance over the
  long-wave speed sqrt(g h) (docs/references.md section 2, Lamb, Hydrodynamics,
  1932, section 170; g = 9.80665 m/s^2, 3rd CGPM 1901), and the first wave's
  route is the straight source-site line (Fermat's principle, docs/references.md
  section 8); the distances are pyproj's (PROJ) transforms and plane distances in
  the UTM zone;
- continuity across the nest edge within one basin cell's travel time (the
  issue's acceptance figure, common practice, no source).
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import rasterio
from affine import Affine
from pyproj import Transformer

G_M_S2 = 9.80665
NEST_X = (392_000.0, 414_000.0)
NEST_Y = (6_150_000.0, 6_168_000.0)
NEST_DLON, NEST_DLAT = 0.002, 0.0018


def _nest_grid(spec: Any, x_range=NEST_X, y_range=NEST_Y) -> tuple[Affine, tuple[int, int]]:
    """A lon/lat grid whose outline lies inside the UTM box (x_range, y_range)."""
    tr = Transformer.from_crs(spec.UTM_CRS, "EPSG:4326", always_xy=True)
    corners = [tr.transform(x, y) for x in x_range for y in y_range]
    lons, lats = [c[0] for c in corners], [c[1] for c in corners]
    west, east = max(sorted(lons)[:2]), min(sorted(lons)[2:])
    south, north = max(sorted(lats)[:2]), min(sorted(lats)[2:])
    cols = int((east - west) / NEST_DLON)
    rows = int((north - south) / NEST_DLAT)
    return Affine(NEST_DLON, 0.0, west, 0.0, -NEST_DLAT, north), (rows, cols)


def write_nest(path: Path, spec: Any, *, x_range=NEST_X, y_range=NEST_Y, all_land: bool = False) -> Path:
    """An invented lon/lat nest: 100 m deep west of the basin's land edge, land east of it."""
    transform, (rows, cols) = _nest_grid(spec, x_range, y_range)
    r, c = np.mgrid[0:rows, 0:cols]
    lon, lat = transform @ (c + 0.5, r + 0.5)
    x, _ = Transformer.from_crs("EPSG:4326", spec.UTM_CRS, always_xy=True).transform(lon, lat)
    elev = np.where(np.asarray(x) >= spec.UTM_LAND_X, spec.UTM_LAND_ELEVATION_M, -spec.UTM_DEPTH_M)
    if all_land:
        elev[:] = 50.0
    return spec.write_geotiff(path, elev.astype(np.float32), crs="EPSG:4326", transform=transform)


#: Sites in UTM 59 S: one on the land strip 300 m from the shore inside the nest,
#: one in open water outside the nest.
NEST_SITE_XY = (410_300.0, 6_158_300.0)
OPEN_SITE_XY = (330_500.0, 6_100_500.0)


@pytest.fixture(scope="module")
def nest_run(tmp_path_factory: pytest.TempPathFactory, spec: Any) -> dict[str, Any]:
    from ttmap.cli.main import cli  # noqa: F401  (import errors show here, not in CliRunner)
    from click.testing import CliRunner

    base = tmp_path_factory.mktemp("nest_run")
    basin = spec.write_geotiff(base / "basin.tif", spec.utm_elevation(), crs=spec.UTM_CRS,
                               transform=spec.UTM_TRANSFORM)
    nest = write_nest(base / "harbour.tif", spec)
    sites = base / "sites.csv"
    sites.write_text("name,x,y\nShore Town,{},{}\nOpen Buoy,{},{}\n".format(*NEST_SITE_XY, *OPEN_SITE_XY))
    out = base / "out"
    sx, sy = spec.UTM_SOURCE_XY
    runner = CliRunner()
    path_lon, path_lat = spec.utm_to_lonlat(400_500.0, 6_120_500.0)
    res = runner.invoke(cli, [
        "map", str(basin), "--source-xy", f"{sx},{sy}", "--nest", str(nest),
        "--sites", str(sites), "--sites-crs", spec.UTM_CRS, "--isochrone-interval-min", "5",
        "--path-from", f"{path_lon:.8f},{path_lat:.8f}", "--out", str(out),
    ])
    assert res.exit_code == 0, res.output
    return {"out": out, "basin": basin, "nest": nest, "output": res.output}


def _read(path: Path) -> tuple[np.ndarray, Any, Any]:
    with rasterio.open(path) as ds:
        return ds.read(1, masked=True).filled(np.nan).astype(np.float64), ds.transform, ds.crs


def _analytic_min(spec: Any, x: Any, y: Any) -> Any:
    sx, sy = spec.UTM_SOURCE_XY
    return np.hypot(np.asarray(x) - sx, np.asarray(y) - sy) / math.sqrt(G_M_S2 * spec.UTM_DEPTH_M) / 60.0


def test_nest_products_on_the_nest_grid(nest_run, spec):
    out = nest_run["out"]
    names = {p.name for p in out.iterdir()}
    for f in ("arrival_front_nest-harbour.tif", "arrival_front_nest-harbour.sld",
              "isochrones_front_nest-harbour.gpkg", "coast_front_nest-harbour.gpkg",
              "map_front_nest-harbour.png", "wave_paths.gpkg", "wave_paths.sld"):
        assert f in names
    t_min, transform, crs = _read(out / "arrival_front_nest-harbour.tif")
    with rasterio.open(nest_run["nest"]) as ds:
        assert (transform, crs, t_min.shape) == (ds.transform, ds.crs, (ds.height, ds.width))
        elev = ds.read(1)
        tags = rasterio.open(out / "arrival_front_nest-harbour.tif").tags()
    assert tags["UNITS"] == "minutes" and tags["BATHYMETRY"] == "harbour.tif"
    assert np.isnan(t_min[elev > 0]).all() and np.isfinite(t_min[elev < 0]).all()
    # constant depth: distance over sqrt(g h), on the nest's own cells (x, y by pyproj)
    r, c = np.mgrid[0:t_min.shape[0], 0:t_min.shape[1]]
    lon, lat = transform @ (c + 0.5, r + 0.5)
    x, y = Transformer.from_crs("EPSG:4326", spec.UTM_CRS, always_xy=True).transform(lon, lat)
    ref = _analytic_min(spec, x, y)
    water = elev < 0
    rel = np.abs(t_min[water] - ref[water]) / ref[water]
    print(f"nest vs distance / sqrt(g h): largest relative difference {rel.max():.4%}")
    assert rel.max() < 0.01  # the basin's own fast-march error at ~40-55 km from the source is below this


def test_nest_continuous_with_the_basin_near_its_edge(nest_run, spec):
    out = nest_run["out"]
    t_nest, transform, _ = _read(out / "arrival_front_nest-harbour.tif")
    t_basin, btr, _ = _read(out / "arrival_front.tif")
    edge = np.zeros(t_nest.shape, dtype=bool)
    edge[:3, :] = edge[-3:, :] = edge[:, :3] = edge[:, -3:] = True
    edge &= np.isfinite(t_nest)
    r, c = np.nonzero(edge)
    lon, lat = transform @ (c + 0.5, r + 0.5)
    x, y = Transformer.from_crs("EPSG:4326", spec.UTM_CRS, always_xy=True).transform(lon, lat)
    bc, br = ~btr @ (np.asarray(x), np.asarray(y))
    from scipy.ndimage import map_coordinates

    basin_at = map_coordinates(np.nan_to_num(t_basin, nan=np.inf), [br - 0.5, bc - 0.5], order=1)
    ok = np.isfinite(basin_at)
    jump = np.abs(t_nest[edge][ok] - basin_at[ok])
    one_cell_min = spec.UTM_CELL_M / math.sqrt(G_M_S2 * spec.UTM_DEPTH_M) / 60.0
    print(f"largest jump at the nest edge {jump.max():.4f} min; one basin cell {one_cell_min:.3f} min")
    assert ok.sum() > 100 and jump.max() < one_cell_min


def test_site_in_the_nest_is_read_on_the_nest(nest_run, spec):
    out = nest_run["out"]
    rows = list(csv.DictReader(line for line in (out / "sites.csv").open() if not line.startswith("#")))
    by = {r["name"]: r for r in rows}
    shore, buoy = by["Shore Town"], by["Open Buoy"]
    assert shore["grid"] == "harbour" and buoy["grid"] == "basin"
    # the nest's water is ~200 m cells: the shore town is read within one of them (the basin: 800 m)
    assert float(shore["moved_m"]) < 400.0 and float(buoy["moved_m"]) == 0.0
    ref = float(_analytic_min(spec, spec.UTM_LAND_X - 100.0, NEST_SITE_XY[1]))
    print(f"shore town: nested {float(shore['front_min']):.3f} min, basin alone "
          f"{float(shore['basin_front_min']):.3f} min, analytic at the shore {ref:.3f} min")
    assert abs(float(shore["front_min"]) - ref) < 0.01 * ref + 0.2  # within ~one nest cell of the shore
    record = json.loads((out / "run.json").read_text())
    (nest,) = record["nests"]
    assert nest["name"] == "harbour" and nest["grid"]["crs"] == "EPSG:4326"
    assert len(nest["sha256"]) == 64 and nest["summary"]["front"]["boundary_cells"] > 0
    lo, hi = nest["summary"]["front"]["boundary_time_min_range"]
    assert 0 < lo < hi
    assert record["inputs"]["nest-harbour"]["sha256"] == nest["sha256"]


def test_wave_paths_layer(nest_run, spec):
    import pyogrio.raw
    import shapely

    out = nest_run["out"]
    info = pyogrio.read_info(out / "wave_paths.gpkg", layer="wave_paths")
    assert info["geometry_type"] == "LineString"
    assert {"name", "arrival_min", "minutes_start", "minutes_end", "grid", "end"} <= set(info["fields"])
    meta, _, wkb, fields = pyogrio.raw.read(out / "wave_paths.gpkg", layer="wave_paths")
    cols = dict(zip(meta["fields"], fields))
    names = set(cols["name"])
    assert {"Shore Town", "Open Buoy"} <= names and any(n.startswith("point 1") for n in names)
    sites = {r["name"]: r for r in csv.DictReader(
        line for line in (out / "sites.csv").open() if not line.startswith("#"))}
    sx, sy = spec.UTM_SOURCE_XY
    for name in ("Shore Town", "Open Buoy"):
        sel = np.asarray(cols["name"]) == name
        t0, t1 = cols["minutes_start"][sel], cols["minutes_end"][sel]
        # time increases from the source to the site, piece after piece
        assert (t1 > t0).all() and np.allclose(t0[1:], t1[:-1]) and t0[0] < 1.0
        assert math.isclose(t1[-1], float(sites[name]["front_min"]), abs_tol=0.05)
        geoms = shapely.from_wkb(wkb[sel])
        xy = np.concatenate([np.asarray(g.coords) for g in geoms])
        # straight source-site line in constant depth (Fermat), within one basin cell
        ex, ey = xy[-1]
        d = np.abs((ex - sx) * (xy[:, 1] - sy) - (ey - sy) * (xy[:, 0] - sx)) / math.hypot(ex - sx, ey - sy)
        print(f"{name}: largest offset from the straight line {d.max():.0f} m")
        assert d.max() < spec.UTM_CELL_M
        assert math.hypot(*(xy[0] - (sx, sy))) < spec.UTM_CELL_M
    sel = np.asarray(cols["name"]) == "Shore Town"
    assert list(dict.fromkeys(cols["grid"][sel])) == ["basin", "harbour"]


def _refused(run_cli, spec, tmp_path: Path, nests: list[Path], *extra: str) -> str:
    basin = spec.write_geotiff(tmp_path / "basin.tif", spec.utm_elevation(), crs=spec.UTM_CRS,
                               transform=spec.UTM_TRANSFORM)
    sx, sy = spec.UTM_SOURCE_XY
    args = ["map", basin, "--source-xy", f"{sx},{sy}", "--out", tmp_path / "out", *extra]
    for n in nests:
        args += ["--nest", n]
    res = run_cli(*args)
    assert res.exit_code != 0
    assert not (tmp_path / "out").exists(), "a refused run must write nothing"
    assert "Traceback" not in res.output
    lines = [line for line in res.output.splitlines() if line.startswith("Error:")]
    assert len(lines) == 1 and "nest" in lines[0], res.output
    return lines[0]


def test_refuses_a_nest_outside_the_basin(run_cli, spec, tmp_path):
    nest = write_nest(tmp_path / "wide.tif", spec, x_range=(400_000.0, 430_000.0))
    assert "reaches outside the basin grid" in _refused(run_cli, spec, tmp_path, [nest])


def test_refuses_overlapping_nests(run_cli, spec, tmp_path):
    a = write_nest(tmp_path / "a.tif", spec)
    b = write_nest(tmp_path / "b.tif", spec, x_range=(400_000.0, 414_000.0), y_range=(6_160_000.0, 6_175_000.0))
    assert "overlaps nest" in _refused(run_cli, spec, tmp_path, [a, b])


def test_refuses_a_nest_without_water(run_cli, spec, tmp_path):
    nest = write_nest(tmp_path / "dry.tif", spec, all_land=True)
    assert "has no water" in _refused(run_cli, spec, tmp_path, [nest])


def test_refuses_a_nest_around_the_source(run_cli, spec, tmp_path):
    sx, sy = spec.UTM_SOURCE_XY
    nest = write_nest(tmp_path / "src.tif", spec, x_range=(sx - 8000.0, sx + 8000.0),
                      y_range=(sy - 8000.0, sy + 8000.0))
    assert "contains the source" in _refused(run_cli, spec, tmp_path, [nest])
