"""Unit tests of ttmap.memory: the peak-memory estimate and the up-front refusal."""

from __future__ import annotations

import doctest

import pytest
from affine import Affine

from ttmap import memory as memory_module
from ttmap.errors import InputDataError
from ttmap.grid import Grid
from ttmap.memory import (
    BASE_BYTES,
    BYTES_PER_NATIVE_CELL,
    BYTES_PER_SOLVE_CELL,
    check_memory,
    estimate_peak_bytes,
    measure_peak_bytes,
    total_memory_bytes,
)


def _projected(rows: int, cols: int) -> Grid:
    return Grid((rows, cols), Affine(100.0, 0, 0, 0, -100.0, rows * 100.0), "EPSG:3857")


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(memory_module)
    assert attempted > 0 and failed == 0


def test_estimate_is_linear_in_native_and_solve_cells():
    e = estimate_peak_bytes((1000, 2000), (1500, 2000))
    assert e == pytest.approx(BYTES_PER_NATIVE_CELL * 2e6 + BYTES_PER_SOLVE_CELL * 3e6 + BASE_BYTES, abs=1)
    assert estimate_peak_bytes((1000, 2000)) == estimate_peak_bytes((1000, 2000), (1000, 2000))
    d1 = estimate_peak_bytes((2000, 2000)) - estimate_peak_bytes((1000, 1000))
    d2 = estimate_peak_bytes((3000, 2000)) - estimate_peak_bytes((2000, 2000))
    assert d1 == pytest.approx(d2 * 1.5, rel=1e-6)
    with pytest.raises(InputDataError, match="rows, cols"):
        estimate_peak_bytes((10,))
    with pytest.raises(InputDataError, match="positive"):
        estimate_peak_bytes((0, 10))


def test_a_huge_grid_is_refused_with_the_estimate_the_limit_and_the_fix():
    huge = _projected(200_000, 400_000)  # 8e10 cells
    with pytest.raises(InputDataError) as info:
        check_memory(huge)
    msg = str(info.value)
    assert "200000 x 400000" in msg
    assert "GiB" in msg and "more than the limit" in msg and "% of" in msg
    assert "crop with --crop-lonlat or coarsen with --coarsen N" in msg
    need = estimate_peak_bytes(huge.shape) / 2**30
    assert f"{need:.2f} GiB" in msg


def test_a_small_grid_passes_and_returns_the_estimate():
    g = _projected(300, 400)
    assert check_memory(g) == estimate_peak_bytes((300, 400))
    assert check_memory(g, workers=3) == 3 * estimate_peak_bytes((300, 400))


def test_explicit_limit_and_workers_and_suggested_factor():
    g = _projected(2000, 2000)
    one = estimate_peak_bytes(g.shape)
    assert check_memory(g, limit_bytes=one) == one
    with pytest.raises(InputDataError, match=r"2 workers x .*--coarsen 2\).*fewer workers"):
        check_memory(g, limit_bytes=one, workers=2)
    with pytest.raises(InputDataError, match=r"--coarsen 10\b"):
        check_memory(g, limit_bytes=one // 90)
    with pytest.raises(InputDataError, match="share"):
        check_memory(g, share=0.0)


def test_lonlat_grids_count_the_taller_solve_grid():
    from ttmap.grid import solve_plane

    geo = Grid((600, 600), Affine(0.05, 0, 150.0, 0, -0.05, 70.0), "EPSG:4326")  # 40-70 N
    rows, cols = solve_plane(geo).shape
    assert rows > 600
    assert check_memory(geo) == estimate_peak_bytes((600, 600), (rows, cols))
    assert check_memory(geo) > estimate_peak_bytes((600, 600))


def test_total_memory_is_read():
    total = total_memory_bytes()
    assert total is not None and total > 256 * 2**20


def test_the_measurement_runs_and_agrees_with_the_constants_roughly():
    result = measure_peak_bytes((("p", 400, 400, False), ("g", 300, 400, True)))
    cases = result["cases"]
    assert [c["label"] for c in cases] == ["p", "g"]
    assert cases[1]["solve"][0] > cases[1]["native"][0]
    for c in cases:
        assert c["reached"] > 0
        est = estimate_peak_bytes(c["native"], c["solve"])
        # small grids are dominated by allocator noise: only the order of magnitude is checked
        assert est / 4 < c["peak_bytes"] < est * 4
