"""Linear dispersion of surface gravity waves: wavenumber, phase and group speed.

Equations
---------
Linear (Airy) waves of angular frequency ``omega = 2 pi / T`` on water of
uniform depth ``h`` obey the dispersion relation

.. math:: \\omega^2 = g k \\tanh(k h)

with wavenumber ``k`` (rad/m) and ``g = G_M_S2`` (standard gravity). From it:

- phase speed ``c = omega / k``;
- group speed ``c_g = n c`` with ``n = (1 + 2 k h / sinh(2 k h)) / 2``;
- deep water (``k h -> inf``): ``k = omega^2 / g``, ``c = g T / (2 pi)``, ``n = 1/2``;
- shallow water (``k h -> 0``): ``c = c_g = sqrt(g h)``, ``n = 1``.

In the dimensionless form used here ``y = k0 h = omega^2 h / g`` (``k0`` is the
deep-water wavenumber) and ``x = k h`` solves ``x tanh(x) = y``.

:func:`wavenumber_rad_m` starts from the explicit approximation of Guo (2002)
and refines it with Newton's method to a relative error below ``1e-10``. The
explicit approximations are also public, for comparison and for speed:

============================  ===================================  ==================
function                      source                               max rel. error in k
============================  ===================================  ==================
:func:`kh_eckart1951`         Eckart (1951)                        4.98 % at y ~ 0.69
:func:`kh_hunt1979`           Hunt (1979), 6-term form             0.186 % at y ~ 2.48
:func:`kh_fenton_mckee1990`   Fenton & McKee (1990)                1.63 % at y ~ 0.34
:func:`kh_guo2002`            Guo (2002)                           0.753 % at y ~ 1.78
============================  ===================================  ==================

The errors were measured in this project against a bracketing root finder
(``scipy.optimize.brentq``) on a logarithmic grid of ``y`` from 1e-4 to 1e3;
``tests/reference/test_dispersion_reference.py`` re-measures them.

Sources
-------
- Shore Protection Manual (1984), 4th ed., U.S. Army Corps of Engineers,
  Coastal Engineering Research Center, Vol. II, Appendix C, Table C-1
  ("Functions of d/L for even increments of d/L0"): the quantities it
  tabulates (``tanh(kh)``, ``n``, ``c_g/c0``) are checked in the tests at
  its depths, against exact roots computed in this project; the printed
  values, edition and publisher are from memory (docs/references.md §1.1).
- Eckart, C. (1951), National Bureau of Standards Circular 521.
- Hunt, J. N. (1979), Journal of the Waterway, Port, Coastal and Ocean
  Division (ASCE) 105(WW4), 457-459; as given in Dean, R. G. and Dalrymple,
  R. A. (1991), *Water Wave Mechanics for Engineers and Scientists*, p. 72.
- Fenton, J. D. and McKee, W. D. (1990), Coastal Engineering 14, 499-513.
- Guo, J. (2002), Coastal Engineering 45, 71-74.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

from ttmap._typing import BoolArray, FloatArray
from ttmap.errors import InputDataError, SolverError
from ttmap.physics.constants import G_M_S2

__all__ = [
    "group_speed_m_s",
    "group_to_phase_ratio",
    "kh_eckart1951",
    "kh_fenton_mckee1990",
    "kh_guo2002",
    "kh_hunt1979",
    "long_wave_speed_m_s",
    "phase_speed_m_s",
    "wavenumber_rad_m",
]

#: Guo (2002) exponent beta.
_GUO_BETA: float = 2.4908

#: Hunt (1979) coefficients d1..d6 of the 6-term form, as given in Dean and
#: Dalrymple (1991), p. 72.
_HUNT_D: tuple[float, ...] = (
    0.6666666666,
    0.3555555555,
    0.1608465608,
    0.0632098765,
    0.0217540484,
    0.0065407983,
)

#: Above this y = k0 h, tanh(kh) == 1 in double precision (tanh(20) = 1 - 8e-18),
#: so kh = y exactly and k = k0 = omega^2 / g.
_DEEP_Y: float = 20.0

#: Below this y, kh = sqrt(y) (1 + y/6 + ...) equals sqrt(y) to double
#: precision, so k = omega / sqrt(g h) exactly (the long-wave limit).
_SHALLOW_Y: float = 1e-16

#: Above this argument, x / sinh(x) and exp(-x) are below 1e-300: treat as 0.
_EXP_CUT: float = 700.0


# ----------------------------------------------------------------------------
# helpers
# ----------------------------------------------------------------------------


def _as_float_array(value: ArrayLike, name: str) -> FloatArray:
    """Convert to a float64 array or raise InputDataError naming *name*."""
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as err:
        raise InputDataError(
            f"{name} could not be read as numbers ({name} = {value!r}); "
            f"pass a float or an array of floats"
        ) from err


def _check_period(period_s: FloatArray) -> None:
    """Raise InputDataError unless every period is finite and > 0."""
    bad = ~(np.isfinite(period_s) & (period_s > 0.0))
    if np.any(bad):
        first = float(period_s[bad].flat[0])
        count = int(np.count_nonzero(bad))
        where = "" if period_s.ndim == 0 else f" ({count} of {period_s.size} values bad)"
        raise InputDataError(
            f"wave period must be positive and finite, got period_s = {first!r}{where}; "
            f"pass the wave period in seconds, greater than 0"
        )


def _check_y(y: ArrayLike) -> tuple[FloatArray, BoolArray]:
    """Return y as float array and the mask where it is finite and > 0."""
    y_arr = _as_float_array(y, "y")
    valid = np.isfinite(y_arr) & (y_arr > 0.0)
    return y_arr, valid


def _scalar_or_array(out: FloatArray) -> FloatArray:
    """Return 0-d results as a numpy float64 scalar, arrays unchanged."""
    return out[()] if out.ndim == 0 else out


def _broadcast(depth_m: ArrayLike, period_s: ArrayLike) -> tuple[FloatArray, FloatArray]:
    """Validate and broadcast depth (any values) and period (finite, > 0)."""
    depth = _as_float_array(depth_m, "depth_m")
    period = _as_float_array(period_s, "period_s")
    _check_period(period)
    try:
        depth_b, period_b = np.broadcast_arrays(depth, period)
    except ValueError as err:
        raise InputDataError(
            f"depth_m shape {depth.shape} and period_s shape {period.shape} do not "
            f"broadcast together; pass arrays of matching shape, or a scalar for either"
        ) from err
    return depth_b, period_b


def _sinh_ratio(kh: FloatArray) -> FloatArray:
    """Return ``2 kh / sinh(2 kh)`` for ``kh >= 0`` without overflow (1 at 0, 0 at inf)."""
    big = kh >= 0.5 * _EXP_CUT
    z = 2.0 * np.minimum(kh, 0.5 * _EXP_CUT)
    small = z < 1e-4
    z_safe = np.where(small, 1.0, z)
    # z / sinh z = 2 z e^-z / (1 - e^-2z); series 1 - z^2/6 + 7 z^4/360 near 0.
    ratio = 2.0 * z_safe * np.exp(-z_safe) / -np.expm1(-2.0 * z_safe)
    series = 1.0 - z * z / 6.0 + 7.0 * z**4 / 360.0
    return np.where(big, 0.0, np.where(small, series, ratio))


def _solve_kh(y: FloatArray, rtol: float, max_iter: int) -> FloatArray:
    """Newton solve of ``x tanh x = y`` for a 1-D array of finite ``y > 0``."""
    x = np.asarray(kh_guo2002(y), dtype=np.float64)
    if x.size == 0:
        return x
    worst = math.inf
    for _ in range(max_iter):
        t = np.tanh(x)
        e = np.exp(-2.0 * np.minimum(x, 0.5 * _EXP_CUT))
        sech2 = 4.0 * e / (1.0 + e) ** 2
        step = (x * t - y) / (t + x * sech2)
        x = x - step
        worst = float(np.max(np.abs(step) / x))
        if worst <= rtol:
            return x
    raise SolverError(
        f"Newton iteration for kh did not reach rtol = {rtol!r} within "
        f"max_iter = {max_iter} steps (largest relative step {worst:.3g}); "
        f"raise max_iter or loosen rtol"
    )


def _dispersion(
    depth_m: ArrayLike, period_s: ArrayLike, rtol: float, max_iter: int
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Return broadcast ``(k_rad_m, kh, omega_rad_s)``; NaN where depth is unusable."""
    if isinstance(max_iter, bool) or not (
        isinstance(max_iter, (int, np.integer)) and max_iter >= 1
    ):
        raise InputDataError(
            f"max_iter must be a positive integer, got max_iter = {max_iter!r}; pass e.g. 20"
        )
    if not (math.isfinite(rtol) and rtol > 0.0):
        raise InputDataError(
            f"rtol must be positive and finite, got rtol = {rtol!r}; pass e.g. 1e-10"
        )
    depth, period = _broadcast(depth_m, period_s)
    omega = 2.0 * np.pi / period
    k = np.full(depth.shape, np.nan)
    kh = np.full(depth.shape, np.nan)
    wet = np.isfinite(depth) & (depth > 0.0)

    h = depth[wet]
    w = omega[wet]
    # Extreme (unphysical) periods or depths may over- or underflow here; the
    # results then saturate at the correct deep- or shallow-water limit.
    with np.errstate(over="ignore", under="ignore"):
        k0 = w * w / G_M_S2
        y = k0 * h

    deep = y >= _DEEP_Y
    shallow = y < _SHALLOW_Y
    mid = ~(deep | shallow)

    k_wet = np.empty_like(h)
    kh_wet = np.empty_like(h)
    k_wet[deep] = k0[deep]
    kh_wet[deep] = y[deep]
    k_wet[shallow] = w[shallow] / np.sqrt(G_M_S2 * h[shallow])
    kh_wet[shallow] = np.sqrt(y[shallow])
    x_mid = _solve_kh(y[mid], rtol, max_iter)
    k_wet[mid] = x_mid / h[mid]
    kh_wet[mid] = x_mid

    k[wet] = k_wet
    kh[wet] = kh_wet
    return k, kh, omega


