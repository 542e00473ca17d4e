"""Level-population tables over (n_H2, T_kin, K) with error-controlled refinement.

Solving statistical equilibrium in every cell of a 256^3 snapshot is too slow, so the
populations are solved on a table with log10-spaced nodes along n(H2) [cm^-3], T_kin [K] and
K = n_mol/|dv/ds| [cm^-3 s] (the Sobolev column per velocity, :mod:`synth.excitation.gradient`)
spanning the ranges found in the cells, and interpolated per cell, multilinearly in the log10
coordinates (trilinear on a uniform grid), in two quantities that stay smooth where T_ex
nears T_bg and through weak population inversions: the population difference
f = x_l g_u/g_l - x_u (opacity per molecule, tau = tau_c K f) and the excess emissivity
e = T_0 x_u - J(T_bg) f (T_0 = h nu/k), so that J(T_ex) - J(T_bg) = e / f and

    T_R = (e / f) (1 - exp(-tau_c K f)) = e tau_c K (1 - e^{-tau}) / tau.

Interpolating T_ex or ln x instead loses the difference J(T_ex) - J(T_bg) to cancellation in
faint cells. Both are stored as asinh(v / v_0): e with v_0 = 1e-6 of its largest |e| on the
nodes (logarithmic over the decades e spans, e ~ n at low density), f with v_0 = 1e-2 of its
largest |f| (f changes sign in weak inversions, where a logarithm would interpolate badly).

Error control: a random sample of cells (``numpy.random.default_rng(seed)``) is solved
directly and three errors are measured between interpolation and direct solve:

- in the line's radiation temperature T_R = [J(T_ex) - J(T_bg)](1 - e^{-tau}) (tau the cell's
  Sobolev optical depth), relative to max(|T_R|, 1e-3 max|T_R| of the sample) so that nearly
  empty cells do not dominate;
- in tau itself, relative to max(|tau|, THICK_TAU = 1). T_R alone cannot see opacity errors
  in thick cells, where 1 - e^{-tau} ~ 1, but the attenuation of what lies behind can; in a
  thin cell the emission (J(T_ex) - J(T_bg)) tau = e tau_c K does not depend on f (T_ex and
  tau come from the same interpolated e and f) and an error in f only changes the
  attenuation, by |delta tau| (the Sobolev tau is the depth a photon sees over the
  velocity-coherence length);
- in the source function above the background, J(T_ex) - J(T_bg) = e/f, which is how T_ex
  enters the transfer (T_ex itself diverges as f -> 0, so its relative error is no useful
  bound), relative, over the sample cells with |tau| >= THICK_TAU, where it sets the
  brightness.

The table's error is the largest of the three. While it exceeds the requested accuracy the
node spacing is halved along one axis: for the quantity with the largest error, the axis whose
coarsening (dropping every other node) changes the interpolated values most at the failing
sample cells (the difference between the coarse and the fine interpolant estimates the fine
one's error). New nodes start from the geometric mean of their neighbours' populations. If
the next halving would pass ``max_nodes`` a :class:`~synth.errors.TableAccuracyWarning` gives
the accuracy reached.
"""

from dataclasses import dataclass
import math
import warnings

import numpy as np
from numba import njit, prange

from .. import _vmath as vm
from ..errors import TableAccuracyWarning
from ..radiation import H_CGS, K_CGS, radiation_temperature
from .statistical_equilibrium import solve_levels

__all__ = ["PopulationTable", "build_table", "apply_table", "INITIAL_STEP_DEX", "THICK_TAU"]

#: Initial node spacing (dex) along log n(H2), log T_kin, log K.
INITIAL_STEP_DEX = (0.5, 0.1, 0.5)
_REL_FLOOR = 1e-3
#: Sobolev optical depth below which a cell counts as thin for the tau and source-function
#: errors (module docstring).
THICK_TAU = 1.0


