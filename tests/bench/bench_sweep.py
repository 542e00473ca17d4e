"""Benchmark: a sweep of 8 setups vs the 8 separate runs it stands for; `synth demo` cold
and warm (the ideal cubes reused with --reuse).

1. Sweep. The demo cloud (64^3 by default), two tracers (CO 1-0 in LTE, C18O 1-0 with LVG),
   one array setup swept over 4 integration times x 2 antenna layouts (Högbom CLEAN, no
   figures): one `run_config` with the `[sweep]` vs 8 `run_config` calls with one setup each,
   in this process (imports and compiled kernels shared, which favours the separate runs).
   Prints the ratio sweep / separate (target <= 0.35) and checks that both made the same
   cubes; also the time of a run without setups (what a sweep shares) and the ratio a sweep
   could reach if its observations ran cpu_count times faster side by side.
2. Demo. `synth demo --out A` (cold; numba's on-disk cache already filled by part 1) and
   `synth demo --out B --reuse A` (warm), each a fresh process: wall times, warm / cold, and
   the warm time against the target (< 30 s on 2 cores).

   A sweep shares the synthesis, not the observations (each member's CLEAN is its own), so
   the ratio is bounded below by the observations' share of a run. Two workloads:
   * ``--n 64`` (the default): the demo cloud, 1 pc, imaged on its own 1" pixels: the
     synthesis is ~10 % of a run, and the ratio cannot go below ~0.9 x the observing share;
   * ``--n 256 --pixel-arcsec 1``: the same 1 pc clump from a 256^3 snapshot (the users'
     size), imaged on 1" pixels as an observer would (the model's 0.25" pixels are finer than
     any of these beams need): the synthesis is the larger share, as in users' sweeps.
   ``--box-pc`` grows the sky with n instead (same pixel): then the observations grow with
   the sky as fast as the synthesis does.

Run: python tests/bench/bench_sweep.py [--n 64] [--box-pc B] [--pixel-arcsec P] [--quick]
     [--part sweep|demo]
"""

import argparse
import copy
import os
import shutil
import subprocess
import sys
import tempfile
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
TIMES = [0.5, 1, 2, 4]
ARRAYS = ["ring-16", "compact-10"]


def _conf(n, channels_kms, box_pc=1.0, pixel_arcsec=None):
    return {
        "cloud": {"source": "demo", "cells": n, "seed": 1, "box_pc": box_pc,
                  "mean_n_h2_cm3": 1e4, "mach": 6.0},
        "sky": {"distance_pc": 4000, "dec_deg": -3.4, "ra_deg": 277.25,
                "systemic_velocity_kms": 0.0},
        "channels": {"width_kms": channels_kms, "velocity_min_kms": -4.0,
                     "velocity_max_kms": 4.0},
        "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4},
                   {"species": "C18O", "transition": "1-0", "abundance": 2e-7,
                    "excitation": "lvg"}],
        "output": {"figures": False},
        "setup": [{"name": "arr", "kind": "array", "antennas": "compact-10",
                   "diameter_m": 10.0, "latitude_deg": 8.0, "tsys_k": 90.0,
                   "integration_time_h": 4.0, "channel_width_kms": 1.0, "seed": 2,
                   "deconvolver": "hogbom", "pixel_arcsec": pixel_arcsec}],
    }


