"""Views of a snapshot along another axis or after an arbitrary rotation.

A view is a new :class:`~synth.snapshot.core.Snapshot` whose +z axis is the line of sight,
so that the transfer always integrates along +z of the returned snapshot (docs/guide.md,
"Conventions": the observer looks along +z, z index 0 is nearest, radial velocity = +v_z).

Every view is a proper rotation (right-handed frame, never a mirror image). A view is
described by the matrix ``R`` whose rows are the new unit vectors (x', y', z') written in the
old frame, so positions and velocities transform as ``x' = R x`` and ``v' = R v``.

Axis views (exact: arrays are transposed and flipped, no interpolation):

====== =================== ========================== ==========================
view   (x', y', z')        line of sight              same as Euler (a, b, g) deg
====== =================== ========================== ==========================
``z``  (x, y, z)           +z                         (0, 0, 0)
``-z`` (-x, y, -z)         -z (180 deg about y)       (0, 180, 0)
``x``  (y, z, x)           +x                         (0, 90, 90)
``-x`` (-y, z, -x)         -x                         (180, 90, 90)
``y``  (z, x, y)           +y                         (90, 90, 180)
``-y`` (-z, x, -y)         -y                         (270, 90, 0)
====== =================== ========================== ==========================

Arbitrary rotations use intrinsic z-y'-z'' Euler angles (alpha, beta, gamma) in degrees
(Goldstein, *Classical Mechanics*, 1980, sect. 4-4, with the y-convention): the new frame is
the old one rotated by ``alpha`` about z, then ``beta`` about the new y', then ``gamma``
about the new z''. Its axes are the columns of ``M = Rz(alpha) Ry(beta) Rz(gamma)``, so
``R = M^T``. The fields are resampled with trilinear interpolation
(:func:`scipy.ndimage.map_coordinates`, order 1) on a grid that encloses the rotated box
(``"grid": "enclose"``, the default) or has the original shape (``"grid": "same"``).
The original box spans index coordinates -1/2 .. n - 1/2 along each axis (cells are cubes
around their centres), but the cell centres only span 0 .. n - 1: a sample in the outer
half-cell shell needs a value beyond the last centre. The ``edges`` mode supplies it:

``"nearest"`` (the default, right for any box)
    the edge cell's value continues to the box face (``map_coordinates`` mode ``nearest``);
``"periodic"`` (for periodic simulation boxes)
    the field wraps around: between the last and the first cell it is interpolated as if they
    were neighbours (mode ``grid-wrap``). With ``"grid": "same"`` the whole output grid is
    filled from the periodic field (no empty corners).

New cells that straddle a face of the original box keep the fraction of their n(H2) that lies
inside it (estimated per axis from the cell's projected extent); cells wholly outside get
n(H2) = 0, v = 0, sigma_turb = 0 and the temperature and abundance of the nearest original
cell (except ``periodic`` with ``"same"``, which has no outside). So a box-filling field keeps
its mass within 0.5 % at 32^3 (tested); zeroing the outer half-cell shell, as this module did
before, lost 10.8 %.
"""

import numpy as np

from ..errors import SnapshotError

__all__ = ["view", "AXIS_VIEWS", "ANGLE_KEYS", "ROTATION_GRIDS", "EDGE_MODES", "rotation_matrix",
           "RotatedView", "ROTATION_BYTES_PER_CELL"]

#: Axis views: rows of R (new unit vectors in the old frame) as (old axis, sign) pairs.
AXIS_VIEWS = {
    "z": ((0, 1), (1, 1), (2, 1)),
    "-z": ((0, -1), (1, 1), (2, -1)),
    "x": ((1, 1), (2, 1), (0, 1)),
    "-x": ((1, -1), (2, 1), (0, -1)),
    "y": ((2, 1), (0, 1), (1, 1)),
    "-y": ((2, -1), (0, 1), (1, -1)),
}

#: Keys of a rotation dict that hold the Euler angles (deg); ``euler_deg`` is an alias.
ANGLE_KEYS = ("rotation", "euler_deg")

#: Output grids for arbitrary rotations.
ROTATION_GRIDS = ("enclose", "same")

