"""Write and read vector layers through GDAL/OGR (pyogrio's raw API).

Writing takes :class:`VectorLayer` records (shapely geometries plus ordered
attribute columns) and produces one of three formats, chosen from the file
suffix or named:

- GeoPackage (``.gpkg``, the default product): every layer in one file.
- ESRI Shapefile (``.shp``): one file set per layer, ``<stem>_<layer>.shp``.
- GeoJSON (``.geojson``): one file per layer, ``<stem>_<layer>.geojson``,
  always in WGS84 longitude/latitude as RFC 7946 requires; geometries are
  reprojected here (pyproj + :func:`shapely.transform`) and cut at the
  antimeridian by GDAL.

All outputs go through :mod:`ttmap.io.atomic`: nothing appears under a final
name unless every layer was written.

Reading returns plain geometries and columns: :func:`read_vector_geometries`
for source areas and lines, :func:`read_vector_points` for site files.

The module knows no physics.
"""

from __future__ import annotations

import os
import re
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pyogrio
import pyogrio.errors
import pyogrio.raw
import shapely
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError

from ttmap._typing import FloatArray
from ttmap.errors import InputDataError, TtmapError
from ttmap.io.atomic import SHAPEFILE_SUFFIXES, atomic_output, atomic_output_set

if TYPE_CHECKING:
    from shapely.geometry.base import BaseGeometry

__all__ = [
    "SHAPEFILE_FIELD_NAMES",
    "VectorLayer",
    "write_vector_layers",
    "vector_output_paths",
    "vector_driver",
    "shapefile_field_name",
    "read_vector_geometries",
    "read_vector_points",
    "VECTOR_DRIVERS",
    "GEOMETRY_TYPES",
]

#: Output formats by file suffix.
VECTOR_DRIVERS: dict[str, str] = {
    ".gpkg": "GPKG",
    ".shp": "ESRI Shapefile",
    ".geojson": "GeoJSON",
    ".json": "GeoJSON",
}

#: Layer geometry types accepted by :class:`VectorLayer`.
GEOMETRY_TYPES: tuple[str, ...] = (
    "Point",
    "LineString",
    "Polygon",
    "MultiPoint",
    "MultiLineString",
    "MultiPolygon",
    "GeometryCollection",
    "Unknown",
)

_TYPE_IDS: dict[str, tuple[int, ...]] = {
    "Point": (0,),
    "LineString": (1,),
    "Polygon": (3,),
    "MultiPoint": (0, 4),
    "MultiLineString": (1, 5),
    "MultiPolygon": (3, 6),
    "GeometryCollection": (7,),
}
_TYPE_NAMES = {
    0: "Point",
    1: "LineString",
    2: "LinearRing",
    3: "Polygon",
    4: "MultiPoint",
    5: "MultiLineString",
    6: "MultiPolygon",
    7: "GeometryCollection",
}
_LAYER_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]*$")
_RESERVED_FIELDS = {"fid", "geom", "geometry"}
_SHAPEFILE_FIELD_CHARS = 10
_PYOGRIO_ERRORS = (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError)
_WGS84 = CRS.from_epsg(4326)


# ---------------------------------------------------------------------------
# Layers
# ---------------------------------------------------------------------------


def _value_kind(t: type) -> str | None:
    """Column kind of a value type: none, bool, int, float or str (None: not allowed)."""
    if t is type(None):
        return "none"
    if issubclass(t, (bool, np.bool_)):
        return "bool"
    if issubclass(t, (int, np.integer)):
        return "int"
    if issubclass(t, (float, np.floating)):
        return "float"
    if issubclass(t, str):
        return "str"
    return None


