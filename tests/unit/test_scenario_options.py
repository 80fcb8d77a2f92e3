"""Scenario files accept the command line's options, with the same names and the same fields.

The option groups of ttmap.jobs.options are the one definition; the scenario
schema's :data:`OPTION_KEYS` and the CLI's :data:`OPTION_FIELDS` must both map
onto them, name for name.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

import ttmap
from ttmap.cli.options import OPTION_FIELDS
from ttmap.jobs import options as groups
from ttmap.scenario import ScenarioFileError, load_scenario_file
from ttmap.scenario.schema import OPTION_KEYS, SECTION_KEYS

DEMO = Path(ttmap.__file__).parent / "demo_data"
TABLE_OF = {"SpeedOptions": "speed", "SiteOptions": "sites", "ProductOptions": "products"}


def test_every_option_key_fills_a_real_field_and_every_field_has_a_key():
    for (table, key), (group, fld, factor) in OPTION_KEYS.items():
        assert key in SECTION_KEYS[table]
        assert TABLE_OF[group] == table
        assert fld in {f.name for f in dataclasses.fields(getattr(groups, group))}, (table, key)
        assert factor > 0
    for group, table in TABLE_OF.items():
        covered = {fld for (t, _), (g, fld, _) in OPTION_KEYS.items() if g == group}
        fields = {f.name for f in dataclasses.fields(getattr(groups, group))}
        assert fields == covered, f"[{table}] lacks keys for {sorted(fields - covered)}"


def test_command_line_options_have_the_same_name_in_scenario_files():
    """``--site-search-radius-km`` is ``[sites] search_radius_km``: the same field, the same factor."""
    by_field: dict[tuple[str, str], list[tuple[str, float]]] = {}
    for (_, key), (g, fld, factor) in OPTION_KEYS.items():
        by_field.setdefault((g, fld), []).append((key, factor))
    for param, (cls, fld, factor) in OPTION_FIELDS.items():
        if cls is groups.ReadingOptions:
            assert param in SECTION_KEYS["bathymetry"]
            continue
        keys = dict(by_field[(cls.__name__, fld)])
        stripped = param.removeprefix("sites_").removeprefix("site_")
        name = stripped if stripped in keys else param
        assert name in keys, (param, sorted(keys))
        assert keys[name] == factor, param


def _write(tmp_path: Path, extra_sites: str, extra_speed: str = "", products: str = "") -> Path:
    text = (
        f'[bathymetry]\npath = "{DEMO / "demo_bathymetry.tif"}"\n\n'
        f"[speed]\nperiods_s = [300]\n{extra_speed}\n"
        '[[scenario]]\nname = "p"\npoint = [-144.9, -34.2]\n\n'
        f'[sites]\npath = "{DEMO / "demo_sites.csv"}"\n{extra_sites}\n{products}'
    )
    p = tmp_path / "s.toml"
    p.write_text(text, encoding="utf-8")
    return p


def test_site_speed_and_product_keys_load_into_the_option_groups(tmp_path):
    from ttmap.jobs.scenario import scenario_site_options

    p = _write(
        tmp_path,
        "search_radius_km = 6\nnotification_delay_min = 12\npreparation_min = 4\n"
        "walking_speed_m_s = 0.9\nlittle_margin_min = 3\nspeed_uncertainty_pct = 2\n"
        'origin_time = "2026-03-01T16:12:00+13:00"\nname_field = "name"\n',
        "far_field_correction = true\nmax_time_h = 3\n",
        '[products]\nvector_formats = ["geojson"]\nmap_formats = []\nisochrone_interval_min = 15\n',
    )
    sf = load_scenario_file(p)
    opts = scenario_site_options(sf)
    assert opts.search_radius_m == 6000.0
    assert (opts.notification_delay_min, opts.preparation_min, opts.walking_speed_m_s) == (12.0, 4.0, 0.9)
    assert opts.little_margin_min == 3.0 and opts.speed_uncertainty == pytest.approx(0.02)
    assert opts.origin_time_utc.isoformat() == "2026-03-01T03:12:00+00:00"
    assert sf.speed.far_field is True
    assert [s.max_time_s for s in sf.scenarios] == [3 * 3600.0]
    prod = groups.ProductOptions(**sf.product_options)
    assert prod.vector_formats == ("geojson",) and prod.map_formats == ()
    assert prod.isochrone_interval_min == 15.0


@pytest.mark.parametrize(
    "extra, match",
    [
        ("search_radius_km = -1", r"sites.search_radius_km: search_radius_km = -1 is below 0"),
        ("notification_delay_min = 2000", "notification_delay_min = 2000 is outside 0 to 1440"),
        ("walking_speed_m_s = 0", "walking_speed_m_s = 0 must be greater than 0"),
        ('origin_time = "2026-03-01T03:12:00"', "origin_time .* with a zone"),
        ('crs = "EPSG:999999"', "not a CRS PROJ knows"),
        ("snap_radius_km = 3", "unknown key 'snap_radius_km'"),
    ],
)
def test_bad_site_keys_get_line_precise_messages(tmp_path, extra, match):
    p = _write(tmp_path, extra)
    with pytest.raises(ScenarioFileError, match=match) as err:
        load_scenario_file(p)
    assert ":12:" in str(err.value) or ":13:" in str(err.value) or ":11:" in str(err.value)
