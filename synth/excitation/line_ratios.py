"""Which densities a line, or a pair of lines, responds to: one-zone diagnostics.

Three quantities, all from the one-zone escape-probability solver of
:mod:`synth.excitation.lvg` (uniform zone, Gaussian line of FWHM ``fwhm``):

- **Critical densities** (:func:`synth.excitation.lvg.critical_density`): the H2 density at
  which collisions out of a line's upper level match its radiative decay, optically thin,
  in two forms (downward collisions only; every collision out of the level).
- **Effective excitation density** (Shirley 2015, PASP 127, 299): the H2 density at which the
  line's integrated intensity reaches 1 K km/s (``target``) for a given kinetic temperature
  and column per velocity width. Found by a coarse scan and bisection in log n on the solver
  (:func:`effective_excitation_density`); NaN where the target is not reached inside
  ``density_range`` (the line is already brighter at the lowest density, or never that
  bright).
- **Line-ratio grids** (:func:`line_ratio_grid`): integrated-intensity ratios of chosen pairs
  of transitions over density x kinetic temperature x column per velocity width, with each
  line's critical and effective densities, written as a CSV and a figure by
  :mod:`synth.report.line_ratios` (``synth ratios``).

These are one-zone estimates: one density, one temperature and one escape probability stand
for a whole cloud. Real sight lines mix densities, so a ratio measured on the sky maps onto a
range of (n, T) rather than one point, and a line is seen well below its critical density
(Shirley 2015's point).

Integrated intensity here is ``synth.excite``'s: W = 1.0645 T_R FWHM in K km/s, T_R the
Rayleigh-Jeans brightness above the background. A ratio of two lines of the same FWHM is
the ratio of their T_R.
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u

from ..errors import ExcitationError
from ..radiation import T_CMB_K
from .lvg import (_critical_densities, _resolve_molecule, _scalar, check_options, zone_lines)
from .statistical_equilibrium import check_temperature_range, level_system, partner_densities

__all__ = ["effective_excitation_density", "line_ratio_grid", "LineRatioGrid", "parse_pairs",
           "MAX_GRID_ZONES"]

#: Largest grid :func:`line_ratio_grid` accepts (zones = densities x temperatures x columns).
MAX_GRID_ZONES = 200_000

_KMS_CM = 1e5  # cm/s per km/s


def _quantity_1d(value, unit, name, equivalencies=()):
    """A 1-D float array in ``unit`` from a Quantity (scalar or 1-D), all finite and > 0."""
    if not isinstance(value, u.Quantity):
        raise ExcitationError(f"{name} must be a Quantity in {unit}, got {value!r}")
    try:
        v = np.atleast_1d(value.to_value(unit, equivalencies=equivalencies)).astype(np.float64)
    except u.UnitConversionError:
        raise ExcitationError(f"{name} has unit '{value.unit}', not convertible to {unit}"
                              ) from None
    if v.ndim != 1 or v.size == 0 or not np.all(np.isfinite(v)) or np.any(v <= 0):
        raise ExcitationError(f"{name} must be finite values > 0 in a 1-D list, got {value!r}")
    return v


def _transition_indices(mol, transitions):
    if transitions is None:
        return list(range(len(mol.transition_labels)))
    if isinstance(transitions, str):
        transitions = [transitions]
    idx = []
    for label in transitions:
        try:
            idx.append(mol.transition_index(label))
        except Exception as exc:  # MolecularDataError: say which argument
            raise ExcitationError(f"transitions: {' '.join(str(exc).split())}") from None
    return idx


def _setup(species_or_moldata, datafile, geometry, ortho_para_ratio, t_bg, fwhm, t_k):
    mol = _resolve_molecule(species_or_moldata, datafile)
    check_options(geometry, ortho_para_ratio)
    tb = _scalar(t_bg, "K", "t_bg", allow_zero=True, equivalencies=u.temperature())
    dv = _scalar(fwhm, "km/s", "fwhm")
    system = level_system(mol)
    return mol, system, tb, dv


def _check_rate_range(system, t_k, ortho_para_ratio, partners):
    dens = partner_densities(system, [1.0], [float(np.min(t_k))], ortho_para_ratio, partners)
    used = {p for p, d in zip(system.partners, dens) if np.any(d > 0)}
    check_temperature_range(system, float(np.min(t_k)), float(np.max(t_k)), used)


_SCAN_DEX = 0.25  # step of the coarse scan that brackets the first crossing


def _bisect(system, lines, t_k, ncol, target, lo, hi, tol_dex, opts, dv):
    """log10 n at which W of line ``lines[i]`` at (t_k[i], ncol[i]) first reaches ``target``
    going up in density from ``lo`` (log10 cm^-3); NaN where it is not crossed in [lo, hi].

    A scan in steps of at most 0.25 dex brackets the first crossing (W need not rise
    monotonically: a thick line's W can peak above the target and fall back at LTE), then
    bisection in log n narrows the bracket below ``tol_dex``. Every zone is solved at once."""
    m = len(lines)
    rows = np.arange(m)
    gain = float(np.sqrt(np.pi / (4.0 * np.log(2.0)))) * dv   # W = gain * T_R

    def w_at(logn, x0=None):
        res, _, _, t_r = zone_lines(system, 10.0**logn, t_k, ncol, x0=x0, **opts)
        return gain * t_r[rows, lines], res.populations

    steps = max(int(np.ceil((hi - lo) / _SCAN_DEX)), 1)
    grid = np.linspace(lo, hi, steps + 1)
    scan = np.array([w_at(np.full(m, g))[0] for g in grid])   # (steps + 1, m)
    above = scan >= target
    first = np.argmax(above, axis=0)
    ok = above.any(axis=0) & (first > 0)
    a = grid[np.maximum(first - 1, 0)]
    b = grid[first]
    x = None
    while np.any(ok) and np.max((b - a)[ok]) > tol_dex:
        mid = 0.5 * (a + b)
        w, x = w_at(np.where(ok, mid, b), x0=x)
        up = ok & (w >= target)
        b = np.where(up, mid, b)
        a = np.where(ok & ~up, mid, a)
    return np.where(ok, 0.5 * (a + b), np.nan)


def effective_excitation_density(species_or_moldata, t_kin, column_per_width, transitions=None,
                                 *, target=1.0 * u.K * u.km / u.s, geometry="expanding",
                                 ortho_para_ratio=None, t_bg=T_CMB_K * u.K,
                                 fwhm=1.0 * u.km / u.s, partners=None, datafile=None,
                                 density_range=(1.0, 1e10) * u.cm**-3, tol_dex=1e-5):
    """Effective excitation density of transitions (Shirley 2015, PASP 127, 299): the H2
    density at which the one-zone integrated intensity reaches ``target`` (1 K km/s).

    For each transition and kinetic temperature, on :func:`synth.excite`'s solver at the
    given column per velocity width: a scan up from the low end of ``density_range`` in
    steps of 0.25 dex finds the first density where W reaches the target, then bisection in
    log10 n narrows that step until the bracket is narrower than ``tol_dex`` (1e-5 dex: the
    returned density reproduces the target to ~1e-5 relative wherever W changes smoothly
    with n). The first crossing is the one returned: a moderately thick line's W can pass
    the target, peak and fall back below it towards LTE at high density.

    Parameters
    ----------
    species_or_moldata : str or MolecularData
    t_kin : Quantity ``[temperature]``, scalar or 1-D
    column_per_width : Quantity, e.g. ``cm-2 / (km/s)``
        N(species)/dv, dv the line FWHM.
    transitions : str or list of str, optional
        Transition labels (default every radiative transition).
    target : Quantity ``[K km/s]``
        Integrated intensity that defines the density (Shirley 2015: 1 K km/s).
    geometry, ortho_para_ratio, t_bg, fwhm, partners, datafile
        As for :func:`synth.excite`; ``fwhm`` converts N/dv into W.
    density_range : Quantity (2,) ``[number density]``
        Where to look (default 1 to 1e10 cm^-3).
    tol_dex : float
        Width of the final bracket in log10 n.

    Returns
    -------
    Quantity (cm^-3), shape ``t_kin.shape + (n_transitions,)``; NaN where the target is
    not crossed inside ``density_range``.
    """
    scalar_t = isinstance(t_kin, u.Quantity) and t_kin.isscalar
    t_k = _quantity_1d(t_kin, "K", "t_kin", equivalencies=u.temperature())
    mol, system, tb, dv = _setup(species_or_moldata, datafile, geometry, ortho_para_ratio,
                                 t_bg, fwhm, t_k)
    ncol = _scalar(column_per_width, "cm-3 s", "column_per_width")
    w_target = _scalar(target, "K km/s", "target")
    nr = _quantity_1d(density_range, "cm-3", "density_range")
    if nr.size != 2 or not nr[0] < nr[1]:
        raise ExcitationError(f"density_range must be (low, high) with low < high, got "
                              f"{density_range!r}")
    if not (np.isfinite(tol_dex) and 0 < tol_dex < 1):
        raise ExcitationError(f"tol_dex must be in (0, 1), got {tol_dex!r}")
    idx = _transition_indices(mol, transitions)
    k_lines = _system_lines(system, idx)
    _check_rate_range(system, t_k, ortho_para_ratio, partners)
    tt, kk = np.meshgrid(t_k, k_lines, indexing="ij")
    opts = {"geometry": geometry, "t_bg_k": tb, "ortho_para_ratio": ortho_para_ratio,
            "partners": partners}
    logn = _bisect(system, kk.ravel(), tt.ravel(), np.full(tt.size, ncol), w_target,
                   np.log10(nr[0]), np.log10(nr[1]), tol_dex, opts, dv)
    out = (10.0 ** logn).reshape(tt.shape)
    return (out[0] if scalar_t else out) * u.cm**-3


def _system_lines(system, mol_indices):
    """Positions in ``system``'s line list of the molecule's radiative transitions."""
    pos = {int(k): i for i, k in enumerate(system.lines)}
    return np.array([pos[int(k)] for k in mol_indices], dtype=np.int64)


def parse_pairs(pairs, mol=None):
    """Pairs of transition labels from ``"2-1/1-0"`` strings or (numerator, denominator)
    tuples; with ``mol``, each label is checked against its transitions. One-line
    ExcitationError naming the bad pair."""
    if isinstance(pairs, (str, tuple)):
        pairs = [pairs]
    out = []
    for p in pairs:
        if isinstance(p, str):
            parts = p.split("/")
        elif isinstance(p, (tuple, list)):
            parts = list(p)
        else:
            parts = []
        if len(parts) != 2 or not all(isinstance(s, str) and s.strip() for s in parts):
            raise ExcitationError(f"line pair {p!r} is not NUMERATOR/DENOMINATOR, e.g. 2-1/1-0")
        num, den = (s.strip() for s in parts)
        if mol is not None:
            try:
                num, den = (mol.transition_labels[mol.transition_index(s)] for s in (num, den))
            except Exception as exc:  # MolecularDataError: name the pair
                raise ExcitationError(f"line pair {p!r}: {' '.join(str(exc).split())}"
                                      ) from None
        if num == den:
            raise ExcitationError(f"line pair {p!r} divides a line by itself")
        out.append((num, den))
    if not out:
        raise ExcitationError("give at least one line pair, e.g. 2-1/1-0")
    if len(set(out)) != len(out):
        raise ExcitationError(f"line pairs repeat: {', '.join('/'.join(q) for q in out)}")
    return out


@dataclass(frozen=True, eq=False)
class LineRatioGrid:
    """Integrated-intensity ratios of line pairs on a (column, temperature, density) grid.

    Attributes
    ----------
    species : str
    pairs : tuple of (str, str)
        (numerator, denominator) transition labels.
    transitions : tuple of str
        Every transition in a pair, in first-use order.
    density, temperature, column_per_width : Quantity (1-D)
        The grid axes: n(H2) (cm^-3), T_kin (K), N/dv (cm^-2 per km/s).
    integrated_intensity : Quantity (K km/s), shape (n_col, n_temp, n_dens, n_transitions)
    ratio : ndarray, shape (n_col, n_temp, n_dens, n_pairs)
        W(numerator) / W(denominator); NaN where the denominator is 0.
    critical_density, critical_density_all : Quantity (cm^-3), shape (n_temp, n_transitions)
        The "downward" and "all-levels" critical densities at each temperature.
    effective_density : Quantity (cm^-3), shape (n_col, n_temp, n_transitions)
        Where W reaches ``target`` (:func:`effective_excitation_density`), NaN where it does
        not inside ``effective_range``.
    target, fwhm, t_bg : Quantity
    geometry : str
    ortho_para_ratio : float or None
    """

    species: str
    pairs: tuple
    transitions: tuple
    density: u.Quantity
    temperature: u.Quantity
    column_per_width: u.Quantity
    integrated_intensity: u.Quantity
    ratio: np.ndarray
    critical_density: u.Quantity
    critical_density_all: u.Quantity
    effective_density: u.Quantity
    target: u.Quantity
    fwhm: u.Quantity
    t_bg: u.Quantity
    geometry: str
    ortho_para_ratio: object

    def ratio_of(self, pair):
        """The ratio array (n_col, n_temp, n_dens) of ``pair`` ("2-1/1-0" or a tuple)."""
        key = parse_pairs([pair])[0]
        if key not in self.pairs:
            raise ExcitationError(f"line pair {'/'.join(key)} is not in this grid; it has "
                                  f"{', '.join('/'.join(p) for p in self.pairs)}")
        return self.ratio[..., self.pairs.index(key)]


def line_ratio_grid(species_or_moldata, pairs, density, temperature, column_per_width, *,
                    geometry="expanding", ortho_para_ratio=None, t_bg=T_CMB_K * u.K,
                    fwhm=1.0 * u.km / u.s, partners=None, datafile=None,
                    target=1.0 * u.K * u.km / u.s,
                    effective_range=(1.0, 1e10) * u.cm**-3, progress=None):
    """Integrated-intensity ratios of line pairs over density x temperature x N/dv.

    Every grid point is one uniform zone solved as :func:`synth.excite` solves it (all at
    once); each transition's critical densities at every temperature and effective
    excitation density at every (N/dv, temperature) come along (module docstring).

    Parameters
    ----------
    species_or_moldata : str or MolecularData
    pairs : list of "2-1/1-0" strings or (numerator, denominator) tuples
    density : Quantity ``[number density]``, 1-D
        n(H2) values; the effective densities are searched between their ends.
    temperature : Quantity ``[temperature]``, 1-D
    column_per_width : Quantity, e.g. ``cm-2 / (km/s)``, scalar or 1-D
    geometry, ortho_para_ratio, t_bg, fwhm, partners, datafile
        As for :func:`synth.excite`.
    target : Quantity ``[K km/s]``
        Integrated intensity defining the effective excitation density.
    effective_range : Quantity (2,) ``[number density]``
        Where the effective excitation densities are looked for (default 1 to 1e10 cm^-3,
        wider than most density axes, so that they are found where the axis ends).
    progress : tqdm-like (``update``) or callable(fraction), optional

    Returns
    -------
    LineRatioGrid
    """
    n = _quantity_1d(density, "cm-3", "density")
    t_k = _quantity_1d(temperature, "K", "temperature", equivalencies=u.temperature())
    ncol = _quantity_1d(column_per_width, "cm-3 s", "column_per_width")
    zones = n.size * t_k.size * ncol.size
    if zones > MAX_GRID_ZONES:
        raise ExcitationError(f"the grid has {n.size} x {t_k.size} x {ncol.size} = {zones:,} "
                              f"zones; at most {MAX_GRID_ZONES:,}")
    w_target = _scalar(target, "K km/s", "target")
    mol, system, tb, dv = _setup(species_or_moldata, datafile, geometry, ortho_para_ratio,
                                 t_bg, fwhm, t_k)
    pair_list = parse_pairs(pairs, mol)
    labels = tuple(dict.fromkeys(s for p in pair_list for s in p))
    k_lines = _system_lines(system, [mol.transition_index(s) for s in labels])
    _check_rate_range(system, t_k, ortho_para_ratio, partners)
    from .lvg import _progress
    report = _progress(progress)
    opts = {"geometry": geometry, "t_bg_k": tb, "ortho_para_ratio": ortho_para_ratio,
            "partners": partners}
    gain = float(np.sqrt(np.pi / (4.0 * np.log(2.0)))) * dv
    w = np.empty((ncol.size, t_k.size, n.size, len(labels)))
    steps = ncol.size + 1
    for i, nc in enumerate(ncol):   # one batched solve per column (progress between them)
        tt, nn = np.meshgrid(t_k, n, indexing="ij")
        _, _, _, t_r = zone_lines(system, nn.ravel(), tt.ravel(), np.full(nn.size, nc), **opts)
        w[i] = gain * t_r[:, k_lines].reshape(t_k.size, n.size, len(labels))
        if report is not None:
            report((i + 1) / steps)
    num = np.array([labels.index(p[0]) for p in pair_list])
    den = np.array([labels.index(p[1]) for p in pair_list])
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(w[..., den] != 0, w[..., num] / w[..., den], np.nan)
    crit = np.array([_critical_densities(system, t, ortho_para_ratio) for t in t_k])
    crit = crit[:, :, k_lines]  # (n_temp, 2 forms, n_lines)
    cc, tt, kk = np.meshgrid(ncol, t_k, k_lines, indexing="ij")
    er = _quantity_1d(effective_range, "cm-3", "effective_range")
    if er.size != 2 or not er[0] < er[1]:
        raise ExcitationError(f"effective_range must be (low, high) with low < high, got "
                              f"{effective_range!r}")
    logn = _bisect(system, kk.ravel(), tt.ravel(), cc.ravel(), w_target, np.log10(er[0]),
                   np.log10(er[1]), 1e-4, opts, dv)
    if report is not None:
        report(1.0)
    return LineRatioGrid(
        species=mol.name, pairs=tuple(pair_list), transitions=labels, density=n * u.cm**-3,
        temperature=t_k * u.K, column_per_width=ncol * _KMS_CM * u.cm**-2 / (u.km / u.s),
        integrated_intensity=w * u.K * u.km / u.s, ratio=ratio,
        critical_density=crit[:, 0] * u.cm**-3, critical_density_all=crit[:, 1] * u.cm**-3,
        effective_density=(10.0 ** logn).reshape(cc.shape) * u.cm**-3,
        target=w_target * u.K * u.km / u.s, fwhm=dv * u.km / u.s, t_bg=tb * u.K,
        geometry=geometry, ortho_para_ratio=ortho_para_ratio)