@dataclass(frozen=True, eq=False)
class PopulationTable:
    """Solved populations on a regular grid in (log10 n_H2, log10 T_kin, log10 K).

    axes : tuple of three 1-D arrays of log10 node values (uniformly spaced, length 1 allowed);
    values : ndarray (m_n, m_T, m_K, 2), asinh(e/e_0) and asinh(f/f_0) (module docstring);
    scales : (e_0, f_0); line : (nu_hz, g_u/g_l, tau_c, J(T_bg)) of the tabulated line;
    error : float, the largest of the achieved sample errors; errors : (T_R, tau, source
    function) sample errors (module docstring); solves : int, the number of direct solves made
    (nodes and sample).
    """

    axes: tuple
    values: np.ndarray
    scales: tuple
    line: tuple
    error: float
    solves: int
    errors: tuple = (0.0, 0.0, 0.0)

    @property
    def shape(self):
        return tuple(a.size for a in self.axes)


def _axis(lo, hi, step):
    if hi - lo < 1e-9:
        return np.array([lo])
    m = 2 * math.ceil((hi - lo) / (2.0 * step)) + 1
    return np.linspace(lo, hi, m)


def _solve_nodes(system, axes, idx, x0, opts):
    """Populations at grid nodes idx (N, 3) of index triples."""
    n, t, k = (10.0 ** axes[a][idx[:, a]] for a in range(3))
    return solve_levels(system, n, t, k, x0=x0, **opts).populations


def _interp(axes, vals, pts):
    """Trilinear interpolation of vals (m1, m2, m3, q) at points (N, 3) in log10 coordinates."""
    out = np.zeros((pts.shape[0], vals.shape[-1]))
    base, frac = [], []
    for a, ax in enumerate(axes):
        if ax.size == 1:
            base.append(np.zeros(pts.shape[0], dtype=int))
            frac.append(np.zeros(pts.shape[0]))
            continue
        c = np.clip((pts[:, a] - ax[0]) / (ax[1] - ax[0]), 0.0, ax.size - 1)
        i = np.minimum(c.astype(int), ax.size - 2)
        base.append(i)
        frac.append(c - i)
    for corner in range(8):
        w = np.ones(pts.shape[0])
        ix = []
        for a in range(3):
            bit = (corner >> a) & 1
            ix.append(np.minimum(base[a] + bit, axes[a].size - 1))
            w = w * (frac[a] if bit else 1.0 - frac[a])
        out += w[:, None] * vals[ix[0], ix[1], ix[2]]
    return out


def line_t_r(x_u, x_l, kcol, line):
    """T_R of the line from populations and Sobolev K (the per-cell check quantity), K."""
    nu, gr, tau_coef, j_bg = line
    f = x_l * gr - x_u
    return _t_r(H_CGS * nu / K_CGS * x_u - j_bg * f, f, tau_coef * kcol)


def _t_r(e, f, tau_per_f):
    """T_R = e tau_c K (1 - e^-tau)/tau, tau = tau_c K f (module docstring)."""
    tau = tau_per_f * f
    safe = np.where(tau == 0.0, 1.0, tau)
    return e * tau_per_f * np.where(tau == 0.0, 1.0, -np.expm1(-safe) / safe)


def _node_values(pops, up, lo, line, scales=None):
    """asinh-scaled (e, f) of the line at the nodes, and the scales."""
    nu, gr, _, j_bg = line
    f = pops[..., lo] * gr - pops[..., up]
    e = H_CGS * nu / K_CGS * pops[..., up] - j_bg * f
    if scales is None:
        scales = (1e-6 * np.abs(e).max() + 1e-300, 1e-2 * np.abs(f).max() + 1e-300)
    return np.stack([np.arcsinh(e / scales[0]), np.arcsinh(f / scales[1])], axis=-1), scales


def _checked(e, f, kcol, line):
    """(T_R, tau, J(T_ex) - J(T_bg)) of the line from e, f and the cells' K."""
    tau = line[2] * kcol * f
    with np.errstate(divide="ignore", invalid="ignore"):
        src = np.where(f == 0.0, 0.0, e / np.where(f == 0.0, 1.0, f))
    return _t_r(e, f, line[2] * kcol), tau, src