#: What a rotation samples beyond the outermost cell centres (module docstring); first is
#: the default.
EDGE_MODES = ("nearest", "periodic")
_SCIPY_MODE = {"nearest": "nearest", "periodic": "grid-wrap"}

_SLAB_CELLS = 2_000_000  # cells resampled per slab, to bound the coordinate array's memory


def _split_edges(line_of_sight, edges):
    """(line_of_sight without an "edges" key, the edges mode checked)."""
    if isinstance(line_of_sight, dict) and "edges" in line_of_sight:
        if edges is not None and edges != line_of_sight["edges"]:
            raise SnapshotError(f"edges given twice ({edges!r} and line_of_sight['edges'] = "
                                f"{line_of_sight['edges']!r}); give it once")
        line_of_sight = dict(line_of_sight)
        edges = line_of_sight.pop("edges")
    edges = EDGE_MODES[0] if edges is None else edges
    if not isinstance(edges, str) or edges not in EDGE_MODES:
        raise SnapshotError(f"edges {edges!r} is not known; valid: {', '.join(EDGE_MODES)}")
    return line_of_sight, edges


def view(snapshot, line_of_sight="z", edges=None):
    """Return ``snapshot`` seen along ``line_of_sight``, as a new Snapshot with +z the sight line.

    Parameters
    ----------
    snapshot : Snapshot
        The snapshot to view (never modified).
    line_of_sight : str, tuple or dict
        One of :data:`AXIS_VIEWS` (``"z"``, ``"-z"``, ``"x"``, ``"-x"``, ``"y"``, ``"-y"``);
        or three intrinsic z-y-z Euler angles ``(alpha, beta, gamma)`` in degrees (floats or
        angle Quantities); or a dict ``{"rotation": (alpha, beta, gamma), "grid": "enclose"}``
        (``"euler_deg"`` is accepted for ``"rotation"``) with ``grid`` one of
        :data:`ROTATION_GRIDS`, and optionally ``"edges"``.
    edges : {"nearest", "periodic"}, optional
        Rotations only: how the field continues beyond the outermost cell centres (module
        docstring); default ``"nearest"``, ``"periodic"`` for periodic boxes. May also be
        given as the dict's ``"edges"`` key (not both).

    Returns
    -------
    Snapshot
        Fields expressed in the rotated frame: positions ``x' = R x`` and velocities
        ``v' = R v`` (see the module docstring for ``R``).

    Examples
    --------
    >>> import numpy as np, astropy.units as u
    >>> from synth.snapshot.core import Snapshot
    >>> s = Snapshot(n_h2=np.ones((2, 3, 4)) * u.cm**-3, t_kin=np.full((2, 3, 4), 10.) * u.K,
    ...              velocity=np.zeros((3, 2, 3, 4)) * u.km / u.s, cell_size=0.1 * u.pc)
    >>> view(s, "x").shape
    (3, 4, 2)
    """
    line_of_sight, edges = _split_edges(line_of_sight, edges)
    if isinstance(line_of_sight, str):
        if line_of_sight not in AXIS_VIEWS:
            raise SnapshotError(
                f"line_of_sight '{line_of_sight}' is not known; use one of "
                f"{', '.join(AXIS_VIEWS)} or a dict {{'rotation': (alpha, beta, gamma)}} in deg"
            )
        return _axis_view(snapshot, AXIS_VIEWS[line_of_sight])
    angles_deg, grid = _parse_rotation(line_of_sight)
    return _rotated_view(snapshot, rotation_matrix(*angles_deg).T, grid, edges)


def rotation_matrix(alpha_deg, beta_deg, gamma_deg):
    """The matrix ``M = Rz(alpha) Ry(beta) Rz(gamma)`` of intrinsic z-y'-z'' Euler angles.

    Its columns are the rotated frame's unit vectors in the original frame
    (Goldstein 1980, *Classical Mechanics*, 2nd ed., sect. 4-4, y-convention).
    """
    a, b, g = np.deg2rad([alpha_deg, beta_deg, gamma_deg])
    return _rz(a) @ _ry(b) @ _rz(g)


