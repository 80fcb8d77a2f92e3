#!/usr/bin/env python
"""Generate the ttmap demo bathymetry: an INVENTED subduction-margin region.

Everything produced here is synthetic.  The coast, islands, towns and their
names are made up; the coordinates are placeholders over open ocean in the
mid South Pacific, chosen so that no real coast is implied.  Do not use any
of it for real planning.

Outputs (written next to this script unless ``--out DIR`` is given):

* ``demo_bathymetry.tif`` -- float32 elevation in metres (negative below sea
  level), EPSG:4326, 1 arc-minute cells, 540 x 420, tiled 256x256,
  DEFLATE + floating-point predictor, nodata -32768.
* ``demo_sites.csv`` -- invented coastal towns / harbours / beaches.
* ``demo_bathymetry_preview.png`` -- only with ``--preview``.

The script is deterministic (fixed seed, no timestamp tags); rerunning it with
the same numpy / GDAL versions reproduces the files byte for byte.

Usage::

    python demo_bathymetry/make_demo_bathymetry.py [--out DIR] [--preview]
"""

from __future__ import annotations

import argparse
import csv
import math
from pathlib import Path

import numpy as np
from scipy import ndimage

SEED = 7340

# Grid definition -----------------------------------------------------------
CELL_DEG = 1.0 / 60.0  # 1 arc-minute
WEST, NORTH = -150.0, -31.0
NCOLS, NROWS = 540, 420  # 9 deg x 7 deg -> lon -150..-141, lat -38..-31
NODATA = -32768.0

KM_PER_DEG = 111.32  # spherical approximation, good enough for invented terrain
LAT_MID = NORTH - NROWS * CELL_DEG / 2.0
DX_KM = KM_PER_DEG * CELL_DEG * math.cos(math.radians(LAT_MID))
DY_KM = KM_PER_DEG * CELL_DEG

TAGS = {
    "TITLE": "ttmap demo bathymetry (INVENTED)",
    "DATA_STATUS": (
        "INVENTED - synthetic terrain for demonstration; not a real place; "
        "do not use for planning"
    ),
    "UNITS": "m",
    "VERTICAL_CONVENTION": "elevation, positive up, negative below sea level",
    "GENERATOR": "make_demo_bathymetry.py",
}

# Named (invented) features -- latitudes of the along-coast features.
HARBOUR_LAT = -33.40  # deep bay behind a narrow entrance (Tarnquill Harbour)
LAGOON_LAT = -36.25  # closed lagoon (Vessamere Lagoon)
SPIT_LAT = -37.15  # pond behind a barrier spit, joined to the sea by a diagonal
VOLCANO_LAT = -35.00  # Ulmeth Island, on the outer rise west of the trench
ISLET_LATS = (-33.95, -34.18, -34.42)  # the Gannix Islets, on the shelf


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------
def cell_centres() -> tuple[np.ndarray, np.ndarray]:
    lon = WEST + (np.arange(NCOLS) + 0.5) * CELL_DEG
    lat = NORTH - (np.arange(NROWS) + 0.5) * CELL_DEG
    return np.meshgrid(lon, lat)


def row_of_lat(lat: float) -> int:
    return int(math.floor((NORTH - lat) / CELL_DEG))


def fbm(rng: np.random.Generator, shape, scales, beta=1.0, aniso=(1.0, 1.0)) -> np.ndarray:
    """Fractal noise: Gaussian-filtered white noise summed over scales.

    ``scales`` are filter sigmas in cells; each octave is weighted by
    ``scale**beta`` (beta ~1 gives a Brownian-like spectrum).  Result has
    zero mean and unit standard deviation.  ``aniso`` stretches the filter
    per axis (rows, cols) to make elongated fabric.
    """
    out = np.zeros(shape)
    for s in scales:
        w = rng.standard_normal(shape)
        g = ndimage.gaussian_filter(w, sigma=(s * aniso[0], s * aniso[1]), mode="reflect")
        g /= g.std()
        out += g * s**beta
    out -= out.mean()
    out /= out.std()
    return out


def smax(a: np.ndarray, b: np.ndarray, k: float) -> np.ndarray:
    """Smooth maximum (log-sum-exp) with softness k (same units as a, b)."""
    m = np.maximum(a, b)
    return m + k * np.log(np.exp((a - m) / k) + np.exp((b - m) / k))


