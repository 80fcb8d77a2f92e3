"""Shared type aliases."""

from __future__ import annotations

from typing import Literal, TypeAlias

import numpy as np
from numpy.typing import NDArray

__all__ = ["FloatArray", "BoolArray", "IntArray", "SpeedMode", "EarthModel"]

FloatArray: TypeAlias = NDArray[np.float64]
BoolArray: TypeAlias = NDArray[np.bool_]
IntArray: TypeAlias = NDArray[np.intp]

#: How wave speed is derived from depth: the long-wave front, the group
#: (energy) speed of one period, or the phase speed of one period.
SpeedMode: TypeAlias = Literal["long-wave", "group", "phase"]

#: Figure of the Earth used for geographic grids.
EarthModel: TypeAlias = Literal["wgs84", "sphere"]
