"""Benchmark: the statistics layer on a 512^2 x 128 cube and 20 noise realisations.

An invented cloud (a log-normal intensity field with P(k) ~ k^-3 and line centres from
another such field) is convolved with a 4-pixel beam; each realisation adds white noise of
a fixed rms with its own seed. ``measure_statistics`` runs on the ideal cube and on every
realisation (what the survival of statistics does per tracer x setup), in ``--workers``
processes (2: the two cores). Printed:

* wall time of the whole (ideal + N realisations) and seconds per cube;
* per cube, the ratio to one numpy FFT of the cube (``np.fft.rfft2`` over its 128 planes),
  measured in the same run (context);
* the share of each group of statistics (moments/reading, power, Delta-variance, PDFs,
  centroids, dendrogram); dendrogram share target <= 0.5 (it must not dominate);
* the dendrogram time on one realisation for several min_value, min_delta, min_npix and
  fwhm_pixels settings (context: which settings make it scale).

Usage:  python tests/bench/bench_statistics.py [--quick] [--n 512] [--nchan 128]
        [--realisations 20] [--workers 2]
Not collected by pytest (speed is measured here, never in timed tests).
"""

import argparse
import os
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import astropy.units as u

BEAM_PIX = 4.0
NOISE_K = 0.1


def make_ideal(n, nchan, seed=1):
    """(ideal cube data (v, y, x) float32, convolved with the beam), channel width km/s."""
    from synth.analysis.power import gaussian_random_field
    from synth.analysis.matching import convolve_gaussian
    from radio_beam import Beam
    f = np.exp(0.5 * gaussian_random_field((n, n), -3.0, seed=seed))
    v0 = 0.6 * gaussian_random_field((n, n), -3.0, seed=seed + 1)
    dv = 0.1
    v = (np.arange(nchan) - (nchan - 1) / 2) * dv
    data = np.empty((nchan, n, n), dtype=np.float32)
    for i, vi in enumerate(v):
        data[i] = 2.0 * f * np.exp(-0.5 * ((vi - v0) / 0.5) ** 2)
    data = convolve_gaussian(data, 1.0, Beam(BEAM_PIX * u.arcsec)).astype(np.float32)
    return data, dv


def _cube(data, dv):
    from radio_beam import Beam
    from synth.analysis.matching import cube_from_array
    return cube_from_array(data, pixscale=1.0 * u.arcsec, channel_width=dv * u.km / u.s,
                           restfreq=230.538 * u.GHz, beam=Beam(BEAM_PIX * u.arcsec))


_IDEAL = {}


def _measure(args):
    """Worker: one cube (seed None = the ideal) measured; returns (seconds, timings)."""
    n, nchan, seed, dendro = args
    from synth.analysis.statistics import measure_statistics
    if (n, nchan) not in _IDEAL:
        _IDEAL[(n, nchan)] = make_ideal(n, nchan)
    data, dv = _IDEAL[(n, nchan)]
    if seed is not None:
        rng = np.random.default_rng(seed)
        data = data + rng.normal(scale=NOISE_K, size=data.shape).astype(np.float32)
    cube = _cube(data, dv)
    timings = {}
    t = time.perf_counter()
    measure_statistics(cube, noise=NOISE_K * u.K, timings=timings, dendrogram=dendro)
    return time.perf_counter() - t, timings


def fft_reference(n, nchan, repeats=2):
    data = np.random.default_rng(0).normal(size=(nchan, n, n)).astype(np.float32)
    best = np.inf
    for _ in range(repeats):
        t = time.perf_counter()
        np.fft.rfft2(data)
        best = min(best, time.perf_counter() - t)
    return best


def dendrogram_scan(n, nchan):
    """Dendrogram seconds and structure counts on one realisation for several settings."""
    from synth.analysis.statistics import measure_statistics
    data, dv = make_ideal(n, nchan)
    data = data + np.random.default_rng(5).normal(scale=NOISE_K, size=data.shape)
    cube = _cube(data.astype(np.float32), dv)
    out = []
    for mv, md, npix, fp in ((3, 2, 1, 2), (3, 2, 1, 0), (3, 1, 0.5, 2), (3, 3, 2, 2),
                             (5, 2, 1, 2), (10, 2, 1, 2)):
        tm = {}
        st = measure_statistics(cube, noise=NOISE_K * u.K, statistics=["dendrogram"],
                                timings=tm, dendrogram={"min_value_sigma": mv,
                                                        "min_delta_sigma": md,
                                                        "min_npix_beams": npix,
                                                        "fwhm_pixels": fp})
        out.append((mv, md, npix, fp, tm["dendrogram"], int(st["dendro_structures"].value)))
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="128^2 x 32, 4 realisations")
    ap.add_argument("--n", type=int, default=512)
    ap.add_argument("--nchan", type=int, default=128)
    ap.add_argument("--realisations", type=int, default=20)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    if args.quick:
        args.n, args.nchan, args.realisations = 128, 32, 4
    n, nchan, nr = args.n, args.nchan, args.realisations
    print(f"statistics layer: {n}^2 x {nchan} cube, ideal + {nr} noise realisations, "
          f"{args.workers} worker process(es); cpu count {os.cpu_count()}")
    t_fft = fft_reference(n, nchan)
    print(f"reference: one numpy rfft2 of the cube (float32, {nchan} planes): {t_fft:.3f} s")
    jobs = [(n, nchan, None, None)] + [(n, nchan, 1000 + i, None) for i in range(nr)]
    t0 = time.perf_counter()
    if args.workers > 1:
        with ProcessPoolExecutor(args.workers) as pool:
            results = list(pool.map(_measure, jobs))
    else:
        results = [_measure(j) for j in jobs]
    wall = time.perf_counter() - t0
    per_cube = np.array([r[0] for r in results])
    groups = {}
    for _, tm in results:
        for k, v in tm.items():
            groups[k] = groups.get(k, 0.0) + v
    total = sum(groups.values())
    print(f"wall time (cube making + measuring, {len(jobs)} cubes): {wall:.1f} s")
    print(f"measure_statistics per cube: median {np.median(per_cube):.2f} s "
          f"(min {per_cube.min():.2f}, max {per_cube.max():.2f})")
    ratio = float(np.median(per_cube)) / t_fft
    print(f"per cube / one FFT of the cube: {ratio:.2f}  (context)")
    print("share of each group (summed over cubes):")
    for k, v in sorted(groups.items(), key=lambda kv: -kv[1]):
        print(f"  {k:12s} {v:8.2f} s  {v / total:6.1%}")
    share = groups.get("dendrogram", 0.0) / total
    print(f"dendrogram share: {share:.2f}  (target <= 0.5)  {'pass' if share <= 0.5 else 'FAIL'}")
    print("dendrogram settings on one realisation (min_value, min_delta in moment-0 noise "
          "units, min_npix in beam areas, fwhm_pixels: block-averaged to that many pixels "
          "per beam FWHM, 0 = not):")
    print("  min_value  min_delta  min_npix  fwhm_pixels  seconds  structures")
    for mv, md, npix, fp, sec, ns in dendrogram_scan(n, nchan):
        print(f"  {mv:9.1f}  {md:9.1f}  {npix:8.1f}  {fp:11.1f}  {sec:7.2f}  {ns:10d}")


if __name__ == "__main__":
    main()
