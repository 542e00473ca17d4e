"""Statistical equilibrium of level populations with escape probabilities, batched.

For fractional populations x_i (sum 1) the rate equations in steady state are

    sum_{j != i} x_j R_ji - x_i sum_{j != i} R_ij = 0,

with, for a radiative line u -> l, R_ul = A_ul + B_ul J and R_lu = B_lu J, plus collisional
rates C_ij = sum_p n_p k_ij^p(T) (Rybicki & Lightman 1979, ch. 10; Draine 2011, "Physics of
the Interstellar and Intergalactic Medium", ch. 17 and 19). Upward collision coefficients
follow from the tabulated downward ones by detailed balance,

    k_lu = k_ul (g_u / g_l) exp(-(E_u - E_l) / k T)          (Draine 2011, eq. 17.5).

With the escape-probability mean intensity J = (1 - beta) S + beta B(T_bg) the net radiative
rate of a line becomes beta A_ul [x_u (1 + n_bg) - x_l (g_u/g_l) n_bg], n_bg = 1/(e^{h nu/kT_bg}
- 1) the background photon occupation number (exact algebra on the J above; e.g. Draine 2011,
ch. 19). Each line's optical depth is

    tau = (c^3 A_ul / (8 pi nu^3)) K (x_l g_u / g_l - x_u)

where K = n_mol / |dv/ds| (Sobolev, Castor 1970, MNRAS 149, 111) or N / (1.0645 FWHM) for a
single zone (see :mod:`synth.excitation.lvg`). beta depends on the populations through tau, so
the equations F(x) = M(beta(tau(x))) x = 0, sum x = 1, are nonlinear; they are solved by
Newton's method for all zones at once (one batched ``numpy.linalg.solve`` of the Jacobian per
iteration), with the Jacobian including d beta / d tau, and each population allowed to fall by
at most a factor 10 per step (positivity). Iteration stops when no population with
x > 1e-10 changes by more than ``tol`` (relative; smaller ones at 1e-10 * tol absolute). Plain
fixed-point iteration on beta (lambda-like) oscillates at low density and high tau; Newton's
method converges in a few to ~20 steps from LTE starting populations.

Rates are interpolated linearly in log T between tabulated temperatures; outside the table the
end values are held and :class:`~synth.errors.RateExtrapolationWarning` is emitted once per call
(:func:`check_temperature_range`).
"""

from dataclasses import dataclass
import warnings

import numba
import numpy as np

from ..errors import ConvergenceError, ExcitationError, RateExtrapolationWarning
from ..radiation import C_CGS, H_CGS, K_CGS
from .escape import escape_probability, escape_probability_derivative

__all__ = ["LevelSystem", "level_system", "thermal_ortho_para_ratio", "partner_densities",
           "collision_matrix", "check_temperature_range", "solve_levels", "SolveResult",
           "excitation_temperature", "H2_SPECIES"]

H2_SPECIES = ("H2", "pH2", "oH2")
_X_FLOOR = 1e-10
_DROP = 0.1
_CHUNK = 2048


def thermal_ortho_para_ratio(t_k):
    """Thermal ortho-to-para ratio of H2, OPR(T) = min(9 exp(-170.5 K / T), 3).

    Common practice (e.g. Takahashi 2001, ApJ 561, 254; form and constant from memory): the
    high-temperature limit 3 is the ratio of nuclear-spin weights.
    """
    t = np.asarray(t_k, dtype=np.float64)
    return np.minimum(9.0 * np.exp(-170.5 / t), 3.0)


@dataclass(frozen=True)
class _PartnerRates:
    partner: str
    log_t: np.ndarray       # (nT,) ln of the tabulated temperatures
    upper: np.ndarray       # (ntr,) indices into the kept levels
    lower: np.ndarray
    rates_cm3s: np.ndarray  # (ntr, nT) downward

    @property
    def unique(self):
        pairs = self.upper * (1 << 20) + self.lower
        return np.unique(pairs).size == pairs.size