# ----------------------------------------------------------------------------
# speeds and wavenumber
# ----------------------------------------------------------------------------


def long_wave_speed_m_s(depth_m: ArrayLike) -> FloatArray:
    """Long-wave (shallow-water) speed ``sqrt(g h)``.

    Parameters
    ----------
    depth_m : float or ndarray of any shape, float, metres, positive down
        Water depth.

    Returns
    -------
    speed_m_s : float64 or ndarray of the same shape, m/s
        ``sqrt(G_M_S2 * depth_m)``; NaN where the depth is <= 0 (land) or
        not finite.

    Examples
    --------
    >>> round(float(long_wave_speed_m_s(4000.0)), 1)
    198.1
    >>> long_wave_speed_m_s([100.0, 0.0, -5.0, np.nan]).round(2)
    array([31.32,   nan,   nan,   nan])
    """
    depth = _as_float_array(depth_m, "depth_m")
    wet = np.isfinite(depth) & (depth > 0.0)
    out = np.full(depth.shape, np.nan)
    out[wet] = np.sqrt(G_M_S2 * depth[wet])
    return _scalar_or_array(out)


def wavenumber_rad_m(
    depth_m: ArrayLike,
    period_s: ArrayLike,
    *,
    rtol: float = 1e-10,
    max_iter: int = 20,
) -> FloatArray:
    """Wavenumber ``k`` solving ``omega^2 = g k tanh(k h)``.

    Parameters
    ----------
    depth_m : float or ndarray, float, metres, positive down
        Water depth. Broadcast against ``period_s``.
    period_s : float or ndarray, float, seconds
        Wave period ``T``; ``omega = 2 pi / T``. Must be finite and > 0.
    rtol : float, optional
        Newton stops once every relative step is ``<= rtol``. The final
        error is then far below ``rtol`` (quadratic convergence).
    max_iter : int, optional
        Maximum number of Newton steps. From the Guo (2002) start three
        steps reach a relative error of about 1e-15; a fourth confirms
        convergence at the default ``rtol``.

    Returns
    -------
    k_rad_m : float64 or ndarray of the broadcast shape, rad/m
        NaN where the depth is <= 0 (land) or not finite.

    Raises
    ------
    InputDataError
        If a period is not finite or <= 0, the shapes do not broadcast, or
        ``rtol``/``max_iter`` are invalid.
    SolverError
        If Newton does not reach ``rtol`` within ``max_iter`` steps.

    Notes
    -----
    With ``y = omega^2 h / g`` and ``x = k h``: for ``y >= 20`` ``tanh(x)``
    is 1 in double precision and ``k = omega^2 / g`` exactly; for
    ``y < 1e-16`` ``k = omega / sqrt(g h)`` exactly; in between ``x`` starts
    from :func:`kh_guo2002` and Newton's method on ``x tanh x - y`` refines
    it. All cells are iterated together.

    Examples
    --------
    >>> k = wavenumber_rad_m(4000.0, 600.0)
    >>> round(2 * np.pi / float(k) / 1000, 1)  # wavelength, km
    117.9
    >>> wavenumber_rad_m([10.0, -1.0], 8.0).round(5)
    array([0.08864,     nan])
    """
    k, _, _ = _dispersion(depth_m, period_s, rtol, max_iter)
    return _scalar_or_array(k)


