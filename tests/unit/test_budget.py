"""Time-budget arithmetic and status words (ttmap.products.budget).

Rows are computed by hand. References are named beside each check; tags as
in docs/references.md ([S] source read, [from memory], common practice = no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from ttmap import defaults
from ttmap.errors import InputDataError
from ttmap.products import budget as b
from ttmap.products.budget import (
    BUDGET_STATUSES,
    STATUS_BEFORE_MESSAGE,
    STATUS_NO_ARRIVAL,
    STATUS_NO_DISTANCE,
    STATUS_ON_PAPER,
    STATUS_TOO_LITTLE,
    little_margin_status,
    minutes_needed,
    reachable_distance_m,
    warning_budget,
)

# --------------------------------------------------------------------------------------
# Defaults and their sources
# --------------------------------------------------------------------------------------


def test_default_walking_speed_is_the_observed_2011_mean():
    # Mean evacuation speed observed in 2011, 2.65 km/h (MLIT survey, docs/references.md §6
    # [S, secondary source]); the 2002 guideline assumed 3.6 km/h = 1.0 m/s.
    assert defaults.WALKING_SPEED_M_S == pytest.approx(2.65 / 3.6, abs=0.005)
    assert defaults.WALKING_SPEED_M_S == 0.74
    assert defaults.WALKING_SPEED_M_S < 3.6 / 3.6  # more cautious than the guideline's 1.0 m/s


def test_default_delays_are_the_cited_values():
    # Departure delay of the guideline's worked example: 3 min (docs/references.md §6 [S]).
    assert defaults.PREPARATION_MIN == 3.0
    # Warning centres "can often" message within 10 min (IOC/ITIC glossary, docs/references.md
    # §6 [S]).
    assert defaults.NOTIFICATION_DELAY_MIN == 10.0
    # Little-margin threshold: common practice, no source.
    assert defaults.LITTLE_MARGIN_MIN == 5.0


def test_module_text_cites_each_default():
    doc = b.__doc__
    assert "2011" in doc and "MLIT" in doc and "secondary" in doc
    assert "worked example" in doc and "240 m" in doc
    assert '"can often"' in doc and "longer" in doc
    assert "Common practice, no source" in doc


# --------------------------------------------------------------------------------------
# Formulas
# --------------------------------------------------------------------------------------


def test_reachable_distance_matches_the_guideline_example():
    # Japanese guideline practice (docs/references.md §6 [S]): reachable distance =
    # v x (arrival - departure delay - climb); 1.0 m/s x (10 - 3 - 3) min = 240 m.
    assert reachable_distance_m(10.0, 3.0, 3.0, 1.0) == pytest.approx(240.0, abs=1e-12)


def test_reachable_distance_other_rows_and_arrays():
    # Hand rows: 0.74 m/s x (20 - 3 - 0) min x 60 = 754.8 m; no time left -> 0; NaN arrival -> NaN.
    got = reachable_distance_m(np.array([20.0, 5.0, np.nan]), 3.0, np.array([0.0, 3.0, 0.0]), 0.74)
    np.testing.assert_allclose(got, [754.8, 0.0, np.nan], rtol=1e-12)
    assert isinstance(reachable_distance_m(20.0, 3.0, 0.0, 0.74), float)


def test_minutes_needed_hand_rows():
    # 900 m at 1.0 m/s = 15 min, + 5 min preparation = 20 min.
    assert minutes_needed(900.0, 1.0, 5.0) == pytest.approx(20.0, abs=1e-12)
    # 1500 m at 1.2 m/s = 20.8333 min, + 3 = 23.8333 min.
    assert minutes_needed(1500.0, 1.2, 3.0) == pytest.approx(23.0 + 5.0 / 6.0, abs=1e-12)
    got = minutes_needed(np.array([0.0, 444.0, np.nan]), 0.74, 3.0)
    np.testing.assert_allclose(got, [3.0, 13.0, np.nan], rtol=1e-12)


def test_minutes_needed_and_reachable_distance_are_inverse():
    # Walking the reachable distance takes exactly the time left after delay and climb.
    d = reachable_distance_m(37.0, 4.0, 2.0, 0.9)
    assert minutes_needed(d, 0.9, 4.0 + 2.0) == pytest.approx(37.0, abs=1e-12)


@pytest.mark.parametrize(
    "args, match",
    [
        ((100.0, 0.0, 3.0), "walking_speed_m_s = 0.0"),
        ((100.0, -1.0, 3.0), "walking_speed_m_s = -1.0"),
        ((-5.0, 1.0, 3.0), "distance_m = -5.0"),
        ((100.0, 1.0, -1.0), "preparation_min = -1.0"),
        (("far", 1.0, 3.0), "not a number"),
    ],
)
def test_minutes_needed_refuses_bad_values(args, match):
    with pytest.raises(InputDataError, match=match):
        minutes_needed(*args)


# --------------------------------------------------------------------------------------
# warning_budget: each status on a hand-computed row
# --------------------------------------------------------------------------------------


def test_budget_with_time_on_paper():
    # left = 40 - 10 = 30; needed = 5 + 900/60 = 20; margin = 10 >= 5.
    r = warning_budget(40.0, 10.0, 5.0, 900.0, 1.0)
    assert (r.minutes_left, r.minutes_needed, r.margin_min) == pytest.approx((30.0, 20.0, 10.0))
    assert r.status == STATUS_ON_PAPER
    assert "planning figure" in r.status and "not a promise" in r.status


def test_budget_little_margin():
    # Arrival 30, delay 8 -> left 22. 800 m at 1.0 m/s + 3 min -> needed 16.333, margin 5.667.
    r = warning_budget(30.0, 8.0, 3.0, 800.0, 1.0)
    assert r.margin_min == pytest.approx(30.0 - 8.0 - 3.0 - 800.0 / 60.0)
    assert r.status == STATUS_ON_PAPER  # 5.67 >= 5
    # 900 m: needed 3 + 15 = 18, margin 22 - 18 = 4 < 5.
    r = warning_budget(30.0, 8.0, 3.0, 900.0, 1.0)
    assert r.margin_min == pytest.approx(4.0)
    assert r.status == "little margin: under 5 minutes"
    # The threshold is stated in the text.
    r = warning_budget(30.0, 8.0, 3.0, 900.0, 1.0, little_margin_min=2.0)
    assert r.status == STATUS_ON_PAPER
    assert little_margin_status(7.5) == "little margin: under 7.5 minutes"


def test_budget_too_little_time():
    # left = 25 - 10 = 15; needed = 3 + 1200/(0.75*60) = 3 + 26.667 = 29.667; margin -14.667.
    r = warning_budget(25.0, 10.0, 3.0, 1200.0, 0.75)
    assert r.minutes_needed == pytest.approx(3.0 + 1200.0 / 45.0)
    assert r.margin_min == pytest.approx(15.0 - 3.0 - 1200.0 / 45.0)
    assert r.status == STATUS_TOO_LITTLE


def test_budget_zero_margin_is_not_too_little():
    # left 20 - 10 = 10; needed 4 + 360/60 = 10; margin exactly 0 -> little, not negative.
    r = warning_budget(20.0, 10.0, 4.0, 360.0, 1.0)
    assert r.margin_min == 0.0
    assert r.status == little_margin_status()


@pytest.mark.parametrize("arrival", [6.0, 10.0])
def test_budget_wave_before_the_message(arrival):
    # Arrival at or before the notification delay, whatever the distance.
    r = warning_budget(arrival, 10.0, 3.0, 100.0, 1.0)
    assert r.minutes_left == pytest.approx(arrival - 10.0)
    assert r.status == STATUS_BEFORE_MESSAGE
    assert "natural signs" in r.status and "shaking" in r.status
    r = warning_budget(arrival, 10.0, 3.0, None, 1.0)
    assert r.status == STATUS_BEFORE_MESSAGE


def test_budget_without_distance():
    r = warning_budget(40.0, 10.0, 3.0, None, 0.74)
    assert r.minutes_left == 30.0
    assert math.isnan(r.minutes_needed) and math.isnan(r.margin_min)
    assert r.status == STATUS_NO_DISTANCE
    assert warning_budget(40.0, 10.0, 3.0, float("nan"), 0.74).status == STATUS_NO_DISTANCE


def test_budget_without_arrival():
    for arrival in (None, float("nan")):
        r = warning_budget(arrival, 10.0, 3.0, 500.0, 1.0)
        assert math.isnan(r.minutes_left) and math.isnan(r.margin_min)
        assert r.minutes_needed == pytest.approx(3.0 + 500.0 / 60.0)
        assert r.status == STATUS_NO_ARRIVAL


def test_status_words_never_give_a_bare_safety_verdict():
    texts = [*BUDGET_STATUSES, little_margin_status(3.0)]
    assert len(set(texts)) == len(texts)
    for text in texts:
        words = text.lower().replace(":", " ").replace(",", " ").split()
        for i, w in enumerate(words):
            if w in ("safe", "safety", "safely"):
                # only as the destination "safe ground"
                assert words[i + 1] == "ground", text
        assert "guarantee" not in text.lower()


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"walking_speed_m_s": 0.0}, r"walking_speed_m_s = 0\.0 m/s must be a positive"),
        ({"distance_m": -10.0}, r"distance_m = -10\.0 m must not be negative"),
        ({"notification_delay_min": -1.0}, r"notification_delay_min = -1\.0 min"),
        ({"preparation_min": float("nan")}, r"preparation_min = nan min"),
        ({"little_margin_min": -2.0}, r"little_margin_min = -2\.0"),
        ({"distance_m": "far"}, r"distance_m = 'far' is not a number"),
    ],
)
def test_budget_refuses_bad_values(kwargs, match):
    args = {
        "front_arrival_min": 30.0,
        "notification_delay_min": 10.0,
        "preparation_min": 3.0,
        "distance_m": 500.0,
        "walking_speed_m_s": 1.0,
    }
    args.update(kwargs)
    little = args.pop("little_margin_min", defaults.LITTLE_MARGIN_MIN)
    with pytest.raises(InputDataError, match=match):
        warning_budget(**args, little_margin_min=little)