def _predict(axes, vals, pts, kcol, line, scales):
    v = _interp(axes, vals, pts)
    return _checked(scales[0] * np.sinh(v[:, 0]), scales[1] * np.sinh(v[:, 1]), kcol, line)


def _cell_errors(got, ref):
    """Per-cell errors (T_R, tau, source function) with their scales (module docstring);
    the source-function error is 0 in thin cells."""
    thick = np.abs(ref[1]) >= THICK_TAU
    scales = (np.maximum(np.abs(ref[0]), _REL_FLOOR * np.abs(ref[0]).max() + 1e-300),
              np.maximum(np.abs(ref[1]), THICK_TAU),
              np.where(thick, np.abs(ref[2]) + 1e-300, np.inf))
    return [np.abs(g - r) / sc for g, r, sc in zip(got, ref, scales)], scales


def _errors(axes, vals, pts, ref, kcol, line, scales):
    """Sample errors (T_R, tau, source function) of the interpolated table."""
    errs, _ = _cell_errors(_predict(axes, vals, pts, kcol, line, scales), ref)
    return tuple(float(np.max(e)) for e in errs)


def _worst_axis(axes, vals, pts, ref, kcol, line, scales, accuracy):
    """The axis to refine (None if none can be): for the quantity with the largest error, the
    axis whose coarsening by 2 changes the interpolated values most at the sample cells that
    fail the accuracy (the difference between a coarse and a fine interpolant estimates the
    fine one's error)."""
    fine = _predict(axes, vals, pts, kcol, line, scales)
    errs, sc = _cell_errors(fine, ref)
    q = int(np.argmax([e.max() for e in errs]))
    failing = errs[q] > accuracy
    if not np.any(failing):
        failing = errs[q] >= errs[q].max()
    best, score = None, -1.0
    for a, ax in enumerate(axes):
        if ax.size < 3:
            continue
        coarse = list(axes)
        coarse[a] = ax[::2]
        sl = [slice(None)] * 3
        sl[a] = slice(None, None, 2)
        got = _predict(coarse, vals[tuple(sl)], pts, kcol, line, scales)[q]
        change = float(np.max((np.abs(got - fine[q]) / sc[q])[failing]))
        if change > score:
            best, score = a, change
    return best


def _refine(system, axes, pops, a, opts):
    """Halve the spacing along axis a: old nodes kept, the new (odd) planes solved."""
    ax = axes[a]
    new_ax = np.linspace(ax[0], ax[-1], 2 * ax.size - 1)
    shape = list(pops.shape)
    shape[a] = new_ax.size
    new = np.empty(shape)
    even = [slice(None)] * 4
    even[a] = slice(None, None, 2)
    new[tuple(even)] = pops
    lo, hi = [slice(None)] * 4, [slice(None)] * 4
    lo[a], hi[a] = slice(None, -1), slice(1, None)
    guess = np.sqrt(np.maximum(pops[tuple(lo)], 1e-300) * np.maximum(pops[tuple(hi)], 1e-300))
    axes = tuple(new_ax if b == a else axes[b] for b in range(3))
    grid = [np.arange(n) for n in shape[:3]]
    grid[a] = np.arange(1, new_ax.size, 2)
    idx = np.stack(np.meshgrid(*grid, indexing="ij"), axis=-1).reshape(-1, 3)
    g = guess.reshape(-1, shape[3])  # same C order as idx
    g = g / g.sum(axis=1, keepdims=True)
    new[idx[:, 0], idx[:, 1], idx[:, 2]] = _solve_nodes(system, axes, idx, g, opts)
    return axes, new, idx.shape[0]


