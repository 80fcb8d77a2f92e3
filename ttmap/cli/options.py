"""Shared options of the command line, their callbacks, and the option groups they fill.

Defaults and choices come from the job option groups
(:mod:`ttmap.jobs.options`, whose defaults come from :mod:`ttmap.defaults`);
:data:`OPTION_FIELDS` says which dataclass field each option fills and by
what factor its unit differs, and a test checks that every default agrees.
The ``*_from_options`` functions turn parsed options into the groups.
"""

from __future__ import annotations

import datetime as _dt
import math
import warnings
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import MISSING, fields
from typing import Any

import click

from ttmap.defaults import EARTH_MODELS, MAP_FORMATS, MAX_NOTIFICATION_DELAY_MIN, PERIOD_SPEEDS, VECTOR_FORMATS
from ttmap.errors import TtmapWarning
from ttmap.jobs.options import LONLAT_CRS, ProductOptions, ReadingOptions, SiteOptions, SpeedOptions

__all__ = [
    "OPTION_FIELDS",
    "LazyChoice",
    "InputFile",
    "OutputFolder",
    "field_default",
    "option_default",
    "finite_callback",
    "nodata_callback",
    "parse_origin_time",
    "origin_time_callback",
    "bathymetry_options",
    "site_file_options",
    "site_table_options",
    "reading_from_options",
    "speed_from_options",
    "products_from_options",
    "sites_from_options",
    "parse_pair",
    "parse_bbox",
    "pair_callback",
    "bbox_callback",
    "positive_callback",
    "Reporter",
    "reporter",
    "verbosity_options",
    "speed_model_options",
    "product_options",
]


def parse_pair(value: str, names: tuple[str, str] = ("LON", "LAT")) -> tuple[float, float]:
    """Parse ``"a,b"`` into two floats; ValueError with a helpful message otherwise.

    >>> parse_pair("-70.5,-33.2")
    (-70.5, -33.2)
    """
    parts = [p.strip() for p in str(value).replace(" ", ",").split(",") if p.strip()]
    if len(parts) != 2:
        raise ValueError(f"{value!r} is not {names[0]},{names[1]} (two numbers separated by a comma); give e.g. -70.5,-33.2")
    try:
        a, b = float(parts[0]), float(parts[1])
    except ValueError:
        raise ValueError(f"{value!r} is not {names[0]},{names[1]} (two numbers); give e.g. -70.5,-33.2") from None
    if not all(map(lambda v: v == v and abs(v) != float("inf"), (a, b))):
        raise ValueError(
            f"{value!r} has a value that is not a finite number; give two finite numbers, "
            f"e.g. {names[0]},{names[1]} = -70.5,-33.2"
        )
    return a, b


def parse_bbox(value: str) -> tuple[float, float, float, float]:
    """Parse ``"W,S,E,N"``.

    >>> parse_bbox("-150,-38,-141,-31")
    (-150.0, -38.0, -141.0, -31.0)
    """
    parts = [p.strip() for p in str(value).split(",") if p.strip()]
    try:
        w, s, e, n = (float(p) for p in parts)
    except ValueError:
        raise ValueError(f"{value!r} is not WEST,SOUTH,EAST,NORTH (four numbers)") from None
    if not (w < e and s < n):
        raise ValueError(f"{value!r} needs WEST < EAST and SOUTH < NORTH")
    return w, s, e, n


