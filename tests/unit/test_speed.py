"""Unit tests of ttmap.physics.speed: floor depth, far-field slowdown, speed modes.

Check values come from the project reference notes (docs/references.md), tagged there:
[C] computed, [S] read in the cited source.
"""

from __future__ import annotations

import doctest

import numpy as np
import pytest
from numpy.testing import assert_allclose

from ttmap.errors import InputDataError
from ttmap.physics import speed as speed_module
from ttmap.physics.dispersion import group_speed_m_s, long_wave_speed_m_s
from ttmap.physics.speed import (
    SPEED_MODES,
    far_field_effective_depth_m,
    floor_depth,
    water_speed_m_s,
    wave_speed_m_s,
)
from ttmap.defaults import FLOOR_DEPTH_M

G_M_S2 = 9.80665  # standard gravity, exact (3rd CGPM 1901; docs/references.md §9 [S])


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(speed_module)
    assert attempted > 0 and failed == 0


# ------------------------------------------------------------------ floor depth


def test_floor_depth_raises_shallow_water_only():
    depth = np.array([-3.0, 0.0, 0.5, 4.99, 5.0, 12.0, np.nan])
    before = depth.copy()
    out = floor_depth(depth, 5.0)
    assert_allclose(out, [-3.0, 0.0, 5.0, 5.0, 5.0, 12.0, np.nan], equal_nan=True)
    assert out.dtype == np.float64
    assert_allclose(depth, before, equal_nan=True)  # input unchanged
    assert out is not depth


def test_default_floor_depth_is_5_m():
    # Common practice, no source (see the module notes).
    assert FLOOR_DEPTH_M == 5.0
    assert float(wave_speed_m_s(1.0)) == pytest.approx(np.sqrt(G_M_S2 * 5.0), rel=1e-14)


@pytest.mark.parametrize("bad", [0.0, -1.0, np.nan, np.inf])
def test_floor_depth_must_be_positive(bad):
    with pytest.raises(InputDataError, match=rf"floor depth {bad!r} m must be a positive number"):
        floor_depth([10.0], bad)
    with pytest.raises(InputDataError, match="floor depth"):
        wave_speed_m_s([10.0], floor_depth_m=bad)


# ------------------------------------------------------------------ long-wave speed


@pytest.mark.parametrize(
    ("depth_m", "speed_m_s", "abs_tol"),
    # docs/references.md §2, c = sqrt(g h) table [C], rounded as printed there.
    [
        (7000.0, 262.0, 0.05),
        (6000.0, 242.6, 0.05),
        (4000.0, 198.1, 0.05),
        # The table prints 140.1 here, but sqrt(9.80665 * 2000) = 140.047 rounds to 140.0
        # (its km/h entry, 504, agrees with 140.05 m/s): a rounding slip in the notes.
        (2000.0, 140.0, 0.05),
        (1000.0, 99.0, 0.05),
        (200.0, 44.3, 0.05),
        (100.0, 31.3, 0.05),
        (50.0, 22.1, 0.05),
        (10.0, 9.90, 0.005),
        (1.0, 3.13, 0.005),
    ],
)
def test_long_wave_speed_table(depth_m, speed_m_s, abs_tol):
    got = float(wave_speed_m_s(depth_m, floor_depth_m=0.5))
    assert got == pytest.approx(speed_m_s, abs=abs_tol)


def test_land_and_nodata_have_nan_speed():
    out = wave_speed_m_s(np.array([[-10.0, 0.0], [np.nan, 100.0]]))
    assert out.shape == (2, 2) and out.dtype == np.float64
    assert np.isnan(out[0, 0]) and np.isnan(out[0, 1]) and np.isnan(out[1, 0])
    assert out[1, 1] == pytest.approx(np.sqrt(G_M_S2 * 100.0), rel=1e-14)


def test_wave_speed_does_not_modify_input():
    depth = np.array([0.5, 100.0, -2.0])
    before = depth.copy()
    wave_speed_m_s(depth, far_field=True)
    assert_allclose(depth, before)


# ------------------------------------------------------------------ far field


def test_far_field_speed_reduction_at_4000_m():
    plain = float(wave_speed_m_s(4000.0))
    slowed = float(wave_speed_m_s(4000.0, far_field=True))
    reduction = 1.0 - slowed / plain
    # docs/references.md §3 [C]: speed factor ~ 1 - g h / (2 c_s^2) = 0.87 % at 4000 m
    # (close to Wang 2015's ~0.86 % from compressibility [S]).
    assert reduction == pytest.approx(0.0087, abs=1e-4)
    assert reduction == pytest.approx(1.0 - np.sqrt(1.0 - G_M_S2 * 4000.0 / 1500.0**2), rel=1e-12)


@pytest.mark.parametrize(
    ("depth_m", "speed_reduction"),
    # docs/references.md §3 [C]: 1.31 % at 6000 m, 0.04 % at 200 m.
    [(6000.0, 0.0131), (200.0, 0.0004)],
)
def test_far_field_speed_reduction_table(depth_m, speed_reduction):
    ratio = float(wave_speed_m_s(depth_m, far_field=True) / wave_speed_m_s(depth_m))
    assert 1.0 - ratio == pytest.approx(speed_reduction, abs=1e-4)