def gauss_bump(lat_c: float, lon_c: float, lat, lon, r_ns_km: float, r_ew_km: float) -> np.ndarray:
    dy = (lat - lat_c) * KM_PER_DEG
    dx = (lon - lon_c) * KM_PER_DEG * np.cos(np.radians(lat))
    return np.exp(-((dy / r_ns_km) ** 2 + (dx / r_ew_km) ** 2))


def water_components(z: np.ndarray, diagonal: bool = False):
    structure = np.ones((3, 3), bool) if diagonal else None
    return ndimage.label(z < 0, structure=structure)


def diagonal_joins(z: np.ndarray) -> list[tuple[int, int]]:
    """2x2 blocks whose water cells sit on one diagonal only and belong to
    different 4-connected water components.  Returns the (row, col) of the
    upper-left cell of each such block."""
    lab, _ = water_components(z)
    w = z < 0
    a, b = w[:-1, :-1], w[:-1, 1:]
    c, d = w[1:, :-1], w[1:, 1:]
    main = a & d & ~b & ~c
    anti = b & c & ~a & ~d
    out = []
    for r, col in zip(*np.nonzero(main)):
        if lab[r, col] != lab[r + 1, col + 1]:
            out.append((int(r), int(col)))
    for r, col in zip(*np.nonzero(anti)):
        if lab[r, col + 1] != lab[r + 1, col]:
            out.append((int(r), int(col)))
    return sorted(out)


