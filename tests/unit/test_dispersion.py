"""Unit tests of ttmap.physics.dispersion: shapes, land, errors, warnings, limits of the code.

Published check values live in tests/reference/test_dispersion_reference.py.
"""

from __future__ import annotations

import doctest
import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose

from ttmap.errors import InputDataError, SolverError
from ttmap.physics import dispersion
from ttmap.physics.constants import G_M_S2
from ttmap.physics.dispersion import (
    group_speed_m_s,
    group_to_phase_ratio,
    kh_eckart1951,
    kh_fenton_mckee1990,
    kh_guo2002,
    kh_hunt1979,
    long_wave_speed_m_s,
    phase_speed_m_s,
    wavenumber_rad_m,
)

SPEED_FUNCS = [wavenumber_rad_m, phase_speed_m_s, group_speed_m_s]
APPROX_FUNCS = [kh_eckart1951, kh_hunt1979, kh_fenton_mckee1990, kh_guo2002]


# --- shapes and broadcasting ---------------------------------------------------------


@pytest.mark.parametrize("func", SPEED_FUNCS)
def test_broadcasts_depth_against_period(func):
    depth_m = np.array([[10.0], [100.0], [4000.0]])
    period_s = np.array([5.0, 60.0, 600.0, 3600.0])
    out = func(depth_m, period_s)
    assert out.shape == (3, 4)
    assert out.dtype == np.float64
    # Each entry equals the scalar call.
    assert_allclose(out[2, 1], func(4000.0, 60.0), rtol=0, atol=0)


@pytest.mark.parametrize("func", SPEED_FUNCS)
def test_scalar_in_gives_numpy_float_out(func):
    out = func(100.0, 10.0)
    assert isinstance(out, np.float64)


@pytest.mark.parametrize("func", [long_wave_speed_m_s, *APPROX_FUNCS, group_to_phase_ratio])
def test_single_argument_functions_keep_shape(func):
    x = np.linspace(0.5, 50.0, 12).reshape(3, 4)
    out = func(x)
    assert out.shape == (3, 4)
    assert out.dtype == np.float64
    assert isinstance(func(2.0), np.float64)


def test_inputs_are_not_modified():
    depth_m = np.array([-5.0, 0.0, 10.0, 5000.0])
    period_s = np.array([10.0, 10.0, 10.0, 10.0])
    depth_copy, period_copy = depth_m.copy(), period_s.copy()
    group_speed_m_s(depth_m, period_s)
    long_wave_speed_m_s(depth_m)
    assert_allclose(depth_m, depth_copy, rtol=0, atol=0)
    assert_allclose(period_s, period_copy, rtol=0, atol=0)


def test_integer_and_list_inputs_are_accepted():
    assert_allclose(
        wavenumber_rad_m([10, 100], 8), wavenumber_rad_m(np.array([10.0, 100.0]), 8.0), rtol=0
    )


def test_shapes_that_do_not_broadcast_raise():
    with pytest.raises(InputDataError, match=r"depth_m shape \(3,\) and period_s shape \(2,\)"):
        wavenumber_rad_m(np.ones(3), np.ones(2))


# --- land and missing depth -----------------------------------------------------------


@pytest.mark.parametrize("func", SPEED_FUNCS)
def test_nan_on_land_and_missing_depth(func):
    depth_m = np.array([-100.0, 0.0, np.nan, np.inf, -np.inf, 50.0])
    out = func(depth_m, 20.0)
    assert np.isnan(out[:5]).all()
    assert np.isfinite(out[5]) and out[5] > 0


def test_long_wave_speed_nan_on_land():
    out = long_wave_speed_m_s(np.array([-1.0, 0.0, np.nan, np.inf, 1.0]))
    assert np.isnan(out[:4]).all()
    assert_allclose(out[4], np.sqrt(G_M_S2), rtol=1e-15)


@pytest.mark.parametrize("func", APPROX_FUNCS)
def test_approximations_nan_outside_domain(func):
    out = func(np.array([-1.0, 0.0, np.nan, np.inf, 1.0]))
    assert np.isnan(out[:4]).all()
    assert np.isfinite(out[4])


def test_group_to_phase_ratio_limits_and_domain():
    out = group_to_phase_ratio(np.array([0.0, 1e-300, 1e-6, 400.0, 1e300, np.inf, -1.0, np.nan]))
    assert_allclose(out[:3], 1.0, rtol=0, atol=1e-12)
    assert_allclose(out[3:6], 0.5, rtol=0, atol=1e-15)
    assert np.isnan(out[6:]).all()


def test_group_to_phase_ratio_continuous_across_series_switch():
    # The small-argument series takes over at 2 kh = 1e-4; both sides must agree.
    kh = np.array([0.5e-4 * (1 - 1e-9), 0.5e-4 * (1 + 1e-9)])
    n = group_to_phase_ratio(kh)
    assert abs(n[0] - n[1]) < 1e-15
    assert_allclose(n, 1.0 - kh**2 / 3.0, rtol=1e-15)


# --- period and option errors ------------------------------------------------------------


@pytest.mark.parametrize("func", SPEED_FUNCS)
@pytest.mark.parametrize("bad", [0.0, -12.0, np.nan, np.inf])
def test_bad_period_names_value_and_fix(func, bad):
    with pytest.raises(
        InputDataError,
        match=r"wave period must be positive and finite.*"
        r"period_s = .*greater than 0",
    ):
        func(100.0, bad)


def test_bad_period_in_array_reports_first_value_and_count():
    with pytest.raises(InputDataError, match=r"period_s = -3\.0 \(2 of 4 values bad\)"):
        wavenumber_rad_m(100.0, np.array([10.0, -3.0, 20.0, 0.0]))


