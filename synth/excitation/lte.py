"""LTE excitation: Boltzmann level populations at the kinetic (or a given) temperature.

In local thermodynamic equilibrium the fractional population of level i is

    x_i = g_i exp(-E_i / k T) / Q(T),   Q(T) = sum_j g_j exp(-E_j / k T)

(Mangum & Shirley 2015, PASP 127, 266, eqs. 31-32), and the line u -> l has
T_ex = T. The velocity-integrated opacity coefficient is

    opacity_integral = (c^3 / (8 pi nu^3)) A_ul n_u (exp(h nu / k T_ex) - 1)

(the same paper, eq. 29, per unit velocity; see :mod:`synth.excitation.product`).
"""

import math

import numpy as np
from numba import njit, prange

from .. import _vmath as vm
from ..errors import ExcitationError
from ..radiation import C_CGS, H_CGS, K_CGS
from .product import Excitation

__all__ = ["lte_excitation", "lte_fractions", "partition_table"]

_CHUNK = 1 << 14  # cells per parallel task


def partition_table(molecule, t_min_k, t_max_k, n=2048):
    """Q(T) tabulated on a log grid spanning [t_min_k, t_max_k]; returns (log_t, log_q).

    Q is smooth in log T, so linear interpolation in (log T, log Q) on 2048 nodes is accurate
    to better than 1e-7 relative for the rotors shipped with synth (tested).
    """
    lo, hi = np.log(max(t_min_k, 1e-3)), np.log(max(t_max_k, t_min_k * 1.0001, 1e-3 * 1.0001))
    log_t = np.linspace(lo, hi, n)
    q = molecule.partition_function(np.exp(log_t))
    return log_t, np.log(q)


def lte_fractions(molecule, level, t_k):
    """Fractional population of ``level`` at temperatures ``t_k`` (exact sum over levels)."""
    t = np.asarray(t_k, dtype=np.float64)
    q = molecule.partition_function(t)
    return molecule.g[level] * np.exp(-molecule.energy_k[level] / t) / q


def lte_excitation(snapshot, line, abundance, t_ex=None):
    """LTE excitation of one line in every cell of a snapshot.

    Parameters
    ----------
    snapshot : synth.Snapshot
    line : synth.Line
    abundance : float
        Abundance of the species relative to H2 (used where the snapshot carries no per-cell
        abundance for this species).
    t_ex : Quantity ``[temperature]``, optional
        A fixed excitation temperature for every cell instead of T_kin.

    Returns
    -------
    Excitation
        ``t_ex_k`` and ``opacity_integral`` (s^-1) per cell, float32.
    """
    abundance = _check_abundance(abundance)
    mol = line.molecule
    if t_ex is None:
        t_field = snapshot.t_kin_k
    else:
        t_val = float(t_ex.to_value("K")) if hasattr(t_ex, "to_value") else None
        if t_val is None or not np.isfinite(t_val) or t_val <= 0:
            raise ExcitationError(f"t_ex must be a positive temperature Quantity, got {t_ex!r}")
        t_field = np.full(snapshot.shape, t_val)
    n_h2 = snapshot.n_h2_cm3
    x_ab = snapshot.abundance_for(line.species, abundance)
    log_t, log_q = partition_table(mol, float(t_field.min()), float(t_field.max()))
    nu, a_ul = line.freq_hz, line.a_ul_s
    g_u, e_u = float(mol.g[line.upper]), float(mol.energy_k[line.upper])
    t0 = H_CGS * nu / K_CGS
    pref = C_CGS**3 / (8.0 * np.pi * nu**3) * a_ul
    # at T_kin in a float32 snapshot, T_ex is the snapshot's own (read-only) array: no copy
    share_t = t_ex is None and t_field.dtype == np.float32
    t_out = t_field if share_t else np.empty(snapshot.shape, dtype=np.float32)
    k_out = np.empty(snapshot.shape, dtype=np.float32)
    flat_x = np.atleast_1d(np.asarray(x_ab, dtype=np.float64)).reshape(-1)
    _lte_cells(t_field.reshape(-1), n_h2.reshape(-1), flat_x, float(log_t[0]),
               float(log_t[1] - log_t[0]), log_q, g_u, e_u, t0, pref, k_out.reshape(-1),
               np.empty(0, np.float32) if share_t else t_out.reshape(-1), not share_t)
    return Excitation(line=line, t_ex_k=t_out, opacity_integral=k_out, method="lte",
                      info={"t_ex": "fixed" if t_ex is not None else "t_kin"})


@njit(cache=True, parallel=True, nogil=True)
def _lte_cells(t, n_h2, x_ab, log_t0, log_step, log_q, g_u, e_u, t0, pref, k_out, t_out,
               write_t):
    """opacity_integral = pref n_H2 X g_u exp(-E_u / T) / Q(T) (exp(t0 / T) - 1) per cell, in
    one parallel pass (Q by linear interpolation of log Q on the uniform log T grid of
    partition_table, as numpy.interp would; X per cell or one value). The logarithm and the
    exponentials come from synth._vmath (no libm calls), so that LLVM vectorises the loop."""
    size = t.size
    one_x = x_ab.size == 1
    last = log_q.size - 2
    for b in prange((size + _CHUNK - 1) // _CHUNK):
        for i in range(b * _CHUNK, min(size, (b + 1) * _CHUNK)):
            tt = np.float64(t[i])
            f = (vm.ln(tt) - log_t0) / log_step
            j = min(max(int(math.floor(f)), 0), last)
            w = min(max(f - j, 0.0), 1.0)
            lq = log_q[j] + (log_q[j + 1] - log_q[j]) * w
            x = x_ab[0] if one_x else x_ab[i]
            s, q = vm.exp_parts(t0 / tt)     # exp(t0 / T) - 1 = s q + (s - 1)
            k_out[i] = pref * (np.float64(n_h2[i]) * x * g_u * vm.exp(-e_u / tt - lq)) \
                * (s * q + (s - 1.0))
            if write_t:
                t_out[i] = tt


def _check_abundance(abundance):
    try:
        value = float(abundance)
    except (TypeError, ValueError):
        raise ExcitationError(f"abundance must be a number (relative to H2), got {abundance!r}") from None
    if not np.isfinite(value) or value < 0:
        raise ExcitationError(f"abundance must be finite and >= 0 (relative to H2), got {value}")
    return value
