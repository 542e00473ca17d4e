"""synthesize: snapshot + line -> ideal PPV cube (K), the composition of excitation and transfer.

The work is chunked over sky tiles (blocks of x rows, all y and z): memory grows with the
tile and the output cube, never with snapshot x channels. Every source is read through one
block protocol (``source.block(x0, x1, halo=h)``: a Snapshot in memory, a view of a
:class:`~synth.snapshot.lazy.SnapshotFile`, a
:class:`~synth.snapshot.views.RotatedView`), and the excitation arrives as a product or a
per-block function (:mod:`synth.excitation.blocks`): the tile jobs import no solver and
read no file but their own block. Where the jobs run (the executor, its threads, a spill of
an in-memory snapshot for a cluster) is the caller's business (:mod:`synth.parallel`,
:mod:`synth.pipeline`).
"""

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import astropy.units as u
from spectral_cube import SpectralCube

from ..errors import ConfigError, MemoryBudgetError, UnderResolvedVelocityWarning
from ..excitation.product import Excitation
from ..snapshot.core import Snapshot, block_rows
from ..snapshot.lazy import SnapshotFile
from ..molecules.hyperfine import with_hyperfine
from ..radiation import AMU_CGS, H_CGS, K_CGS, T_CMB_K, radiation_temperature
from .kernel import WING_TAU, column_inputs, emission_counts, transfer_columns
from .skycube import channel_grid, sky_wcs
from .tiles import parse_memory, plan_tiles

__all__ = ["synthesize", "synthesize_products", "SynthesisResult", "LINES_OF_SIGHT",
           "auto_velocity_range", "view_source"]

#: FWHM / sigma of a Gaussian, sqrt(8 ln 2) (the same constant as synth.excitation.gradient).
FWHM_PER_SIGMA = float(np.sqrt(8.0 * np.log(2.0)))

#: UnderResolvedVelocityWarning above this fraction of the emission from under-resolved cells.
UNDERRESOLVED_WARN_FRACTION = 0.25

#: What the tau cube holds (its TAUKIND header card): tau averaged over each channel.
TAU_KIND = "channel mean"

#: Axis views a tracer can be seen along (rotations are given as a dict, see views).
LINES_OF_SIGHT = ("z", "-z", "x", "-x", "y", "-y")


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


def view_source(snapshot, line_of_sight="z"):
    """The block source a tracer is synthesised from: an in-memory Snapshot seen along
    ``line_of_sight`` (its view, in memory), a SnapshotFile's view (read block by block), or a
    block source already seen along its line of sight (``line_of_sight`` "z")."""
    if isinstance(snapshot, Snapshot):
        return snapshot if line_of_sight == "z" else snapshot.view(line_of_sight)
    if isinstance(snapshot, SnapshotFile):
        return snapshot.view(line_of_sight)
    if not hasattr(snapshot, "block"):
        raise ConfigError(f"snapshot must be a Snapshot, a SnapshotFile or a view of one, got "
                          f"{type(snapshot).__name__}")
    if line_of_sight != "z":
        raise ConfigError(f"{type(snapshot).__name__} is already a view; line_of_sight must be "
                          f"'z', got {line_of_sight!r}")
    return snapshot


#: Half-width of the default velocity range in dispersions: the kernel's window of an
#: optically thin cell, sqrt(2 ln(1 / WING_TAU)) = 5.26 (synth.transfer.kernel).
N_SIGMA = math.sqrt(2.0 * math.log(1.0 / WING_TAU))