def test_bad_period_is_a_value_error():
    with pytest.raises(ValueError):
        phase_speed_m_s(100.0, 0.0)


def test_non_numeric_input_raises_input_data_error():
    with pytest.raises(InputDataError, match=r"depth_m could not be read as numbers"):
        wavenumber_rad_m("deep", 10.0)


@pytest.mark.parametrize(
    ("kwargs", "pattern"),
    [
        ({"rtol": 0.0}, r"rtol must be positive and finite, got rtol = 0\.0"),
        ({"rtol": np.nan}, r"rtol must be positive and finite"),
        ({"max_iter": 0}, r"max_iter must be a positive integer, got max_iter = 0"),
        ({"max_iter": 2.5}, r"max_iter must be a positive integer"),
        ({"max_iter": True}, r"max_iter must be a positive integer"),
    ],
)
def test_bad_solver_options(kwargs, pattern):
    with pytest.raises(InputDataError, match=pattern):
        wavenumber_rad_m(100.0, 10.0, **kwargs)


def test_too_few_newton_steps_raise_solver_error():
    # One Newton step from the Guo start leaves a relative step of about 1e-5 (> rtol).
    with pytest.raises(SolverError, match=r"did not reach rtol = 1e-10 within max_iter = 1"):
        wavenumber_rad_m(100.0, 10.0, max_iter=1)


def test_default_rtol_converges_within_four_newton_steps():
    # From the Guo start three steps reach ~1e-15 and the fourth step confirms it.
    y = np.logspace(-10, np.log10(19.9), 500)
    period_s = 10.0
    omega = 2 * np.pi / period_s
    depth_m = y * G_M_S2 / omega**2
    assert_allclose(
        wavenumber_rad_m(depth_m, period_s, max_iter=4),
        wavenumber_rad_m(depth_m, period_s),
        rtol=0,
        atol=0,
    )


# --- no floating-point warnings, extreme but positive inputs ----------------------------


def _assert_quiet(call):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with np.errstate(over="raise", divide="raise", invalid="raise"):
            return call()


def test_no_warnings_for_huge_and_tiny_depths():
    depth_m = np.logspace(-300, 300, 601)[:, None]
    period_s = np.array([1e-3, 1.0, 10.0, 600.0, 1e5, 1e7])
    for func in SPEED_FUNCS:
        out = _assert_quiet(lambda f=func: f(depth_m, period_s))
        assert np.isfinite(out).all() and (out > 0).all()


def test_no_warnings_for_land_values():
    depth_m = np.array([-1e300, -1.0, 0.0, np.nan, np.inf, -np.inf, 1.0])
    for func in SPEED_FUNCS:
        _assert_quiet(lambda f=func: f(depth_m, 10.0))
    _assert_quiet(lambda: long_wave_speed_m_s(depth_m))


@pytest.mark.parametrize("func", [*APPROX_FUNCS, group_to_phase_ratio])
def test_no_warnings_for_extreme_arguments(func):
    x = np.concatenate([np.logspace(-323, 308, 3000), [np.finfo(float).max]])
    out = _assert_quiet(lambda: func(x))
    assert np.isfinite(out).all()


def test_extremes_reach_the_right_limits():
    period_s = 10.0
    # Tiny depth: long-wave speed exactly.
    assert_allclose(phase_speed_m_s(1e-300, period_s), np.sqrt(G_M_S2 * 1e-300), rtol=1e-15)
    assert_allclose(group_speed_m_s(1e-300, period_s), np.sqrt(G_M_S2 * 1e-300), rtol=1e-15)
    # Huge depth: deep-water speeds.
    c0 = G_M_S2 * period_s / (2 * np.pi)
    assert_allclose(phase_speed_m_s(1e300, period_s), c0, rtol=1e-15)
    assert_allclose(group_speed_m_s(1e300, period_s), c0 / 2, rtol=1e-15)


def test_continuous_across_deep_and_shallow_shortcuts():
    # Above y = 20 k = omega^2/g is used directly, below y = 1e-16 k = omega/sqrt(gh).
    period_s = 10.0
    omega = 2 * np.pi / period_s
    for y_switch in (20.0, 1e-16):
        y = y_switch * np.array([1 - 1e-9, 1 + 1e-9])
        kh = wavenumber_rad_m(y * G_M_S2 / omega**2, period_s) * (y * G_M_S2 / omega**2)
        assert_allclose(kh[0], kh[1], rtol=2e-9)


# --- consistency between the functions ---------------------------------------------------


def test_speeds_are_consistent_with_wavenumber():
    depth_m = np.geomspace(0.1, 8000.0, 50)
    period_s = 45.0
    omega = 2 * np.pi / period_s
    k = wavenumber_rad_m(depth_m, period_s)
    c = phase_speed_m_s(depth_m, period_s)
    cg = group_speed_m_s(depth_m, period_s)
    assert_allclose(omega**2, G_M_S2 * k * np.tanh(k * depth_m), rtol=1e-13)
    assert_allclose(c, omega / k, rtol=1e-15)
    assert_allclose(cg / c, group_to_phase_ratio(k * depth_m), rtol=1e-15)
    # Group never faster than phase, phase never faster than the long-wave speed.
    assert (cg <= c).all()
    assert (c <= long_wave_speed_m_s(depth_m)).all()


# --- doctests ------------------------------------------------------------------------------


def test_doctests_pass():
    result = doctest.testmod(dispersion, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0
    assert result.failed == 0
