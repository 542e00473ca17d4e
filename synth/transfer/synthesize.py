"""synthesize: snapshot + line -> ideal PPV cube (K), the composition of excitation and transfer.

The work is chunked over sky tiles (blocks of x rows, all y and z): memory grows with the
tile and the output cube, never with snapshot x channels.
"""

from dataclasses import dataclass, field

import numpy as np
import astropy.units as u
from spectral_cube import SpectralCube

from ..errors import ConfigError, ExcitationError
from ..excitation.product import EXCITATION_METHODS
from ..radiation import AMU_CGS, K_CGS, T_CMB_K, radiation_temperature
from .kernel import N_SIGMA, transfer_columns
from .skycube import channel_grid, sky_wcs

__all__ = ["synthesize", "synthesize_products", "SynthesisResult", "excite_snapshot",
           "LINES_OF_SIGHT", "auto_velocity_range"]

#: Axis views a tracer can be seen along (rotations are given as a dict, see views).
LINES_OF_SIGHT = ("z", "-z", "x", "-x", "y", "-y")

_TILE_CELLS = 1 << 20


@dataclass(frozen=True, eq=False)
class SynthesisResult:
    """An ideal cube and its by-products.

    cube : SpectralCube (K, T_B above the background); tau : SpectralCube of the total optical
    depth per channel or None; column : Quantity map (y, x) of the species column density or
    None; excitation_info : the excitation solver's diagnostics; stats : dict of simple numbers.
    """

    cube: SpectralCube
    tau: object = None
    column: object = None
    excitation_info: dict = field(default_factory=dict)
    stats: dict = field(default_factory=dict)


def excite_snapshot(snapshot, line, abundance, excitation="lte", t_ex=None, options=None):
    """Run the excitation stage chosen by name; returns an :class:`Excitation`."""
    if excitation not in EXCITATION_METHODS:
        raise ExcitationError(
            f"unknown excitation method {excitation!r}; valid: {', '.join(EXCITATION_METHODS)}")
    options = dict(options or {})
    if excitation == "lte":
        if options:
            raise ExcitationError(
                f"excitation options {sorted(options)} apply to 'lvg' only, not to 'lte'")
        from ..excitation.lte import lte_excitation
        return lte_excitation(snapshot, line, abundance, t_ex=t_ex)
    if t_ex is not None:
        raise ExcitationError("t_ex fixes an LTE excitation temperature; it cannot be used with 'lvg'")
    from ..excitation.lvg import lvg_excitation
    return lvg_excitation(snapshot, line, abundance, **options)


def auto_velocity_range(snapshot, line, systemic_kms=0.0):
    """(low, high) km/s covering every cell's centroid +- N_SIGMA dispersions."""
    vz = snapshot.velocity_cms[2] / 1e5 + systemic_kms
    sig = np.sqrt(K_CGS * float(snapshot.t_kin_k.max()) / (line.mass_amu * AMU_CGS)
                  + np.max(snapshot.sigma_turb_cms) ** 2) / 1e5
    pad = N_SIGMA * sig
    return (float(vz.min()) - pad, float(vz.max()) + pad) * u.km / u.s


def synthesize(snapshot, line, abundance, excitation="lte", **kw):
    """Synthesize the ideal PPV cube of one line from a snapshot.

    Parameters
    ----------
    snapshot : synth.Snapshot
    line : synth.Line
    abundance : float
        Species abundance relative to H2 (cells with their own abundance field use it).
    excitation : {"lte", "lvg"}
    distance : Quantity ``[length]``
        Distance to the cloud; the pixel angle is cell_size / distance.
    channel_width : Quantity ``[speed]``
    velocity_range : Quantity ``[speed]`` (low, high), optional
        Output (LSR radio-velocity) range; default: every cell's centroid +- 5 sigma.
    line_of_sight : str or dict, optional
        "z" (default), "-z", "x", "-x", "y", "-y" or a rotation (see
        :func:`synth.snapshot.views.view`).
    systemic_velocity : Quantity ``[speed]``, optional
        Added to the model's line-of-sight velocities (default 0).
    position : (Quantity, Quantity), optional
        (RA, Dec) of the map centre.
    t_bg : Quantity ``[temperature]``, optional
        Background temperature (default 2.725 K, the CMB).
    t_ex : Quantity, optional
        A fixed LTE excitation temperature instead of T_kin.
    excitation_options : dict, optional
        Options of the LVG solver (:func:`synth.excitation.lvg.lvg_excitation`).
    progress : bool
        Show a progress bar over sky tiles.

    Returns
    -------
    SpectralCube
        Brightness temperature above the background (K), axes (v, y, x).

    Notes
    -----
    T_B is the Rayleigh-Jeans-equivalent intensity minus J(T_bg) (DESIGN.md). See
    :mod:`synth.transfer.kernel` for the profile and formal-solution equations.
    """
    return synthesize_products(snapshot, line, abundance, excitation, **kw).cube


