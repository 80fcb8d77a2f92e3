"""Comparing scenarios: the earliest-arrival envelope, the difference of two, sites by scenarios.

Pure functions on arrays of arrival minutes (NaN where the wave never
arrives, or on land); reading and writing the files is
:mod:`ttmap.io.compare`, and running it all is :mod:`ttmap.jobs.scenario`.

- :func:`envelope` - cell by cell, the earliest arrival over many scenarios
  and the index of the scenario that gives it. It consumes its input one
  array at a time, so a generator reading rasters from disk keeps memory at
  about two grids however many scenarios there are.
- :func:`difference` - ``a - b`` in minutes: **positive where b arrives
  earlier** (a later) by that many minutes, negative where a arrives earlier.

A difference is NaN (nodata) wherever either scenario has no arrival. The
envelope is NaN only where no scenario arrives.

Sites across scenarios:

- :func:`sites_by_scenarios` - each site is snapped once, to the nearest
  reached water cell of the envelope (earliest arrival over all scenarios),
  and read there in every scenario: front and energy arrivals, and the time
  budget of :mod:`ttmap.products.budget` counted from that scenario's front
  (no speed-uncertainty band). One row per site and scenario.
- :func:`earliest_by_site` - the scenario giving each site's earliest front.
- :func:`render_sites_by_scenarios` - the chart (a dot per scenario at its
  front arrival, one row per site), as a figure.
- :func:`sites_by_scenarios_notes` - the notes written above the table.

Margins are planning figures, not promises.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.defaults import LITTLE_MARGIN_MIN, NOTIFICATION_DELAY_MIN, PREPARATION_MIN, WALKING_SPEED_M_S
from ttmap.errors import InputDataError

if TYPE_CHECKING:
    from ttmap.grid import Grid

__all__ = [
    "envelope",
    "difference",
    "check_scenario_names",
    "comparison_tags",
    "sites_by_scenarios",
    "sites_by_scenarios_from_values",
    "sites_by_scenarios_on_grids",
    "sites_by_scenarios_notes",
    "earliest_by_site",
    "render_sites_by_scenarios",
    "FieldLike",
    "MAX_SCENARIOS",
    "NO_SCENARIO",
]

#: Most scenarios an envelope can index (int16).
MAX_SCENARIOS: int = int(np.iinfo(np.int16).max)
#: First-scenario index where no scenario arrives.
NO_SCENARIO: int = -1

_NAME_RE = re.compile(r"^[A-Za-z0-9_.-]+$")


# ---------------------------------------------------------------------------
# Pure functions
# ---------------------------------------------------------------------------


def _as_minutes(value: ArrayLike, what: str) -> NDArray[np.floating[Any]]:
    a = np.asarray(value)
    if a.ndim != 2:
        raise InputDataError(f"{what} must be a 2-D array of minutes, got shape {a.shape}")
    if not np.issubdtype(a.dtype, np.floating):
        if np.issubdtype(a.dtype, np.integer):
            a = a.astype(np.float64)
        else:
            raise InputDataError(f"{what} has dtype {a.dtype}; pass minutes as floats")
    return a


def envelope(
    times_min: Iterable[ArrayLike],
) -> tuple[NDArray[np.float64], NDArray[np.int16]]:
    """Earliest arrival over scenarios, and which scenario gives it.

    Parameters
    ----------
    times_min : iterable of ndarray of shape (rows, cols), float, minutes
        One arrival-time field per scenario; NaN (or infinite) where it has
        no arrival. Consumed one at a time (a list, or a generator reading
        rasters one by one); inputs are not modified.

    Returns
    -------
    earliest_min : ndarray of shape (rows, cols), float64, minutes
        Cell-wise minimum over the scenarios with an arrival there; NaN where
        none has.
    first_index : ndarray of shape (rows, cols), int16
        Index (in input order) of the scenario whose time is
        ``earliest_min``; on ties the lowest index; :data:`NO_SCENARIO` (-1)
        where none arrives.

    Raises
    ------
    InputDataError
        No fields, a field that is not 2-D floats, shapes that differ, or
        more than :data:`MAX_SCENARIOS` fields.

    Examples
    --------
    >>> nan = float("nan")
    >>> t, i = envelope([[[10.0, nan], [5.0, nan]], [[7.0, 3.0], [5.0, nan]]])
    >>> t.tolist()[0], i.tolist()
    ([7.0, 3.0], [[1, 1], [0, -1]])
    """
    best: NDArray[np.float64] | None = None
    first: NDArray[np.int16] | None = None
    for i, field in enumerate(times_min):
        if i >= MAX_SCENARIOS:
            raise InputDataError(
                f"an envelope indexes at most {MAX_SCENARIOS} scenarios; split them into groups"
            )
        t = _as_minutes(field, f"scenario {i}")
        if best is None or first is None:
            best = np.full(t.shape, np.nan)
            first = np.full(t.shape, NO_SCENARIO, dtype=np.int16)
        elif t.shape != best.shape:
            raise InputDataError(
                f"scenario {i} has shape {t.shape} but scenario 0 has {best.shape}; "
                "give fields of one grid"
            )
        # Earlier than the best so far, or the first arrival at a cell (best NaN).
        with np.errstate(invalid="ignore"):
            better = np.isfinite(t) & ~(best <= t)
        best[better] = t[better]
        first[better] = i
    if best is None or first is None:
        raise InputDataError("no arrival-time fields were given; pass at least one")
    return best, first


def difference(a_min: ArrayLike, b_min: ArrayLike) -> NDArray[np.float64]:
    """Arrival of ``a`` minus arrival of ``b``, in minutes.

    Parameters
    ----------
    a_min, b_min : ndarray of shape (rows, cols), float, minutes
        NaN (or infinite) where the scenario has no arrival.

    Returns
    -------
    ndarray of shape (rows, cols), float64, minutes
        ``a - b``: positive where ``b`` arrives earlier (``a`` later),
        negative where ``a`` arrives earlier; NaN where either has no arrival.

    Raises
    ------
    InputDataError
        Not 2-D floats, or shapes differ.

    Examples
    --------
    >>> difference([[30.0, 10.0, float("nan")]], [[20.0, 25.0, 5.0]]).tolist()
    [[10.0, -15.0, nan]]
    """
    a = _as_minutes(a_min, "a_min").astype(np.float64)
    b = _as_minutes(b_min, "b_min").astype(np.float64)
    if a.shape != b.shape:
        raise InputDataError(f"a_min has shape {a.shape} but b_min has {b.shape}; give one grid")
    out = a - b
    out[~(np.isfinite(a) & np.isfinite(b))] = np.nan
    return out


# ---------------------------------------------------------------------------
# Names and tags of the comparison files
# ---------------------------------------------------------------------------


def check_scenario_names(names: Sequence[str], what: str = "scenario") -> list[str]:
    """The names as text, refused when not file-safe or repeated (they name output files).

    >>> check_scenario_names(["north", "south-2"])
    ['north', 'south-2']
    """
    out = [str(n) for n in names]
    for n in out:
        if not _NAME_RE.match(n):
            raise InputDataError(
                f"{what} name {n!r} is not file-safe; use letters, digits, '_', '-' and '.' only"
            )
    dup = sorted({n for n in out if out.count(n) > 1})
    if dup:
        raise InputDataError(f"{what} names repeat ({', '.join(dup)}); give each one once")
    return out


def comparison_tags(quantity: str) -> dict[str, str]:
    """Dataset tags of a comparison raster: what it holds, the software and the caution."""
    import ttmap
    from ttmap.products.cautions import CAUTION_SHORT

    return {"QUANTITY": quantity, "SOFTWARE": f"ttmap {ttmap.__version__}", "CAUTION": CAUTION_SHORT}


# ---------------------------------------------------------------------------
# Sites across scenarios
# ---------------------------------------------------------------------------

#: A field of arrival minutes: a 2-D array (NaN where no arrival), or a callable
#: without arguments returning one (so that a caller can read fields one at a time).
FieldLike = Any


def _load_field(value: FieldLike, grid: Grid, what: str) -> NDArray[np.float64]:
    """Minutes of one field (array, or a callable returning one), checked against ``grid``."""
    values = _as_minutes(value() if callable(value) else value, what).astype(np.float64)
    values[~np.isfinite(values)] = np.nan
    if tuple(values.shape) != tuple(grid.shape):
        raise InputDataError(
            f"{what} has shape {values.shape} but the grid is {tuple(grid.shape)}; give fields of one grid"
        )
    return values


def _budget_defaults(
    notification_delay_min: float | None,
    preparation_min: float | None,
    walking_speed_m_s: float | None,
) -> dict[str, float]:
    """The budget values for sites that give none: those passed, else the project defaults."""
    given = {
        "notification_delay_min": (notification_delay_min, NOTIFICATION_DELAY_MIN),
        "preparation_min": (preparation_min, PREPARATION_MIN),
        "walking_speed_m_s": (walking_speed_m_s, WALKING_SPEED_M_S),
    }
    return {k: float(default if v is None else v) for k, (v, default) in given.items()}


def sites_by_scenarios(
    sites: Any,
    grid: Grid,
    front_fields: Mapping[str, FieldLike],
    energy_fields: Mapping[tuple[str, float], FieldLike] | None = None,
    *,
    search_radius_m: float | None = None,
    notification_delay_min: float | None = None,
    preparation_min: float | None = None,
    walking_speed_m_s: float | None = None,
    little_margin_min: float | None = None,
    speed_uncertainty: float | None = None,
    origin_time_utc: Any = None,
    depth_m: Any = None,
    water: Any = None,
    open_water: Any = None,
) -> dict[str, list[Any]]:
    """Arrival times and time budget of every site in every scenario.

    Each scenario's rows come from the one site evaluation
    (:func:`ttmap.products.site_eval.evaluate_sites`), so a site's row in a
    one-scenario run equals its row in the map job's site table.

    Parameters
    ----------
    sites : SiteList
        From :func:`ttmap.io.sites.read_sites`.
    grid : Grid
        The grid of the fields.
    front_fields : mapping of scenario name to FieldLike
        Front arrival of each scenario, minutes (a 2-D array with NaN where
        it has no arrival, or a callable returning one), all on ``grid``.
        Used twice, one at a time: once for the envelope, once for the values.
    energy_fields : mapping of (scenario, period_s) to FieldLike, optional
        Energy arrivals, minutes; periods missing for a scenario give blanks.
    search_radius_m : float, optional
        Snapping radius, ground metres (default
        :data:`ttmap.defaults.SITE_SEARCH_RADIUS_M`).
    notification_delay_min, preparation_min, walking_speed_m_s : float, optional
        Budget defaults where a site gives none.
    little_margin_min : float, optional
        Little-margin threshold (default :data:`ttmap.defaults.LITTLE_MARGIN_MIN`).
    speed_uncertainty : float, optional
        Stated +/- fraction of wave speed behind ``earliest_min`` and
        ``latest_min`` (default :data:`ttmap.defaults.SPEED_UNCERTAINTY`).
    origin_time_utc : datetime, optional
        Adds UTC clock columns.
    depth_m, water, open_water : ndarray of shape grid.shape, optional
        The medium's depths and water masks (:class:`ttmap.traveltime.Medium`),
        for the ``depth_m`` column and the precise snapping status words.

    Returns
    -------
    dict of str to list
        Ordered columns, one row per site and scenario (sites in file order,
        scenarios in mapping order): ``name, scenario``, then the columns of
        :func:`~ttmap.products.site_eval.evaluate_sites` after ``name``
        (``minutes_left`` counts from ``earliest_min``), then
        ``earliest_for_site``. Each site is read at one cell for every
        scenario: the nearest reached water cell of the earliest-arrival
        envelope. ``earliest_for_site`` is True for the scenario(s) whose
        front reaches the site first (all of them on a tie).

    Raises
    ------
    InputDataError
        No fronts, bad names, fields on different grids, an energy key of an
        unknown scenario, bad budget values.
    """
    from ttmap.defaults import SITE_SEARCH_RADIUS_M, SPEED_UNCERTAINTY
    from ttmap.io.sites import SiteList
    from ttmap.products.site_eval import evaluate_sites, site_values, snap_sites

    if not isinstance(sites, SiteList):
        raise InputDataError(
            f"sites must be a SiteList (see read_sites), got {type(sites).__name__}"
        )
    names = check_scenario_names(list(front_fields), "scenario")
    if not names:
        raise InputDataError("no front arrival fields were given; pass at least one scenario")
    energy = dict(energy_fields or {})
    periods: list[float] = []
    for key in energy:
        if not (isinstance(key, tuple) and len(key) == 2):
            raise InputDataError(f"energy key {key!r} must be (scenario, period_s)")
        sc, t = key
        if sc not in front_fields:
            raise InputDataError(
                f"energy field for scenario {sc!r} has no front; give the front of every scenario"
            )
        t = float(t)
        if not (math.isfinite(t) and t > 0.0):
            raise InputDataError(f"wave period {key[1]!r} s must be a positive number of seconds")
        if t not in periods:
            periods.append(t)
    periods.sort()
    energy_by = {(str(sc), float(t)): v for (sc, t), v in energy.items()}
    options: dict[str, Any] = {
        **_budget_defaults(notification_delay_min, preparation_min, walking_speed_m_s),
        "little_margin_min": LITTLE_MARGIN_MIN if little_margin_min is None else float(little_margin_min),
        "speed_uncertainty": SPEED_UNCERTAINTY if speed_uncertainty is None else float(speed_uncertainty),
        "origin_time_utc": origin_time_utc,
    }
    # Checks every option once, with a clear message, before any field is read.
    n_sites = len(sites)
    evaluate_sites(sites, _nowhere(sites), [math.nan] * n_sites, **options)

    # 1. Envelope, one field at a time.
    g = grid
    earliest, _ = envelope(_load_field(front_fields[n], g, f"front of {n}") for n in names)
    radius = SITE_SEARCH_RADIUS_M if search_radius_m is None else float(search_radius_m)
    snapped = snap_sites(sites, g, np.isfinite(earliest), search_radius_m=radius,
                         depth_m=depth_m, water=water, open_water=open_water)
    del earliest

    # 2. Values at the snapped cells, one field at a time.
    def _values(field: FieldLike, what: str) -> NDArray[np.floating[Any]]:
        return site_values(_load_field(field, g, what), snapped)

    front_at = {n: _values(front_fields[n], f"front of {n}") for n in names}
    energy_at: dict[tuple[str, float], NDArray[np.floating[Any]]] = {}
    for (sc, t), fld in energy_by.items():
        energy_at[(sc, t)] = _values(fld, f"energy of {sc}, T = {t:g} s")
    return sites_by_scenarios_from_values(sites, snapped, front_at, energy_at, **options)


def sites_by_scenarios_from_values(
    sites: Any,
    snapped: Sequence[Any],
    front_at: Mapping[str, ArrayLike],
    energy_at: Mapping[tuple[str, float], ArrayLike] | None = None,
    *,
    notification_delay_min: float | None = None,
    preparation_min: float | None = None,
    walking_speed_m_s: float | None = None,
    little_margin_min: float | None = None,
    speed_uncertainty: float | None = None,
    origin_time_utc: Any = None,
) -> dict[str, list[Any]]:
    """The rows of :func:`sites_by_scenarios` from values already read at the sites.

    Every scenario's rows come from the one site evaluation
    (:func:`ttmap.products.site_eval.evaluate_sites`), whichever way the
    values were obtained: read from rasters at the snapped cells (direct
    path) or reduced from site-centred solves (:mod:`ttmap.reciprocal`).

    Parameters
    ----------
    sites : SiteList
    snapped : sequence of SnappedSite
        One per site (:func:`ttmap.products.site_eval.snap_sites`), in site order.
    front_at : mapping of scenario name to array of shape (n_sites,), minutes
        Front arrival of each scenario at each site (NaN: no arrival).
    energy_at : mapping of (scenario, period_s) to array of shape (n_sites,), optional
        Energy arrivals, minutes, in site order.
    notification_delay_min, preparation_min, walking_speed_m_s, little_margin_min,
    speed_uncertainty, origin_time_utc
        As for :func:`sites_by_scenarios`.

    Returns
    -------
    dict of str to list
        The columns of :func:`sites_by_scenarios`.
    """
    from ttmap.defaults import SPEED_UNCERTAINTY
    from ttmap.products.site_eval import evaluate_sites

    names = check_scenario_names(list(front_at), "scenario")
    if not names:
        raise InputDataError("no front arrival values were given; pass at least one scenario")
    n_sites = len(sites)
    if len(snapped) != n_sites:
        raise InputDataError(f"{len(snapped)} snapped cells for {n_sites} sites; give one per site")
    fronts = np.vstack([np.asarray(front_at[n], dtype=np.float64).reshape(-1) for n in names])
    if fronts.shape[1] != n_sites:
        raise InputDataError(f"{fronts.shape[1]} front values per scenario but {n_sites} sites")
    energy = {(str(sc), float(t)): np.asarray(v, dtype=np.float64)
              for (sc, t), v in (energy_at or {}).items()}
    periods = sorted({t for _, t in energy})
    options: dict[str, Any] = {
        **_budget_defaults(notification_delay_min, preparation_min, walking_speed_m_s),
        "little_margin_min": LITTLE_MARGIN_MIN if little_margin_min is None else float(little_margin_min),
        "speed_uncertainty": SPEED_UNCERTAINTY if speed_uncertainty is None else float(speed_uncertainty),
        "origin_time_utc": origin_time_utc,
    }
    blank = np.full(n_sites, np.nan)
    tables = {
        n: evaluate_sites(
            sites, snapped, fronts[j], {t: energy.get((n, t), blank) for t in periods}, **options,
        ).columns
        for j, n in enumerate(names)
    }
    keys = [k for k in tables[names[0]] if k != "name"]
    cols: dict[str, list[Any]] = {"name": [], "scenario": [], **{k: [] for k in keys},
                                  "earliest_for_site": []}
    with np.errstate(invalid="ignore"):
        first = np.nanmin(np.where(np.isfinite(fronts), fronts, np.inf), axis=0)
    for i, site_name in enumerate(sites.names):
        for j, n in enumerate(names):
            cols["name"].append(site_name)
            cols["scenario"].append(n)
            for k in keys:
                cols[k].append(tables[n][k][i])
            f = float(fronts[j, i])
            cols["earliest_for_site"].append(bool(math.isfinite(f) and f == float(first[i])))
    return cols


def sites_by_scenarios_on_grids(
    basin: Mapping[str, Sequence[Any]],
    where: Sequence[str],
    parts: Mapping[str, tuple[Sequence[int], Mapping[str, Sequence[Any]]]],
) -> dict[str, list[Any]]:
    """Merge per-grid sites x scenarios tables: each site's rows from the finest grid covering it.

    Parameters
    ----------
    basin : mapping of column to list
        :func:`sites_by_scenarios` of every site on the basin grid.
    where : sequence of str
        Per site (file order) the name of the grid that reads it; a name not
        in ``parts`` (the basin's) keeps the basin's rows.
    parts : mapping of grid name to (site indices, table)
        :func:`sites_by_scenarios` of the sites ``indices`` (in that order)
        on that grid (a nest), with the basin table's scenarios in its order.

    Returns
    -------
    dict of str to list
        The basin table's columns and rows (site-major, scenario-minor), with
        the rows of a site inside a nest taken from that nest's table, and
        after ``status`` the column ``grid`` (the grid read) and
        ``basin_front_min`` (the front the basin grid alone gives: equal to
        ``front_min`` outside the nests), as in the map job's site table.

    Raises
    ------
    InputDataError
        A part whose scenarios, columns or row count do not match.
    """
    n_rows = len(basin["name"])
    n_sites = len(where)
    if n_sites == 0 or n_rows % n_sites:
        raise InputDataError(f"{n_rows} table rows do not divide among {n_sites} sites")
    n_sc = n_rows // n_sites
    scen = list(basin["scenario"][:n_sc])
    source: dict[int, tuple[str, int]] = {}  # site -> (grid, its index in that grid's table)
    for gname, (idx, table) in parts.items():
        if len(table["name"]) != len(idx) * n_sc or list(table["scenario"][:n_sc]) != scen:
            raise InputDataError(
                f"the table of grid {gname!r} does not hold the basin table's scenarios {scen} for "
                f"its {len(idx)} sites"
            )
        missing = [k for k in basin if k not in table]
        if missing:
            raise InputDataError(f"the table of grid {gname!r} lacks the columns {missing}")
        for k, i in enumerate(idx):
            if where[i] == gname:
                source[int(i)] = (gname, k)
    out: dict[str, list[Any]] = {}
    for key in basin:
        col: list[Any] = []
        for i in range(n_sites):
            g = source.get(i)
            for j in range(n_sc):
                col.append(basin[key][i * n_sc + j] if g is None
                           else parts[g[0]][1][key][g[1] * n_sc + j])
        out[key] = col
        if key == "status":
            out["grid"] = [str(where[i]) for i in range(n_sites) for _ in range(n_sc)]
            out["basin_front_min"] = list(basin["front_min"])
    return out


def _nowhere(sites: Any) -> list[Any]:
    """Every site unsnapped (to check the options before any field is read)."""
    from ttmap.products.site_eval import SNAP_OUTSIDE, SnappedSite

    return [SnappedSite(n, SNAP_OUTSIDE, -1, -1, math.nan, math.nan, math.nan, math.nan)
            for n in sites.names]


def earliest_by_site(table: Mapping[str, Sequence[Any]]) -> dict[str, list[Any]]:
    """One row per site: the scenario(s) giving its earliest front, and that time.

    Parameters
    ----------
    table : mapping
        Columns from :func:`sites_by_scenarios`.

    Returns
    -------
    dict of str to list
        ``name`` (first-seen order), ``earliest_scenario`` (names joined by
        ``;`` on a tie; empty when no scenario arrives), ``front_min`` (NaN
        when none arrives).

    Examples
    --------
    >>> t = {"name": ["A", "A", "B", "B"], "scenario": ["x", "y", "x", "y"],
    ...      "front_min": [30.0, 20.0, float("nan"), float("nan")],
    ...      "earliest_for_site": [False, True, False, False]}
    >>> earliest_by_site(t)
    {'name': ['A', 'B'], 'earliest_scenario': ['y', ''], 'front_min': [20.0, nan]}
    """
    out: dict[str, list[Any]] = {"name": [], "earliest_scenario": [], "front_min": []}
    where: dict[str, int] = {}
    for site, sc, front, first in zip(
        table["name"], table["scenario"], table["front_min"], table["earliest_for_site"], strict=True
    ):
        if site not in where:
            where[site] = len(out["name"])
            out["name"].append(site)
            out["earliest_scenario"].append("")
            out["front_min"].append(math.nan)
        if first:
            k = where[site]
            prev = out["earliest_scenario"][k]
            out["earliest_scenario"][k] = f"{prev};{sc}" if prev else str(sc)
            out["front_min"][k] = float(front)
    return out


def sites_by_scenarios_notes(
    *,
    notification_delay_min: float | None = None,
    preparation_min: float | None = None,
    walking_speed_m_s: float | None = None,
    speed_uncertainty: float | None = None,
    **_ignored: Any,
) -> tuple[tuple[str, str], tuple[str, str]]:
    """The comment lines above the two site tables: the caution, then what the columns mean.

    Parameters
    ----------
    notification_delay_min, preparation_min, walking_speed_m_s, speed_uncertainty : float, optional
        The options given to :func:`sites_by_scenarios` (None: the defaults
        of :mod:`ttmap.defaults`); other options are ignored.

    Returns
    -------
    table_notes, earliest_notes : (str, str)
        For the sites-by-scenarios table and the earliest-by-site table.
    """
    from ttmap.defaults import SPEED_UNCERTAINTY
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.site_eval import MARGIN_RULE

    d = _budget_defaults(notification_delay_min, preparation_min, walking_speed_m_s)
    u = SPEED_UNCERTAINTY if speed_uncertainty is None else float(speed_uncertainty)
    note = (
        "One row per site and scenario, the same columns as the map job's site table; times in "
        "minutes after the earthquake (origin time), distances in metres. Each site is read at "
        "one cell for every scenario: the nearest water cell reached in the earliest-arrival "
        f"envelope. earliest_min/latest_min = front_min / (1 +/- {u:g}); "
        + MARGIN_RULE.format(pct=100 * u)
        + "; minutes_needed = preparation + distance / walking speed; margin_min = minutes_left "
        "- minutes_needed. Defaults where a site gives none: "
        f"notification delay {d['notification_delay_min']:g} min, "
        f"preparation {d['preparation_min']:g} min, walking speed {d['walking_speed_m_s']:g} m/s. "
        "Margins are planning figures, not promises."
    )
    first = (
        "earliest_scenario: the scenario whose front reaches the site first "
        "(';' between ties); front_min: minutes after the earthquake"
    )
    return (CAUTION_SHORT, note), (CAUTION_SHORT, first)


def render_sites_by_scenarios(
    table: Mapping[str, Sequence[Any]],
    *,
    title: str = "Front arrival at each site, by scenario",
    caution: str | None = None,
    width_in: float = 9.0,
    dpi: float = 120.0,
    source_kind: str | None = None,
) -> Any:
    """Chart of :func:`sites_by_scenarios`: one row per site, a dot per scenario.

    Sites are ordered by their earliest front arrival (earliest at the top;
    sites without any arrival last). With up to 10 scenarios each has its
    own colour and the earliest at a site is ringed in black; with more,
    dots are grey and the earliest is red. The caution (with the natural-warning
    line) is printed at the bottom of the figure; the title shrinks and wraps
    to the width. ``source_kind`` picks the axis wording ("minutes after the
    earthquake" for points and ruptures, "after the event" otherwise; None:
    earthquake).

    Returns
    -------
    matplotlib.figure.Figure
        On an Agg canvas (no pyplot state); the caller drops it.
    """

    from matplotlib import colormaps
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    from ttmap.products._footer import (
        caution_footer,
        draw_caution_footer,
        draw_title_block,
        fit_yticklabels,
    )
    from ttmap.products.cautions import CAUTION_SHORT, minutes_after

    caution = CAUTION_SHORT if caution is None else caution
    sites_col = [str(s) for s in table["name"]]
    scen_col = [str(s) for s in table["scenario"]]
    if not sites_col:
        raise InputDataError("the site table has no rows; nothing to chart")
    fronts = np.asarray(
        [math.nan if v is None else float(v) for v in table["front_min"]], dtype=np.float64
    )
    firsts = [bool(v) for v in table["earliest_for_site"]]
    site_names = list(dict.fromkeys(sites_col))
    scen_names = list(dict.fromkeys(scen_col))
    best = {s: math.inf for s in site_names}
    for s, f in zip(sites_col, fronts, strict=True):
        if math.isfinite(f):
            best[s] = min(best[s], float(f))
    order = sorted(range(len(site_names)), key=lambda i: (best[site_names[i]], i))
    row_of = {site_names[i]: y for y, i in enumerate(order)}
    n = len(site_names)

    coloured = len(scen_names) <= 10
    cmap = colormaps["tab10"]
    colour = {sc: (cmap(k) if coloured else "#9a9a9a") for k, sc in enumerate(scen_names)}

    footer = caution_footer(" ".join(caution.split()), width_in)
    footer_top = footer.top_in(0.15)
    legend_items = len(scen_names) if coloured else 2
    legend_h = 0.22 * math.ceil((legend_items + 1) / 3) + 0.1
    bottom_in = footer_top + legend_h + 0.55
    subtitle = ("Sites sorted by earliest front arrival over the scenarios. Planning figures, "
                "not promises.")
    scratch = Figure(figsize=(width_in, 10.0), dpi=dpi)
    FigureCanvasAgg(scratch)
    top_in = draw_title_block(scratch, title, subtitle, top_in=0.16, title_pt=12.0,
                              subtitle_pt=8.5) + 0.12
    axes_h = max(1.2, 0.34 * n)
    fig_h = top_in + axes_h + bottom_in
    left_in = min(3.0, 0.45 + 0.075 * max(len(s) for s in site_names))
    fig = Figure(figsize=(width_in, fig_h), dpi=dpi, facecolor="white")
    FigureCanvasAgg(fig)
    ax = fig.add_axes(
        (left_in / width_in, bottom_in / fig_h, 1.0 - (left_in + 0.4) / width_in, axes_h / fig_h)
    )
    for s, sc, f, first in zip(sites_col, scen_col, fronts, firsts, strict=True):
        if not math.isfinite(f):
            continue
        y = row_of[s]
        if coloured:
            ax.plot(f, y, "o", color=colour[sc], markersize=6.5, zorder=3,
                    markeredgecolor="black" if first else "white",
                    markeredgewidth=1.6 if first else 0.5)
        else:
            ax.plot(f, y, "o", color="#c0392b" if first else colour[sc],
                    markersize=7 if first else 5, zorder=4 if first else 3)
    for s in site_names:
        if not math.isfinite(best[s]):
            ax.text(0.01, row_of[s], "no arrival computed", transform=ax.get_yaxis_transform(),
                    va="center", fontsize=7.5, color="#555555")
    finite = fronts[np.isfinite(fronts)]
    xmax = max(10.0, float(finite.max()) * 1.06) if finite.size else 60.0
    ax.set_xlim(0.0, xmax)
    ax.set_ylim(n - 0.5, -0.5)
    ax.set_yticks(range(n))
    per_line = max(10, int((left_in - 0.3) / 0.072))

    def shown(name: str) -> str:  # long names on two lines, the rest shortened
        import textwrap

        parts = textwrap.wrap(name, per_line, break_long_words=True) or [name]
        if len(parts) > 2:
            parts = [parts[0], textwrap.shorten(" ".join(parts[1:]), per_line, placeholder="...")]
        return "\n".join(parts)

    ax.set_yticklabels([shown(site_names[i]) for i in order], fontsize=8.5)
    fit_yticklabels(ax, (left_in - 0.15) * dpi)
    ax.set_xlabel(f"Front arrival, {minutes_after(source_kind)}", fontsize=9)
    ax.tick_params(axis="x", labelsize=8)
    ax.tick_params(axis="y", length=0)
    ax.grid(axis="x", color="#d9d9d9", linewidth=0.6, zorder=1)
    for y in range(n):
        ax.axhline(y, color="#eeeeee", linewidth=0.6, zorder=1)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)

    if coloured:
        items: list[Any] = [
            Line2D([], [], marker="o", linestyle="none", color=colour[sc], label=sc)
            for sc in scen_names
        ]
        items.append(Line2D([], [], marker="o", linestyle="none", color="white",
                            markeredgecolor="black", markeredgewidth=1.6,
                            label="earliest at the site"))
    else:
        items = [
            Line2D([], [], marker="o", linestyle="none", color="#9a9a9a",
                   label=f"one of {len(scen_names)} scenarios"),
            Line2D([], [], marker="o", linestyle="none", color="#c0392b",
                   label="earliest at the site"),
        ]
    fig.legend(handles=items, loc="center", ncol=3,
               bbox_to_anchor=(0.5, (footer_top + legend_h / 2.0) / fig_h),
               frameon=False, fontsize=7.5)
    draw_title_block(fig, title, subtitle, top_in=0.16, title_pt=12.0, subtitle_pt=8.5)
    draw_caution_footer(fig, footer, fig_h)
    return fig