# ---------------------------------------------------------------------------
# terrain
# ---------------------------------------------------------------------------
def build_grid(seed: int = SEED):
    rng = np.random.default_rng(seed)
    lon, lat = cell_centres()
    shape = lon.shape
    kx = KM_PER_DEG * np.cos(np.radians(lat))  # km per degree of longitude, per cell
    x_km = (lon - WEST) * kx  # east-west distance from the west edge, km
    lat_rows = lat[:, 0]

    # --- coast line (longitude of the mainland shore as a function of latitude)
    # broad, smooth shape: used for the trench and the inland mountain range
    t = (NORTH - lat_rows) / 7.0  # 0 at north edge, 1 at south edge
    coast_smooth_lon = -143.05 + 0.30 * np.sin(2.2 * t + 0.4) - 0.20 * t
    # headlands (negative = further west) and bays (positive = further east), in km
    bumps_km = np.zeros(NROWS)
    for lat_c, width_deg, shift_km in [
        (-31.55, 0.22, +14.0),  # shallow northern bight
        (-32.20, 0.16, -28.0),  # Orvenna headland
        (-33.40, 0.30, -8.0),   # shoulders either side of the harbour
        (-34.62, 0.28, +30.0),  # Saltmarrow Bay (broad, open)
        (-35.55, 0.12, -32.0),  # Kelvaro Point (sharp headland)
        (-36.85, 0.30, +12.0),  # gentle southern bight
    ]:
        bumps_km += shift_km * np.exp(-(((lat_rows - lat_c) / width_deg) ** 2))
    wiggle = ndimage.gaussian_filter1d(rng.standard_normal(NROWS), 4.0, mode="reflect")
    wiggle = 4.0 * wiggle / wiggle.std()
    kx_rows = kx[:, 0]
    coast_lon = coast_smooth_lon + (bumps_km + wiggle) / kx_rows

    # signed east-west distance to the coast (km, positive = inland / east)
    v_coast = (lon - coast_lon[:, None]) * kx
    v_smooth = (lon - coast_smooth_lon[:, None]) * kx
    coast_noise = fbm(rng, shape, scales=(1.5, 3, 6), beta=0.8)
    land = (v_coast + 2.8 * coast_noise) > 0

    # --- deep bay with a narrow entrance: Tarnquill Harbour
    hr = row_of_lat(HARBOUR_LAT)
    h_lat = lat_rows[hr]
    h_coast = coast_lon[hr]
    h_kx = kx_rows[hr]
    basin_lon = h_coast + 15.0 / h_kx
    basin = ((lat - h_lat) * KM_PER_DEG / 10.0) ** 2 + ((lon - basin_lon) * kx / 7.0) ** 2 < 1.0
    channel = (np.abs(lat - (h_lat + 0.5 * CELL_DEG)) * KM_PER_DEG < 1.9) & (
        (lon > h_coast - 8.0 / h_kx) & (lon < basin_lon)
    )
    # keep the entrance shoulders solid so the entrance stays narrow
    shoulders = (
        (np.abs(lat - h_lat) * KM_PER_DEG < 13.5)
        & (lon > h_coast - 2.0 / h_kx)
        & (lon < basin_lon + 10.0 / h_kx)
    )
    land |= shoulders
    land &= ~(basin | channel)

    # keep only the ocean-connected water and the mainland for now
    lab, n = ndimage.label(~land)
    ocean_id = lab[0, 0]
    land = lab != ocean_id
    lab, n = ndimage.label(land)
    sizes = ndimage.sum(np.ones(shape), lab, index=np.arange(1, n + 1))
    mainland_id = 1 + int(np.argmax(sizes))
    land = lab == mainland_id

    # --- signed distance to the mainland shore (km; + offshore, - inland)
    d_off = ndimage.distance_transform_edt(~land, sampling=(DY_KM, DX_KM))
    d_in = ndimage.distance_transform_edt(land, sampling=(DY_KM, DX_KM))
    half = 0.5 * min(DX_KM, DY_KM)
    sd = np.where(land, -(d_in - half), d_off - half)

    # --- shelf and upper slope (follows the detailed coast)
    shelf_w = 50.0 + 18.0 * np.cos(2 * np.pi * (lat + 34.1) / 5.2)  # 32..68 km
    shelf_w = shelf_w + 3.0 * fbm(rng, shape, scales=(20, 40), aniso=(3, 1))
    break_depth = 165.0 + 25.0 * fbm(rng, shape, scales=(15, 30))
    dpos = np.clip(sd, 0.0, None)
    shelf = -break_depth * (np.minimum(dpos, shelf_w) / shelf_w) ** 0.85
    slope_grad = 72.0 + 8.0 * fbm(rng, shape, scales=(10, 25), aniso=(3, 1))  # m/km
    beyond = np.clip(dpos - shelf_w, 0.0, None)  # km past the shelf break
    # upper slope, steepening downwards; the forearc/trench model takes over below ~2 km
    shallow = shelf - slope_grad * beyond * (1.0 + beyond / 60.0)
    shallow = np.where(sd < 0, 4.0 * (-sd), shallow)  # extrapolated onto land (overwritten)

    # --- trench, outer rise and abyssal plain (follows the smooth coast)
    trench_off = 155.0 + 1.0 * (shelf_w - 30.0)  # ~155..195 km off the general coastline
    trench_off = ndimage.gaussian_filter(trench_off, 6.0)
    u = v_smooth + trench_off  # km from trench axis, + towards the coast
    plain = np.clip(-4700.0 + 0.5 * u, -5150.0, None)  # deepens gently westwards
    bulge = 420.0 * np.exp(-(((u + 55.0) / 32.0) ** 2))  # outer rise
    rise = 2600.0 / (1.0 + np.exp(-(u - 38.0) / 12.0))  # inner wall -> forearc
    rise += np.clip(11.0 * (u - 75.0), 0.0, 1200.0)  # forearc climbing to the slope
    trench_depth = 7000.0 + 380.0 * np.sin(2 * np.pi * (lat + 31.0) / 4.6 + 0.7)
    trench_depth += 120.0 * fbm(rng, shape, scales=(15, 30), aniso=(3, 1))
    base0 = plain + 2600.0 / (1.0 + math.exp(38.0 / 12.0)) + 420.0 * math.exp(-((55.0 / 32.0) ** 2))
    amp = trench_depth + base0  # trough amplitude that puts the axis at -trench_depth
    sig = np.where(u < 0, 19.0, 14.0)  # landward wall steeper than seaward wall
    trough = -amp * np.exp(-((u / sig) ** 2))
    deep = plain + bulge + rise + trough

    ocean = smax(shallow, deep, 120.0)

    # abyssal-hill fabric elongated parallel to the trench, scaled with depth
    fabric = fbm(rng, shape, scales=(1.5, 3, 6, 12), beta=0.9, aniso=(2.5, 1.0))
    ocean += fabric * (3.0 + 0.028 * np.clip(-ocean, 0.0, None))

    # seamounts (submerged)
    for lat_c, lon_c, height, r_km in [
        (-32.05, -148.20, 3300.0, 14.0),
        (-36.90, -147.55, 2500.0, 11.0),
        (-33.30, -146.90, 1500.0, 9.0),
    ]:
        ocean += height * gauss_bump(lat_c, lon_c, lat, lon, r_km, r_km * 1.15)

    # volcanic island on the outer rise: steep-sided, ~15 km across at sea level
    vr = row_of_lat(VOLCANO_LAT)
    trench_lon_v = float(coast_smooth_lon[vr] - trench_off[vr].mean() / kx_rows[vr])
    volc_lon = trench_lon_v - 60.0 / kx_rows[vr]
    volc_base = float(ocean[vr, int((volc_lon - WEST) / CELL_DEG)])
    cone = gauss_bump(VOLCANO_LAT, volc_lon, lat, lon, 15.0, 17.0)
    rough = fbm(rng, shape, scales=(1, 2, 4), beta=0.7)  # gullied flanks
    ocean += (1150.0 - volc_base) * cone + 600.0 * rough * cone * (1.0 - cone)
    volcano = (VOLCANO_LAT, volc_lon)

    # chain of islets on the wide shelf
    islets = []
    for il, off_km, height, r_km in zip(
        ISLET_LATS, (27.0, 36.0, 44.0), (200.0, 165.0, 150.0), (4.4, 3.4, 3.0)
    ):
        ir = row_of_lat(il)
        il_lon = coast_lon[ir] - off_km / kx_rows[ir]
        ocean += height * gauss_bump(il, il_lon, lat, lon, r_km, r_km * 1.2)
        islets.append((il, float(il_lon)))

    ocean = ndimage.gaussian_filter(ocean, 0.8)  # mild smoothing of the sea floor

    # --- land: coastal plain, a coastal range and rolling hills
    di = np.clip(-sd, 0.0, None)
    plain_land = 3.0 + 420.0 * (1.0 - np.exp(-((di / 45.0) ** 1.5)))
    range_ax = 95.0 + 12.0 * fbm(rng, shape, scales=(30, 60), aniso=(3, 1))
    ridge = 680.0 * np.exp(-(((v_smooth - range_ax) / 32.0) ** 2))
    ridge *= 1.0 + 0.35 * fbm(rng, shape, scales=(8, 16, 32), aniso=(2, 1))
    hills = fbm(rng, shape, scales=(1.5, 3, 6, 12, 24), beta=1.0)
    relief = 1.0 - np.exp(-di / 12.0)
    hland = plain_land + ridge * (1.0 - np.exp(-di / 20.0)) + 170.0 * hills * relief
    hland = ndimage.gaussian_filter(hland, 0.8)
    hland = np.where(hland > 1100.0, 1100.0 + 380.0 * np.tanh((hland - 1100.0) / 380.0), hland)
    hland = np.maximum(hland, 1.0 + 0.4 * di)

    # mainland from the land model; offshore the sea-floor model, whose only
    # positive values are the islands.  Water is at least 1 m deep, land at
    # least 1 m high, so no cell sits exactly at 0.
    z = np.where(land, hland, np.where(ocean > 0, np.maximum(ocean, 1.0), np.minimum(ocean, -1.0)))

    # the harbour: a scoured entrance channel (>= 12 m) and a bowl-shaped basin
    basin_rn2 = ((lat - h_lat) * KM_PER_DEG / 10.0) ** 2 + ((lon - basin_lon) * kx / 7.0) ** 2
    z = np.where(basin & ~land, np.minimum(z, -(4.0 + 22.0 * (1.0 - basin_rn2))), z)
    z = np.where(channel & ~land, np.minimum(z, -12.0), z)

    # --- closed lagoon (Vessamere Lagoon): water below sea level, fully enclosed
    lr = row_of_lat(LAGOON_LAT)
    lag_lon = coast_lon[lr] + 11.0 / kx_rows[lr]
    rn2 = ((lat - LAGOON_LAT) * KM_PER_DEG / 6.5) ** 2 + ((lon - lag_lon) * kx / 3.4) ** 2
    lagoon = rn2 < 1.0
    ring = ndimage.binary_dilation(lagoon, np.ones((3, 3), bool), iterations=2) & ~lagoon
    lowland = np.exp(-np.clip(rn2 - 1.0, 0, None) / 1.5)  # flatten the surroundings
    z = np.where(land & ~lagoon, z * (1 - 0.85 * lowland) + 3.0 * lowland, z)
    z = np.where(lagoon, -(4.0 + 14.0 * (1.0 - rn2)), z)
    z = np.where(ring, np.maximum(z, 2.0), z)

    # --- pond behind a barrier spit, joined to the sea only through a diagonal
    sr = row_of_lat(SPIT_LAT)
    sc = int(np.argmax(land[sr]))  # westernmost mainland cell on that row
    r0, c0 = sr, sc - 1  # sea cell at the upper-left of the 2x2 join
    block = np.zeros(shape, bool)
    block[r0 : r0 + 5, c0 : c0 + 5] = True
    pond = np.zeros(shape, bool)
    pond[r0 + 1 : r0 + 4, c0 + 1 : c0 + 4] = True
    z = np.where(block & ~pond, np.maximum(z, 2.0), z)  # spit and pond banks
    z[pond] = -2.0
    z[r0 + 2, c0 + 2] = -3.0
    z[r0, c0] = min(float(z[r0, c0]), -2.0)
    z[r0, c0 - 1] = min(float(z[r0, c0 - 1]), -3.0)
    join = (r0, c0)

    # --- tidy: integers, no zeros, remove stray specks
    z = np.round(z)
    z = np.where((z == 0) & (land | (ocean > 0)), 1.0, z)
    z = np.where(z == 0, -1.0, z)

    keep_water = lagoon | pond
    lab, n = water_components(z)
    ocean_id = lab[0, 0]
    stray_water = (lab > 0) & (lab != ocean_id) & ~ndimage.binary_dilation(keep_water) & ~keep_water
    # a stray basin touching the kept ones would be a bug: let it fail the checks
    for k in np.unique(lab[stray_water]):
        z[lab == k] = 2.0
    lab, n = ndimage.label(z >= 0)
    sizes = ndimage.sum(np.ones(shape), lab, index=np.arange(1, n + 1))
    for k, s in enumerate(sizes, start=1):
        if s < 3:  # single-cell specks from noise
            z[lab == k] = -2.0

    info = {
        "harbour_row": hr,
        "harbour_basin_lon": float(basin_lon),
        "lagoon_mask": lagoon,
        "lagoon_centre": (LAGOON_LAT, float(lag_lon)),
        "pond_mask": pond,
        "join": join,
        "volcano": volcano,
        "islets": islets,
        "trench_lon_at_volcano": trench_lon_v,
        "coast_lon": coast_lon,
        "shelf_w": shelf_w,
    }
    return z.astype(np.float32), info


