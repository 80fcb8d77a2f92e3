"""Tests of the jobs package: option groups and CLI defaults, output plans, run records, light imports."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import click
import pytest

from ttmap.cli.main import cli
from ttmap.cli.options import OPTION_FIELDS, field_default
from ttmap.errors import InputDataError
from ttmap.jobs.options import ProductOptions, ReadingOptions, SiteOptions, SpeedOptions
from ttmap.jobs.plan import product_set_names, site_names
from ttmap.jobs.record import build_run_record, validate_run_record


def _cli_params() -> dict[str, list[click.Parameter]]:
    """Every option of every command and subcommand, by parameter name."""
    found: dict[str, list[click.Parameter]] = {}

    def walk(cmd: click.Command) -> None:
        for p in cmd.params:
            if p.name is not None:
                found.setdefault(p.name, []).append(p)
        if isinstance(cmd, click.Group):
            for sub in cmd.commands.values():
                walk(sub)

    walk(cli)
    return found


def test_every_cli_default_equals_the_option_group_default():
    params = _cli_params()
    checked = 0
    for name, (cls, field, factor) in OPTION_FIELDS.items():
        assert name in params, f"--{name.replace('_', '-')} is in OPTION_FIELDS but no command has it"
        expected = field_default(cls, field)
        for p in params[name]:
            value = p.default
            if isinstance(expected, bool) or isinstance(expected, str):
                assert value == expected, f"--{name}: CLI default {value!r}, {cls.__name__}.{field} {expected!r}"
            else:
                assert value * factor == pytest.approx(expected, rel=1e-12), (
                    f"--{name}: CLI default {value!r} x {factor}, {cls.__name__}.{field} {expected!r}")
            checked += 1
    assert checked >= len(OPTION_FIELDS)


def test_one_search_radius_name_across_commands():
    params = _cli_params()
    commands = {c for c in ("map", "site-map", "locate") if any(p.name == "site_search_radius_km"
                                                                  for p in cli.commands[c].params)}
    assert commands == {"map", "site-map", "locate"}
    alias = [p for p in cli.commands["site-map"].params if p.name == "site_snap_radius_km"]
    assert alias and alias[0].hidden  # the old name still works, out of sight
    assert "site_snap_radius_km" not in {p.name for p in cli.commands["map"].params}
    assert len(params["site_search_radius_km"]) == 3  # map, site-map, locate


@pytest.mark.parametrize(
    ("build", "match"),
    [
        (lambda: ProductOptions(vector_formats=("kml",)), "vector format 'kml' is unknown"),
        (lambda: ProductOptions(map_formats=("tiff",)), "map format 'tiff' is unknown"),
        (lambda: ProductOptions(coast_interval_min=0.0), "coast interval 0.0 min"),
        (lambda: SpeedOptions(earth="flat"), "earth model 'flat' is unknown"),
        (lambda: SpeedOptions(floor_depth_m=-1.0), "floor depth -1.0 m"),
        (lambda: SpeedOptions(periods_s=(0.0,)), "wave period 0.0 s"),
        (lambda: SiteOptions(notification_delay_min=2000.0), "notification delay 2000.0 min"),
        (lambda: SiteOptions(speed_uncertainty=1.5), "speed uncertainty 1.5"),
        (lambda: ReadingOptions("x.tif", coarsen=0), "coarsen factor 0"),
        (lambda: ReadingOptions("x.tif", refine=0), "refine factor 0"),
        (lambda: ReadingOptions("x.tif", coarsen=2, refine=3), "coarsen 2 and refine 3 cannot be combined"),
    ],
)
def test_option_groups_refuse_bad_values(build, match):
    with pytest.raises(InputDataError, match=match):
        build()


def test_plan_names_match_the_vector_writer():
    from ttmap.io.vector import vector_output_paths

    names = product_set_names("out", "front", vector_formats=("gpkg", "shp", "geojson"), map_formats=("pdf",),
                              coast=False)
    files = [p.name for p in names.files()]
    assert files[:2] == ["arrival_front.tif", "arrival_front.sld"]
    for target in names.isochrones.targets.values():
        for p in vector_output_paths(target, ["isochrone_lines", "isochrone_bands"]):
            assert p.name in files
    assert "isochrones_front_bands_shp.sld" in files and "map_front.pdf" in files
    assert not any(f.startswith("coast_") for f in files)
    assert site_names("o", "Bay/North").stem == "Bay_North"


def _valid_record() -> dict:
    return build_run_record(job="site-map", started_utc="2026-01-01T00:00:00+00:00", inputs={},
                            parameters={}, timings_s={"total_s": 0.5}, products=["a.tif"],
                            versions={"ttmap": "0.1.0"}, sites=[], sites_skipped=[], combined_written=False)


@pytest.mark.parametrize(
    ("change", "problem"),
    [
        (lambda r: r.pop("cautions"), "missing field cautions"),
        (lambda r: r.update(schema_version=1), "schema_version: 1 is not 2"),
        (lambda r: r.update(job="mapping"), "job: 'mapping' is not one of"),
        (lambda r: r.pop("sites"), "missing site-map block sites"),
        (lambda r: r.update(finished_utc="2026-01-01T10:00:00+13:00"), "finished_utc: .* is not in UTC"),
        (lambda r: r.update(products=["/abs/a.tif"]), "products: '/abs/a.tif' is not a path relative"),
        (lambda r: r.update(timings_s={"read_s": 1.0}), "timings_s: missing total_s"),
        (lambda r: r.update(grid={"crs": "EPSG:4326", "shape": [2, 3], "cell_size_m": {"row_m": 1, "col_m": 1},
                                  "bounds": {"left": 0, "bottom": 0, "right": 1, "top": 1},
                                  "transform": [1, 0, 0, 0, -1, 0], "geographic": True, "wraps_x": False}),
         "grid: shape must be an object with rows, cols"),
        (lambda r: r["inputs"].update(bathymetry={"path": "/x", "sha256": "abc"}), "inputs.bathymetry: sha256"),
    ],
)
def test_validate_run_record_names_each_problem(change, problem):
    import re

    record = _valid_record()
    assert validate_run_record(record) == []
    change(record)
    problems = validate_run_record(record)
    assert any(re.search(problem, p) for p in problems), problems


def test_records_written_by_the_demo_validate(tmp_path):
    """``ttmap demo`` writes a map record and a site-map record; both follow the one schema."""
    from click.testing import CliRunner

    out = tmp_path / "demo"
    result = CliRunner().invoke(cli, ["demo", "--out", str(out)])
    assert result.exit_code == 0, result.output
    for path, job in ((out / "run.json", "map"), (out / "site_maps" / "run.json", "site-map")):
        record = json.loads(path.read_text())
        assert validate_run_record(record) == [], path
        assert record["job"] == job
        # every listed product exists, and nothing but the products and the record is in the folder
        listed = {Path(p) for p in record["products"]}
        assert all((path.parent / p).is_file() for p in listed)
        on_disk = {p.relative_to(path.parent) for p in path.parent.iterdir() if p.is_file()}
        assert on_disk == listed | {Path("run.json")}
        assert len(record["inputs"]["bathymetry"]["sha256"]) == 64
        assert record["inputs"]["bathymetry"]["size_bytes"] == Path(record["inputs"]["bathymetry"]["path"]).stat().st_size


def test_public_api_is_lazy_and_typed():
    code = (
        "import sys, ttmap, ttmap.cli.main\n"
        "heavy = [m for m in ('numpy', 'rasterio', 'pyogrio', 'matplotlib', 'dask', 'pyproj', 'scipy', 'shapely')"
        " if m in sys.modules]\n"
        "print(','.join(heavy))\n"
        "assert ttmap.MapJob.__name__ == 'MapJob' and callable(ttmap.run_site_map_job)\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == ""  # nothing heavy loaded by `import ttmap` or the CLI group
    import dataclasses

    import ttmap

    for name in ("MapJobResult", "SiteMapJobResult", "ReadingOptions", "SpeedOptions", "ProductOptions",
                 "SiteOptions"):
        cls = getattr(ttmap, name)
        assert dataclasses.is_dataclass(cls) and cls.__dataclass_params__.frozen, name
    with pytest.raises(AttributeError):
        ttmap.no_such_name  # noqa: B018


def test_old_site_snap_radius_name_is_a_deprecated_alias(tmp_path):
    """``--site-snap-radius-km`` still sets the search radius (with a note); a radius too small refuses."""
    from click.testing import CliRunner

    from ttmap.jobs.demo import demo_paths

    bathy = str(demo_paths().bathymetry)
    site = "Tarnquill Harbour=-142.7083,-33.4250"  # invented town, on land: moved about 1.55 km
    runner = CliRunner()
    small = runner.invoke(cli, ["site-map", bathy, "--site", site, "--no-map", "--site-snap-radius-km", "0.5",
                                "--out", str(tmp_path / "a")])
    assert small.exit_code == 1 and "within 0.5 km" in small.output
    assert "--site-snap-radius-km is deprecated" in small.output
    ok = runner.invoke(cli, ["site-map", bathy, "--site", site, "--no-map", "--site-search-radius-km", "3",
                             "--out", str(tmp_path / "b")])
    assert ok.exit_code == 0, ok.output
    record = json.loads((tmp_path / "b" / "run.json").read_text())
    assert record["parameters"]["sites"]["search_radius_m"] == 3000.0
    assert validate_run_record(record) == []


def test_arrival_levels_follow_a_late_starting_field():
    """A nested coastal grid reached 61-79 min after the origin gets isochrones over its own
    span (every 2 min here), not the one or two of the 10-minute scheme; a field starting at
    the origin keeps the default scheme, and no level is ever 0."""
    import numpy as np

    from ttmap.jobs.layers import arrival_levels

    late = np.linspace(61.3, 79.2, 50).reshape(5, 10)
    assert arrival_levels(late, None).tolist() == [62.0, 64.0, 66.0, 68.0, 70.0, 72.0, 74.0, 76.0, 78.0]
    early = np.linspace(0.0, 92.6, 50).reshape(5, 10)
    assert arrival_levels(early, None).tolist() == [10.0 * k for k in range(1, 10)]
    short = np.linspace(0.0, 7.5, 50).reshape(5, 10)
    assert all(v > 0 for v in arrival_levels(short, None))


@pytest.mark.parametrize("reading", [{"refine": 3}, {"coarsen": 2}, {"refine": 2, "window": (-146.0, -36.0, -143.0, -33.0)}])
def test_up_front_check_predicts_the_grid_the_reader_makes(reading):
    """The check pass works from the header alone; its grid must be the one the run solves on."""
    from ttmap.jobs.checks import check_bathymetry

    demo = Path(__file__).resolve().parents[2] / "demo_bathymetry" / "demo_bathymetry.tif"
    opts = ReadingOptions(str(demo), **reading)
    checked = check_bathymetry(opts).grid
    read = opts.read().grid
    assert checked.shape == read.shape
    assert checked.transform.almost_equals(read.transform)
