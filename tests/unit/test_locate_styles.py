"""Unit tests of ttmap.products.locate_styles: class edges, colours and the QML they make.

Reference for the region levels: the chi-square quantiles of 2 degrees of
freedom (Numerical Recipes ch. 15.6, from memory; docs/references.md
section 12): Delta = -2 ln(1 - p) exactly, 2.30 at 68.3 %, 5.99 at 95 %,
9.21 at 99 %, and scipy.stats.chi2.ppf as the independent computation.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from scipy.stats import chi2

from ttmap.errors import InputDataError
from ttmap.products import locate_styles as ls
from ttmap.products.qml import classed_raster_qml, qml_renderer_summary
from ttmap.products.styles import SLD_NAMESPACE


def _discrete_class(uppers: list[float], values: np.ndarray) -> np.ndarray:
    """How QGIS's DISCRETE shader classes a value: the first class whose upper bound is >= it."""
    return np.searchsorted(np.asarray(uppers), values, side="left")


@pytest.mark.parametrize("level", [0.5, 0.6827, 0.9, 0.95, 0.99, 0.999])
@pytest.mark.parametrize("best", [0.0, 3.7, 41.2])
def test_misfit_classes_have_the_region_level_as_an_edge(level: float, best: float) -> None:
    classes = ls.misfit_classes(best, level)
    uppers = [c.upper for c in classes]
    delta = float(chi2.ppf(level, 2))  # scipy, independent of the closed form below
    assert delta == pytest.approx(-2.0 * math.log(1.0 - level), rel=1e-9)
    assert any(u == pytest.approx(best + delta, rel=1e-12) for u in uppers)
    assert all(b > a for a, b in zip(uppers, uppers[1:]))
    assert math.isinf(uppers[-1])
    # a one-sigma class (2.30, Numerical Recipes table) inside the region only when the level is wider
    has_sigma = any(u == pytest.approx(best + 2.2957, abs=1e-3) for u in uppers)
    n_inside = sum(u <= best + delta * (1 + 1e-12) for u in uppers)
    assert n_inside == (2 if level > 0.6828 else 1)
    assert has_sigma == (level >= 0.6827)


def test_misfit_colours_mark_exactly_the_region() -> None:
    """A cell is drawn in a region colour if and only if misfit <= best + Delta (the region's rule)."""
    rng = np.random.default_rng(7)
    best, level = 4.2, 0.95
    misfit = best + rng.exponential(30.0, 20000)
    misfit[:50] = best + chi2.ppf(level, 2) * rng.uniform(0.0, 1.0, 50)  # some cells surely inside
    classes = ls.misfit_classes(best, level, max_excess=float((misfit - best).max()))
    idx = _discrete_class([c.upper for c in classes], misfit)
    colour = np.array([c.color for c in classes])[idx]
    inside = np.isin(colour, ls.INSIDE_COLORS)
    region = misfit <= best + chi2.ppf(level, 2)
    assert region.sum() > 50
    np.testing.assert_array_equal(inside, region)
    # the region colours are used by no class outside it, and the labels say which side
    for c in classes:
        assert ("inside" in c.label) == (c.color in ls.INSIDE_COLORS)


def test_misfit_far_classes_follow_the_data() -> None:
    near = ls.misfit_classes(1.0, 0.95, max_excess=20.0)
    far = ls.misfit_classes(1.0, 0.95, max_excess=30000.0)
    assert len(far) > len(near)
    assert [c.upper for c in near][-2] < 21.0
    finite = [c.upper - 1.0 for c in far if math.isfinite(c.upper)]
    assert finite[-1] == 10000.0 and len(finite) <= 4 + 4  # 2 inside, 2 quantiles, at most 4 far


def test_misfit_qml_is_the_classes() -> None:
    text = ls.misfit_qml(2.0, 0.95, layer_name="locate_misfit", max_excess=500.0)
    summary = qml_renderer_summary(text)
    assert summary["renderer"] == "singlebandpseudocolor"
    assert summary["classes"] == len(ls.misfit_classes(2.0, 0.95, max_excess=500.0))
    assert 'colorRampType="DISCRETE"' in text and "95 % region" in text


@pytest.mark.parametrize("bad", [-1.0, math.nan, math.inf])
def test_misfit_classes_refuse_a_bad_best(bad: float) -> None:
    with pytest.raises(InputDataError, match="best misfit"):
        ls.misfit_classes(bad, 0.95)


