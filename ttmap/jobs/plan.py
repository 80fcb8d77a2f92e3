"""Output-name plans: every file a job writes, named in one place.

Each job asks one function here for the names of its outputs. The same names
serve twice: the whole list is checked before any work (existing outputs are
refused unless ``overwrite`` is set), and the writers take each file's name
from the same plan, so the two can never disagree.

- :func:`product_set_names` - one product set of the map job
  (``arrival_<set>.tif``, isochrones, styles, maps, coastal layer);
- :func:`site_table_names` - the map job's site table and timeline;
- :func:`site_names` - one site of the site-map job;
- :func:`combined_names` - the site-map job's several-site products;
- :data:`RUN_RECORD_NAME` - the run record every job writes last;
- :data:`REPORT_NAME` - the HTML report, written just before the run record;
- :func:`style_files` - the QGIS style files (``.qml``) beside the rasters,
  Shapefiles and GeoJSON files of a plan.

The module imports nothing heavy.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from ttmap.defaults import VECTOR_FORMATS
from ttmap.errors import InputDataError

__all__ = [
    "RUN_RECORD_NAME",
    "REPORT_NAME",
    "STYLED_SUFFIXES",
    "ISOCHRONE_LAYERS",
    "ProductSetNames",
    "SiteNames",
    "CombinedNames",
    "SiteTableNames",
    "WavePathNames",
    "nest_set_key",
    "wave_path_names",
    "product_set_names",
    "site_table_names",
    "site_names",
    "combined_names",
    "site_file_stem",
    "check_site_stems",
    "refuse_outputs_up_front",
    "style_files",
    "is_product_name",
    "SUBSET_FOLDERS",
]

#: File name of the run record, written last in the output folder.
RUN_RECORD_NAME: str = "run.json"

#: File name of the HTML report, written in the output folder just before the run record.
REPORT_NAME: str = "report.html"

#: Layer files that get a QGIS style file (``.qml``) of the same base name
#: beside them; GeoPackage layers keep their styles inside the file.
STYLED_SUFFIXES: tuple[str, ...] = (".tif", ".shp", ".geojson")

#: Layer names of every isochrone file (GeoPackage layers; Shapefile and
#: GeoJSON outputs get one file per layer, named ``<stem>_<layer>``).
ISOCHRONE_LAYERS: tuple[str, str] = ("isochrone_lines", "isochrone_bands")


#: Subfolders a job may fill with a whole product set of its own (the demo's site map).
SUBSET_FOLDERS: tuple[str, ...] = ("site_maps",)

_PRODUCT_SUFFIX = r"(?:tif|tif\.aux\.xml|tif\.ovr|sld|gpkg|gpkg-wal|gpkg-shm|shp|shx|dbf|prj|cpg|qix|shp\.xml|geojson|json|csv|png|pdf|qml)"
_PRODUCT_RE = re.compile(
    r"^(?:"
    r"(?:arrival|isochrones|map|coast|site_centred|minutes_left|difference|envelope|locate)_[A-Za-z0-9_.-]+\." + _PRODUCT_SUFFIX
    + r"|(?:sites|timeline|sites_x_scenarios|earliest_by_site|wave_paths)\." + _PRODUCT_SUFFIX
    + r"|[A-Za-z0-9_.-]+\.task\.json"
    + r"|" + re.escape(RUN_RECORD_NAME)
    + r"|" + re.escape(REPORT_NAME)
    + r")$"
)


def is_product_name(relative: str) -> bool:
    """Whether a path (relative to the output folder) is named as ttmap names its products.

    Used where no run record says which files a run wrote (an incomplete set):
    only files named by the plans here (top level, or one of
    :data:`SUBSET_FOLDERS`) count as ttmap's.

    Examples
    --------
    >>> is_product_name("arrival_front.tif"), is_product_name("site_maps/run.json")
    (True, True)
    >>> [is_product_name(n) for n in ("arrival_front.qml", "report.html", "wave_paths.gpkg")]
    [True, True, True]
    >>> is_product_name("notes.txt"), is_product_name("data/arrival_front.tif")
    (False, False)
    """
    parts = relative.replace("\\", "/").split("/")
    if len(parts) == 2 and parts[0] in SUBSET_FOLDERS:
        parts = parts[1:]
    return len(parts) == 1 and bool(_PRODUCT_RE.match(parts[0]))


def _layer_files(target: Path, layers: Sequence[str]) -> list[Path]:
    """The files a multi-layer write to ``target`` creates."""
    from ttmap.io.vector import vector_output_paths

    return vector_output_paths(target, layers)


@dataclass(frozen=True)
class _Isochrones:
    """Names of one isochrone output: the vector targets (one per format) and their styles."""

    targets: dict[str, Path]
    lines_sld: Path
    bands_sld: Path
    bands_shp_sld: Path | None
    #: Layer name a Shapefile reader gives the bands (the SLD names it).
    shp_bands_layer: str

    def files(self) -> list[Path]:
        out: list[Path] = []
        for target in self.targets.values():
            out += _layer_files(target, ISOCHRONE_LAYERS)
        out += [self.lines_sld, self.bands_sld]
        if self.bands_shp_sld is not None:
            out.append(self.bands_shp_sld)
        return out


def _isochrones(out: Path, stem: str, vector_formats: Sequence[str]) -> _Isochrones:
    return _Isochrones(
        targets={fmt: out / f"{stem}{VECTOR_FORMATS[fmt]}" for fmt in vector_formats},
        lines_sld=out / f"{stem}_lines.sld",
        bands_sld=out / f"{stem}_bands.sld",
        bands_shp_sld=out / f"{stem}_bands_shp.sld" if "shp" in vector_formats else None,
        shp_bands_layer=f"{stem}_isochrone_bands",
    )


@dataclass(frozen=True)
class ProductSetNames:
    """The files of one product set of the map job (``<set>`` is its key)."""

    key: str
    arrival_tif: Path
    arrival_sld: Path
    isochrones: _Isochrones
    maps: dict[str, Path]
    coast: dict[str, Path] = field(default_factory=dict)
    coast_sld: Path | None = None

    def files(self) -> list[Path]:
        """Every file, in writing order."""
        out = [self.arrival_tif, self.arrival_sld, *self.isochrones.files()]
        if self.coast_sld is not None:
            out += [*self.coast.values(), self.coast_sld]
        out += list(self.maps.values())
        return out


def product_set_names(out_dir: str | os.PathLike[str], key: str, *, vector_formats: Sequence[str],
                      map_formats: Sequence[str], coast: bool) -> ProductSetNames:
    """Names of one map-job product set.

    Examples
    --------
    >>> [p.name for p in product_set_names("out", "front", vector_formats=["gpkg"],
    ...                                    map_formats=["png"], coast=True).files()]
    ... # doctest: +NORMALIZE_WHITESPACE
    ['arrival_front.tif', 'arrival_front.sld', 'isochrones_front.gpkg', 'isochrones_front_lines.sld',
     'isochrones_front_bands.sld', 'coast_front.gpkg', 'coast_front.sld', 'map_front.png']
    """
    out = Path(out_dir)
    return ProductSetNames(
        key=key,
        arrival_tif=out / f"arrival_{key}.tif",
        arrival_sld=out / f"arrival_{key}.sld",
        isochrones=_isochrones(out, f"isochrones_{key}", vector_formats),
        maps={fmt: out / f"map_{key}.{fmt}" for fmt in map_formats},
        coast={fmt: out / f"coast_{key}{VECTOR_FORMATS[fmt]}" for fmt in vector_formats} if coast else {},
        coast_sld=out / f"coast_{key}.sld" if coast else None,
    )


@dataclass(frozen=True)
class SiteTableNames:
    """The map job's site files: table (CSV, GeoPackage, GeoJSON on request) and timeline."""

    csv: Path
    layers: tuple[Path, ...]
    timelines: dict[str, Path]

    def files(self) -> list[Path]:
        return [self.csv, *self.layers, *self.timelines.values()]


