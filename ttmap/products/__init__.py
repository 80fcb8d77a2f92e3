"""Products built from an arrival-time field: isochrones, site tables, maps, styles."""

__all__: list[str] = []
