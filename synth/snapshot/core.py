"""The Snapshot product: a 3-D grid of H2 density, kinetic temperature and velocity.

Geometry (docs/guide.md, "Conventions"): arrays are indexed ``[x, y, z]``; velocity has shape ``(3, nx, ny, nz)``.
For the default line of sight ``"z"`` the observer looks along +z, the cell at z index 0 is
nearest, and the radial velocity is +v_z (positive = receding). Sky pixel (i, j) is the
snapshot column (x=i, y=j). Other lines of sight are views (see :mod:`synth.snapshot.views`).

Inside, fields are plain float arrays in CGS (``n_h2_cm3``, ``t_kin_k``, ``velocity_cms``,
``cell_size_cm``, ``sigma_turb_cms``); the public attributes return Quantities.
"""

from dataclasses import dataclass, field

import numpy as np
import astropy.units as u
import astropy.constants as const

from ..errors import SnapshotError

__all__ = ["Snapshot", "MEAN_MASS_PER_H2", "block_rows"]

#: Mean gas mass per H2 molecule, 2.8 m_H (common practice; Kauffmann et al. 2008, A&A 487,
#: 993, their appendix A, with a helium mass fraction of ~0.28).
MEAN_MASS_PER_H2 = 2.8 * const.m_p.cgs  # m_H ~ m_p to 0.05 %


def block_rows(x0, x1, halo, n):
    """(lo, hi): the rows a block x0:x1 with ``halo`` rows on each side reads from an axis of
    ``n`` rows (the halo is cut at the box faces). The block's own rows are
    ``x0 - lo : x1 - lo`` of what is read."""
    x0, x1, halo = int(x0), int(x1), int(halo)
    if not 0 <= x0 < x1 <= n:
        from ..errors import ConfigError
        raise ConfigError(f"block {x0}:{x1} outside 0:{n}")
    if halo < 0:
        from ..errors import ConfigError
        raise ConfigError(f"block halo must be >= 0 rows, got {halo}")
    return max(0, x0 - halo), min(n, x1 + halo)


def _as_quantity(value, unit, name):
    """Return ``value`` converted to ``unit`` as a float array, or raise naming ``name``."""
    if not isinstance(value, u.Quantity):
        raise SnapshotError(
            f"{name} has no unit; pass an astropy Quantity, e.g. {name}=array * u.{unit}"
        )
    try:
        with np.errstate(over="ignore", invalid="ignore"):  # overflow -> inf: refused below
            arr = value.to_value(unit)
    except u.UnitConversionError:
        raise SnapshotError(
            f"{name} has unit '{value.unit}', which cannot be converted to {unit}"
        ) from None
    arr = np.asarray(arr)
    if arr.dtype.kind not in "fiu":
        raise SnapshotError(f"{name} must be numeric, got dtype {arr.dtype}")
    if arr.dtype != np.float32:
        arr = arr.astype(np.float64, copy=False)
    return arr


def _check_finite(arr, name, nonnegative=True, positive=False):
    bad = ~np.isfinite(arr)
    if bad.any():
        raise SnapshotError(
            f"{name} has {int(bad.sum())} non-finite cell(s) (NaN or inf) of {arr.size}; "
            "every cell must be a finite number"
        )
    if positive:
        neg = arr <= 0
        if neg.any():
            raise SnapshotError(
                f"{name} has {int(neg.sum())} cell(s) <= 0 (min {arr.min():g}); it must be > 0"
            )
    elif nonnegative:
        neg = arr < 0
        if neg.any():
            raise SnapshotError(
                f"{name} has {int(neg.sum())} negative cell(s) (min {arr.min():g}); "
                "it must be >= 0"
            )


