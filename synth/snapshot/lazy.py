"""Snapshots that stay on disk and are read slab by slab (tiled and cluster runs).

A :class:`SnapshotFile` names a file and how to read it; :meth:`SnapshotFile.block` reads the
slab of sky columns ``x0:x1`` of the view along a line of sight and returns it as an ordinary
(small) :class:`~synth.snapshot.core.Snapshot`. HDF5, zarr and FITS are sliced lazily, so a
run never holds the whole snapshot; a ``.npz`` member is decompressed whole when read, so use
one of the others for snapshots larger than memory. The object is small and pickles, so dask
workers read their own slabs.
"""

from dataclasses import dataclass, field

from ..errors import ConfigError
from .views import AXIS_VIEWS

__all__ = ["SnapshotFile"]


@dataclass(frozen=True)
class SnapshotFile:
    """A snapshot on disk; arguments as :func:`synth.snapshot.readers.read_snapshot`."""

    path: object
    fields: dict = None
    format: str = None
    cell_size: object = None
    units: dict = None
    axis_order: str = None
    sigma_turb: object = None
    mean_mass: object = None
    _shape: tuple = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        from .readers import snapshot_shape
        shape = snapshot_shape(self.path, self.fields, self.format, axis_order=self.axis_order)
        object.__setattr__(self, "_shape", tuple(int(n) for n in shape))

    @property
    def shape(self):
        return self._shape

    def view_shape(self, line_of_sight="z"):
        """Shape of the view whose +z is the line of sight (axis views only)."""
        rows = _rows(line_of_sight)
        return tuple(self._shape[axis] for axis, _ in rows)

    def _read(self, region=None):
        from .readers import read_snapshot
        return read_snapshot(self.path, fields=self.fields, cell_size=self.cell_size,
                             format=self.format, units=self.units, axis_order=self.axis_order,
                             sigma_turb=self.sigma_turb, mean_mass=self.mean_mass, region=region)

    def load(self):
        """The whole snapshot in memory."""
        return self._read()

    def block(self, x0, x1, line_of_sight="z"):
        """Sky columns x' in [x0, x1) of the view along ``line_of_sight``, as a Snapshot whose
        +z is the line of sight (all y', z')."""
        rows = _rows(line_of_sight)
        axis, sign = rows[0]
        n = self._shape[axis]
        if not 0 <= x0 < x1 <= n:
            raise ConfigError(f"block {x0}:{x1} outside 0:{n}")
        region = (axis, x0, x1) if sign > 0 else (axis, n - x1, n - x0)
        slab = self._read(region)
        return slab if line_of_sight == "z" else slab.view(line_of_sight)


def _rows(line_of_sight):
    if not isinstance(line_of_sight, str) or line_of_sight not in AXIS_VIEWS:
        raise ConfigError(
            f"a snapshot read tile by tile can be seen along {', '.join(AXIS_VIEWS)}; got "
            f"{line_of_sight!r} (for a rotation, load the snapshot into memory first)")
    return AXIS_VIEWS[line_of_sight]

