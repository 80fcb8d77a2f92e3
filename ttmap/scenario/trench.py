"""Trench geometry: rupture centres at equal geodesic spacing along a polyline.

The rectangles of a ``[[trench]]`` table are centred on its polyline, each
``spacing_km`` (geodesic, WGS84) from the one before, as many as fit, with
what is left over split between both ends.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence

from ttmap.errors import InputDataError

__all__ = ["trench_centres"]


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

