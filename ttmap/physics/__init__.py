"""Pure-numpy physics: constants, linear dispersion, wave speeds, source scaling.

Nothing in this package reads or writes files.
"""

__all__: list[str] = []
