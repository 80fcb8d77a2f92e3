"""The caution footer and the text layout every ttmap figure shares.

- :func:`caution_footer` / :func:`draw_caution_footer`: the caution box at the
  bottom (maps, timeline, comparison chart), always with the natural-warning
  line (:data:`ttmap.products.cautions.NATURAL_WARNING`);
- :func:`draw_title_block`: title and subtitle that always fit the figure
  width: shrunk a little, then wrapped (at ``|`` separators first);
- :func:`place_legend`: a figure legend in as many columns as fit the width.

matplotlib is not imported here: the functions take a Figure made by the caller
(on an Agg canvas, so text can be measured).
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass
from typing import Any

from ttmap.products.cautions import NATURAL_WARNING

__all__ = [
    "CautionFooter",
    "caution_footer",
    "draw_caution_footer",
    "draw_title_block",
    "fit_text_width",
    "fit_yticklabels",
    "place_legend",
    "with_natural_warning",
]

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
    >>> print(caution_footer("Planning aid only.", 8.0).text)  # doctest: +NORMALIZE_WHITESPACE
    Caution: Planning aid only. Strong or long shaking, or a sudden fall or rise of the
    sea, is itself the warning: go to high ground at once.
    """
    chars = max(40, int((width_in - 0.9) * 72.0 / (0.52 * FOOTER_FONT_PT)))
    paragraphs = [" ".join(p.split()) for p in with_natural_warning(caution).splitlines() if p.strip()]
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


def with_natural_warning(caution: str) -> str:
    """``caution`` with the natural-warning line added unless it already says so.

    A text of several lines gets it as one more line; a single text as one
    more sentence.

    Examples
    --------
    >>> with_natural_warning("Planning aid only.").endswith("go to high ground at once.")
    True
    >>> with_natural_warning("The quake is itself the warning.")
    'The quake is itself the warning.'
    """
    if "itself the warning" in caution:
        return caution
    if "\n" in caution.strip():
        return caution.rstrip() + "\n" + NATURAL_WARNING
    return " ".join(caution.split()) + " " + NATURAL_WARNING


def _renderer(fig: Any) -> Any:
    return fig.canvas.get_renderer()


def _width_px(text: Any, renderer: Any) -> float:
    return float(text.get_window_extent(renderer).width)


def _pack(pieces: list[str], sep: str, chars: int) -> list[str]:
    """Greedy lines of at most ``chars`` characters from ``pieces`` joined by ``sep``."""
    lines: list[str] = []
    for piece in pieces:
        if lines and len(lines[-1]) + len(sep) + len(piece) <= chars:
            lines[-1] = lines[-1] + sep + piece
        else:
            lines.append(piece)
    return lines


def _wrap(text: str, chars: int) -> str:
    """Wrap at ``  |  `` separators first, then at spaces, to about ``chars`` per line."""
    chars = max(8, chars)
    out: list[str] = []
    for para in text.split("\n"):
        pieces = [p.strip() for p in para.split("|")] if "|" in para else [para]
        for line in _pack(pieces, "  |  ", chars):
            if len(line) > chars:
                out.extend(textwrap.wrap(line, width=chars, break_long_words=True) or [""])
            else:
                out.append(line)
    return "\n".join(out)


