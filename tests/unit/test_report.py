"""The HTML report: context from a run folder, rendering, writing.

A small run folder is built here (a run record, two tiny PNGs, a site table);
the checks are on the page's content: the caution first and in full, no
network reference, escaping, margin colours equal to the timeline chart's,
print page breaks, relative links, and the atomic writer.
"""

from __future__ import annotations

import base64
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from ttmap.errors import InputDataError, OutputExistsError
from ttmap.io.report import REPORT_NAME, write_report
from ttmap.products.cautions import CAUTION_LINES, CAUTION_SHORT
from ttmap.products.report import ReportContext, png_data_uri, render_report, report_context_from_run
from ttmap.products.timeline import MARGIN_LEVEL_COLORS

SITES_CSV = """# Planning aid only (test)
# Units: minutes
name,lon,lat,status,moved_m,depth_m,front_min,earliest_min,latest_min,energy_T300s_min,window_T300s_min,notification_delay_min,minutes_left,preparation_min,safe_ground_distance_m,walking_speed_m_s,minutes_needed,margin_min,budget_status,defaults_used
Alpha <b>Cove</b>,1,2,moved to water,100,5,40.0,38.0,42.0,41.0,1.0,10.0,28.0,3.0,500,1.0,11.3,16.7,"time to reach safe ground on paper: margin is a planning figure, not a promise",
Beta,1,2,moved to water,100,5,12.0,11.4,12.6,13.0,1.0,15.0,-3.6,3.0,500,1.0,11.3,-14.9,"arrives before an official message can reach people: leave on natural signs (strong or long shaking, sea retreat)",
Gamma,1,2,ok,0,5,30.0,28.5,31.5,31.0,1.0,10.0,18.5,3.0,1000,1.0,19.7,-1.2,too little time: margin below zero,
Delta,1,2,ok,0,5,30.0,28.5,31.5,31.0,1.0,10.0,18.5,3.0,,1.0,,,no distance to safe ground given,
Epsilon,1,2,ok,0,5,30.0,28.5,31.5,31.0,1.0,10.0,18.5,3.0,500,1.0,15.0,3.5,little margin: under 5 minutes,
"""


def _png(path: Path, color: tuple[float, float, float]) -> None:
    import matplotlib.image as mpimg

    img = np.ones((12, 16, 3)) * np.array(color)
    mpimg.imsave(path, img)


@pytest.fixture
def run_dir(tmp_path: Path) -> Path:
    out = tmp_path / "run"
    out.mkdir()
    _png(out / "map_front.png", (0.2, 0.5, 0.7))
    _png(out / "timeline.png", (0.9, 0.7, 0.3))
    (out / "sites.csv").write_text(SITES_CSV, encoding="utf-8")
    (out / "arrival_front.tif").write_bytes(b"not really a tif")
    record = {
        "schema": "ttmap-run-record",
        "schema_version": 2,
        "started_utc": "2026-01-01T00:00:00+00:00",
        "finished_utc": "2026-01-01T00:00:02+00:00",
        "command_line": "ttmap map bathy.tif --source 1,2 <script>alert(1)</script>",
        "inputs": {"bathymetry": {"path": "/data/bathy.tif", "sha256": "ab" * 32, "band": 1, "notes": []}},
        "parameters": {"source": {"kind": "point", "label": "test quake", "crs": "EPSG:4326",
                                  "params": {"lon": 1, "lat": 2}},
                       "speed": {"floor_depth_m": 5.0, "earth": "wgs84"}},
        "grid": {"shape": {"rows": 10, "cols": 20}, "crs": "EPSG:4326",
                 "bounds": {"left": 0, "bottom": 0, "right": 2, "top": 1}, "geographic": True,
                 "cell_size_m": {"row_m": 1000.0, "col_m": 900.0}},
        "product_sets": {"front": {"title": "front (long-wave speed, earliest arrival)",
                                   "cells_reached": 150, "water_cells": 160, "arrival_min_range": [0.1, 55.5]}},
        "timings_s": {"total_s": 1.5},
        "versions": {"ttmap": "0.1.0", "numpy": "2.0"},
        "products": ["arrival_front.tif", "map_front.png", "sites.csv", "timeline.png"],
    }
    (out / "run.json").write_text(json.dumps(record), encoding="utf-8")
    return out