def _column(layer: str, name: str, values: Sequence[Any], n: int) -> np.ndarray:
    """One attribute column as an int64, float64, bool or object (str) array."""
    if isinstance(values, np.ndarray) and values.dtype.kind in "biuf":
        # A typed numpy column keeps its kind, even when empty.
        if values.ndim != 1 or values.shape[0] != n:
            raise InputDataError(
                f"layer {layer!r}: column {name!r} has shape {values.shape} for {n} geometries; "
                "give one value per geometry"
            )
        kind = {"b": bool, "i": np.int64, "u": np.int64, "f": np.float64}[values.dtype.kind]
        return values.astype(kind)
    vals = list(values)
    if len(vals) != n:
        raise InputDataError(
            f"layer {layer!r}: column {name!r} has {len(vals)} values for {n} geometries; "
            "give one value per geometry"
        )
    # Classify each distinct type once (a column of 10^5 values has one or two),
    # in order of first appearance so that a refusal names the first bad value.
    kinds = set()
    for t in dict.fromkeys(map(type, vals)):
        kind = _value_kind(t)
        if kind is None:
            v = next(v for v in vals if type(v) is t)
            raise InputDataError(
                f"layer {layer!r}: column {name!r} holds a {t.__name__} ({v!r}); "
                "use str, int or float values"
            )
        kinds.add(kind)
    has_none = "none" in kinds
    kinds.discard("none")
    if kinds <= {"str"}:
        return np.array(vals, dtype=object)
    if kinds == {"bool"} and not has_none:
        return np.array(vals, dtype=bool)
    if kinds == {"int"} and not has_none:
        return np.array(vals, dtype=np.int64)
    if kinds <= {"int", "float"}:
        return np.array([np.nan if v is None else float(v) for v in vals], dtype=np.float64)
    raise InputDataError(
        f"layer {layer!r}: column {name!r} mixes {', '.join(sorted(kinds))} values"
        f"{' and empty values' if has_none else ''}; use one type per column "
        "(floats with NaN for missing numbers)"
    )


@dataclass(frozen=True, eq=False)
class VectorLayer:
    """One vector layer: geometries in map coordinates and attribute columns.

    Parameters
    ----------
    name : str
        Layer name: letters, digits, ``_`` and ``-``, e.g. ``"isochrones"``.
        Also the file-name suffix for Shapefile and GeoJSON outputs.
    geometries : sequence of shapely geometries (or None)
        In the CRS given to :func:`write_vector_layers`.
    attributes : mapping of str to sequence
        Ordered columns, one value per geometry, of str, int, float or bool.
        A numeric column with ``None`` becomes float with NaN (written as
        null); a str column may hold ``None``. A numpy array of bool, int or
        float keeps its kind even when empty (an empty list becomes a text
        column), so pass ``np.array([], dtype=float)`` for an empty layer's
        numeric columns.
    geometry_type : str
        One of :data:`GEOMETRY_TYPES`. For ``Multi*`` types the single
        geometries of the same kind are promoted (a LineString becomes a
        one-part MultiLineString); other types must match exactly.
        ``"Unknown"`` accepts anything.
    description : str
        Optional layer description (stored by GeoPackage).

    Raises
    ------
    InputDataError
        Bad name, unknown geometry type, a geometry of the wrong type, or
        columns of the wrong length or mixed types.

    Examples
    --------
    >>> from shapely.geometry import LineString
    >>> layer = VectorLayer("lines", [LineString([(0, 0), (1, 1)])], {"minutes": [10.0]},
    ...                     "MultiLineString")
    >>> layer.geometries[0].geom_type, layer.attributes["minutes"].dtype.name
    ('MultiLineString', 'float64')
    """

    name: str
    geometries: Sequence[BaseGeometry | None]
    attributes: Mapping[str, Sequence[Any]] = field(default_factory=dict)
    geometry_type: str = "Unknown"
    description: str = ""

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not _LAYER_NAME_RE.match(self.name):
            raise InputDataError(
                f"layer name {self.name!r} must start with a letter or digit and hold only "
                "letters, digits, '_' and '-'"
            )
        if self.geometry_type not in GEOMETRY_TYPES:
            raise InputDataError(
                f"layer {self.name!r}: geometry type {self.geometry_type!r} is unknown; "
                f"choose one of {', '.join(GEOMETRY_TYPES)}"
            )
        geoms = np.empty(len(self.geometries), dtype=object)
        geoms[:] = list(self.geometries)
        missing = np.fromiter((g is None for g in geoms), dtype=bool, count=len(geoms))
        bad = np.flatnonzero(~missing & ~shapely.is_geometry(geoms))
        if bad.size:
            i = int(bad[0])
            raise InputDataError(
                f"layer {self.name!r}: item {i} is a {type(geoms[i]).__name__}, not a shapely geometry"
            )
        geoms = self._promote(geoms)
        object.__setattr__(self, "geometries", tuple(geoms))
        columns: dict[str, np.ndarray] = {}
        for key, values in dict(self.attributes).items():
            if not isinstance(key, str) or not key.strip():
                raise InputDataError(f"layer {self.name!r}: column name {key!r} is empty")
            if key.lower() in _RESERVED_FIELDS:
                raise InputDataError(
                    f"layer {self.name!r}: column name {key!r} is reserved for the geometry "
                    "or feature id; rename it"
                )
            if key.lower() in {k.lower() for k in columns}:
                raise InputDataError(
                    f"layer {self.name!r}: column name {key!r} is given twice (names are "
                    "case-insensitive in GIS formats)"
                )
            columns[key] = _column(self.name, key, values, len(geoms))
        object.__setattr__(self, "attributes", columns)

    def _promote(self, geoms: np.ndarray) -> np.ndarray:
        gt = self.geometry_type
        if gt == "Unknown" or len(geoms) == 0:
            return geoms
        allowed = _TYPE_IDS[gt]
        ids = shapely.get_type_id(geoms)  # -1 for None
        bad = np.flatnonzero((ids >= 0) & ~np.isin(ids, allowed))
        if bad.size:
            i = int(bad[0])
            raise InputDataError(
                f"layer {self.name!r} is {gt} but geometry {i} is a "
                f"{_TYPE_NAMES.get(int(ids[i]), 'geometry')}; give {gt} geometries"
            )
        if gt.startswith("Multi"):
            single = ids == allowed[0]
            if np.any(single):
                make = {
                    "MultiPoint": shapely.multipoints,
                    "MultiLineString": shapely.multilinestrings,
                    "MultiPolygon": shapely.multipolygons,
                }[gt]
                geoms = geoms.copy()
                # one call for all: each single geometry becomes its own one-part Multi*
                geoms[single] = make(geoms[single], indices=np.arange(int(single.sum())))
        return geoms


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------


