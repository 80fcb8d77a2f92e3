"""Shared option parsing for the command line: callbacks that raise BadParameter."""

from __future__ import annotations

import warnings
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

import click

from ttmap.errors import TtmapWarning

__all__ = [
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
        raise ValueError(f"{value!r} is not {names[0]},{names[1]} (two numbers separated by a comma)")
    try:
        a, b = float(parts[0]), float(parts[1])
    except ValueError:
        raise ValueError(f"{value!r} is not {names[0]},{names[1]} (two numbers)") from None
    if not all(map(lambda v: v == v and abs(v) != float("inf"), (a, b))):
        raise ValueError(f"{value!r} has a value that is not a finite number")
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
            raise click.BadParameter(f"{v!r} must be a positive number", ctx=ctx, param=param)
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


def speed_model_options(f: Any) -> Any:
    """Options of the speed model shared by the solving commands."""
    f = click.option("--earth", type=click.Choice(["wgs84", "sphere"]), default="wgs84", show_default=True,
                     help="Figure of the Earth for longitude/latitude rasters.")(f)
    f = click.option("--floor-depth-m", type=float, default=5.0, show_default=True,
                     callback=positive_callback, help="Water shallower than this is given this depth.")(f)
    f = click.option("--far-field-correction/--no-far-field-correction", default=False, show_default=True,
                     help="Slow long waves by an effective depth (observed far-field delay of 1-2 %).")(f)
    return f


def product_options(f: Any) -> Any:
    """Options of the raster, isochrone and map products shared by the solving commands."""
    f = click.option("--map-format", type=click.Choice(["png", "pdf"]), multiple=True,
                     help="Map format; repeat for several (default png).")(f)
    f = click.option("--vector-format", type=click.Choice(["gpkg", "shp", "geojson"]), multiple=True,
                     help="Isochrone file format; repeat for several (default gpkg).")(f)
    f = click.option("--isochrone-interval-min", type=float, callback=positive_callback,
                     help="Isochrone spacing in minutes (default: 10 min to 2 h, then 30 min, then 60 min).")(f)
    f = click.option("--max-time-h", type=float, callback=positive_callback,
                     help="Stop at this many hours.")(f)
    return f