def bench_sweep(n, channels_kms, tmp, box_pc=1.0, pixel_arcsec=None):
    import synth
    from synth.sweep import member_name
    from astropy.io import fits
    quiet = dict(progress=False, log=lambda *a: None)
    base = _conf(n, channels_kms, box_pc, pixel_arcsec)
    # warm-up: imports, numba kernels, layouts (not timed)
    synth.run_config(dict(copy.deepcopy(base), cloud=dict(base["cloud"], cells=12)),
                     os.path.join(tmp, "warmup"), **quiet)
    sweep = dict(copy.deepcopy(base), sweep={"setups": ["arr"], "integration_time_h": TIMES,
                                             "antennas": ARRAYS})
    t0 = time.perf_counter()
    synth.run_config(sweep, os.path.join(tmp, "sweep"), **quiet)
    t_sweep = time.perf_counter() - t0
    t0 = time.perf_counter()
    for t in TIMES:
        for a in ARRAYS:
            name = member_name("arr", {"integration_time_h": t, "antennas": a})
            one = copy.deepcopy(base)
            one["setup"][0].update(name=name, integration_time_h=t, antennas=a)
            synth.run_config(one, os.path.join(tmp, name), **quiet)
    t_sep = time.perf_counter() - t0
    t0 = time.perf_counter()     # what a sweep shares: the synthesis (a run without setups)
    synth.run_config(dict(copy.deepcopy(base), setup=[]), os.path.join(tmp, "bare"), **quiet)
    t_bare = time.perf_counter() - t0
    same = all(np.array_equal(fits.getdata(os.path.join(tmp, "sweep", f)),
                              fits.getdata(os.path.join(tmp, name, f)), equal_nan=True)
               for t in TIMES for a in ARRAYS
               for name in [member_name("arr", {"integration_time_h": t, "antennas": a})]
               for f in [f"C18O_1-0_{name}_jyb.fits"])
    print(f"sweep: demo cloud {n}^3 in {box_pc:g} pc, pixel "
          f"{'the model' if pixel_arcsec is None else f'{pixel_arcsec:g} arcsec'}, 2 tracers (1 LVG), 8 array setups (4 times x 2 layouts, "
          f"CLEAN), channels {channels_kms} km/s")
    print(f"sweep run {t_sweep:.1f} s; 8 separate runs {t_sep:.1f} s; same cubes: {same}")
    obs = max(t_sep - 8 * t_bare, 0.0)
    print(f"a run without setups (synthesis, report) {t_bare:.1f} s, so the 8 runs spend "
          f"{obs:.1f} s observing; a sweep shares only the rest: with the observations "
          f"{os.cpu_count()}x faster side by side it could reach "
          f"{(t_bare + obs / os.cpu_count()) / t_sep:.3f}")
    print(f"sweep of 8 setups / 8 separate runs = {t_sweep / t_sep:.3f} (target <= 0.35)")
    return same


def _synth_cmd(*args):
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "synth", *args, "--quiet"], env=env,
                          capture_output=True, text=True)
    if proc.returncode != 0:
        raise SystemExit(f"synth {' '.join(args)} failed:\n{proc.stderr}")
    return time.perf_counter() - t0, proc.stdout + proc.stderr


def bench_demo(size, tmp):
    extra = [] if size is None else ["--cells", str(size)]
    cold, _ = _synth_cmd("demo", "--out", os.path.join(tmp, "cold"), *extra)
    warm, _ = _synth_cmd("demo", "--out", os.path.join(tmp, "warm"), "--reuse",
                         os.path.join(tmp, "cold"), *extra)
    print(f"demo{'' if size is None else f' --cells {size}'}: cold {cold:.1f} s, warm "
          f"(--reuse) {warm:.1f} s; {os.cpu_count()} cores, load average "
          f"{os.getloadavg()[0]:.1f}")
    print(f"synth demo warm / cold = {warm / cold:.3f}")
    print(f"synth demo cold = {cold:.1f} s")
    print(f"synth demo warm = {warm:.1f} s (target <= 30)")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=64, help="demo cloud cells per axis (sweep)")
    ap.add_argument("--box-pc", type=float, default=None,
                    help="sweep: the cloud's box in pc (default 1)")
    ap.add_argument("--pixel-arcsec", type=float, default=None,
                    help="sweep: the array's output pixel (default: the model's)")
    ap.add_argument("--quick", action="store_true", help="small sizes: a check that it runs")
    ap.add_argument("--part", choices=("sweep", "demo"), default=None)
    args = ap.parse_args(argv)
    tmp = tempfile.mkdtemp(prefix="synth-bench-sweep-")
    try:
        if args.part in (None, "sweep"):
            n = 24 if args.quick else args.n
            bench_sweep(n, 1.0 if args.quick else 0.25, tmp,
                        args.box_pc if args.box_pc is not None else 1.0, args.pixel_arcsec)
        if args.part in (None, "demo"):
            bench_demo(24 if args.quick else None, tmp)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