def phase_speed_m_s(
    depth_m: ArrayLike,
    period_s: ArrayLike,
    *,
    rtol: float = 1e-10,
    max_iter: int = 20,
) -> FloatArray:
    """Phase speed ``c = omega / k`` of linear waves.

    Parameters
    ----------
    depth_m : float or ndarray, float, metres, positive down
        Water depth. Broadcast against ``period_s``.
    period_s : float or ndarray, float, seconds
        Wave period, finite and > 0.
    rtol, max_iter
        Passed to :func:`wavenumber_rad_m`.

    Returns
    -------
    speed_m_s : float64 or ndarray of the broadcast shape, m/s
        NaN where the depth is <= 0 (land) or not finite.

    Raises
    ------
    InputDataError
        As :func:`wavenumber_rad_m`.

    Examples
    --------
    >>> c = phase_speed_m_s(4000.0, 300.0)
    >>> round(float(c / long_wave_speed_m_s(4000.0)), 4)
    0.9701
    >>> round(float(phase_speed_m_s(10000.0, 10.0)), 3)  # deep: g T / (2 pi)
    15.608
    """
    k, _, omega = _dispersion(depth_m, period_s, rtol, max_iter)
    return _scalar_or_array(omega / k)


def group_to_phase_ratio(kh: ArrayLike) -> FloatArray:
    """Ratio ``n = c_g / c = (1 + 2 k h / sinh(2 k h)) / 2``.

    Parameters
    ----------
    kh : float or ndarray, float, dimensionless
        Relative depth ``k h``; must be >= 0 (``inf`` gives 1/2).

    Returns
    -------
    n : float64 or ndarray of the same shape
        1 in the shallow limit, 1/2 in the deep limit; NaN where ``kh`` is
        negative or NaN. Computed without overflow for any ``kh``.

    Examples
    --------
    >>> group_to_phase_ratio([0.0, 0.885808, 50.0, np.inf]).round(6)
    array([1.     , 0.81025, 0.5    , 0.5    ])
    """
    x = _as_float_array(kh, "kh")
    ok = x >= 0.0  # False for NaN
    x_ok = np.where(ok, x, 0.0)
    n = 0.5 * (1.0 + _sinh_ratio(x_ok))
    return _scalar_or_array(np.where(ok, n, np.nan))


