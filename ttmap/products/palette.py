"""The one colour ramp for arrival times, shared by maps and style files.

Early arrivals take the first colour. The ramp is sampled from a matplotlib
colormap, imported only when colours are asked for.
"""

from __future__ import annotations

import re

import numpy as np

from ttmap.errors import InputDataError

__all__ = ["ARRIVAL_CMAP", "arrival_colors_hex", "check_hex_colors"]

#: Default colormap for arrival times (matplotlib name). Reversed viridis:
#: bright for the earliest arrivals, dark for the latest; perceptually
#: uniform and readable with the common forms of colour-vision deficiency.
ARRIVAL_CMAP: str = "viridis_r"

_HEX_RE = re.compile(r"^#[0-9a-fA-F]{6}$")


def arrival_colors_hex(n: int, cmap: str = ARRIVAL_CMAP) -> list[str]:
    """``n`` colours from a matplotlib colormap, earliest arrival first.

    Parameters
    ----------
    n : int
        Number of colours, ``>= 1``. They are spread evenly over the whole
        colormap, both ends included (one colour: the first end).
    cmap : str
        Name of a registered matplotlib colormap.

    Returns
    -------
    list of str
        ``"#rrggbb"`` strings, lower case.

    Raises
    ------
    InputDataError
        ``n`` is not a whole number >= 1, or ``cmap`` is unknown.

    Examples
    --------
    >>> arrival_colors_hex(3, "gray")
    ['#000000', '#808080', '#ffffff']
    >>> arrival_colors_hex(2) == arrival_colors_hex(2, "viridis")[::-1]
    True
    """
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise InputDataError(f"number of colours {n!r} is not a whole number >= 1")
    import matplotlib
    from matplotlib.colors import to_hex

    try:
        colormap = matplotlib.colormaps[cmap]
    except KeyError as err:
        raise InputDataError(
            f"colour map {cmap!r} is unknown; give a matplotlib colormap name such as "
            f"{ARRIVAL_CMAP!r}"
        ) from err
    positions = np.linspace(0.0, 1.0, int(n)) if n > 1 else np.zeros(1)
    return [to_hex(colormap(float(p)), keep_alpha=False) for p in positions]


def check_hex_colors(colors_hex: list[str] | tuple[str, ...]) -> list[str]:
    """Validate ``"#rrggbb"`` colours and return them in lower case.

    Raises
    ------
    InputDataError
        An entry is not a ``#`` followed by six hexadecimal digits.

    Examples
    --------
    >>> check_hex_colors(["#FFAA00"])
    ['#ffaa00']
    """
    out = []
    for c in colors_hex:
        if not isinstance(c, str) or not _HEX_RE.match(c):
            raise InputDataError(f"colour {c!r} is not of the form '#rrggbb'; e.g. '#2a788e'")
        out.append(c.lower())
    return out