def test_far_field_effective_depth_against_wang_2015():
    # Wang 2015, Science of Tsunami Hazards 34(1) [S, via docs/references.md §3]:
    # effective depth ~2.5 % smaller at 6000 m, < 0.1 % at 200 m.
    assert 1.0 - float(far_field_effective_depth_m(6000.0)) / 6000.0 == pytest.approx(
        0.025, abs=2e-3
    )
    assert 1.0 - float(far_field_effective_depth_m(200.0)) / 200.0 < 1e-3
    # Explicit sound speed.
    assert float(far_field_effective_depth_m(1000.0, 1000.0)) == pytest.approx(
        1000.0 * (1 - G_M_S2 / 1000.0)
    )


def test_far_field_applies_to_the_group_speed_too():
    got = float(wave_speed_m_s(4000.0, mode="group", period_s=600.0, far_field=True))
    expected = float(group_speed_m_s(far_field_effective_depth_m(4000.0), 600.0))
    assert got == pytest.approx(expected, rel=1e-12)


# ------------------------------------------------------------------ dispersive modes


@pytest.mark.parametrize(
    ("depth_m", "period_s", "phase_ratio", "group_ratio"),
    # docs/references.md §1, tsunami-band dispersion table [C]: c / sqrt(gh), cg / sqrt(gh).
    [
        (4000.0, 120.0, 0.8145, 0.5657),
        (4000.0, 300.0, 0.9701, 0.9137),
        (4000.0, 600.0, 0.9925, 0.9778),
        (6000.0, 300.0, 0.9551, 0.8729),
        (1000.0, 300.0, 0.9925, 0.9778),
    ],
)
def test_dispersive_modes_against_table(depth_m, period_s, phase_ratio, group_ratio):
    c0 = np.sqrt(G_M_S2 * depth_m)
    phase = float(wave_speed_m_s(depth_m, mode="phase", period_s=period_s)) / c0
    group = float(wave_speed_m_s(depth_m, mode="group", period_s=period_s)) / c0
    assert phase == pytest.approx(phase_ratio, abs=5e-5)
    assert group == pytest.approx(group_ratio, abs=5e-5)


def test_dispersive_modes_are_nan_on_land():
    out = wave_speed_m_s(np.array([-1.0, np.nan, 4000.0]), mode="group", period_s=300.0)
    assert np.isnan(out[:2]).all() and np.isfinite(out[2])


def test_speed_modes_closed_set():
    assert SPEED_MODES == ("long-wave", "group", "phase")


def test_unknown_speed_mode_refused():
    with pytest.raises(
        InputDataError,
        match="speed mode 'shallow' is unknown; choose one of long-wave, group, phase",
    ):
        wave_speed_m_s(100.0, mode="shallow")


@pytest.mark.parametrize("mode", ["group", "phase"])
def test_period_required_for_dispersive_modes(mode):
    with pytest.raises(
        InputDataError, match=f"speed mode '{mode}' needs a wave period; give period_s"
    ):
        wave_speed_m_s(100.0, mode=mode)


def test_period_refused_for_long_wave_mode():
    with pytest.raises(
        InputDataError, match=r"a wave period \(300.0 s\) only applies to the group and phase"
    ):
        wave_speed_m_s(100.0, period_s=300.0)


# ------------------------------------------------------------------ the engine's fast path


@pytest.mark.parametrize(
    ("mode", "period_s", "far_field"),
    [("long-wave", None, False), ("long-wave", None, True), ("group", 300.0, False),
     ("phase", 600.0, True)],
)
def test_water_speed_is_bit_for_bit_wave_speed(mode, period_s, far_field):
    rng = np.random.default_rng(5)
    depth = rng.uniform(-50.0, 7000.0, (40, 50))
    depth[rng.random(depth.shape) < 0.1] = np.nan
    depth[0, :3] = [np.inf, -np.inf, 2.0]
    expected = wave_speed_m_s(depth, mode=mode, period_s=period_s, far_field=far_field)
    d = floor_depth(depth, FLOOR_DEPTH_M)
    land = ~(np.isfinite(d) & (d > 0.0))
    before = d.copy()
    got = water_speed_m_s(d, land=land, mode=mode, period_s=period_s, far_field=far_field)
    np.testing.assert_array_equal(got, expected)  # NaN where NaN, equal elsewhere
    np.testing.assert_array_equal(d, before)  # the input is left alone
    d[land] = np.nan  # or land marked NaN in the depths themselves
    got = water_speed_m_s(d, mode=mode, period_s=period_s, far_field=far_field)
    np.testing.assert_array_equal(got, expected)
    if mode == "long-wave" and not far_field:
        np.testing.assert_array_equal(got, long_wave_speed_m_s(floor_depth(depth)))
    # In place, into the depth array itself.
    out = water_speed_m_s(d, mode=mode, period_s=period_s, far_field=far_field, out=d)
    assert out is d
    np.testing.assert_array_equal(d, expected)
