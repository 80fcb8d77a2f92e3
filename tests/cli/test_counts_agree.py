"""Counts that agree: ``info`` and the run record count water cells with the same function."""

from __future__ import annotations

import json
from pathlib import Path

import ttmap

DEMO = Path(ttmap.__file__).parent / "demo_data" / "demo_bathymetry.tif"


def test_info_and_run_record_count_the_same_water_cells(run_cli, tmp_path):
    from ttmap import read_bathymetry
    from ttmap.io.raster import describe_bathymetry

    d = describe_bathymetry(read_bathymetry(str(DEMO)))
    run_cli("map", DEMO, "--source=-144.9,-34.2", "--no-map", "--no-coast", "--out", tmp_path / "m", expect=0)
    record = json.loads((tmp_path / "m" / "run.json").read_text())
    solved = record["product_sets"]["front"] if "product_sets" in record else None
    text = json.dumps(record)
    assert f'"water_cells": {d["water_cells"]}' in text, (d["water_cells"], solved)
    # The demo has one diagonal-only join: raw depth > 0 cells + 1 = the solver's water.
    assert d["diagonal_joins_opened"] == 1
    info = run_cli("info", DEMO, expect=0).output
    assert f"({d['water_cells']:,} cells as solved, incl. 1 diagonal join(s) opened)" in info
