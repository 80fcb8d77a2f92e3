"""Earthquake source scaling: moment magnitude to rupture length and width.

Each relation is an empirical regression of the form

.. math:: \\log_{10} L = a_L + b_L M_w, \\qquad \\log_{10} W = a_W + b_W M_w

with rupture length ``L`` and down-dip width ``W`` in kilometres. They give
the *median* size of a rupture; real ruptures scatter about it. For Strasser
et al. (2010) one standard deviation is 0.18 in log10 L, a factor of about 1.5.

The default, Strasser et al. (2010) for subduction-interface events, is the
one fitted to the kind of earthquake that makes most ocean-wide tsunamis.
Wells and Coppersmith (1994) excluded subduction-interface thrusts from their
data; Blaser et al. (2010) found thrust ruptures shorter and wider than Wells
and Coppersmith predict.

Seismic moment follows from ``Mw = (2/3) (log10 M0 - 9.1)`` with ``M0`` in
N m (equivalently 16.1 with ``M0`` in dyn cm).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike

from ttmap.defaults import SCALING_RELATION
from ttmap._typing import FloatArray
from ttmap.errors import InputDataError

__all__ = [
    "MW_MAX",
    "MW_MIN",
    "SCALING_RELATIONS",
    "ScalingRelation",
    "rupture_size_km",
    "seismic_moment_n_m",
]

#: Smallest moment magnitude accepted by :func:`rupture_size_km`.
MW_MIN: float = 6.0
#: Largest moment magnitude accepted by :func:`rupture_size_km`.
MW_MAX: float = 9.6


@dataclass(frozen=True)
class ScalingRelation:
    """One magnitude-to-rupture-size regression.

    Attributes
    ----------
    key : str
        Short name used to select the relation, e.g. ``"strasser2010-interface"``.
    citation : str
        Full bibliographic citation.
    length_a, length_b : float
        ``log10(length_km) = length_a + length_b * Mw``.
    width_a, width_b : float
        ``log10(width_km) = width_a + width_b * Mw``.
    note : str
        Data set, scatter, and which parts of the citation or sigma were
        not checked against the source (marked "from memory").
    display_name : str
        Short name for maps and reports, e.g. "Strasser et al. 2010 (interface)".

    Examples
    --------
    >>> rel = SCALING_RELATIONS["strasser2010-interface"]
    >>> round(rel.length_km(8.0)), round(rel.width_km(8.0))
    (160, 84)
    """

    key: str
    citation: str
    length_a: float
    length_b: float
    width_a: float
    width_b: float
    note: str = ""
    display_name: str = ""

    def length_km(self, mw: float) -> float:
        """Median rupture length in km for moment magnitude *mw* (no range check)."""
        return float(10.0 ** (self.length_a + self.length_b * mw))

    def width_km(self, mw: float) -> float:
        """Median rupture width in km for moment magnitude *mw* (no range check, no cap)."""
        return float(10.0 ** (self.width_a + self.width_b * mw))


_STRASSER_2010 = (
    "Strasser, F. O., Arango, M. C. and Bommer, J. J. (2010). Scaling of the source "
    "dimensions of interface and intraslab subduction-zone earthquakes with moment "
    "magnitude. Seismological Research Letters 81(6), 941-950."
)
_BLASER_2010 = (
    "Blaser, L., Krueger, F., Ohrnberger, M. and Scherbaum, F. (2010). Scaling relations "
    "of earthquake source parameter estimates with special focus on subduction "
    "environment. Bulletin of the Seismological Society of America 100(6), 2914-2926."
)
_WELLS_COPPERSMITH_1994 = (
    "Wells, D. L. and Coppersmith, K. J. (1994). New empirical relationships among "
    "magnitude, rupture length, rupture width, rupture area, and surface displacement. "
    "Bulletin of the Seismological Society of America 84(4), 974-1002."
)
_PAPAZACHOS_2004 = (
    "Papazachos, B. C., Scordilis, E. M., Panagiotopoulos, D. G., Papazachos, C. B. and "
    "Karakaisis, G. F. (2004). Global relations between seismic fault parameters and "
    "moment magnitude of earthquakes. Bulletin of the Geological Society of Greece 36, "
    "1482-1489."
)
_AUTHORS_TITLE_FROM_MEMORY = (
    "Journal, volume, pages and coefficients checked in the source; co-author names "
    "and title from memory."
)

_RELATIONS: tuple[ScalingRelation, ...] = (
    ScalingRelation(
        key="strasser2010-interface",
        display_name="Strasser et al. 2010 (interface)",
        citation=_STRASSER_2010,
        length_a=-2.477,
        length_b=0.585,
        width_a=-0.882,
        width_b=0.351,
        note=(
            "Subduction-interface events. sigma(log10 L) = 0.180, sigma(log10 W) = 0.173. "
            + _AUTHORS_TITLE_FROM_MEMORY
        ),
    ),
    ScalingRelation(
        key="blaser2010-reverse",
        display_name="Blaser et al. 2010 (reverse)",
        citation=_BLASER_2010,
        length_a=-2.37,
        length_b=0.57,
        width_a=-1.86,
        width_b=0.46,
        note=(
            "Reverse-faulting events, all settings. Sigma and regression type from memory, "
            "not given here. " + _AUTHORS_TITLE_FROM_MEMORY
        ),
    ),
    ScalingRelation(
        key="blaser2010-reverse-oceanic",
        display_name="Blaser et al. 2010 (reverse, oceanic subduction)",
        citation=_BLASER_2010,
        length_a=-2.81,
        length_b=0.62,
        width_a=-1.79,
        width_b=0.45,
        note=(
            "Reverse-faulting events in oceanic subduction settings. " + _AUTHORS_TITLE_FROM_MEMORY
        ),
    ),
    ScalingRelation(
        key="blaser2010-all",
        display_name="Blaser et al. 2010 (all mechanisms)",
        citation=_BLASER_2010,
        length_a=-2.31,
        length_b=0.57,
        width_a=-1.56,
        width_b=0.41,
        note="All faulting mechanisms. " + _AUTHORS_TITLE_FROM_MEMORY,
    ),
    ScalingRelation(
        key="wells-coppersmith1994-reverse",
        display_name="Wells and Coppersmith 1994 (reverse)",
        citation=_WELLS_COPPERSMITH_1994,
        length_a=-2.42,
        length_b=0.58,
        width_a=-1.61,
        width_b=0.41,
        note=(
            "Reverse faulting; subsurface rupture length (RLD) and downdip width (RW). "
            "The data set excluded subduction-interface thrusts. "
            "Sigma 0.16 (L) and 0.15 (W) from memory. Title from memory."
        ),
    ),
    ScalingRelation(
        key="wells-coppersmith1994-all",
        display_name="Wells and Coppersmith 1994 (all slip types)",
        citation=_WELLS_COPPERSMITH_1994,
        length_a=-2.44,
        length_b=0.59,
        width_a=-1.01,
        width_b=0.32,
        note=(
            "All slip types; subsurface rupture length (RLD) and downdip width (RW). "
            "The data set excluded subduction-interface thrusts. Title from memory."
        ),
    ),
    ScalingRelation(
        key="papazachos2004-subduction",
        display_name="Papazachos et al. 2004 (subduction)",
        citation=_PAPAZACHOS_2004,
        length_a=-2.19,
        length_b=0.55,
        width_a=-0.63,
        width_b=0.31,
        note=(
            "Subduction-zone events. Coefficients checked in a source; the whole "
            "citation (authors, title, journal details, pages) is from memory."
        ),
    ),
)

#: Registry of the available relations, keyed by :attr:`ScalingRelation.key` (read-only).
SCALING_RELATIONS: Mapping[str, ScalingRelation] = MappingProxyType(
    {rel.key: rel for rel in _RELATIONS}
)


def rupture_size_km(
    mw: float,
    relation: str = SCALING_RELATION,
    *,
    max_width_km: float | None = 200.0,
) -> tuple[float, float]:
    """Median rupture length and width for a moment magnitude.

    Parameters
    ----------
    mw : float
        Moment magnitude, 6.0 <= mw <= 9.6.
    relation : str, optional
        Key of :data:`SCALING_RELATIONS`; default ``"strasser2010-interface"``.
    max_width_km : float or None, optional
        Upper bound on the width, in km. The default of 200 km stands for the
        down-dip extent of the seismogenic zone (common practice, no source).
        ``None`` disables the cap.

    Returns
    -------
    length_km, width_km : float
        Median rupture length along strike and width down dip, km.

    Raises
    ------
    InputDataError
        If *relation* is unknown (the message lists the valid keys), *mw*
        is not a finite number in [6.0, 9.6], or *max_width_km* is not
        positive.

    Examples
    --------
    >>> [round(v) for v in rupture_size_km(9.0)]
    [614, 189]
    >>> [round(v) for v in rupture_size_km(9.5, "blaser2010-reverse")]
    [1109, 200]
    >>> [round(v) for v in rupture_size_km(9.5, "blaser2010-reverse", max_width_km=None)]
    [1109, 324]
    """
    try:
        rel = SCALING_RELATIONS[relation]
    except (KeyError, TypeError):
        valid = ", ".join(sorted(SCALING_RELATIONS))
        raise InputDataError(
            f"unknown scaling relation {relation!r}; choose one of: {valid}"
        ) from None
    try:
        mw_f = float(mw)
    except (TypeError, ValueError) as err:
        raise InputDataError(
            f"moment magnitude must be a number, got mw = {mw!r}; "
            f"pass a value between {MW_MIN} and {MW_MAX}"
        ) from err
    if not (math.isfinite(mw_f) and MW_MIN <= mw_f <= MW_MAX):
        raise InputDataError(
            f"moment magnitude mw = {mw!r} is outside the accepted range "
            f"{MW_MIN} to {MW_MAX} of the scaling relations; pass a value in that range"
        )
    length_km = rel.length_km(mw_f)
    width_km = rel.width_km(mw_f)
    if max_width_km is not None:
        cap = float(max_width_km)
        if not (math.isfinite(cap) and cap > 0.0):
            raise InputDataError(
                f"width cap must be positive and finite, got max_width_km = {max_width_km!r}; "
                f"pass a width in km, or None for no cap"
            )
        width_km = min(width_km, cap)
    return length_km, width_km


def seismic_moment_n_m(mw: ArrayLike) -> FloatArray:
    """Scalar seismic moment ``M0 = 10^(1.5 Mw + 9.1)`` in N m.

    Inverse of ``Mw = (2/3) (log10 M0 - 9.1)``.

    Parameters
    ----------
    mw : float or ndarray, float
        Moment magnitude.

    Returns
    -------
    moment_n_m : float64 or ndarray of the same shape, N m

    Raises
    ------
    InputDataError
        If any magnitude is not finite.

    Examples
    --------
    >>> f"{seismic_moment_n_m(9.0):.3e}"
    '3.981e+22'
    """
    try:
        mw_arr = np.asarray(mw, dtype=np.float64)
    except (TypeError, ValueError) as err:
        raise InputDataError(
            f"moment magnitude must be a number, got mw = {mw!r}; pass a float"
        ) from err
    if not np.all(np.isfinite(mw_arr)):
        bad = float(mw_arr[~np.isfinite(mw_arr)].flat[0])
        raise InputDataError(
            f"moment magnitude must be finite, got mw = {bad!r}; pass a finite float"
        )
    out = 10.0 ** (1.5 * mw_arr + 9.1)
    return out[()] if out.ndim == 0 else out