def group_speed_m_s(
    depth_m: ArrayLike,
    period_s: ArrayLike,
    *,
    rtol: float = 1e-10,
    max_iter: int = 20,
) -> FloatArray:
    """Group (energy) speed ``c_g = n c`` of linear waves.

    Parameters
    ----------
    depth_m : float or ndarray, float, metres, positive down
        Water depth. Broadcast against ``period_s``.
    period_s : float or ndarray, float, seconds
        Wave period, finite and > 0.
    rtol, max_iter
        Passed to :func:`wavenumber_rad_m`.

    Returns
    -------
    speed_m_s : float64 or ndarray of the broadcast shape, m/s
        NaN where the depth is <= 0 (land) or not finite.

    Raises
    ------
    InputDataError
        As :func:`wavenumber_rad_m`.

    Notes
    -----
    ``2 k h / sinh(2 k h)`` is evaluated as ``4 kh e^(-2kh) / (1 - e^(-4kh))``
    so that it tends to 0 in deep water without overflow.

    Examples
    --------
    >>> cg = group_speed_m_s(4000.0, 300.0)
    >>> round(float(cg / long_wave_speed_m_s(4000.0)), 4)
    0.9137
    """
    k, kh, omega = _dispersion(depth_m, period_s, rtol, max_iter)
    wet = np.isfinite(kh)
    n = np.full(kh.shape, np.nan)
    n[wet] = 0.5 * (1.0 + _sinh_ratio(kh[wet]))
    return _scalar_or_array(n * omega / k)