def _rz(t):
    c, s = np.cos(t), np.sin(t)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def _ry(t):
    c, s = np.cos(t), np.sin(t)
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def _parse_rotation(line_of_sight):
    """Euler angles (deg) and output grid from a tuple or a ``{"rotation": ...}`` dict."""
    grid = "enclose"
    angles = line_of_sight
    if isinstance(line_of_sight, dict):
        keys = set(line_of_sight)
        angle_keys = keys & set(ANGLE_KEYS)
        if keys - set(ANGLE_KEYS) - {"grid"} or len(angle_keys) != 1:
            raise SnapshotError(
                f"line_of_sight dict has keys {sorted(keys)}; expected one of {ANGLE_KEYS} "
                "(alpha, beta, gamma in deg) and optionally 'grid'"
            )
        angles = line_of_sight[angle_keys.pop()]
        grid = line_of_sight.get("grid", grid)
    if grid not in ROTATION_GRIDS:
        raise SnapshotError(f"rotation grid '{grid}' is not known; use one of {ROTATION_GRIDS}")
    if hasattr(angles, "unit"):
        try:
            angles = angles.to_value("deg")
        except Exception:
            raise SnapshotError(f"rotation angles have unit '{angles.unit}'; use degrees") from None
    try:
        arr = np.asarray(angles, dtype=float)
    except (TypeError, ValueError):
        arr = np.array([])
    if arr.shape != (3,) or not np.all(np.isfinite(arr)):
        raise SnapshotError(
            f"line_of_sight {line_of_sight!r} is not valid; use one of {', '.join(AXIS_VIEWS)} "
            "or three finite Euler angles (alpha, beta, gamma) in deg"
        )
    return tuple(arr), grid


# ---- exact axis views ---------------------------------------------------------------------
def _axis_view(snapshot, rows):
    """Transpose and flip every field for an axis view; rotate the velocity vectors."""
    perm = tuple(axis for axis, _ in rows)
    flips = tuple(a for a, (_, sign) in enumerate(rows) if sign < 0)

    def spatial(arr):
        arr = np.asarray(arr)
        if arr.ndim == 0:
            return arr
        return np.ascontiguousarray(np.flip(np.transpose(arr, perm), axis=flips))

    v = snapshot.velocity_cms
    v_new = np.stack([sign * spatial(v[axis]) for axis, sign in rows])
    return _rebuild(snapshot, spatial, v_new, spatial(snapshot.t_kin_k), spatial)


def _rebuild(snapshot, spatial, velocity, t_kin, spatial_nearest, density=None):
    """Apply ``spatial`` (``density`` for n(H2), default the same) to every scalar field and
    assemble the new Snapshot."""
    abund = snapshot._cgs["abundance"]
    if abund is not None:
        abund = {k: spatial_nearest(a) for k, a in abund.items()}
    return snapshot._replace(
        n_h2_cm3=np.maximum((density or spatial)(snapshot.n_h2_cm3), 0.0),
        t_kin_k=t_kin, velocity_cms=velocity,
        sigma_turb_cms=np.maximum(spatial(snapshot.sigma_turb_cms), 0.0),
        abundance=abund,
    )


# ---- arbitrary rotations ------------------------------------------------------------------
def _rotated_shape(shape, R, grid):
    """Shape of the output grid: the input's, or the box enclosing the rotated input box."""
    if grid == "same":
        return tuple(shape)
    extent = np.abs(R) @ np.asarray(shape, dtype=float)
    return tuple(int(max(1, np.ceil(e - 1e-6))) for e in extent)


