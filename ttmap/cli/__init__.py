"""The ``ttmap`` command line: thin wrappers over the library."""

from __future__ import annotations

__all__: list[str] = []
