"""Caution texts shown with every ttmap product.

One source for the wording, so that the raster tags, vector metadata, CSV
headers, figures and reports all say the same thing. The texts are plain ASCII
so they survive GDAL metadata, CSV files and any terminal.

Examples
--------
>>> from ttmap.products.cautions import CAUTION_SHORT, CAUTION_LINES, CAUTION_TEXT
>>> len(CAUTION_SHORT) < 200
True
>>> CAUTION_TEXT.splitlines() == list(CAUTION_LINES)
True
"""

from __future__ import annotations

from collections.abc import Iterable

__all__ = [
    "CAUTION_LINES",
    "CAUTION_SHORT",
    "CAUTION_TEXT",
    "NATURAL_WARNING",
    "event_word",
    "minutes_after",
    "minutes_after_all",
]

#: One line for raster tags, figure footers and CSV headers (< 200 characters).
CAUTION_SHORT: str = (
    "Planning aid only, not a tsunami warning. Official warning centres and local "
    "emergency management decide. Arrival times only: wave heights and flooding "
    "are not computed."
)

#: The full cautions, one sentence group per entry, in reading order.
CAUTION_LINES: tuple[str, ...] = (
    ("This is a planning aid only. It is not a tsunami warning and must not be used as one."),
    (
        "Official tsunami warning centres and local emergency management decide on "
        "warnings and evacuation. Follow their instructions, and stay away from the "
        "coast until they declare the all-clear."
    ),
    (
        "A strong or long earthquake felt near the coast, or a sudden fall or rise of "
        "the sea, is itself the warning: go to high ground or inland at once. Do not "
        "wait for an official message."
    ),
    (
        "Near the source, waves can arrive before any official message reaches you, "
        "and earlier than a map computed from a single source point suggests."
    ),
    (
        "A tsunami is a series of waves that can go on for hours. The first wave is "
        "often not the largest."
    ),
    (
        "Computed arrival times depend on the quality and resolution of the "
        "bathymetry and on the assumed source location and origin time. They are "
        "least certain near the source and in shallow or complex coastal water."
    ),
    (
        "Only arrival times are computed. Wave heights, currents and flooding on land "
        "are not computed; a small wave at one place can be much larger a few "
        "kilometres away."
    ),
    "Never go to the shore to watch a tsunami.",
)

#: The full cautions as one text, one entry per line.
CAUTION_TEXT: str = "\n".join(CAUTION_LINES)

#: The natural-warning line every chart and map carries (the figure footer adds
#: it to any caution that lacks it).
NATURAL_WARNING: str = (
    "Strong or long shaking, or a sudden fall or rise of the sea, is itself the warning: "
    "go to high ground at once."
)

#: Source kinds that are earthquakes (a point epicentre or a rupture rectangle).
_EARTHQUAKE_KINDS = frozenset({"point", "rupture"})


def event_word(source_kind: str | None) -> str:
    """What time zero is, in words: "earthquake" for points and ruptures, else "event".

    Point and rupture sources stand for an earthquake; an area or line read
    from a file may be a landslide or an eruption, so its clock starts at "the
    event". ``None`` (unknown) reads "earthquake", the common case.

    Examples
    --------
    >>> event_word("rupture"), event_word("area"), event_word(None)
    ('earthquake', 'event', 'earthquake')
    """
    if source_kind is None or source_kind in _EARTHQUAKE_KINDS:
        return "earthquake"
    return "event"


def minutes_after(source_kind: str | None = None) -> str:
    """The one wording of the time axis: "minutes after the earthquake" (or "the event").

    Examples
    --------
    >>> minutes_after("point")
    'minutes after the earthquake'
    >>> minutes_after("line")
    'minutes after the event'
    """
    return f"minutes after the {event_word(source_kind)}"


def minutes_after_all(source_kinds: Iterable[str]) -> str:
    """The time-axis wording for several sources sharing one origin time (an envelope).

    >>> minutes_after_all(["point", "rupture"]), minutes_after_all(["rupture", "area"])
    ('minutes after the earthquake', 'minutes after the event')
    """
    kinds = list(source_kinds)
    return minutes_after(None if all(k in _EARTHQUAKE_KINDS for k in kinds) else "area")
