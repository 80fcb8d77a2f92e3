"""File-name text: non-ASCII letters transliterated, not dropped.

:func:`ascii_name` is the one transliteration behind every file name ttmap
derives from a user's text (site names, scenario names). Unicode NFKD
decomposition removes accents (``Ō`` -> ``O``); letters that do not decompose
get a fixed spelling from :data:`TRANSLITERATION` (common practice, no
source: the usual Latin-alphabet spellings, e.g. ``Ø`` -> ``O``, ``ß`` ->
``ss``), so "Ørnvik School" names ``Ornvik_School``, not ``rnvik_School``.
"""

from __future__ import annotations

import unicodedata

__all__ = ["TRANSLITERATION", "ascii_name"]

#: Letters NFKD leaves alone, and their ASCII spelling.
TRANSLITERATION: dict[str, str] = {
    "Ø": "O", "ø": "o", "Æ": "AE", "æ": "ae", "Œ": "OE", "œ": "oe", "ß": "ss", "ẞ": "SS",
    "Ł": "L", "ł": "l", "Đ": "D", "đ": "d", "Ð": "D", "ð": "d", "Þ": "Th", "þ": "th",
    "Ħ": "H", "ħ": "h", "ı": "i", "Ŋ": "N", "ŋ": "n", "Ŧ": "T", "ŧ": "t",
}
_TABLE = str.maketrans(TRANSLITERATION)


def ascii_name(text: str) -> str:
    """``text`` in ASCII letters: accents removed, other Latin letters spelled out.

    Characters with no Latin spelling (e.g. CJK) are dropped; the caller
    decides what to do with what is left.

    Examples
    --------
    >>> ascii_name("Ørnvik School")
    'Ornvik School'
    >>> ascii_name("Łódź Straße, Þórshöfn")
    'Lodz Strasse, Thorshofn'
    >>> ascii_name("Port Ōrua")
    'Port Orua'
    """
    spelled = str(text).translate(_TABLE)
    return unicodedata.normalize("NFKD", spelled).encode("ascii", "ignore").decode("ascii")