def _rotated_view(snapshot, R, grid, edges="nearest"):
    """Resample every field on the rotated grid (trilinear) and rotate the velocities."""
    shape_in = np.asarray(snapshot.shape, dtype=float)
    shape_out = _rotated_shape(snapshot.shape, R, grid)
    centre_in = (shape_in - 1.0) / 2.0
    centre_out = (np.asarray(shape_out, dtype=float) - 1.0) / 2.0
    M = R.T  # old offset = M @ new offset
    fill_all = edges == "periodic" and grid == "same"
    half = 0.5 * np.abs(M).sum(axis=1)  # half-extent of a new cell along each old axis
    inside = None if fill_all else np.empty(shape_out)
    if inside is not None:
        for sl, coords in _slab_coordinates(shape_out, M, centre_in, centre_out):
            inside[sl] = _inside_fraction(coords, shape_in, half)

    def resample(arr, mode):
        arr = np.asarray(arr)
        if arr.ndim == 0:
            return arr
        out = np.empty(shape_out, dtype=arr.dtype)
        for sl, coords in _slab_coordinates(shape_out, M, centre_in, centre_out):
            out[sl] = _map_coordinates(arr, coords, order=1, mode=mode)
        return out

    def intensive(arr):  # velocity, sigma_turb: the field's value, 0 outside the box
        out = resample(arr, _SCIPY_MODE[edges])
        if inside is not None and np.ndim(out):
            out[inside == 0.0] = 0.0
        return out

    def density(arr):  # n(H2): weighted by the part of the new cell inside the box
        out = resample(arr, _SCIPY_MODE[edges])
        if inside is not None and np.ndim(out):
            out *= inside.astype(out.dtype, copy=False)
        return out

    def nearest(arr):
        return resample(arr, "nearest")

    v = snapshot.velocity_cms
    v_old = np.stack([intensive(v[k]) for k in range(3)])
    v_new = np.einsum("ab,b...->a...", R, v_old).astype(v.dtype, copy=False)
    return _rebuild(snapshot, intensive, v_new, nearest(snapshot.t_kin_k), nearest,
                    density=density)


def _inside_fraction(coords, shape_in, half):
    """Approximate fraction of each new cell inside the old box -1/2 .. n - 1/2 (index units).

    Per old axis a, the new cell (centre c, half-extent h_a along a) overlaps the box by
    clip((d_a + h_a) / (2 h_a), 0, 1) of its extent, d_a the centre's distance inside the
    nearer face; the fractions multiply. Exact (0 or 1) for axis-aligned grids.
    """
    frac = np.ones(coords.shape[1:])
    for a in range(3):
        d = np.minimum(coords[a] + 0.5, shape_in[a] - 0.5 - coords[a])
        frac *= np.clip((d + half[a]) / (2.0 * half[a]) + 1e-9, 0.0, 1.0)
    frac[frac < 1e-8] = 0.0
    return frac


