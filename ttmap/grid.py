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

from ttmap.defaults import EARTH_MODELS, MAX_PROJECTION_ANISOTROPY_ERROR
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
    "ProjectionScale",
    "projection_scale",
    "principal_scales",
    "CONFORMAL_TOLERANCE",
    "SCALE_INTERPOLATION_TOLERANCE",
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


# ---------------------------------------------------------------- projected grids

#: Largest travel-time error bound (sqrt(a/b) - 1) still called conformal: the
#: principal scales of a conformal projection agree to rounding (measured below
#: 1e-8 for UTM, polar stereographic and Lambert conformal conic here).
CONFORMAL_TOLERANCE: float = 1e-5
#: Largest relative error of the bilinear interpolation of the scale field
#: between lattice nodes, checked at every lattice edge midpoint and cell centre.
SCALE_INTERPOLATION_TOLERANCE: float = 1e-5
# Lattice nodes per axis to start with; halved in step until the check passes.
_LATTICE_START_NODES = 65
# Positions per call of principal_scales (about 100 bytes of temporaries each).
_SCALE_CHUNK = 1 << 15
# Round-trip tolerance of the CRS's inverse then forward transform, in cells.
_ROUND_TRIP_CELLS = 1e-3

_REPROJECT_FIX = (
    "reproject the bathymetry to a conformal projection or to lon/lat, "
    "e.g. gdalwarp -t_srs EPSG:4326 in.tif out.tif"
)


def _crs_text(crs: CRS) -> str:
    name = crs.name or crs.to_string()
    code = crs.to_epsg()
    return f"{name} (EPSG:{code})" if code else name


