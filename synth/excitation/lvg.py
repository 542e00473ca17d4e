"""Non-LTE excitation of one zone with escape probabilities, and of every cell of a snapshot.

:func:`excite` solves statistical equilibrium (:mod:`synth.excitation.statistical_equilibrium`)
for one zone of given n(H2), T_kin and N/dv and returns excitation temperature, optical depth,
radiation temperature and integrated intensity of every radiative transition.

Conventions of the single-zone query
------------------------------------
- Line-centre optical depth of a Gaussian line of FWHM dv (the column per width N/dv given):

      tau = (c^3 A_ul / (8 pi nu^3)) (N/dv) (x_l g_u/g_l - x_u) / 1.0645

  (1.0645 = sqrt(pi / (4 ln 2)), the FWHM of a unit-area Gaussian times its peak; Mangum &
  Shirley 2015, PASP 127, 266, eq. 29 at line centre). The same tau enters beta for every
  geometry; for ``"uniform-sphere"`` it is read as the optical depth across the diameter.
- Radiation temperature above the background, T_R = [J(T_ex) - J(T_bg)] (1 - e^-tau)
  (the same paper, their uniform-slab solution; J from :mod:`synth.radiation`).
- ``integrated_intensity``: of a Gaussian line, int T_R dv = 1.0645 T_R dv in K km/s, with
  dv = ``fwhm`` (default 1 km/s; N = column_per_width * fwhm).
- A line whose upper or lower population underflows to zero (levels far above kT and without
  collision rates) has T_ex = NaN, tau = 0 and T_R = 0.

:func:`lvg_excitation` does the same per cell of a snapshot through an interpolated table
(:mod:`synth.excitation.tables`) with Sobolev optical depths (:mod:`synth.excitation.gradient`).
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u
from numba import njit, prange

from ..errors import ExcitationError
from ..radiation import T_CMB_K, radiation_temperature
from .escape import GEOMETRIES, check_geometry
from .statistical_equilibrium import (check_temperature_range, collision_matrix,
                                      excitation_temperature, level_system, partner_densities,
                                      solve_levels, H2_SPECIES)

__all__ = ["GEOMETRIES", "CRITICAL_DENSITY_FORMS", "OneZoneExcitation", "excite",
           "format_excitation_table", "critical_density", "lvg_excitation", "lvg_blocks",
           "LvgBlocks", "GAUSS_AREA"]

#: int of a Gaussian of unit peak over velocity / FWHM = sqrt(pi / (4 ln 2)).
GAUSS_AREA = float(np.sqrt(np.pi / (4.0 * np.log(2.0))))


@dataclass(frozen=True, eq=False)
class OneZoneExcitation:
    """Excitation of one uniform zone, per radiative transition in the molecule's order
    (what :func:`excite` and ``synth excite`` return; the per-cell product of a snapshot is
    :class:`synth.Excitation`).

    Attributes
    ----------
    species : str
    transitions : tuple of str
        Labels "upper-lower".
    upper_levels, lower_levels : tuple of str
        The level labels of each transition's upper and lower level.
    frequency : Quantity (GHz)
    e_up : Quantity (K)
        Upper level energies E_u/k.
    t_ex, tau, t_r : Quantity (K), ndarray, Quantity (K)
        Excitation temperature, line-centre optical depth and radiation temperature above the
        background (module docstring).
    integrated_intensity : Quantity (K km/s)
        1.0645 T_R fwhm (module docstring).
    critical_density, critical_density_all : Quantity (cm^-3)
        The "downward" and "all-levels" forms of :func:`critical_density` at ``t_kin``.
    populations : ndarray (n_levels,)
        Fractional level populations (sum 1).
    n_h2, t_kin, column_per_width, fwhm, t_bg : Quantity
        The inputs.
    geometry : str
    partners : dict
        Collision partner -> density (Quantity) used.
    converged : bool
    iterations : int
        Newton iterations to reach the 1e-6 relative criterion.
    """

    species: str
    transitions: tuple
    upper_levels: tuple
    lower_levels: tuple
    frequency: u.Quantity
    e_up: u.Quantity
    t_ex: u.Quantity
    tau: np.ndarray
    t_r: u.Quantity
    integrated_intensity: u.Quantity
    critical_density: u.Quantity
    critical_density_all: u.Quantity
    populations: np.ndarray
    n_h2: u.Quantity
    t_kin: u.Quantity
    column_per_width: u.Quantity
    fwhm: u.Quantity
    t_bg: u.Quantity
    geometry: str
    partners: dict
    converged: bool
    iterations: int


def _scalar(value, unit, name, allow_zero=False, equivalencies=()):
    """``value`` (a scalar Quantity) in ``unit`` as float, or ExcitationError naming it."""
    if not isinstance(value, u.Quantity):
        raise ExcitationError(f"{name} must be a Quantity in {unit} (e.g. {name}=10 * u.Unit("
                              f"'{unit}')), got {value!r}")
    try:
        v = value.to_value(unit, equivalencies=equivalencies)
    except u.UnitConversionError:
        raise ExcitationError(f"{name} has unit '{value.unit}', not convertible to {unit}") from None
    if np.ndim(v) != 0 or not np.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        bound = ">= 0" if allow_zero else "> 0"
        raise ExcitationError(f"{name} must be one finite value {bound}, got {value!r}")
    return float(v)


def _resolve_molecule(species_or_moldata, datafile):
    if hasattr(species_or_moldata, "energy_k"):
        mol = species_or_moldata
    else:
        from ..molecules.registry import molecule
        mol = molecule(str(species_or_moldata), datafile=datafile, need_collisions=True)
    if not mol.collisions:
        raise ExcitationError(f"{mol.name} has no collision rates; LVG needs a Leiden-format "
                              "file with them (datafile=... or SYNTH_MOLDATA)")
    return mol


def check_options(geometry, ortho_para_ratio):
    """Validate the geometry and ortho/para options shared by one-zone and snapshot solves."""
    check_geometry(geometry)
    if ortho_para_ratio is not None and not (np.isfinite(ortho_para_ratio)
                                             and ortho_para_ratio >= 0):
        raise ExcitationError(f"ortho_para_ratio must be a finite number >= 0 or None (thermal), "
                              f"got {ortho_para_ratio!r}")


def excite(species_or_moldata, n_h2, t_kin, column_per_width, geometry="expanding",
           ortho_para_ratio=None, t_bg=T_CMB_K * u.K, partners=None, datafile=None,
           fwhm=1.0 * u.km / u.s):
    """Statistical-equilibrium excitation of one zone with an escape probability.

    Parameters
    ----------
    species_or_moldata : str or MolecularData
        Species name (looked up with collision rates, see :func:`synth.molecule`) or data.
    n_h2 : Quantity ``[number density]``
    t_kin : Quantity ``[temperature]``
    column_per_width : Quantity, e.g. ``cm-2 / (km/s)``
        N(species) / dv with dv the line FWHM (module docstring for the tau convention).
    geometry : {"expanding", "uniform-sphere", "plane-slab"}
        Escape-probability form (:mod:`synth.excitation.escape`).
    ortho_para_ratio : float, optional
        Fixed H2 ortho/para ratio; default thermal, min(9 exp(-170.5/T), 3).
    t_bg : Quantity ``[temperature]``
        Blackbody background, default 2.725 K.
    partners : dict, optional
        Extra collision partners present in the data file: abundance relative to H2 (float,
        ``{"He": 0.1}``) or density (Quantity).
    datafile : path, optional
        Leiden-format file (when a name is given).
    fwhm : Quantity ``[speed]``
        Line width used only for ``integrated_intensity`` (default 1 km/s).

    Returns
    -------
    OneZoneExcitation

    Examples
    --------
    >>> import astropy.units as u
    >>> res = excite("CO", 1e4 * u.cm**-3, 20 * u.K, 1e16 * u.cm**-2 / (u.km / u.s))
    >>> res.transitions[0], bool(res.tau[0] > 1)
    ('1-0', True)
    """
    mol = _resolve_molecule(species_or_moldata, datafile)
    check_options(geometry, ortho_para_ratio)
    n = _scalar(n_h2, "cm-3", "n_h2")
    t = _scalar(t_kin, "K", "t_kin", equivalencies=u.temperature())
    ncol = _scalar(column_per_width, "cm-3 s", "column_per_width", allow_zero=True)
    tb = _scalar(t_bg, "K", "t_bg", allow_zero=True, equivalencies=u.temperature())
    dv = _scalar(fwhm, "km/s", "fwhm")
    system = level_system(mol)
    dens = partner_densities(system, [n], [t], ortho_para_ratio, partners)
    used = {p for p, d in zip(system.partners, dens) if np.any(d > 0)}
    check_temperature_range(system, t, t, used)
    res, t_ex, tau, t_r = zone_lines(system, [n], [t], [ncol], geometry=geometry, t_bg_k=tb,
                                     ortho_para_ratio=ortho_para_ratio, partners=partners)
    x, t_ex, tau, t_r = res.populations[0], t_ex[0], tau[0], t_r[0]
    n_crit, n_crit_all = _critical_densities(system, t, ortho_para_ratio)
    labels = mol.level_labels
    return OneZoneExcitation(
        species=mol.name, transitions=tuple(mol.transition_labels),
        upper_levels=tuple(labels[i] for i in mol.upper),
        lower_levels=tuple(labels[i] for i in mol.lower),
        frequency=(system.freq_hz * u.Hz).to(u.GHz), e_up=system.energy_k[system.upper] * u.K,
        t_ex=t_ex * u.K, tau=tau, t_r=t_r * u.K,
        integrated_intensity=GAUSS_AREA * t_r * dv * u.K * u.km / u.s,
        critical_density=n_crit * u.cm**-3, critical_density_all=n_crit_all * u.cm**-3,
        populations=x, n_h2=n * u.cm**-3, t_kin=t * u.K, column_per_width=column_per_width,
        fwhm=fwhm, t_bg=tb * u.K, geometry=geometry,
        partners={p: float(d[0]) * u.cm**-3 for p, d in zip(system.partners, dens) if p in used},
        converged=True, iterations=int(res.iterations[0]))


def zone_lines(system, n_h2_cm3, t_kin_k, column_per_width_cm3s, *, geometry="expanding",
               t_bg_k=T_CMB_K, ortho_para_ratio=None, partners=None, x0=None):
    """Many uniform zones at once, each as :func:`excite` solves one (module docstring).

    ``column_per_width_cm3s`` is N/dv in cm^-2 per (cm/s), dv the FWHM. Returns the solver's
    result and, per zone and line, T_ex (K; NaN where a population underflows), the
    line-centre optical depth (0 there) and T_R (K, above the background)."""
    kcol = np.asarray(column_per_width_cm3s, dtype=np.float64) / GAUSS_AREA
    res = solve_levels(system, n_h2_cm3, t_kin_k, kcol, geometry=geometry, t_bg_k=t_bg_k,
                       ortho_para_ratio=ortho_para_ratio, partners=partners, x0=x0)
    t_ex = excitation_temperature(system, res.populations)
    reached = np.isfinite(t_ex)
    tau = np.where(reached, res.tau, 0.0)
    j_ex = np.where(reached, radiation_temperature(system.freq_hz, np.where(reached, t_ex, 1.0)),
                    0.0)
    j_bg = radiation_temperature(system.freq_hz, t_bg_k) if t_bg_k > 0 else 0.0
    t_r = np.where(reached, (j_ex - j_bg) * -np.expm1(-tau), 0.0)
    return res, t_ex, tau, t_r


def _fmt(v, spec):
    return "-" if not np.isfinite(v) else format(v, spec)


#: Forms of the critical density, see :func:`critical_density`.
CRITICAL_DENSITY_FORMS = ("downward", "all-levels")


def _critical_densities(system, t_k, ortho_para_ratio):
    """Both forms of :func:`critical_density` for every line of ``system`` at ``t_k``:
    (downward, all-levels), cm^-3 (inf where the upper level has no collision rates)."""
    dens = partner_densities(system, [1.0], [t_k], ortho_para_ratio)
    c = collision_matrix(system, [t_k], dens)[0]  # c[i, j]: rate i -> j per unit n(H2)
    below = system.energy_k[None, :] < system.energy_k[:, None]  # below[i, j]: E_j < E_i
    out_down = np.where(below, c, 0.0).sum(axis=1)
    out_all = c.sum(axis=1) - np.diag(c)
    a_out = np.zeros(system.n_levels)
    np.add.at(a_out, system.upper, system.a_ul_s)  # all radiative decays of each level
    up = system.upper
    with np.errstate(divide="ignore"):
        return a_out[up] / out_down[up], a_out[up] / out_all[up]


def critical_density(species_or_moldata, t_kin, ortho_para_ratio=None, form="downward",
                     datafile=None):
    """Critical density of every radiative transition's upper level, per H2 molecule.

    ``form="downward"``: n_crit = sum_{l<u} A_ul / sum_{l<u} gamma_ul(T), the radiative
    decay rate of the upper level u over its collisional de-excitation rate coefficient to
    all lower levels (Shirley 2015, PASP 127, 299, eq. 4, from memory; the usual textbook
    form). ``form="all-levels"``: n_crit = sum_{l<u} A_ul / sum_{j != u} gamma_uj(T), every
    collisional rate out of u, upward ones by detailed balance included (Shirley 2015, eq. 5,
    from memory), which is the smaller of the two. Where u has a single radiative decay (every
    linear rotor) the numerator is that transition's A_ul. gamma is per H2 molecule: pH2 and
    oH2 rates mixed with ``ortho_para_ratio`` (thermal by default), interpolated in T as the
    solver does; other partners are not counted. Optical depth is not included: these are
    the optically thin values.

    Returns
    -------
    Quantity (cm^-3), one per radiative transition in the molecule's order; inf where the
    upper level has no collision rates.
    """
    if form not in CRITICAL_DENSITY_FORMS:
        raise ExcitationError(f"form {form!r} unknown; valid: {', '.join(CRITICAL_DENSITY_FORMS)}")
    mol = _resolve_molecule(species_or_moldata, datafile)
    check_options("expanding", ortho_para_ratio)
    t = _scalar(t_kin, "K", "t_kin", equivalencies=u.temperature())
    system = level_system(mol)
    check_temperature_range(system, t, t, {p for p in system.partners if p in H2_SPECIES})
    down, every = _critical_densities(system, t, ortho_para_ratio)
    return (down if form == "downward" else every) * u.cm**-3


def format_excitation_table(result, max_lines=None, effective_density=None):
    """Plain-text table of a :class:`OneZoneExcitation`, one row per transition.

    The columns lead with the densities that say where each line is excited: the two
    critical densities (``critical_density``, ``critical_density_all``) and, when given, the
    effective excitation density (``effective_density``, Quantity per transition from
    :func:`synth.excitation.line_ratios.effective_excitation_density`); then the level labels,
    frequency, E_up/k, T_ex, line-centre optical depth, Rayleigh-Jeans brightness above the
    background and integrated intensity, units in the header. ``max_lines`` keeps the first
    rows only.
    """
    r = result
    partners = ", ".join(f"{p} {d.to_value('cm-3'):.3g}" for p, d in r.partners.items())
    head = [f"{r.species} one-zone excitation, escape probability of the {r.geometry} geometry",
            f"  n(H2) {r.n_h2.to_value('cm-3'):.4g} cm-3 | T_kin {r.t_kin.to_value('K'):.4g} K"
            f" | N/dv {r.column_per_width.to_value('cm-2 s / km'):.4g} cm-2 per km/s | "
            f"background {r.t_bg.to_value('K'):.4g} K | line FWHM "
            f"{r.fwhm.to_value('km/s'):.4g} km/s",
            f"  partners (cm-3): {partners} | {r.iterations} Newton steps",
            "  n_crit: A / downward collision rates of the upper level; n_crit,all: / every "
            "collision rate out of it (Shirley 2015)"]
    if effective_density is not None:
        head.append("  n_eff: n(H2) at which W reaches 1 K km/s at this T_kin and N/dv "
                    "(Shirley 2015)")
    cols = [("upper", 6), ("lower", 6), ("n_crit [cm-3]", 14), ("n_crit,all [cm-3]", 18)]
    if effective_density is not None:
        cols.append(("n_eff [cm-3]", 13))
    cols += [("freq [GHz]", 12), ("E_up/k [K]", 11), ("T_ex [K]", 9), ("tau_0", 10),
             ("T_RJ [K]", 10), ("W [K km/s]", 11)]
    head.append(" ".join(f"{name:>{w}}" for name, w in cols))
    n = len(r.transitions) if max_lines is None else min(int(max_lines), len(r.transitions))
    rows = []
    for i in range(n):
        cells = [f"{r.upper_levels[i]:>6}", f"{r.lower_levels[i]:>6}",
                 f"{_fmt(r.critical_density[i].to_value('cm-3'), '14.3e'):>14}",
                 f"{_fmt(r.critical_density_all[i].to_value('cm-3'), '18.3e'):>18}"]
        if effective_density is not None:
            cells.append(f"{_fmt(effective_density[i].to_value('cm-3'), '13.3e'):>13}")
        cells += [f"{r.frequency[i].to_value('GHz'):12.6f}", f"{r.e_up[i].to_value('K'):11.2f}",
                  f"{_fmt(r.t_ex[i].to_value('K'), '9.3f'):>9}", f"{r.tau[i]:10.3e}",
                  f"{r.t_r[i].to_value('K'):10.4f}",
                  f"{r.integrated_intensity[i].to_value('K km/s'):11.4f}"]
        rows.append(" ".join(cells))
    return "\n".join(head + rows)


def _progress(progress):
    """A callable(fraction) from None, a callable or a tqdm-like object (has ``update``)."""
    if progress is None:
        return None
    if hasattr(progress, "update"):
        state = {"done": 0.0}
        total = float(getattr(progress, "total", None) or 1.0)

        def step(fraction):
            progress.update((fraction - state["done"]) * total)
            state["done"] = fraction
        return step
    if callable(progress):
        return progress
    raise ExcitationError(f"progress must be None, a callable(fraction) or a tqdm bar, "
                          f"got {progress!r}")


#: Cells per pass when a snapshot is read block by block without a plan (~1 M cells).
BLOCK_CELLS = 1 << 20


def _hash_keys(flat, seed):
    """A pseudo-random uint64 key per flat cell index (splitmix64 of index and seed; Steele,
    Lea & Flood 2014, OOPSLA, "Fast splittable pseudorandom number generators"). The sample
    is the active cells with the smallest keys, so it does not depend on how the snapshot is
    cut into blocks."""
    return _splitmix(np.ascontiguousarray(flat, dtype=np.int64), np.int64(seed))


@njit(cache=True)
def _splitmix(flat, seed):
    out = np.empty(flat.size, dtype=np.uint64)
    gold = np.uint64(0x9E3779B97F4A7C15)
    m1 = np.uint64(0xBF58476D1CE4E5B9)
    m2 = np.uint64(0x94D049BB133111EB)
    s = np.uint64(seed) * gold
    for i in range(flat.size):
        z = np.uint64(flat[i]) * gold + s + gold
        z = (z ^ (z >> np.uint64(30))) * m1
        z = (z ^ (z >> np.uint64(27))) * m2
        out[i] = z ^ (z >> np.uint64(31))
    return out


@njit(cache=True, parallel=True)
def _block_ranges(n, t, k):
    """One parallel pass over a block's cells (flat arrays): rows of the result are
    [active cells (n > 0 and K > 0), -], [min, max] of T over all cells, and [min, max] of n,
    T and K over the active cells (inf, 0 when there are none)."""
    size = n.size
    chunk = 1 << 16
    nb = (size + chunk - 1) // chunk
    part = np.empty((nb, 5, 2))
    for b in prange(nb):
        cnt = 0.0
        lo = np.full(4, np.inf)
        hi = np.array([-np.inf, 0.0, 0.0, 0.0])
        for i in range(b * chunk, min(size, (b + 1) * chunk)):
            tt = np.float64(t[i])
            lo[0] = min(lo[0], tt)
            hi[0] = max(hi[0], tt)
            nn = np.float64(n[i])
            kk = np.float64(k[i])
            if nn > 0.0 and kk > 0.0:
                cnt += 1.0
                lo[1] = min(lo[1], nn)
                hi[1] = max(hi[1], nn)
                lo[2] = min(lo[2], tt)
                hi[2] = max(hi[2], tt)
                lo[3] = min(lo[3], kk)
                hi[3] = max(hi[3], kk)
        part[b, 0, 0] = cnt
        part[b, 0, 1] = 0.0
        for r in range(4):
            part[b, 1 + r, 0] = lo[r]
            part[b, 1 + r, 1] = hi[r]
    out = np.empty((5, 2))
    out[0, 0] = part[:, 0, 0].sum()
    out[0, 1] = 0.0
    for r in range(1, 5):
        out[r, 0] = part[:, r, 0].min()
        out[r, 1] = part[:, r, 1].max()
    return out


def _check_snapshot_options(abundance, accuracy, t_bg_k, max_escape_length, n_check):
    if not (np.isfinite(accuracy) and 0 < accuracy < 1):
        raise ExcitationError(f"accuracy must be a fraction in (0, 1), got {accuracy!r}")
    if not (np.isfinite(t_bg_k) and t_bg_k >= 0):
        raise ExcitationError(f"t_bg_k must be a temperature >= 0 K, got {t_bg_k!r}")
    if not (isinstance(n_check, (int, np.integer)) and n_check >= 1):
        raise ExcitationError(f"n_check must be a positive integer, got {n_check!r}")
    if not (np.isfinite(abundance) and abundance >= 0):
        raise ExcitationError(f"abundance must be a number >= 0, got {abundance!r}")
    if max_escape_length is None:
        return None
    return _scalar(max_escape_length, "cm", "max_escape_length")


def lvg_excitation(snapshot, line, abundance, *, geometry="expanding", ortho_para_ratio=None,
                   t_bg_k=T_CMB_K, max_escape_length=None, accuracy=0.01, partners=None,
                   seed=0, progress=None, n_check=1000, max_table_nodes=60000):
    """Non-LTE (escape-probability) excitation of one line in every cell of a snapshot.

    Each cell's K = n_mol / |dv/ds| (Sobolev; :mod:`synth.excitation.gradient`, the gradient
    floored by the local FWHM over ``max_escape_length``) enters the escape probability through
    tau = (c^3 A / (8 pi nu^3)) K (x_l g_u/g_l - x_u) (Castor 1970), the same opacity the
    transfer uses. Populations come from a table over (n_H2, T_kin, K), refined until the
    line's T_R, optical depth and source function J(T_ex) - J(T_bg) each differ from direct
    solves of ``n_check`` random cells by less than ``accuracy``
    (:mod:`synth.excitation.tables`). The whole grid at once; :func:`lvg_blocks` gives the
    same values block by block.

    Parameters
    ----------
    snapshot : Snapshot
    line : synth.Line
    abundance : float
        Abundance relative to H2 where the snapshot has no per-cell field for the species.
    geometry, ortho_para_ratio, partners
        As for :func:`excite`.
    t_bg_k : float
        Background blackbody temperature, K.
    max_escape_length : Quantity ``[length]``, optional
        Cap on the Sobolev length (default the longest box edge).
    accuracy : float
        Required relative accuracy of the table in T_R, tau and J(T_ex) - J(T_bg) (default 1 %).
    seed : int
        Seed of the random check sample.
    progress : callable(fraction) or tqdm, optional
    n_check, max_table_nodes : int
        Size of the check sample; cap on the table size (TableAccuracyWarning when hit).

    Returns
    -------
    Excitation
        ``t_ex_k``, ``opacity_integral`` (float32); ``info`` holds the achieved accuracy
        ("table_error", the largest of "table_error_t_r", "table_error_tau" and
        "table_error_source"), the table shape and size, the number of direct solves and ranges.
    """
    from .product import Excitation
    report = _progress(progress)
    blocks = lvg_blocks(snapshot, line, abundance, geometry=geometry,
                        ortho_para_ratio=ortho_para_ratio, t_bg_k=t_bg_k,
                        max_escape_length=max_escape_length, accuracy=accuracy,
                        partners=partners, seed=seed, progress=report, n_check=n_check,
                        max_table_nodes=max_table_nodes, keep_columns=True)
    shape = snapshot.shape
    t_ex = np.empty(shape, np.float32)
    op = np.empty(shape, np.float32)
    for x0, x1 in _passes(shape, None):
        blk = snapshot.block(x0, x1, halo=blocks.halo)
        lo = max(0, x0 - blocks.halo)
        e = blocks(blk, x0, x1, slice(x0 - lo, x1 - lo))
        t_ex[x0:x1], op[x0:x1] = e.t_ex_k, e.opacity_integral
    if report is not None:
        report(1.0)
    return Excitation(line, t_ex, op, "lvg", blocks.info)


def _passes(shape, rows):
    """(x0, x1) blocks of ``rows`` rows (default ~BLOCK_CELLS cells each)."""
    nx = shape[0]
    rows = rows or max(1, min(nx, BLOCK_CELLS // max(1, shape[1] * shape[2])))
    return [(x0, min(nx, x0 + rows)) for x0 in range(0, nx, int(rows))]


class LvgBlocks:
    """The LVG excitation of a snapshot, block by block: a table built once
    (:func:`lvg_blocks`), applied to each block read with a one-cell halo (its velocity
    gradients). Called as ``blocks(block, x0, x1, inner)``: ``block`` holds the view's rows
    x0:x1 at ``block`` rows ``inner`` (the rest is halo); returns their :class:`Excitation`.
    Small; pickles to dask workers. The Sobolev columns of blocks kept by :func:`lvg_blocks`
    (``keep_columns``) are used once, for the block with the same rows, instead of being
    computed again; they stay in this process (not pickled)."""

    halo = 1

    def __init__(self, line, table, system, k_line, abundance, mass_amu, l_max_cm, t_bg_k,
                 info):
        self.line, self.table, self.system, self.k_line = line, table, system, k_line
        self.abundance, self.mass_amu = abundance, mass_amu
        self.l_max_cm, self.t_bg_k, self.info = l_max_cm, t_bg_k, info
        self.columns = {}

    def __getstate__(self):
        return dict(self.__dict__, columns={})

    def __call__(self, block, x0, x1, inner):
        from .gradient import sobolev_column
        from .product import Excitation
        from .tables import apply_table
        ab = block.abundance_for(self.line.species, self.abundance)
        kcol = self.columns.pop((x0, x1), None)
        if kcol is None:
            kcol = sobolev_column(block, ab, self.mass_amu, self.l_max_cm, rows=inner)
        if self.table is None:  # no active cell anywhere
            return Excitation(self.line, np.full(kcol.shape, self.t_bg_k, np.float32),
                              np.zeros(kcol.shape, np.float32), "lvg", self.info)
        t_ex, op = apply_table(self.table, self.system, self.k_line, block, ab, kcol,
                               self.t_bg_k, rows=inner)
        return Excitation(self.line, t_ex, op, "lvg", self.info)


def lvg_blocks(source, line, abundance, *, geometry="expanding", ortho_para_ratio=None,
               t_bg_k=T_CMB_K, max_escape_length=None, accuracy=0.01, partners=None,
               seed=0, progress=None, n_check=1000, max_table_nodes=60000, rows=None,
               keep_columns=False):
    """Build the LVG table of ``source`` (a Snapshot or any block source: ``shape``,
    ``cell_size_cm``, ``block(x0, x1, halo)``) reading it ``rows`` x rows at a time with a
    one-cell halo, and return the :class:`LvgBlocks` that applies it per block.
    ``keep_columns``: keep each block's Sobolev columns (4 bytes per cell until the block is
    applied) so that applying the table to the same blocks does not compute them again;
    for a snapshot in memory without a memory budget.

    One pass over the blocks finds the ranges of log n(H2), log T_kin and log K over the
    active cells (n > 0, K > 0) and the check sample: the ``n_check`` active cells with the
    smallest :func:`_hash_keys` of their flat index (a seeded random sample that does not
    depend on ``rows``, so a run read from a file with a small budget gets exactly the table
    of a run in memory). Options as :func:`lvg_excitation`.
    """
    from .gradient import GRADIENT_HALO, sobolev_column
    from .tables import build_table
    check_options(geometry, ortho_para_ratio)
    l_max = _check_snapshot_options(abundance, accuracy, t_bg_k, max_escape_length, n_check)
    report = _progress(progress)
    mol = line.collision_molecule()
    k_mol = mol.transition_index(line.transition)
    shape = tuple(int(n) for n in source.shape)
    plane = shape[1] * shape[2]
    if l_max is None:
        l_max = max(shape) * source.cell_size_cm
    t_lo, t_hi, n_active = np.inf, -np.inf, 0
    lims = [[np.inf, -np.inf] for _ in range(3)]
    keys = np.empty(0, np.uint64)
    picked = np.empty((0, 3))
    kept = {}
    for x0, x1 in _passes(shape, rows):
        blk = source.block(x0, x1, halo=GRADIENT_HALO)
        lo = max(0, x0 - GRADIENT_HALO)
        inner = slice(x0 - lo, x1 - lo)
        t = blk.t_kin_k[inner]
        kcol = sobolev_column(blk, blk.abundance_for(line.species, abundance), mol.mass_amu,
                              l_max, rows=inner)
        if keep_columns:
            kept[(x0, x1)] = kcol
        n = blk.n_h2_cm3[inner]
        fields = (n, t, kcol)
        part = _block_ranges(*(np.ascontiguousarray(f).reshape(-1) for f in fields))
        t_lo, t_hi = min(t_lo, part[1, 0]), max(t_hi, part[1, 1])
        count = int(part[0, 0])
        if not count:
            continue
        n_active += count
        for a in range(3):
            lims[a][0] = min(lims[a][0], part[2 + a, 0])
            lims[a][1] = max(lims[a][1], part[2 + a, 1])
        idx = np.flatnonzero((n > 0) & (kcol > 0))
        k = _hash_keys(idx + x0 * plane, seed)
        if keys.size >= n_check:  # only keys below the n_check-th smallest so far can enter
            below = k < keys.max()
            idx, k = idx[below], k[below]
        if k.size > n_check:
            keep = np.argpartition(k, n_check - 1)[:n_check]
            idx, k = idx[keep], k[keep]
        vals = np.stack([f.ravel()[idx].astype(np.float64) for f in fields], axis=1)
        keys, picked = np.concatenate([keys, k]), np.concatenate([picked, vals])
        if keys.size > n_check:
            keep = np.argpartition(keys, n_check - 1)[:n_check]
            keys, picked = keys[keep], picked[keep]
        del blk, kcol, n, t
    info = {"geometry": geometry, "accuracy": accuracy, "active_cells": n_active}
    system = level_system(mol, t_hot_k=max(t_hi, t_bg_k), min_fraction=1e-10,
                          keep_below_k=float(mol.energy_k[mol.upper[k_mol]]))
    info["levels"] = system.n_levels
    k_line = int(np.flatnonzero(system.lines == k_mol)[0])
    dens = partner_densities(system, [1.0], [t_lo], ortho_para_ratio, partners)
    check_temperature_range(system, t_lo, t_hi,
                            {p for p, d in zip(system.partners, dens) if np.any(d > 0)})
    args = (line, None, system, k_line, abundance, mol.mass_amu, l_max, t_bg_k, info)
    if n_active == 0:
        info.update(table_error=0.0, table_error_t_r=0.0, table_error_tau=0.0,
                    table_error_source=0.0, table_shape=(0, 0, 0), table_nodes=0,
                    direct_solves=0)
        blocks = LvgBlocks(*args)
        blocks.columns = kept
        return blocks
    ranges = [(float(np.log10(lo_)), float(np.log10(hi_))) for lo_, hi_ in lims]
    sample = np.log10(picked[np.argsort(keys, kind="stable")])
    opts = {"geometry": geometry, "t_bg_k": t_bg_k, "ortho_para_ratio": ortho_para_ratio,
            "partners": partners}
    table = build_table(system, ranges, sample, (k_line, t_bg_k), opts, accuracy,
                        max_table_nodes, report)
    info.update(table_error=table.error, table_error_t_r=table.errors[0],
                table_error_tau=table.errors[1], table_error_source=table.errors[2],
                table_shape=table.shape,
                table_nodes=int(np.prod(table.shape)), direct_solves=table.solves,
                n_check=int(sample.shape[0]), ranges_log10={"n_h2_cm3": ranges[0],
                                                            "t_kin_k": ranges[1],
                                                            "k_cm3s": ranges[2]})
    blocks = LvgBlocks(*args)
    blocks.table = table
    blocks.columns = kept
    return blocks