def vector_driver(path: str | os.PathLike[str], driver: str | None = None) -> str:
    """GDAL driver for an output path: from ``driver`` or from the suffix.

    Raises
    ------
    InputDataError
        Unknown driver, unknown suffix, or a driver that contradicts the suffix.

    Examples
    --------
    >>> vector_driver("out/isochrones.gpkg")
    'GPKG'
    >>> vector_driver("coast.shp")
    'ESRI Shapefile'
    """
    suffix = Path(path).suffix.lower()
    drivers = sorted(set(VECTOR_DRIVERS.values()))
    by_suffix = VECTOR_DRIVERS.get(suffix)
    if driver is None:
        if by_suffix is None:
            raise InputDataError(
                f"cannot tell the vector format of {os.fspath(path)!r} from its suffix; "
                "use .gpkg, .shp or .geojson"
            )
        return by_suffix
    if driver not in drivers:
        raise InputDataError(
            f"vector driver {driver!r} is unknown; choose one of {', '.join(drivers)}"
        )
    if by_suffix is not None and by_suffix != driver:
        raise InputDataError(
            f"output {os.fspath(path)!r} has the suffix of {by_suffix} but driver {driver!r} "
            "was asked for; make them agree"
        )
    return driver


#: Fixed short names of ttmap's long column names in ESRI Shapefiles (10
#: characters at most); documented in docs/shapefile-fields.md. Per-period
#: columns follow patterns: ``energy_T{T}s_min`` -> ``e{T}s_min``,
#: ``window_T{T}s_min`` -> ``w{T}s_min``, ``energy_T{T}s_utc`` -> ``e{T}s_utc``.
SHAPEFILE_FIELD_NAMES: dict[str, str] = {
    # coastal arrival layer
    "minutes_max": "max_min",
    "minutes_mean": "mean_min",
    # isochrone bands
    "min_minutes": "min_min",
    "max_minutes": "max_min",
    # site table
    "earliest_min": "early_min",
    "latest_min": "late_min",
    "notification_delay_min": "delay_min",
    "minutes_left": "left_min",
    "preparation_min": "prep_min",
    "safe_ground_distance_m": "safe_dist",
    "walking_speed_m_s": "walk_m_s",
    "minutes_needed": "need_min",
    "margin_min": "margin_min",
    "budget_status": "budget",
    "defaults_used": "defaults",
    "earliest_utc": "early_utc",
    "latest_utc": "late_utc",
    "earliest_for_site": "earliest",
}
_PERIOD_FIELD = re.compile(r"^(energy|window)_T([0-9p]+)s_(min|utc)$")


