"""Benchmark: interferometric observe vs the bare gridder calls on the same visibilities.

256^2 x 64 channels, 50 antennas (an invented spiral), 4 h at 60 s, one pointing. Prints the
time of observe without deconvolution, the time of the bare ducc0 calls (predict + dirty image
per channel, same thread settings), their ratio (medians of three alternated runs; target
<= 1.2), the deconvolution time, and the peak traced memory (it must not scale with
channels x visibilities). observe also adds thermal noise, which the bare calls do not.
Run: python tests/bench/bench_observe.py [n_channels]
"""

import sys
import time
import tracemalloc

import astropy.units as u
import numpy as np
from astropy.wcs import WCS
from spectral_cube import SpectralCube

from synth.instrument.arrays import spiral_layout
from synth.instrument.interferometer import Array, observe_interferometric
from synth.instrument.uv import uv_tracks
from synth.instrument.visibilities import (NTHREADS, NTHREADS_GRID, cube_geometry, grid_dirty,
                                           predict)


def make_cube(nch, n=256, pix_arcsec=0.1):
    rng = np.random.default_rng(0)
    y, x = np.mgrid[:n, :n] - n // 2
    data = np.empty((nch, n, n))
    for c in range(nch):
        data[c] = np.exp(-(x**2 + y**2) / (2 * (20 + c) ** 2)) + 0.01 * rng.random((n, n))
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.cdelt = [-pix_arcsec / 3600, pix_arcsec / 3600, 250.0]
    w.wcs.crpix = [n // 2 + 1, n // 2 + 1, 1]
    w.wcs.crval = [120.0, -30.0, 0.0]
    w.wcs.restfrq = 230.538e9
    return SpectralCube(data=data * u.K, wcs=w)


def main(nch=64):
    cube = make_cube(nch)
    arr = Array(spiral_layout(50, 20.0, 500.0, seed=5), name="bench-50", tsys=90 * u.K, diameter=10 * u.m)
    # one pointing on the cube's own pixels, as the bare calls image it (observe would
    # otherwise resample onto 4 pixels per synthesized beam)
    kw = dict(hour_angles=(-2, 2) * u.hourangle, sample_interval=60 * u.s,
              pointing_pattern="single", pixel=0.1 * u.arcsec)
    t = uv_tracks(arr, -30 * u.deg, kw["hour_angles"], kw["sample_interval"])
    print(f"{nch} channels of {cube.shape[1]}^2, {arr.n_antennas} antennas, "
          f"{t.uvw_m.shape[0]} visibilities per channel; threads predict {NTHREADS}, "
          f"grid {NTHREADS_GRID}")
    geom, _, _ = cube_geometry(cube)
    freqs = cube.with_spectral_unit(u.Hz, velocity_convention="radio").spectral_axis.value
    w = np.ones(t.uvw_m.shape[0])
    planes = np.asarray(cube.unmasked_data[:].value)

    def bare_calls():
        t0 = time.perf_counter()
        for c in range(nch):
            vis = predict(planes[c], t.uvw_m, freqs[c], geom)
            grid_dirty(vis, t.uvw_m, freqs[c], w, geom)
        return time.perf_counter() - t0

    def observe_call():
        t0 = time.perf_counter()
        observe_interferometric(cube, arr, seed=1, deconvolver="none", correct_primary_beam=False, **kw)
        return time.perf_counter() - t0

    import warnings
    warnings.simplefilter("ignore")          # this sky fills more than one primary beam
    observe_interferometric(cube[:1], arr, seed=1, deconvolver="none", correct_primary_beam=False, **kw)   # imports
    # alternate the two three times and take the medians: the shared machine's speed drifts
    pairs = [(bare_calls(), observe_call()) for _ in range(3)]
    bare = float(np.median([p[0] for p in pairs]))
    full = float(np.median([p[1] for p in pairs]))
    tracemalloc.start()
    observe_interferometric(cube, arr, seed=1, deconvolver="none", correct_primary_beam=False, **kw)
    peak_mb = tracemalloc.get_traced_memory()[1] / 1e6
    tracemalloc.stop()
    print("runs (bare, observe) s: " + ", ".join(f"({a:.2f}, {b:.2f})" for a, b in pairs))
    print(f"bare gridder calls {bare:.2f} s; observe (no deconvolution) {full:.2f} s; "
          f"ratio {full / bare:.2f} (target <= 1.2)")
    print(f"peak traced memory {peak_mb:.0f} MB (output cube {cube.size * 8 / 1e6:.0f} MB, "
          f"all visibilities would be {t.uvw_m.shape[0] * nch * 16 / 1e6:.0f} MB)")
    nd = min(nch, 8)
    t0 = time.perf_counter()
    observe_interferometric(cube[:nd], arr, seed=1, deconvolver="hogbom", clean_max_components=2000, correct_primary_beam=False, **kw)
    print(f"deconvolved observe of {nd} channels (niter 2000): {time.perf_counter() - t0:.2f} s")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 64)