def fit_text_width(text: Any, max_width_px: float, *, min_fontsize: float, max_lines: int = 4) -> None:
    """Make a matplotlib Text at most ``max_width_px`` wide: shrink, then wrap, then shrink.

    The font shrinks to at most ``min_fontsize``; if the text is still too
    wide it is wrapped (at ``|`` separators first, then at spaces) into as few
    lines as fit, at most ``max_lines`` (more if even that is too wide); a
    last shrink handles single words longer than the width.
    """
    fig = text.get_figure()
    renderer = _renderer(fig)
    original = text.get_text()
    size = float(text.get_fontsize())
    width = _width_px(text, renderer)
    if width <= max_width_px or not original:
        return
    # shrink first, down to min_fontsize
    shrunk = max(min_fontsize, size * max_width_px / width)
    text.set_fontsize(shrunk)
    width = _width_px(text, renderer)
    if width <= max_width_px:
        return
    one_line = " ".join(original.split("\n"))
    chars = max(8, int(len(one_line) * max_width_px / width))
    for _ in range(60):
        text.set_text(_wrap(one_line, chars))
        width = _width_px(text, renderer)
        if width <= max_width_px or chars <= 8:
            break
        chars -= max(1, chars // 12)
    lines = text.get_text().count("\n") + 1
    while (width > max_width_px or lines > max_lines) and text.get_fontsize() > 5.0:
        text.set_fontsize(text.get_fontsize() - 0.5)
        width = _width_px(text, renderer)
        if lines > max_lines:
            lines = max_lines  # accept more lines once the font is at its floor


def draw_title_block(
    fig: Any,
    title: str,
    subtitle: str = "",
    *,
    top_in: float = 0.18,
    side_in: float = 0.25,
    title_pt: float = 13.0,
    subtitle_pt: float = 9.5,
) -> float:
    """Draw the title and subtitle at the top of ``fig``, fitted to its width.

    Returns
    -------
    float
        Height taken from the top edge, inches (down to the subtitle's bottom
        plus a small gap), for the caller's layout.
    """
    fig_w, fig_h = (float(v) for v in fig.get_size_inches())
    dpi = float(fig.dpi)
    renderer = _renderer(fig)
    max_px = (fig_w - 2.0 * side_in) * dpi
    t = fig.text(
        0.5, 1.0 - top_in / fig_h, title, ha="center", va="top", fontsize=title_pt,
        fontweight="bold", gid="ttmap-title", linespacing=1.15,
    )
    fit_text_width(t, max_px, min_fontsize=max(9.0, title_pt * 0.8))
    bottom_in = top_in + t.get_window_extent(renderer).height / dpi
    if subtitle:
        s = fig.text(
            0.5, 1.0 - (bottom_in + 0.08) / fig_h, subtitle, ha="center", va="top",
            fontsize=subtitle_pt, color="#333333", gid="ttmap-subtitle", linespacing=1.2,
        )
        fit_text_width(s, max_px, min_fontsize=max(7.0, subtitle_pt * 0.85))
        bottom_in += 0.08 + s.get_window_extent(renderer).height / dpi
    return bottom_in + 0.1


def place_legend(
    fig: Any,
    handles: list[Any],
    bottom_in: float,
    *,
    fontsize: float = 8.0,
    side_in: float = 0.2,
    max_ncol: int | None = None,
    **kwargs: Any,
) -> tuple[Any, float]:
    """A figure legend centred above ``bottom_in``, in as many columns as fit the width.

    Returns
    -------
    (Legend or None, float)
        The legend and its height in inches (0 without handles).
    """
    if not handles:
        return None, 0.0
    fig_w, fig_h = (float(v) for v in fig.get_size_inches())
    dpi = float(fig.dpi)
    renderer = _renderer(fig)
    legend = None
    ncol = min(len(handles), max_ncol or len(handles))
    while ncol >= 1:
        legend = fig.legend(
            handles=handles, loc="lower center", ncol=ncol,
            bbox_to_anchor=(0.5, bottom_in / fig_h), frameon=False, fontsize=fontsize,
            borderaxespad=0.0, **kwargs,
        )
        if legend.get_window_extent(renderer).width <= (fig_w - 2.0 * side_in) * dpi or ncol == 1:
            break
        legend.remove()
        ncol -= 1
    assert legend is not None
    return legend, float(legend.get_window_extent(renderer).height) / dpi


def fit_yticklabels(ax: Any, max_width_px: float, *, min_fontsize: float = 6.0) -> None:
    """Make the y tick labels of ``ax`` at most ``max_width_px`` wide (shrink, then re-wrap).

    For row names (site names) at the left of a chart: the font shrinks to
    at most ``min_fontsize``; a name still too wide is wrapped onto more lines.
    """
    fig = ax.get_figure()
    renderer = _renderer(fig)
    labels = list(ax.get_yticklabels())
    if not labels:
        return
    widest = max(float(t.get_window_extent(renderer).width) for t in labels)
    if widest <= max_width_px:
        return
    size = float(labels[0].get_fontsize())
    new_size = max(min_fontsize, size * max_width_px / widest)
    texts = []
    for t in labels:
        t.set_fontsize(new_size)
        if t.get_window_extent(renderer).width > max_width_px:
            one = " ".join(t.get_text().split())
            chars = max(6, int(len(one) * max_width_px / t.get_window_extent(renderer).width))
            while chars > 6:
                t.set_text(_wrap(one, chars))
                if t.get_window_extent(renderer).width <= max_width_px:
                    break
                chars -= 1
        texts.append(t.get_text())
    ax.set_yticks(ax.get_yticks())
    ax.set_yticklabels(texts, fontsize=new_size)
