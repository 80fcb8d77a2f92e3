"""The caution footer every ttmap figure carries (maps, timeline, comparison chart).

matplotlib is not imported here: the functions take a Figure made by the caller.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass
from typing import Any

__all__ = ["CautionFooter", "caution_footer", "draw_caution_footer"]

#: Font size of the footer, points.
FOOTER_FONT_PT = 8.0
#: Distance from the bottom edge of the figure to the footer text, inches.
FOOTER_Y_IN = 0.12
_LINE_SPACING = 1.35


@dataclass(frozen=True)
class CautionFooter:
    """Wrapped caution text and its size."""

    text: str
    bullets: bool

    @property
    def height_in(self) -> float:
        """Height of the text block, inches (without the box padding)."""
        lines = self.text.count("\n") + 1
        return lines * FOOTER_FONT_PT * _LINE_SPACING / 72.0

    def top_in(self, pad_in: float) -> float:
        """Top of the footer above the figure's bottom edge, with ``pad_in`` for the box."""
        return FOOTER_Y_IN + self.height_in + pad_in


def caution_footer(caution: str, width_in: float) -> CautionFooter:
    """Wrap ``caution`` to a figure ``width_in`` inches wide.

    A text of several lines is one caution per line: it becomes a heading and
    one bullet each; a single text becomes one "Caution: ..." paragraph.

    Examples
    --------
    >>> caution_footer("Planning aid only.", 8.0).text
    'Caution: Planning aid only.'
    """
    chars = max(40, int((width_in - 0.9) * 72.0 / (0.52 * FOOTER_FONT_PT)))
    paragraphs = [" ".join(p.split()) for p in caution.splitlines() if p.strip()]
    if len(paragraphs) > 1:
        bullets = [
            textwrap.fill(p, width=chars, initial_indent="\u2022 ", subsequent_indent="  ")
            for p in paragraphs
        ]
        return CautionFooter("\n".join(["Caution:", *bullets]), True)
    return CautionFooter(textwrap.fill(f"Caution: {' '.join(paragraphs)}", width=chars), False)


def draw_caution_footer(fig: Any, footer: CautionFooter, fig_h_in: float) -> Any:
    """Draw the footer in its box at the bottom of ``fig``; returns the Text."""
    return fig.text(
        0.5,
        FOOTER_Y_IN / fig_h_in,
        footer.text,
        ha="center",
        va="bottom",
        fontsize=FOOTER_FONT_PT,
        color="#3d2e00",
        linespacing=_LINE_SPACING,
        multialignment="left" if footer.bullets else "center",
        gid="ttmap-caution",
        bbox={
            "boxstyle": "round,pad=0.45",
            "facecolor": "#fff4cc",
            "edgecolor": "#c79a00",
            "linewidth": 0.9,
        },
    )
