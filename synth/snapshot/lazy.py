"""Snapshots that stay on disk and are read slab by slab (tiled and cluster runs).

A :class:`SnapshotFile` names a file and how to read it; :meth:`SnapshotFile.block` reads the
slab of sky columns ``x0:x1`` of the view along a line of sight and returns it as an ordinary
(small) :class:`~synth.snapshot.core.Snapshot`. HDF5, zarr and FITS are sliced lazily, so a
run never holds the whole snapshot; a ``.npz`` member is decompressed whole when read, so use
one of the others for snapshots larger than memory. The object is small and pickles, so dask
workers read their own slabs.

The block protocol: :class:`~synth.snapshot.core.Snapshot`, the views of a file
(:meth:`SnapshotFile.view`: :class:`FileView` for an axis, a
:class:`~synth.snapshot.views.RotatedView` for a rotation) all have ``shape`` (the view's
(nx, ny, nz), +z the line of sight), ``cell_size_cm`` and ``block(x0, x1, halo=h)``: rows
x' in [x0 - h, x1 + h), cut at the box faces, as a small in-memory Snapshot.
"""

from dataclasses import dataclass, field

from ..errors import ConfigError
from .core import block_rows
from .views import AXIS_VIEWS

__all__ = ["SnapshotFile", "FileView", "is_block_source"]


def is_block_source(obj):
    """Whether ``obj`` is read block by block (a view of a file), not held in memory."""
    return isinstance(obj, (SnapshotFile, FileView)) or type(obj).__name__ == "RotatedView"


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

    @property
    def cell_size_cm(self):
        return self.block(0, 1).cell_size_cm

    def block(self, x0, x1, line_of_sight="z", halo=0):
        """Sky columns x' in [x0 - halo, x1 + halo) (cut at the box faces) of the view along
        ``line_of_sight``, as a Snapshot whose +z is the line of sight (all y', z')."""
        rows = _rows(line_of_sight)
        axis, sign = rows[0]
        n = self._shape[axis]
        lo, hi = block_rows(x0, x1, halo, n)
        region = (axis, lo, hi) if sign > 0 else (axis, n - hi, n - lo)
        slab = self._read(region)
        return slab if line_of_sight == "z" else slab.view(line_of_sight)

    def region(self, axis, start, stop):
        """Rows start:stop along stored axis ``axis`` (0, 1, 2), in the file's own frame."""
        return self._read((axis, start, stop))

    def view(self, line_of_sight="z", edges=None):
        """The file seen along ``line_of_sight``, read block by block: a :class:`FileView`
        for an axis view, a :class:`~synth.snapshot.views.RotatedView` for a rotation (each
        block resampled from the source rows it needs; ``edges`` as in
        :func:`synth.snapshot.views.view`)."""
        if isinstance(line_of_sight, str):
            _rows(line_of_sight)
            if edges is not None:
                from .views import EDGE_MODES
                from ..errors import SnapshotError
                if edges not in EDGE_MODES:
                    raise SnapshotError(f"edges {edges!r} is not known; valid: "
                                        f"{', '.join(EDGE_MODES)}")
            return FileView(self, line_of_sight)
        from .views import RotatedView
        return RotatedView(self, line_of_sight, edges)


@dataclass(frozen=True)
class FileView:
    """A :class:`SnapshotFile` seen along an axis, read block by block (small; pickles)."""

    file: SnapshotFile
    line_of_sight: str = "z"

    @property
    def shape(self):
        return self.file.view_shape(self.line_of_sight)

    @property
    def cell_size_cm(self):
        return self.file.cell_size_cm

    def block(self, x0, x1, halo=0):
        return self.file.block(x0, x1, self.line_of_sight, halo=halo)


def _rows(line_of_sight):
    if not isinstance(line_of_sight, str) or line_of_sight not in AXIS_VIEWS:
        raise ConfigError(
            f"a snapshot read tile by tile can be seen along {', '.join(AXIS_VIEWS)}; got "
            f"{line_of_sight!r} (for a rotation, use SnapshotFile.view(rotation), read block by "
            "block, or load the snapshot into memory first)")
    return AXIS_VIEWS[line_of_sight]