def shapefile_field_name(name: str) -> str:
    """The name a column gets in an ESRI Shapefile: at most 10 bytes.

    Names that fit are kept; ttmap's own long names get the fixed short
    names of :data:`SHAPEFILE_FIELD_NAMES` (and its per-period patterns);
    any other longer name is cut to its first 10 bytes (whole UTF-8
    characters only). A style file written for Shapefile output must filter
    on this name.

    Examples
    --------
    >>> shapefile_field_name("min_minutes")
    'min_min'
    >>> shapefile_field_name("minutes_mean"), shapefile_field_name("energy_T600s_min")
    ('mean_min', 'e600s_min')
    >>> shapefile_field_name("label"), shapefile_field_name("some_long_name")
    ('label', 'some_long_')
    """
    if name in SHAPEFILE_FIELD_NAMES:
        return SHAPEFILE_FIELD_NAMES[name]
    m = _PERIOD_FIELD.match(name)
    if m:
        short = f"{m.group(1)[0]}{m.group(2)}s_{m.group(3)}"
        if len(short) <= _SHAPEFILE_FIELD_CHARS:
            return short
    encoded = name.encode("utf-8")[:_SHAPEFILE_FIELD_CHARS]
    return encoded.decode("utf-8", errors="ignore")


def _shapefile_layer(layer: VectorLayer) -> VectorLayer:
    """``layer`` with column names cut to the Shapefile limit, refusing clashes."""
    renamed: dict[str, str] = {}
    for key in layer.attributes:
        short = shapefile_field_name(key)
        clash = [k for k, v in renamed.items() if v.lower() == short.lower()]
        if clash:
            raise InputDataError(
                f"layer {layer.name!r}: columns {clash[0]!r} and {key!r} both become {short!r} "
                f"under the {_SHAPEFILE_FIELD_CHARS}-character ESRI Shapefile limit; "
                "rename one or write GeoPackage (.gpkg)"
            )
        renamed[key] = short
    if all(k == v for k, v in renamed.items()):
        return layer
    return VectorLayer(
        layer.name,
        layer.geometries,
        {renamed[k]: v for k, v in layer.attributes.items()},
        layer.geometry_type,
        layer.description,
    )


def vector_output_paths(
    path: str | os.PathLike[str], layer_names: Sequence[str], driver: str | None = None
) -> list[Path]:
    """Files :func:`write_vector_layers` will create (main file of each set).

    Use it with :func:`ttmap.io.atomic.check_writable` to refuse existing
    outputs before a long computation.

    Examples
    --------
    >>> [p.name for p in vector_output_paths("iso.shp", ["lines", "bands"])]
    ['iso_lines.shp', 'iso_bands.shp']
    >>> [p.name for p in vector_output_paths("iso.gpkg", ["lines", "bands"])]
    ['iso.gpkg']
    """
    drv = vector_driver(path, driver)
    base = Path(path)
    if drv == "GPKG":
        return [base]
    return [base.with_name(f"{base.stem}_{name}{base.suffix}") for name in layer_names]


def _to_lonlat(geoms: Sequence[Any], crs: CRS, layer: str) -> list[Any]:
    if crs.equals(_WGS84, ignore_axis_order=True):
        return list(geoms)
    transformer = Transformer.from_crs(crs, _WGS84, always_xy=True)

    def move(xy: np.ndarray) -> np.ndarray:
        x, y = transformer.transform(xy[:, 0], xy[:, 1])
        return np.column_stack([x, y])

    arr = np.empty(len(geoms), dtype=object)
    arr[:] = list(geoms)
    out = shapely.transform(arr, move)
    coords = shapely.get_coordinates(out)
    if not np.all(np.isfinite(coords)):
        raise InputDataError(
            f"layer {layer!r} has coordinates outside the area where {crs.name!r} converts to "
            "longitude/latitude; write GeoPackage instead of GeoJSON"
        )
    return list(out)


def _write_one(
    target: Path,
    layer: VectorLayer,
    geoms: Sequence[Any],
    *,
    driver: str,
    layer_name: str,
    crs: CRS,
    layer_options: dict[str, str] | None = None,
    dataset_metadata: dict[str, str] | None = None,
    encoding: str | None = None,
) -> None:
    arr = np.empty(len(geoms), dtype=object)
    arr[:] = list(geoms)
    wkb = shapely.to_wkb(arr, output_dimension=2)
    names = list(layer.attributes)
    try:
        pyogrio.raw.write(
            os.fspath(target),
            wkb,
            [layer.attributes[k] for k in names],
            names,
            layer=layer_name,
            driver=driver,
            geometry_type=layer.geometry_type,
            crs=crs.to_wkt(),
            encoding=encoding,
            promote_to_multi=False,
            dataset_metadata=dataset_metadata,
            layer_options=layer_options or None,
        )
    except (*_PYOGRIO_ERRORS, OSError) as err:
        raise TtmapError(
            f"writing layer {layer.name!r} ({driver}) failed ({err}); "
            "check free disk space and permissions"
        ) from err


