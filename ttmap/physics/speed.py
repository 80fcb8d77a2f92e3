"""Wave speed from depth: floor depth, far-field correction and speed modes.

Pure numpy. Input depth is positive down in metres; cells with depth <= 0 or
NaN are land (barriers) and get NaN speed.

Speed modes
-----------
``"long-wave"``
    ``c0 = sqrt(g h)``: the fastest any part of a long-wave signal travels, so
    it gives the earliest arrival (the front).
``"group"``
    Group speed ``cg(h, T)`` of linear dispersion ``omega^2 = g k tanh(k h)``:
    the arrival of the energy of waves of period ``T``.
``"phase"``
    Phase speed ``cp(h, T) = omega / k`` of period ``T``.

Floor depth
-----------
Water shallower than ``floor_depth_m`` is given that depth. Gridded depths
within a few metres of the shoreline are dominated by vertical-datum and tide
offsets and by interpolation between survey and land data, and the speed there
(3 m/s at 1 m) would let a single coastal cell add minutes of spurious delay.
The default of 5 m (speed 7.0 m/s) lets the front reach every coastal water
cell and errs towards earlier arrival, the safe side for planning. This value
is common practice, with no published source.

Far-field correction
--------------------
Observed trans-oceanic arrivals run 1-2 % later than long-wave predictions
(Inazu & Saito 2013, Earth Planets Space 65:835-842; Watada, Kusumoto & Satake
2014, J. Geophys. Res. Solid Earth 119, doi:10.1002/2013JB010841), mainly from
seawater compressibility and the elastic Earth. Wang (2015, Science of
Tsunami Hazards 34(1)) parameterises this with an effective depth. We use the
form ``h_eff = h (1 - g h / c_s^2)`` with ``c_s = 1500 m/s``, which reproduces
the reductions quoted there (about 2.5 % of depth at 6000 m, below 0.1 % at
200 m); the speed falls by about ``g h / (2 c_s^2)``: 0.87 % at 4000 m. The
functional form is our fit to those quoted numbers, not a formula copied from
the paper. Off by default.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ttmap._typing import FloatArray
from ttmap.errors import InputDataError
from ttmap.physics.constants import G_M_S2, SEAWATER_SOUND_SPEED_M_S
from ttmap.physics.dispersion import group_speed_m_s, long_wave_speed_m_s, phase_speed_m_s

__all__ = [
    "DEFAULT_FLOOR_DEPTH_M",
    "SPEED_MODES",
    "floor_depth",
    "far_field_effective_depth_m",
    "wave_speed_m_s",
]

#: Default floor depth in metres (see module notes; common practice).
DEFAULT_FLOOR_DEPTH_M: float = 5.0

#: Accepted speed modes.
SPEED_MODES: tuple[str, ...] = ("long-wave", "group", "phase")


def floor_depth(depth_m: Any, floor_depth_m: float = DEFAULT_FLOOR_DEPTH_M) -> FloatArray:
    """Raise water shallower than ``floor_depth_m`` to that depth.

    Land (depth <= 0) and NaN are returned unchanged.

    Examples
    --------
    >>> floor_depth([-3.0, 0.5, 12.0, np.nan], 5.0).tolist()
    [-3.0, 5.0, 12.0, nan]
    """
    if not np.isfinite(floor_depth_m) or floor_depth_m <= 0.0:
        raise InputDataError(f"floor depth {floor_depth_m!r} m must be a positive number of metres")
    d = np.array(depth_m, dtype=np.float64)
    shallow = (d > 0.0) & (d < floor_depth_m)
    d[shallow] = floor_depth_m
    return d


def far_field_effective_depth_m(
    depth_m: Any, sound_speed_m_s: float = SEAWATER_SOUND_SPEED_M_S
) -> FloatArray:
    """Effective depth ``h (1 - g h / c_s^2)`` for the optional far-field slowdown.

    See the module notes for the sources (Wang 2015; Watada et al. 2014).

    Examples
    --------
    >>> round(float(far_field_effective_depth_m(6000.0) / 6000.0), 4)
    0.9738
    """
    d = np.asarray(depth_m, dtype=np.float64)
    return np.asarray(d * (1.0 - G_M_S2 * d / sound_speed_m_s**2), dtype=np.float64)


def wave_speed_m_s(
    depth_m: Any,
    *,
    mode: str = "long-wave",
    period_s: float | None = None,
    floor_depth_m: float = DEFAULT_FLOOR_DEPTH_M,
    far_field: bool = False,
) -> FloatArray:
    """Wave speed of every cell, NaN on land.

    Parameters
    ----------
    depth_m : array_like, float, metres, positive down
        Land is depth <= 0 or NaN.
    mode : {"long-wave", "group", "phase"}
        Which speed (see module notes).
    period_s : float, optional
        Wave period in seconds; required for "group" and "phase".
    floor_depth_m : float
        Shallower water is given this depth.
    far_field : bool
        Apply the effective-depth far-field slowdown (off by default).

    Returns
    -------
    ndarray, float64, m/s
        Same shape as ``depth_m``; NaN on land.

    Examples
    --------
    >>> round(float(wave_speed_m_s(4000.0)), 2)
    198.06
    >>> round(float(wave_speed_m_s(4000.0, mode="group", period_s=300.0) / 198.06), 3)
    0.914
    """
    if mode not in SPEED_MODES:
        raise InputDataError(f"speed mode {mode!r} is unknown; choose one of {', '.join(SPEED_MODES)}")
    d = floor_depth(depth_m, floor_depth_m)
    d = np.where(d > 0.0, d, np.nan)
    if far_field:
        d = far_field_effective_depth_m(d)
    if mode == "long-wave":
        if period_s is not None:
            raise InputDataError(
                f"a wave period ({period_s} s) only applies to the group and phase speed modes; "
                "drop it or choose mode 'group'"
            )
        return long_wave_speed_m_s(d)
    if period_s is None:
        raise InputDataError(f"speed mode {mode!r} needs a wave period; give period_s (seconds)")
    if mode == "group":
        return np.asarray(group_speed_m_s(d, period_s), dtype=np.float64)
    return np.asarray(phase_speed_m_s(d, period_s), dtype=np.float64)
