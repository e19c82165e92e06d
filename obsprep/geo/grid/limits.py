"""How large a model grid may be: limits checked from the configuration and from a grid file's
metadata before any array of that size is made, so a mistyped size is a clear error rather
than an allocation of many GB."""

from __future__ import annotations

from obsprep.exceptions import GridError

#: most cells (ny * nx) a model grid may have: each cell costs some 40 bytes in the grid's own
#: arrays (mask, bathymetry, centres, angles) and more in the search tables, so 50 million cells
#: (a global 1/24-degree grid has 37 million) keep a grid within a few GB; checked from the
#: configuration and the grid file's dimensions before any array is made
MAX_GRID_CELLS = 50_000_000


def check_cell_count(ny: int, nx: int) -> None:
    """Raise GridError when a grid of ``ny`` rows by ``nx`` columns exceeds
    :data:`MAX_GRID_CELLS` (before anything of that size is allocated)."""
    if int(ny) * int(nx) > MAX_GRID_CELLS:
        raise GridError(f"{ny} rows x {nx} columns = {int(ny) * int(nx)} cells exceeds the limit "
                        f"of {MAX_GRID_CELLS} cells (MAX_GRID_CELLS)")


#: most model layers: the layer index is a group key of every observation; 1000 layers is far
#: beyond the vertical resolution of any ocean model
MAX_LAYERS = 1000