def site_table_names(out_dir: str | os.PathLike[str], *, vector_formats: Sequence[str],
                     map_formats: Sequence[str]) -> SiteTableNames:
    """Names of the site table files (the timeline is always a PNG, and a PDF on request).

    >>> [p.name for p in site_table_names("out", vector_formats=["gpkg"], map_formats=["png"]).files()]
    ['sites.csv', 'sites.gpkg', 'timeline.png']
    """
    out = Path(out_dir)
    layers = [out / "sites.gpkg"]
    if "geojson" in vector_formats:
        layers.append(out / "sites.geojson")
    timelines = {"png": out / "timeline.png"}
    if "pdf" in map_formats:
        timelines["pdf"] = out / "timeline.pdf"
    return SiteTableNames(out / "sites.csv", tuple(layers), timelines)


def nest_set_key(key: str, nest_name: str) -> str:
    """The product-set key of one nest's products (its files: ``arrival_<key>.tif``, ...).

    >>> nest_set_key("front", "harbour")
    'front_nest-harbour'
    """
    return f"{key}_nest-{nest_name}"


@dataclass(frozen=True)
class WavePathNames:
    """The wave-path layer (one GeoPackage, layer ``wave_paths``) and its SLD."""

    gpkg: Path
    sld: Path

    def files(self) -> list[Path]:
        return [self.gpkg, self.sld]


