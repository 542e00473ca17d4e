"""An invented, procedurally generated demo cloud.

Nothing here is a real object or the output of a real simulation. The recipe:

* **Density**: log-normal, ``n = n0 exp(s g - s^2/2)`` renormalised to the requested mean, with
  ``g`` a unit-variance Gaussian random field whose 3-D power spectrum is ``P(k) ~ k^-beta_n``
  (the log-normal model of Coles & Jones 1991, MNRAS 248, 1). Its width follows the
  turbulent-density relation ``s^2 = ln(1 + b^2 M^2)`` (Padoan, Nordlund & Jones 1997,
  MNRAS 288, 145; Federrath, Klessen & Schmidt 2008, ApJ 688, L79) with the forcing parameter
  ``b = 1 - (2/3) f_sol`` for a solenoidal power fraction ``f_sol`` in 3-D (Federrath et al.
  2010, A&A 512, A81, eq. 8 with D = 3; from memory).
* **Turbulent velocity**: a Gaussian random vector field with ``P(k) ~ k^-beta_v``,
  Helmholtz-decomposed in Fourier space into its solenoidal part (``k . v_k = 0``) and its
  compressive part (``k x v_k = 0``), which are mixed with power fractions ``f_sol`` and
  ``1 - f_sol`` and scaled to a 3-D dispersion ``M c_s``, with ``c_s`` the isothermal sound
  speed at ``t_ref`` for a mean mass of 2.37 m_H per particle (Kauffmann et al. 2008, A&A
  487, 993, appendix A). The density and velocity fields are drawn independently.
* **Bulk flow**: solid-body rotation about the x axis plus a linear shear,
  ``v = (0, -Omega z, Omega y + S x)`` about the box centre (invented).
* **Temperature**: ``T = 10 K + 50 K (n/n0)^-0.3`` clipped to ``t_range`` (an invented recipe
  that makes dense gas colder).
* **Microturbulence**: one scalar ``sigma_turb`` for the unresolved scales,
  ``sigma_1D (dx/L)^((beta_v - 3)/2)``: for ``P(k) ~ k^-beta_v`` the dispersion on scales
  below ``l`` scales as ``l^((beta_v - 3)/2)`` (from integrating the spectrum; for
  ``beta_v = 4`` this is Larson's 1981 MNRAS 194, 809 size-linewidth slope of ~0.5).
"""

import numpy as np
import astropy.units as u
import astropy.constants as const

from ..errors import MemoryBudgetError, SnapshotError
from .core import Snapshot

__all__ = ["demo_cloud", "demo_source", "sound_speed", "MEAN_MASS_PER_PARTICLE"]

#: Mean mass per free particle in molecular gas, 2.37 m_H (Kauffmann et al. 2008, appendix A).
MEAN_MASS_PER_PARTICLE = 2.37 * const.m_p.cgs

_BYTES_PER_CELL = 56  # peak working memory of demo_cloud per cell (float32 fields + FFTs)
_WORKERS = 2


def sound_speed(t_kin):
    """Isothermal sound speed ``c_s = sqrt(k T / (2.37 m_H))`` (Kauffmann et al. 2008)."""
    c2 = const.k_B.cgs.value * t_kin.to_value(u.K) / MEAN_MASS_PER_PARTICLE.value
    return (np.sqrt(c2) * u.cm / u.s).to(u.km / u.s)


def demo_source():
    """Invented source parameters to place the demo cloud on the sky.

    Returns
    -------
    dict
        ``name``, ``distance`` (2.4 kpc), ``ra`` and ``dec`` (an invented position, ICRS),
        ``v_sys`` (systemic LSR radio velocity). None of these describe a real object.
    """
    return {
        "name": "synth demo cloud (invented)",
        "distance": 2.4 * u.kpc,
        "ra": 131.50 * u.deg,
        "dec": 6.20 * u.deg,
        "v_sys": 42.0 * u.km / u.s,
    }


@u.quantity_input(box="length", mean_n_h2="number density", rotation=u.km / u.s / u.pc,
                  shear=u.km / u.s / u.pc, t_range="temperature", t_ref="temperature")