class _Collect(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.refs: list[tuple[str, str, str]] = []
        self.text: list[str] = []
        self.tags: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        for k, v in attrs:
            if k in ("src", "href") and v is not None:
                self.refs.append((tag, k, v))

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def _parse(html: str) -> _Collect:
    p = _Collect()
    p.feed(html)
    return p


def test_caution_first_and_in_full(run_dir: Path) -> None:
    html = render_report(report_context_from_run(run_dir))
    body = html[html.index("<main>"):]
    first_section = body[: body.index("</section>")]
    for line in CAUTION_LINES:
        assert line in first_section
    assert CAUTION_SHORT in html[html.index("<footer>"):]


def test_self_contained_no_network_references(run_dir: Path) -> None:
    html = render_report(report_context_from_run(run_dir))
    parsed = _parse(html)
    assert parsed.refs
    for tag, attr, value in parsed.refs:
        assert not re.match(r"^[a-z][a-z0-9+.-]*://", value, re.I), (tag, attr, value[:60])
        assert not value.startswith("//")
    assert "<link" not in html and "@import" not in html and "url(" not in html
    # images are inline PNGs, equal to the files
    imgs = [v for t, a, v in parsed.refs if t == "img"]
    assert len(imgs) == 2 and all(v.startswith("data:image/png;base64,") for v in imgs)
    assert base64.b64decode(imgs[0].split(",", 1)[1]) == (run_dir / "map_front.png").read_bytes()
    # every product linked relatively, run.json included
    links = {v for t, a, v in parsed.refs if t == "a" and not v.startswith("#")}
    assert links == {"arrival_front.tif", "map_front.png", "sites.csv", "timeline.png", "run.json"}


def test_text_is_escaped(run_dir: Path) -> None:
    html = render_report(report_context_from_run(run_dir))
    assert "<script>alert(1)</script>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "Alpha &lt;b&gt;Cove&lt;/b&gt;" in html
    assert _parse(html).tags.count("script") == 1  # only the table-sorting script


def test_what_was_run_and_record(run_dir: Path) -> None:
    ctx = report_context_from_run(run_dir)
    facts = dict(ctx.run_facts)
    assert "test quake" in facts["Source"] and "lon 1" in facts["Source"]
    assert facts["Bathymetry"].startswith("bathy.tif") and "abababababab" in facts["Bathymetry"]
    assert "front (long-wave speed" in facts["Speed models"]
    assert facts["Grid"].startswith("10 x 20 cells, EPSG:4326")
    assert dict(ctx.versions)["numpy"] == "2.0"
    assert "150 of 160" in dict(ctx.record)["Product set front"]


def test_site_margins_coloured_as_the_timeline(run_dir: Path) -> None:
    ctx = report_context_from_run(run_dir)
    assert ctx.sites is not None
    levels = {row.cells[0]: row.level for row in ctx.sites.rows}
    # the chart's rule: wave before the message or a negative margin -> alert; little margin -> little
    assert levels == {"Alpha <b>Cove</b>": "plain", "Beta": "alert", "Gamma": "alert", "Delta": "plain",
                      "Epsilon": "little"}
    col = ctx.sites.level_column
    assert ctx.sites.headers[col] == "Margin"
    assert [row.cells[col] for row in ctx.sites.rows] == ["+16.7", "-14.9", "-1.2", "", "+3.5"]
    html = render_report(ctx)
    for level in ("alert", "little"):
        assert f"--{level}: {MARGIN_LEVEL_COLORS[level]};" in html
    assert html.count('<td class="num level-alert"') == 2


def test_print_css_one_page_per_section(run_dir: Path) -> None:
    html = render_report(report_context_from_run(run_dir))
    css = html[html.index("@media print"):]
    assert re.search(r"section\s*\{[^}]*break-before:\s*page", css)
    sections = re.findall(r"<section id=\"([a-z]+)\"", html)
    assert sections == ["caution", "run", "maps", "sites", "timeline", "record", "products"]


def test_comparison_shown_when_present(run_dir: Path) -> None:
    _png(run_dir / "sites_x_scenarios.png", (0.5, 0.5, 0.5))
    (run_dir / "earliest_by_site.csv").write_text(
        "# caution\nsite,earliest_scenario,front_min\nBeta,north,12.0\nAlpha,south,40.0\n", encoding="utf-8"
    )
    # files in the folder that the record does not list (left by another run) are not shown
    assert report_context_from_run(run_dir).comparison == ()
    record = json.loads((run_dir / "run.json").read_text(encoding="utf-8"))
    record["products"] += ["sites_x_scenarios.png", "earliest_by_site.csv"]
    (run_dir / "run.json").write_text(json.dumps(record), encoding="utf-8")
    ctx = report_context_from_run(run_dir)
    assert len(ctx.comparison) == 1 and ctx.comparison_table is not None
    assert ctx.comparison_table.numeric == (False, False, True)
    assert 'id="comparison"' in render_report(ctx)


def test_errors(tmp_path: Path, run_dir: Path) -> None:
    with pytest.raises(InputDataError, match="run.json.*does not exist"):
        report_context_from_run(tmp_path)
    (tmp_path / "run.json").write_text('{"x": 1}', encoding="utf-8")
    with pytest.raises(InputDataError, match="not a ttmap run record"):
        report_context_from_run(tmp_path)
    (run_dir / "timeline.png").write_bytes(b"GIF89a")
    with pytest.raises(InputDataError, match="not a PNG"):
        report_context_from_run(run_dir)
    with pytest.raises(InputDataError, match="not a PNG"):
        png_data_uri(run_dir / "timeline.png")
    empty = ReportContext(title="t", cautions=(), caution_short="", generated_utc="", run_facts=())
    with pytest.raises(InputDataError, match="no caution"):
        render_report(empty)


def test_write_report_atomic_and_refuses(run_dir: Path) -> None:
    html = render_report(report_context_from_run(run_dir))
    target = run_dir / REPORT_NAME
    assert write_report(target, html) == target
    assert target.read_text(encoding="utf-8") == html
    with pytest.raises(OutputExistsError):
        write_report(target, "<!DOCTYPE html><html></html>")
    with pytest.raises(InputDataError, match="not a complete HTML"):
        write_report(run_dir / "other.html", "<p>half</p>")
    assert not (run_dir / "other.html").exists()
    assert [p.name for p in run_dir.iterdir() if p.name.startswith(".")] == []


def test_context_from_a_site_map_record_in_memory(run_dir: Path) -> None:
    from ttmap.products.report import report_context_from_record

    record = json.loads((run_dir / "run.json").read_text(encoding="utf-8"))
    _png(run_dir / "map_site_Bay_A.png", (0.1, 0.6, 0.4))
    record.update(job="site-map", products=["map_site_Bay_A.png", "report.html"],
                  parameters={"speed_mode": "long-wave", "speed": {"floor_depth_m": 5.0}},
                  sites=[{"name": "Bay A", "moved_m": 120.0, "notification_delay_min": 10.0,
                          "notification_delay_from": "default", "cells_reached": 150,
                          "minutes_range": [0.5, 42.25]}],
                  sites_skipped=[{"name": "Inland", "reason": "no open water within 5 km"}],
                  combined_written=False, reciprocity="times hold both ways")
    (run_dir / "run.json").unlink()  # written after the report
    ctx = report_context_from_record(record, run_dir)
    assert [f.title for f in ctx.maps] == ["Minutes from a source here to Bay A"]
    assert ctx.sites is not None and ctx.sites.level_column == -1
    assert ctx.sites.rows[0].cells == ("Bay A", "120", "10.0", "default", "0.5", "42.2", "150")
    assert "Inland: no open water within 5 km" in ctx.sites.note
    # the report does not link itself; run.json is linked, to be written last
    assert [p.name for p in ctx.products] == ["map_site_Bay_A.png", "run.json"]
    html = render_report(ctx)
    assert "Margin colours" not in html and 'id="sites"' in html
    with pytest.raises(InputDataError, match="job 'batch' is unknown"):
        report_context_from_record({**record, "job": "batch"}, run_dir)