@dataclass(frozen=True, eq=False)
class LevelSystem:
    """Arrays of one molecule reduced to the levels that matter, ready for batched solves.

    ``levels`` and ``lines`` index the kept levels and radiative lines of the molecule;
    ``tau_coef`` is c^3 A_ul / (8 pi nu^3) in cm^3 s^-1 (times K in cm^-3 s gives tau).
    """

    name: str
    levels: np.ndarray
    lines: np.ndarray
    energy_k: np.ndarray
    g: np.ndarray
    upper: np.ndarray
    lower: np.ndarray
    a_ul_s: np.ndarray
    freq_hz: np.ndarray
    tau_coef: np.ndarray
    collisions: tuple
    mass_amu: float

    @property
    def n_levels(self):
        return int(self.energy_k.size)

    @property
    def partners(self):
        return tuple(c.partner for c in self.collisions)


def level_system(mol, t_hot_k=None, min_fraction=1e-20, keep_below_k=0.0):
    """Build a :class:`LevelSystem` from MolecularData, dropping unreachable levels.

    A level is kept if (g_i/g_0) exp(-E_i / k T_hot) >= ``min_fraction`` (its Boltzmann
    population relative to the ground at the hottest temperature involved); with
    ``t_hot_k=None`` every level is kept; levels with E/k <= ``keep_below_k`` always are.
    Dropped levels would hold less than ``min_fraction``
    of the molecules; their feedback on the kept levels is of that order.
    """
    energy = np.asarray(mol.energy_k, dtype=np.float64)
    g = np.asarray(mol.g, dtype=np.float64)
    if t_hot_k is None:
        keep = np.ones(energy.size, dtype=bool)
    else:
        keep = (g / g[0]) * np.exp(-energy / float(t_hot_k)) >= min_fraction
        keep |= energy <= keep_below_k
        keep[np.argsort(energy)[:2]] = True
    levels = np.flatnonzero(keep)
    new_index = np.full(energy.size, -1)
    new_index[levels] = np.arange(levels.size)
    up, lo = np.asarray(mol.upper), np.asarray(mol.lower)
    lines = np.flatnonzero(keep[up] & keep[lo])
    a_ul, nu = np.asarray(mol.a_ul_s)[lines], np.asarray(mol.freq_hz)[lines]
    colls = []
    for name, cr in mol.collisions.items():
        sel = keep[cr.upper] & keep[cr.lower]
        colls.append(_PartnerRates(name, np.log(np.asarray(cr.temperatures_k, dtype=float)),
                                   new_index[cr.upper[sel]], new_index[cr.lower[sel]],
                                   np.asarray(cr.rates_cm3s, dtype=float)[sel]))
    return LevelSystem(mol.name, levels, lines, energy[levels], g[levels], new_index[up[lines]],
                       new_index[lo[lines]], a_ul, nu, C_CGS**3 * a_ul / (8.0 * np.pi * nu**3),
                       tuple(colls), float(mol.mass_amu))


def check_temperature_range(system, t_min_k, t_max_k, used=None):
    """Warn once (RateExtrapolationWarning) if [t_min, t_max] leaves a partner's rate table."""
    out = []
    for c in system.collisions:
        if used is not None and c.partner not in used:
            continue
        lo, hi = np.exp(c.log_t[0]), np.exp(c.log_t[-1])
        if t_min_k < lo * (1 - 1e-9) or t_max_k > hi * (1 + 1e-9):
            out.append(f"{c.partner} ({lo:.4g}-{hi:.4g} K)")
    if out:
        warnings.warn(
            f"{system.name}: kinetic temperatures {t_min_k:.4g}-{t_max_k:.4g} K leave the rate "
            f"table of {', '.join(out)}; rates are held at the nearest tabulated value outside",
            RateExtrapolationWarning, stacklevel=3)


