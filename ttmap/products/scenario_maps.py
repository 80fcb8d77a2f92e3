"""Scenario comparison pictures and styles: envelope, first scenario (with ties), differences.

Pure products (no solving, no file writing):

- :func:`first_scenario_ties`: which scenario reaches each cell first, with a
  **tie class** where two or more arrive within a stated tolerance of the
  earliest (numerical noise between overlapping sources would otherwise pick
  a "winner" cell by cell and paint stripes);
- :func:`render_envelope_map`, :func:`render_first_scenario_map`,
  :func:`render_difference_map`: the maps (PNG/PDF through
  :func:`ttmap.io.figures.save_figure`);
- :func:`first_scenario_sld`, :func:`difference_sld`: OGC SLD styles with the
  same classes and colours as the maps.

The scenario job (:mod:`ttmap.jobs.scenario`) writes them beside the rasters.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.defaults import ENVELOPE_TIE_TOLERANCE_MIN
from ttmap.errors import InputDataError

if TYPE_CHECKING:
    from affine import Affine
    from matplotlib.figure import Figure

    from ttmap.products.isochrones import IsochroneLine
    from ttmap.products.maps import ColourClasses

__all__ = [
    "FirstScenario",
    "TIE_COLOR",
    "difference_classes",
    "difference_sld",
    "first_scenario_colors",
    "first_scenario_classes",
    "first_scenario_sld",
    "TIE_CLASSES",
    "tie_raster_sld",
    "first_scenario_ties",
    "render_difference_map",
    "render_envelope_map",
    "render_first_scenario_map",
    "tie_label",
]

#: Colour of the tie class: a neutral grey, outside the scenario colours.
TIE_COLOR: str = "#9e9e9e"
_NO_SCENARIO = -1


@dataclass(frozen=True)
class FirstScenario:
    """The scenario first at each cell, ties as classes of their own.

    Attributes
    ----------
    codes : ndarray of shape (rows, cols), int16
        ``i`` (0..n-1) where scenario ``i`` alone arrives within the tolerance
        of the earliest; ``n + k`` where the scenarios of ``tie_sets[k]`` all
        do; -1 where no scenario arrives.
    tie_sets : list of tuple of int
        Scenario indices of each tie class, most cells first.
    cells_first : list of int
        Cells where each scenario alone arrives first.
    tie_cells : list of int
        Cells of each tie class.
    tolerance_min : float
        The tolerance, minutes.
    """

    codes: NDArray[np.int16]
    tie_sets: list[tuple[int, ...]]
    cells_first: list[int]
    tie_cells: list[int]
    tolerance_min: float


def tie_label(tolerance_min: float) -> str:
    """Name of the tie class in legends and styles.

    >>> tie_label(0.5)
    'tie (within 0.5 min)'
    """
    return f"tie (within {tolerance_min:g} min)"


def first_scenario_ties(
    earliest_min: ArrayLike,
    times_min: Iterable[ArrayLike],
    *,
    n_scenarios: int,
    tolerance_min: float = ENVELOPE_TIE_TOLERANCE_MIN,
) -> FirstScenario:
    """Which scenarios arrive within ``tolerance_min`` of the earliest, cell by cell.

    Parameters
    ----------
    earliest_min : ndarray of shape (rows, cols), float, minutes
        The envelope (:func:`ttmap.products.compare.envelope`); NaN where none
        arrives.
    times_min : iterable of ndarray of shape (rows, cols), float, minutes
        The scenarios' fields again, in the envelope's order, read one at a
        time; NaN where a scenario has no arrival.
    n_scenarios : int
        How many fields ``times_min`` yields (checked).
    tolerance_min : float
        Scenarios within this many minutes of the earliest share the cell;
        0 keeps only exact ties.

    Returns
    -------
    FirstScenario

    Raises
    ------
    InputDataError
        A negative tolerance, shapes that differ, a count that differs from
        ``n_scenarios``, or more classes than an int16 raster holds.

    Examples
    --------
    >>> nan = float("nan")
    >>> a = [[10.0, 20.0, nan]]
    >>> b = [[10.3, 25.0, nan]]
    >>> env = [[10.0, 20.0, nan]]
    >>> r = first_scenario_ties(env, [a, b], n_scenarios=2, tolerance_min=0.5)
    >>> r.codes.tolist(), r.tie_sets, r.cells_first, r.tie_cells
    ([[2, 0, -1]], [(0, 1)], [1, 0], [1])
    """
    if not (tolerance_min >= 0.0):
        raise InputDataError(f"tie tolerance {tolerance_min!r} min must be >= 0")
    env = np.asarray(earliest_min, dtype=np.float64)
    if env.ndim != 2:
        raise InputDataError(f"earliest_min must be 2-D, got shape {env.shape}")
    n = int(n_scenarios)
    words = max(1, (n + 63) // 64)
    member = np.zeros((words, *env.shape), dtype=np.uint64)
    count = np.zeros(env.shape, dtype=np.int32)
    sole = np.full(env.shape, _NO_SCENARIO, dtype=np.int32)
    seen = 0
    limit = env + float(tolerance_min)
    for i, field in enumerate(times_min):
        t = np.asarray(field, dtype=np.float64)
        if t.shape != env.shape:
            raise InputDataError(
                f"scenario {i} has shape {t.shape} but the envelope has {env.shape}; give one grid"
            )
        if i >= n:
            raise InputDataError(f"more than n_scenarios={n} fields were given")
        with np.errstate(invalid="ignore"):
            within = np.isfinite(t) & (t <= limit)
        member[i // 64][within] |= np.uint64(1) << np.uint64(i % 64)
        count += within
        sole[within] = i
        seen += 1
    if seen != n:
        raise InputDataError(f"{seen} fields were given but n_scenarios is {n}")
    codes = np.where(count == 1, sole, _NO_SCENARIO).astype(np.int32)
    tied = count >= 2
    tie_sets: list[tuple[int, ...]] = []
    tie_cells: list[int] = []
    if tied.any():
        keys = np.stack([member[w][tied] for w in range(words)], axis=1)
        uniq, inverse, counts = np.unique(keys, axis=0, return_inverse=True, return_counts=True)
        order = np.argsort(-counts, kind="stable")
        rank = np.empty_like(order)
        rank[order] = np.arange(len(order))
        if n + len(uniq) > int(np.iinfo(np.int16).max):
            raise InputDataError(
                f"{n} scenarios and {len(uniq)} tie classes do not fit an int16 raster; "
                "compare fewer scenarios at a time"
            )
        codes[tied] = n + rank[np.ravel(inverse)]
        for k in order:
            members = tuple(
                i for i in range(n) if int(uniq[k][i // 64]) >> (i % 64) & 1
            )
            tie_sets.append(members)
            tie_cells.append(int(counts[k]))
    cells_first = np.bincount(codes[(codes >= 0) & (codes < n)].ravel(), minlength=n)
    return FirstScenario(
        codes.astype(np.int16),
        tie_sets,
        [int(c) for c in cells_first[:n]],
        tie_cells,
        float(tolerance_min),
    )


def first_scenario_colors(n: int) -> list[str]:
    """One colour per scenario, never grey (grey is the tie class).

    tab10 without its grey up to 9 scenarios, tab20 without its greys up to
    18, then a sampled rainbow ramp.

    >>> TIE_COLOR in first_scenario_colors(18) or "#7f7f7f" in first_scenario_colors(9)
    False
    """
    from ttmap.products.palette import arrival_colors_hex

    if n <= 0:
        return []
    if n <= 9:
        tab10 = arrival_colors_hex(10, "tab10")
        return [c for k, c in enumerate(tab10) if k != 7][:n]
    if n <= 18:
        tab20 = arrival_colors_hex(20, "tab20")
        return [c for k, c in enumerate(tab20) if k not in (14, 15)][:n]
    return arrival_colors_hex(n, "turbo")


def _tie_codes_shown(codes: NDArray[Any], n: int) -> NDArray[np.float64]:
    """Codes as drawn: scenario index, every tie class as ``n``, NaN where none."""
    shown = np.asarray(codes, dtype=np.float64)
    shown = np.where(shown >= n, float(n), shown)
    return np.where(shown < 0, np.nan, shown)


def render_first_scenario_map(
    first: FirstScenario,
    transform: Affine,
    names: Sequence[str],
    *,
    land_mask: ArrayLike | None,
    is_geographic: bool,
    title: str = "Scenario that arrives first",
    subtitle: str = "",
) -> Figure:
    """Map of the first-arriving scenario, one colour per scenario and one grey tie class."""
    from ttmap.products.maps import ColourClasses, render_class_map

    n = len(names)
    has_ties = bool(first.tie_sets)
    colors = first_scenario_colors(n) + ([TIE_COLOR] if has_ties else [])
    k = n + (1 if has_ties else 0)
    classes = ColourClasses(
        edges=tuple(float(v) - 0.5 for v in range(k + 1)),
        colors=tuple(colors),
        label="Scenario that arrives first",
        ticks=tuple(float(v) for v in range(k)),
        tick_labels=tuple([*names, tie_label(first.tolerance_min)] if has_ties else names),
    )
    return render_class_map(
        _tie_codes_shown(first.codes, n),
        transform,
        classes=classes,
        land_mask=land_mask,
        title=title,
        subtitle=subtitle
        or (
            f"{n} scenarios  |  grey: two or more arrive within {first.tolerance_min:.2g} min "
            "of each other (see envelope_first_scenario.csv)"
            if first.tie_sets else
            f"{n} scenarios  |  one solve from all their sources; near-ties are marked "
            "in envelope_first_scenario_tie.tif"
        ),
        is_geographic=is_geographic,
        nodata_legend="No scenario arrives",
    )


def render_envelope_map(
    earliest_min: ArrayLike,
    transform: Affine,
    *,
    names: Sequence[str],
    land_mask: ArrayLike | None,
    lines: Sequence[IsochroneLine],
    is_geographic: bool,
    source_kind: str | None = None,
) -> Figure:
    """Map of the earliest front arrival over the scenarios, in the arrival classes."""
    from ttmap.products.cautions import minutes_after
    from ttmap.products.maps import render_arrival_map

    shown = ", ".join(names[:6]) + (f" and {len(names) - 6} more" if len(names) > 6 else "")
    return render_arrival_map(
        earliest_min,
        transform,
        land_mask=land_mask,
        lines=lines,
        title=f"Earliest arrival over {len(names)} scenarios",
        subtitle=f"Front (long-wave speed)  |  scenarios: {shown}",
        is_geographic=is_geographic,
        source_kind=source_kind,
        colorbar_label=f"Earliest arrival ({minutes_after(source_kind)})",
    )


def difference_classes(diff_min: ArrayLike, a: str, b: str) -> ColourClasses:
    """Classes of a difference raster: symmetric around zero, a round step."""
    from ttmap.products.maps import diverging_classes

    d = np.asarray(diff_min, dtype=np.float64)
    finite = d[np.isfinite(d)]
    reach = float(np.max(np.abs(finite))) if finite.size else 10.0
    reach = max(reach, 1.0)
    return diverging_classes(
        -reach, reach, label=f"{a} minus {b}, minutes (below 0: {a} arrives first)"
    )


def render_difference_map(
    diff_min: ArrayLike,
    transform: Affine,
    a: str,
    b: str,
    *,
    land_mask: ArrayLike | None,
    is_geographic: bool,
) -> Figure:
    """Map of arrival of ``a`` minus arrival of ``b``: a diverging ramp centred on zero."""
    from ttmap.products.maps import render_class_map

    classes = difference_classes(diff_min, a, b)
    return render_class_map(
        diff_min,
        transform,
        classes=classes,
        land_mask=land_mask,
        title=f"Arrival of {a} minus arrival of {b}",
        subtitle=f"Red: {a} arrives first  |  blue: {b} arrives first  |  front (long-wave speed)",
        is_geographic=is_geographic,
        nodata_legend="No arrival in one of them",
    )


def first_scenario_classes(
    first: FirstScenario, names: Sequence[str],
) -> tuple[list[int], list[str], list[str], str]:
    """Codes, colours, labels and title of ``envelope_first_scenario.tif``'s classes:
    the map's colours, every tie class grey and named. One scheme for the map,
    the SLD and the QGIS style."""
    n = len(names)
    colors = first_scenario_colors(n)
    codes = list(range(n))
    labels = list(names)
    for k, members in enumerate(first.tie_sets):
        codes.append(n + k)
        colors.append(TIE_COLOR)
        labels.append(f"{tie_label(first.tolerance_min)}: {';'.join(names[i] for i in members)}")
    title = ("Scenario that arrives first "
             f"(grey: a {tie_label(first.tolerance_min)} of two or more)")
    return codes, colors, labels, title


#: Classes of ``envelope_first_scenario_tie.tif``: (value, label, colour), one scheme for
#: its SLD and its QGIS style (grey: one scenario first; orange: a near-tie).
TIE_CLASSES: tuple[tuple[int, str, str], ...] = (
    (0, "one scenario arrives first", "#d9d9d9"),
    (1, "near-tie: no single first scenario", "#e6550d"),
)


def tie_raster_sld() -> str:
    """OGC SLD of an envelope's near-tie raster (:data:`TIE_CLASSES`, 255 transparent)."""
    from ttmap.products.styles import categorical_raster_sld

    return categorical_raster_sld(
        [v for v, _, _ in TIE_CLASSES], [c for _, _, c in TIE_CLASSES], [lab for _, lab, _ in TIE_CLASSES],
        layer_name="envelope_first_scenario_tie", title="Near-ties of the first scenario", nodata=255,
    )


def first_scenario_sld(first: FirstScenario, names: Sequence[str]) -> str:
    """Style of ``envelope_first_scenario.tif`` (:func:`first_scenario_classes`)."""
    from ttmap.products.styles import categorical_raster_sld

    codes, colors, labels, title = first_scenario_classes(first, names)
    return categorical_raster_sld(
        codes, colors, labels, layer_name="envelope_first_scenario", title=title, nodata=_NO_SCENARIO,
    )


def difference_sld(diff_min: ArrayLike, a: str, b: str, layer_name: str) -> str:
    """Style of a difference raster with the map's classes (red: ``a`` first, blue: ``b`` first)."""
    from ttmap.products.styles import class_raster_sld

    classes = difference_classes(diff_min, a, b)
    return class_raster_sld(
        classes.edges,
        classes.colors,
        layer_name=layer_name,
        title=f"Arrival of {a} minus arrival of {b}, minutes (below 0: {a} arrives first)",
        nodata=-9999.0 if classes.edges[0] > -9999.0 else classes.edges[0] - 1.0,
    )
