"""Styles of the source-location products: class edges, colours and legend text.

Pure decisions, no files (the locate job writes them):

- :func:`misfit_steps` (the one definition, counted above the best cell; the
  map draws it), :func:`misfit_classes` / :func:`misfit_qml` - ``locate_misfit.tif`` holds the
  chi-square misfit of the picks for a source at each cell; what matters is
  how far a cell lies above the best cell (``chi2 - chi2_min``, the quantity
  the confidence region is cut from). The classes are cut at ``chi2_min``
  plus the chi-square quantiles of 2 degrees of freedom: 68.27 % (the
  one-sigma region), the run's level (the region written in
  ``locate_region.gpkg``: always a class edge), 99 % and 99.9 %, then round
  figures far outside. Blues inside the region, a red-to-pale-yellow ramp
  outside (saturated just outside, fading with distance).
- :func:`origin_time_classes` / :func:`origin_time_qml` - the best origin time
  per cell, minutes relative to the reference in the raster's tags: round
  classes over the bulk of the values (2nd to 98th percentile), open at both
  ends, on the ``cividis`` ramp.
- :func:`region_sld` / :func:`region_qml` - the confidence region polygon(s):
  one definition of the fill and outline (:data:`REGION_FILL_HEX` ...), used by
  the SLD and the QML.
- :func:`gauge_ranges` / :func:`gauges_qml` - the gauges by normalised residual
  (observed minus predicted, in pick uncertainties), labelled by name.

The quantile of a 2-degree-of-freedom chi-square is ``-2 ln(1 - p)``; the
values come from :func:`ttmap.locate.delta_chi2`, the function that cuts the
region.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ttmap.errors import InputDataError

__all__ = [
    "REGION_FILL_HEX",
    "REGION_FILL_OPACITY",
    "REGION_STROKE_HEX",
    "REGION_STROKE_WIDTH_PX",
    "SLD_PIXEL_MM",
    "INSIDE_COLORS",
    "OUTSIDE_CMAP",
    "ORIGIN_CMAP",
    "GAUGE_COLORS",
    "RasterClass",
    "MisfitStep",
    "misfit_steps",
    "misfit_class_index",
    "misfit_classes",
    "misfit_qml",
    "origin_time_classes",
    "origin_time_qml",
    "region_sld",
    "region_qml",
    "gauge_ranges",
    "gauges_qml",
]

#: Fill of the confidence region (the colour the map outlines it with).
REGION_FILL_HEX: str = "#00a0ff"
#: Fill opacity of the confidence region (the misfit shows through).
REGION_FILL_OPACITY: float = 0.25
#: Outline of the confidence region.
REGION_STROKE_HEX: str = "#0060a0"
#: Outline width in SLD pixels.
REGION_STROKE_WIDTH_PX: float = 1.5
#: Size of one SLD pixel in millimetres: the "standardized rendering pixel
#: size" of OGC Symbology Encoding 1.1 (05-077r4), 0.28 mm.
SLD_PIXEL_MM: float = 0.28

#: Misfit classes inside the region: the one-sigma (68.27 %) class, then the
#: rest of the region up to the run's level.
INSIDE_COLORS: tuple[str, str] = ("#08519c", "#4292c6")
#: Misfit classes outside the region: just outside saturated, far pale.
OUTSIDE_CMAP: str = "YlOrRd_r"
#: Origin-time classes, earliest first.
ORIGIN_CMAP: str = "cividis"
#: Gauge classes by normalised residual, from 3 sigma early to 3 sigma late
#: (ColorBrewer RdBu, with the middle class dark grey so a marker shows on
#: white).
GAUGE_COLORS: tuple[str, ...] = ("#2166ac", "#4393c3", "#92c5de", "#4d4d4d", "#f4a582", "#d6604d", "#b2182b")

_ONE_SIGMA_2D = 0.6827
_OUTER_LEVELS = (0.99, 0.999)
_FAR_STEPS = (25.0, 50.0, 100.0, 250.0, 500.0, 1000.0, 2500.0, 5000.0, 10000.0)
_MAX_FAR = 4


@dataclass(frozen=True)
class RasterClass:
    """One class of a classed raster: values up to ``upper`` (after the class before)."""

    upper: float
    color: str
    label: str


def _pct(level: float) -> str:
    return f"{100.0 * level:.4g} %"


@dataclass(frozen=True)
class MisfitStep:
    """One class of the misfit raster, counted above the best cell.

    Attributes
    ----------
    upper_excess : float
        Upper bound of ``chi2 - chi2_min`` (``inf`` for the last, open class).
    color : str
        ``#rrggbb``.
    inside : bool
        The class lies inside the run's confidence region.
    level : float or None
        The confidence level whose 2-dof chi-square quantile is the upper
        bound (68.27 %, the run's level, 99 %, 99.9 %); None for the round far
        bounds and the open end.
    """

    upper_excess: float
    color: str
    inside: bool
    level: float | None


def misfit_steps(level: float, *, max_excess: float | None = None) -> list[MisfitStep]:
    """The misfit classes counted above the best cell: the one definition of edges and colours.

    :func:`misfit_classes` (the QGIS style) and the map
    (:mod:`ttmap.products.locate_map`) both draw these.

    Parameters
    ----------
    level : float
        Confidence level of the run's region, 0 < level < 1.
    max_excess : float, optional
        Largest ``chi2 - chi2_min`` on the grid (see :func:`misfit_classes`).

    Returns
    -------
    list of MisfitStep
        Ascending ``upper_excess``, the last ``inf``; the classes up to
        ``delta_chi2(level)`` are ``inside``.

    Examples
    --------
    >>> [(round(s.upper_excess, 2), s.inside, s.level) for s in misfit_steps(0.95, max_excess=20.0)]
    [(2.3, True, 0.6827), (5.99, True, 0.95), (9.21, False, 0.99), (13.82, False, 0.999), (inf, False, None)]
    """
    from ttmap.locate import delta_chi2

    d_level = delta_chi2(level)
    inside: list[tuple[float, float | None]] = (
        [(delta_chi2(_ONE_SIGMA_2D), _ONE_SIGMA_2D)] if level > _ONE_SIGMA_2D + 1e-9 else [])
    inside.append((d_level, float(level)))
    outside: list[tuple[float, float | None]] = [
        (delta_chi2(p), p) for p in _OUTER_LEVELS if p > level + 1e-9]
    top = 1000.0 if max_excess is None or not math.isfinite(max_excess) else float(max_excess)
    last = outside[-1][0] if outside else d_level
    far = [v for v in _FAR_STEPS if v > last * 1.5 and v < top]
    if len(far) > _MAX_FAR:  # spread over the whole range, the largest kept
        idx = np.linspace(0, len(far) - 1, _MAX_FAR).round().astype(int)
        far = [far[i] for i in idx]
    outside += [(v, None) for v in far]
    out_colors = _cmap_hex(len(outside) + 1, OUTSIDE_CMAP)
    steps = [MisfitStep(d, INSIDE_COLORS[len(INSIDE_COLORS) - len(inside) + k], True, p)
             for k, (d, p) in enumerate(inside)]
    steps += [MisfitStep(d, out_colors[k], False, p) for k, (d, p) in enumerate(outside)]
    steps.append(MisfitStep(math.inf, out_colors[-1], False, None))
    return steps


def misfit_class_index(excess: Any, steps: Sequence[MisfitStep]) -> Any:
    """The class of each value of ``chi2 - chi2_min``: the first step whose bound is >= it.

    The rule of QGIS's ``DISCRETE`` shader, and of the region (``<=`` its
    bound), so a cell on an edge falls in the class below it.

    Parameters
    ----------
    excess : array-like of float
        ``chi2 - chi2_min`` (NaN allowed: class ``len(steps)``).
    steps : sequence of MisfitStep

    Returns
    -------
    ndarray of int
        Indices into ``steps``; NaN gives ``len(steps)``.

    Examples
    --------
    >>> steps = misfit_steps(0.95, max_excess=20.0)
    >>> misfit_class_index([0.0, 5.991464547107979, 6.0, 1e9, float("nan")], steps).tolist()
    [0, 1, 2, 4, 5]
    """
    v = np.asarray(excess, dtype=np.float64)
    idx = np.searchsorted(np.asarray([s.upper_excess for s in steps]), v, side="left")
    return np.where(np.isnan(v), len(steps), idx)


def misfit_classes(best_chi2: float, level: float, *, max_excess: float | None = None) -> list[RasterClass]:
    """Classes of the misfit raster, in its own values (chi-square), cut at the region levels.

    Parameters
    ----------
    best_chi2 : float
        The misfit of the best cell (``chi2_min``), >= 0.
    level : float
        Confidence level of the run's region, 0 < level < 1.
    max_excess : float, optional
        Largest ``chi2 - chi2_min`` on the grid; round far classes (25, 50,
        100, 250, ... 10000) are added below it, at most four, spread over
        the range. Up to 1000 when None.

    Returns
    -------
    list of RasterClass
        Ascending upper bounds, the last ``inf``: ``best_chi2`` plus the
        bounds of :func:`misfit_steps`, in its colours. The bound
        ``best_chi2 + delta_chi2(level)`` is always one of them, and every
        class below it is inside the region.

    Raises
    ------
    InputDataError
        A level outside (0, 1), a negative or non-finite best misfit.

    Examples
    --------
    >>> [round(c.upper - 2.0, 2) for c in misfit_classes(2.0, 0.95)][:4]
    [2.3, 5.99, 9.21, 13.82]
    """
    best = float(best_chi2)
    if not (math.isfinite(best) and best >= 0.0):
        raise InputDataError(f"best misfit {best_chi2!r} must be a finite chi-square >= 0")
    steps = misfit_steps(level, max_excess=max_excess)
    pct = _pct(level)
    classes: list[RasterClass] = []
    lo = 0.0
    for k, st in enumerate(steps):
        d = st.upper_excess
        if st.inside:
            one_sigma = st.level is not None and abs(st.level - _ONE_SIGMA_2D) < 1e-9 and st.level < level - 1e-9
            where = f"inside the {_pct(_ONE_SIGMA_2D)} (one-sigma) region" if one_sigma else f"inside the {pct} region"
            span = f"up to {best + d:.2f}" if k == 0 else f"{best + lo:.2f} to {best + d:.2f}"
            label = f"{span} (best + {lo:.2f} to {d:.2f}): {where}"
        elif math.isfinite(d):
            label = (f"{best + lo:.2f} to {best + d:.2f} (best + {lo:.2f} to {d:.2f}): "
                     f"outside the {pct} region")
        else:
            label = f"above {best + lo:.2f} (best + more than {lo:.2f}): far outside"
        classes.append(RasterClass(best + d, st.color, label))
        lo = d
    return classes


def misfit_qml(best_chi2: float, level: float, *, layer_name: str, max_excess: float | None = None,
               nodata: float = -9999.0) -> str:
    """The misfit raster's QML: :func:`misfit_classes` as a classed (``DISCRETE``) raster."""
    from ttmap.locate import delta_chi2
    from ttmap.products.qml import classed_raster_qml

    classes = misfit_classes(best_chi2, level, max_excess=max_excess)
    return classed_raster_qml(
        [c.upper for c in classes], [c.color for c in classes], [c.label for c in classes],
        layer_name=layer_name, nodata=nodata,
        title=(f"Chi-square misfit of the picks for a source at each cell; best cell {float(best_chi2):.2f}; "
               f"{_pct(level)} region: up to {float(best_chi2) + delta_chi2(level):.2f}"),
    )


