"""The branch-free elementary functions of synth._vmath against numpy (the reference library),
and the LVG table look-up that uses them against the same interpolation in numpy float64."""

import astropy.units as u
import numpy as np
import pytest
from numba import njit

from synth import _vmath as vm
from synth.excitation.tables import PopulationTable, _interp, apply_table
from synth.snapshot.core import Snapshot


@njit
def _map(which, x):
    out = np.empty_like(x)
    for i in range(x.size):
        if which == 0:
            out[i] = vm.exp(x[i])
        elif which == 1:
            out[i] = vm.ln(x[i])
        elif which == 2:
            out[i] = vm.log1p(x[i])
        else:
            out[i] = vm.sinh(x[i])
    return out


def _ulps(got, want):
    return np.abs(got - want) / np.spacing(np.abs(want))


def test_exp_and_sinh_within_a_few_ulp():
    """e^x and sinh x against numpy on |x| <= 700, including the series-to-exponential
    switch of sinh at |x| = 1 and tiny arguments."""
    rng = np.random.default_rng(1)
    x = np.concatenate([rng.uniform(-700, 700, 100000), rng.uniform(-2, 2, 100000),
                        [0.0, 1e-300, -1e-12, 1.0, -1.0, np.nextafter(1.0, 0.0), 700.0]])
    assert _ulps(_map(0, x), np.exp(x)).max() <= 3
    assert _ulps(_map(3, x), np.sinh(x)).max() <= 4


def test_ln_and_log1p_within_a_few_ulp():
    """ln x over the normal float64 range (and around 1, where ln x is small), log1p y for
    y > -1 (tiny y, y near -1, large y)."""
    rng = np.random.default_rng(2)
    x = np.concatenate([10.0 ** rng.uniform(-300, 300, 100000), rng.uniform(0.5, 2.0, 100000),
                        [1.0, np.nextafter(1.0, 2.0), np.sqrt(2.0), 2.2250738585072014e-308]])
    got, want = _map(1, x), np.log(x)
    ok = want != 0.0
    assert _ulps(got[ok], want[ok]).max() <= 4
    assert np.all(got[~ok] == 0.0)
    y = np.concatenate([10.0 ** rng.uniform(-20, 12, 100000), -rng.uniform(0, 1 - 1e-12, 100000),
                        [1e-300, -1e-17, 0.5, -0.5]])
    assert _ulps(_map(2, y), np.log1p(y)).max() <= 4


def _random_table(seed=3):
    """A table with smooth invented values on 9 x 5 x 7 nodes (log10 n, T, K); e and f
    change sign, so J(T_ex) falls above 0, in the clamped [-T_0, 0] and below -T_0."""
    rng = np.random.default_rng(seed)
    axes = (np.linspace(2.0, 6.0, 9), np.linspace(0.8, 1.8, 5), np.linspace(5.0, 11.0, 7))
    g = np.meshgrid(*axes, indexing="ij")
    ve = 3 * np.sin(0.7 * g[0]) + 0.3 * g[1] * g[2] / 10 + rng.normal(0, 0.05, g[0].shape)
    vf = 2 * np.cos(0.5 * g[2]) - 0.2 * g[0] + rng.normal(0, 0.05, g[0].shape)
    return PopulationTable(axes, np.stack([ve, vf], axis=-1), (0.1, 1.5e-2),
                           (110.2e9, 1.0, 4e-11, 0.8), 0.0, 0)


@pytest.mark.parametrize("per_cell", [False, True])
def test_table_lookup_matches_numpy_float64(per_cell):
    """apply_table (numba, synth._vmath) against the trilinear interpolation of the table
    module in numpy float64 (_interp, the interpolant its error control uses) and the
    formulas of the module docstring: opacity = tau_c n_mol f, J(T_ex) = e/f + J(T_bg),
    T_ex = T_0 / ln(1 + T_0 / J) (Mangum & Shirley 2015, PASP 127, 266, eq. 24 inverted).
    Cells outside the table are clamped to its edge; empty cells get T_bg and 0; one
    abundance or one per cell. To float32 rounding (the former look-up took log10 in float32 and was off by up to 1e-3)."""
    table = _random_table()
    rng = np.random.default_rng(4)
    shape = (6, 7, 40)
    n = 10 ** rng.uniform(1.5, 6.5, shape)
    t = 10 ** rng.uniform(0.7, 1.9, shape)
    k = 10 ** rng.uniform(4.5, 11.5, shape)
    n[0, 0, :5] = 0.0            # empty cells
    k[0, 1, :5] = 0.0
    snap = Snapshot(n_h2=n.astype(np.float32) * u.cm**-3, t_kin=t.astype(np.float32) * u.K,
                    velocity=np.zeros((3,) + shape, np.float32) * u.km / u.s,
                    cell_size=0.01 * u.pc, sigma_turb=0.1 * u.km / u.s)
    kcol = k.astype(np.float32)
    ab = rng.uniform(1e-5, 1e-4, shape) if per_cell else 1e-4
    t_ex, op = apply_table(table, None, 0, snap, ab, kcol, 2.73)
    n64, t64, k64 = (a.astype(np.float64) for a in (snap.n_h2_cm3, snap.t_kin_k, kcol))
    pts = np.stack([np.log10(np.where(n64 > 0, n64, 1.0)), np.log10(t64),
                    np.log10(np.where(k64 > 0, k64, 1.0))], axis=-1).reshape(-1, 3)
    lo = np.array([a[0] for a in table.axes])
    hi = np.array([a[-1] for a in table.axes])
    v = _interp(table.axes, table.values, np.clip(pts, lo, hi))
    e = table.scales[0] * np.sinh(v[:, 0])
    f = table.scales[1] * np.sinh(v[:, 1])
    nu, _, tau_c, j_bg = table.line
    t0 = 6.62607015e-27 * nu / 1.380649e-16
    want_op = tau_c * n64.ravel() * np.broadcast_to(ab, shape).ravel() * f
    jj = e / f + j_bg
    clamp = (jj >= -t0) & (jj <= 0)   # J(T_ex) in [-T_0, 0] is unphysical: clamped to 1e-3 K
    want_tex = np.where(clamp, 1e-3, t0 / np.log1p(t0 / np.where(clamp, 1.0, jj)))
    empty = ((n64 <= 0) | (k64 <= 0)).ravel()
    assert np.all(t_ex.ravel()[empty] == np.float32(2.73)) and np.all(op.ravel()[empty] == 0)
    full = ~empty
    assert clamp[full].any() and (jj[full] < -t0).any() and (jj[full] > 0).any()
    np.testing.assert_allclose(op.ravel()[full], want_op[full], rtol=1.2e-7)
    np.testing.assert_allclose(t_ex.ravel()[full], want_tex[full], rtol=1.2e-7)
