"""Windows with halos over the template grid."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator

from rasterio.windows import Window

from mlsites.errors import InputError
from mlsites.grid._spec import GridSpec

__all__ = ["HaloWindow", "iter_windows"]


@dataclass(frozen=True)
class HaloWindow:
    """A core window of the grid and the same window grown by a halo.

    ``padded`` may extend past the grid edges (reads there return NaN);
    ``trim`` is the pair of slices that cuts the core out of an array read with
    ``padded``.
    """

    core: Window
    padded: Window
    halo: int

    @property
    def trim(self) -> tuple[slice, slice]:
        h = self.halo
        return (slice(h, h + int(self.core.height)), slice(h, h + int(self.core.width)))


def iter_windows(grid: GridSpec, *, block_rows: int = 1024, block_cols: int | None = None,
                 halo: int = 0) -> Iterator[HaloWindow]:
    """Cover the grid with windows, row-major, each with a halo of ``halo`` cells.

    Parameters
    ----------
    grid : GridSpec
    block_rows, block_cols : int
        Core window size in cells (``block_cols`` defaults to the full width so
        reads are strip-wise, which suits tiled GeoTIFFs written row by row).
    halo : int
        Extra cells on every side of the core, for neighbourhood kernels.

    Notes
    -----
    Memory of a windowed job is bounded by ``(block_rows + 2 halo) x
    (block_cols + 2 halo)`` cells per array, whatever the grid size.
    """
    if block_rows < 1 or (block_cols is not None and block_cols < 1) or halo < 0:
        raise InputError(
            f"window size ({block_rows}, {block_cols}) and halo {halo} must be positive"
        )
    block_cols = grid.width if block_cols is None else block_cols
    for r in range(0, grid.height, block_rows):
        h = min(block_rows, grid.height - r)
        for c in range(0, grid.width, block_cols):
            w = min(block_cols, grid.width - c)
            core = Window(c, r, w, h)
            padded = Window(c - halo, r - halo, w + 2 * halo, h + 2 * halo)
            yield HaloWindow(core, padded, halo)