def _cmap_hex(n: int, cmap: str) -> list[str]:
    from ttmap.products.palette import arrival_colors_hex

    return arrival_colors_hex(max(n, 1), cmap)


def _nice_step(span: float, max_classes: int) -> float:
    """The smallest 1, 2 or 5 x 10^k step giving at most ``max_classes`` steps over ``span``."""
    raw = span / max_classes
    exp = math.floor(math.log10(raw))
    for m in (1.0, 2.0, 5.0, 10.0):
        step = m * 10.0**exp
        if step >= raw * (1.0 - 1e-12):
            return float(step)
    return float(10.0 ** (exp + 1))  # pragma: no cover - the loop always returns


def origin_time_classes(origin_min: Any, *, include: Sequence[float] = (), max_classes: int = 10) -> list[RasterClass]:
    """Graduated classes of the origin-time raster (minutes relative to its reference).

    Parameters
    ----------
    origin_min : array-like of float, minutes
        The raster's values (NaN where no source is possible).
    include : sequence of float, minutes
        Values that must fall inside the closed classes (the best cell's
        origin time), whatever the percentiles.
    max_classes : int
        Most closed classes between the open ends (>= 1).

    Returns
    -------
    list of RasterClass
        Round edges (1, 2 or 5 x 10^k minutes) over the 2nd to 98th
        percentile of the finite values (widened to ``include``); the first
        class is open below, the last (``inf``) open above.

    Raises
    ------
    InputDataError
        No finite value.

    Examples
    --------
    >>> [c.upper for c in origin_time_classes(np.linspace(-37.0, 3.0, 101), max_classes=4)]
    [-40.0, -30.0, -20.0, -10.0, 0.0, 10.0, inf]
    """
    v = np.asarray(origin_min, dtype=np.float64)
    v = v[np.isfinite(v)]
    if v.size == 0:
        raise InputDataError("the origin-time raster has no finite value; no class can be drawn")
    lo, hi = (float(x) for x in np.percentile(v, [2.0, 98.0]))
    extra = [float(x) for x in include if math.isfinite(float(x))]
    lo, hi = min([lo, *extra]), max([hi, *extra])
    if not hi > lo:
        lo, hi = lo - 0.5, hi + 0.5
    step = _nice_step(hi - lo, max(int(max_classes), 1))
    first = math.floor(lo / step) * step
    last = math.ceil(hi / step) * step
    if extra and first >= min(extra):  # a value on the lowest edge would fall in the open class below
        first -= step
    edges = [round(first + k * step, 9) for k in range(int(round((last - first) / step)) + 1)]
    inner = edges
    colors = _cmap_hex(len(inner) + 1, ORIGIN_CMAP)
    classes = [RasterClass(inner[0], colors[0], f"{inner[0]:+g} min or earlier")]
    for k in range(1, len(inner)):
        classes.append(RasterClass(inner[k], colors[k], f"{inner[k - 1]:+g} to {inner[k]:+g} min"))
    classes.append(RasterClass(math.inf, colors[-1], f"later than {inner[-1]:+g} min"))
    return classes


