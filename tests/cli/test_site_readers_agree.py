"""``ttmap scenario check`` and ``ttmap map --sites`` agree on every site file.

Both commands must read a site file with one reader
(:func:`ttmap.io.sites.read_sites`): a file the check accepts is read by the
run, and a file the run refuses is refused by the check, before any solve,
with the same one-line reason naming the offending value.

The bathymetry is the invented demo grid shipped with the package
(``ttmap/demo_data``), cropped to a small window around an invented coast; the
sites are invented too. What is checked is agreement between two commands, so
no outside reference is involved.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

REPO = Path(__file__).resolve().parents[2]
DEMO_TIF = REPO / "ttmap" / "demo_data" / "demo_bathymetry.tif"
CROP = (-146.0, -36.0, -142.0, -32.0)  # W, S, E, N: degrees, inside the demo grid
SOURCE = (-145.0, -34.0)  # open water in the demo grid

#: (case id, site file text, None for a good file or the text both messages must hold)
CASES: list[tuple[str, str, str | None]] = [
    ("documented-long-names", "name,longitude,latitude\nPier,-143.1,-35.5\n", None),
    ("lon-lat", "name,lon,lat\nPier,-143.1,-35.5\nHill,-142.7,-33.4\n", None),
    ("comment-before-header", "# invented towns\nname,lon,lat\nPier,-143.1,-35.5\n", None),
    ("abc-longitude", "name,lon,lat\nPier,-143.1,-35.5\nHill,abc,-33.4\n", "'abc' is not a number"),
    ("no-name-column", "town,lon,lat\nPier,-143.1,-35.5\n", "no 'name' column"),
    ("empty-file", "", "is empty"),
    ("latitude-95", "name,lon,lat\nPier,-143.1,95\n", "latitude 95 lies outside -90..90"),
]


def _scenario_file(folder: Path, sites: Path) -> Path:
    w, s, e, n = CROP
    path = folder / "s.toml"
    path.write_text(
        f'[bathymetry]\npath = "{DEMO_TIF.as_posix()}"\ncrop_lonlat = [{w}, {s}, {e}, {n}]\n\n'
        f'[[scenario]]\nname = "west"\npoint = [{SOURCE[0]}, {SOURCE[1]}]\n\n'
        f'[sites]\npath = "{sites.name}"\n',
        encoding="utf-8",
    )
    return path


def _check(folder: Path, sites: Path) -> tuple[int, list[str]]:
    from ttmap.cli.main import cli

    result = CliRunner().invoke(cli, ["scenario", "check", str(_scenario_file(folder, sites))])
    assert "Traceback" not in result.output
    return result.exit_code, result.output.splitlines()


def _map(folder: Path, sites: Path) -> tuple[int, list[str]]:
    from ttmap.cli.main import cli

    args = [
        "map", str(DEMO_TIF), "--crop-lonlat", ",".join(f"{v:g}" for v in CROP),
        "--source", f"{SOURCE[0]:g},{SOURCE[1]:g}", "--sites", str(sites),
        "--no-map", "--no-coast", "--out", str(folder / "map_out"),
    ]
    result = CliRunner().invoke(cli, args)
    assert "Traceback" not in result.output
    return result.exit_code, result.output.splitlines()


@pytest.mark.parametrize(("text", "reason"), [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_check_and_map_agree_on_the_site_file(tmp_path: Path, text: str, reason: str | None):
    sites = tmp_path / "towns.csv"
    sites.write_text(text, encoding="utf-8")
    check_code, check_out = _check(tmp_path, sites)
    map_code, map_out = _map(tmp_path, sites)
    if reason is None:  # both accept, and both see every site
        assert check_code == 0, check_out
        assert map_code == 0, map_out
        n = sum(1 for ln in text.splitlines()[1:] if ln and not ln.startswith(("#", "name")))
        assert any(ln.startswith(f"sites: {n} in ") for ln in check_out), check_out
        assert (tmp_path / "map_out" / "sites.csv").is_file()
        return
    # Both refuse, with exit status 1 and one line naming the offending value.
    assert check_code == 1, check_out
    assert map_code == 1, map_out
    issues = [ln for ln in check_out if ": sites.path: " in ln]
    assert len(issues) == 1, check_out
    assert check_out[-1].startswith("1 problem found in ")
    errors = [ln for ln in map_out if ln.startswith("Error:")]
    assert len(errors) == 1, map_out
    assert reason in issues[0] and reason in errors[0]
    # The same reason word for word: the reader's message follows "sites.path: ".
    assert issues[0].split(": sites.path: ", 1)[1] == errors[0].removeprefix("Error: ")
    assert not (tmp_path / "map_out" / "sites.csv").exists()
