"""Sky tiles: blocks of x' columns (all y', z') sized to fit a memory budget.

The transfer stage works tile by tile: each tile's fields are read (or sliced), excited and
integrated, and only its spectra are kept. The cost model below is the number of bytes one
cell and one output pixel need while a tile is in flight; ``tests/bench/bench_scale.py``
checks the peak memory it predicts against tracemalloc.
"""

import re
from dataclasses import dataclass

from ..errors import ConfigError, MemoryBudgetError

__all__ = ["TilePlan", "plan_tiles", "parse_memory", "BYTES_PER_CELL", "DEFAULT_TILE_CELLS"]

#: Bytes held per cell of a tile in flight: the fields read (n, T, 3 v, sigma, abundance in
#: float64 at worst: 56), the excitation (2 float32: 8) and the kernel's inputs and float64
#: temporaries (~64).
BYTES_PER_CELL = 128
#: Default tile size when no budget is given (~1 M cells: ~130 MB in flight).
DEFAULT_TILE_CELLS = 1 << 20

_UNITS = {"": 1, "B": 1, "KB": 1e3, "MB": 1e6, "GB": 1e9, "TB": 1e12,
          "KIB": 2**10, "MIB": 2**20, "GIB": 2**30, "TIB": 2**40}


def parse_memory(text):
    """'8GB', '512 MiB', '2e9' -> bytes (int)."""
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        m = re.fullmatch(r"\s*([0-9.eE+]+)\s*([A-Za-z]*)\s*", str(text))
        if not m or m.group(2).upper() not in _UNITS:
            raise ConfigError(f"memory budget '{text}' is not a size; use e.g. 8GB, 512MiB, 2e9")
        value = float(m.group(1)) * _UNITS[m.group(2).upper()]
    if not value > 0:
        raise ConfigError(f"memory budget must be > 0, got {text}")
    return int(value)


@dataclass(frozen=True)
class TilePlan:
    """x' blocks of a view of shape (nx, ny, nz) into ``n_channels`` channels."""

    shape: tuple
    n_channels: int
    tile_rows: int
    fixed_bytes: int
    tile_bytes: int

    @property
    def tiles(self):
        nx = self.shape[0]
        return [(x0, min(nx, x0 + self.tile_rows)) for x0 in range(0, nx, self.tile_rows)]

    @property
    def peak_bytes(self):
        """Predicted peak: output cubes plus the tiles in flight."""
        return self.fixed_bytes + self.tile_bytes


def _row_bytes(ny, nz, n_channels, n_cubes, extra_per_cell=0):
    return ny * nz * (BYTES_PER_CELL + int(extra_per_cell)) + ny * n_channels * 4 * (n_cubes + 1)


def plan_tiles(shape, n_channels, memory=None, n_cubes=2, in_flight=1, extra_fixed=0,
               extra_per_cell=0, halo=0):
    """Choose the tile size.

    Parameters
    ----------
    shape : (nx, ny, nz) of the view (z' the line of sight)
    n_channels : int
    memory : int or str, optional
        Budget in bytes for everything the stage allocates: the ``n_cubes`` output cubes
        (float32), ``extra_fixed`` bytes (e.g. a full-grid LVG excitation), and ``in_flight``
        tiles at once (one per worker). Without a budget, tiles of ~1 M cells.
    extra_per_cell : int
        Bytes per cell held beyond BYTES_PER_CELL (a line split into m hyperfine components
        holds its kernel inputs m times; an LVG block its gradients and table values; a
        rotated view its resampling temporaries).
    halo : int
        Rows each tile reads beyond its own on either side (an LVG tile: 1, for its velocity
        gradients); they cost their fields like the tile's own rows.
    """
    nx, ny, nz = shape
    fixed = n_cubes * n_channels * ny * nx * 4 + int(extra_fixed)
    row = _row_bytes(ny, nz, n_channels, n_cubes, extra_per_cell)
    halo_bytes = 2 * int(halo) * ny * nz * (BYTES_PER_CELL + int(extra_per_cell))
    if memory is None:
        rows = max(1, min(nx, DEFAULT_TILE_CELLS // max(1, ny * nz)))
        return TilePlan(tuple(shape), n_channels, rows, fixed,
                        (rows * row + halo_bytes) * in_flight)
    budget = parse_memory(memory)
    minimum = fixed + (row + halo_bytes) * in_flight
    if budget < minimum:
        raise MemoryBudgetError(
            f"memory budget {budget / 1e6:.1f} MB is below the minimum {minimum / 1e6:.1f} MB "
            f"this run needs (output cubes {fixed / 1e6:.1f} MB + {in_flight} tile(s) of one "
            f"row, {(row + halo_bytes) / 1e6:.2f} MB each); raise --memory to at least "
            f"{int(minimum / 1e6) + 1}MB")
    rows = max(1, min(nx, ((budget - fixed) // in_flight - halo_bytes) // row))
    return TilePlan(tuple(shape), n_channels, int(rows), fixed,
                    (int(rows) * row + halo_bytes) * in_flight)
