"""The reports the jobs write, in a real browser: headless Chromium loads them offline, cleanly.

The reports of the three job kinds, as the jobs wrote them: ``ttmap demo``
(a map run, and a site-map run in ``site_maps/``) and a small scenario run
on a crop of the demo grid (invented data). Debian's ``chromium`` (headless,
network disabled by pointing every proxy at a closed port) loads each from
``file://``. Checks: no console error or uncaught exception in Chromium's
log, the inline script ran (it marks the page ready, seen in the dumped DOM),
the page holds its job's sections, and the screenshot is not blank (many
distinct colours; maps and charts hold hundreds).

Skips where Chromium is absent.
"""

from __future__ import annotations

import shutil
import subprocess
import textwrap
import zlib
from pathlib import Path

import pytest

from ttmap.io.report import REPORT_NAME

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="headless chromium not found")

_FLAGS = [
    "--headless", "--disable-gpu", "--no-sandbox", "--hide-scrollbars", "--no-first-run",
    "--proxy-server=127.0.0.1:9", "--proxy-bypass-list=<-loopback>",  # no network
    "--disable-background-networking", "--disable-extensions",
]


def _chromium(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    assert CHROMIUM is not None
    return subprocess.run(
        [CHROMIUM, *_FLAGS, *args], capture_output=True, text=True, timeout=180, cwd=cwd,
        env={"PATH": "/usr/bin:/bin", "HOME": str(cwd)},
    )


def _png_distinct_colours(path: Path) -> int:
    """Distinct RGB(A) pixel values of an 8-bit PNG (stdlib decoder, filters undone)."""
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, idat, width = 8, b"", 0
    height = bit_depth = color_type = 0
    while pos < len(data):
        n = int.from_bytes(data[pos:pos + 4], "big")
        kind = data[pos + 4:pos + 8]
        body = data[pos + 8:pos + 8 + n]
        if kind == b"IHDR":
            width, height = int.from_bytes(body[:4], "big"), int.from_bytes(body[4:8], "big")
            bit_depth, color_type = body[8], body[9]
        elif kind == b"IDAT":
            idat += body
        pos += 12 + n
    assert bit_depth == 8 and color_type in (2, 6), (bit_depth, color_type)
    bpp = 3 if color_type == 2 else 4
    raw = zlib.decompress(idat)
    stride = width * bpp
    prev = bytearray(stride)
    colours: set[bytes] = set()
    i = 0
    for _ in range(height):
        f = raw[i]
        line = bytearray(raw[i + 1:i + 1 + stride])
        i += 1 + stride
        for x in range(stride):
            a = line[x - bpp] if x >= bpp else 0
            b = prev[x]
            c = prev[x - bpp] if x >= bpp else 0
            if f == 1:
                line[x] = (line[x] + a) & 0xFF
            elif f == 2:
                line[x] = (line[x] + b) & 0xFF
            elif f == 3:
                line[x] = (line[x] + (a + b) // 2) & 0xFF
            elif f == 4:
                p = a + b - c
                pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
                line[x] = (line[x] + (a if pa <= pb and pa <= pc else b if pb <= pc else c)) & 0xFF
        colours.update(bytes(line[k:k + 3]) for k in range(0, stride, bpp * 4))  # every 4th pixel
        prev = line
    return len(colours)


DEMO_DIR = Path(__file__).resolve().parents[2] / "ttmap" / "demo_data"

#: Two ruptures along the invented trench and a point over the invented
#: seamount, on a crop of the demo grid, with the invented towns.
_SCENARIOS = f"""\
[bathymetry]
path = "{(DEMO_DIR / 'demo_bathymetry.tif').as_posix()}"
coarsen = 2
crop_lonlat = [-148.0, -38.0, -141.0, -31.0]

[speed]
periods_s = [600]

[[trench]]
name_prefix = "arc"
polyline = [[-144.30, -33.0], [-144.45, -34.0]]
spacing_km = 70
mw = 8.0

[[scenario]]
name = "seamount-point"
point = [-146.90, -33.30]

[sites]
path = "{(DEMO_DIR / 'demo_sites.csv').as_posix()}"

[outputs]
folder = "out"
envelope = true
compare = [["arc-01", "seamount-point"]]
executor = "serial"
"""

#: Sections each job's report must show (besides caution, run, record, products).
_SECTIONS = {
    "map": ["maps", "sites", "timeline"],
    "site-map": ["maps", "sites"],
    "scenario": ["sites", "comparison"],
}


@pytest.fixture(scope="module")
def reports(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    base = tmp_path_factory.mktemp("report")
    runner = CliRunner()
    result = runner.invoke(cli, ["demo", "--out", str(base / "demo"), "-q"])
    assert result.exit_code == 0, result.output
    toml = base / "scenarios.toml"
    toml.write_text(textwrap.dedent(_SCENARIOS), encoding="utf-8")
    result = runner.invoke(cli, ["scenario", "run", str(toml), "--out", str(base / "scenario"), "-q"])
    assert result.exit_code == 0, result.output
    return {"map": base / "demo" / REPORT_NAME, "site-map": base / "demo" / "site_maps" / REPORT_NAME,
            "scenario": base / "scenario" / REPORT_NAME}


@pytest.mark.parametrize("job", ["map", "site-map", "scenario"])
def test_report_loads_offline_without_console_errors(reports: dict[str, Path], job: str) -> None:
    report = reports[job]
    done = _chromium("--enable-logging=stderr", "--v=0", "--dump-dom", report.as_uri(), cwd=report.parent)
    assert done.returncode == 0, done.stderr[-2000:]
    console = [ln for ln in done.stderr.splitlines() if "CONSOLE" in ln or "Uncaught" in ln]
    assert console == [], console
    # the inline script ran to its end
    assert 'data-report-ready="1"' in done.stdout
    assert "Caution: read before using these results" in done.stdout
    for section in ["caution", "run", *_SECTIONS[job], "record", "products"]:
        assert f'<section id="{section}"' in done.stdout, (job, section)
    # nothing is fetched from anywhere: no http(s) reference in the page
    assert "http://" not in done.stdout.replace("http://www.w3.org", "") and "https://" not in done.stdout


@pytest.mark.parametrize("job", ["map", "site-map", "scenario"])
def test_report_screenshot_is_not_blank(reports: dict[str, Path], job: str) -> None:
    report = reports[job]
    shot = report.parent / "report_screenshot.png"
    done = _chromium(f"--screenshot={shot}", "--window-size=1200,2000", report.as_uri(), cwd=report.parent)
    assert done.returncode == 0 and shot.is_file(), done.stderr[-2000:]
    # a blank page has 1 colour, a text-only page a few dozen (anti-aliasing); maps and charts add hundreds
    assert _png_distinct_colours(shot) > 300