# ---------------------------------------------------------------------------
# checks
# ---------------------------------------------------------------------------
def check_grid(z: np.ndarray, info: dict) -> dict:
    assert z.shape == (NROWS, NCOLS)
    lab4, n4 = water_components(z)
    lab8, n8 = water_components(z, diagonal=True)
    ocean4 = lab4[0, 0]
    lag_ids = np.unique(lab4[info["lagoon_mask"]])
    assert len(lag_ids) == 1 and lag_ids[0] not in (0, ocean4), "lagoon must be its own 4-component"
    lag8 = np.unique(lab8[info["lagoon_mask"]])
    assert lag8[0] != lab8[0, 0], "lagoon must be enclosed even with diagonal moves"
    pond_ids = np.unique(lab4[info["pond_mask"]])
    assert len(pond_ids) == 1 and pond_ids[0] != ocean4
    assert np.unique(lab8[info["pond_mask"]])[0] == lab8[0, 0], "pond must touch the sea diagonally"
    joins = diagonal_joins(z)
    assert joins == [info["join"]], f"expected exactly one diagonal join, got {joins}"
    # water components other than the open ocean: exactly the lagoon and the pond
    others = sorted(set(range(1, n4 + 1)) - {ocean4})
    assert sorted(others) == sorted([int(lag_ids[0]), int(pond_ids[0])]), others
    land_lab, nl = ndimage.label(z >= 0)
    sizes = ndimage.sum(np.ones(z.shape), land_lab, index=np.arange(1, nl + 1))
    return {
        "water_components_4": n4,
        "land_components_4": nl,
        "land_component_sizes": sorted(int(s) for s in sizes),
        "diagonal_joins": joins,
    }