def write_vector_layers(
    path: str | os.PathLike[str],
    layers: Sequence[VectorLayer],
    *,
    crs: Any,
    driver: str | None = None,
    overwrite: bool = False,
    metadata: Mapping[str, str] | None = None,
) -> list[Path]:
    """Write vector layers as GeoPackage, Shapefiles or GeoJSON files.

    Parameters
    ----------
    path : path-like
        ``x.gpkg`` (all layers in one file), ``x.shp`` or ``x.geojson``
        (one file per layer, ``x_<layer>.shp`` / ``x_<layer>.geojson``).
    layers : sequence of VectorLayer
        At least one; names unique (case-insensitive).
    crs : CRS-like
        CRS of the layers' coordinates (e.g. the grid's CRS).
    driver : {"GPKG", "ESRI Shapefile", "GeoJSON"}, optional
        Defaults to the one implied by the suffix.
    overwrite : bool
        Replace existing outputs; otherwise any existing output (or
        Shapefile companion) is an error and nothing is written.
    metadata : mapping of str to str, optional
        Dataset metadata items (GeoPackage only; e.g. a caution text and
        the program version). Ignored by the other formats.

    Returns
    -------
    list of pathlib.Path
        The written main files, in layer order (one path for GeoPackage).

    Raises
    ------
    InputDataError
        No layers, duplicate names, unknown driver or suffix, bad CRS, a
        Shapefile field names that clash once cut to 10 characters,
        coordinates that do not convert to longitude/latitude for GeoJSON, a
        missing folder.
    OutputExistsError
        An output exists and ``overwrite`` is False.
    TtmapError
        GDAL failed while writing; no output is left behind.

    Notes
    -----
    GeoJSON output is written in WGS84 longitude/latitude (RFC 7946): the
    layers are reprojected from ``crs`` unless it already is WGS84, and
    GDAL's RFC 7946 mode splits lines and polygons at the antimeridian and
    writes longitudes in -180..180. Shapefile attribute tables are written
    in UTF-8 (a ``.cpg`` file says so), and column names longer than 10
    bytes are cut to 10 (:func:`shapefile_field_name`: ``min_minutes``
    becomes ``min_minute``); names that would clash are refused.
    """
    drv = vector_driver(path, driver)
    layers = list(layers)
    if not layers:
        raise InputDataError(f"no layers to write to {os.fspath(path)!r}; give at least one")
    for layer in layers:
        if not isinstance(layer, VectorLayer):
            raise InputDataError(f"expected VectorLayer objects, got {type(layer).__name__}")
    lower = [layer.name.lower() for layer in layers]
    dupes = sorted({n for n in lower if lower.count(n) > 1})
    if dupes:
        raise InputDataError(f"layer name(s) {', '.join(dupes)} given twice; make names unique")
    try:
        src_crs = CRS.from_user_input(crs)
    except CRSError as err:
        raise InputDataError(
            f"vector CRS {crs!r} is not understood; give e.g. 'EPSG:4326'"
        ) from err
    if drv == "ESRI Shapefile":
        layers = [_shapefile_layer(layer) for layer in layers]
    meta = {str(k): str(v) for k, v in (metadata or {}).items()}
    outputs = vector_output_paths(path, [layer.name for layer in layers], drv)

    if drv == "GPKG":
        final = outputs[0]
        with atomic_output(final, overwrite=overwrite) as tmp:
            for i, layer in enumerate(layers):
                _write_one(
                    tmp,
                    layer,
                    layer.geometries,
                    driver=drv,
                    layer_name=layer.name,
                    crs=src_crs,
                    layer_options={"DESCRIPTION": layer.description} if layer.description else None,
                    dataset_metadata=(meta or None) if i == 0 else None,
                )
        return outputs

    if drv == "GeoJSON":
        lonlat = [_to_lonlat(layer.geometries, src_crs, layer.name) for layer in layers]
        with atomic_output_set(outputs, overwrite=overwrite) as staged:
            for layer, geoms, target in zip(layers, lonlat, staged, strict=True):
                _write_one(
                    target,
                    layer,
                    geoms,
                    driver=drv,
                    layer_name=target.stem,
                    crs=_WGS84,
                    layer_options={"RFC7946": "YES"},
                )
        return outputs

    with atomic_output_set(
        outputs, overwrite=overwrite, companion_suffixes=SHAPEFILE_SUFFIXES
    ) as staged:
        for layer, target in zip(layers, staged, strict=True):
            _write_one(
                target,
                layer,
                layer.geometries,
                driver=drv,
                layer_name=target.stem,
                crs=src_crs,
                encoding="UTF-8",
            )
    return outputs


