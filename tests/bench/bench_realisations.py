"""Benchmark: survival metrics over N = 10 noise realisations / one observation (and its
assessment), measured in this run. Target <= 5 (issue 11): the realisations share the
layout, model, uv tracks, weights, primary beams, PSFs (and their FFTs, which give the
residual outside each pointing's CLEAN box) and noiseless dirty images; each one grids its own
noise, is deconvolved (CLEAN is not linear) and assessed (two realisations side by side).

Three setups: an array 7-pointing mosaic without deconvolution, the same with Högbom CLEAN
(3 sigma), and a dish map. Before the reuse each realisation was a full observation
(ratio about N = 10). Each figure is the median of three alternated runs (the machine is
shared: other load changes the absolute times a lot); the ratio of CPU times (all threads)
is printed beside it, less sensitive to that load.

Run: python tests/bench/bench_realisations.py [--quick]
"""

import argparse
import time
import warnings

import astropy.units as u
import numpy as np
from astropy.wcs import WCS
from spectral_cube import SpectralCube

from synth.analysis.realisations import assess_realisations
from synth.analysis.survival import assess_map
from synth.instrument.interferometer import Array
from synth.instrument.observe import observe
from synth.instrument.single_dish import Dish

N = 10


def make_cube(nch, n, pix=0.5):
    """An invented extended line source: a Gaussian of FWHM n/4 pixels with a power-law
    field, different per channel, in K."""
    rng = np.random.default_rng(4)
    y, x = np.mgrid[:n, :n] - n // 2
    base = np.exp(-4 * np.log(2) * (x**2 + y**2) / (n / 4) ** 2)
    k = np.fft.fftfreq(n)
    kk = np.hypot(*np.meshgrid(k, k))
    kk[0, 0] = 1.0
    data = np.empty((nch, n, n))
    for c in range(nch):
        field = np.fft.ifft2(np.fft.fft2(rng.standard_normal((n, n))) * kk**-1.5).real
        data[c] = 2.0 * base * (1 + 0.3 * field / field.std()) * np.exp(-(c - nch / 2) ** 2
                                                                        / (nch / 3) ** 2)
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.cdelt = [-pix / 3600, pix / 3600, 500.0]
    w.wcs.crpix = [n // 2 + 1, n // 2 + 1, 1]
    w.wcs.crval = [150.0, -35.0, 0.0]
    w.wcs.restfrq = 230.538e9
    w.wcs.specsys = "LSRK"
    return SpectralCube(data=data * u.K, wcs=w)


def one_and_many(cube, inst, kw, repeats=1):
    """Median times of (one observation + its assessment, N realisations), alternated
    ``repeats`` times so that the machine's other load hits both alike."""
    ones, manys, cpu1, cpun = [], [], [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        assess_map(observe(cube, inst, seed=1, with_maps=True, **kw))
        t1, c1 = time.perf_counter(), time.process_time()
        assess_realisations(cube, inst, N, seed=1, **kw)
        t2, c2 = time.perf_counter(), time.process_time()
        ones.append(t1 - t0)
        manys.append(t2 - t1)
        cpu1.append(c1 - c0)
        cpun.append(c2 - c1)
    return tuple(float(np.median(v)) for v in (ones, manys, cpu1, cpun))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    nch, n = (4, 96) if args.quick else (16, 160)
    warnings.simplefilter("ignore")
    cube = make_cube(nch, n)
    arr = Array("compact-16", tsys=90 * u.K)
    common = dict(integration_time=1800 * u.s, sample_interval=600 * u.s,
                  map_size=36 * u.arcsec, pixel=0.5 * u.arcsec, deconvolver="none")
    one_and_many(cube[:2], arr, dict(common, deconvolver="hogbom"))      # warm up (numba, imports)
    cases = [("array, 7 pointings, no deconvolution", arr, common),
             ("array, 7 pointings, Högbom CLEAN", arr, dict(common, deconvolver="hogbom")),
             ("dish map", Dish(diameter=40 * u.m, tsys=150 * u.K),
              dict(integration_time=60 * u.s))]
    for label, inst, kw in cases:
        t1, tn, c1, cn = one_and_many(cube, inst, kw, repeats=1 if args.quick else 3)
        print(f"{label}: one observation + assessment {t1:.2f} s, N = {N} realisations "
              f"{tn:.2f} s: ratio N=10 / one = {tn / t1:.2f} (target <= 5); CPU time "
              f"{c1:.2f} s and {cn:.2f} s: ratio {cn / c1:.2f}")


if __name__ == "__main__":
    main()