def origin_time_qml(origin_min: Any, *, reference: str, layer_name: str, best_origin_min: float | None = None,
                    nodata: float = -9999.0) -> str:
    """The origin-time raster's QML: :func:`origin_time_classes`, legend in minutes after ``reference``."""
    from ttmap.products.qml import classed_raster_qml

    classes = origin_time_classes(origin_min, include=() if best_origin_min is None else (best_origin_min,))
    labels = [c.label for c in classes]
    labels[0] += f" (minutes after {reference})"
    return classed_raster_qml(
        [c.upper for c in classes], [c.color for c in classes], labels, layer_name=layer_name,
        nodata=nodata if nodata < classes[0].upper else None,
        title=f"Best origin time for a source at each cell, minutes after {reference}",
    )


def region_sld(level_pct: str, *, layer_name: str = "confidence_region") -> str:
    """SLD of the confidence region: :data:`REGION_FILL_HEX` fill, :data:`REGION_STROKE_HEX` outline."""
    from ttmap.products.styles import default_abstract, sld_css, sld_document, sld_element, sld_serialise

    root, fts = sld_document(layer_name, f"{level_pct} confidence region of the source", default_abstract())
    rule = sld_element(fts, "Rule")
    sld_element(rule, "Name", layer_name)
    sld_element(rule, "Title", f"{level_pct} confidence region")
    sym = sld_element(rule, "PolygonSymbolizer")
    fill = sld_element(sym, "Fill")
    sld_css(fill, "fill", REGION_FILL_HEX)
    sld_css(fill, "fill-opacity", f"{REGION_FILL_OPACITY:g}")
    stroke = sld_element(sym, "Stroke")
    sld_css(stroke, "stroke", REGION_STROKE_HEX)
    sld_css(stroke, "stroke-width", f"{REGION_STROKE_WIDTH_PX:g}")
    return sld_serialise(root)