# ---------------------------------------------------------------------------
# Reading
# ---------------------------------------------------------------------------


def _choose_layer(path: str | os.PathLike[str], layer: str | None, what: str) -> tuple[str, str]:
    name = os.fspath(path)
    is_gdal_name = name.startswith("/vsi") or re.match(r"^[A-Za-z][A-Za-z0-9_]+:", name)
    if not is_gdal_name and not os.path.exists(name):
        raise InputDataError(f"{what} {name!r} does not exist; check the path")
    try:
        listed = pyogrio.list_layers(name)
    except _PYOGRIO_ERRORS as err:
        raise InputDataError(
            f"{what} {name!r} is not a vector file GDAL can read; "
            "give a GeoPackage, GeoJSON, Shapefile or another OGR format"
        ) from err
    names = [str(row[0]) for row in listed]
    if not names:
        raise InputDataError(f"{what} {name!r} has no layers; give a file with features")
    if layer is None:
        # QGIS's style table (ttmap writes one into styled GeoPackages) is not a data layer
        data = [str(row[0]) for row in listed if not (str(row[0]) == "layer_styles" and row[1] is None)]
        if len(data) == 1:
            return name, data[0]
        if len(names) > 1:
            raise InputDataError(
                f"{what} {name!r} has {len(names)} layers ({', '.join(names)}); "
                "choose one with --layer NAME"
            )
        return name, names[0]
    if layer not in names:
        raise InputDataError(
            f"{what} {name!r} has no layer {layer!r}; choose one of {', '.join(names)}"
        )
    return name, layer


def _read(name: str, layer: str, what: str) -> tuple[dict[str, Any], Any, list[np.ndarray]]:
    try:
        meta, _, wkb, field_data = pyogrio.raw.read(name, layer=layer)
    except _PYOGRIO_ERRORS as err:
        raise InputDataError(
            f"reading layer {layer!r} of {what} {name!r} failed ({err}); check the file"
        ) from err
    if wkb is None:
        raise InputDataError(
            f"layer {layer!r} of {what} {name!r} has no geometry column; give a spatial layer"
        )
    if len(wkb) == 0:
        raise InputDataError(f"layer {layer!r} of {what} {name!r} has no features; give a file with at least one")
    return meta, wkb, field_data


def _crs_of(meta: Mapping[str, Any]) -> CRS | None:
    text = meta.get("crs")
    if not text:
        return None
    try:
        return CRS.from_user_input(text)
    except CRSError:  # an unreadable CRS is treated as absent
        return None


def _missing(geoms: np.ndarray) -> np.ndarray:
    return np.flatnonzero(shapely.is_missing(geoms) | shapely.is_empty(geoms))


def _rows_text(rows: np.ndarray) -> str:
    shown = ", ".join(str(int(r) + 1) for r in rows[:5])
    return shown + (", ..." if rows.size > 5 else "")


