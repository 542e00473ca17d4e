"""Compare two cubes (e.g. an observed cube and a model) with the same statistics.

``compare`` brings the cubes onto common terms, in this order, and records each step:

1. unit: both to K (Rayleigh-Jeans brightness temperature; Jy/beam through each cube's own
   beam, channel by channel);
2. resolution: both convolved to the smallest beam that contains both beams (radio-beam's
   ``Beams.common_beam``); a cube without a beam counts as pixel resolution;
3. sky grid: the cube with the finer pixels is regridded onto the other's celestial grid
   with ``reproject_interp`` (bicubic; optional dependency ``reproject``);
4. channels: the cube with the narrower channels is averaged onto the other's channels
   inside their common velocity range (overlap average).

Then :func:`synth.analysis.stats.structure_statistics` and the statistics layer
(:func:`synth.analysis.statistics.measure_statistics`) run on both with the same scale range,
the common beam and one noise level (the larger of the two), so thresholds match.
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u
from astropy.table import Table

from .._optional import require
from ..errors import InstrumentError
from ..sky import C_M_S
from .matching import (kernel_between, beam_text, channel_frequencies_hz, channel_velocities_ms,
                       channel_width_ms, convolve_gaussian, cube_beam, cube_from_array,
                       cube_values, jy_per_beam_per_k, pixel_scale_arcsec, resample_channels,
                       x_sign)
from .stats import default_scale_range, structure_statistics

__all__ = ["Comparison", "compare", "common_beam"]


@dataclass(frozen=True, eq=False)
class Comparison:
    """Two cubes matched and measured the same way."""

    names: tuple            # the two labels
    stats: dict             # label -> StructureStats
    matched: dict           # label -> the matched SpectralCube (K, common beam, common grid)
    beam: object            # the common beam (or None)
    steps: tuple            # what compare did, in words
    measured: dict = None   # label -> {name: Stat} of the statistics layer

    def table(self):
        """Side-by-side table: statistic, value for each cube, ratio second / first."""
        a, b = (self.stats[n].as_dict() for n in self.names)
        keys = [k for k in a if k in b]
        va = np.array([a[k] for k in keys], dtype=float)
        vb = np.array([b[k] for k in keys], dtype=float)
        if self.measured:
            ma, mb = (self.measured[n] for n in self.names)
            keys += [k for k in ma if k in mb]
            va = np.concatenate([va, [ma[k].value for k in ma if k in mb]])
            vb = np.concatenate([vb, [mb[k].value for k in ma if k in mb]])
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = vb / va
        return Table({"statistic": keys, self.names[0]: va, self.names[1]: vb,
                      "ratio": ratio})


def common_beam(beams):
    """Smallest beam containing all given beams (None entries are pixel resolution)."""
    from radio_beam import Beams
    real = [b for b in beams if b is not None]
    if not real:
        return None
    if len(real) == 1:
        return real[0]
    return Beams(beams=real).common_beam()


def _kelvin(cube, name):
    data, kind = cube_values(cube, name)
    if kind == "K":
        return data
    beam = cube_beam(cube)
    if beam is None:
        raise InstrumentError(f"{name}: unit Jy/beam but no beam; attach one with "
                              "cube.with_beam(Beam(...))")
    return data / jy_per_beam_per_k(channel_frequencies_hz(cube), beam)[:, None, None]


def _smooth(data, cube, target, name, steps):
    kernel = kernel_between(cube_beam(cube), target) if target is not None else None
    if kernel is None:
        return data
    steps.append(f"convolved {name} from {beam_text(cube_beam(cube))} to {beam_text(target)}")
    return convolve_gaussian(data, pixel_scale_arcsec(cube), kernel, x_sign(cube))


def _regrid(data, cube, onto, name, steps):
    reproject = require("reproject")
    w_in, w_out = cube.wcs.celestial, onto.wcs.celestial
    ny, nx = onto.shape[1:]
    out = np.empty((data.shape[0], ny, nx))
    for i, plane in enumerate(data):
        out[i], _ = reproject.reproject_interp((plane, w_in), w_out, shape_out=(ny, nx),
                                               order="bicubic")
    steps.append(f"regridded {name} from {cube.shape[2]}x{cube.shape[1]} pixels of "
                 f"{pixel_scale_arcsec(cube):.3g} arcsec onto {nx}x{ny} pixels of "
                 f"{pixel_scale_arcsec(onto):.3g} arcsec (reproject_interp, bicubic)")
    return np.nan_to_num(out)


def _match_spectral(da, ca, db, cb, names, steps):
    va, vb = channel_velocities_ms(ca), channel_velocities_ms(cb)
    dva, dvb = channel_width_ms(ca), channel_width_ms(cb)
    if va.shape == vb.shape and np.allclose(va, vb, rtol=0, atol=1e-3 * dva):
        return da, db, ca
    # the cube with the wider channels sets the grid, inside the common range
    (dc, vc, dwc, nc), (df, vf, dwf, nf), coarse = (
        ((da, va, dva, names[0]), (db, vb, dvb, names[1]), ca) if dva >= dvb else
        ((db, vb, dvb, names[1]), (da, va, dva, names[0]), cb))
    lo, hi = vf.min() - 0.5 * dwf, vf.max() + 0.5 * dwf
    keep = (vc - 0.5 * dwc >= lo - 1e-6 * dwc) & (vc + 0.5 * dwc <= hi + 1e-6 * dwc)
    if not keep.any():
        raise InstrumentError("spectral grid: the two cubes share no velocity range")
    df = resample_channels(df, vf, vc[keep])
    steps.append(f"averaged {nf} from {dwf:.6g} m/s channels onto the {keep.sum()} channels "
                 f"of {nc} ({dwc:.6g} m/s) inside the common velocity range")
    dc = dc[keep]
    pair = (dc, df) if nc == names[0] else (df, dc)
    return pair[0], pair[1], coarse[np.nonzero(keep)[0][0]:np.nonzero(keep)[0][-1] + 1]


def compare(a, b, *, names=("a", "b"), scale_range=None, noise=(None, None)):
    """Match two cubes (unit, resolution, grid, channels) and measure both identically.

    Parameters
    ----------
    a, b : SpectralCube
        K or Jy/beam (with a beam), velocity or frequency axis with RESTFRQ.
    names : (str, str)
        Labels used in the result and in its description of the steps.
    scale_range : (float, float), optional
        Slope-fit range in arcsec; default from the common beam and the common grid.
    noise : (Quantity or None, Quantity or None)
        Rms per channel of each cube *after* matching (K); estimated if None.

    Returns
    -------
    Comparison

    Examples
    --------
    >>> c = compare(observed, model, names=("observed", "model"))   # doctest: +SKIP
    >>> print("\\n".join(c.steps)); c.table()                       # doctest: +SKIP
    """
    names = tuple(str(n) for n in names)
    if len(names) != 2 or names[0] == names[1]:
        raise InstrumentError(f"names: {names!r}; give two different labels")
    steps = []
    da, db = _kelvin(a, names[0]), _kelvin(b, names[1])
    for cube, n in ((a, names[0]), (b, names[1])):
        if cube_values(cube, n)[1] != "K":
            steps.append(f"converted {n} from Jy/beam to K with its beam")
    beam = common_beam([cube_beam(a), cube_beam(b)])
    da, db = _smooth(da, a, beam, names[0], steps), _smooth(db, b, beam, names[1], steps)
    onto, ref = (a, b) if pixel_scale_arcsec(a) >= pixel_scale_arcsec(b) else (b, a)
    if not _same_grid(a, b):
        if onto is a:
            db = _regrid(db, b, a, names[1], steps)
        else:
            da = _regrid(da, a, b, names[0], steps)
    da, db, spec_cube = _match_spectral(da, a, db, b, names, steps)
    if not steps:
        steps.append("nothing to match: same unit, beam, grid and channels")
    cubes = {n: _rebuild(d, onto, spec_cube, beam) for n, d in zip(names, (da, db))}
    rng = scale_range or default_scale_range(onto.shape[1:], pixel_scale_arcsec(onto), beam)
    stats = {n: structure_statistics(cubes[n], scale_range=rng, noise=nz,
                                     automatic_range=scale_range is None)
             for n, nz in zip(names, noise)}
    from .statistics import measure_statistics
    common = max(stats[n].moments.noise.to_value(u.K) for n in names)
    measured = {n: measure_statistics(cubes[n], beam=beam, noise=common * u.K,
                                      scale_range=rng) for n in names}
    return Comparison(names=names, stats=stats, matched=cubes, beam=beam, steps=tuple(steps),
                      measured=measured)


def _same_grid(a, b):
    wa, wb = a.wcs.celestial, b.wcs.celestial
    return (a.shape[1:] == b.shape[1:] and np.allclose(wa.wcs.crval, wb.wcs.crval, atol=1e-9)
            and np.allclose(wa.wcs.crpix, wb.wcs.crpix, atol=1e-6)
            and np.allclose(wa.pixel_scale_matrix, wb.pixel_scale_matrix, rtol=1e-6))


def _rebuild(data, sky, spec, beam):
    v = channel_velocities_ms(spec)
    dv = v[1] - v[0] if v.size > 1 else channel_width_ms(spec)
    return cube_from_array(data, pixscale=pixel_scale_arcsec(sky) * u.arcsec,
                           channel_width=dv * u.m / u.s, v_start=v[0] * u.m / u.s,
                           restfreq=_rest_hz(spec) * u.Hz, unit="K", beam=beam, like=sky)


def _rest_hz(cube):
    rest = cube.wcs.wcs.restfrq
    if rest > 0:
        return rest
    v0 = channel_velocities_ms(cube)[0]
    return channel_frequencies_hz(cube)[0] / (1.0 - v0 / C_M_S)
