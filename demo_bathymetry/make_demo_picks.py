"""Make ``demo_picks.csv``: INVENTED first-arrival picks at the invented demo towns.

An invented source (a point over the invented continental slope of the demo
grid, origin 2030-01-01T00:00:00Z, an invented date) is solved forward with
the long-wave speed; each town is snapped to open water exactly as
``ttmap locate`` snaps gauges (the shared site snapping, default search
radius) and its first arrival is read there and rounded to the second. No
noise is added; the stated uncertainty (1 minute) is the pick uncertainty a
user would give. ``ttmap locate`` should find the source within a few cells.

Nothing here is real: not the coast, the towns, the source or the times.

    python ttmap/demo_data/make_demo_picks.py            # writes next to this script
    python ttmap/demo_data/make_demo_picks.py --out x.csv
"""

from __future__ import annotations

import argparse
import datetime as _dt
from pathlib import Path

__all__ = ["DEMO_PICK_SOURCE_LONLAT", "DEMO_PICK_ORIGIN_UTC", "DEMO_PICK_SIGMA_MIN", "make_picks"]

#: The invented source (lon, lat), over the invented slope west of the towns.
DEMO_PICK_SOURCE_LONLAT: tuple[float, float] = (-144.0, -34.8)
#: Its invented origin time.
DEMO_PICK_ORIGIN_UTC: str = "2030-01-01T00:00:00+00:00"
#: Stated standard uncertainty of every pick, minutes.
DEMO_PICK_SIGMA_MIN: float = 1.0

HERE = Path(__file__).resolve().parent


def make_picks(out: Path) -> Path:
    """Solve the invented source, read the towns, write the CSV."""
    from ttmap.io.raster import read_bathymetry
    from ttmap.io.sites import read_sites
    from ttmap.products.sites import snap_sites
    from ttmap.sources import Source
    from ttmap.traveltime import prepare_medium

    bathy = read_bathymetry(HERE / "demo_bathymetry.tif")
    medium = prepare_medium(bathy.depth_m, bathy.grid)
    lon, lat = DEMO_PICK_SOURCE_LONLAT
    result = medium.travel_time(Source.point_xy(lon, lat))
    towns = read_sites(HERE / "demo_sites.csv")
    snapped = snap_sites(towns, bathy.grid, medium.open_water)
    origin = _dt.datetime.fromisoformat(DEMO_PICK_ORIGIN_UTC)
    lines = [
        "# INVENTED DATA: synthetic first-arrival picks at the invented demo towns, computed by",
        f"# make_demo_picks.py from an invented source at lon {lon}, lat {lat}, origin "
        f"{DEMO_PICK_ORIGIN_UTC} (long-wave speed). Not a real event, place or time.",
        "name,lon,lat,time_utc,uncertainty_min",
    ]
    for town, sn in zip(towns, snapped, strict=True):
        if sn.row < 0:
            continue
        t_s = float(result.arrival_time_s[sn.row, sn.col])
        if t_s != t_s:  # unreached
            continue
        t = origin + _dt.timedelta(seconds=round(t_s))
        lines.append(f"{town.name},{town.x:.4f},{town.y:.4f},{t.strftime('%Y-%m-%dT%H:%M:%SZ')},"
                     f"{DEMO_PICK_SIGMA_MIN:g}")
    out.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return out


def main() -> None:  # pragma: no cover - script
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=HERE / "demo_picks.csv")
    print(make_picks(ap.parse_args().out))


if __name__ == "__main__":  # pragma: no cover
    main()
