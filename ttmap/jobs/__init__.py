"""The jobs: files in, products and a run record out (map, site-map, scenario run, batch)."""

from __future__ import annotations

__all__: list[str] = []
