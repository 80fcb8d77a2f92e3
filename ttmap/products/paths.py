"""The wave-path layer: the first wave's route to each site, with the time along it.

A route (traced by :func:`ttmap.paths.trace_wave_paths`, joined across nested
grids by the map job) is a line from the source end to the site with the
arrival time at every vertex. :func:`wave_path_layer` cuts each route at
whole multiples of ``step_min`` minutes (the cut points interpolated linearly
in time along each piece) into line features with

- ``name``: the site (or requested point);
- ``arrival_min``: the first arrival at the site's end of the route;
- ``minutes_start``, ``minutes_end``: the arrival time at the two ends of the
  feature (so a style can colour or label the route by time);
- ``grid``: the grid the piece was traced on (``basin`` or a nest's name);
- ``end``: why the route stops at its source end (``source``: at the source;
  ``no-time``: at land or unreached water; ``steps``: the step limit).

:func:`wave_paths_sld` styles the layer as a thin dark line with a small
arrowhead at the site end of each piece (the direction the wave travels).
Pure: geometries and columns in, a :class:`ttmap.io.vector.VectorLayer` out.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely

from ttmap._typing import FloatArray
from ttmap.errors import InputDataError
from ttmap.io.vector import VectorLayer
from ttmap.products.cautions import CAUTION_SHORT

__all__ = [
    "WAVE_PATH_LAYER",
    "WAVE_PATH_STEP_MIN",
    "RoutePath",
    "split_by_minutes",
    "wave_path_layer",
    "wave_paths_sld",
]

#: Layer name of the wave paths.
WAVE_PATH_LAYER: str = "wave_paths"
#: Default length in time of one feature of the layer, minutes.
WAVE_PATH_STEP_MIN: float = 1.0


@dataclass(frozen=True)
class RoutePath:
    """One route from the source end to a site, in one CRS.

    Attributes
    ----------
    name : str
        The site (or point) the route leads to.
    xy : ndarray of shape (vertices, 2), float64
        Map coordinates, source end first.
    time_min : ndarray of shape (vertices,), float64, minutes
        Arrival time at each vertex, increasing towards the site.
    grids : tuple of str
        The grid each vertex was traced on ("basin" or a nest's name).
    end : str
        Why the route stops at its source end ("source", "no-time", "steps").
    """

    name: str
    xy: FloatArray = field(repr=False)
    time_min: FloatArray = field(repr=False)
    grids: tuple[str, ...] = field(repr=False)
    end: str = "source"

    def __post_init__(self) -> None:
        xy = np.asarray(self.xy, dtype=np.float64).reshape(-1, 2)
        t = np.asarray(self.time_min, dtype=np.float64).reshape(-1)
        if xy.shape[0] != t.size or len(self.grids) != t.size:
            raise InputDataError(
                f"route {self.name!r}: {xy.shape[0]} vertices, {t.size} times and "
                f"{len(self.grids)} grid labels; give one of each per vertex"
            )
        object.__setattr__(self, "xy", xy)
        object.__setattr__(self, "time_min", t)

    @property
    def arrival_min(self) -> float:
        """Arrival time at the site end, minutes (NaN for an empty route)."""
        return float(self.time_min[-1]) if self.time_min.size else math.nan


def split_by_minutes(
    xy: FloatArray, time_min: FloatArray, step_min: float
) -> list[tuple[FloatArray, float, float, int]]:
    """Cut a polyline at whole multiples of ``step_min`` of its vertex times.

    Parameters
    ----------
    xy : ndarray of shape (n, 2)
    time_min : ndarray of shape (n,), non-decreasing
    step_min : float, > 0

    Returns
    -------
    list of (coords, minutes_start, minutes_end, first_vertex)
        Pieces in order; each piece's coordinates start where the last one
        ended; ``first_vertex`` is the index of the input vertex the piece
        starts on or after.

    Examples
    --------
    >>> xy = np.array([[0.0, 0.0], [10.0, 0.0]])
    >>> [(c[:, 0].tolist(), a, b) for c, a, b, _ in split_by_minutes(xy, np.array([0.5, 2.5]), 1.0)]
    [([0.0, 2.5], 0.5, 1.0), ([2.5, 7.5], 1.0, 2.0), ([7.5, 10.0], 2.0, 2.5)]
    """
    if not (math.isfinite(step_min) and step_min > 0.0):
        raise InputDataError(f"wave-path step {step_min!r} min must be a positive number")
    xy = np.asarray(xy, dtype=np.float64)
    t = np.asarray(time_min, dtype=np.float64)
    if t.size < 2:
        return []
    pieces: list[tuple[FloatArray, float, float, int]] = []
    cur: list[FloatArray] = [xy[0]]
    t_start = float(t[0])
    first = 0
    for i in range(t.size - 1):
        a, b = float(t[i]), float(t[i + 1])
        if b > a:
            k0 = math.floor(a / step_min) + 1
            k1 = math.ceil(b / step_min) - 1
            for k in range(k0, k1 + 1):
                level = k * step_min
                w = (level - a) / (b - a)
                p = xy[i] + w * (xy[i + 1] - xy[i])
                cur.append(p)
                pieces.append((np.array(cur), t_start, level, first))
                cur, t_start, first = [p], level, i
        cur.append(xy[i + 1])
    if len(cur) >= 2 and float(t[-1]) > t_start:
        pieces.append((np.array(cur), t_start, float(t[-1]), first))
    return pieces


def wave_path_layer(
    routes: Sequence[RoutePath], *, step_min: float = WAVE_PATH_STEP_MIN, name: str = WAVE_PATH_LAYER
) -> VectorLayer:
    """The line layer of the wave paths, cut every ``step_min`` minutes.

    Parameters
    ----------
    routes : sequence of RoutePath
        Routes in one CRS (the layer's).
    step_min : float
        Length in time of each feature (default 1 minute).
    name : str
        Layer name.

    Returns
    -------
    VectorLayer
        LineString features with the columns of the module notes.
    """
    geoms: list[Any] = []
    cols: dict[str, list[Any]] = {k: [] for k in ("name", "arrival_min", "minutes_start", "minutes_end",
                                                  "grid", "end")}
    for r in routes:
        for coords, t0, t1, first in split_by_minutes(r.xy, r.time_min, step_min):
            geoms.append(shapely.LineString(coords))
            cols["name"].append(r.name)
            cols["arrival_min"].append(round(r.arrival_min, 3))
            cols["minutes_start"].append(round(t0, 3))
            cols["minutes_end"].append(round(t1, 3))
            cols["grid"].append(r.grids[min(first + 1, len(r.grids) - 1)])
            cols["end"].append(r.end)
    attributes: dict[str, Any] = {
        "name": cols["name"],
        "arrival_min": np.asarray(cols["arrival_min"], dtype=np.float64),
        "minutes_start": np.asarray(cols["minutes_start"], dtype=np.float64),
        "minutes_end": np.asarray(cols["minutes_end"], dtype=np.float64),
        "grid": cols["grid"],
        "end": cols["end"],
    }
    return VectorLayer(
        name, geoms, attributes, "LineString",
        description=("Route of the first wave from the source to each site (steepest descent on the "
                     f"arrival field), cut every {step_min:g} min; times in minutes from the origin time of the source. {CAUTION_SHORT}"),
    )


def wave_paths_sld(*, layer_name: str = WAVE_PATH_LAYER, title: str = "Wave paths") -> str:
    """An OGC SLD 1.0 style: thin dark line, a small arrowhead at the site end of each piece.

    Examples
    --------
    >>> import xml.etree.ElementTree as ET
    >>> ET.fromstring(wave_paths_sld()).tag.endswith("StyledLayerDescriptor")
    True
    """
    from xml.sax.saxutils import escape

    return f"""<?xml version="1.0" encoding="UTF-8"?>
<StyledLayerDescriptor version="1.0.0" xmlns="http://www.opengis.net/sld"
  xmlns:ogc="http://www.opengis.net/ogc" xmlns:xlink="http://www.w3.org/1999/xlink"
  xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance"
  xsi:schemaLocation="http://www.opengis.net/sld http://schemas.opengis.net/sld/1.0.0/StyledLayerDescriptor.xsd">
  <NamedLayer>
    <Name>{escape(layer_name)}</Name>
    <UserStyle>
      <Title>{escape(title)}</Title>
      <Abstract>{escape(CAUTION_SHORT)}</Abstract>
      <FeatureTypeStyle>
        <Rule>
          <Name>wave path</Name>
          <Title>First wave's route (arrow: direction of travel)</Title>
          <LineSymbolizer>
            <Stroke>
              <CssParameter name="stroke">#1a1a1a</CssParameter>
              <CssParameter name="stroke-width">0.8</CssParameter>
            </Stroke>
          </LineSymbolizer>
          <PointSymbolizer>
            <Geometry><ogc:Function name="endPoint"><ogc:PropertyName>geom</ogc:PropertyName></ogc:Function></Geometry>
            <Graphic>
              <Mark>
                <WellKnownName>triangle</WellKnownName>
                <Fill><CssParameter name="fill">#1a1a1a</CssParameter></Fill>
              </Mark>
              <Size>4</Size>
            </Graphic>
          </PointSymbolizer>
        </Rule>
      </FeatureTypeStyle>
    </UserStyle>
  </NamedLayer>
</StyledLayerDescriptor>
"""