def _h2_split(names, n_h2, t_k, opr):
    """Densities of the H2 partners present in ``names`` (see :func:`partner_densities`)."""
    has_p, has_o = "pH2" in names, "oH2" in names
    if has_p and has_o:
        ratio = thermal_ortho_para_ratio(t_k) if opr is None else np.full_like(t_k, opr)
        return {"pH2": n_h2 / (1.0 + ratio), "oH2": n_h2 * ratio / (1.0 + ratio)}
    if "H2" in names:
        return {"H2": n_h2}
    if has_p or has_o:
        have, need = ("pH2", "oH2") if has_p else ("oH2", "pH2")
        wanted = opr is not None and (opr > 0 if need == "oH2" else np.isfinite(1.0 / opr))
        if wanted:
            raise ExcitationError(
                f"ortho_para_ratio={opr!r} needs {need} collision rates, but the data file has "
                f"only {', '.join(names)}; omit ortho_para_ratio to use the {have} rates for all H2")
        return {have: n_h2}
    raise ExcitationError(
        "the molecular data have no H2 collision rates (partners: "
        f"{', '.join(names) or 'none'}); supply a Leiden-format file with H2, pH2 or oH2 rates")


def partner_densities(system, n_h2_cm3, t_kin_k, ortho_para_ratio=None, partners=None):
    """Density (cm^-3) of every collision partner of ``system``, one array per partner.

    H2: with both pH2 and oH2 rates, n_o = n OPR/(1+OPR), n_p = n/(1+OPR), OPR thermal
    (:func:`thermal_ortho_para_ratio`) or fixed; with only "H2" rates they take all of n_H2;
    with only one spin species and no ratio given, its rates stand for all H2 (common practice).
    ``partners`` maps other partner names to an abundance relative to H2 (float) or a fixed
    density (Quantity, number density). A partner absent from the file raises
    :class:`~synth.errors.ExcitationError` naming those available.

    Returns
    -------
    tuple of ndarray
        Aligned with ``system.collisions``; zeros for partners not used.
    """
    names = system.partners
    n_h2 = np.asarray(n_h2_cm3, dtype=np.float64)
    t_k = np.asarray(t_kin_k, dtype=np.float64)
    dens = _h2_split(names, n_h2, t_k, ortho_para_ratio)
    for key, value in (partners or {}).items():
        if key in H2_SPECIES or key not in names:
            extra = [n for n in names if n not in H2_SPECIES]
            raise ExcitationError(
                f"partners[{key!r}]: no such extra collision partner in the {system.name} data; "
                f"available: {', '.join(extra) or 'none'} (H2 comes from n_h2 and ortho_para_ratio)")
        if hasattr(value, "unit"):
            try:
                dens[key] = np.full_like(n_h2, value.to_value("cm-3"))
            except Exception:
                raise ExcitationError(f"partners[{key!r}] = {value!r}: give an abundance "
                                      "relative to H2 or a number density") from None
        else:
            dens[key] = float(value) * n_h2
        if not np.all(np.isfinite(dens[key])) or np.any(dens[key] < 0):
            raise ExcitationError(f"partners[{key!r}] = {value!r} must be finite and >= 0")
    return tuple(dens.get(name, np.zeros_like(n_h2)) for name in names)


def _rates_at(c, t_k):
    """Downward rate coefficients (nb, ntr) at t_k, linear in ln T, ends held."""
    lt = np.clip(np.log(t_k), c.log_t[0], c.log_t[-1])
    if c.log_t.size == 1:
        return np.broadcast_to(c.rates_cm3s[:, 0], (t_k.size, c.upper.size))
    i = np.clip(np.searchsorted(c.log_t, lt, side="right") - 1, 0, c.log_t.size - 2)
    w = ((lt - c.log_t[i]) / (c.log_t[i + 1] - c.log_t[i]))[:, None]
    return c.rates_cm3s[:, i].T * (1.0 - w) + c.rates_cm3s[:, i + 1].T * w