def wave_path_names(out_dir: str | os.PathLike[str]) -> WavePathNames:
    """Names of the wave-path files.

    >>> [p.name for p in wave_path_names("out").files()]
    ['wave_paths.gpkg', 'wave_paths.sld']
    """
    out = Path(out_dir)
    return WavePathNames(out / "wave_paths.gpkg", out / "wave_paths.sld")


def site_file_stem(name: str) -> str:
    """A file-name-safe ASCII stem for a site name.

    Letters are transliterated (:func:`ttmap.io.names.ascii_name`: accents
    dropped, ``Ø`` -> ``O``), any run of other characters becomes ``_``.

    Raises
    ------
    InputDataError
        The name leaves no letter or digit.

    Examples
    --------
    >>> site_file_stem("Port Ōrua (north wharf)")
    'Port_Orua_north_wharf'
    >>> site_file_stem("Ørnvik School")
    'Ornvik_School'
    """
    from ttmap.io.names import ascii_name

    text = ascii_name(name)
    stem = re.sub(r"[^A-Za-z0-9-]+", "_", text).strip("_-")
    if not stem:
        raise InputDataError(
            f"site name {name!r} has no letter or digit to name its files by; rename the site"
        )
    from ttmap.jobs.checks import fit_file_stem  # a name too long for the file system: cut, with a hash

    return fit_file_stem(stem)


def check_site_stems(names: Iterable[str]) -> None:
    """Refuse sites whose file names would collide (compared ignoring case).

    >>> check_site_stems(["Bay A", "bay-a"])
    >>> check_site_stems(["Bay A", "bay a"])
    Traceback (most recent call last):
    ...
    ttmap.errors.InputDataError: sites 'Bay A' and 'bay a' would both write files named 'bay_a' \
(names are reduced to letters, digits, '-' and '_'); rename one of them
    """
    seen: dict[str, str] = {}
    for name in names:
        stem = site_file_stem(name)
        key = stem.lower()
        if key in seen:
            raise InputDataError(
                f"sites {seen[key]!r} and {name!r} would both write files named '{stem}' "
                "(names are reduced to letters, digits, '-' and '_'); rename one of them"
            )
        seen[key] = name


@dataclass(frozen=True)
class SiteNames:
    """The files of one site of the site-map job (``<site>`` is :func:`site_file_stem` of its name)."""

    stem: str
    site_tif: Path
    site_sld: Path
    left_tif: Path
    left_sld: Path
    isochrones: _Isochrones
    maps: dict[str, Path]
    left_maps: dict[str, Path]

    def files(self) -> list[Path]:
        """Every file, in writing order."""
        return [self.site_tif, self.site_sld, self.left_tif, self.left_sld, *self.isochrones.files(),
                *self.maps.values(), *self.left_maps.values()]


def site_names(out_dir: str | os.PathLike[str], name: str, *, vector_formats: Sequence[str] = ("gpkg",),
               map_formats: Sequence[str] = ("png",)) -> SiteNames:
    """Names of one site's site-centred products.

    Examples
    --------
    >>> [p.name for p in site_names("out", "Bay A").files()]  # doctest: +NORMALIZE_WHITESPACE
    ['site_centred_Bay_A.tif', 'site_centred_Bay_A.sld', 'minutes_left_Bay_A.tif',
     'minutes_left_Bay_A.sld', 'isochrones_site_Bay_A.gpkg', 'isochrones_site_Bay_A_lines.sld',
     'isochrones_site_Bay_A_bands.sld', 'map_site_Bay_A.png', 'map_minutes_left_Bay_A.png']
    """
    out = Path(out_dir)
    stem = site_file_stem(name)
    return SiteNames(
        stem=stem,
        site_tif=out / f"site_centred_{stem}.tif",
        site_sld=out / f"site_centred_{stem}.sld",
        left_tif=out / f"minutes_left_{stem}.tif",
        left_sld=out / f"minutes_left_{stem}.sld",
        isochrones=_isochrones(out, f"isochrones_site_{stem}", vector_formats),
        maps={fmt: out / f"map_site_{stem}.{fmt}" for fmt in map_formats},
        left_maps={fmt: out / f"map_minutes_left_{stem}.{fmt}" for fmt in map_formats},
    )