def build_table(system, ranges, sample, line, opts, accuracy=0.01, max_nodes=60000,
                progress=None):
    """Solve and refine a :class:`PopulationTable` (module docstring).

    Parameters
    ----------
    system : LevelSystem
    ranges : sequence of three (lo, hi)
        log10 ranges of n(H2), T_kin and K in the cells.
    sample : ndarray (N, 3)
        log10 (n, T, K) of the randomly drawn check cells.
    line : tuple
        (kept-line index in ``system``, t_bg_k) of the line whose T_R is checked.
    opts : dict
        Keyword options of :func:`~synth.excitation.statistical_equilibrium.solve_levels`.
    """
    k_line, t_bg = line
    up, lo = int(system.upper[k_line]), int(system.lower[k_line])
    nu = system.freq_hz[k_line]
    consts = (nu, system.g[up] / system.g[lo], system.tau_coef[k_line],
              radiation_temperature(nu, t_bg) if t_bg > 0 else 0.0)
    axes = tuple(_axis(r[0], r[1], s) for r, s in zip(ranges, INITIAL_STEP_DEX))
    idx = np.stack(np.meshgrid(*[np.arange(a.size) for a in axes], indexing="ij"),
                   axis=-1).reshape(-1, 3)
    pops = _solve_nodes(system, axes, idx, None, opts).reshape(tuple(a.size for a in axes) + (-1,))
    x_ref = solve_levels(system, *(10.0 ** sample.T), **opts).populations
    kcol = 10.0 ** sample[:, 2]
    f_ref = x_ref[:, lo] * consts[1] - x_ref[:, up]
    ref = _checked(H_CGS * nu / K_CGS * x_ref[:, up] - consts[3] * f_ref, f_ref, kcol, consts)
    solves = idx.shape[0] + sample.shape[0]
    scales = None
    while True:
        vals, scales = _node_values(pops, up, lo, consts, scales)
        errs = _errors(axes, vals, sample, ref, kcol, consts, scales)
        err = max(errs)
        if progress is not None:
            progress(min(0.8, 0.8 * accuracy / max(err, accuracy)))
        if err <= accuracy:
            break
        a = _worst_axis(axes, vals, sample, ref, kcol, consts, scales, accuracy)
        size = np.prod([ax.size for ax in axes])
        if a is None or size * (2 * axes[a].size - 1) / axes[a].size > max_nodes:
            warnings.warn(f"LVG table stopped at {size} nodes (cap max_table_nodes="
                          f"{max_nodes}) with a T_R error of {errs[0]:.3g}, tau {errs[1]:.3g}, "
                          f"source function {errs[2]:.3g} > accuracy {accuracy:g}",
                          TableAccuracyWarning, stacklevel=3)
            break
        axes, pops, n_new = _refine(system, axes, pops, a, opts)
        solves += n_new
    return PopulationTable(axes, vals, scales, consts, err, solves, errs)


_INV_LN10 = 1.0 / math.log(10.0)


@njit(parallel=True, cache=True, error_model="numpy", fastmath={"contract"})
def _apply(n_h2, abund, t_k, kcol, lo, step, size, ve, vf, e0, f0, t0, j_bg, tau_coef, t_bg,
           t_ex_out, op_out):
    """Per row of cells, three loops: the table coordinates (log10 in float64 by synth._vmath,
    which LLVM vectorises), the trilinear look-up (gathers, scalar), and the decoding
    e = e0 sinh(.), f = f0 sinh(.) into the opacity and T_ex (vectorised). Empty cells (n_mol
    or K not > 0) get T_bg and 0. ``abund`` holds one value per cell, or one for all as a
    (1, 1, 1) array."""
    nx, ny, nz = n_h2.shape
    one_ab = abund.size == 1     # one abundance for every cell (a (1, 1, 1) array)
    for i in prange(nx):
        cx = np.empty(nz)
        cy = np.empty(nz)
        cz = np.empty(nz)
        se = np.empty(nz)
        sf = np.empty(nz)
        for j in range(ny):
            for k in range(nz):
                n = np.float64(n_h2[i, j, k])
                kc = np.float64(kcol[i, j, k])
                n = n if n > 0.0 else 1.0      # empty cells: any coordinate, result unused
                kc = kc if kc > 0.0 else 1.0
                cx[k] = _coord(n, lo[0], step[0], size[0])
                cy[k] = _coord(np.float64(t_k[i, j, k]), lo[1], step[1], size[1])
                cz[k] = _coord(kc, lo[2], step[2], size[2])
            for k in range(nz):
                x0, x1, fx = _node(cx[k], size[0])
                y0, y1, fy = _node(cy[k], size[1])
                z0, z1, fz = _node(cz[k], size[2])
                gx, gy, gz = 1.0 - fx, 1.0 - fy, 1.0 - fz
                a = 0.0
                b = 0.0
                for corner in range(8):  # x fastest; weights (wx wy) wz
                    xi, wx = (x1, fx) if corner & 1 else (x0, gx)
                    yi, wy = (y1, fy) if corner & 2 else (y0, gy)
                    zi, wz = (z1, fz) if corner & 4 else (z0, gz)
                    w = (wx * wy) * wz
                    a += w * ve[xi, yi, zi]
                    b += w * vf[xi, yi, zi]
                se[k] = a
                sf[k] = b
            for k in range(nz):
                nm = np.float64(n_h2[i, j, k]) * (abund[0, 0, 0] if one_ab else abund[i, j, k])
                active = nm > 0.0 and kcol[i, j, k] > 0.0
                e = e0 * vm.sinh(se[k])
                f = f0 * vm.sinh(sf[k])
                op_out[i, j, k] = tau_coef * nm * f if active else 0.0
                t_ex_out[i, j, k] = _t_ex(e, f, t0, j_bg) if active else t_bg


