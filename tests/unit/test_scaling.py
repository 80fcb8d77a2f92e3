"""Unit tests of ttmap.physics.scaling: coefficients, check rows, cap, errors, moment.

Coefficients are checked against the published regressions (source beside each row,
as read for docs/references.md §5). The L x W check rows are [C]:
computed from those coefficients and rounded to the km.
"""

from __future__ import annotations

import dataclasses
import doctest
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from ttmap.errors import InputDataError
from ttmap.physics import scaling
from ttmap.physics.scaling import (
    SCALING_RELATIONS,
    ScalingRelation,
    rupture_size_km,
    seismic_moment_n_m,
)
from ttmap.defaults import SCALING_RELATION

ALL_KEYS = {
    "strasser2010-interface",
    "blaser2010-reverse",
    "blaser2010-reverse-oceanic",
    "blaser2010-all",
    "wells-coppersmith1994-reverse",
    "wells-coppersmith1994-all",
    "papazachos2004-subduction",
}

# key: (length_a, length_b, width_a, width_b); log10(km) = a + b Mw
PUBLISHED_COEFFICIENTS = {
    # Strasser et al. 2010, Seismol. Res. Lett. 81(6):941-950, interface [S]
    "strasser2010-interface": (-2.477, 0.585, -0.882, 0.351),
    # Blaser et al. 2010, Bull. Seismol. Soc. Am. 100(6):2914-2926, reverse (all) [S]
    "blaser2010-reverse": (-2.37, 0.57, -1.86, 0.46),
    # Blaser et al. 2010, BSSA 100(6):2914-2926, reverse, oceanic subduction [S]
    "blaser2010-reverse-oceanic": (-2.81, 0.62, -1.79, 0.45),
    # Blaser et al. 2010, BSSA 100(6):2914-2926, all mechanisms [S]
    "blaser2010-all": (-2.31, 0.57, -1.56, 0.41),
    # Wells & Coppersmith 1994, BSSA 84(4):974-1002, reverse, subsurface RLD and RW [S]
    "wells-coppersmith1994-reverse": (-2.42, 0.58, -1.61, 0.41),
    # Wells & Coppersmith 1994, BSSA 84(4):974-1002, all slip types [S]
    "wells-coppersmith1994-all": (-2.44, 0.59, -1.01, 0.32),
    # Papazachos et al. 2004, Bull. Geol. Soc. Greece 36, subduction: coefficients [S],
    # citation details [from memory]
    "papazachos2004-subduction": (-2.19, 0.55, -0.63, 0.31),
}

CHECK_ROWS = [
    # key, Mw, length_km, width_km: [C] from the coefficients above, rounded to the km
    ("strasser2010-interface", 8.0, 160, 84),
    ("strasser2010-interface", 9.0, 614, 189),
    ("blaser2010-reverse", 8.0, 155, 66),
    ("blaser2010-reverse", 9.0, 575, 191),
    ("blaser2010-reverse-oceanic", 8.0, 141, 65),
    ("blaser2010-reverse-oceanic", 9.0, 589, 182),
    ("wells-coppersmith1994-reverse", 8.0, 166, 47),
    ("wells-coppersmith1994-reverse", 9.0, 631, 120),
    ("papazachos2004-subduction", 8.0, 162, 71),
    ("papazachos2004-subduction", 9.0, 575, 145),
]


# --- registry and coefficients ---------------------------------------------------------


def test_registry_holds_exactly_the_documented_relations():
    assert set(SCALING_RELATIONS) == ALL_KEYS
    for key, rel in SCALING_RELATIONS.items():
        assert isinstance(rel, ScalingRelation)
        assert rel.key == key


def test_default_relation_is_strasser_interface():
    assert SCALING_RELATION == "strasser2010-interface"
    assert rupture_size_km(8.5) == rupture_size_km(8.5, "strasser2010-interface")


@pytest.mark.parametrize(("key", "coefficients"), sorted(PUBLISHED_COEFFICIENTS.items()))
def test_coefficients_match_publication(key, coefficients):
    rel = SCALING_RELATIONS[key]
    assert (rel.length_a, rel.length_b, rel.width_a, rel.width_b) == coefficients


@pytest.mark.parametrize(
    ("key", "year", "pages"),
    [
        ("strasser2010-interface", "(2010)", "941-950"),
        ("blaser2010-reverse", "(2010)", "2914-2926"),
        ("blaser2010-reverse-oceanic", "(2010)", "2914-2926"),
        ("blaser2010-all", "(2010)", "2914-2926"),
        ("wells-coppersmith1994-reverse", "(1994)", "974-1002"),
        ("wells-coppersmith1994-all", "(1994)", "974-1002"),
        ("papazachos2004-subduction", "(2004)", "Bulletin of the Geological Society of Greece 36"),
    ],
)
def test_citations_carry_year_and_pages(key, year, pages):
    citation = SCALING_RELATIONS[key].citation
    assert year in citation
    assert pages in citation