def _readonly(arr):
    arr = np.ascontiguousarray(arr)
    if arr.flags.writeable and arr.base is None:
        arr.setflags(write=False)
        return arr
    arr = arr.copy()
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class Snapshot:
    """A gridded cloud model: n(H2), T_kin and velocity on a uniform Cartesian grid.

    Parameters
    ----------
    n_h2 : Quantity ``[number density]``, shape (nx, ny, nz)
        Molecular hydrogen number density.
    t_kin : Quantity ``[temperature]``, shape (nx, ny, nz)
        Gas kinetic temperature (> 0).
    velocity : Quantity ``[speed]``, shape (3, nx, ny, nz)
        Bulk velocity components (v_x, v_y, v_z).
    cell_size : Quantity ``[length]``, scalar
        Edge length of one cubic cell.
    sigma_turb : Quantity ``[speed]``, scalar or shape (nx, ny, nz), optional
        Microturbulent one-dimensional velocity dispersion (default 0).
    abundance : float, array or dict, optional
        Per-cell abundance relative to H2: one array for every tracer, or a dict
        ``{species: array}``. Overrides the tracer's constant abundance where given.

    Notes
    -----
    Fields are converted once to CGS float arrays, validated (shapes, units, finite,
    non-negative) and stored read-only; the Snapshot is never mutated. Use
    :meth:`from_mass_density` to build one from a mass density with 2.8 m_H per H2.
    """

    n_h2: u.Quantity
    t_kin: u.Quantity
    velocity: u.Quantity
    cell_size: u.Quantity
    sigma_turb: u.Quantity = 0.0 * u.km / u.s
    abundance: object = None
    _cgs: dict = field(default=None, init=False, repr=False, compare=False)

    def __post_init__(self):
        n = _as_quantity(self.n_h2, "cm-3", "n_h2")
        t = _as_quantity(self.t_kin, "K", "t_kin")
        v = _as_quantity(self.velocity, "cm/s", "velocity")
        dx = _as_quantity(self.cell_size, "cm", "cell_size")
        sig = _as_quantity(self.sigma_turb, "cm/s", "sigma_turb")
        if n.ndim != 3:
            raise SnapshotError(f"n_h2 must be a 3-D array indexed [x, y, z]; got shape {n.shape}")
        if min(n.shape) < 1:
            raise SnapshotError(f"n_h2 has an empty axis: shape {n.shape}")
        if t.shape != n.shape:
            raise SnapshotError(f"t_kin has shape {t.shape} but n_h2 has {n.shape}; they must match")
        if v.shape != (3,) + n.shape:
            raise SnapshotError(
                f"velocity has shape {v.shape}; expected (3,) + n_h2.shape = {(3,) + n.shape}"
            )
        if dx.ndim != 0 or not np.isfinite(dx) or dx <= 0:
            raise SnapshotError(f"cell_size must be one positive length, got {self.cell_size}")
        if sig.ndim != 0 and sig.shape != n.shape:
            raise SnapshotError(
                f"sigma_turb must be a scalar or have shape {n.shape}; got shape {sig.shape}"
            )
        _check_finite(n, "n_h2")
        _check_finite(t, "t_kin", positive=True)
        _check_finite(v, "velocity", nonnegative=False)
        _check_finite(np.atleast_1d(sig), "sigma_turb")
        abund = self._check_abundance(self.abundance, n.shape)
        cgs = {
            "n_h2_cm3": _readonly(n), "t_kin_k": _readonly(t), "velocity_cms": _readonly(v),
            "cell_size_cm": float(dx), "sigma_turb_cms": sig if sig.ndim == 0 else _readonly(sig),
            "abundance": abund,
        }
        object.__setattr__(self, "_cgs", cgs)

    @staticmethod
    def _check_abundance(abundance, shape):
        if abundance is None:
            return None
        items = abundance.items() if isinstance(abundance, dict) else [(None, abundance)]
        out = {}
        for key, val in items:
            label = "abundance" if key is None else f"abundance['{key}']"
            if isinstance(val, u.Quantity):
                try:
                    val = val.to_value(u.dimensionless_unscaled)
                except u.UnitConversionError:
                    raise SnapshotError(f"{label} must be dimensionless, got {val.unit}") from None
            arr = np.asarray(val, dtype=np.float64)
            if arr.ndim != 0 and arr.shape != shape:
                raise SnapshotError(f"{label} must be a scalar or have shape {shape}; got {arr.shape}")
            _check_finite(np.atleast_1d(arr), label)
            out[key] = arr if arr.ndim == 0 else _readonly(arr)
        return out

    # ---- construction -------------------------------------------------------------------
    @classmethod
    def from_mass_density(cls, density, t_kin, velocity, cell_size, mean_mass=None, **kw):
        """Build a Snapshot from a gas mass density.

        n(H2) = rho / mu, with mu = 2.8 m_H per H2 molecule by default (common practice;
        Kauffmann et al. 2008, A&A 487, 993, appendix A).
        """
        rho = _as_quantity(density, "g/cm3", "density")
        mu = MEAN_MASS_PER_H2 if mean_mass is None else mean_mass
        mu_g = _as_quantity(mu, "g", "mean_mass")
        return cls(n_h2=rho / float(mu_g) * u.cm**-3, t_kin=t_kin, velocity=velocity,
                   cell_size=cell_size, **kw)

    def _replace(self, **fields_cgs):
        """A new Snapshot with some CGS fields replaced (the one private constructor)."""
        c = dict(self._cgs)
        c.update(fields_cgs)
        sig = c["sigma_turb_cms"]
        abund = c["abundance"]
        if abund is not None:
            abund = {k: v for k, v in abund.items()}
        abund = None if abund is None else (abund[None] if list(abund) == [None] else abund)
        return Snapshot(
            n_h2=c["n_h2_cm3"] * u.cm**-3, t_kin=c["t_kin_k"] * u.K,
            velocity=c["velocity_cms"] * u.cm / u.s, cell_size=c["cell_size_cm"] * u.cm,
            sigma_turb=np.asarray(sig) * u.cm / u.s, abundance=abund,
        )

    # ---- plain CGS accessors for kernels ----------------------------------------------------
    @property
    def shape(self):
        return self._cgs["n_h2_cm3"].shape

    @property
    def n_h2_cm3(self):
        return self._cgs["n_h2_cm3"]

    @property
    def t_kin_k(self):
        return self._cgs["t_kin_k"]

    @property
    def velocity_cms(self):
        return self._cgs["velocity_cms"]

    @property
    def cell_size_cm(self):
        return self._cgs["cell_size_cm"]

    @property
    def sigma_turb_cms(self):
        """Scalar float or (nx, ny, nz) array, cm/s."""
        return self._cgs["sigma_turb_cms"]

    def abundance_for(self, species, default):
        """Per-cell abundance for ``species``: the snapshot's own field, else ``default``."""
        ab = self._cgs["abundance"]
        if ab is None:
            return float(default)
        if species in ab:
            return ab[species]
        if None in ab:
            return ab[None]
        return float(default)

    @property
    def nbytes(self):
        """Bytes held by the snapshot's fields."""
        c = self._cgs
        total = c["n_h2_cm3"].nbytes + c["t_kin_k"].nbytes + c["velocity_cms"].nbytes
        total += np.asarray(c["sigma_turb_cms"]).nbytes
        if c["abundance"]:
            total += sum(np.asarray(a).nbytes for a in c["abundance"].values())
        return total

    @property
    def box_size(self):
        """Edge lengths of the box, (Lx, Ly, Lz) as a Quantity in pc."""
        return (np.array(self.shape) * self.cell_size_cm * u.cm).to(u.pc)

    def block(self, x0, x1, halo=0):
        """Rows x in [x0 - halo, x1 + halo) (cut at the box faces) as a Snapshot of their own,
        all y and z: the block protocol shared with
        :meth:`synth.snapshot.lazy.SnapshotFile.block` (:func:`block_rows` gives the rows)."""
        lo, hi = block_rows(x0, x1, halo, self.shape[0])
        if (lo, hi) == (0, self.shape[0]):
            return self
        c = self._cgs
        sig = c["sigma_turb_cms"]
        abund = c["abundance"]
        if abund is not None:
            abund = {k: (v if np.ndim(v) == 0 else v[lo:hi]) for k, v in abund.items()}
        # the rows are views of this snapshot's checked, read-only fields: no copy, no checks
        return _rows_view(dict(c, n_h2_cm3=c["n_h2_cm3"][lo:hi], t_kin_k=c["t_kin_k"][lo:hi],
                               velocity_cms=c["velocity_cms"][:, lo:hi],
                               sigma_turb_cms=sig if np.ndim(sig) == 0 else sig[lo:hi],
                               abundance=abund))

    def view(self, line_of_sight="z", edges=None):
        """This snapshot seen along another axis or rotation; see :func:`synth.snapshot.views.view`."""
        from .views import view
        return view(self, line_of_sight, edges)

    def __repr__(self):
        nx, ny, nz = self.shape
        return (f"Snapshot({nx}x{ny}x{nz} cells of {(self.cell_size_cm * u.cm).to(u.pc):.4g}, "
                f"n_H2 {self.n_h2_cm3.min():.3g}-{self.n_h2_cm3.max():.3g} cm-3, "
                f"T {self.t_kin_k.min():.3g}-{self.t_kin_k.max():.3g} K)")


def _rows_view(cgs):
    """A Snapshot over ``cgs`` fields that are read-only views of a checked Snapshot's (what
    :meth:`Snapshot.block` makes): the constructor's unit conversions, copies and finiteness
    scans are skipped, as they were done for the whole grid."""
    snap = object.__new__(Snapshot)
    abund = cgs["abundance"]
    if abund is not None:
        abund = abund[None] if list(abund) == [None] else dict(abund)
    for name, value in (("n_h2", cgs["n_h2_cm3"] << u.cm**-3), ("t_kin", cgs["t_kin_k"] << u.K),
                        ("velocity", cgs["velocity_cms"] << u.cm / u.s),
                        ("cell_size", cgs["cell_size_cm"] * u.cm),
                        ("sigma_turb", np.asarray(cgs["sigma_turb_cms"]) << u.cm / u.s),
                        ("abundance", abund), ("_cgs", cgs)):
        object.__setattr__(snap, name, value)
    return snap