@dataclass(frozen=True)
class ProjectionScale:
    """Local scale of a projected grid's CRS against its ellipsoid.

    Map metres per ground metre (ground: the CRS's own ellipsoid), held on a
    coarse lattice of native cell centres and interpolated bilinearly between
    them (:meth:`rows`). Build with :func:`projection_scale`.

    Attributes
    ----------
    crs_text : str
        The CRS's name and EPSG code.
    method : {"conformal scale factor", "mean scale factor"}
        Conformal CRS (the scale is the same in every direction, the solve is
        exact), or a near-conformal one solved with the local geometric mean
        ``sqrt(a b)`` of its principal scales (times off by at most
        :attr:`anisotropy_error`).
    lattice_rows, lattice_cols : ndarray of int
        Native rows and columns of the lattice nodes (first and last included).
    scale : ndarray of shape (lattice rows, lattice cols), float64
        Mean scale ``sqrt(a b)`` at the nodes, map metres per ground metre.
    min, max : float
        Smallest and largest scale over nodes and check points.
    anisotropy_error : float
        Largest ``sqrt(a / b) - 1`` found: the bound on the relative
        travel-time error of an isotropic solve with the mean scale.
    angular_distortion_deg : float
        Largest angular distortion ``2 asin((a - b) / (a + b))``, degrees.
    interpolation_error : float
        Largest relative error of the bilinear interpolation measured at the
        lattice's edge midpoints and cell centres (0 when the lattice is the grid).
    """

    crs_text: str
    method: str
    lattice_rows: IntArray = field(repr=False)
    lattice_cols: IntArray = field(repr=False)
    scale: FloatArray = field(repr=False)
    min: float
    max: float
    anisotropy_error: float
    angular_distortion_deg: float
    interpolation_error: float

    def rows(self, start: int, stop: int) -> FloatArray:
        """Scale at the native cells of rows ``start:stop``, shape ``(stop - start, cols)``.

        Bilinear between the lattice nodes; the temporaries are a few arrays
        of the block's size.
        """
        i, w = _bracket(self.lattice_rows, np.arange(start, stop, dtype=np.float64))
        j, v = _bracket(self.lattice_cols, np.arange(int(self.lattice_cols[-1]) + 1, dtype=np.float64))
        s = self.scale
        top = s[i][:, j] * (1.0 - v) + s[i][:, j + 1] * v
        bottom = s[i + 1][:, j] * (1.0 - v) + s[i + 1][:, j + 1] * v
        top *= (1.0 - w)[:, None]
        bottom *= w[:, None]
        top += bottom
        return np.asarray(top, dtype=np.float64)

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready description for the run record."""
        return {
            "method": self.method,
            "min": float(self.min),
            "max": float(self.max),
            "crs": self.crs_text,
            "anisotropy_error": float(self.anisotropy_error),
            "angular_distortion_deg": float(self.angular_distortion_deg),
            "interpolation_error": float(self.interpolation_error),
            "lattice_shape": [int(self.lattice_rows.size), int(self.lattice_cols.size)],
        }


def _bracket(nodes: IntArray, pos: FloatArray) -> tuple[IntArray, FloatArray]:
    """Left node index and weight of each position between sorted ``nodes``."""
    i = np.clip(np.searchsorted(nodes, pos, side="right") - 1, 0, nodes.size - 2).astype(np.intp)
    w = (pos - nodes[i]) / (nodes[i + 1] - nodes[i])
    return i, np.asarray(w, dtype=np.float64)


def _lattice(n: int, step: int) -> IntArray:
    return np.unique(np.r_[np.arange(0, n, step), n - 1]).astype(np.intp)


def principal_scales(grid: Grid, row: Any, col: Any) -> tuple[FloatArray, FloatArray]:
    """Largest and smallest map-per-ground scale ``(a, b)`` at native positions.

    Parameters
    ----------
    grid : Grid
        A projected grid whose CRS has an ellipsoid.
    row, col : array_like of float
        Native (fractional) row and column indices of cell centres.

    Returns
    -------
    a, b : ndarrays of float64
        Principal scales, map metres per ground metre on the CRS's ellipsoid
        (Tissot's indicatrix; ``a == b`` for a conformal projection). NaN where
        the CRS cannot place the position on the ellipsoid.

    Notes
    -----
    Ground lengths of three short map segments through each position (along
    x, along y and along the diagonal, half a cell each way) are measured as
    geodesics on the ellipsoid (Karney 2013, through ``pyproj.Geod``). They
    give the metric tensor ``G`` (squared ground metres per squared map
    metre); its eigenvalues ``g1 >= g2`` give ``a = g2**-0.5``,
    ``b = g1**-0.5``. Unlike PROJ's own factors this measures Web Mercator
    (spherical formulas on WGS84 coordinates) against the WGS84 ellipsoid.

    Examples
    --------
    >>> from affine import Affine
    >>> g = Grid((10, 10), Affine(1000, 0, 495_000, 0, -1000, 5_000), "EPSG:32633")
    >>> a, b = principal_scales(g, 5.0, 5.0)
    >>> round(float(a), 6), round(float(b), 6)
    (0.9996, 0.9996)
    """
    from pyproj import Transformer

    geodetic = grid.crs.geodetic_crs
    geod = grid.crs.get_geod()
    if geodetic is None or geod is None:
        raise GridError(
            f"the grid's CRS {_crs_text(grid.crs)} has no ellipsoid (an engineering or local "
            "CRS), so its scale against the ground is unknown; assign the raster its real CRS "
            "(gdal_edit.py -a_srs EPSG:...) or " + _REPROJECT_FIX
        )
    r0, c0 = np.broadcast_arrays(np.asarray(row, dtype=np.float64), np.asarray(col, dtype=np.float64))
    shape = r0.shape
    r, c = r0.ravel(), c0.ravel()
    t = grid.transform
    u = grid.linear_unit_m
    h = 0.5  # cells each way
    x, y = grid.xy(r, c)
    dx, dy = h * t.a, h * t.e
    to_ll = Transformer.from_crs(grid.crs, geodetic, always_xy=True)
    xs = np.concatenate([x - dx, x + dx, x, x, x - dx, x + dx])
    ys = np.concatenate([y, y, y - dy, y + dy, y - dy, y + dy])
    with np.errstate(invalid="ignore"):
        lon, lat = (np.asarray(v, dtype=np.float64) for v in to_ll.transform(xs, ys, errcheck=False))
        # A position outside the projection's domain may still come back finite: go round.
        xb, yb = (np.asarray(v, dtype=np.float64) for v in to_ll.transform(
            lon, lat, direction="INVERSE", errcheck=False))
        bad = ~(np.abs(xb - xs) <= _ROUND_TRIP_CELLS * abs(t.a))
        bad |= ~(np.abs(yb - ys) <= _ROUND_TRIP_CELLS * abs(t.e))
        lon[bad] = np.nan
        n = r.size
        lo, la = lon.reshape(6, n), lat.reshape(6, n)
        s = []
        for k in range(3):
            _, _, d = geod.inv(lo[2 * k], la[2 * k], lo[2 * k + 1], la[2 * k + 1])
            s.append(np.asarray(d, dtype=np.float64))
        sx, sy, sd = s
        sx[~np.isfinite(lo[0] + lo[1])] = np.nan
        sy[~np.isfinite(lo[2] + lo[3])] = np.nan
        sd[~np.isfinite(lo[4] + lo[5])] = np.nan
        lx, ly = 2.0 * abs(dx) * u, 2.0 * abs(dy) * u
        g11 = (sx / lx) ** 2
        g22 = (sy / ly) ** 2
        # Diagonal step (2dx, 2dy) in map metres: |d|^2 = g11 lx^2 + 2 g12 lx ly s + g22 ly^2,
        # s the sign of dx * dy.
        sign = math.copysign(1.0, dx * dy)
        g12 = (sd**2 - g11 * lx**2 - g22 * ly**2) / (2.0 * lx * ly * sign)
        half = 0.5 * (g11 + g22)
        disc = np.sqrt((0.5 * (g11 - g22)) ** 2 + g12**2)
        g1, g2 = half + disc, half - disc
        a = 1.0 / np.sqrt(g2)
        b = 1.0 / np.sqrt(g1)
    return np.asarray(a, dtype=np.float64).reshape(shape), np.asarray(b, dtype=np.float64).reshape(shape)


def projection_scale(
    grid: Grid,
    *,
    max_anisotropy_error: float = MAX_PROJECTION_ANISOTROPY_ERROR,
    interpolation_tolerance: float = SCALE_INTERPOLATION_TOLERANCE,
) -> ProjectionScale:
    """Scale field of a projected grid, checked for conformality.

    Parameters
    ----------
    grid : Grid
        A projected grid.
    max_anisotropy_error : float
        Largest accepted travel-time error bound ``sqrt(a / b) - 1`` of a
        non-conformal CRS solved with its local mean scale (default
        :data:`ttmap.defaults.MAX_PROJECTION_ANISOTROPY_ERROR`, 0.5 %).
    interpolation_tolerance : float
        Largest relative error of the bilinear interpolation between lattice
        nodes; the lattice is refined (down to every cell) until it holds.

    Returns
    -------
    ProjectionScale

    Raises
    ------
    GridError
        A geographic grid; a CRS without an ellipsoid; a cell the CRS cannot
        place on the ellipsoid; a CRS whose anisotropy exceeds the limit.

    Notes
    -----
    In a conformal projection (Snyder 1987, USGS Prof. Paper 1395: Mercator,
    transverse Mercator, stereographic, Lambert conformal conic) the point
    scale ``k`` is the same in every direction, so a ground path of length
    ``L`` has map length ``integral k dl`` and travel time in map units obeys
    ``|grad t| = 1 / (c k)``: the isotropic eikonal with speed ``c k``.

    Examples
    --------
    >>> from affine import Affine
    >>> g = Grid((20, 20), Affine(10_000, 0, 0, 0, -10_000, 8_600_000), "EPSG:3857")
    >>> p = projection_scale(g)
    >>> p.method, round(p.min, 2), round(p.max, 2)
    ('mean scale factor', 2.0, 2.05)
    """
    if grid.is_geographic:
        raise GridError("a geographic grid has no projection scale; it is solved on the Mercator plane")
    rows, cols = grid.shape
    step = max(1, math.ceil((max(rows, cols) - 1) / (_LATTICE_START_NODES - 1)))
    crs_text = _crs_text(grid.crs)
    while True:
        lr, lc = _lattice(rows, step), _lattice(cols, step)
        rr, cc = np.meshgrid(lr.astype(np.float64), lc.astype(np.float64), indexing="ij")
        a, b = _scales_in_chunks(grid, rr, cc)
        _check_domain(grid, a, b, rr, cc, crs_text)
        node = np.sqrt(a * b)
        if step == 1:
            ca, cb = a, b
            interp_err = 0.0
            break
        # Check points: lattice edge midpoints (both ways) and cell centres.
        mr, mc = 0.5 * (lr[:-1] + lr[1:]), 0.5 * (lc[:-1] + lc[1:])
        pts = [
            np.meshgrid(mr, lc.astype(np.float64), indexing="ij"),
            np.meshgrid(lr.astype(np.float64), mc, indexing="ij"),
            np.meshgrid(mr, mc, indexing="ij"),
        ]
        guess = [
            0.5 * (node[:-1, :] + node[1:, :]),
            0.5 * (node[:, :-1] + node[:, 1:]),
            0.25 * (node[:-1, :-1] + node[1:, :-1] + node[:-1, 1:] + node[1:, 1:]),
        ]
        pr = np.concatenate([p[0].ravel() for p in pts])
        pc = np.concatenate([p[1].ravel() for p in pts])
        ca, cb = _scales_in_chunks(grid, pr, pc)
        _check_domain(grid, ca, cb, pr, pc, crs_text)
        exact = np.sqrt(ca * cb)
        interp_err = float(np.max(np.abs(np.concatenate([g.ravel() for g in guess]) / exact - 1.0)))
        if interp_err <= interpolation_tolerance:
            break
        step = max(1, step // 2)
    a_all, b_all = np.concatenate([a.ravel(), ca.ravel()]), np.concatenate([b.ravel(), cb.ravel()])
    aniso = float(np.max(np.sqrt(a_all / b_all))) - 1.0
    omega = float(np.degrees(np.max(2.0 * np.arcsin((a_all - b_all) / (a_all + b_all)))))
    mean_all = np.sqrt(a_all * b_all)
    if aniso > max_anisotropy_error:
        raise GridError(
            f"the grid's CRS {crs_text} is not conformal: angular distortion up to "
            f"{omega:.3g} degrees on the grid, travel times off by up to {100.0 * aniso:.3g} % "
            f"(limit {100.0 * max_anisotropy_error:g} %); {_REPROJECT_FIX}"
        )
    return ProjectionScale(
        crs_text=crs_text,
        method="conformal scale factor" if aniso <= CONFORMAL_TOLERANCE else "mean scale factor",
        lattice_rows=lr,
        lattice_cols=lc,
        scale=node,
        min=float(mean_all.min()),
        max=float(mean_all.max()),
        anisotropy_error=max(aniso, 0.0),
        angular_distortion_deg=max(omega, 0.0),
        interpolation_error=interp_err,
    )


def _scales_in_chunks(grid: Grid, row: FloatArray, col: FloatArray) -> tuple[FloatArray, FloatArray]:
    """:func:`principal_scales` in chunks of positions, so that its temporaries stay small."""
    r, c = row.ravel(), col.ravel()
    a, b = np.empty(r.size), np.empty(r.size)
    for i in range(0, r.size, _SCALE_CHUNK):
        sl = slice(i, i + _SCALE_CHUNK)
        a[sl], b[sl] = principal_scales(grid, r[sl], c[sl])
    return a.reshape(row.shape), b.reshape(row.shape)


def _check_domain(
    grid: Grid, a: FloatArray, b: FloatArray, row: FloatArray, col: FloatArray, crs_text: str
) -> None:
    ok = np.isfinite(a) & np.isfinite(b) & (b > 0.0)
    if ok.all():
        return
    i = int(np.argmin(ok.ravel()))
    r, c = float(np.ravel(row)[i]), float(np.ravel(col)[i])
    x, y = grid.xy(r, c)
    raise GridError(
        f"the grid's CRS {crs_text} cannot place the cell at row {r:g}, col {c:g} "
        f"(x {float(x):.1f}, y {float(y):.1f}) on its ellipsoid: the grid reaches beyond the "
        "projection's domain; crop it to the projection's area of use or " + _REPROJECT_FIX
    )
