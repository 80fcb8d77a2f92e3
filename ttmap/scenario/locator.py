"""Line numbers of keys in TOML text: ``tomllib`` parses, this module locates.

:func:`locate_keys` walks TOML text once more with a small, lenient reader of
the same grammar and records the 1-based line of every key, array item and
table, so that a problem found in the parsed data can be reported as
``FILE:LINE``. :func:`format_key_path` writes a key path for people (array
positions counted from 1).
"""

from __future__ import annotations

import re
from collections.abc import Sequence

__all__ = ["KeyPath", "format_key_path", "locate_keys"]

#: A key path in parsed TOML: table and key names, array positions counted from 0.
KeyPath = tuple[str | int, ...]


def format_key_path(path: Sequence[str | int]) -> str:
    """Human key path: array positions counted from 1.

    >>> format_key_path(("scenario", 1, "rupture", "mw"))
    'scenario[2].rupture.mw'
    >>> format_key_path(("trench", 0, "polyline", 3))
    'trench[1].polyline[4]'
    """
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part + 1}]"
        else:
            out += ("." if out else "") + part
    return out



class _Scanner:
    """Find the line of every key, array item and table in TOML text.

    ``tomllib`` gives no positions, so this walks the text once more with a
    small, lenient reader of the same grammar (the text has already been
    parsed, so it is valid TOML). Any surprise ends the walk quietly: lines
    found so far are kept.
    """

    def __init__(self, text: str) -> None:
        self.s = text
        self.i = 0
        self.line = 1
        self.lines: dict[KeyPath, int] = {}
        self._aot_index: dict[KeyPath, int] = {}

    # -- low-level reading
    def _peek(self, k: int = 0) -> str:
        j = self.i + k
        return self.s[j] if j < len(self.s) else ""

    def _advance(self, n: int = 1) -> None:
        for _ in range(n):
            if self.i < len(self.s):
                if self.s[self.i] == "\n":
                    self.line += 1
                self.i += 1

    def _skip_space(self, newlines: bool) -> None:
        while self.i < len(self.s):
            c = self.s[self.i]
            if c in " \t\r" or (newlines and c == "\n"):
                self._advance()
            elif c == "#":
                while self.i < len(self.s) and self.s[self.i] != "\n":
                    self.i += 1
            else:
                return

    def _string(self) -> str:
        q = self._peek()
        if self.s.startswith(q * 3, self.i):
            self._advance(3)
            end = self.s.find(q * 3, self.i)
            if end < 0:
                raise ValueError("unterminated string")
            while self.s.startswith(q, end + 3):  # up to two quotes may close the string
                end += 1
            value = self.s[self.i : end]
            self._advance(end + 3 - self.i)
            return value
        self._advance()
        out = []
        while self.i < len(self.s) and self.s[self.i] != q:
            if q == '"' and self.s[self.i] == "\\":
                out.append(self.s[self.i : self.i + 2])
                self._advance(2)
                continue
            out.append(self.s[self.i])
            self._advance()
        self._advance()
        return "".join(out)

    def _key(self) -> list[str]:
        parts: list[str] = []
        while True:
            self._skip_space(False)
            c = self._peek()
            if c in "\"'":
                parts.append(self._string())
            else:
                m = re.compile(r"[A-Za-z0-9_-]+").match(self.s, self.i)
                if not m:
                    raise ValueError("bad key")
                parts.append(m.group(0))
                self._advance(m.end() - self.i)
            self._skip_space(False)
            if self._peek() == ".":
                self._advance()
                continue
            return parts

    def _record(self, path: KeyPath, line: int) -> None:
        self.lines.setdefault(path, line)

    def _value(self, path: KeyPath) -> None:
        c = self._peek()
        if c in "\"'":
            self._string()
        elif c == "[":
            self._advance()
            n = 0
            while True:
                self._skip_space(True)
                if self._peek() in ("]", ""):
                    self._advance()
                    return
                self._record(path + (n,), self.line)
                self._value(path + (n,))
                self._skip_space(True)
                if self._peek() == ",":
                    self._advance()
                    n += 1
        elif c == "{":
            self._advance()
            while True:
                self._skip_space(True)  # (newlines are allowed here from TOML 1.1 on)
                if self._peek() in ("}", ""):
                    self._advance()
                    return
                if self._peek() == ",":
                    self._advance()
                    continue
                line = self.line
                key = path + tuple(self._key())
                self._record(key, line)
                self._skip_space(False)
                self._advance()  # '='
                self._skip_space(False)
                self._value(key)
        else:
            while self.i < len(self.s) and self.s[self.i] not in ",]}\n#":
                self.i += 1

    def _resolve(self, names: Sequence[str]) -> KeyPath:
        path: KeyPath = ()
        for name in names:
            path = path + (name,)
            if path in self._aot_index:
                path = path + (self._aot_index[path],)
        return path

    def scan(self) -> dict[KeyPath, int]:
        table: KeyPath = ()
        try:
            while True:
                self._skip_space(True)
                if self.i >= len(self.s):
                    break
                line = self.line
                if self._peek() == "[":
                    double = self._peek(1) == "["
                    self._advance(2 if double else 1)
                    names = self._key()
                    self._advance(2 if double else 1)
                    if double:
                        base = self._resolve(names[:-1]) + (names[-1],)
                        idx = self._aot_index.get(base, -1) + 1
                        self._aot_index[base] = idx
                        self._record(base, line)
                        table = base + (idx,)
                    else:
                        table = self._resolve(names)
                    self._record(table, line)
                    continue
                key = table + tuple(self._key())
                self._record(key, line)
                self._skip_space(False)
                self._advance()  # '='
                self._skip_space(False)
                self._value(key)
        except (ValueError, IndexError):
            pass
        return self.lines


def locate_keys(text: str) -> dict[KeyPath, int]:
    """Line (1-based) of each key path in TOML text; array positions are 0-based ints.

    >>> lines = locate_keys('[a]\\nx = 1\\n[[s]]\\nname = "p"\\n[[s]]\\nr = {mw = 8}\\n')
    >>> lines[("a", "x")], lines[("s", 1)], lines[("s", 1, "r", "mw")]
    (2, 5, 6)
    """
    return _Scanner(text).scan()