def pair_callback(names: tuple[str, str]) -> Callable[[click.Context, click.Parameter, Any], Any]:
    def cb(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
        if value is None:
            return None
        try:
            return parse_pair(value, names)
        except ValueError as err:
            raise click.BadParameter(str(err), ctx=ctx, param=param) from None

    return cb


def bbox_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    if value is None:
        return None
    try:
        return parse_bbox(value)
    except ValueError as err:
        raise click.BadParameter(str(err), ctx=ctx, param=param) from None


def positive_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    if value is None:
        return None
    vals = value if isinstance(value, tuple) else (value,)
    for v in vals:
        if not (v > 0 and v != float("inf")):
            raise click.BadParameter(f"{v!r} must be a positive number; give a finite number above 0",
                                     ctx=ctx, param=param)
    return value


class Reporter:
    """Progress and notices on stderr, honouring --quiet and --verbose."""

    def __init__(self, quiet: bool = False, verbose: bool = False) -> None:
        self.quiet = quiet
        self.verbose = verbose

    def stage(self, message: str) -> None:
        if not self.quiet:
            click.echo(f"ttmap: {message}", err=True)

    def notice(self, message: str) -> None:
        click.echo(f"ttmap: note: {message}", err=True)


@contextmanager
def reporter(ctx: click.Context) -> Iterator[Reporter]:
    """A Reporter for a command; ttmap warnings are shown as one-line notes."""
    obj = ctx.find_root().obj or {}
    rep = Reporter(quiet=obj.get("quiet", False), verbose=obj.get("verbose", False))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", TtmapWarning)
        try:
            yield rep
        finally:
            for w in caught:
                if issubclass(w.category, TtmapWarning):
                    rep.notice(str(w.message))


def _set_flag(name: str) -> Callable[[click.Context, click.Parameter, Any], None]:
    def cb(ctx: click.Context, param: click.Parameter, value: Any) -> None:
        if value:
            root = ctx.find_root()
            root.ensure_object(dict)
            root.obj[name] = True
            if root.obj.get("verbose") and root.obj.get("quiet"):
                raise click.UsageError("--verbose and --quiet exclude each other; give one")

    return cb


def verbosity_options(f: Any) -> Any:
    """``-q/--quiet`` and ``-v/--verbose`` accepted after the subcommand too."""
    f = click.option("-q", "--quiet", is_flag=True, expose_value=False, callback=_set_flag("quiet"),
                     help="No progress messages.")(f)
    f = click.option("-v", "--verbose", is_flag=True, expose_value=False, callback=_set_flag("verbose"),
                     help="More detail, and tracebacks on errors.")(f)
    return f


class InputFile(click.Path):
    """A path to an input file; click's refusals (a folder, an empty name) get the fix added."""

    def __init__(self, *, exists: bool = False) -> None:
        super().__init__(exists=exists, dir_okay=False)

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Any:
        if isinstance(value, str) and not value.strip():
            self.fail(f"{value!r} is empty; give the path of a file", param, ctx)
        return super().convert(value, param, ctx)

    def fail(self, message: str, param: click.Parameter | None = None, ctx: click.Context | None = None) -> Any:
        super().fail(f"{message.rstrip('.')}; give the path of a file, not a folder", param, ctx)


class OutputFolder(click.Path):
    """An output folder; an empty name and an existing file are refused with the fix."""

    def __init__(self) -> None:
        super().__init__(file_okay=False)

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Any:
        if isinstance(value, str) and not value.strip():
            self.fail(f"{value!r} is empty; give a folder name, e.g. --out run1", param, ctx)
        return super().convert(value, param, ctx)

    def fail(self, message: str, param: click.Parameter | None = None, ctx: click.Context | None = None) -> Any:
        if "is empty" in message:
            super().fail(message, param, ctx)
        super().fail(f"{message.rstrip('.')}; give the name of a folder (new or existing), e.g. --out run1",
                     param, ctx)


class LazyChoice(click.Choice):
    """A :class:`click.Choice` whose choices are loaded when first needed.

    Keeps a heavy module (one that imports numpy) out of ``ttmap --help``.
    """

    def __init__(self, load: Callable[[], Sequence[str]], case_sensitive: bool = True) -> None:
        self._load = load
        self._loaded: Sequence[str] | None = None
        super().__init__([], case_sensitive=case_sensitive)

    @property  # type: ignore[override]
    def choices(self) -> Sequence[str]:
        if self._loaded is None:
            self._loaded = tuple(self._load())
        return self._loaded

    @choices.setter
    def choices(self, value: Sequence[str]) -> None:  # click's __init__ assigns []; ignored
        pass


def field_default(cls: Any, name: str) -> Any:
    """The default of field ``name`` of the option group ``cls``.

    >>> field_default(SpeedOptions, "floor_depth_m")
    5.0
    """
    for f in fields(cls):
        if f.name == name:
            if f.default is MISSING:
                raise KeyError(f"{cls.__name__}.{name} has no default")
            return f.default
    raise KeyError(f"{cls.__name__} has no field {name!r}")


#: CLI parameter name -> (option group, field, factor): the field's value is
#: the option's value times the factor (km -> m: 1000, % -> fraction: 0.01).
OPTION_FIELDS: dict[str, tuple[Any, str, float]] = {
    "depth_positive": (ReadingOptions, "depth_positive", 1.0),
    "coarsen": (ReadingOptions, "coarsen", 1.0),
    "refine": (ReadingOptions, "refine", 1.0),
    "earth": (SpeedOptions, "earth", 1.0),
    "floor_depth_m": (SpeedOptions, "floor_depth_m", 1.0),
    "far_field_correction": (SpeedOptions, "far_field", 1.0),
    "period_speed": (SpeedOptions, "period_speed", 1.0),
    "coast": (ProductOptions, "coast", 1.0),
    "coast_interval_min": (ProductOptions, "coast_interval_min", 1.0),
    "site_search_radius_km": (SiteOptions, "search_radius_m", 1000.0),
    "speed_uncertainty_pct": (SiteOptions, "speed_uncertainty", 0.01),
    "notification_delay_min": (SiteOptions, "notification_delay_min", 1.0),
    "preparation_min": (SiteOptions, "preparation_min", 1.0),
    "walking_speed_m_s": (SiteOptions, "walking_speed_m_s", 1.0),
    "little_margin_min": (SiteOptions, "little_margin_min", 1.0),
}


def option_default(param: str) -> Any:
    """The CLI default of ``param``: its option-group field default in the option's unit."""
    cls, name, factor = OPTION_FIELDS[param]
    value = field_default(cls, name)
    if isinstance(value, (bool, str, int)) or factor == 1.0:
        return value
    return round(value / factor, 12)


def finite_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    """Refuse NaN and infinite numbers (click's ranges let them through)."""
    if value is None:
        return None
    for v in value if isinstance(value, tuple) else (value,):
        if not math.isfinite(v):
            raise click.BadParameter(f"{v!r} is not a finite number; give a finite number", ctx=ctx, param=param)
    return value


def nodata_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    """``--nodata VALUE``: a finite number."""
    if value is None:
        return None
    try:
        v = float(value)
    except ValueError:
        raise click.BadParameter(f"{value!r} is not a number; give the fill value, e.g. --nodata -32768",
                                 ctx=ctx, param=param) from None
    if not math.isfinite(v):
        raise click.BadParameter(f"{value!r} is not a finite number; give the fill value, e.g. --nodata -32768",
                                 ctx=ctx, param=param)
    return v


def parse_origin_time(value: str) -> _dt.datetime:
    """An ISO 8601 time with a zone (``Z`` or an offset), as UTC; ValueError otherwise.

    >>> parse_origin_time("2026-03-01T16:12:00+13:00").isoformat()
    '2026-03-01T03:12:00+00:00'
    >>> parse_origin_time("2026-03-01T03:12:00Z").isoformat()
    '2026-03-01T03:12:00+00:00'
    """
    text = str(value).strip()
    try:
        t = _dt.datetime.fromisoformat(text)
    except ValueError:
        raise ValueError(
            f"{value!r} is not an ISO 8601 time; give e.g. 2026-03-01T03:12:00Z"
        ) from None
    if t.tzinfo is None or t.utcoffset() is None:
        raise ValueError(
            f"{value!r} has no time zone; add Z for UTC or an offset, e.g. 2026-03-01T03:12:00Z "
            "or 2026-03-01T16:12:00+13:00"
        )
    return t.astimezone(_dt.UTC)


def origin_time_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    if value is None:
        return None
    try:
        return parse_origin_time(value)
    except ValueError as err:
        raise click.BadParameter(str(err), ctx=ctx, param=param) from None


def speed_model_options(f: Any) -> Any:
    """Options of the speed model shared by the solving commands."""
    f = click.option("--earth", type=click.Choice(EARTH_MODELS), default=option_default("earth"), show_default=True,
                     help="Figure of the Earth for longitude/latitude rasters.")(f)
    f = click.option("--floor-depth-m", type=float, default=option_default("floor_depth_m"), show_default=True,
                     callback=positive_callback, help="Water shallower than this is given this depth.")(f)
    f = click.option("--far-field-correction/--no-far-field-correction", default=option_default("far_field_correction"),
                     show_default=True,
                     help="Slow long waves by an effective depth (observed far-field delay of 1-2 %).")(f)
    return f


def period_speed_option(f: Any) -> Any:
    """``--period-speed``: the speed used with wave periods."""
    return click.option("--period-speed", type=click.Choice(PERIOD_SPEEDS), default=option_default("period_speed"),
                        show_default=True, help="Speed used with --period-s.")(f)


def product_options(f: Any) -> Any:
    """Options of the raster, isochrone and map products shared by the solving commands."""
    f = click.option("--no-report", is_flag=True, help="Skip report.html (the run on one self-contained page).")(f)
    f = click.option("--no-map", is_flag=True, help="Skip the map pictures.")(f)
    f = click.option("--map-format", type=click.Choice(MAP_FORMATS), multiple=True,
                     help=f"Map format; repeat for several (default {MAP_FORMATS[0]}).")(f)
    f = click.option("--vector-format", type=click.Choice(list(VECTOR_FORMATS)), multiple=True,
                     help=f"Isochrone file format; repeat for several (default {next(iter(VECTOR_FORMATS))}).")(f)
    f = click.option("--isochrone-interval-min", type=float, callback=positive_callback,
                     help="Isochrone spacing in minutes (default: 10 min to 2 h, then 30 min, then 60 min).")(f)
    f = click.option("--max-time-h", type=float, callback=positive_callback,
                     help="Stop at this many hours.")(f)
    return f


def bathymetry_options(f: Any) -> Any:
    """Options shared by commands that read a bathymetry raster."""
    f = click.option("--coarsen", type=click.IntRange(min=1), default=option_default("coarsen"), show_default=True,
                     help="Average depth over N x N blocks first (faster, coarser).")(f)
    f = click.option("--refine", type=click.IntRange(min=1), default=option_default("refine"), show_default=True,
                     help="Split each cell into N x N cells of the same depth and solve on those "
                          "(about N^2 times the time; smaller discretisation error near islands).")(f)
    f = click.option("--crop-xy", callback=bbox_callback, metavar="W,S,E,N",
                     help="Crop to a window in the raster's own map units.")(f)
    f = click.option("--crop-lonlat", callback=bbox_callback, metavar="W,S,E,N",
                     help="Crop to a longitude/latitude window (degrees).")(f)
    f = click.option("--depth-positive", is_flag=True, default=option_default("depth_positive"),
                     help="Values are depths (positive down), not elevations.")(f)
    f = click.option("--band", type=click.IntRange(min=1), help="Band to read from a multi-band raster.")(f)
    f = click.option("--nodata", callback=nodata_callback, metavar="VALUE",
                     help="A fill value the raster does not declare (e.g. 99999 or -32768): treat as nodata.")(f)
    return f


def site_file_options(f: Any) -> Any:
    """``--sites FILE`` and how to read it (layer, name field, CRS)."""
    f = click.option("--sites-crs", metavar="CRS",
                     help="CRS of x,y columns in a CSV site file (or of a vector file that declares "
                          "none), e.g. EPSG:32759. lon,lat columns are WGS84 degrees.")(f)
    f = click.option("--name-field", metavar="COLUMN",
                     help="Column holding the site names (default: name).")(f)
    f = click.option("--sites-layer", metavar="LAYER", help="Layer of a multi-layer vector site file.")(f)
    f = click.option("--sites", "sites_file", type=InputFile(), metavar="FILE",
                     help="Coastal sites: CSV with name,lon,lat and optional safe_ground_distance_m, "
                          "walking_speed_m_s, preparation_min, notification_delay_min; or a point "
                          "vector file with those attributes.")(f)
    return f


def site_search_radius_option(help_text: str) -> Callable[[Any], Any]:
    """``--site-search-radius-km``, one name for every command."""
    return click.option("--site-search-radius-km", type=click.FloatRange(min=0.0),
                        default=option_default("site_search_radius_km"), show_default=True, callback=finite_callback,
                        help=help_text)


def notification_delay_option(help_text: str) -> Callable[[Any], Any]:
    """``--notification-delay-min`` (0 to 1440 minutes)."""
    return click.option("--notification-delay-min", type=click.FloatRange(0.0, MAX_NOTIFICATION_DELAY_MIN),
                        default=option_default("notification_delay_min"), show_default=True, callback=finite_callback,
                        help=help_text)


def site_table_options(f: Any) -> Any:
    """Options of the site table: snapping, uncertainty, clock times and the time budget."""
    f = click.option("--little-margin-min", type=click.FloatRange(min=0.0), default=option_default("little_margin_min"),
                     show_default=True, callback=finite_callback,
                     help="Margins below this are flagged as little.")(f)
    f = click.option("--walking-speed-m-s", type=click.FloatRange(min=0.0, min_open=True),
                     default=option_default("walking_speed_m_s"), show_default=True, callback=finite_callback,
                     help="Walking speed for sites that give none (mean observed in the 2011 "
                          "evacuations; slower than the older 1.0 m/s planning value).")(f)
    f = click.option("--preparation-min", type=click.FloatRange(min=0.0), default=option_default("preparation_min"),
                     show_default=True, callback=finite_callback,
                     help="Minutes before people start walking, for sites that give none.")(f)
    f = notification_delay_option("Minutes from the earthquake until an official message can reach people, "
                                  "for sites that give none.")(f)
    f = click.option("--origin-time", metavar="ISO8601", callback=origin_time_callback,
                     help="Earthquake origin time with a zone (e.g. 2026-03-01T03:12:00Z); adds UTC "
                          "clock times to the site table.")(f)
    f = click.option("--speed-uncertainty-pct", type=click.FloatRange(0.0, 100.0, max_open=True),
                     default=option_default("speed_uncertainty_pct"), show_default=True, callback=finite_callback,
                     help="Stated +/- wave-speed uncertainty behind the earliest/latest columns.")(f)
    f = site_search_radius_option("Read a site's time at the nearest reached water cell within this distance.")(f)
    return site_file_options(f)


def _given(opts: dict[str, Any], param: str) -> Any:
    """The option's value converted to the field's unit, or the field default when absent."""
    cls, name, factor = OPTION_FIELDS[param]
    value = opts.get(param)
    if value is None:
        return field_default(cls, name)
    if factor == 1.0:
        return value
    # divide by an exact whole number for percentages, as the old code did (5 / 100, not 5 * 0.01)
    return value * factor if factor >= 1.0 else value / round(1.0 / factor)


def reading_from_options(bathymetry: str, opts: dict[str, Any]) -> ReadingOptions:
    """The reading options of ``bathymetry`` from ``--band``, ``--depth-positive``, crops, ``--coarsen``, ``--refine``."""
    if opts.get("crop_lonlat") and opts.get("crop_xy"):
        raise click.UsageError("give --crop-lonlat or --crop-xy, not both")
    return ReadingOptions(
        path=bathymetry,
        band=opts.get("band"),
        depth_positive=bool(_given(opts, "depth_positive")),
        window=opts.get("crop_lonlat") or opts.get("crop_xy"),
        window_crs=None if opts.get("crop_xy") else LONLAT_CRS,
        coarsen=int(_given(opts, "coarsen")),
        nodata=opts.get("nodata"),
        refine=int(_given(opts, "refine")),
    )


def speed_from_options(opts: dict[str, Any], periods_s: tuple[float, ...]) -> SpeedOptions:
    """The speed options from the speed-model options, ``--max-time-h`` and the given periods."""
    return SpeedOptions(
        floor_depth_m=_given(opts, "floor_depth_m"),
        far_field=bool(_given(opts, "far_field_correction")),
        earth=_given(opts, "earth"),
        periods_s=periods_s,
        period_speed=_given(opts, "period_speed"),
        max_time_s=None if opts.get("max_time_h") is None else opts["max_time_h"] * 3600.0,
    )


def products_from_options(opts: dict[str, Any]) -> ProductOptions:
    """The product options from ``--vector-format``, ``--map-format``/``--no-map`` and the coast options."""
    return ProductOptions(
        isochrone_interval_min=opts.get("isochrone_interval_min"),
        vector_formats=tuple(opts.get("vector_format") or field_default(ProductOptions, "vector_formats")),
        map_formats=() if opts.get("no_map") else tuple(
            opts.get("map_format") or field_default(ProductOptions, "map_formats")),
        coast=bool(_given(opts, "coast")),
        coast_interval_min=_given(opts, "coast_interval_min"),
        report=not opts.get("no_report"),
    )


def sites_from_options(opts: dict[str, Any]) -> SiteOptions:
    """The site options from the site-file and site-table options present in ``opts``."""
    return SiteOptions(
        path=opts.get("sites_file"),
        name_field=opts.get("name_field"),
        layer=opts.get("sites_layer"),
        crs=opts.get("sites_crs"),
        search_radius_m=_given(opts, "site_search_radius_km"),
        notification_delay_min=_given(opts, "notification_delay_min"),
        preparation_min=_given(opts, "preparation_min"),
        walking_speed_m_s=_given(opts, "walking_speed_m_s"),
        speed_uncertainty=_given(opts, "speed_uncertainty_pct"),
        little_margin_min=_given(opts, "little_margin_min"),
        origin_time_utc=opts.get("origin_time"),
    )