@pytest.mark.parametrize(
    "key",
    # docs/references.md §5 tags these [from memory]: Blaser reverse sigma and
    # regression type, Wells & Coppersmith reverse sigma, Papazachos citation.
    ["blaser2010-reverse", "wells-coppersmith1994-reverse", "papazachos2004-subduction"],
)
def test_notes_flag_what_is_from_memory(key):
    assert "from memory" in SCALING_RELATIONS[key].note


def test_relation_is_frozen():
    rel = SCALING_RELATIONS["strasser2010-interface"]
    with pytest.raises(dataclasses.FrozenInstanceError):
        rel.length_a = 0.0  # type: ignore[misc]


def test_registry_is_read_only():
    with pytest.raises(TypeError):
        SCALING_RELATIONS["mine"] = SCALING_RELATIONS[SCALING_RELATION]  # type: ignore[index]


# --- check rows -----------------------------------------------------------------------------


@pytest.mark.parametrize(("key", "mw", "length_km", "width_km"), CHECK_ROWS)
def test_check_rows_to_the_km(key, mw, length_km, width_km):
    length, width = rupture_size_km(mw, key)
    assert isinstance(length, float) and isinstance(width, float)
    assert round(length) == length_km
    assert round(width) == width_km


@pytest.mark.parametrize("key", sorted(ALL_KEYS))
def test_size_follows_the_log_linear_law(key):
    # One magnitude unit multiplies L by 10^b exactly (no cap reached below Mw 8).
    rel = SCALING_RELATIONS[key]
    l6, w6 = rupture_size_km(6.0, key)
    l7, w7 = rupture_size_km(7.0, key)
    assert_allclose(l7 / l6, 10.0**rel.length_b, rtol=1e-12)
    assert_allclose(w7 / w6, 10.0**rel.width_b, rtol=1e-12)


# --- width cap (common practice, no source: seismogenic width ~200 km) -----------------


def test_width_is_capped_at_200_km_by_default():
    # Blaser reverse at Mw 9.5: 10^(-1.86 + 0.46 * 9.5) = 324 km uncapped [C].
    length, width = rupture_size_km(9.5, "blaser2010-reverse")
    assert width == 200.0
    length_free, width_free = rupture_size_km(9.5, "blaser2010-reverse", max_width_km=None)
    assert round(width_free) == 324
    assert length == length_free  # the cap never touches the length


def test_custom_width_cap():
    assert rupture_size_km(9.0, max_width_km=100.0)[1] == 100.0
    # A cap above the median width changes nothing.
    assert rupture_size_km(9.0, max_width_km=1000.0) == rupture_size_km(9.0, max_width_km=None)


@pytest.mark.parametrize("bad", [0.0, -50.0, math.nan, math.inf])
def test_bad_width_cap(bad):
    with pytest.raises(InputDataError, match=r"max_width_km = .*or None for no cap"):
        rupture_size_km(8.0, max_width_km=bad)


# --- errors ---------------------------------------------------------------------------------


def test_unknown_relation_lists_valid_keys():
    with pytest.raises(InputDataError, match=r"unknown scaling relation 'strasser'") as info:
        rupture_size_km(8.0, "strasser")
    for key in ALL_KEYS:
        assert key in str(info.value)


@pytest.mark.parametrize("bad", [5.9, 9.7, -1.0, math.nan, math.inf])
def test_magnitude_out_of_range_names_value_and_range(bad):
    with pytest.raises(InputDataError, match=r"mw = .* outside the accepted range 6\.0 to 9\.6"):
        rupture_size_km(bad)


@pytest.mark.parametrize("mw", [6.0, 9.6])
def test_range_ends_are_accepted(mw):
    length, width = rupture_size_km(mw)
    assert length > 0 and width > 0


def test_non_numeric_magnitude():
    with pytest.raises(InputDataError, match=r"mw = 'big'"):
        rupture_size_km("big")  # type: ignore[arg-type]


def test_errors_are_value_errors():
    with pytest.raises(ValueError):
        rupture_size_km(8.0, "nope")


# --- seismic moment -------------------------------------------------------------------------


def test_seismic_moment_mw9():
    # Mw = 2/3 (log10 M0 - 9.1), M0 in N m [S]; Mw 9 -> 3.98e22 N m [C].
    assert_allclose(seismic_moment_n_m(9.0), 3.98e22, rtol=2e-3)


def test_seismic_moment_matches_dyne_cm_form():
    # Same definition with M0 in dyn cm: Mw = 2/3 (log10 M0 - 16.1) [S];
    # 1 N m = 1e7 dyn cm.
    mw = np.array([6.0, 7.3, 8.8])
    m0_dyn_cm = seismic_moment_n_m(mw) * 1e7
    assert_allclose(2.0 / 3.0 * (np.log10(m0_dyn_cm) - 16.1), mw, rtol=0, atol=1e-12)


def test_seismic_moment_array_and_errors():
    out = seismic_moment_n_m([8.0, 9.0])
    assert out.shape == (2,)
    assert_allclose(out[1] / out[0], 10**1.5, rtol=1e-12)
    with pytest.raises(InputDataError, match=r"mw = nan"):
        seismic_moment_n_m([8.0, math.nan])


# --- doctests -------------------------------------------------------------------------------


def test_doctests_pass():
    result = doctest.testmod(scaling)
    assert result.attempted > 0
    assert result.failed == 0