# ---------------------------------------------------------------------------
# sites
# ---------------------------------------------------------------------------
def coastal_cell(z, ocean_water, lat_target, lon_min, lon_max, prefer="east"):
    """Land cell next to ocean-connected water on the row nearest lat_target,
    within [lon_min, lon_max]; picks the most easterly / westerly candidate."""
    lon, lat = cell_centres()
    land = z >= 0
    nb = np.zeros_like(land)
    nb[1:, :] |= ocean_water[:-1, :]
    nb[:-1, :] |= ocean_water[1:, :]
    nb[:, 1:] |= ocean_water[:, :-1]
    nb[:, :-1] |= ocean_water[:, 1:]
    cand = land & nb & (lon >= lon_min) & (lon <= lon_max)
    r = row_of_lat(lat_target)
    for dr in range(0, 15):
        for rr in (r + dr, r - dr):
            cols = np.nonzero(cand[rr])[0]
            if cols.size:
                c = cols.max() if prefer == "east" else cols.min()
                return int(rr), int(c)
    raise RuntimeError(f"no coastal cell near {lat_target}")


def make_sites(z: np.ndarray, info: dict) -> list[dict]:
    lab4, _ = water_components(z)
    ocean_water = lab4 == lab4[0, 0]
    coast = info["coast_lon"]
    hr = info["harbour_row"]

    def ll(rc, dlon=0.0):
        r, c = rc
        return round(WEST + (c + 0.5) * CELL_DEG + dlon, 4), round(NORTH - (r + 0.5) * CELL_DEG, 4)

    sites = []
    # east shore of the deep bay
    rc = coastal_cell(z, ocean_water, -33.40 - 2 * CELL_DEG, coast[hr], info["harbour_basin_lon"] + 0.2)
    sites.append(("Tarnquill Harbour", ll(rc), (900, 1.0, 5, 10)))
    # on the northern headland
    rc = coastal_cell(z, ocean_water, -32.18, -150, -141, prefer="west")
    sites.append(("Orvenna", ll(rc), (None, None, None, None)))
    # open beach in the broad bay, 0.003 deg (~0.3 km) east of the shore cell's centre
    rc = coastal_cell(z, ocean_water, -34.62, -150, -141, prefer="west")
    sites.append(("Saltmarrow Beach", ll(rc, dlon=0.0030), (1500, 1.2, None, 8)))
    # tip of the sharp headland
    rc = coastal_cell(z, ocean_water, -35.55, -150, -141, prefer="west")
    sites.append(("Kelvaro Point", ll(rc), (400, None, 3, None)))
    # coastal village seaward of the closed lagoon
    rc = coastal_cell(z, ocean_water, LAGOON_LAT, -150, -141, prefer="west")
    sites.append(("Ferrowick", ll(rc), (None, 0.8, 10, 15)))
    # on the barrier spit, right next to the diagonal join
    r0, c0 = info["join"]
    sites.append(("Ambledrift Spit", ll((r0 + 2, c0)), (2500, 1.0, 5, None)))
    # east (trench-facing) shore of the volcanic island
    v_lat, v_lon = info["volcano"]
    rc = coastal_cell(z, ocean_water, v_lat, v_lon - 0.3, v_lon + 0.3, prefer="east")
    sites.append(("Ulmeth Landing", ll(rc), (300, 0.9, 5, 20)))
    # largest islet of the shelf chain
    i_lat, i_lon = info["islets"][0]
    rc = coastal_cell(z, ocean_water, i_lat, i_lon - 0.1, i_lon + 0.1, prefer="east")
    sites.append(("Gannix Jetty", ll(rc), (None, None, None, None)))

    rows = []
    for name, (lo, la), (dist, speed, prep, notif) in sites:
        rows.append(
            {
                "name": name,
                "lon": f"{lo:.4f}",
                "lat": f"{la:.4f}",
                "safe_ground_distance_m": "" if dist is None else str(dist),
                "walking_speed_m_s": "" if speed is None else str(speed),
                "preparation_min": "" if prep is None else str(prep),
                "notification_delay_min": "" if notif is None else str(notif),
            }
        )
    return rows


