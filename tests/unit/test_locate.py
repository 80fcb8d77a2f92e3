"""Unit tests of ttmap.locate: pick validation and the streaming sums."""

from __future__ import annotations

import numpy as np
import pytest

from ttmap.errors import InputDataError
from ttmap.locate import MisfitSums, check_picks


def test_too_few_picks_refused():
    with pytest.raises(InputDataError, match="at least 3"):
        check_picks(["a", "b"], [1.0, 2.0], [1.0, 1.0], origin_known=False)
    with pytest.raises(InputDataError, match="at least 2"):
        check_picks(["a"], [1.0], [1.0], origin_known=True)


@pytest.mark.parametrize(
    ("names", "a", "s", "known", "match"),
    [
        (["a", "a", "b"], [1.0, 2.0, 3.0], [1.0] * 3, False, "'a' appears twice"),
        (["a", "b", "c"], [1.0, np.nan, 3.0], [1.0] * 3, False, "not a finite"),
        (["a", "b", "c"], [1.0, 2.0, 3.0], [1.0, 0.0, 1.0], False, "uncertainty"),
        (["a", "b"], [-5.0, 2.0], [1.0, 1.0], True, "before the origin"),
        (["a", "b"], [1.0], [1.0, 1.0], True, "one of each"),
    ],
)
def test_bad_picks_one_line(names, a, s, known, match):
    with pytest.raises(InputDataError, match=match) as err:
        check_picks(names, a, s, origin_known=known)
    assert "\n" not in str(err.value)


def test_streaming_sums_equal_direct_minimum_over_t0():
    rng = np.random.default_rng(1)
    fields = rng.uniform(100, 900, size=(4, 3, 5))
    fields[2, 0, 0] = np.nan
    a = np.array([500.0, 700.0, 650.0, 900.0])
    s = np.array([5.0, 10.0, 8.0, 4.0])
    sums = MisfitSums((3, 5), a_ref_s=600.0)
    for f, ak, sk in zip(fields, a, s):
        sums.add(f, ak, sk)
    w = 1 / s**2
    r = a[:, None, None] - fields
    t0 = (w[:, None, None] * r).sum(0) / w.sum()
    chi2 = (w[:, None, None] * (r - t0) ** 2).sum(0)
    got = sums.s_rr - sums.s_r**2 / sums.s_w
    ok = sums.count == 4
    assert not ok[0, 0] and ok.sum() == 14
    np.testing.assert_allclose(got[ok], chi2[ok], rtol=1e-9)
    np.testing.assert_allclose((sums.s_r / sums.s_w + 600.0)[ok], t0[ok], rtol=1e-12)
    half = MisfitSums((3, 5), a_ref_s=600.0)
    rest = MisfitSums((3, 5), a_ref_s=600.0)
    for k in range(4):
        (half if k < 2 else rest).add(fields[k], a[k], s[k])
    merged = half.merge(rest)
    np.testing.assert_allclose(merged.s_rr, sums.s_rr)
