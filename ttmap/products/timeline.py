"""Per-site timeline chart: the time budget against the wave's arrival.

One row per site, on a common axis of minutes after the earthquake:

- stacked bars from 0: the delay until an official message can reach people,
  the preparation time, then the walking time to safe ground;
- the front arrival as a dark tick, with its earliest-latest band (the stated
  speed uncertainty) shaded behind it;
- for each wave period, a hatched strip from the front to the arrival of that
  period's energy (the first wave is often not the largest);
- rows where the earliest arrival comes before people can leave (message
  delay plus preparation) are tinted and their arrival tick is drawn in a
  warning colour;
- the margin (or why there is none) written at the right: brick red when
  negative or when the wave comes before the message, dark ochre when little
  (the table's ``budget_status``, else under
  :data:`ttmap.defaults.LITTLE_MARGIN_MIN`).

Rows are sorted by margin, smallest first; sites without a margin go to the
bottom (ordered by time left). matplotlib is imported inside the function and
the figure is built on an Agg canvas without ``pyplot``, as in
:mod:`ttmap.products.maps`; save it with :func:`ttmap.io.figures.save_figure`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ttmap.errors import InputDataError
from ttmap.defaults import LITTLE_MARGIN_MIN
from ttmap.products._footer import (
    caution_footer,
    draw_caution_footer,
    draw_title_block,
    fit_yticklabels,
    place_legend,
)
from ttmap.products.cautions import CAUTION_SHORT, minutes_after

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["render_timeline", "timeline_order", "TIMELINE_COLUMNS", "MARGIN_LEVEL_COLORS", "margin_note"]

#: Columns the chart needs (a :class:`ttmap.products.sites.SiteTable` has them).
TIMELINE_COLUMNS: tuple[str, ...] = (
    "name",
    "front_min",
    "earliest_min",
    "latest_min",
    "notification_delay_min",
    "preparation_min",
    "minutes_needed",
    "minutes_left",
    "margin_min",
)

_NOTIFY = "#9aa7b8"  # cool grey-blue: waiting for the message
_PREPARE = "#e3b45c"  # amber: getting ready
_WALK = "#4d9b80"  # sea green: walking out
_BAND = "#8a78c2"  # violet: earliest-latest band of the front
_FRONT = "#1e1e1e"
_ALERT = "#c2362b"  # brick red: the wave comes before people can leave
_ALERT_BG = "#fbe6e2"
_LITTLE = "#8a5a00"  # dark ochre: little margin
#: Colour of the margin text at the right of a row, by level: "alert" (the
#: wave before people can leave, or a negative margin), "little" (little
#: margin) and "plain"; the report's site table uses the same colours.
MARGIN_LEVEL_COLORS: dict[str, str] = {"alert": _ALERT, "little": _LITTLE, "plain": "#222222"}
_ENERGY = ("#2e5e9e", "#7a4a1e", "#3f7f3f", "#6b3f7f")
_HATCHES = ("////", "\\\\\\\\", "xxx", "...")


def _columns(table: Any) -> Mapping[str, Sequence[Any]]:
    cols = getattr(table, "columns", table)
    if not isinstance(cols, Mapping):
        raise InputDataError(
            f"the timeline needs a SiteTable or a mapping of columns, got {type(table).__name__}"
        )
    missing = [c for c in TIMELINE_COLUMNS if c not in cols]
    if missing:
        raise InputDataError(
            f"the site table lacks column(s) {', '.join(missing)}; build it with "
            "ttmap.products.sites.site_table"
        )
    if len(cols["name"]) == 0:
        raise InputDataError("the site table has no sites; nothing to draw")
    return cols


def _floats(values: Sequence[Any]) -> np.ndarray:
    return np.array([math.nan if v is None else float(v) for v in values], dtype=np.float64)


def timeline_order(table: Any) -> list[int]:
    """Row order of the chart: smallest margin first, sites without a margin last.

    Sites without a margin are ordered by time left (least first), then those
    without an arrival; ties keep table order.

    Examples
    --------
    >>> cols = {c: [None, None, None] for c in TIMELINE_COLUMNS}
    >>> cols.update(name=["a", "b", "c"], margin_min=[4.0, None, -2.0],
    ...             minutes_left=[20.0, 5.0, 10.0])
    >>> timeline_order(cols)
    [2, 0, 1]
    """
    cols = _columns(table)
    margin = _floats(cols["margin_min"])
    left = _floats(cols["minutes_left"])

    def key(i: int) -> tuple[int, float, int]:
        if math.isfinite(margin[i]):
            return (0, float(margin[i]), i)
        if math.isfinite(left[i]):
            return (1, float(left[i]), i)
        return (2, 0.0, i)

    return sorted(range(len(margin)), key=key)


def _period_columns(cols: Mapping[str, Sequence[Any]]) -> list[tuple[str, str]]:
    """(column, label) of the energy-arrival columns, in table order."""
    out = []
    for key in cols:
        if key.startswith("energy_T") and key.endswith("s_min"):
            label = key[len("energy_T") : -len("s_min")].replace("p", ".")
            out.append((key, label))
    return out


def margin_note(
    margin: float, left: float, front: float, needed: float, little: bool
) -> tuple[str, str]:
    """Text at the right of a row and its level: "alert", "little" or "plain".

    Parameters are one site's margin, minutes left, front arrival and minutes
    needed (NaN where missing) and whether its status is "little margin".
    The level picks the colour in :data:`MARGIN_LEVEL_COLORS`.

    Examples
    --------
    >>> margin_note(-3.0, 12.0, 30.0, 15.0, False)
    ('margin -3.0 min', 'alert')
    """
    if not math.isfinite(front):
        return "no arrival computed", "plain"
    if left <= 0.0:
        return "before the message", "alert"
    if not math.isfinite(needed):
        return "no distance given", "plain"
    level = "alert" if margin < 0.0 else "little" if little else "plain"
    return f"margin {margin:+.1f} min", level


def render_timeline(
    table: Any,
    *,
    title: str,
    subtitle: str | None = None,
    caution: str = CAUTION_SHORT,
    width_in: float = 10.0,
    dpi: float = 150.0,
    source_kind: str | None = None,
) -> Figure:
    """Draw the per-site timeline chart.

    Parameters
    ----------
    table : SiteTable or mapping of str to sequence
        From :func:`ttmap.products.sites.site_table` (needs
        :data:`TIMELINE_COLUMNS`; ``energy_T{T}s_min`` columns are drawn
        when present).
    title : str
        Main title, e.g. the scenario name.
    subtitle : str, optional
        Second line; by default a one-line key to reading the chart.
    caution : str
        Caution footer (default: the short caution), wrapped to the width.
    width_in : float
        Figure width in inches; the height follows the number of sites.
    dpi : float
        Resolution for PNG output.
    source_kind : str, optional
        Kind of the source (``"point"``, ``"rupture"``, ``"line"``,
        ``"area"``): the axis reads "minutes after the earthquake" for
        points and ruptures, "after the event" otherwise.

    Notes
    -----
    Title and subtitle shrink and wrap to the width; long site names wrap
    onto two or three lines (rows grow to hold them); the caution footer
    carries the natural-warning line.

    Returns
    -------
    matplotlib.figure.Figure
        On an Agg canvas, not registered with ``pyplot``.

    Raises
    ------
    InputDataError
        Missing columns, no sites, or a width below 7 inches.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle
    from matplotlib.transforms import blended_transform_factory

    cols = _columns(table)
    if not (math.isfinite(width_in) and width_in >= 7.0):
        raise InputDataError(f"timeline width {width_in!r} in is too narrow; use at least 7 inches")
    if not (math.isfinite(dpi) and dpi > 0):
        raise InputDataError(f"dpi must be a positive number, got {dpi!r}")
    order = timeline_order(cols)
    names = [str(cols["name"][i]) for i in order]
    get = {k: _floats(cols[k])[order] for k in TIMELINE_COLUMNS if k != "name"}
    delay, prep = get["notification_delay_min"], get["preparation_min"]
    walk = get["minutes_needed"] - prep
    front, early, late = get["front_min"], get["earliest_min"], get["latest_min"]
    periods = [(label, _floats(cols[key])[order]) for key, label in _period_columns(cols)]
    n = len(order)

    # --- layout in inches -------------------------------------------------------
    if subtitle is None:
        subtitle = (
            "Sorted by margin, smallest first. Margin = earliest arrival - (message delay + "
            "preparation + walking). Planning figures, not promises."
        )
    name_chars = max(len(s) for s in names)
    left_in = min(3.0, 0.45 + 0.075 * name_chars)
    per_line = max(10, int((left_in - 0.3) / 0.072))
    names = [_wrap_name(s, per_line) for s in names]
    lines_per_row = max(s.count("\n") + 1 for s in names)
    row_h = max(0.36, 0.17 * lines_per_row + 0.08)
    right_in = 1.7
    fig_w = float(width_in)
    footer = caution_footer(" ".join(caution.split()), fig_w)
    footer_top = footer.top_in(0.1)
    legend_items = _legend_items(periods)
    # title block and legend are measured on a scratch figure of the same width
    scratch = Figure(figsize=(fig_w, 10.0), dpi=dpi)
    FigureCanvasAgg(scratch)
    top_in = draw_title_block(scratch, title, subtitle, top_in=0.16, title_pt=12.5,
                              subtitle_pt=8.5) + 0.15
    _, legend_h = place_legend(scratch, legend_items, 0.0, fontsize=7.5, max_ncol=3,
                               handlelength=1.8, columnspacing=1.4)
    bottom_in = footer_top + 0.12 + legend_h + 0.5
    axes_h = max(1.2, n * row_h)
    fig_h = top_in + axes_h + bottom_in
    fig = Figure(figsize=(fig_w, fig_h), dpi=dpi, facecolor="white")
    FigureCanvasAgg(fig)
    ax = fig.add_axes(
        (left_in / fig_w, bottom_in / fig_h, 1.0 - (left_in + right_in) / fig_w, axes_h / fig_h)
    )

    # --- x range ---------------------------------------------------------------------
    candidates = [delay + prep, delay + prep + np.nan_to_num(walk, nan=0.0), late, front]
    candidates += [e for _, e in periods]
    stacked = np.concatenate([np.ravel(c) for c in candidates])
    finite = stacked[np.isfinite(stacked)]
    xmax = max(10.0, float(finite.max()) * 1.06) if finite.size else 60.0

    # --- rows ------------------------------------------------------------------------
    bar_h = 0.46
    alert_rows = []
    for y in range(n):
        leave_at = delay[y] + prep[y]
        alert = bool(math.isfinite(early[y]) and early[y] < leave_at)
        if alert:
            alert_rows.append(y)
            ax.axhspan(y - 0.5, y + 0.5, color=_ALERT_BG, zorder=0, linewidth=0)
        ax.barh(y, delay[y], left=0.0, height=bar_h, color=_NOTIFY, zorder=2, linewidth=0)
        ax.barh(y, prep[y], left=delay[y], height=bar_h, color=_PREPARE, zorder=2, linewidth=0)
        if math.isfinite(walk[y]):
            ax.barh(y, walk[y], left=leave_at, height=bar_h, color=_WALK, zorder=2, linewidth=0)
        if math.isfinite(front[y]):
            lo, hi = early[y], late[y]
            ax.add_patch(
                Rectangle(
                    (lo, y - 0.42),
                    hi - lo,
                    0.84,
                    facecolor=_BAND,
                    alpha=0.35,
                    edgecolor="none",
                    zorder=3,
                )
            )
            ax.plot(
                [front[y], front[y]],
                [y - 0.42, y + 0.42],
                color=_FRONT,
                linewidth=2.0,
                zorder=5,
                solid_capstyle="butt",
            )
            if alert:
                ax.plot(
                    [early[y], early[y]],
                    [y - 0.45, y + 0.45],
                    color=_ALERT,
                    linewidth=2.6,
                    zorder=6,
                    solid_capstyle="butt",
                )
                ax.plot(
                    early[y],
                    y - 0.45,
                    marker="v",
                    markersize=7,
                    color=_ALERT,
                    zorder=7,
                    markeredgecolor="white",
                    markeredgewidth=0.6,
                )
        # energy windows: a strip under the bar, one sub-strip per period
        if periods:
            strip0, strip_h = y + bar_h / 2 + 0.02, 0.42 - bar_h / 2 - 0.02
            sub_h = strip_h / len(periods)
            for k, (_, energy) in enumerate(periods):
                if math.isfinite(front[y]) and math.isfinite(energy[y]):
                    ax.add_patch(
                        Rectangle(
                            (front[y], strip0 + k * sub_h),
                            max(energy[y] - front[y], 0.0),
                            sub_h,
                            facecolor="white",
                            edgecolor=_ENERGY[k % len(_ENERGY)],
                            hatch=_HATCHES[k % len(_HATCHES)],
                            linewidth=0.6,
                            zorder=4,
                        )
                    )

    # --- margin text at the right ------------------------------------------------------
    blend = blended_transform_factory(ax.transAxes, ax.transData)
    if "budget_status" in cols:
        status = [str(cols["budget_status"][i]) for i in order]
        little = [t.startswith("little margin") for t in status]
    else:
        little = [0.0 <= m < LITTLE_MARGIN_MIN for m in get["margin_min"]]
    for y in range(n):
        text, level = margin_note(
            get["margin_min"][y],
            get["minutes_left"][y],
            front[y],
            get["minutes_needed"][y],
            little[y],
        )
        ax.text(
            1.015,
            y,
            text,
            transform=blend,
            ha="left",
            va="center",
            fontsize=8,
            color=MARGIN_LEVEL_COLORS[level],
            fontweight="normal" if level == "plain" else "bold",
        )

    # --- axes --------------------------------------------------------------------------
    ax.set_ylim(n - 0.5, -0.5)
    ax.set_yticks(range(n))
    ax.set_yticklabels(names, fontsize=8.5)
    fit_yticklabels(ax, (left_in - 0.15) * dpi)
    ax.set_xlim(0.0, xmax)
    phrase = minutes_after(source_kind)
    ax.set_xlabel(phrase[0].upper() + phrase[1:], fontsize=9)
    ax.tick_params(axis="x", labelsize=8)
    ax.tick_params(axis="y", length=0)
    ax.grid(axis="x", color="#d9d9d9", linewidth=0.6, zorder=1)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)

    # --- legend, titles and caution ------------------------------------------------------
    place_legend(fig, _legend_items(periods), footer_top + 0.12, fontsize=7.5, max_ncol=3,
                 handlelength=1.8, columnspacing=1.4)
    draw_title_block(fig, title, subtitle, top_in=0.16, title_pt=12.5, subtitle_pt=8.5)
    draw_caution_footer(fig, footer, fig_h)
    return fig


