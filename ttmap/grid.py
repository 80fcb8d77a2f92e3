"""Raster geometry: shape, affine transform, CRS, and the metric plane the solver uses.

A :class:`Grid` describes a north-up (or south-up) raster: its shape, its affine
transform (pixel corners, as rasterio uses them) and its CRS. It knows whether
it is geographic (longitude/latitude degrees) or projected (linear units), and
whether a geographic grid wraps around all 360 degrees of longitude.

The eikonal solver needs square-ish cells of uniform metric size. A projected
grid already has them. A geographic grid is carried onto a *solve plane*: the
Mercator map of the same region, whose rows are spaced uniformly in isometric
latitude. Mercator is conformal, so travel time there obeys an isotropic
eikonal equation with the speed multiplied by the Mercator scale factor (see
``docs/method.md``). :func:`solve_plane` builds that plane and the index maps
that carry fields onto it and times back.

Notes
-----
Ellipsoidal Mercator (Snyder 1987, *Map Projections: A Working Manual*, USGS
Prof. Paper 1395, eqs. 3-7 and 7-7): with semi-major axis ``a`` and first
eccentricity ``e``,

- x = a * lambda
- y = a * psi, psi = atanh(sin phi) - e * atanh(e sin phi) (isometric latitude)
- scale factor k = sqrt(1 - e^2 sin^2 phi) / cos phi

On a sphere of radius R: y = R * atanh(sin phi), k = 1 / cos phi.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from affine import Affine
from pyproj import CRS

from ttmap.defaults import EARTH_MODELS
from ttmap._typing import EarthModel, FloatArray, IntArray
from ttmap.errors import GridError
from ttmap.physics.constants import MEAN_EARTH_RADIUS_M, WGS84_A_M, WGS84_E, WGS84_E2

__all__ = [
    "Grid",
    "SolvePlane",
    "solve_plane",
    "isometric_latitude",
    "latitude_from_isometric",
    "mercator_scale_factor",
    "MAX_ABS_LATITUDE_DEG",
]

#: Grids reaching closer to a pole than this are refused: the Mercator scale
#: factor (11.5 at 85 degrees) would make the solve plane too large, and
#: tsunami travel-time maps there are rarely meaningful at gridded resolution.
MAX_ABS_LATITUDE_DEG: float = 85.0

# Relative tolerance used when deciding whether a grid spans 360 degrees.
_WRAP_RTOL = 1e-6
# Largest accepted ratio of the two cell sides of a projected grid.
_MAX_CELL_ASPECT = 2.0
# Cells per slice when carrying times back to the native rows.
_TO_NATIVE_CELLS = 1 << 18


def _earth(earth: str) -> tuple[float, float]:
    """Return (radius used for Mercator x/y in m, first eccentricity)."""
    if earth == "wgs84":
        return WGS84_A_M, WGS84_E
    if earth == "sphere":
        return MEAN_EARTH_RADIUS_M, 0.0
    raise GridError(f"earth model {earth!r} is unknown; choose one of {', '.join(EARTH_MODELS)}")


def isometric_latitude(lat_deg: Any, *, earth: EarthModel = "wgs84") -> FloatArray:
    """Isometric latitude psi (radians) of geodetic latitude in degrees.

    Examples
    --------
    >>> float(isometric_latitude(0.0))
    0.0
    >>> round(float(isometric_latitude(45.0, earth="sphere")), 10)
    0.881373587
    """
    _, e = _earth(earth)
    s = np.sin(np.radians(np.asarray(lat_deg, dtype=np.float64)))
    return np.asarray(np.arctanh(s) - e * np.arctanh(e * s), dtype=np.float64)


def latitude_from_isometric(psi: Any, *, earth: EarthModel = "wgs84") -> FloatArray:
    """Geodetic latitude (degrees) of isometric latitude ``psi`` (radians).

    Inverts :func:`isometric_latitude` by fixed-point iteration (Snyder 1987,
    eq. 7-9), converged to better than 1e-14 rad.

    Examples
    --------
    >>> round(float(latitude_from_isometric(isometric_latitude(60.0))), 10)
    60.0
    """
    _, e = _earth(earth)
    psi = np.asarray(psi, dtype=np.float64)
    phi = 2.0 * np.arctan(np.exp(psi)) - math.pi / 2.0  # spherical inverse
    if e == 0.0:
        return np.asarray(np.degrees(phi), dtype=np.float64)
    for _ in range(30):
        es = e * np.sin(phi)
        nxt = 2.0 * np.arctan(np.exp(psi) * ((1.0 + es) / (1.0 - es)) ** (e / 2.0)) - math.pi / 2.0
        done = np.max(np.abs(nxt - phi), initial=0.0) < 1e-15
        phi = nxt
        if done:
            break
    return np.asarray(np.degrees(phi), dtype=np.float64)


def mercator_scale_factor(lat_deg: Any, *, earth: EarthModel = "wgs84") -> FloatArray:
    """Mercator point scale factor k at geodetic latitude (degrees).

    ``k = sqrt(1 - e^2 sin^2 phi) / cos phi`` against the radius used for the
    Mercator coordinates (the equatorial radius for WGS84, R1 for the sphere).

    Examples
    --------
    >>> round(float(mercator_scale_factor(60.0, earth="sphere")), 12)
    2.0
    """
    _, e = _earth(earth)
    phi = np.radians(np.asarray(lat_deg, dtype=np.float64))
    return np.asarray(np.sqrt(1.0 - (e * np.sin(phi)) ** 2) / np.cos(phi), dtype=np.float64)


@dataclass(frozen=True)
class Grid:
    """Geometry of a raster: shape, affine transform and CRS.

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)``.
    transform : affine.Affine
        Maps pixel-corner ``(col, row)`` to map ``(x, y)``, as in rasterio.
        Rotation and shear terms must be zero.
    crs : pyproj.CRS or anything ``pyproj.CRS.from_user_input`` accepts
        Geographic (degrees) or projected (linear units).

    Raises
    ------
    GridError
        Rotated or sheared transform, zero cell size, missing CRS, a
        geographic CRS not in degrees, or a projected cell aspect beyond 2.

    Examples
    --------
    >>> from affine import Affine
    >>> g = Grid((180, 360), Affine(1, 0, -180, 0, -1, 90), "EPSG:4326")
    >>> g.is_geographic, g.wraps_x
    (True, True)
    """

    shape: tuple[int, int]
    transform: Affine
    crs: CRS = field(repr=False)

    def __post_init__(self) -> None:
        if len(self.shape) != 2 or min(self.shape) < 2:
            raise GridError(f"grid shape {self.shape} is not a 2-D raster of at least 2 x 2 cells")
        object.__setattr__(self, "shape", (int(self.shape[0]), int(self.shape[1])))
        if self.crs is None:
            raise GridError("grid has no CRS; assign one to the raster (e.g. gdal_edit.py -a_srs)")
        try:
            crs = CRS.from_user_input(self.crs)
        except Exception as err:  # pyproj raises CRSError, a plain Exception subclass
            raise GridError(f"grid CRS {self.crs!r} is not understood: {err}") from err
        object.__setattr__(self, "crs", crs)
        t = self.transform
        if not isinstance(t, Affine):
            t = Affine(*tuple(t)[:6])
            object.__setattr__(self, "transform", t)
        if t.b != 0.0 or t.d != 0.0:
            raise GridError(
                f"grid transform is rotated or sheared (b={t.b}, d={t.d}); "
                "warp it north-up first (e.g. gdalwarp)"
            )
        if t.a == 0.0 or t.e == 0.0:
            raise GridError(f"grid transform has a zero cell size (a={t.a}, e={t.e})")
        if t.a < 0.0:
            raise GridError(
                f"grid columns run east to west (a={t.a}); flip the raster east-up (e.g. gdalwarp)"
            )
        if crs.is_geographic:
            unit = crs.axis_info[0].unit_name if crs.axis_info else "degree"
            if "degree" not in unit:
                raise GridError(f"geographic CRS has angular unit {unit!r}; only degrees are supported")
        else:
            ratio = abs(t.a) / abs(t.e)
            if not (1.0 / _MAX_CELL_ASPECT <= ratio <= _MAX_CELL_ASPECT):
                raise GridError(
                    f"projected cells are {abs(t.a):g} x {abs(t.e):g} map units (aspect {ratio:.2f}); "
                    f"resample to near-square cells (aspect within {_MAX_CELL_ASPECT:g})"
                )

    # ------------------------------------------------------------------ basics
    @property
    def rows(self) -> int:
        """Number of rows."""
        return self.shape[0]

    @property
    def cols(self) -> int:
        """Number of columns."""
        return self.shape[1]

    @property
    def is_geographic(self) -> bool:
        """True for longitude/latitude grids."""
        return bool(self.crs.is_geographic)

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """``(left, bottom, right, top)`` in map coordinates."""
        t = self.transform
        x0, x1 = t.c, t.c + t.a * self.cols
        y0, y1 = t.f, t.f + t.e * self.rows
        return (min(x0, x1), min(y0, y1), max(x0, x1), max(y0, y1))

    @property
    def linear_unit_m(self) -> float:
        """Metres per map unit of a projected grid (1.0 for metre CRSs)."""
        if self.is_geographic:
            raise GridError("a geographic grid has no linear unit")
        info = self.crs.axis_info
        return float(info[0].unit_conversion_factor) if info else 1.0

    @property
    def _span_cols(self) -> float:
        return abs(self.transform.a) * self.cols

    @property
    def has_seam_column(self) -> bool:
        """True if the last column repeats the first one 360 degrees further on."""
        if not self.is_geographic:
            return False
        span = abs(self.transform.a) * (self.cols - 1)
        return abs(span - 360.0) <= _WRAP_RTOL * 360.0

    @property
    def wraps_x(self) -> bool:
        """True for a geographic grid spanning all 360 degrees of longitude."""
        if not self.is_geographic:
            return False
        return abs(self._span_cols - 360.0) <= _WRAP_RTOL * 360.0 or self.has_seam_column

    def xy(self, row: Any, col: Any) -> tuple[FloatArray, FloatArray]:
        """Map coordinates of cell centres ``(row, col)`` (arrays allowed)."""
        r = np.asarray(row, dtype=np.float64) + 0.5
        c = np.asarray(col, dtype=np.float64) + 0.5
        t = self.transform
        return t.a * c + t.c, t.e * r + t.f

    def rowcol(self, x: Any, y: Any) -> tuple[IntArray, IntArray]:
        """Row and column of the cell containing map position ``(x, y)``.

        Longitudes of a geographic grid are taken modulo 360 (so -175 and 185
        name the same cell of a grid running from 170 to 190). Positions
        outside the grid give indices outside ``[0, rows)`` / ``[0, cols)``.
        """
        t = self.transform
        xx = np.asarray(x, dtype=np.float64)
        if self.is_geographic:
            xx = t.c + np.mod(xx - t.c, 360.0)
        col = np.floor((xx - t.c) / t.a).astype(np.intp)
        row = np.floor((np.asarray(y, dtype=np.float64) - t.f) / t.e).astype(np.intp)
        if self.has_seam_column:
            col = np.where(col >= self.cols - 1, col - (self.cols - 1), col)
        return row, col

    def contains(self, x: Any, y: Any) -> Any:
        """True where map position ``(x, y)`` lies inside the grid."""
        row, col = self.rowcol(x, y)
        return (row >= 0) & (row < self.rows) & (col >= 0) & (col < self.cols)

    def point_scale_factors(self) -> tuple[float, float] | None:
        """Point scale of a projected grid's CRS at the grid's centre.

        Returns
        -------
        (meridional_scale, parallel_scale) or None
            Map distance per ground distance along the meridian and the
            parallel through the centre (PROJ's ``get_factors``); None for a
            geographic grid or where PROJ cannot tell (e.g. an engineering
            CRS, or a centre outside the projection's domain).

        Examples
        --------
        >>> from affine import Affine
        >>> g = Grid((100, 100), Affine(1000, 0, 450_000, 0, -1000, 100_000), "EPSG:32654")
        >>> [round(k, 4) for k in g.point_scale_factors()]
        [0.9996, 0.9996]
        """
        if self.is_geographic:
            return None
        from pyproj import Proj, Transformer
        from pyproj.exceptions import ProjError

        left, bottom, right, top = self.bounds
        try:
            to_ll = Transformer.from_crs(self.crs, self.crs.geodetic_crs, always_xy=True)
            lon, lat = to_ll.transform(0.5 * (left + right), 0.5 * (bottom + top))
            f = Proj(self.crs).get_factors(lon, lat)
            k_m, k_p = float(f.meridional_scale), float(f.parallel_scale)
        except (ProjError, ValueError, TypeError):  # no geodetic CRS, or PROJ cannot tell
            return None
        if not (math.isfinite(k_m) and math.isfinite(k_p) and k_m > 0.0 and k_p > 0.0):
            return None
        return k_m, k_p

    def row_latitudes_deg(self) -> FloatArray:
        """Latitude of each row's cell centres (geographic grids only)."""
        if not self.is_geographic:
            raise GridError("row latitudes are defined for geographic grids only")
        return np.asarray(self.transform.e * (np.arange(self.rows) + 0.5) + self.transform.f, dtype=np.float64)

    def cell_size_m(self) -> tuple[float, float]:
        """Approximate ``(row_spacing_m, col_spacing_m)`` at the grid's middle latitude."""
        t = self.transform
        if not self.is_geographic:
            u = self.linear_unit_m
            return abs(t.e) * u, abs(t.a) * u
        left, bottom, right, top = self.bounds
        lat = math.radians(0.5 * (bottom + top))
        # Meridian and prime-vertical radii of curvature of WGS84.
        w = math.sqrt(1.0 - WGS84_E2 * math.sin(lat) ** 2)
        m_r = WGS84_A_M * (1.0 - WGS84_E2) / w**3
        n_r = WGS84_A_M / w
        return math.radians(abs(t.e)) * m_r, math.radians(abs(t.a)) * n_r * math.cos(lat)

    def check_latitude_limit(self, max_abs_lat_deg: float = MAX_ABS_LATITUDE_DEG) -> None:
        """Raise :class:`GridError` if a geographic grid reaches too near a pole."""
        if not self.is_geographic:
            return
        _, bottom, _, top = self.bounds
        if bottom < -90.0 or top > 90.0:
            raise GridError(
                f"grid latitudes run from {bottom:g} to {top:g} degrees, beyond +/-90; "
                "check the raster's transform and CRS"
            )
        if max(abs(bottom), abs(top)) > max_abs_lat_deg:
            raise GridError(
                f"grid reaches latitude {bottom if abs(bottom) > abs(top) else top:g} degrees, "
                f"closer to a pole than the {max_abs_lat_deg:g}-degree limit of the Mercator solve; "
                f"crop it to |latitude| <= {max_abs_lat_deg:g}"
            )


@dataclass(frozen=True)
class SolvePlane:
    """A uniform metric grid on which the eikonal equation is solved.

    For projected grids it is the grid itself (in metres). For geographic
    grids it is the Mercator plane with rows uniform in isometric latitude.

    Attributes
    ----------
    shape : tuple of int
        ``(rows, cols)`` of the solve grid (a duplicated seam column dropped).
    spacing_m : tuple of float
        ``(row_spacing_m, col_spacing_m)`` in plane metres.
    x0_m, y0_m : float
        Plane coordinates of the centre of solve cell ``(0, 0)``.
    dx_signed_m, dy_signed_m : float
        Signed plane step per column and per row.
    scale_factor : ndarray of shape (rows,)
        Plane metres per ground metre in each solve row (1 for projected).
    native_row : ndarray of shape (rows,), int
        Native row whose cell contains each solve row's centre.
    back_row0, back_row1, back_weight : ndarrays of shape (native rows,)
        Linear interpolation from solve rows to native row centres.
    periodic_x : bool
        Columns wrap around (global geographic grid).
    drop_seam : bool
        The native grid's last column duplicates the first.
    """

    grid: Grid
    earth: str
    shape: tuple[int, int]
    spacing_m: tuple[float, float]
    x0_m: float
    y0_m: float
    dx_signed_m: float
    dy_signed_m: float
    scale_factor: FloatArray = field(repr=False)
    native_row: IntArray = field(repr=False)
    back_row0: IntArray = field(repr=False)
    back_row1: IntArray = field(repr=False)
    back_weight: FloatArray = field(repr=False)
    periodic_x: bool = False
    drop_seam: bool = False

    @property
    def is_identity(self) -> bool:
        """True when solve rows are the native rows (projected grids)."""
        return not self.grid.is_geographic

    def to_plane(self, x: Any, y: Any) -> tuple[FloatArray, FloatArray]:
        """Plane coordinates (m) of map positions ``(x, y)`` in the grid's CRS.

        Longitudes are first taken modulo 360 into the grid's window
        ``[left, left + 360)``, as in :meth:`Grid.rowcol`.
        """
        xx = np.asarray(x, dtype=np.float64)
        yy = np.asarray(y, dtype=np.float64)
        if not self.grid.is_geographic:
            u = self.grid.linear_unit_m
            return xx * u, yy * u
        radius, _ = _earth(self.earth)
        t = self.grid.transform
        xx = t.c + np.mod(xx - t.c, 360.0)
        psi = isometric_latitude(yy, earth=self.earth)  # type: ignore[arg-type]
        return np.asarray(radius * np.radians(xx), dtype=np.float64), np.asarray(radius * psi, dtype=np.float64)

    def cell_centres(self) -> tuple[FloatArray, FloatArray]:
        """1-D plane coordinates of solve cell centres: ``(y_of_row, x_of_col)``."""
        rows, cols = self.shape
        y = self.y0_m + self.dy_signed_m * np.arange(rows, dtype=np.float64)
        x = self.x0_m + self.dx_signed_m * np.arange(cols, dtype=np.float64)
        return np.asarray(y, dtype=np.float64), np.asarray(x, dtype=np.float64)

    def to_solve(self, native: np.ndarray) -> np.ndarray:
        """Carry a native-grid field onto the solve grid (nearest native cell)."""
        a = native[:, :-1] if self.drop_seam else native
        if self.is_identity:
            return a
        return a[self.native_row, :]

    def to_native(self, solved: FloatArray) -> FloatArray:
        """Carry solve-grid times back to native cell centres.

        Linear in isometric latitude between the two bracketing solve rows; if
        one of them has no value (NaN), the other is used. Projected grids
        return ``solved`` itself (no copy).
        """
        if self.is_identity and not self.drop_seam:
            return np.asarray(solved, dtype=np.float64)
        rows, cols = self.grid.rows, solved.shape[1]
        out = np.empty((rows, cols + 1 if self.drop_seam else cols))
        if self.is_identity:
            out[:, :cols] = solved
        else:
            # In slices of rows, so that the temporaries stay small.
            step = max(1, _TO_NATIVE_CELLS // max(1, cols))
            for i in range(0, rows, step):
                sl = slice(i, min(rows, i + step))
                a = solved[self.back_row0[sl], :]
                b = solved[self.back_row1[sl], :]
                w = self.back_weight[sl, None]
                o = out[sl, :cols]
                np.multiply(1.0 - w, a, out=o)
                o += w * b
                np.copyto(o, a, where=np.isnan(b))
                np.copyto(o, b, where=np.isnan(a))
        if self.drop_seam:
            out[:, -1] = out[:, 0]
        return out


def solve_plane(grid: Grid, *, earth: EarthModel = "wgs84") -> SolvePlane:
    """Build the metric solve plane of a grid.

    For a geographic grid the plane is Mercator with square cells no coarser
    than the native rows anywhere: the row step in isometric latitude is the
    smaller of the column step and the finest native row step, adjusted so a
    whole number of rows spans the grid exactly. Every native row is therefore
    sampled by at least one solve row.

    Parameters
    ----------
    grid : Grid
    earth : {"wgs84", "sphere"}
        Figure of the Earth for geographic grids: WGS84 ellipsoid (default) or
        a sphere of the IUGG mean radius.

    Raises
    ------
    GridError
        Unknown earth model, or a geographic grid beyond the latitude limit.
    """
    if earth not in EARTH_MODELS:
        raise GridError(f"earth model {earth!r} is unknown; choose one of {', '.join(EARTH_MODELS)}")
    t = grid.transform
    drop_seam = grid.has_seam_column
    cols = grid.cols - 1 if drop_seam else grid.cols
    if not grid.is_geographic:
        u = grid.linear_unit_m
        rows = grid.rows
        idx = np.arange(rows, dtype=np.intp)
        return SolvePlane(
            grid=grid,
            earth=earth,
            shape=(rows, cols),
            spacing_m=(abs(t.e) * u, abs(t.a) * u),
            x0_m=(t.c + 0.5 * t.a) * u,
            y0_m=(t.f + 0.5 * t.e) * u,
            dx_signed_m=t.a * u,
            dy_signed_m=t.e * u,
            scale_factor=np.ones(rows),
            native_row=idx,
            back_row0=idx,
            back_row1=idx,
            back_weight=np.zeros(rows),
            periodic_x=False,
            drop_seam=False,
        )

    grid.check_latitude_limit()
    radius, _ = _earth(earth)
    # Native row edges in isometric latitude.
    lat_edges = t.f + t.e * np.arange(grid.rows + 1)
    psi_edges = isometric_latitude(lat_edges, earth=earth)
    native_dpsi = np.abs(np.diff(psi_edges))
    dx_m = math.radians(abs(t.a)) * radius
    dpsi_target = min(float(native_dpsi.min()), dx_m / radius)
    span = float(psi_edges[-1] - psi_edges[0])
    n_rows = max(2, int(math.ceil(abs(span) / dpsi_target - 1e-9)))
    dpsi = span / n_rows  # signed, same direction as native rows
    psi_centres = psi_edges[0] + dpsi * (np.arange(n_rows) + 0.5)
    lat_centres = latitude_from_isometric(psi_centres, earth=earth)
    native_row = np.clip(np.floor((lat_centres - t.f) / t.e), 0, grid.rows - 1).astype(np.intp)
    # Back: native row centres in fractional solve-row index.
    psi_native = isometric_latitude(grid.row_latitudes_deg(), earth=earth)
    u = (psi_native - psi_edges[0]) / dpsi - 0.5
    r0 = np.clip(np.floor(u), 0, n_rows - 1).astype(np.intp)
    r1 = np.clip(r0 + 1, 0, n_rows - 1).astype(np.intp)
    w = np.clip(u - r0, 0.0, 1.0)
    w = np.where(r1 == r0, 0.0, w)
    return SolvePlane(
        grid=grid,
        earth=earth,
        shape=(n_rows, cols),
        spacing_m=(abs(dpsi) * radius, dx_m),
        x0_m=radius * math.radians(t.c + 0.5 * t.a),
        y0_m=radius * float(psi_centres[0]),
        dx_signed_m=radius * math.radians(t.a),
        dy_signed_m=radius * dpsi,
        scale_factor=mercator_scale_factor(lat_centres, earth=earth),
        native_row=native_row,
        back_row0=r0,
        back_row1=r1,
        back_weight=w,
        periodic_x=grid.wraps_x,
        drop_seam=drop_seam,
    )
