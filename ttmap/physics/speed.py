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

from ttmap.defaults import FLOOR_DEPTH_M
from ttmap._typing import BoolArray, FloatArray
from ttmap.errors import InputDataError
from ttmap.physics.constants import G_M_S2, SEAWATER_SOUND_SPEED_M_S
from ttmap.physics.dispersion import group_speed_m_s, phase_speed_m_s

__all__ = [
    "SPEED_MODES",
    "floor_depth",
    "far_field_effective_depth_m",
    "wave_speed_m_s",
    "water_speed_m_s",
    "check_speed_options",
]

#: Accepted speed modes.
SPEED_MODES: tuple[str, ...] = ("long-wave", "group", "phase")


def floor_depth(depth_m: Any, floor_depth_m: float = FLOOR_DEPTH_M) -> FloatArray:
    """Raise water shallower than ``floor_depth_m`` to that depth.

    Land (depth <= 0) and NaN are returned unchanged.

    Examples
    --------
    >>> floor_depth([-3.0, 0.5, 12.0, np.nan], 5.0).tolist()
    [-3.0, 5.0, 12.0, nan]
    """
    _check_floor_depth(floor_depth_m)
    d = np.array(depth_m, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        np.maximum(d, floor_depth_m, out=d, where=d > 0.0)
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
    floor_depth_m: float = FLOOR_DEPTH_M,
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
    check_speed_options(mode, period_s, floor_depth_m)
    d = floor_depth(depth_m, floor_depth_m)
    with np.errstate(invalid="ignore"):
        np.copyto(d, np.nan, where=~(np.isfinite(d) & (d > 0.0)))
    return _water_speed_m_s(d, mode=mode, period_s=period_s, far_field=far_field)


def check_speed_options(mode: str, period_s: float | None, floor_depth_m: float) -> None:
    """Raise :class:`InputDataError` for an unknown mode, a period that does not fit the
    mode, or a floor depth that is not a positive number of metres.

    Examples
    --------
    >>> check_speed_options("group", 300.0, 5.0)  # fine: returns None
    """
    if mode not in SPEED_MODES:
        raise InputDataError(f"speed mode {mode!r} is unknown; choose one of {', '.join(SPEED_MODES)}")
    _check_floor_depth(floor_depth_m)
    if mode == "long-wave":
        if period_s is not None:
            raise InputDataError(
                f"a wave period ({period_s} s) only applies to the group and phase speed modes; "
                "drop it or choose mode 'group'"
            )
    elif period_s is None:
        raise InputDataError(f"speed mode {mode!r} needs a wave period; give period_s (seconds)")


def _check_floor_depth(floor_depth_m: float) -> None:
    if not np.isfinite(floor_depth_m) or floor_depth_m <= 0.0:
        raise InputDataError(f"floor depth {floor_depth_m!r} m must be a positive number of metres")


def water_speed_m_s(
    depth_m: FloatArray,
    *,
    land: BoolArray | None = None,
    mode: str = "long-wave",
    period_s: float | None = None,
    far_field: bool = False,
    out: FloatArray | None = None,
) -> FloatArray:
    """Wave speed of depths already raised to the floor depth: the engine's fast path.

    :func:`wave_speed_m_s` without the floor depth, the land test and the
    copies they make: the long-wave speed takes one pass into one new array.
    The options are assumed checked (:func:`check_speed_options`).

    Parameters
    ----------
    depth_m : ndarray, float64, metres, positive down
        Water depths, at least the floor depth on water. Not modified.
    land : ndarray of the same shape, bool, optional
        Cells that get NaN whatever their depth; without it, ``depth_m``
        must be NaN (or <= 0) on land.
    mode, period_s, far_field
        As for :func:`wave_speed_m_s`.
    out : ndarray, float64, optional
        Where to write the speeds; may be ``depth_m`` itself (in place).

    Returns
    -------
    ndarray, float64, m/s
        ``out``, or a new array of the shape of ``depth_m``; NaN on land. Bit
        for bit the values of :func:`wave_speed_m_s` on water.

    Examples
    --------
    >>> water_speed_m_s(np.array([4000.0, -3.0])).round(2).tolist()
    [198.06, nan]
    """
    d = np.asarray(depth_m, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        if mode == "long-wave" and not far_field:
            out = np.multiply(d, G_M_S2, out=out)
            np.sqrt(out, out=out)  # sqrt(g h) as long_wave_speed_m_s computes it; land: NaN
        else:
            w = np.where(d > 0.0, d, np.nan)
            if land is not None:
                np.copyto(w, np.nan, where=land)
            c = _water_speed_m_s(w, mode=mode, period_s=period_s, far_field=far_field)
            if out is None:
                out = c
            else:
                out[...] = c
    if land is not None:
        np.copyto(out, np.nan, where=land)
    return out


def _water_speed_m_s(
    d: FloatArray, *, mode: str, period_s: float | None, far_field: bool
) -> FloatArray:
    if far_field:
        d = far_field_effective_depth_m(d)
    if mode == "long-wave":
        # sqrt(g h) element by element, as long_wave_speed_m_s computes it; NaN stays NaN.
        np.multiply(d, G_M_S2, out=d)
        np.sqrt(d, out=d)
        return d[()] if d.ndim == 0 else d
    assert period_s is not None  # checked by check_speed_options
    if mode == "group":
        return np.asarray(group_speed_m_s(d, period_s), dtype=np.float64)
    return np.asarray(phase_speed_m_s(d, period_s), dtype=np.float64)