def _wrap_name(name: str, per_line: int) -> str:
    """A site name on up to three lines of about ``per_line`` characters (the rest cut with ...)."""
    import textwrap

    lines = textwrap.wrap(name, width=per_line, break_long_words=True) or [name]
    if len(lines) > 3:
        lines = [*lines[:2], textwrap.shorten(" ".join(lines[2:]), per_line, placeholder="...")]
    return "\n".join(lines)


def _legend_items(periods: Sequence[tuple[str, Any]]) -> list[Any]:
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    items: list[Any] = [
        Patch(facecolor=_NOTIFY, label="until an official message can reach people"),
        Patch(facecolor=_PREPARE, label="preparation"),
        Patch(facecolor=_WALK, label="walking to safe ground"),
        Line2D([], [], color=_FRONT, linewidth=2.0, label="front arrival"),
        Patch(facecolor=_BAND, alpha=0.35, label="earliest to latest (speed uncertainty)"),
    ]
    for k, (label, _) in enumerate(periods):
        items.append(
            Patch(
                facecolor="white",
                edgecolor=_ENERGY[k % len(_ENERGY)],
                hatch=_HATCHES[k % len(_HATCHES)],
                label=f"front to energy arrival, T = {label} s",
            )
        )
    items.append(
        Line2D([], [], color=_ALERT, linewidth=2.6, marker="v", markersize=6,
               label="wave before people can leave")
    )
    return items