def synthesize_products(snapshot, line, abundance, excitation="lte", *, distance,
                        channel_width, velocity_range=None, line_of_sight="z",
                        systemic_velocity=0.0 * u.km / u.s, position=None, t_bg=T_CMB_K * u.K,
                        t_ex=None, excitation_options=None, products=(), progress=False,
                        tile_cells=_TILE_CELLS):
    """Like :func:`synthesize`, also returning ``products`` ("tau", "column") and diagnostics."""
    unknown = set(products) - {"tau", "column"}
    if unknown:
        raise ConfigError(f"unknown products {sorted(unknown)}; valid: 'tau', 'column'")
    dist_cm = _positive(distance, u.cm, "distance")
    v_sys = _finite(systemic_velocity, u.km / u.s, "systemic_velocity")
    t_bg_k = _positive(t_bg, u.K, "t_bg")
    snap = snapshot if line_of_sight == "z" else snapshot.view(line_of_sight)
    if velocity_range is None:
        velocity_range = auto_velocity_range(snap, line, v_sys)
    grid = channel_grid(channel_width, velocity_range)
    exc = excite_snapshot(snap, line, abundance, excitation, t_ex, excitation_options)
    data, tau = _integrate(snap, line, exc, grid, v_sys, t_bg_k, "tau" in products,
                           tile_cells, progress)
    nx, ny, _ = snap.shape
    pixel_deg = np.degrees(snap.cell_size_cm / dist_cm)
    wcs = sky_wcs(nx, ny, pixel_deg, grid, line.freq_hz, position)
    meta = {"BUNIT": "K", "LINE": str(line), "EXCIT": exc.method,
            "ABUND": float(abundance), "DISTPC": dist_cm / u.pc.to(u.cm),
            "LOS": str(line_of_sight), "TBG": t_bg_k}
    cube = _cube(data, wcs, meta, "K")
    tau_cube = _cube(tau, wcs, dict(meta, BUNIT=""), "") if tau is not None else None
    column = _column_map(snap, line, abundance) if "column" in products else None
    stats = {"peak_k": float(np.nanmax(data)), "n_channels": grid.n,
             "integrated_k_kms": float(data.sum(dtype=np.float64) * grid.width_kms)}
    if tau is not None:
        stats["tau_max"] = float(np.max(tau))
    return SynthesisResult(cube, tau_cube, column, exc.info, stats)


def _cube(data, wcs, meta, unit):
    q = data * (u.Unit(unit) if unit else u.dimensionless_unscaled)
    return SpectralCube(data=q, wcs=wcs, meta=dict(meta))


def _integrate(snap, line, exc, grid, v_sys, t_bg_k, want_tau, tile_cells, progress):
    """Run the kernel tile by tile; returns the (v, y, x) cube and optional tau cube."""
    nx, ny, nz = snap.shape
    data = np.empty((grid.n, ny, nx), dtype=np.float32)
    tau = np.empty((grid.n, ny, nx), dtype=np.float32) if want_tau else None
    tx = max(1, min(nx, tile_cells // max(1, ny * nz)))
    starts = range(0, nx, tx)
    if progress:
        from tqdm.auto import tqdm
        starts = tqdm(starts, desc=f"{line} tiles", unit="tile", leave=False)
    j_bg = float(radiation_temperature(line.freq_hz, t_bg_k))
    for x0 in starts:
        sl = slice(x0, min(nx, x0 + tx))
        out, tau_t = transfer_tile(snap, line, exc, sl, grid, v_sys, j_bg, want_tau)
        n = sl.stop - sl.start
        data[:, :, sl] = out.reshape(n, ny, grid.n).transpose(2, 1, 0)
        if want_tau:
            tau[:, :, sl] = tau_t.reshape(n, ny, grid.n).transpose(2, 1, 0)
    return data, tau


def transfer_tile(snap, line, exc, x_slice, grid, v_sys_kms, j_bg, want_tau=False):
    """The block-level kernel: columns x in ``x_slice`` (all y, z) -> (ncol, nch) spectra."""
    nx, ny, nz = snap.shape
    n = x_slice.stop - x_slice.start
    shape = (n * ny, nz)
    t_ex = exc.t_ex_k[x_slice].astype(np.float64)
    src = radiation_temperature(line.freq_hz, t_ex).astype(np.float32).reshape(shape)
    tau_int = (exc.opacity_integral[x_slice] * (snap.cell_size_cm * 1e-5)).astype(np.float32)
    vz = snap.velocity_cms[2, x_slice]
    v0 = (vz * 1e-5 + v_sys_kms).astype(np.float32).reshape(shape)
    delta = (np.abs(np.gradient(vz, axis=2)) * 1e-5 if nz > 1 else np.zeros_like(vz))
    sig_turb = snap.sigma_turb_cms
    sig_turb = sig_turb if np.ndim(sig_turb) == 0 else sig_turb[x_slice]
    sigma = np.sqrt(K_CGS * snap.t_kin_k[x_slice] / (line.mass_amu * AMU_CGS)
                    + np.square(sig_turb)) * 1e-5
    out = np.empty((n * ny, grid.n), dtype=np.float32)
    tau_out = np.empty((n * ny, grid.n) if want_tau else (0, 0), dtype=np.float32)
    transfer_columns(tau_int.reshape(shape), src, v0,
                     sigma.astype(np.float32).reshape(shape),
                     delta.astype(np.float32).reshape(shape),
                     float(grid.start_kms), float(grid.width_kms), int(grid.n), j_bg,
                     out, tau_out)
    return out, (tau_out if want_tau else None)


def _column_map(snap, line, abundance):
    x_ab = snap.abundance_for(line.species, abundance)
    col = (snap.n_h2_cm3 * x_ab).sum(axis=2) * snap.cell_size_cm
    return col.T * u.cm**-2


def _positive(q, unit, name):
    value = _finite(q, unit, name)
    if value <= 0:
        raise ConfigError(f"{name} must be > 0, got {q}")
    return value


def _finite(q, unit, name):
    if not isinstance(q, u.Quantity):
        raise ConfigError(f"{name} needs a unit, e.g. {name}=3 * u.{unit.to_string()}; got {q!r}")
    try:
        value = float(q.to_value(unit))
    except (u.UnitConversionError, TypeError):
        raise ConfigError(f"{name} must be convertible to {unit}, got {q}") from None
    if not np.isfinite(value):
        raise ConfigError(f"{name} must be finite, got {q}")
    return value

