"""Reference checks of source location from first-arrival picks.

- Reciprocity (Fermat's principle; Sethian 1999, Level Set Methods and Fast
  Marching Methods; docs/reciprocal.md): one solve per gauge gives the time
  from every candidate cell to the gauge.
- Chi-square confidence regions: the region of two parameters of interest
  (position), with the origin time minimised over at each cell, is
  chi2 <= chi2_min + delta with delta the chi-square quantile for 2 degrees of
  freedom (Numerical Recipes, ch. 15.6, from memory), computed with
  scipy.stats.chi2 (5.991 at 95 %).

Synthetic picks come from a forward solve of a known source on invented
bathymetry with an island.
"""

from __future__ import annotations

import numpy as np
from affine import Affine

from ttmap import Grid, Source, prepare_medium
from ttmap.locate import delta_chi2, locate_source

N = 100
TRUE_CELL = (55, 45)
T0_S = 600.0
SIGMA_S = 10.0
AROUND = [(8, 8), (8, 92), (92, 15), (90, 88), (50, 96), (30, 50)]
ONE_SIDE = [(10, 92), (50, 95), (90, 90)]


def medium_and_forward():
    rows, cols = np.mgrid[0:N, 0:N]
    depth = 1500.0 + 2500.0 * cols / N  # deepening to the east
    depth[(rows - 35) ** 2 + (cols - 65) ** 2 <= 25] = -10.0  # an island
    grid = Grid((N, N), Affine(2000.0, 0.0, 300_000.0, 0.0, -2000.0, 4_400_000.0), "EPSG:32654")
    medium = prepare_medium(depth, grid)
    x, y = grid.xy(*TRUE_CELL)
    forward = medium.travel_time(Source.point_xy(float(x), float(y))).arrival_time_s
    return medium, forward


def test_chi_square_level_matches_scipy_reference():
    # 2 degrees of freedom: delta = -2 ln(1 - p) exactly (chi-square with 2 dof is exponential).
    assert abs(delta_chi2(0.95) - (-2.0 * np.log(0.05))) < 1e-9


def test_noise_free_picks_recover_the_source():
    medium, fwd = medium_and_forward()
    picks = [fwd[c] + T0_S for c in AROUND]
    r = locate_source(medium, AROUND, [f"g{i}" for i in range(len(AROUND))], picks, [SIGMA_S] * len(AROUND))
    dist = np.hypot(r.best_row - TRUE_CELL[0], r.best_col - TRUE_CELL[1])
    print(f"best cell {r.best_row, r.best_col}, {dist:.1f} cells off; t0 {r.best_origin_time_s:.2f} s; "
          f"{r.diagnostics['message']}")
    assert dist <= 2.0
    assert abs(r.best_origin_time_s - T0_S) <= SIGMA_S
    assert r.region[TRUE_CELL]
    assert not r.diagnostics["open"]
    assert r.polygons is not None and r.polygons.contains(
        __import__("shapely").Point(*medium.grid.xy(*TRUE_CELL))
    )


def test_noisy_picks_keep_the_source_in_the_region():
    medium, fwd = medium_and_forward()
    rng = np.random.default_rng(2024)
    picks = [fwd[c] + T0_S + rng.normal(0.0, SIGMA_S) for c in AROUND]
    r = locate_source(medium, AROUND, [f"g{i}" for i in range(len(AROUND))], picks, [SIGMA_S] * len(AROUND))
    print(f"noisy: best {r.best_row, r.best_col}, t0 {r.best_origin_time_s:.1f} s, "
          f"region {r.diagnostics['region_cells']} cells, chi2 min {r.best_misfit:.2f}")
    assert r.region[TRUE_CELL]
    assert abs(r.best_origin_time_s - T0_S) <= 3.0 * SIGMA_S
    assert abs(sum(r.residual_s.values())) < 3.0 * SIGMA_S * len(AROUND)


def test_gauges_on_one_side_give_an_open_region():
    medium, fwd = medium_and_forward()
    picks = [fwd[c] + T0_S for c in ONE_SIDE]
    r = locate_source(medium, ONE_SIDE, ["a", "b", "c"], picks, [SIGMA_S] * 3)
    print(r.diagnostics["message"])
    assert r.diagnostics["open"] and r.diagnostics["elongated"]
    assert r.diagnostics["azimuthal_gap_deg"] > 180.0