def write_sites(rows: list[dict], path: Path) -> None:
    fields = [
        "name",
        "lon",
        "lat",
        "safe_ground_distance_m",
        "walking_speed_m_s",
        "preparation_min",
        "notification_delay_min",
    ]
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=fields, lineterminator="\n")
        w.writeheader()
        w.writerows(rows)


# ---------------------------------------------------------------------------
# output
# ---------------------------------------------------------------------------
def write_geotiff(z: np.ndarray, path: Path) -> None:
    import rasterio
    from rasterio.transform import Affine

    profile = {
        "driver": "GTiff",
        "dtype": "float32",
        "width": NCOLS,
        "height": NROWS,
        "count": 1,
        "crs": "EPSG:4326",
        "transform": Affine(CELL_DEG, 0.0, WEST, 0.0, -CELL_DEG, NORTH),
        "nodata": NODATA,
        "tiled": True,
        "blockxsize": 256,
        "blockysize": 256,
        "compress": "deflate",
        "predictor": 3,
        "zlevel": 9,
        "interleave": "band",
    }
    if path.exists():
        path.unlink()
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(z, 1)
        dst.update_tags(**TAGS)
        dst.set_band_description(1, "elevation_m")
        dst.update_tags(1, UNITS="m")


def write_preview(z: np.ndarray, rows: list[dict], info: dict, path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import FuncNorm, LightSource, LinearSegmentedColormap

    extent = (WEST, WEST + NCOLS * CELL_DEG, NORTH - NROWS * CELL_DEG, NORTH)
    # one colour scale for sea and land; the norm stretches the shelf and the
    # land so that both stay readable next to the 7 km deep trench
    knots_z = np.array([-7500.0, -6000.0, -4500.0, -2000.0, -200.0, 0.0, 0.001, 300.0, 1500.0])
    knots_n = np.array([0.0, 0.12, 0.30, 0.48, 0.62, 0.70, 0.70, 0.85, 1.0])
    norm = FuncNorm(
        (lambda v: np.interp(v, knots_z, knots_n), lambda n: np.interp(n, knots_n, knots_z)),
        vmin=-7500.0, vmax=1500.0,
    )
    cmap = LinearSegmentedColormap.from_list(
        "ttmap_demo",
        [
            (0.00, "#07143a"), (0.12, "#0d2a63"), (0.30, "#1c4f95"), (0.48, "#3a7cc0"),
            (0.62, "#7fb7e3"), (0.6999, "#d4ecf8"), (0.70, "#b9d98f"), (0.85, "#c8b07a"),
            (0.95, "#9b7b58"), (1.00, "#f4f1ea"),
        ],
    )
    ls = LightSource(azdeg=315, altdeg=35)
    rgb = ls.shade(z.astype(float), cmap=cmap, norm=norm, blend_mode="soft",
                   vert_exag=0.05, dx=1852.0 * math.cos(math.radians(LAT_MID)), dy=1852.0)

    DPI = 100
    fig, ax = plt.subplots(figsize=(7.4, 6.3), dpi=DPI)
    ax.imshow(rgb, extent=extent, interpolation="bilinear")
    lon, lat = cell_centres()
    cs = ax.contour(lon, lat, z, levels=[-6000, -4000, -200], colors="white",
                    linewidths=[0.6, 0.4, 0.5], alpha=0.7)
    ax.clabel(cs, fmt=lambda v: f"{-v:.0f} m", fontsize=6, inline=True)
    ax.contour(lon, lat, z, levels=[0], colors="k", linewidths=0.45)
    ax.set_aspect(1.0 / math.cos(math.radians(LAT_MID)))
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    for row in rows:
        x, y = float(row["lon"]), float(row["lat"])
        ax.plot(x, y, "o", ms=3.5, mfc="#e0301e", mec="k", mew=0.5)
        left = x < -144.0  # island sites: label to the west
        ax.annotate(row["name"], (x, y), xytext=(-6 if left else 5, 5 if left else 2),
                    textcoords="offset points",
                    fontsize=6.3, ha="right" if left else "left", va="bottom",
                    bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.75))
    t_lon = info["trench_lon_at_volcano"]
    ax.text(t_lon + 0.12, -36.4, "trench", rotation=90, fontsize=7, color="white",
            ha="center", va="center")
    ax.text(-149.7, -31.35, "abyssal plain", fontsize=7, color="white", va="top")
    lag_lat, lag_lon = info["lagoon_centre"]
    ax.annotate("closed lagoon", (lag_lon, lag_lat), xytext=(14, -16), textcoords="offset points",
                fontsize=6.3, arrowprops=dict(arrowstyle="-", lw=0.5))
    r0, c0 = info["join"]
    j_lon, j_lat = WEST + (c0 + 1) * CELL_DEG, NORTH - (r0 + 1) * CELL_DEG
    ax.annotate(f"diagonal-only join\n(row {r0}, col {c0})", (j_lon, j_lat), xytext=(-90, -20),
                textcoords="offset points", fontsize=6.3, color="white",
                arrowprops=dict(arrowstyle="-", lw=0.5, color="white"))
    ax.set_xlabel("longitude (placeholder coordinates)", fontsize=8)
    ax.set_ylabel("latitude (placeholder coordinates)", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.set_title("INVENTED DATA - ttmap demo bathymetry\n"
                 "synthetic terrain, not a real place; do not use for planning", fontsize=9)
    sm = ScalarMappable(norm=norm, cmap=cmap)
    cb = fig.colorbar(sm, ax=ax, fraction=0.04, pad=0.02,
                      ticks=[-7000, -6000, -4500, -2000, -200, 0, 300, 1500])
    cb.set_label("elevation (m, negative below sea level)", fontsize=7)
    cb.ax.tick_params(labelsize=6)
    fig.tight_layout()
    # render, then store as a 256-colour palette PNG to keep the file small:
    # 248 median-cut colours plus a few fixed ones (markers, text, coast)
    import io

    from PIL import Image

    buf = io.BytesIO()
    fig.savefig(buf, dpi=DPI, format="png")
    plt.close(fig)
    buf.seek(0)
    rgb_img = Image.open(buf).convert("RGB")
    base = rgb_img.quantize(colors=248, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE)
    palette = base.getpalette()[: 248 * 3]
    for colour in ["#e0301e", "#000000", "#ffffff", "#b9d98f", "#d4ecf8", "#808080", "#07143a", "#f4f1ea"]:
        palette += [int(colour[i : i + 2], 16) for i in (1, 3, 5)]
    pal_img = Image.new("P", (1, 1))
    pal_img.putpalette(palette)
    img = rgb_img.quantize(palette=pal_img, dither=Image.Dither.NONE)
    img.save(path, format="PNG", optimize=True)


def main(argv=None) -> None:
    here = Path(__file__).resolve().parent
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", type=Path, default=here, help="output directory (default: next to this script)")
    ap.add_argument("--preview", action="store_true", help="also write demo_bathymetry_preview.png")
    args = ap.parse_args(argv)
    out = args.out
    out.mkdir(parents=True, exist_ok=True)

    z, info = build_grid(SEED)
    summary = check_grid(z, info)
    rows = make_sites(z, info)

    tif = out / "demo_bathymetry.tif"
    write_geotiff(z, tif)
    write_sites(rows, out / "demo_sites.csv")
    if args.preview:
        write_preview(z, rows, info, out / "demo_bathymetry_preview.png")

    lag = np.argwhere(info["lagoon_mask"])
    print(f"wrote {tif} ({tif.stat().st_size} bytes)")
    print(f"shape {z.shape}, min {z.min():.0f} m, max {z.max():.0f} m, water share {np.mean(z < 0):.3f}")
    print(f"diagonal join (upper-left of 2x2 block): row {info['join'][0]}, col {info['join'][1]}")
    print(f"lagoon rows {lag[:, 0].min()}..{lag[:, 0].max()}, cols {lag[:, 1].min()}..{lag[:, 1].max()}, "
          f"{len(lag)} cells")
    print(f"land components (4-conn) sizes: {summary['land_component_sizes']}")


if __name__ == "__main__":
    main()
