"""Evacuation time budget: time left after the official message, time needed to walk out.

Pure arithmetic, no I/O. For one coastal site:

- ``minutes_left = arrival_min - notification_delay_min`` - the time between
  the moment an official message can reach people and the wave's arrival;
- ``minutes_needed = preparation_min + distance_m / (walking_speed_m_s * 60)``
  - time to get going, then walk to safe ground;
- ``margin_min = minutes_left - minutes_needed``.

The margin is a planning figure. It rests on a computed arrival time (itself
uncertain, see :mod:`ttmap.products.sites`), on an assumed delay before the
message reaches people, and on an assumed walking speed. It says nothing about
wave height or flooding, and a positive margin is not a promise: people near a
source must leave on natural signs (strong or long shaking, a sudden fall or
rise of the sea) without waiting for any message.

Defaults and their sources
--------------------------
:data:`WALKING_SPEED_M_S` = 0.74 m/s
    Mean evacuation speed observed in the 2011 Tohoku tsunami (2.65 km/h), in
    a survey by Japan's land ministry (MLIT) as reported by a secondary
    source; the 2002 Japanese guideline assumed 1.0 m/s (3.6 km/h). Groups
    with children, elderly people or people who walk with difficulty were
    slower still (0.52-0.54 m/s in the same survey). The lower observed mean
    is used as the default because it is the more cautious of the two.
:data:`PREPARATION_MIN` = 3 min
    The departure delay of the worked example of the Japanese guideline
    budget formula (distance = speed x (arrival - departure delay - climb
    time); 1.0 m/s x (10 - 3 - 3) min = 240 m). It is the example's value,
    not a measured one; real preparation times vary widely.
:data:`NOTIFICATION_DELAY_MIN` = 10 min
    International tsunami warning centres "can often" issue a first message
    within about 10 minutes of an earthquake (IOC/ITIC glossary). The time
    until a message reaches people on a given coast through local channels
    can be much longer; set the local value where it is known.
:data:`LITTLE_MARGIN_MIN` = 5 min
    Margins below this are flagged as little. Common practice, no source: a
    round figure of the order of the uncertainty of the other terms.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from ttmap.defaults import LITTLE_MARGIN_MIN
from ttmap._typing import FloatArray
from ttmap.errors import InputDataError

__all__ = [
    "STATUS_BEFORE_MESSAGE",
    "STATUS_TOO_LITTLE",
    "STATUS_LITTLE_MARGIN",
    "STATUS_ON_PAPER",
    "STATUS_NO_DISTANCE",
    "STATUS_NO_ARRIVAL",
    "BUDGET_STATUSES",
    "Budget",
    "minutes_needed",
    "reachable_distance_m",
    "warning_budget",
    "little_margin_status",
]

#: The wave arrives no later than the official message can reach people.
STATUS_BEFORE_MESSAGE: str = (
    "arrives before an official message can reach people: leave on natural signs "
    "(strong or long shaking, sea retreat)"
)
#: Negative margin.
STATUS_TOO_LITTLE: str = "too little time: margin below zero"
#: Margin between zero and the little-margin threshold (filled in by
#: :func:`little_margin_status`).
STATUS_LITTLE_MARGIN: str = "little margin: under {minutes:g} minutes"
#: Margin at or above the threshold.
STATUS_ON_PAPER: str = (
    "time to reach safe ground on paper: margin is a planning figure, not a promise"
)
#: No distance to safe ground was given.
STATUS_NO_DISTANCE: str = "no distance to safe ground given"
#: No arrival time (site off the grid, no water nearby, or not reached).
STATUS_NO_ARRIVAL: str = "no arrival computed"

#: Every status text (the little-margin one with the default threshold), in
#: order from the most to the least pressing.
BUDGET_STATUSES: tuple[str, ...] = (
    STATUS_BEFORE_MESSAGE,
    STATUS_TOO_LITTLE,
    STATUS_LITTLE_MARGIN.format(minutes=LITTLE_MARGIN_MIN),
    STATUS_ON_PAPER,
    STATUS_NO_DISTANCE,
    STATUS_NO_ARRIVAL,
)


def little_margin_status(little_margin_min: float = LITTLE_MARGIN_MIN) -> str:
    """The little-margin status text for a threshold in minutes.

    Examples
    --------
    >>> little_margin_status(5.0)
    'little margin: under 5 minutes'
    """
    return STATUS_LITTLE_MARGIN.format(minutes=float(little_margin_min))


@dataclass(frozen=True)
class Budget:
    """The time budget of one site.

    Attributes
    ----------
    minutes_left : float
        Arrival minus notification delay, minutes; NaN without an arrival.
    minutes_needed : float
        Preparation plus walking time, minutes; NaN without a distance.
    margin_min : float
        ``minutes_left - minutes_needed``; NaN if either is missing.
    status : str
        One of :data:`BUDGET_STATUSES` (the little-margin text carries the
        threshold used).
    """

    minutes_left: float
    minutes_needed: float
    margin_min: float
    status: str


def _as_array(value: ArrayLike, name: str) -> FloatArray:
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as err:
        raise InputDataError(f"{name} = {value!r} is not a number; pass a number") from err
    return arr


def _check_positive(arr: FloatArray, name: str, unit: str) -> None:
    bad = np.isfinite(arr) & ~(arr > 0.0)
    bad |= np.isinf(arr)
    if np.any(bad):
        raise InputDataError(
            f"{name} = {float(arr[bad].flat[0])!r} {unit} must be a positive number; "
            f"give a {name.replace('_', ' ')} above 0"
        )


def _check_non_negative(arr: FloatArray, name: str, unit: str) -> None:
    bad = np.isinf(arr) | (np.isfinite(arr) & (arr < 0.0))
    if np.any(bad):
        raise InputDataError(
            f"{name} = {float(arr[bad].flat[0])!r} {unit} must not be negative; give 0 or more"
        )


def _out(arr: FloatArray) -> Any:
    return float(arr) if arr.ndim == 0 else arr


def minutes_needed(
    distance_m: ArrayLike, walking_speed_m_s: ArrayLike, preparation_min: ArrayLike
) -> Any:
    """Minutes to get going and walk to safe ground.

    ``preparation_min + distance_m / (walking_speed_m_s * 60)``, broadcast over
    arrays. NaN distances (not given) give NaN.

    Parameters
    ----------
    distance_m : float or array, metres
        Walking distance to safe ground, >= 0.
    walking_speed_m_s : float or array, m/s
        > 0.
    preparation_min : float or array, minutes
        Time before people start walking, >= 0.

    Returns
    -------
    float or ndarray, minutes

    Raises
    ------
    InputDataError
        Negative distance or preparation, or a speed that is not positive.

    Examples
    --------
    >>> minutes_needed(900.0, 1.0, 5.0)
    20.0
    >>> minutes_needed(444.0, 0.74, 3.0)
    13.0
    """
    d = _as_array(distance_m, "distance_m")
    v = _as_array(walking_speed_m_s, "walking_speed_m_s")
    p = _as_array(preparation_min, "preparation_min")
    _check_non_negative(d, "distance_m", "m")
    _check_positive(v, "walking_speed_m_s", "m/s")
    _check_non_negative(p, "preparation_min", "min")
    return _out(np.asarray(p + d / (v * 60.0), dtype=np.float64))


def reachable_distance_m(
    arrival_min: ArrayLike,
    departure_delay_min: ArrayLike,
    climb_min: ArrayLike,
    walking_speed_m_s: ArrayLike,
) -> Any:
    """Distance people can walk before the wave arrives (guideline budget formula).

    ``walking_speed_m_s * 60 * (arrival_min - departure_delay_min - climb_min)``,
    and 0 where no time is left. This is the budget formula of Japanese
    evacuation-planning practice (reachable distance = speed x (arrival time
    - departure delay - vertical-climb time)).

    Parameters
    ----------
    arrival_min : float or array, minutes
        Arrival time of the wave after the earthquake (or after the message,
        if the departure delay is counted from the message).
    departure_delay_min : float or array, minutes, >= 0
    climb_min : float or array, minutes, >= 0
        Time to climb to a refuge at the end of the walk.
    walking_speed_m_s : float or array, m/s, > 0

    Returns
    -------
    float or ndarray, metres
        >= 0; NaN where the arrival is NaN.

    Examples
    --------
    The guideline's worked example: 1.0 m/s over (10 - 3 - 3) min.

    >>> reachable_distance_m(10.0, 3.0, 3.0, 1.0)
    240.0
    >>> reachable_distance_m(5.0, 3.0, 3.0, 1.0)
    0.0
    """
    t = _as_array(arrival_min, "arrival_min")
    dd = _as_array(departure_delay_min, "departure_delay_min")
    cl = _as_array(climb_min, "climb_min")
    v = _as_array(walking_speed_m_s, "walking_speed_m_s")
    _check_non_negative(dd, "departure_delay_min", "min")
    _check_non_negative(cl, "climb_min", "min")
    _check_positive(v, "walking_speed_m_s", "m/s")
    with np.errstate(invalid="ignore"):
        dist = v * 60.0 * np.maximum(t - dd - cl, 0.0)
    return _out(np.asarray(np.where(np.isnan(t), np.nan, dist), dtype=np.float64))


def _scalar(value: Any, name: str) -> float:
    if value is None:
        return math.nan
    try:
        out = float(value)
    except (TypeError, ValueError) as err:
        raise InputDataError(f"{name} = {value!r} is not a number; pass a number or None") from err
    return out


def warning_budget(
    front_arrival_min: float | None,
    notification_delay_min: float,
    preparation_min: float,
    distance_m: float | None,
    walking_speed_m_s: float,
    *,
    little_margin_min: float = LITTLE_MARGIN_MIN,
) -> Budget:
    """Time left, time needed and margin for one site.

    Parameters
    ----------
    front_arrival_min : float or None
        Arrival time to plan with, minutes after origin (the earliest
        estimate of the front); None or NaN if not computed.
    notification_delay_min : float
        Minutes from origin until an official message can reach people, >= 0.
    preparation_min : float
        Minutes people need before they start walking, >= 0.
    distance_m : float or None
        Walking distance to safe ground, >= 0; None or NaN if not known.
    walking_speed_m_s : float
        > 0.
    little_margin_min : float
        Margins below this are flagged as little (default
        :data:`LITTLE_MARGIN_MIN`), >= 0.

    Returns
    -------
    Budget

    Raises
    ------
    InputDataError
        Negative delay, preparation, distance or threshold; a speed that is
        not positive; a non-numeric value.

    Notes
    -----
    The status is decided in this order:

    1. no arrival -> :data:`STATUS_NO_ARRIVAL`;
    2. arrival at or before the notification delay ->
       :data:`STATUS_BEFORE_MESSAGE` (whatever the distance);
    3. no distance -> :data:`STATUS_NO_DISTANCE`;
    4. margin < 0 -> :data:`STATUS_TOO_LITTLE`;
    5. margin < ``little_margin_min`` -> the little-margin text;
    6. otherwise :data:`STATUS_ON_PAPER`.

    Examples
    --------
    >>> b = warning_budget(40.0, 10.0, 5.0, 900.0, 1.0)
    >>> b.minutes_left, b.minutes_needed, b.margin_min
    (30.0, 20.0, 10.0)
    >>> b.status == STATUS_ON_PAPER
    True
    """
    t = _scalar(front_arrival_min, "front_arrival_min")
    delay = _scalar(notification_delay_min, "notification_delay_min")
    prep = _scalar(preparation_min, "preparation_min")
    dist = _scalar(distance_m, "distance_m")
    speed = _scalar(walking_speed_m_s, "walking_speed_m_s")
    little = _scalar(little_margin_min, "little_margin_min")
    for name, value in (
        ("notification_delay_min", delay),
        ("preparation_min", prep),
        ("little_margin_min", little),
    ):
        if not (math.isfinite(value) and value >= 0.0):
            raise InputDataError(
                f"{name} = {value!r} min must be a finite number of minutes, 0 or more"
            )
    if not (math.isfinite(speed) and speed > 0.0):
        raise InputDataError(
            f"walking_speed_m_s = {speed!r} m/s must be a positive number; give a speed above 0"
        )
    if math.isinf(dist) or dist < 0.0:
        raise InputDataError(
            f"distance_m = {dist!r} m must not be negative or infinite; give 0 or more, "
            "or None if not known"
        )
    needed = prep + dist / (speed * 60.0) if math.isfinite(dist) else math.nan
    left = t - delay if math.isfinite(t) else math.nan
    margin = left - needed if math.isfinite(left) and math.isfinite(needed) else math.nan
    if not math.isfinite(t):
        status = STATUS_NO_ARRIVAL
    elif left <= 0.0:
        status = STATUS_BEFORE_MESSAGE
    elif not math.isfinite(dist):
        status = STATUS_NO_DISTANCE
    elif margin < 0.0:
        status = STATUS_TOO_LITTLE
    elif margin < little:
        status = little_margin_status(little)
    else:
        status = STATUS_ON_PAPER
    return Budget(left, needed, margin, status)
