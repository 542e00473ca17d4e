"""Benchmark: mosaics. Three figures, each measured in this run.

1. Time per pointing of a 7- and a 19-pointing mosaic / time of one pointing imaged the same
   way (same sub-image size, no deconvolution; 32 channels, 16 antennas, 4 h at 60 s):
   target <= 1.2. Also the marginal cost of one more pointing.
2. The same with Högbom CLEAN (threads over pointings), for information.
3. A real-size run: a 256^3 demo cloud (4 pc at 4 kpc, 206"), 2 tracers, a 19-pointing
   array mosaic with CLEAN, an invented 40 m dish, and their feathered combination, through
   `synth run`: wall time and peak memory (ru_maxrss of the run's process) against the
   size of the snapshot and of the cubes it writes.

Run: python tests/bench/bench_mosaic.py [--quick]
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import astropy.units as u
import numpy as np
from astropy.wcs import WCS
from spectral_cube import SpectralCube

from synth.instrument.interferometer import Array, observe_interferometric

NU = 230.538e9
C = 299792458.0
ARCSEC = 206264.80624709636
HEX = C / NU / 10.0 / np.sqrt(3.0) * ARCSEC          # hexagonal Nyquist spacing, 10 m


def make_cube(nch, n, pix):
    rng = np.random.default_rng(0)
    data = rng.random((nch, n, n))                  # an unrelated, structured-free workload
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.cdelt = [-pix / 3600, pix / 3600, 500.0]
    w.wcs.crpix = [n // 2 + 1, n // 2 + 1, 1]
    w.wcs.crval = [150.0, -35.0, 0.0]
    w.wcs.restfrq = NU
    return SpectralCube(data=data * u.K, wcs=w)


def per_pointing(nch, deconvolve, interval_s=60):
    """{n: seconds per pointing} for 1, 7 and 19 pointings, and {n: total seconds}."""
    pix = 0.5
    cube = make_cube(nch, 320, pix)
    arr = Array("compact-16", tsys=90 * u.K)
    kw = dict(noise=False, sample_interval=interval_s * u.s, pixel=pix * u.arcsec,
              deconvolver="hogbom" if deconvolve else "none", clean_max_components=300)
    sizes = {1: dict(pointing_pattern="single", map_size=20 * u.arcsec),
             7: dict(map_size=2.1 * HEX * u.arcsec),
             19: dict(map_size=[6.0 * HEX, 1.74 * HEX] * u.arcsec)}
    out = {}
    observe_interferometric(cube[:1], arr, **kw, correct_primary_beam=False, **sizes[1])       # warm-up (numba)
    for n, extra in sizes.items():
        t0 = time.perf_counter()
        m = observe_interferometric(cube, arr, with_maps=True, **kw, correct_primary_beam=False, **extra)
        dt = time.perf_counter() - t0
        assert m.layout.n_pointings == n, m.layout.n_pointings
        out[n] = dt / n
        out[f"total{n}"] = dt
    return out


CONFIG = """
[cloud]
source = "demo"
cells = {size}
box_pc = 4.0
mean_n_h2_cm3 = 3e3
seed = 2
[sky]
distance_pc = 4000
ra_deg = 210.0
dec_deg = -35.0
[channels]
width_kms = 0.5
[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6
[[tracer]]
species = "C18O"
transition = "1-0"
abundance = 2e-7
[output]
figures = false
[[setup]]
name = "dish40"
kind = "dish"
diameter_m = 40
tsys_k = 120
integration_time_h = 0.01
seed = 1
[[setup]]
name = "mosaic"
kind = "array"
antennas = "compact-16"
diameter_m = 10
latitude_deg = 8
tsys_k = 90
integration_time_h = 0.2
sample_interval_s = 900
map_size_arcsec = [{w}, {h}]
seed = 2
[[setup]]
name = "both"
kind = "array"
antennas = "compact-16"
diameter_m = 10
latitude_deg = 8
tsys_k = 90
integration_time_h = 0.2
sample_interval_s = 900
map_size_arcsec = [{w}, {h}]
combine_with = ["dish40"]
seed = 3
"""


def real_size(size):
    """Wall time and peak RSS of `synth run` on the 19-pointing config, in a subprocess."""
    hex110 = C / 109.78e9 / 10.0 / np.sqrt(3.0) * ARCSEC   # the lower line: 19 for both
    with tempfile.TemporaryDirectory() as tmp:
        cfg = os.path.join(tmp, "run.toml")
        with open(cfg, "w") as fh:
            fh.write(CONFIG.format(size=size, w=6.05 * hex110, h=1.76 * hex110))
        code = ("import resource, sys, time, json; from synth.pipeline import run_config; "
                "t = time.perf_counter(); s = run_config(sys.argv[1], sys.argv[2], "
                "progress=False, log=None); dt = time.perf_counter() - t; "
                "print(json.dumps({'s': dt, 'rss': resource.getrusage("
                "resource.RUSAGE_SELF).ru_maxrss, 'setups': {k: {t: e['n_pointings'] for t, e "
                "in v.items()} for k, v in s['setups'].items()}, 'channels': "
                "s['tracers']['13CO_1-0']['channels']}))")
        out = subprocess.run([sys.executable, "-c", code, cfg, os.path.join(tmp, "out")],
                             capture_output=True, text=True, check=True)
        res = json.loads(out.stdout.strip().splitlines()[-1])
    return res


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--size", type=int, default=None)
    args = ap.parse_args()
    nch = 4 if args.quick else 32
    import warnings
    warnings.simplefilter("ignore")          # the random sky fills more than the mosaics
    t = per_pointing(nch, deconvolve=False, interval_s=600 if args.quick else 60)
    for n in (7, 19):
        print(f"time per pointing, {n}-pointing mosaic / one pointing (no CLEAN, {nch} channels): "
              f"{t[n] / t[1]:.2f} (target <= 1.2)")
        marginal = (t[f"total{n}"] - t["total1"]) / (n - 1)
        print(f"  marginal cost of a pointing in the {n}-pointing mosaic / the whole one-pointing "
              f"run: {marginal / t['total1']:.2f} (the one-pointing run is "
              f"{t['total1']:.2f} s, of which set-up is shared by a mosaic's pointings)")
    t = per_pointing(max(2, nch // 8), deconvolve=True, interval_s=600 if args.quick else 60)
    for n in (7, 19):
        print(f"time per pointing with CLEAN, {n} pointings / one: {t[n] / t[1]:.2f} "
              f"(one pointing {t[1]:.2f} s)")
    size = args.size or (64 if args.quick else 256)
    res = real_size(size)
    snap_mb = size**3 * 6 * 8 / 1e6
    print(f"{size}^3 cloud, 2 tracers x (dish, 19-pointing mosaic, feathered mosaic): "
          f"pointings {res['setups']['mosaic']}, {res['channels']} channels; wall time "
          f"{res['s']:.0f} s; peak RSS {res['rss'] / 1e3:.0f} MB "
          f"(snapshot fields in float64 {snap_mb:.0f} MB; ratio {res['rss'] / 1e3 / snap_mb:.2f})")


if __name__ == "__main__":
    main()