def collision_matrix(system, t_kin_k, densities):
    """Collision rates per molecule, C[b, i, j] = rate i -> j in s^-1 (zero diagonal).

    Downward: n_p k_ul(T); upward by detailed balance (module docstring).
    """
    t_k = np.atleast_1d(np.asarray(t_kin_k, dtype=np.float64))
    nlev = system.n_levels
    out = np.zeros((t_k.size, nlev, nlev))
    for c, n_p in zip(system.collisions, densities):
        if not np.any(n_p) or c.upper.size == 0:
            continue
        down = np.broadcast_to(n_p, t_k.shape)[:, None] * _rates_at(c, t_k)
        de = system.energy_k[c.upper] - system.energy_k[c.lower]
        up = down * (system.g[c.upper] / system.g[c.lower]) * np.exp(-de / t_k[:, None])
        if c.unique:
            out[:, c.upper, c.lower] += down
            out[:, c.lower, c.upper] += up
        else:
            np.add.at(out, (slice(None), c.upper, c.lower), down)
            np.add.at(out, (slice(None), c.lower, c.upper), up)
    return out


def excitation_temperature(system, x):
    """T_ex of every kept line from populations x (..., nlev): h nu / k / ln(x_l g_u / x_u g_l).

    NaN where either population is zero (level not reached).
    """
    xu, xl = x[..., system.upper], x[..., system.lower]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = (xl * system.g[system.upper]) / (xu * system.g[system.lower])
        t_ex = (H_CGS * system.freq_hz / K_CGS) / np.log(ratio)
    return np.where((xu > 0) & (xl > 0), t_ex, np.nan)


def line_tau(system, x, kcol):
    """Line-centre optical depth of every kept line, tau_coef K (x_l g_u/g_l - x_u)."""
    gr = system.g[system.upper] / system.g[system.lower]
    return system.tau_coef * kcol[:, None] * (x[:, system.lower] * gr - x[:, system.upper])


def lte_populations(system, t_k):
    """Boltzmann fractions over the kept levels, (nb, nlev)."""
    w = system.g * np.exp(-system.energy_k / np.asarray(t_k, dtype=float)[:, None])
    return w / w.sum(axis=1, keepdims=True)


@dataclass(frozen=True, eq=False)
class SolveResult:
    """Output of :func:`solve_levels`: populations (nb, nlev), tau (nb, nlines), iterations (nb,)."""

    populations: np.ndarray
    tau: np.ndarray
    iterations: np.ndarray


def _add(m, i, j, v):
    """m[:, i, j] += v for index pairs (i, j) of the lines. np.add.at is needed only where a
    pair repeats; where all pairs differ, fancy-index += does the same single addition per
    element, and much faster."""
    if np.unique(i * m.shape[-1] + j).size == i.size:
        m[:, i, j] += v
    else:
        np.add.at(m, (slice(None), i, j), v)


def _rate_matrix(c_gain, beta, system, n_bg):
    """Rate matrix M (nb, nlev, nlev) with M x = dx/dt for fixed beta; modifies c_gain."""
    m = c_gain  # gain matrix m[b, i, j] = rate j -> i (a fresh copy)
    up, lo = system.upper, system.lower
    _add(m, lo, up, beta * (system.a_ul_s * (1.0 + n_bg)))
    _add(m, up, lo, beta * (system.a_ul_s * n_bg * system.g[up] / system.g[lo]))
    idx = np.arange(system.n_levels)
    m[:, idx, idx] = 0.0
    m[:, idx, idx] = -m.sum(axis=1)
    return m