@dataclass(frozen=True)
class CombinedNames:
    """The several-site products of the site-map job."""

    min_tif: Path
    min_sld: Path
    first_tif: Path
    first_sld: Path
    first_json: Path

    def files(self) -> list[Path]:
        """Every file, in writing order.

        >>> [p.name for p in combined_names("out").files()]  # doctest: +NORMALIZE_WHITESPACE
        ['site_centred_min.tif', 'site_centred_min.sld', 'site_centred_first_site.tif',
         'site_centred_first_site.sld', 'site_centred_first_site.json']
        """
        return [self.min_tif, self.min_sld, self.first_tif, self.first_sld, self.first_json]


def combined_names(out_dir: str | os.PathLike[str]) -> CombinedNames:
    """Names of the several-site products."""
    out = Path(out_dir)
    return CombinedNames(
        min_tif=out / "site_centred_min.tif",
        min_sld=out / "site_centred_min.sld",
        first_tif=out / "site_centred_first_site.tif",
        first_sld=out / "site_centred_first_site.sld",
        first_json=out / "site_centred_first_site.json",
    )


def style_files(paths: Iterable[str | os.PathLike[str]]) -> list[Path]:
    """The ``.qml`` style file beside each raster, Shapefile and GeoJSON file of ``paths``.

    QGIS loads ``<base name>.qml`` beside a layer file when it opens it; a
    Shapefile and a GeoJSON file of the same base name share one. Each name
    appears once, in the order of ``paths``.

    >>> [p.name for p in style_files(["out/arrival_front.tif", "out/a_lines.shp",
    ...                               "out/a_lines.geojson", "out/a.gpkg", "out/map.png"])]
    ['arrival_front.qml', 'a_lines.qml']
    """
    out: dict[Path, None] = {}
    for p in paths:
        path = Path(p)
        if path.suffix.lower() in STYLED_SUFFIXES:
            out.setdefault(path.with_suffix(".qml"), None)
    return list(out)


def refuse_outputs_up_front(out_dir: str | os.PathLike[str], planned: Sequence[Path], overwrite: bool) -> Path:
    """Refuse existing outputs and unwritable places before any work.

    The folder itself is created only when the first product is written, so
    that a run refused for its input (missing file, source on land) leaves
    nothing behind. Staging folders a killed ttmap run left in it are removed
    first (:func:`ttmap.jobs.staging.recover_stale`, which says so in one warning).

    Raises
    ------
    InputDataError
        ``out_dir`` is a file, or cannot be created.
    OutputExistsError
        A planned file exists, or the folder holds an incomplete product set
        (products without ``run.json``), and ``overwrite`` is False.
    """
    from ttmap.errors import OutputExistsError
    from ttmap.io.atomic import check_writable
    from ttmap.jobs.staging import incomplete_set, recover_stale

    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {str(out)!r} is a file; give a folder name")
    if out.is_dir():
        recover_stale(out)
        partial = incomplete_set(out)
        if partial and not overwrite:
            raise OutputExistsError(
                f"output folder {str(out)!r} holds an incomplete product set ({len(partial)} file(s) "
                f"such as {partial[0]!r}, no {RUN_RECORD_NAME}; a run stopped before it finished); "
                "pass --overwrite to replace it, or choose another --out folder"
            )
        check_writable(planned, overwrite)
    else:
        _check_creatable(out)
    return out


def _check_creatable(out: Path) -> None:
    """Refuse an output folder that cannot be created (its nearest existing parent is not writable)."""
    parent = out.absolute().parent
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    if not parent.is_dir():
        raise InputDataError(f"output folder {str(out)!r} cannot be created: {str(parent)!r} is a file")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputDataError(
            f"output folder {str(out)!r} cannot be created in {str(parent)!r} (not writable); "
            "choose another --out folder"
        )