def _slab_coordinates(shape_out, M, centre_in, centre_out, rows=None, slab_cells=None):
    """Yield (slice along x', old index coordinates) for slabs of the output grid (of the
    output rows ``rows`` = (start, stop), default all; slices relative to ``start``)."""
    nx, ny, nz = shape_out
    start, stop = (0, nx) if rows is None else rows
    step = max(1, (slab_cells or _SLAB_CELLS) // (ny * nz))
    j, k = np.meshgrid(np.arange(ny, dtype=float) - centre_out[1],
                       np.arange(nz, dtype=float) - centre_out[2], indexing="ij")
    for i0 in range(start, stop, step):
        i = np.arange(i0, min(stop, i0 + step), dtype=float) - centre_out[0]
        d_new = np.stack(np.broadcast_arrays(i[:, None, None], j[None], k[None]))
        coords = np.einsum("ab,b...->a...", M, d_new) + centre_in[:, None, None, None]
        _snap_to_edges(coords, 2.0 * centre_in)
        yield slice(i0 - start, i0 - start + len(i)), coords


def _snap_to_edges(coords, last_index, tol=1e-6):
    """Move coordinates within ``tol`` outside the box onto its edge (rounding of cos 90 deg)."""
    for a in range(3):
        c = coords[a]
        c[(c < 0) & (c > -tol)] = 0.0
        hi = last_index[a]
        c[(c > hi) & (c < hi + tol)] = hi


# ---- rotations read block by block ----------------------------------------------------------
#: Bytes per output cell a :class:`RotatedView` block holds besides its fields while it is
#: resampled: the old-frame coordinates (3 float64) and inside fraction (float64); per edge
#: mode the clamped or wrapped coordinates (3 float64), the points' order by source row and
#: their sorted rows (2 int64); for the chunk being interpolated the selected points and
#: their local coordinates. Not all are held at once, and the fields a block's cost already
#: counts (BYTES_PER_CELL, float64 at worst) are float32 for most files: the tracemalloc peak
#: of a 128^3 float32 snapshot rotated by (30, 45, 0) deg under 64 MB was 32 MB (LTE) and
#: 25 MB (LVG) with this figure.
ROTATION_BYTES_PER_CELL = 96


def _rows_of(snapshot, axis, start, stop):
    """Rows start:stop along ``axis`` of an in-memory Snapshot, as plain CGS arrays."""
    def cut(a):
        a = np.asarray(a)
        return a if a.ndim == 0 else np.take(a, np.arange(start, stop), axis=axis)
    c = snapshot._cgs
    v = c["velocity_cms"]
    return {"n_h2_cm3": cut(c["n_h2_cm3"]), "t_kin_k": cut(c["t_kin_k"]),
            "velocity_cms": np.take(v, np.arange(start, stop), axis=axis + 1),
            "sigma_turb_cms": cut(c["sigma_turb_cms"]),
            "abundance": None if c["abundance"] is None else
            {k: cut(a) for k, a in c["abundance"].items()}}


class RotatedView:
    """A snapshot (a :class:`~synth.snapshot.lazy.SnapshotFile` or an in-memory Snapshot)
    seen after a rotation, resampled block by block: the block protocol
    (``shape``, ``cell_size_cm``, ``block(x0, x1, halo=h)``).

    Each block of output rows x' is resampled from the source rows it needs (along the
    source axis across which an output slab is thinnest), read ``chunk_bytes`` at a time
    with one extra row for the trilinear interpolation, so neither the whole source nor the
    whole rotated grid is ever held. The values are those of :func:`view` (same coordinates,
    same ``edges`` mode, same inside fractions); ``"periodic"`` wraps the source rows and
    coordinates explicitly, which equals ``map_coordinates``' ``grid-wrap``.
    """

    def __init__(self, source, line_of_sight, edges=None, chunk_bytes=None, pass_cells=None):
        line_of_sight, edges = _split_edges(line_of_sight, edges)
        angles, grid = _parse_rotation(line_of_sight)
        self.source = source
        self.line_of_sight = line_of_sight
        self.edges = edges
        self.chunk_bytes = chunk_bytes
        self.pass_cells = pass_cells
        self._angles, self._grid = angles, grid
        self._R = rotation_matrix(*angles).T
        self._shape_in = tuple(int(n) for n in source.shape)
        self._shape_out = _rotated_shape(self._shape_in, self._R, grid)
        M = self._R.T
        ny, nz = self._shape_out[1:]
        spread = [abs(M[a, 1]) * ny + abs(M[a, 2]) * nz for a in range(3)]
        # the source axis an output slab is thinnest along; the first (x) unless another
        # halves the rows read, as x slabs are contiguous runs of a stored [x, y, z] array
        best = int(np.argmin(spread))
        self._axis = best if spread[best] < 0.5 * spread[0] else 0
        self._cell = None

    def __repr__(self):
        return (f"RotatedView({self.source!r}, rotation={self._angles}, grid={self._grid!r}, "
                f"edges={self.edges!r})")

    def with_budget(self, chunk_bytes=None, pass_cells=None):
        """The same view reading at most ``chunk_bytes`` of source rows at once and
        resampling at most ``pass_cells`` output cells at once."""
        return RotatedView(self.source, dict(self.line_of_sight, edges=self.edges)
                           if isinstance(self.line_of_sight, dict) else self.line_of_sight,
                           None if isinstance(self.line_of_sight, dict) else self.edges,
                           chunk_bytes, pass_cells)

    @property
    def shape(self):
        return self._shape_out

    @property
    def cell_size_cm(self):
        if self._cell is None:
            self._cell = self._read(0, 0, 1)["cell_size_cm"]
        return self._cell

    def source_row_bytes(self):
        """Bytes of one source row along the slab axis (every field, float64 at worst)."""
        other = int(np.prod(self._shape_in)) // self._shape_in[self._axis]
        return other * 56

    def _read(self, axis, start, stop):
        """Source rows start:stop along ``axis`` as plain CGS arrays (and the cell size)."""
        src = self.source
        if hasattr(src, "region"):  # a file: only these rows are read
            snap = src.region(axis, start, stop)
            out = dict(snap._cgs)
            out["abundance"] = None if out["abundance"] is None else dict(out["abundance"])
        else:
            out = _rows_of(src, axis, start, stop)
            out["cell_size_cm"] = src.cell_size_cm
        return out

    def block(self, x0, x1, halo=0):
        """Output rows x' in [x0 - halo, x1 + halo) (cut at the faces) as a Snapshot."""
        from .core import Snapshot, block_rows
        import astropy.units as u
        lo, hi = block_rows(x0, x1, halo, self._shape_out[0])
        shape = (hi - lo,) + tuple(self._shape_out[1:])
        R = self._R
        M = R.T
        shape_in = np.asarray(self._shape_in, dtype=float)
        centre_in = (shape_in - 1.0) / 2.0
        centre_out = (np.asarray(self._shape_out, dtype=float) - 1.0) / 2.0
        fill_all = self.edges == "periodic" and self._grid == "same"
        half = 0.5 * np.abs(M).sum(axis=1)
        out = None
        pass_cells = self.pass_cells or _SLAB_CELLS
        for sl, coords in _slab_coordinates(self._shape_out, M, centre_in, centre_out,
                                            (lo, hi), pass_cells):
            inside = None if fill_all else _inside_fraction(coords, shape_in, half)
            part = self._resample(coords)
            if out is None:
                out = {k: (v if np.ndim(v) == 0 else
                           np.empty(((3,) if k == "velocity_cms" else ()) + shape, v.dtype))
                       for k, v in part.items() if k != "abundance"}
                out["abundance"] = None if part["abundance"] is None else {
                    k: (a if np.ndim(a) == 0 else np.empty(shape, a.dtype))
                    for k, a in part["abundance"].items()}
            v_old = part["velocity_cms"]
            for name in ("n_h2_cm3", "velocity_cms", "sigma_turb_cms"):
                if np.ndim(part[name]) and inside is not None:
                    if name == "n_h2_cm3":
                        part[name] *= inside.astype(part[name].dtype, copy=False)
                    else:
                        part[name][..., inside == 0.0] = 0.0
            out["n_h2_cm3"][sl] = np.maximum(part["n_h2_cm3"], 0.0)
            out["t_kin_k"][sl] = part["t_kin_k"]
            out["velocity_cms"][:, sl] = np.einsum("ab,b...->a...", R, v_old).astype(
                v_old.dtype, copy=False)
            if np.ndim(part["sigma_turb_cms"]):
                out["sigma_turb_cms"][sl] = np.maximum(part["sigma_turb_cms"], 0.0)
            for k, a in (part["abundance"] or {}).items():
                if np.ndim(a):
                    out["abundance"][k][sl] = a
            del part, coords, inside
        sig = out["sigma_turb_cms"]
        abund = out["abundance"]
        abund = None if abund is None else (abund[None] if list(abund) == [None] else abund)
        return Snapshot(n_h2=out["n_h2_cm3"] * u.cm**-3, t_kin=out["t_kin_k"] * u.K,
                        velocity=out["velocity_cms"] * u.cm / u.s,
                        cell_size=self.cell_size_cm * u.cm,
                        sigma_turb=np.asarray(sig) * u.cm / u.s, abundance=abund)

    def _resample(self, coords):
        """Every field at the old index coordinates ``coords`` (3, ...), chunk by chunk."""
        a = self._axis
        n_a = self._shape_in[a]
        wrap = self.edges == "periodic"
        # per mode: the source row along a of each point and its coordinates for a chunk
        edge_fields = ("n_h2_cm3", "velocity_cms", "sigma_turb_cms")
        near_fields = ("t_kin_k", "abundance")
        wanted = {"nearest": near_fields if wrap else near_fields + edge_fields}
        if wrap:
            wanted["periodic"] = edge_fields
        used = np.zeros(n_a + 1, dtype=bool)
        modes = {}
        for mode, names in wanted.items():
            r, c = _points(coords, self._shape_in, a, mode == "periodic")
            used[r] = True
            order = np.argsort(r, kind="stable")
            modes[mode] = (c, names, order, r[order])  # points sorted by source row
            del r
        row_bytes = self.source_row_bytes()
        step = max(1, int((self.chunk_bytes or row_bytes * (n_a + 1)) // row_bytes) - 1)
        res = None
        for s0 in range(0, n_a, step):
            s1 = min(n_a, s0 + step)
            if not used[s0:s1].any():
                continue
            first = s0 + int(np.argmax(used[s0:s1]))
            last = s1 - 1 - int(np.argmax(used[s0:s1][::-1]))
            stop = min(n_a, last + 2)
            chunk = self._read(a, first, stop)
            if wrap and last + 1 >= n_a and n_a > 1:  # the row after the last is row 0
                chunk = _append_rows(chunk, self._read(a, 0, 1), a)
            elif wrap and n_a == 1:
                chunk = _append_rows(chunk, chunk, a)
            for mode, (c, names, order, ranked) in modes.items():
                i0 = np.searchsorted(ranked, first, side="left")
                i1 = np.searchsorted(ranked, last, side="right")
                sel = order[i0:i1]
                if sel.size == 0:
                    continue
                local = c[:, sel]
                local[a] -= first
                vals = _interpolate(chunk, local, mode == "periodic", a, names)
                if res is None:
                    res = _empty_like_fields(chunk, coords.shape[1:])
                for name, v in vals.items():
                    if name == "abundance":
                        for k, av in v.items():
                            if np.ndim(res["abundance"][k]):
                                res["abundance"][k].reshape(-1)[sel] = av
                    elif name == "velocity_cms":
                        res[name].reshape(3, -1)[:, sel] = v
                    elif np.ndim(res[name]):
                        res[name].reshape(-1)[sel] = v
            del chunk
        return res


def _points(coords, shape_in, a, wrap):
    """(source row along a, coordinates) of every point (flattened) for one mode: clamped to
    the box for "nearest", wrapped (modulo the box) for "periodic"."""
    c = coords.reshape(3, -1).copy()
    n_a = shape_in[a]
    if wrap:
        for b in range(3):
            c[b] = np.mod(c[b], shape_in[b])
            c[b][c[b] >= shape_in[b]] = 0.0  # mod can round up to n
        r = np.floor(c[a]).astype(np.int64)
    else:
        np.clip(c[a], 0.0, n_a - 1.0, out=c[a])
        r = np.minimum(np.floor(c[a]).astype(np.int64), max(0, n_a - 2))
    return r, c


def _append_rows(chunk, extra, a):
    out = dict(chunk)
    for name in ("n_h2_cm3", "t_kin_k", "sigma_turb_cms"):
        if np.ndim(chunk[name]):
            out[name] = np.concatenate([chunk[name], extra[name]], axis=a)
    out["velocity_cms"] = np.concatenate([chunk["velocity_cms"], extra["velocity_cms"]],
                                         axis=a + 1)
    if chunk["abundance"] is not None:
        out["abundance"] = {k: (v if np.ndim(v) == 0 else
                                np.concatenate([v, extra["abundance"][k]], axis=a))
                            for k, v in chunk["abundance"].items()}
    return out


def _empty_like_fields(chunk, shape):
    res = {}
    for name in ("n_h2_cm3", "t_kin_k", "sigma_turb_cms"):
        v = chunk[name]
        res[name] = v if np.ndim(v) == 0 else np.empty(shape, v.dtype)
    res["velocity_cms"] = np.empty((3,) + tuple(shape), chunk["velocity_cms"].dtype)
    res["abundance"] = None if chunk["abundance"] is None else {
        k: (v if np.ndim(v) == 0 else np.empty(shape, v.dtype))
        for k, v in chunk["abundance"].items()}
    return res


def _interpolate(chunk, local, periodic, a, names):
    """Trilinear values of the chunk's fields ``names`` at ``local`` coordinates (3, m).
    Periodic: the other two axes get one wrapped row at their end (the coordinates are
    already wrapped into the box), which equals ``map_coordinates``' ``grid-wrap``."""
    def interp(arr):
        if periodic:
            pad = [(0, 1) if b != a else (0, 0) for b in range(3)]
            arr = np.pad(arr, pad, mode="wrap")
        return _map_coordinates(arr, local, order=1, mode="nearest")

    out = {}
    for name in names:
        v = chunk[name]
        if name == "velocity_cms":
            out[name] = np.stack([interp(v[k]) for k in range(3)])
        elif name == "abundance":
            if v is not None:
                out[name] = {k: interp(x) for k, x in v.items() if np.ndim(x)}
        elif np.ndim(v):
            out[name] = interp(v)
    return out


def _map_coordinates(arr, coords, **kw):
    """scipy.ndimage.map_coordinates, imported when first needed (the config checks import
    this module)."""
    from scipy import ndimage
    return ndimage.map_coordinates(arr, coords, **kw)