def test_origin_time_classes_are_round_and_hold_the_best_origin() -> None:
    values = np.concatenate([np.linspace(-52.0, -20.0, 500), [np.nan, -300.0]])
    classes = ls.origin_time_classes(values, include=(-12.4,))
    uppers = [c.upper for c in classes]
    finite = uppers[:-1]
    steps = np.diff(finite)
    assert np.allclose(steps, steps[0]) and steps[0] in (1.0, 2.0, 5.0, 10.0, 20.0, 50.0)
    assert all(float(u / steps[0]).is_integer() for u in finite)
    # the best origin (-12.4) sits in a closed class, not in the open ends
    k = int(_discrete_class(uppers, np.array([-12.4]))[0])
    assert 0 < k < len(uppers) - 1
    # the 2nd..98th percentile lies inside the closed classes
    p2, p98 = np.nanpercentile(values, [2, 98])
    assert finite[0] <= p2 and p98 <= finite[-1]
    assert "or earlier" in classes[0].label and "later than" in classes[-1].label


def test_origin_time_classes_refuse_an_empty_raster() -> None:
    with pytest.raises(InputDataError, match="no finite value"):
        ls.origin_time_classes(np.full(4, np.nan))


def test_origin_time_qml_states_the_reference() -> None:
    text = ls.origin_time_qml(np.linspace(-30, 0, 50), reference="2030-01-01T00:12:15+00:00",
                              layer_name="locate_origin_time", best_origin_min=-10.0)
    assert "minutes after 2030-01-01T00:12:15+00:00" in text
    assert qml_renderer_summary(text)["renderer"] == "singlebandpseudocolor"


def _sld_region(text: str) -> dict[str, str]:
    root = ET.fromstring(text.encode("utf-8"))
    return {c.get("name", ""): (c.text or "") for c in root.iter(f"{{{SLD_NAMESPACE}}}CssParameter")}


def _qml_fill(text: str) -> dict[str, str]:
    root = ET.fromstring(text.split("\n", 1)[1])
    layer = root.find("renderer-v2/symbols/symbol/layer")
    assert layer is not None and layer.get("class") == "SimpleFill"
    return {p.get("k", ""): p.get("v", "") for p in layer.findall("prop")}


def test_region_qml_has_the_colours_of_the_sld() -> None:
    sld = _sld_region(ls.region_sld("95 %"))
    qml = _qml_fill(ls.region_qml("95 %"))

    def rgba(hex_color: str, opacity: float) -> str:
        h = hex_color.lstrip("#")
        return f"{int(h[0:2], 16)},{int(h[2:4], 16)},{int(h[4:6], 16)},{round(255 * opacity)}"

    assert qml["color"] == rgba(sld["fill"], float(sld["fill-opacity"]))
    assert qml["outline_color"] == rgba(sld["stroke"], 1.0)
    # SLD pixels are 0.28 mm (OGC Symbology Encoding 1.1, "standardized rendering pixel size")
    assert float(qml["outline_width"]) == pytest.approx(float(sld["stroke-width"]) * 0.28)
    assert qml["outline_width_unit"] == "MM"


def test_gauge_ranges_cover_the_line_without_gaps() -> None:
    rows = ls.gauge_ranges()
    assert rows[0][0] == -math.inf and rows[-1][1] == math.inf
    assert all(a[1] == b[0] for a, b in zip(rows, rows[1:]))
    assert len(rows) == len(ls.GAUGE_COLORS)
    summary = qml_renderer_summary(ls.gauges_qml())
    assert summary == {"renderer": "graduatedSymbol", "classes": len(rows), "label_field": "name"}


@pytest.mark.parametrize(
    ("uppers", "colors", "labels", "match"),
    [
        ([], [], [], "empty"),
        ([2.0, 1.0], ["#000000", "#ffffff"], ["a", "b"], "increasing"),
        ([1.0, 2.0], ["#000000"], ["a", "b"], "one of each"),
    ],
)
def test_classed_raster_qml_refuses_bad_classes(uppers, colors, labels, match) -> None:
    with pytest.raises(InputDataError, match=match):
        classed_raster_qml(uppers, colors, labels, layer_name="x", title="x")