def _newton_step(system, c_gain, kcol, x, geometry, n_bg):
    """Newton update of populations x (nb, nlev) for F(x) = M(beta(tau(x))) x = 0, sum x = 1.

    The Jacobian adds to M the derivative of each line's net rate
    beta A [x_u (1 + n_bg) - x_l G n_bg] through d beta/d tau and d tau/d x (G = g_u/g_l).
    """
    up, lo = system.upper, system.lower
    gr = system.g[up] / system.g[lo]
    tau = line_tau(system, x, kcol)
    m = _rate_matrix(c_gain, escape_probability(tau, geometry), system, n_bg)
    f = np.einsum("bij,bj->bi", m, x)
    drive = system.a_ul_s * (x[:, up] * (1.0 + n_bg) - x[:, lo] * gr * n_bg)
    s = drive * escape_probability_derivative(tau, geometry) * system.tau_coef * kcol[:, None]
    _add(m, up, up, s)
    _add(m, up, lo, -s * gr)
    _add(m, lo, up, -s)
    _add(m, lo, lo, s * gr)
    m[:, 0, :] = 1.0
    f[:, 0] = x.sum(axis=1) - 1.0
    try:
        dx = np.linalg.solve(m, -f[..., None])[..., 0]
    except np.linalg.LinAlgError:
        raise ExcitationError(f"{system.name}: singular rate equations (a level with neither "
                              "radiative nor collisional connections?)") from None
    xn = np.maximum(x + dx, _DROP * x)  # populations fall at most by 1/_DROP per step
    return xn / xn.sum(axis=1, keepdims=True)


def _newton(system, c_gain, kcol, x, geometry, n_bg, tol, max_iter, damping=1.0):
    """(Damped) Newton iterations on all zones of a chunk; iterations per zone, -1 if not
    converged. ``damping`` < 1 takes that fraction of each step (breaks limit cycles)."""
    iters = np.full(x.shape[0], -1, dtype=np.int64)
    active = np.arange(x.shape[0])
    for it in range(1, max_iter + 1):
        xa = x[active]
        xn = _newton_step(system, c_gain[active], kcol[active], xa, geometry, n_bg)
        if damping != 1.0:
            xn = xa + damping * (xn - xa)
        change = np.abs(xn - xa) / np.maximum(xn, _X_FLOOR) / damping
        x[active] = xn
        done = np.all(change <= tol, axis=1)
        iters[active[done]] = it
        active = active[~done]
        if active.size == 0:
            break
    return x, iters


def _solve_chunk(system, c_gain, kcol, starts, geometry, n_bg, tol, max_iter):
    """Newton from each starting point in turn for the zones not yet converged.

    ``starts`` are (callable zone-indices -> populations, damping) pairs (the given start, LTE
    at T_kin, the optically thin solution, then damped restarts); a zone that fails from one
    gets the next.
    """
    nb = kcol.size
    x = np.empty((nb, system.n_levels))
    iters = np.full(nb, -1, dtype=np.int64)
    todo = np.arange(nb)
    for start, damping in starts:
        xs, it = _newton(system, c_gain[todo], kcol[todo], start(todo), geometry, n_bg, tol,
                         max_iter, damping)
        x[todo], iters[todo] = xs, it
        todo = todo[it < 0]
        if todo.size == 0:
            break
    return _polish(system, c_gain, kcol, x, geometry, n_bg), iters


def _polish(system, c_gain, kcol, x, geometry, n_bg):
    """One linear solve at the converged beta: exact to rounding, relative, for every level.

    Newton's convergence test ignores populations below 1e-10; the LU solve of the fixed-beta
    equations resolves them to machine precision relative (checked against a 60-digit solve).
    """
    if x is None:  # optically thin: beta = 1
        beta = np.ones((kcol.size, system.upper.size))
    else:
        beta = escape_probability(line_tau(system, x, kcol), geometry)
    a = _rate_matrix(c_gain.copy(), beta, system, n_bg)
    a[:, 0, :] = 1.0
    rhs = np.zeros(a.shape[:2] + (1,))
    rhs[:, 0, 0] = 1.0
    xs = np.maximum(np.linalg.solve(a, rhs)[..., 0], 0.0)
    return xs / xs.sum(axis=1, keepdims=True)