def demo_cloud(cells=128, seed=1, box=4 * u.pc, mean_n_h2=3e3 * u.cm**-3, mach=10.0,
               solenoidal_fraction=0.7, density_slope=3.5, velocity_slope=4.0,
               rotation=0.3 * u.km / u.s / u.pc, shear=0.15 * u.km / u.s / u.pc,
               t_range=(10.0, 60.0) * u.K, t_ref=10.0 * u.K, max_bytes=4e9):
    """Generate the invented demo cloud (see the module docstring for the recipe).

    Parameters
    ----------
    cells : int
        Cells per axis (the grid is cells^3, cubic cells).
    seed : int
        Seed of :func:`numpy.random.default_rng`; the same seed gives the same bytes.
    box : Quantity ``[length]``
        Box edge length.
    mean_n_h2 : Quantity ``[number density]``
        Volume-averaged n(H2).
    mach : float
        3-D sonic Mach number of the turbulent velocity at ``t_ref``; sets the velocity
        dispersion ``mach * c_s`` and the width of the log-normal density PDF.
    solenoidal_fraction : float
        Fraction of the turbulent velocity power in solenoidal modes, 0-1.
    density_slope, velocity_slope : float
        ``beta`` of the 3-D power spectra ``P(k) ~ k^-beta`` of ln n and of the velocity.
    rotation, shear : Quantity ``[speed / length]``
        Bulk solid-body rotation rate about x and shear ``dv_z/dx``.
    t_range : Quantity ``[temperature]``, (2,)
        Minimum and maximum temperature of the invented temperature-density recipe.
    t_ref : Quantity ``[temperature]``
        Temperature that defines the sound speed for ``mach``.
    max_bytes : float
        Refuse grids whose working memory (about 56 bytes per cell) exceeds this.

    Returns
    -------
    Snapshot
        float32 fields; ``sigma_turb`` a scalar.

    Examples
    --------
    >>> cloud = demo_cloud(cells=32, seed=3)
    >>> cloud.shape
    (32, 32, 32)
    """
    n = cells
    _check_args(n, mach, solenoidal_fraction, density_slope, velocity_slope, t_range, max_bytes)
    rng = np.random.default_rng(seed)
    n0_cm3 = float(mean_n_h2.to_value(u.cm**-3))
    dx_pc = float(box.to_value(u.pc)) / n
    sigma3d_kms = mach * float(sound_speed(t_ref).value)
    b = 1.0 - 2.0 / 3.0 * solenoidal_fraction
    width = np.sqrt(np.log1p((b * mach) ** 2))
    n_cm3 = _lognormal_density(rng, n, density_slope, width, n0_cm3)
    v_kms = _turbulent_velocity(rng, n, velocity_slope, solenoidal_fraction, sigma3d_kms)
    _add_bulk_flow(v_kms, dx_pc, rotation.to_value(u.km / u.s / u.pc),
                   shear.to_value(u.km / u.s / u.pc))
    t_lo, t_hi = t_range.to_value(u.K)
    t_k = np.clip(10.0 + 50.0 * (n_cm3 / np.float32(n0_cm3)) ** np.float32(-0.3), t_lo, t_hi)
    sigma_sub_kms = sigma3d_kms / np.sqrt(3.0) * (1.0 / n) ** ((velocity_slope - 3.0) / 2.0)
    return Snapshot(n_h2=n_cm3 * u.cm**-3, t_kin=t_k.astype(np.float32) * u.K,
                    velocity=v_kms * (u.km / u.s), cell_size=dx_pc * u.pc,
                    sigma_turb=sigma_sub_kms * u.km / u.s)


def _check_args(n, mach, f_sol, beta_n, beta_v, t_range, max_bytes):
    if not isinstance(n, (int, np.integer)) or n < 8:
        raise SnapshotError(f"demo cloud cells = {n!r} is not valid; use an integer >= 8")
    if not np.isfinite(mach) or mach < 0:
        raise SnapshotError(f"demo cloud mach = {mach!r} is not valid; use a finite number >= 0")
    if not 0.0 <= f_sol <= 1.0:
        raise SnapshotError(
            f"demo cloud solenoidal_fraction = {f_sol!r} is not valid; use a number in [0, 1]")
    for name, beta in (("density_slope", beta_n), ("velocity_slope", beta_v)):
        if not np.isfinite(beta) or not 0.0 < beta < 10.0:
            raise SnapshotError(f"demo cloud {name} = {beta!r} is not valid; use 0 < beta < 10")
    t = t_range.to_value(u.K)
    if np.shape(t) != (2,) or not 0 < t[0] <= t[1]:
        raise SnapshotError(
            f"demo cloud t_range = {t_range} is not valid; use (t_min, t_max) with 0 < t_min <= t_max")
    need = _BYTES_PER_CELL * float(n) ** 3
    if need > max_bytes:
        raise MemoryBudgetError(
            f"demo cloud cells = {n} needs about {need / 1e9:.1f} GB of working memory, more than "
            f"max_bytes = {max_bytes / 1e9:.1f} GB; lower cells or raise max_bytes")