# ----------------------------------------------------------------------------
# explicit approximations, functions of y = k0 h = omega^2 h / g
# ----------------------------------------------------------------------------


def kh_eckart1951(y: ArrayLike) -> FloatArray:
    """Eckart's explicit approximation ``kh = y / sqrt(tanh y)``.

    Parameters
    ----------
    y : float or ndarray, float, dimensionless
        Deep-water relative depth ``k0 h = omega^2 h / g``.

    Returns
    -------
    kh : float64 or ndarray of the same shape
        Approximate ``k h``; NaN where ``y`` is <= 0 or not finite.

    Notes
    -----
    Maximum relative error in ``k``: 4.98 % near ``y = 0.69``, measured in
    this project; the stated error is about 5 % (from memory).

    References
    ----------
    Eckart, C. (1951). National Bureau of Standards Circular 521.

    Examples
    --------
    >>> round(float(kh_eckart1951(1.0)), 4)  # exact root: 1.1997
    1.1459
    """
    y_arr, valid = _check_y(y)
    y_ok = np.where(valid, y_arr, 1.0)
    kh = y_ok / np.sqrt(np.tanh(y_ok))
    return _scalar_or_array(np.where(valid, kh, np.nan))


def kh_hunt1979(y: ArrayLike) -> FloatArray:
    """Hunt's explicit approximation, 6-term form.

    ``(kh)^2 = y^2 + y / (1 + sum_{n=1..6} d_n y^n)`` with
    ``d = 0.6666666666, 0.3555555555, 0.1608465608, 0.0632098765,
    0.0217540484, 0.0065407983``.

    Parameters
    ----------
    y : float or ndarray, float, dimensionless
        Deep-water relative depth ``k0 h = omega^2 h / g``.

    Returns
    -------
    kh : float64 or ndarray of the same shape
        Approximate ``k h``; NaN where ``y`` is <= 0 or not finite.

    Notes
    -----
    Maximum relative error in ``k``: 0.186 % near ``y = 2.48``, measured in
    this project. The stated error of 0.1 % (from memory) could not be
    reproduced for the 6-term form; it may refer to the 9-term form.
    Evaluated as ``sqrt(y) sqrt(y + 1/P(y))`` to avoid overflow.

    References
    ----------
    Hunt, J. N. (1979). Journal of the Waterway, Port, Coastal and Ocean
    Division (ASCE) 105(WW4), 457-459. Coefficients as given in Dean, R. G.
    and Dalrymple, R. A. (1991), *Water Wave Mechanics for Engineers and
    Scientists*, p. 72.

    Examples
    --------
    >>> round(float(kh_hunt1979(1.0)), 4)  # exact root: 1.1997
    1.1999
    """
    y_arr, valid = _check_y(y)
    y_ok = np.where(valid, y_arr, 1.0)
    y_c = np.minimum(y_ok, 1e40)  # P(y) ~ y^6; beyond this 1/P is negligible
    poly = np.zeros_like(y_c)
    for d_n in reversed(_HUNT_D):
        poly = (poly + d_n) * y_c
    poly = 1.0 + poly  # 1 + d1 y + ... + d6 y^6 (Horner)
    kh = np.sqrt(y_ok) * np.sqrt(y_ok + 1.0 / poly)
    return _scalar_or_array(np.where(valid, kh, np.nan))