def auto_velocity_range(snapshot, line, systemic_kms=0.0, line_of_sight="z", hyperfine=None):
    """(low, high) km/s covering every cell's centroid +- N_SIGMA dispersions (and, for a
    line split into hyperfine components, ``hyperfine`` as in :func:`synthesize_products`,
    every component's offset).

    ``snapshot`` is a Snapshot already seen along its line of sight, a SnapshotFile (read
    slab by slab along ``line_of_sight``) or a block source (read block by block).
    """
    if not isinstance(snapshot, Snapshot):
        src = view_source(snapshot, line_of_sight)
        nx = src.shape[0]
        step = max(1, (1 << 22) // max(1, int(np.prod(src.shape)) // nx))
        parts = [_extremes(src.block(x0, min(nx, x0 + step)), line)
                 for x0 in range(0, nx, step)]
        lo, hi, sig = (min(p[0] for p in parts), max(p[1] for p in parts),
                       max(p[2] for p in parts))
    else:
        lo, hi, sig = _extremes(snapshot, line)
    pad = N_SIGMA * sig
    hfs = with_hyperfine(line, hyperfine)
    off = (0.0, 0.0) if hfs is None else (min(hfs.offsets_kms), max(hfs.offsets_kms))
    return (lo + systemic_kms - pad + min(0.0, off[0]),
            hi + systemic_kms + pad + max(0.0, off[1])) * u.km / u.s


def _extremes(snap, line):
    vz = snap.velocity_cms[2]
    sig = np.sqrt(K_CGS * float(snap.t_kin_k.max()) / (line.mass_amu * AMU_CGS)
                  + float(np.max(snap.sigma_turb_cms)) ** 2) / 1e5
    return float(vz.min()) / 1e5, float(vz.max()) / 1e5, sig


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
        Output (LSR radio-velocity) range; default: every cell's centroid +- 5.26 sigma
        (the kernel's window of an optically thin cell).
    line_of_sight : str or dict, optional
        "z" (default), "-z", "x", "-x", "y", "-y" or a rotation (see
        :func:`synth.snapshot.views.view`).
    systemic_velocity : Quantity ``[speed]``, optional
        Added to the model's line-of-sight velocities (default 0).
    position : (Quantity, Quantity), optional
        (RA, Dec) of the map centre.
    t_bg : Quantity ``[temperature]``, optional
        Background blackbody temperature (default 2.725 K, the CMB), > 0. It is the radiation
        behind the cloud in the transfer and, for LVG, the external field the level
        populations are solved against (escape-probability J = (1 - beta) S + beta J(T_bg)).
    t_ex : Quantity, optional
        A fixed LTE excitation temperature instead of T_kin.
    excitation_options : dict, optional
        Options of the LVG solver (:func:`synth.excitation.lvg.lvg_excitation`).
    hyperfine : bool, optional
        None (default): a line with hyperfine data (HCN 1-0, N2H+ 1-0; see
        :mod:`synth.molecules.hyperfine`) is split into its components; False: averaged;
        True: split, and an error for a line without data.
    progress : bool
        Show a progress bar over sky tiles.

    Returns
    -------
    SpectralCube
        Brightness temperature above the background (K), axes (v, y, x); each channel is the
        emergent intensity averaged over the channel (as a spectrometer channel reports it),
        computed on sub-channels where the line is thick and narrower than the channel.

    Notes
    -----
    T_B is the Rayleigh-Jeans-equivalent intensity minus J(T_bg) (docs/guide.md, "What T_B
    means"). See :mod:`synth.transfer.kernel` for the profile and formal-solution equations.
    """
    return synthesize_products(snapshot, line, abundance, excitation, **kw).cube


def synthesize_products(snapshot, line, abundance, excitation="lte", *, distance,
                        channel_width, velocity_range=None, line_of_sight="z",
                        systemic_velocity=0.0 * u.km / u.s, position=None, t_bg=T_CMB_K * u.K,
                        t_ex=None, excitation_options=None, products=(), progress=False,
                        memory=None, executor=None, hyperfine=None):
    """Like :func:`synthesize`, also returning ``products`` ("tau", "column") and diagnostics.

    ``hyperfine``: None (default) splits a line with hyperfine data
    (:mod:`synth.molecules.hyperfine`) into its components, False keeps it averaged (one
    Gaussian per cell), True requires the data (a ConfigError names the key otherwise).

    ``snapshot`` may also be a :class:`synth.snapshot.lazy.SnapshotFile` (read tile by tile);
    ``memory`` caps what the stage allocates (bytes or "8GB"; see
    :func:`synth.transfer.tiles.plan_tiles`); ``executor`` runs the tile jobs
    (:mod:`synth.parallel`; default: in this process).
    """
    unknown = set(products) - {"tau", "column"}
    if unknown:
        raise ConfigError(f"unknown products {sorted(unknown)}; valid: 'tau', 'column'")
    dist_cm = _positive(distance, u.cm, "distance")
    v_sys = _finite(systemic_velocity, u.km / u.s, "systemic_velocity")
    t_bg_k = _positive(t_bg, u.K, "t_bg")
    source = view_source(snapshot, line_of_sight)
    shape = tuple(source.shape)
    hfs = with_hyperfine(line, hyperfine)
    if velocity_range is None:
        velocity_range = auto_velocity_range(source, line, v_sys, hyperfine=hyperfine)
    grid = channel_grid(channel_width, velocity_range)
    n_cubes = 1 + ("tau" in products)
    in_flight = getattr(executor, "in_flight", 1)
    name = excitation if isinstance(excitation, str) else None
    from ..excitation.blocks import LVG_BYTES_PER_CELL, LVG_TABLE_BYTES, block_excitation
    if name == "lvg" and memory is not None and parse_memory(memory) < LVG_TABLE_BYTES:
        raise MemoryBudgetError(
            f"memory budget {parse_memory(memory) / 1e6:.1f} MB is below the "
            f"{LVG_TABLE_BYTES / 1e6:.0f} MB an LVG table needs while it is built; raise "
            f"--memory to at least {LVG_TABLE_BYTES // 1_000_000}MB")
    halo = 1 if name == "lvg" else getattr(excitation, "halo", 0)
    extra_cell = (0 if hfs is None else 24 * len(hfs.fractions)) + (
        LVG_BYTES_PER_CELL if name == "lvg" else getattr(excitation, "extra_bytes_per_cell", 0))
    extra_fixed = 2 * excitation.t_ex_k.nbytes if isinstance(excitation, Excitation) else 0
    source, extra_fixed, extra_cell = _rotation_budget(source, memory, shape, grid.n, n_cubes,
                                                       extra_fixed, extra_cell)
    plan = plan_tiles(shape, grid.n, memory, n_cubes=n_cubes, in_flight=in_flight,
                      extra_fixed=extra_fixed, extra_per_cell=extra_cell, halo=halo)
    if hasattr(source, "with_budget") and memory is not None:
        source = source.with_budget(source.chunk_bytes, plan.tile_rows * shape[1] * shape[2])
    blocks = block_excitation(source, line, abundance, excitation, t_ex,
                              _with_background(excitation, excitation_options, t_bg_k),
                              rows=plan.tile_rows,
                              keep_columns=(memory is None and isinstance(source, Snapshot)
                                            and getattr(executor, "in_process", True)))
    job = _Job(line, grid, v_sys, float(radiation_temperature(line.freq_hz, t_bg_k)),
               "tau" in products, "column" in products, float(abundance), hfs)
    data, tau, col, counts = _integrate(source, blocks, plan, job, executor, progress)
    nx, ny, _ = shape
    cell_cm = source.cell_size_cm
    pixel_deg = np.degrees(cell_cm / dist_cm)
    wcs = sky_wcs(nx, ny, pixel_deg, grid, line.freq_hz, position)
    meta = {"BUNIT": "K", "LINE": str(line), "EXCIT": excitation, "HYPERFIN": hfs is not None,
            "ABUND": float(abundance), "DISTPC": dist_cm / u.pc.to(u.cm),
            "LOS": str(_axis_of(source, line_of_sight)), "TBG": t_bg_k}
    cube = _cube(data, wcs, meta, "K")
    tau_cube = (_cube(tau, wcs, dict(meta, BUNIT="", TAUKIND=TAU_KIND), "")
                if tau is not None else None)
    column = col.T * u.cm**-2 if col is not None else None
    stats = {"peak_k": float(np.nanmax(data)), "n_channels": grid.n,
             "integrated_k_kms": float(data.sum(dtype=np.float64) * grid.width_kms)}
    if tau is not None:
        stats["tau_max"] = float(np.max(tau))
    info = blocks.info
    stats["tiles"] = len(plan.tiles)
    stats["velocity_resolution"] = velocity_resolution(counts)
    return SynthesisResult(cube, tau_cube, column, info, stats)


def _with_background(excitation, options, t_bg_k):
    """LVG options with the populations solved against the same background as the transfer."""
    options = dict(options or {})
    if excitation != "lvg":
        return options
    given = options.get("t_bg_k")
    if given is not None and not np.isclose(float(given), t_bg_k, rtol=1e-9, atol=0.0):
        raise ConfigError(f"excitation_options t_bg_k={given!r} differs from t_bg={t_bg_k} K; "
                          "give the background once, as t_bg (it sets both the LVG populations "
                          "and the transfer)")
    options["t_bg_k"] = t_bg_k
    return options


def _cube(data, wcs, meta, unit):
    q = u.Quantity(data, u.Unit(unit) if unit else u.dimensionless_unscaled, copy=False)
    return SpectralCube(data=q, wcs=wcs, meta=dict(meta))  # keeps the array: no second copy


def _axis_of(source, line_of_sight):
    """The LOS card: the axis a file view is seen along (as before streaming), else the
    argument (a view in memory or a rotation is recorded as its caller gave it)."""
    axis = getattr(source, "line_of_sight", None)
    return axis if isinstance(axis, str) else line_of_sight


def _rotation_budget(source, memory, shape, n_channels, n_cubes, extra_fixed, extra_cell):
    """A rotated view read block by block: the source rows it reads at once (an eighth of
    what the budget leaves beside the cubes, at least three rows) are held beside the tiles,
    and each output cell of a tile holds its resampling temporaries. Each tile reads the
    source range its slab crosses, so the tiles get the larger share."""
    if not hasattr(source, "with_budget"):
        return source, extra_fixed, extra_cell
    from ..snapshot.views import ROTATION_BYTES_PER_CELL
    from .tiles import parse_memory
    row = source.source_row_bytes()
    whole = row * (source._shape_in[source._axis] + 1)
    if memory is None:
        chunk = whole
    else:
        free = parse_memory(memory) - n_cubes * n_channels * shape[0] * shape[1] * 4
        chunk = int(min(whole, max(3 * row, free // 8)))
    return (source.with_budget(chunk), extra_fixed + chunk,
            extra_cell + ROTATION_BYTES_PER_CELL)


@dataclass(frozen=True)
class _Job:
    """What every tile job needs besides its block and its excitation (small; pickles to
    dask workers). It reads its block (with the halo the excitation asks for), gets the
    block's excitation from the block function and integrates its columns."""

    line: object
    grid: object
    v_sys_kms: float
    j_bg: float
    want_tau: bool
    want_column: bool
    abundance: float
    hyperfine: object = None

    def __call__(self, source, x0, x1, blocks):
        halo = getattr(blocks, "halo", 0)
        block = source.block(x0, x1, halo=halo)
        lo = _Cut.offset(source, x0, x1, halo)
        inner = slice(x0 - lo, x1 - lo)
        exc = blocks(block, x0, x1, inner)
        out, tau, counts = transfer_tile(block, self.line, exc, inner, self.grid,
                                         self.v_sys_kms, self.j_bg, self.want_tau,
                                         want_resolution=True, hyperfine=self.hyperfine)
        col = None
        if self.want_column:
            x_ab = block.abundance_for(self.line.species, self.abundance)
            x_ab = x_ab if np.ndim(x_ab) == 0 else x_ab[inner]
            col = (block.n_h2_cm3[inner] * x_ab).sum(axis=2) * block.cell_size_cm
        return out, tau, col, counts


class _Cut:
    """The rows a tile job reads, cut from an in-memory snapshot in this process (so only
    they travel to a dask worker): ``block`` returns them for the tile they were cut for."""

    def __init__(self, snapshot, x0, x1, halo):
        self.lo = block_rows(x0, x1, halo, snapshot.shape[0])[0]
        self.shape = snapshot.shape
        self.snapshot = snapshot.block(x0, x1, halo=halo)

    def block(self, x0, x1, halo=0):
        return self.snapshot

    @staticmethod
    def offset(source, x0, x1, halo):
        if isinstance(source, _Cut):
            return source.lo
        return block_rows(x0, x1, halo, source.shape[0])[0]


class _Slice:
    """The rows x0:x1 of a whole-grid Excitation, cut in this process for a remote job."""

    halo = 0

    def __init__(self, blocks, x0, x1):
        self.exc = blocks(None, x0, x1, None)
        self.info = blocks.info

    def __call__(self, block, x0, x1, inner):
        return self.exc


def _serial_map(fn, args_list, progress=None):
    for i, args in enumerate(args_list):
        yield i, fn(*args)
        if progress is not None:
            progress.update(1)


def _integrate(source, blocks, plan, job, executor, progress):
    """Run the tile jobs; assemble the (v, y, x) cube, optional tau cube and column map."""
    nx, ny, _ = plan.shape
    nch = plan.n_channels
    data = np.empty((nch, ny, nx), dtype=np.float32)
    tau = np.empty((nch, ny, nx), dtype=np.float32) if job.want_tau else None
    col = np.empty((nx, ny)) if job.want_column else None
    tiles = plan.tiles
    remote = executor is not None and not getattr(executor, "in_process", True)
    halo = getattr(blocks, "halo", 0)
    counts = np.zeros(4)

    def args():
        for x0, x1 in tiles:
            if remote and isinstance(source, Snapshot):
                src = _Cut(source, x0, x1, halo)
            else:
                src = source
            blk = blocks
            if remote and hasattr(blocks, "excitation"):  # a whole-grid product: its rows
                blk = _Slice(blocks, x0, x1)
            yield src, x0, x1, blk

    bar = None
    if progress:
        from tqdm.auto import tqdm
        bar = tqdm(total=len(tiles), desc=f"{job.line} tiles", unit="tile", leave=False)
    run = _serial_map if executor is None else executor.map
    try:
        for i, (out, tau_t, col_t, counts_t) in run(job, args(), progress=bar):
            counts += counts_t
            x0, x1 = tiles[i]
            n = x1 - x0
            data[:, :, x0:x1] = out.reshape(n, ny, nch).transpose(2, 1, 0)
            if tau is not None:
                tau[:, :, x0:x1] = tau_t.reshape(n, ny, nch).transpose(2, 1, 0)
            if col is not None:
                col[x0:x1] = col_t
    finally:
        if bar is not None:
            bar.close()
    return data, tau, col, counts


def transfer_tile(snap, line, exc, x_slice, grid, v_sys_kms, j_bg, want_tau=False,
                  want_resolution=False, hyperfine=None):
    """The block-level kernel: columns x in ``x_slice`` (all y, z) -> (ncol, nch) spectra.

    Returns (spectra, tau or None), and with ``want_resolution`` also the
    :func:`resolution_counts` of the block. ``hyperfine`` (a
    :class:`synth.molecules.hyperfine.HyperfineComponents` or None) splits each cell's
    opacity into the components, shifted in velocity, sharing the cell's source function:
    each cell becomes consecutive layers, one per component, with opacity s_k tau_int. As the
    layers share S, the formal solution through them, I e^{-sum tau_k} + S (1 - e^{-sum
    tau_k}), is exactly that of the cell with the summed profile."""
    nx, ny, nz = snap.shape
    n = x_slice.stop - x_slice.start
    shape = (n * ny, nz)
    ex_rows = slice(None) if exc.t_ex_k.shape[0] == n else x_slice  # exc of x_slice, or all
    sig_turb = snap.sigma_turb_cms
    sig_turb = sig_turb if np.ndim(sig_turb) == 0 else sig_turb[x_slice]
    cols = tuple(np.empty(shape, dtype=np.float32) for _ in range(5))
    column_inputs(exc.opacity_integral[ex_rows], exc.t_ex_k[ex_rows],
                  snap.velocity_cms[2, x_slice], snap.t_kin_k[x_slice],
                  np.asarray(sig_turb, dtype=np.float64).reshape(-1),
                  snap.cell_size_cm * 1e-5, H_CGS * line.freq_hz / K_CGS, v_sys_kms,
                  K_CGS / (line.mass_amu * AMU_CGS), *cols)
    tau_int, src, _, sigma, delta = cols
    out = np.empty((n * ny, grid.n), dtype=np.float32)
    tau_out = np.empty((n * ny, grid.n) if want_tau else (0, 0), dtype=np.float32)
    if hyperfine is not None:
        cols = _split_components(*cols, hyperfine)
    transfer_columns(*cols, float(grid.start_kms), float(grid.width_kms), int(grid.n), j_bg,
                     out, tau_out)
    if want_resolution:
        counts = resolution_counts(tau_int, src, delta, sigma, j_bg)
        return out, (tau_out if want_tau else None), counts
    return out, (tau_out if want_tau else None)


def _split_components(tau_int, src, v0, sigma, delta, hyperfine):
    """(ncol, nz) cell arrays -> (ncol, nz m): each cell followed by its m components."""
    m = len(hyperfine.fractions)
    frac = np.asarray(hyperfine.fractions, dtype=np.float32)
    off = np.asarray(hyperfine.offsets_kms, dtype=np.float32)
    ncol, nz = tau_int.shape
    tau = (tau_int[:, :, None] * frac).reshape(ncol, nz * m)
    vel = (v0[:, :, None] + off).reshape(ncol, nz * m)
    return (np.ascontiguousarray(tau), np.repeat(src, m, axis=1), np.ascontiguousarray(vel),
            np.repeat(sigma, m, axis=1), np.repeat(delta, m, axis=1))


def resolution_counts(tau_int, src, delta, sigma, j_bg):
    """[emitting cells, under-resolved emitting cells, emission weight, under-resolved weight].

    A cell emits when its thin-limit contribution to the integrated intensity,
    w = |J(T_ex) - J(T_bg)| |tau_int| (K km/s), is non-zero; it is under-resolved when the
    line-of-sight velocity change across it (delta, central differences, as in the kernel)
    exceeds the local thermal+turbulent FWHM, sqrt(8 ln 2) sigma.
    """
    return emission_counts(tau_int, src, delta, sigma, j_bg, FWHM_PER_SIGMA)


def warn_if_underresolved(name, entry, threshold=None):
    """UnderResolvedVelocityWarning when more than ``threshold`` (default
    UNDERRESOLVED_WARN_FRACTION) of the emission of ``entry`` (a :func:`velocity_resolution`
    dict) comes from under-resolved cells; returns whether it warned."""
    threshold = UNDERRESOLVED_WARN_FRACTION if threshold is None else threshold
    frac = entry["underresolved_emission_fraction"]
    if frac <= threshold:
        return False
    warnings.warn(
        f"{name}: {100 * frac:.0f} % of the emission ({100 * entry['underresolved_fraction']:.0f}"
        " % of the emitting cells) comes from cells whose line-of-sight velocity change exceeds"
        " the local thermal+turbulent FWHM; thick-line spectra may be off by 10 % or more "
        "(docs/guide.md, velocity resolution); use a finer snapshot",
        UnderResolvedVelocityWarning, stacklevel=2)
    return True


def velocity_resolution(counts):
    """The summary entry from summed :func:`resolution_counts` (see docs/guide.md)."""
    n_emit, n_bad, w_all, w_bad = (float(c) for c in counts)
    return {"criterion": "line-of-sight velocity change across a cell > thermal+turbulent FWHM",
            "emitting_cells": int(n_emit),
            "underresolved_fraction": n_bad / n_emit if n_emit else 0.0,
            "underresolved_emission_fraction": w_bad / w_all if w_all > 0 else 0.0}


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

