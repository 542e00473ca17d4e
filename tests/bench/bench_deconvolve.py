"""Benchmark: deconvolution. Two figures, each measured in this run.

1. Multi-scale / Högbom CLEAN time per channel on an extended source (a noiseless Gaussian
   of FWHM 4 beams plus a turbulent-looking field), both stopping at 3 sigma of the
   theoretical noise: context.
2. Speed-up of the channel loop from 1 to 2 CLEAN threads (channels and pointings are cleaned
   side by side), 16 channels, one pointing: target >= 1.7 (2 cores).

Run: python tests/bench/bench_deconvolve.py [--quick]
"""

import argparse
import time
import warnings

import astropy.units as u
import numpy as np
from astropy.wcs import WCS
from spectral_cube import SpectralCube

import synth.instrument.array_observe as ao
from synth.instrument.interferometer import Array, observe_interferometric


def make_cube(nch, n=192, pix=0.2):
    rng = np.random.default_rng(2)
    y, x = np.mgrid[:n, :n] - n // 2
    base = np.exp(-4 * np.log(2) * (x**2 + y**2) / 16.0**2)
    k = np.fft.fftfreq(n)
    kk = np.hypot(*np.meshgrid(k, k))
    kk[0, 0] = 1.0
    data = np.empty((nch, n, n))
    for c in range(nch):          # a Gaussian plus a power-law field, different per channel
        field = np.fft.ifft2(np.fft.fft2(rng.standard_normal((n, n))) * kk**-1.5).real
        data[c] = base + 0.3 * base * field / field.std()
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.cdelt = [-pix / 3600, pix / 3600, 500.0]
    w.wcs.crpix = [n // 2 + 1, n // 2 + 1, 1]
    w.wcs.crval = [150.0, -35.0, 0.0]
    w.wcs.restfrq = 230.538e9
    return SpectralCube(data=data * u.Jy / u.pix, wcs=w)


def timed(cube, **kw):
    t0 = time.perf_counter()
    obs = observe_interferometric(cube, Array("ring-24", tsys=90 * u.K), noise=False, deconvolver="hogbom",
                                  weighting="natural", sample_interval=300 * u.s,
                                  pointing_pattern="single", pixel=0.2 * u.arcsec,
                                  primary_beam=False, correct_primary_beam=False, **kw)
    return time.perf_counter() - t0, obs.meta["CLEANIT"]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    nch = 4 if args.quick else 16
    warnings.simplefilter("ignore")
    cube = make_cube(nch)
    timed(cube[:1], deconvolver="multiscale")                  # compile
    t_h, n_h = timed(cube, deconvolver="hogbom")
    t_m, n_m = timed(cube, deconvolver="multiscale")
    print(f"Högbom {t_h / nch:.3f} s per channel ({n_h // nch} components), multi-scale "
          f"{t_m / nch:.3f} s per channel ({n_m // nch} components): ratio multi-scale / "
          f"Högbom = {t_m / t_h:.2f}")
    ao.CLEAN_THREADS = 1
    t1, _ = timed(cube, deconvolver="hogbom")
    ao.CLEAN_THREADS = 2
    t2, _ = timed(cube, deconvolver="hogbom")
    print(f"channel loop with CLEAN, 1 thread {t1:.2f} s, 2 threads {t2:.2f} s: speed-up "
          f"{t1 / t2:.2f} (target >= 1.7)")


if __name__ == "__main__":
    main()
