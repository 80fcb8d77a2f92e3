"""Physical and geodetic constants, SI units.

Sources
-------
- Standard gravity: 3rd CGPM (1901), exact by definition.
- WGS84 semi-major axis and inverse flattening: the WGS84 definition
  (NIMA TR8350.2); values quoted from memory of the standard and checked
  against pyproj's ellipsoid table in the tests.
- Mean radius R1 = (2a + b) / 3 (IUGG mean radius), computed from WGS84.
"""

from __future__ import annotations

import math

__all__ = [
    "G_M_S2",
    "WGS84_A_M",
    "WGS84_INV_F",
    "WGS84_F",
    "WGS84_B_M",
    "WGS84_E2",
    "WGS84_E",
    "MEAN_EARTH_RADIUS_M",
    "SEAWATER_SOUND_SPEED_M_S",
]

#: Standard acceleration of gravity, m/s^2 (exact, 3rd CGPM 1901).
G_M_S2: float = 9.80665

#: WGS84 semi-major (equatorial) axis, m.
WGS84_A_M: float = 6378137.0
#: WGS84 inverse flattening.
WGS84_INV_F: float = 298.257223563
#: WGS84 flattening.
WGS84_F: float = 1.0 / WGS84_INV_F
#: WGS84 semi-minor axis, m.
WGS84_B_M: float = WGS84_A_M * (1.0 - WGS84_F)
#: WGS84 first eccentricity squared.
WGS84_E2: float = WGS84_F * (2.0 - WGS84_F)
#: WGS84 first eccentricity.
WGS84_E: float = math.sqrt(WGS84_E2)

#: IUGG mean Earth radius R1 = (2a + b) / 3, m.
MEAN_EARTH_RADIUS_M: float = (2.0 * WGS84_A_M + WGS84_B_M) / 3.0

#: Nominal speed of sound in sea water, m/s, used by the optional far-field
#: effective-depth correction (a round value; see ttmap.physics.speed).
SEAWATER_SOUND_SPEED_M_S: float = 1500.0