def read_vector_geometries(
    path: str | os.PathLike[str], layer: str | None = None
) -> tuple[list[BaseGeometry], CRS | None]:
    """Read every geometry of one layer of any OGR vector file.

    Parameters
    ----------
    path : path-like
        GeoPackage, GeoJSON, Shapefile, ... (or a GDAL dataset name).
    layer : str, optional
        Layer name; required when the file has several.

    Returns
    -------
    geometries : list of shapely geometries
        In file order, in the file's CRS.
    crs : pyproj.CRS or None
        None when the file declares no CRS.

    Raises
    ------
    InputDataError
        Missing or unreadable file, ambiguous or unknown layer, no geometry
        column, no features, or features without geometry (rows named,
        counting from 1).
    """
    name, chosen = _choose_layer(path, layer, "vector file")
    meta, wkb, _ = _read(name, chosen, "vector file")
    geoms = shapely.from_wkb(wkb)
    missing = _missing(geoms)
    if missing.size:
        raise InputDataError(
            f"{missing.size} feature(s) of {name!r} (rows {_rows_text(missing)}, counting from 1) "
            "have no geometry; remove them"
        )
    bad = [i for i, g in enumerate(geoms) if not np.isfinite(shapely.get_coordinates(g)).all()]
    if bad:
        raise InputDataError(
            f"{len(bad)} feature(s) of {name!r} (rows {', '.join(str(i + 1) for i in bad[:10])}, counting from 1) "
            "have NaN or infinite coordinates; give finite coordinates or remove them"
        )
    return list(geoms), _crs_of(meta)


def read_vector_points(
    path: str | os.PathLike[str],
    layer: str | None = None,
    *,
    name_field: str | None = None,
) -> tuple[list[str], FloatArray, FloatArray, dict[str, np.ndarray], CRS | None]:
    """Read named points (e.g. coastal sites) from one layer of an OGR vector file.

    Parameters
    ----------
    path : path-like
        GeoPackage, GeoJSON, Shapefile, ...
    layer : str, optional
        Layer name; required when the file has several.
    name_field : str, optional
        Column holding the point names; default: the column called ``name``
        (any case).

    Returns
    -------
    names : list of str
        Unique, non-empty.
    xs, ys : ndarray of shape (n,), float64
        Point coordinates in the file's CRS (x = longitude for lon/lat files).
    attributes : dict of str to ndarray
        Every other column, in file order.
    crs : pyproj.CRS or None

    Raises
    ------
    InputDataError
        Missing or unreadable file, ambiguous layer, no name column, empty or
        repeated names, or geometries that are not single points (a
        MultiPoint of one point is accepted).
    """
    name, chosen = _choose_layer(path, layer, "site file")
    meta, wkb, field_data = _read(name, chosen, "site file")
    fields = [str(f) for f in meta["fields"]]
    if name_field is None:
        matches = [f for f in fields if f.lower() == "name"]
        if not matches:
            raise InputDataError(
                f"site file {name!r} has no 'name' column (columns: {', '.join(fields) or 'none'}); "
                "add one or choose one with --name-field"
            )
        name_col = matches[0]
    else:
        if name_field not in fields:
            raise InputDataError(
                f"site file {name!r} has no column {name_field!r}; choose one of "
                f"{', '.join(fields) or 'none'}"
            )
        name_col = name_field
    columns = dict(zip(fields, field_data, strict=True))
    raw_names = columns.pop(name_col)
    names = ["" if v is None else str(v).strip() for v in raw_names]
    blank = np.flatnonzero([not n for n in names])
    if blank.size:
        raise InputDataError(
            f"site file {name!r}: row(s) {_rows_text(blank)} (counting from 1) have an empty "
            f"{name_col!r}; name every site"
        )
    repeated = sorted(n for n, count in Counter(names).items() if count > 1)
    if repeated:
        raise InputDataError(
            f"site file {name!r}: name(s) {', '.join(repr(n) for n in repeated[:5])} are used "
            "more than once; make site names unique"
        )

    geoms = shapely.from_wkb(wkb)
    missing = _missing(geoms)
    if missing.size:
        raise InputDataError(
            f"site file {name!r}: row(s) {_rows_text(missing)} (counting from 1) have no "
            "geometry; give every site a point"
        )
    ids = shapely.get_type_id(geoms)
    multi_one = (ids == 4) & (shapely.get_num_geometries(geoms) == 1)
    if np.any(multi_one):
        geoms = geoms.copy()
        geoms[multi_one] = shapely.get_geometry(geoms[multi_one], 0)
        ids = shapely.get_type_id(geoms)
    bad = np.flatnonzero(ids != 0)
    if bad.size:
        i = int(bad[0])
        raise InputDataError(
            f"site file {name!r} holds {_TYPE_NAMES.get(int(ids[i]), 'non-point')} geometries "
            f"(row {i + 1}, counting from 1); site files need points"
        )
    xs = np.asarray(shapely.get_x(geoms), dtype=np.float64)
    ys = np.asarray(shapely.get_y(geoms), dtype=np.float64)
    return names, xs, ys, columns, _crs_of(meta)