def _fft():
    """scipy.fft, imported when first needed (the config checks import this module)."""
    from scipy import fft
    return fft


def _wavenumbers(n):
    """Broadcastable integer wavenumber grids (kx, ky, kz) of an rfftn of shape (n, n, n)."""
    k = _fft().fftfreq(n, 1.0 / n).astype(np.float32)
    kz = _fft().rfftfreq(n, 1.0 / n).astype(np.float32)
    return k[:, None, None], k[None, :, None], kz[None, None, :]


def _power_law_filter(n, slope):
    """Amplitude ``k^(-slope/2)`` on the rfftn grid, zero at k = 0."""
    kx, ky, kz = _wavenumbers(n)
    k2 = kx**2 + ky**2 + kz**2
    k2[0, 0, 0] = 1.0
    amp = k2 ** np.float32(-slope / 4.0)
    amp[0, 0, 0] = 0.0
    return amp


def _gaussian_fourier(rng, n, amp):
    """rfftn of white float32 noise, filtered by ``amp``."""
    white = rng.standard_normal((n, n, n), dtype=np.float32)
    f = _fft().rfftn(white, workers=_WORKERS)
    f *= amp
    return f


def _lognormal_density(rng, n, slope, width, n0_cm3):
    """Log-normal density with ln-width ``width`` and mean exactly ``n0_cm3``."""
    if width == 0:
        return np.full((n, n, n), n0_cm3, dtype=np.float32)
    g = _fft().irfftn(_gaussian_fourier(rng, n, _power_law_filter(n, slope)), s=(n, n, n),
                    workers=_WORKERS)
    g -= g.mean(dtype=np.float64)
    g *= np.float32(width / g.std(dtype=np.float64))
    np.exp(g, out=g)
    g *= np.float32(n0_cm3 / g.mean(dtype=np.float64))
    return g


def _rfft_weights(n):
    """Parseval weights along the last rfftn axis: 2 for modes whose conjugate is implicit."""
    w = np.full(n // 2 + 1, 2.0, dtype=np.float32)
    w[0] = 1.0
    if n % 2 == 0:
        w[-1] = 1.0
    return w


def _turbulent_velocity(rng, n, slope, f_sol, sigma3d_kms):
    """Gaussian random vector field, solenoidal power fraction ``f_sol``, 3-D rms ``sigma3d``."""
    if sigma3d_kms == 0:
        return np.zeros((3, n, n, n), dtype=np.float32)
    amp = _power_law_filter(n, slope)
    w = np.stack([_gaussian_fourier(rng, n, amp) for _ in range(3)])
    del amp
    kvec = _wavenumbers(n)
    k2 = kvec[0] ** 2 + kvec[1] ** 2 + kvec[2] ** 2
    k2[0, 0, 0] = 1.0
    kdotw = (kvec[0] * w[0] + kvec[1] * w[1] + kvec[2] * w[2]) / k2
    comp = np.stack([kk * kdotw for kk in kvec])  # compressive (curl-free) part
    del kdotw
    w -= comp  # solenoidal (divergence-free) part
    weights = _rfft_weights(n)
    p_sol = float(np.sum(weights * np.abs(w) ** 2, dtype=np.float64))
    p_comp = float(np.sum(weights * np.abs(comp) ** 2, dtype=np.float64))
    w *= np.float32(np.sqrt(f_sol / p_sol)) if p_sol > 0 else 0.0
    w += comp * np.float32(np.sqrt((1.0 - f_sol) / p_comp) if p_comp > 0 else 0.0)
    del comp
    v = np.empty((3, n, n, n), dtype=np.float32)
    for c in range(3):
        v[c] = _fft().irfftn(w[c], s=(n, n, n), workers=_WORKERS)
    del w
    rms = np.sqrt(sum(np.sum(np.square(v[c]), dtype=np.float64) for c in range(3)) / n**3)
    v *= np.float32(sigma3d_kms / rms)
    return v


def _add_bulk_flow(v_kms, dx_pc, omega_kms_pc, shear_kms_pc):
    """Add ``(0, -Omega z, Omega y + S x)`` about the box centre, in place (km/s)."""
    n = v_kms.shape[1]
    r_pc = ((np.arange(n, dtype=np.float32) - (n - 1) / 2.0) * dx_pc).astype(np.float32)
    x, y, z = r_pc[:, None, None], r_pc[None, :, None], r_pc[None, None, :]
    v_kms[1] -= np.float32(omega_kms_pc) * z
    v_kms[2] += np.float32(omega_kms_pc) * y + np.float32(shear_kms_pc) * x