def kh_fenton_mckee1990(y: ArrayLike) -> FloatArray:
    """Fenton and McKee's explicit approximation ``kh = y / tanh(y^(3/4))^(2/3)``.

    Equivalent to ``L = L0 tanh((omega sqrt(h/g))^(3/2))^(2/3)``.

    Parameters
    ----------
    y : float or ndarray, float, dimensionless
        Deep-water relative depth ``k0 h = omega^2 h / g``.

    Returns
    -------
    kh : float64 or ndarray of the same shape
        Approximate ``k h``; NaN where ``y`` is <= 0 or not finite.

    Notes
    -----
    Maximum relative error in ``k``: 1.63 % near ``y = 0.34``, measured in
    this project; the stated error is about 1.7 % (from memory).

    References
    ----------
    Fenton, J. D. and McKee, W. D. (1990). Coastal Engineering 14, 499-513.

    Examples
    --------
    >>> round(float(kh_fenton_mckee1990(1.0)), 4)  # exact root: 1.1997
    1.1991
    """
    y_arr, valid = _check_y(y)
    y_ok = np.where(valid, y_arr, 1.0)
    kh = y_ok / np.tanh(y_ok**0.75) ** (2.0 / 3.0)
    return _scalar_or_array(np.where(valid, kh, np.nan))


def kh_guo2002(y: ArrayLike) -> FloatArray:
    """Guo's explicit approximation ``kh = y (1 - exp(-y^(beta/2)))^(-1/beta)``.

    ``beta = 2.4908``.

    Parameters
    ----------
    y : float or ndarray, float, dimensionless
        Deep-water relative depth ``k0 h = omega^2 h / g``.

    Returns
    -------
    kh : float64 or ndarray of the same shape
        Approximate ``k h``; NaN where ``y`` is <= 0 or not finite.

    Notes
    -----
    Maximum relative error in ``k``: 0.753 % near ``y = 1.78``, measured in
    this project; the published abstract states 0.75 %, which confirms the
    value of beta. Evaluated as ``sqrt(y) (s / (1 - e^-s))^(1/beta)`` with
    ``s = y^(beta/2)``, which stays finite for tiny ``y``; for ``y > 1e3``
    the formula equals ``y`` in double precision.

    References
    ----------
    Guo, J. (2002). Coastal Engineering 45, 71-74.

    Examples
    --------
    >>> round(float(kh_guo2002(1.0)), 4)  # exact root: 1.1997
    1.2022
    >>> kh_guo2002([0.0, 1e4]).tolist()
    [nan, 10000.0]
    """
    y_arr, valid = _check_y(y)
    y_ok = np.where(valid, y_arr, 1.0)
    y_c = np.minimum(y_ok, 1e3)
    s = y_c ** (0.5 * _GUO_BETA)
    tiny = s < 1e-12
    s_safe = np.where(tiny, 1.0, s)
    # s / (1 - e^-s): 1 + s/2 for tiny s, -> s for large s (e^-s -> 0).
    ratio = np.where(tiny, 1.0 + 0.5 * s, s_safe / -np.expm1(-np.minimum(s_safe, _EXP_CUT)))
    kh = np.where(y_ok > 1e3, y_ok, np.sqrt(y_c) * ratio ** (1.0 / _GUO_BETA))
    return _scalar_or_array(np.where(valid, kh, np.nan))
