"""One site evaluation: the same source and sites give the same rows in every product.

One point source and one site file go through ``ttmap map --sites``, ``ttmap
scenario run`` (one scenario, the same point) and the library (solve in
memory, :func:`ttmap.products.sites.site_table`); the site rows must be
identical, column for column and character for character as written. The
site-centred job (``ttmap site-map``) must place every site with the same
status word and ground distance.

Two site sets: the invented demo, and a synthetic coast with a site in a
closed lagoon and a site 5 km inland (beyond the default 2 km radius; the
scenario file's ``[sites] search_radius_km`` and the command line's
``--site-search-radius-km`` widen it the same way).

The arrival times themselves are checked against outside references
elsewhere (tests/reference); this file checks that every path reports the
same figures, and the margin rule (minutes left counted from the earliest
arrival, front / 1.05) by hand.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest
from affine import Affine

import ttmap
from ttmap.products.site_eval import SNAP_CLOSED_BASIN, SNAP_MOVED, SNAP_NO_WATER

DEMO = Path(ttmap.__file__).parent / "demo_data"
DEMO_SOURCE = (-144.9, -34.2)

# Synthetic coast: 0.01-degree cells, sea west of column 40, a closed lagoon inland.
CELL = 0.01
WEST, NORTH = -71.0, -33.0
SHAPE = (60, 80)


def _read_rows(path: Path, drop: tuple[str, ...] = ()) -> dict[str, dict[str, str]]:
    lines = [ln for ln in path.read_text(encoding="utf-8").splitlines() if not ln.startswith("#")]
    return {r["name"]: {k: v for k, v in r.items() if k not in drop} for r in csv.DictReader(lines)}


def _centre(row: float, col: float) -> tuple[float, float]:
    return WEST + (col + 0.5) * CELL, NORTH - (row + 0.5) * CELL


@pytest.fixture(scope="module")
def lagoon_case(tmp_path_factory: pytest.TempPathFactory) -> dict[str, object]:
    import rasterio

    base = tmp_path_factory.mktemp("lagoon")
    elev = np.full(SHAPE, -3000.0, dtype=np.float32)
    elev[:, 40:] = 50.0
    elev[20:24, 55:59] = -4.0  # a lagoon with no opening to the sea
    bathy = base / "coast.tif"
    with rasterio.open(bathy, "w", driver="GTiff", width=SHAPE[1], height=SHAPE[0], count=1,
                       dtype="float32", crs="EPSG:4326",
                       transform=Affine(CELL, 0.0, WEST, 0.0, -CELL, NORTH), nodata=-32768.0) as dst:
        dst.write(elev, 1)
    sites = base / "sites.csv"
    rows = {
        "Harbour": (*_centre(30, 40.6), 600, ""),  # on land, 0.55 km from the sea
        "Lagoon Town": (*_centre(21.5, 56.5), 300, ""),  # in the lagoon, ~14 km from the sea
        "Hill Farm": (*_centre(10, 44.6), 200, 5),  # 5.2 km from the nearest sea cell centre
    }
    text = "name,lon,lat,safe_ground_distance_m,notification_delay_min\n" + "".join(
        f"{n},{lon:.5f},{lat:.5f},{d},{delay}\n" for n, (lon, lat, d, delay) in rows.items()
    )
    sites.write_text(text, encoding="utf-8")
    return {"bathy": bathy, "sites": sites, "source": _centre(30, 10), "base": base}


def _scenario_file(folder: Path, bathy: Path, sites: Path, source: tuple[float, float],
                   out: Path, radius_km: float | None) -> Path:
    extra = "" if radius_km is None else f"search_radius_km = {radius_km:g}\n"
    text = (
        f'[bathymetry]\npath = "{bathy}"\n\n[speed]\nperiods_s = [300]\n\n'
        f'[[scenario]]\nname = "one-point"\npoint = [{source[0]!r}, {source[1]!r}]\n\n'
        f'[sites]\npath = "{sites}"\n{extra}\n'
        f'[outputs]\nfolder = "{out}"\nenvelope = false\nexecutor = "serial"\n'
    )
    path = folder / f"one_{'default' if radius_km is None else int(radius_km)}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _library_rows(bathy: Path, sites_path: Path, source: tuple[float, float], folder: Path,
                  radius_km: float | None) -> dict[str, dict[str, str]]:
    from ttmap import Source, prepare_medium, read_bathymetry, read_sites
    from ttmap.defaults import SITE_SEARCH_RADIUS_M
    from ttmap.io.sites import write_site_table_csv
    from ttmap.products.sites import site_table, snap_sites

    b = read_bathymetry(str(bathy))
    src = Source.point(*source)
    front_medium = prepare_medium(b.depth_m, b.grid)
    front = front_medium.travel_time(src)
    energy = prepare_medium(b.depth_m, b.grid, mode="group", period_s=300.0).travel_time(src)
    sites = read_sites(str(sites_path))
    radius = SITE_SEARCH_RADIUS_M if radius_km is None else radius_km * 1000.0
    snapped = snap_sites(sites, b.grid, front, search_radius_m=radius, depth_m=front_medium.depth_m,
                         water=front_medium.water, open_water=front_medium.open_water)
    table = site_table(sites, snapped, front, {300.0: energy})
    path = folder / f"library_{radius_km}.csv"
    write_site_table_csv(path, table, overwrite=True)  # type: ignore[arg-type]
    return _read_rows(path)


def _all_paths(run_cli, tmp: Path, bathy: Path, sites: Path, source: tuple[float, float],
               radius_km: float | None) -> tuple[dict, dict, dict, dict]:
    radius_args = [] if radius_km is None else ["--site-search-radius-km", radius_km]
    tag = "default" if radius_km is None else f"r{radius_km:g}"
    run_cli("map", bathy, f"--source={source[0]!r},{source[1]!r}", "--period-s", 300, "--sites", sites,
            *radius_args, "--no-map", "--out", tmp / f"map_{tag}", expect=0)
    by_map = _read_rows(tmp / f"map_{tag}" / "sites.csv")
    toml = _scenario_file(tmp, bathy, sites, source, tmp / f"scen_{tag}", radius_km)
    run_cli("scenario", "run", toml, expect=0)
    by_scenario = _read_rows(tmp / f"scen_{tag}" / "sites_x_scenarios.csv",
                             drop=("scenario", "earliest_for_site"))
    by_library = _library_rows(bathy, sites, source, tmp, radius_km)
    run_cli("site-map", bathy, "--sites", sites, *radius_args, "--no-map", "--no-combined",
            "--out", tmp / f"sitemap_{tag}")
    record = json.loads((tmp / f"sitemap_{tag}" / "run.json").read_text())
    by_sitemap = {s["name"]: s for s in record.get("sites") or []}
    for s in record.get("sites_skipped") or []:
        by_sitemap[s["name"]] = s
    return by_map, by_scenario, by_library, by_sitemap


def _check_same(by_map, by_scenario, by_library, by_sitemap) -> None:
    assert list(next(iter(by_map.values())))[0] == "name"
    assert list(by_map) == list(by_scenario) == list(by_library)
    for name, row in by_map.items():
        assert by_scenario[name] == row, f"{name}: scenario run differs from the map job"
        assert by_library[name] == row, f"{name}: library differs from the map job"
        placed = by_sitemap[name]
        assert placed["status"] == row["status"], f"{name}: site-map places it differently"
        if row["moved_m"]:
            assert placed["moved_m"] == pytest.approx(float(row["moved_m"]), abs=0.5)


def _check_margin_rule(row: dict[str, str]) -> None:
    """minutes_left counts from the earliest arrival (front / 1.05), never from the front."""
    front = float(row["front_min"])
    earliest = float(row["earliest_min"])
    # both written to 2 decimals: 0.005 + 0.005 / 1.05 at most
    assert earliest == pytest.approx(front / 1.05, abs=0.0101)
    left = float(row["minutes_left"])
    assert left == pytest.approx(front / 1.05 - float(row["notification_delay_min"]), abs=0.0101)


def test_demo_sites_have_the_same_rows_in_every_product(run_cli, tmp_path):
    by_map, by_scenario, by_library, by_sitemap = _all_paths(
        run_cli, tmp_path, DEMO / "demo_bathymetry.tif", DEMO / "demo_sites.csv", DEMO_SOURCE, None
    )
    _check_same(by_map, by_scenario, by_library, by_sitemap)
    assert len(by_map) == 8
    for row in by_map.values():
        if row["front_min"]:
            _check_margin_rule(row)
    # Ambledrift Spit: 2500 m at 1.0 m/s after 5 min -> needs 46.67 min.
    spit = by_map["Ambledrift Spit"]
    assert float(spit["minutes_needed"]) == pytest.approx(5.0 + 2500.0 / 60.0, abs=0.006)
    assert float(spit["margin_min"]) == pytest.approx(
        float(spit["minutes_left"]) - float(spit["minutes_needed"]), abs=0.011)


def test_closed_basin_and_far_sites_read_the_same_everywhere(run_cli, lagoon_case, tmp_path):
    case = lagoon_case
    by_map, by_scenario, by_library, by_sitemap = _all_paths(
        run_cli, tmp_path, case["bathy"], case["sites"], case["source"], None)
    _check_same(by_map, by_scenario, by_library, by_sitemap)
    assert by_map["Harbour"]["status"] == SNAP_MOVED
    assert by_map["Lagoon Town"]["status"] == SNAP_CLOSED_BASIN
    assert by_map["Hill Farm"]["status"] == SNAP_NO_WATER
    for name in ("Lagoon Town", "Hill Farm"):
        assert by_map[name]["front_min"] == "" and by_map[name]["margin_min"] == ""
    _check_margin_rule(by_map["Harbour"])

    # A 6 km radius, given the same way to every path, reaches the farm from the coast.
    wide = _all_paths(run_cli, tmp_path, case["bathy"], case["sites"], case["source"], 6.0)
    _check_same(*wide)
    farm = wide[0]["Hill Farm"]
    assert farm["status"] == SNAP_MOVED
    assert 4000.0 < float(farm["moved_m"]) < 6000.0
    _check_margin_rule(farm)
    assert wide[0]["Lagoon Town"]["status"] == SNAP_CLOSED_BASIN  # still no open water within 6 km
    assert not math.isnan(float(farm["front_min"]))