def solve_levels(system, n_h2_cm3, t_kin_k, kcol_cm3s, *, geometry="expanding", t_bg_k=2.725,
                 ortho_para_ratio=None, partners=None, tol=1e-6, max_iter=100, x0=None):
    """Solve statistical equilibrium for many zones at once (see module docstring).

    Parameters
    ----------
    system : LevelSystem
    n_h2_cm3, t_kin_k, kcol_cm3s : array_like (nb,)
        H2 density (cm^-3), kinetic temperature (K) and K = N_mol/dv in cm^-3 s, the column
        per unit velocity that multiplies ``system.tau_coef`` in tau.
    geometry : str
        Escape-probability form, see :mod:`synth.excitation.escape`.
    t_bg_k : float
        Background radiation temperature (blackbody), K.
    tol, max_iter : float, int
        Relative convergence criterion and iteration cap.
    x0 : ndarray (nb, nlev), optional
        Starting populations. Zones that do not converge from it (or when it is not given)
        are restarted from LTE at T_kin, then from the optically thin solution, then from
        both again with Newton steps damped by 0.5 and 0.25.

    Returns
    -------
    SolveResult

    Raises
    ------
    ConvergenceError
        If any zone has not converged after ``max_iter`` iterations (message gives counts).
    """
    n_h2 = np.atleast_1d(np.asarray(n_h2_cm3, dtype=np.float64))
    t_k = np.broadcast_to(np.asarray(t_kin_k, dtype=np.float64), n_h2.shape).copy()
    kcol = np.broadcast_to(np.asarray(kcol_cm3s, dtype=np.float64), n_h2.shape).copy()
    dens = partner_densities(system, n_h2, t_k, ortho_para_ratio, partners)
    with np.errstate(over="ignore", divide="ignore"):
        n_bg = 1.0 / np.expm1(H_CGS * system.freq_hz / (K_CGS * t_bg_k)) if t_bg_k > 0 else 0.0
    x_all = np.empty((n_h2.size, system.n_levels))
    iters = np.zeros(n_h2.size, dtype=np.int64)

    def chunk(sl):
        gain = np.swapaxes(collision_matrix(system, t_k[sl], [d[sl] for d in dens]), 1, 2)
        lte = lambda i, t=t_k[sl]: lte_populations(system, t[i])  # noqa: E731
        thin = lambda i, g=gain: _polish(system, g[i], np.zeros(i.size), None, geometry, n_bg)  # noqa: E731
        starts = [(lte, 1.0), (thin, 1.0), (lte, 0.5), (thin, 0.25)]
        if x0 is not None:
            starts.insert(0, (lambda i, x=np.asarray(x0, dtype=np.float64)[sl]: x[i].copy(), 1.0))
        x_all[sl], iters[sl] = _solve_chunk(system, gain, kcol[sl], starts, geometry, n_bg,
                                            tol, max_iter)

    slices = [slice(s, s + _CHUNK) for s in range(0, n_h2.size, _CHUNK)]
    threads = min(len(slices), numba.get_num_threads())
    if threads > 1:   # the chunks are independent; numpy's batched solves release the GIL
        from concurrent.futures import ThreadPoolExecutor
        with ThreadPoolExecutor(threads) as pool:
            for done in [pool.submit(chunk, sl) for sl in slices]:
                done.result()
    else:
        for sl in slices:
            chunk(sl)
    failed = iters < 0
    if failed.any():
        raise ConvergenceError(
            f"{system.name}: {int(failed.sum())} of {failed.size} zones did not converge to "
            f"{tol:g} (relative) in {max_iter} iterations; raise max_iter or check the inputs")
    return SolveResult(x_all, line_tau(system, x_all, kcol), iters)