def region_qml(level_pct: str) -> str:
    """QML of the confidence region: the SLD's fill and outline (width in mm at 0.28 mm per pixel)."""
    from ttmap.products.qml import single_fill_qml

    return single_fill_qml(
        title=f"{level_pct} confidence region of the source", fill_hex=REGION_FILL_HEX,
        fill_opacity=REGION_FILL_OPACITY, stroke_hex=REGION_STROKE_HEX,
        stroke_width_mm=REGION_STROKE_WIDTH_PX * SLD_PIXEL_MM,
    )


def gauge_ranges() -> list[tuple[float, float, str]]:
    """Classes of the gauges by ``normalised`` residual (observed - predicted, in pick uncertainties).

    >>> [(lo, hi) for lo, hi, _ in gauge_ranges()][3]
    (-1.0, 1.0)
    """
    inf = math.inf
    return [
        (-inf, -3.0, "observed 3 sigma or more earlier than predicted"),
        (-3.0, -2.0, "2 to 3 sigma earlier"),
        (-2.0, -1.0, "1 to 2 sigma earlier"),
        (-1.0, 1.0, "within 1 sigma of the prediction"),
        (1.0, 2.0, "1 to 2 sigma later"),
        (2.0, 3.0, "2 to 3 sigma later"),
        (3.0, inf, "observed 3 sigma or more later than predicted"),
    ]


def gauges_qml() -> str:
    """QML of the gauge points: :func:`gauge_ranges` in :data:`GAUGE_COLORS`, labelled by name."""
    from ttmap.products.qml import graduated_points_qml

    return graduated_points_qml(
        gauge_ranges(), list(GAUGE_COLORS), attribute="normalised", label_attribute="name",
        title="Gauges: residual at the best cell (observed - predicted), in pick uncertainties",
    )