@njit(cache=True, inline="always")
def _coord(v, lo, step, size):
    """Position of log10(v) on an axis in node units, clamped to [0, size - 1]."""
    return min(max((vm.ln(v) * _INV_LN10 - lo) / step, 0.0), size - 1.0)


@njit(cache=True, inline="always")
def _node(c, size):
    """(lower node, upper node, fraction) of position ``c`` on an axis of ``size`` nodes (one
    node: (0, 0, 0))."""
    if size <= 1:
        return 0, 0, 0.0
    b = min(int(c), size - 2)
    return b, min(b + 1, size - 1), c - b


@njit(cache=True, inline="always")
def _t_ex(e, f, t0, j_bg):
    """T_ex from J(T_ex) = e/f + J(T_bg); J in [-T_0, 0] (unphysical) is clamped to 1e-3 K,
    f = 0 gives +-1e30 (branch-free: every case is computed, one is selected)."""
    jj = e / (f if f != 0.0 else 1.0) + j_bg
    clamp = -t0 <= jj and jj <= 0.0
    t_ex = t0 / vm.log1p(t0 / (1.0 if clamp else jj))
    t_ex = 1e-3 if clamp else t_ex
    return t_ex if f != 0.0 else (1e30 if e >= 0.0 else -1e30)


def apply_table(table, system, k_line, snapshot, abundance, kcol, t_bg_k, rows=None):
    """Per-cell T_ex (K) and opacity_integral (s^-1), float32, from the table.

    opacity_integral = (c^3 A / (8 pi nu^3)) n_mol f with f = x_l g_u/g_l - x_u (Castor 1970;
    the convention of :mod:`synth.excitation.product`); empty cells get T_ex = T_bg and 0.
    ``rows`` (a slice of x rows; ``kcol`` holds those rows only) applies it to part of a
    block, the table being built once for the whole snapshot.
    """
    axes = table.axes
    step = np.array([a[1] - a[0] if a.size > 1 else 1.0 for a in axes])
    rows = rows or slice(None)
    shape = kcol.shape
    ab = np.asarray(abundance, dtype=np.float64)
    ab = ab.reshape(1, 1, 1) if ab.ndim == 0 else np.ascontiguousarray(ab[rows])
    t_ex = np.empty(shape, dtype=np.float32)
    op = np.empty(shape, dtype=np.float32)
    nu, _, tau_coef, j_bg = table.line
    _apply(snapshot.n_h2_cm3[rows], ab, snapshot.t_kin_k[rows], kcol, np.array([a[0] for a in axes]), step,
           np.array(table.shape, dtype=np.int64), np.ascontiguousarray(table.values[..., 0]),
           np.ascontiguousarray(table.values[..., 1]), table.scales[0], table.scales[1],
           H_CGS * nu / K_CGS, j_bg, tau_coef, float(t_bg_k), t_ex, op)
    return t_ex, op
