"""Resume by content: a renamed scenario file keeps every finished task; a changed input is named.

What identifies a finished task is its inputs (bathymetry SHA-256, source,
speed model, grid and medium spec), never the scenario file's name.
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import numpy as np
import pytest

import ttmap
from ttmap.errors import OutputExistsError

DEMO = Path(ttmap.__file__).parent / "demo_data"


def _toml(folder: Path, name: str, bathy: Path, out: Path) -> Path:
    p = folder / name
    p.write_text(
        f'[bathymetry]\npath = "{bathy}"\ncoarsen = 2\n\n[speed]\nperiods_s = [300]\n\n'
        '[[scenario]]\nname = "north"\npoint = [-144.9, -33.2]\n\n'
        '[[scenario]]\nname = "south"\npoint = [-144.9, -35.2]\n\n'
        f'[outputs]\nfolder = "{out}"\nenvelope = true\nexecutor = "serial"\n',
        encoding="utf-8",
    )
    return p


def test_a_renamed_scenario_file_resumes_and_a_changed_raster_is_named(tmp_path):
    import rasterio

    from ttmap.jobs.scenario import run_scenario_file
    from ttmap.scenario import load_scenario_file

    bathy = tmp_path / "bathy.tif"
    shutil.copy(DEMO / "demo_bathymetry.tif", bathy)
    out = tmp_path / "out"
    first = run_scenario_file(load_scenario_file(_toml(tmp_path, "plan.toml", bathy, out)))
    assert [t["skipped"] for t in first["tasks"]] == [False] * 4

    again = run_scenario_file(load_scenario_file(_toml(tmp_path, "plan_v2.toml", bathy, out)))
    assert [t["skipped"] for t in again["tasks"]] == [True] * 4  # all kept

    old_sha = hashlib.sha256(bathy.read_bytes()).hexdigest()
    with rasterio.open(bathy, "r+") as ds:
        band = ds.read(1)
        band[0, 0] = np.float32(band[0, 0] - 1.0)
        ds.write(band, 1)
    new_sha = hashlib.sha256(bathy.read_bytes()).hexdigest()
    assert new_sha != old_sha
    with pytest.raises(OutputExistsError) as err:
        run_scenario_file(load_scenario_file(_toml(tmp_path, "plan_v3.toml", bathy, out)))
    msg = str(err.value)
    assert f"bathymetry SHA-256 differs: recorded {old_sha[:12]}.., now {new_sha[:12]}.." in msg
    assert "\n" not in msg


def test_a_refined_rerun_does_not_resume_the_coarser_solves(tmp_path):
    """``refine`` is part of what a task is: a rerun at another factor is named, not kept."""
    from ttmap.jobs.scenario import run_scenario_file
    from ttmap.scenario import load_scenario_file

    bathy = tmp_path / "bathy.tif"
    shutil.copy(DEMO / "demo_bathymetry.tif", bathy)
    out = tmp_path / "out"
    plain = _toml(tmp_path, "plan.toml", bathy, out)
    plain.write_text(plain.read_text().replace("coarsen = 2\n", ""), encoding="utf-8")  # refine off: 1
    run_scenario_file(load_scenario_file(plain))
    again = run_scenario_file(load_scenario_file(plain))
    assert all(t["skipped"] for t in again["tasks"])  # refine 1 leaves the records as they were
    refined = tmp_path / "refined.toml"
    refined.write_text(plain.read_text().replace(
        f'path = "{bathy}"', f'path = "{bathy}"\nrefine = 3'), encoding="utf-8")
    with pytest.raises(OutputExistsError) as err:
        run_scenario_file(load_scenario_file(refined))
    assert "medium.refine differs: recorded (absent), now 3" in str(err.value)
