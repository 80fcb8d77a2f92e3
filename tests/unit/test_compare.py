"""Unit tests of ttmap.products.compare: envelope, difference and their GeoTIFF writers."""

from __future__ import annotations

import csv
import doctest
from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine

from ttmap.errors import InputDataError, OutputExistsError
from ttmap.grid import Grid
from ttmap.io.raster import write_arrival_geotiff, write_raster
from ttmap.products import compare as compare_module
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.products.compare import (
    NO_SCENARIO,
    difference,
    envelope,
    read_minutes,
    write_difference,
    write_envelope,
)

GRID = Grid((40, 50), Affine(0.1, 0.0, 150.0, 0.0, -0.1, -30.0), "EPSG:4326")


def _fields(n: int = 4, seed: int = 3) -> list[np.ndarray]:
    """Random arrival fields (minutes) with shared land, per-scenario gaps and a tie."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        t = rng.uniform(5.0, 300.0, GRID.shape)
        t[rng.random(GRID.shape) < 0.2] = np.nan  # unreached, per scenario
        t[:5, :5] = np.nan  # land in every scenario
        out.append(t)
    if n >= 3:
        out[2][10, 10] = out[1][10, 10] = 1.0  # a tie, earliest of all
        out[0][10, 10] = 2.0
    return out


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(compare_module)
    assert attempted > 0 and failed == 0


def test_envelope_is_the_cellwise_minimum_and_the_index_points_at_it():
    fields = _fields()
    earliest, first = envelope(fields)
    stack = np.stack(fields)
    expected = np.fmin.reduce(stack, axis=0)  # NaN only where every scenario is NaN
    np.testing.assert_array_equal(earliest, expected)  # NaN equal NaN here
    assert earliest.dtype == np.float64 and first.dtype == np.int16
    none = np.all(np.isnan(stack), axis=0)
    assert none[:5, :5].all()
    np.testing.assert_array_equal(first == NO_SCENARIO, none)
    rows, cols = np.nonzero(~none)
    np.testing.assert_array_equal(stack[first[rows, cols], rows, cols], earliest[rows, cols])
    assert first[10, 10] == 1  # tie between 1 and 2: the lowest index
    # every other scenario is no earlier where it arrives
    for i, t in enumerate(fields):
        ok = np.isfinite(t)
        assert (t[ok] >= earliest[ok]).all()
    # inputs are unchanged
    np.testing.assert_array_equal(np.stack(_fields()), stack)


def test_envelope_streams_from_a_generator_and_checks_shapes():
    fields = _fields(3)
    seen = []

    def gen():
        for f in fields:
            seen.append(1)
            yield f

    e1, i1 = envelope(gen())
    e2, i2 = envelope(fields)
    assert len(seen) == 3
    np.testing.assert_array_equal(e1, e2)
    np.testing.assert_array_equal(i1, i2)
    with pytest.raises(InputDataError, match="scenario 1 has shape"):
        envelope([fields[0], fields[1][:-1]])
    with pytest.raises(InputDataError, match="no arrival-time fields"):
        envelope([])
    with pytest.raises(InputDataError, match="2-D"):
        envelope([np.zeros(4)])


def test_difference_is_a_minus_b_with_nan_where_either_is_missing():
    a, b = _fields(2)
    d = difference(a, b)
    both = np.isfinite(a) & np.isfinite(b)
    np.testing.assert_array_equal(d[both], a[both] - b[both])
    assert np.isnan(d[~both]).all()
    assert both.sum() > 100 and (~both).sum() > 100
    with pytest.raises(InputDataError, match="shape"):
        difference(a, b[:, :-1])


# ---------------------------------------------------------------------------
# Writers
# ---------------------------------------------------------------------------


def _write_fields(folder: Path, fields: list[np.ndarray]) -> list[Path]:
    paths = []
    for i, t in enumerate(fields):
        p = folder / f"arrival_s{i}.tif"
        write_arrival_geotiff(p, t, GRID, tags={"SOURCE": f"s{i}"}, band_description="t")
        paths.append(p)
    return paths


def test_write_envelope_round_trip(tmp_path):
    fields = _fields()
    paths = _write_fields(tmp_path, fields)
    names = ["north", "south", "east", "west"]
    out = write_envelope(tmp_path, paths, names, GRID, False)
    assert Path(out["envelope_min"]).name == "envelope_min.tif"

    # the envelope of what was written (float32) equals the cell-wise minimum of the rasters
    stored = np.stack([read_minutes(p)[0] for p in paths])
    env, grid, tags = read_minutes(out["envelope_min"])
    assert grid.shape == GRID.shape and grid.transform == GRID.transform
    none = np.all(np.isnan(stored), axis=0)
    np.testing.assert_array_equal(np.isnan(env), none)
    np.testing.assert_array_equal(env[~none], np.nanmin(stored[:, ~none], axis=0))
    assert tags["UNITS"] == "minutes" and tags["CAUTION"] == CAUTION_SHORT
    assert tags["SCENARIO_3"] == "west"

    with rasterio.open(out["first_scenario"]) as src:
        idx = src.read(1)
        assert src.dtypes[0] == "int16" and src.nodata == -1
        t = src.tags()
    assert [t[f"SCENARIO_{i}"] for i in range(4)] == names
    np.testing.assert_array_equal(idx == -1, none)
    rows, cols = np.nonzero(~none)
    np.testing.assert_array_equal(stored[idx[rows, cols], rows, cols], env[rows, cols])

    with open(out["lookup_csv"], newline="") as fh:
        lines = [ln for ln in fh if not ln.startswith("#")]
    table = list(csv.DictReader(lines))
    assert [r["name"] for r in table] == names
    assert [int(r["index"]) for r in table] == [0, 1, 2, 3]
    assert sum(int(r["cells_first"]) for r in table) == int((~none).sum())
    for r in table:
        i = int(r["index"])
        assert int(r["cells_first"]) == int((idx == i).sum())
        assert float(r["earliest_min"]) == pytest.approx(float(env[idx == i].min()), abs=1e-3)

    with pytest.raises(OutputExistsError, match="--overwrite"):
        write_envelope(tmp_path, paths, names, GRID, False)
    write_envelope(tmp_path, paths[:2], names[:2], None, True)
    with rasterio.open(out["first_scenario"]) as src:
        assert set(np.unique(src.read(1))) <= {-1, 0, 1}


def test_write_envelope_refuses_a_raster_on_another_grid(tmp_path):
    paths = _write_fields(tmp_path, _fields(2))
    other = Grid(GRID.shape, Affine(0.1, 0.0, 151.0, 0.0, -0.1, -30.0), "EPSG:4326")
    odd = tmp_path / "odd.tif"
    write_arrival_geotiff(odd, _fields(1)[0], other, tags={}, band_description="t")
    with pytest.raises(InputDataError, match=r"odd\.tif.*not on the grid"):
        write_envelope(tmp_path, [*paths, odd], ["a", "b", "c"], None, False)
    assert not (tmp_path / "envelope_min.tif").exists()
    with pytest.raises(InputDataError, match="not file-safe"):
        write_envelope(tmp_path, paths, ["a b", "c"], None, False)
    with pytest.raises(InputDataError, match="repeat"):
        write_envelope(tmp_path, paths, ["a", "a"], None, False)
    with pytest.raises(InputDataError, match="one name per raster"):
        write_envelope(tmp_path, paths, ["a"], None, False)


def test_write_difference_round_trip(tmp_path):
    a, b = _fields(2)
    pa, pb = _write_fields(tmp_path, [a, b])
    out = write_difference(tmp_path, pa, pb, "north", "south", False)
    path = Path(out["difference"])
    assert path.name == "difference_north_minus_south.tif"
    with rasterio.open(path) as src:
        raw = src.read(1)
        nodata = src.nodata
        tags = src.tags()
    a32, b32 = read_minutes(pa)[0], read_minutes(pb)[0]
    both = np.isfinite(a32) & np.isfinite(b32)
    np.testing.assert_array_equal(raw == nodata, ~both)
    np.testing.assert_array_equal(raw[both], (a32[both] - b32[both]).astype(np.float32))
    assert tags["SCENARIO_A"] == "north" and tags["SCENARIO_B"] == "south"
    assert tags["SIGN"].startswith("positive: south arrives earlier")
    assert tags["UNITS"] == "minutes"
    with pytest.raises(OutputExistsError):
        write_difference(tmp_path, pa, pb, "north", "south", False)


def test_read_minutes_refuses_other_units(tmp_path):
    p = tmp_path / "depth.tif"
    write_raster(p, np.ones(GRID.shape), GRID, tags={"UNITS": "metres"})
    with pytest.raises(InputDataError, match="not minutes"):
        read_minutes(p)
    with pytest.raises(InputDataError, match="does not exist"):
        read_minutes(tmp_path / "nope.tif")
