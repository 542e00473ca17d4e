"""Benchmark: an LTE and an LVG tracer of a big HDF5 snapshot read block by block under --memory.

An invented float32 snapshot of size^3 cells (a cheap smooth field: density, temperature and
velocity from a few sines, written slab by slab so the generator never holds the grid) is
written to a temporary folder. A fresh subprocess then runs the pipeline's synthesis
(``synth.pipeline.synthesize_config``, as ``synth run --memory`` does, without observing)
for one LTE tracer (13CO 1-0) and one LVG tracer (C18O 1-0) with the budget, and reports:

  * wall time of each tracer and in all;
  * peak RSS (the process's high-water mark, ``VmHWM``) / budget (target <= 1), and the rise
    of the high-water mark above the RSS after imports / budget;
  * the tile plan's predicted peak and the measured rise / predicted (how well the cost model
    of ``synth.transfer.tiles`` holds);
  * the snapshot's size on disk, for scale (it is never held in memory).

From the measured rise / predicted ratio and ``synth.preflight.lvg_memory_need`` it prints the
largest cubic snapshot an LVG tracer can take on a machine of ``--machine`` bytes (default
this machine's memory) with ``--channels`` channels.

Usage:  python tests/bench/bench_stream.py [--size 512] [--memory 4GB] [--channels 64]
        [--keep FOLDER]
Not collected by pytest (speed and memory are measured here, never in timed tests).
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

TRACERS = [{"species": "13CO", "transition": "1-0", "abundance": 2e-6, "excitation": "lte"},
           {"species": "C18O", "transition": "1-0", "abundance": 2e-7, "excitation": "lvg"}]
CELL_PC = 0.01
SIGMA_KMS = 0.2


def write_snapshot(path, n, slab=16):
    """An invented float32 n^3 snapshot in HDF5, written slab by slab."""
    import h5py
    x = np.linspace(0, 2 * np.pi, n, endpoint=False, dtype=np.float32)
    Y, Z = np.meshgrid(x, x, indexing="ij")
    with h5py.File(path, "w") as f:
        f.attrs["cell_size"], f.attrs["cell_size_unit"] = CELL_PC * 3.0856775814913673e18, "cm"
        d = f.create_dataset("n_h2", (n, n, n), dtype=np.float32)
        t = f.create_dataset("t_kin", (n, n, n), dtype=np.float32)
        v = f.create_dataset("velocity", (3, n, n, n), dtype=np.float32)
        d.attrs["units"], t.attrs["units"], v.attrs["units"] = "cm-3", "K", "cm / s"
        for x0 in range(0, n, slab):
            X = x[x0:x0 + slab, None, None]
            d[x0:x0 + slab] = 2e3 * np.exp(1.2 * np.sin(X + 2 * Y) * np.cos(Z) + 0.8 * np.sin(3 * Z + X))
            t[x0:x0 + slab] = 15.0 + 6.0 * np.cos(Y + Z + X)
            v[0, x0:x0 + slab] = 2e5 * np.sin(Y + 0 * X)
            v[1, x0:x0 + slab] = 2e5 * np.sin(Z + X)
            v[2, x0:x0 + slab] = 3e5 * np.sin(X) * np.cos(Y) + 1e5 * np.sin(2 * Z)


def _vm(key):
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(key):
                return int(line.split()[1]) * 1024
    return 0


def _warm_up(conf):
    """Import what the run imports and load its numba kernels on an 8^3 snapshot, so the
    base RSS holds the libraries and the rise is what the run allocates."""
    import astropy.units as u
    from synth.snapshot.core import Snapshot
    from synth.pipeline import tracer_line
    from synth.transfer.synthesize import synthesize_products
    n = np.full((8, 8, 8), 1e3, np.float32)
    v = np.zeros((3, 8, 8, 8), np.float32)
    v[2] = np.linspace(-1e5, 1e5, 8)[:, None, None]
    snap = Snapshot(n_h2=n * u.cm**-3, t_kin=(n * 0 + 15) * u.K, velocity=v * u.cm / u.s,
                    cell_size=CELL_PC * u.pc, sigma_turb=SIGMA_KMS * u.km / u.s)
    for tr in conf["tracer"]:
        synthesize_products(snap, tracer_line(tr), tr["abundance"], tr["excitation"],
                            distance=1 * u.kpc, channel_width=0.5 * u.km / u.s,
                            velocity_range=(-2, 2) * u.km / u.s, products=("tau",))


def child(path, memory, channels):
    """Run the synthesis of both tracers in this (fresh) process; print one JSON line."""
    from synth.config import validate_config
    from synth.pipeline import synthesize_config
    from synth.transfer.tiles import parse_memory, plan_tiles
    from synth.excitation.blocks import LVG_BYTES_PER_CELL, LVG_TABLE_BYTES
    budget = parse_memory(memory)
    width = 12.0 / channels
    conf = validate_config({
        "cloud": {"source": path, "sigma_turb_kms": SIGMA_KMS},
        "sky": {"distance_pc": 1000},
        "channels": {"width_kms": width, "velocity_min_kms": -6.0, "velocity_max_kms": 6.0},
        "tracer": [dict(tr) for tr in TRACERS], "output": {"figures": False}})
    _warm_up(conf)
    base = _vm("VmRSS:")
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")  # reset VmHWM to the current RSS
    except OSError:
        pass
    times, info = {}, {}
    t_all = time.perf_counter()
    t0 = t_all
    for tr, line, res in synthesize_config(conf, memory=budget, info=info):
        times[f"{tr['excitation']} {line}"] = time.perf_counter() - t0
        shape = res.cube.shape
        del res
        t0 = time.perf_counter()
    total = time.perf_counter() - t_all
    n = info["shape"][0]
    n_chan = shape[0]
    plans = {kind: plan_tiles((n, n, n), n_chan, budget, n_cubes=2, halo=halo,
                              extra_per_cell=extra)
             for kind, halo, extra in (("lte", 0, 0), ("lvg", 1, LVG_BYTES_PER_CELL))}
    print(json.dumps({
        "size": n, "channels": n_chan, "budget": budget, "times_s": times, "total_s": total,
        "rss_base": base, "rss_peak": _vm("VmHWM:"),
        "predicted": max(max(p.peak_bytes for p in plans.values()), LVG_TABLE_BYTES),
        "tile_rows": {k: p.tile_rows for k, p in plans.items()},
        "read_by_tiles": info["read_by_tiles"]}))


def largest_lvg(machine, base, factor, channels):
    """Largest n (cubic) whose minimum LVG need (synth.preflight.lvg_memory_need), scaled by
    the measured rise/predicted factor, plus the base RSS fits in ``machine`` bytes."""
    from synth.preflight import lvg_memory_need
    lo, hi = 8, 1 << 16
    while hi - lo > 1:
        mid = (lo + hi) // 2
        need = base + max(1.0, factor) * lvg_memory_need((mid, mid, mid), n_chan=channels)
        lo, hi = (mid, hi) if need <= machine else (lo, mid)
    return lo


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=512)
    ap.add_argument("--memory", default="4GB")
    ap.add_argument("--channels", type=int, default=64)
    ap.add_argument("--machine", type=float, default=None, help="bytes of memory (default: this machine's)")
    ap.add_argument("--keep", default=None, help="folder for the snapshot (kept; reused if present)")
    ap.add_argument("--child", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args.child, args.memory, args.channels)
        return 0
    folder = args.keep or tempfile.mkdtemp(prefix="synth-bench-stream-")
    os.makedirs(folder, exist_ok=True)
    path = os.path.join(folder, f"cloud{args.size}.h5")
    if not os.path.exists(path):
        t0 = time.perf_counter()
        write_snapshot(path, args.size)
        print(f"wrote {path} ({os.path.getsize(path) / 1e9:.2f} GB) in "
              f"{time.perf_counter() - t0:.0f} s", flush=True)
    try:
        out = subprocess.run([sys.executable, __file__, "--child", path, "--memory",
                              args.memory, "--channels", str(args.channels)],
                             capture_output=True, text=True, check=True)
    except subprocess.CalledProcessError as exc:
        print(exc.stderr, file=sys.stderr)
        raise
    finally:
        if args.keep is None:
            os.remove(path)
            os.rmdir(folder)
    r = json.loads(out.stdout.strip().splitlines()[-1])
    gb = 1e9
    rise = r["rss_peak"] - r["rss_base"]
    print(f"snapshot {r['size']}^3 float32 in HDF5 ({r['size'] ** 3 * 20 / gb:.2f} GB on disk, "
          f"read block by block: {r['read_by_tiles']}), {r['channels']} channels, "
          f"--memory {r['budget'] / gb:.2f} GB; tile rows {r['tile_rows']}")
    for k, t in r["times_s"].items():
        print(f"  {k:<22} {t:8.1f} s")
    print(f"  {'both tracers':<22} {r['total_s']:8.1f} s")
    print(f"peak RSS / budget                 {r['rss_peak'] / r['budget']:.2f}  (target <= 1.0; "
          f"peak {r['rss_peak'] / gb:.2f} GB)")
    print(f"RSS rise during the run / budget  {rise / r['budget']:.2f}  (rise above the "
          f"{r['rss_base'] / gb:.2f} GB after imports and a warm-up)")
    factor = rise / r["predicted"]
    print(f"RSS rise / planned peak           {factor:.2f}  (planned {r['predicted'] / gb:.2f} GB)")
    machine = args.machine or os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    n_max = largest_lvg(machine, r["rss_base"], factor, r["channels"])
    print(f"largest cubic snapshot for LVG on {machine / gb:.1f} GB with {r['channels']} "
          f"channels: {n_max}^3 for the synthesis (its minimum need, the cubes and one tile "
          f"row with halo, x {max(1.0, factor):.2f}, plus the base RSS)")
    from synth.preflight import _BYTES_PER_VOXEL
    per_pixel = r["channels"] * (_BYTES_PER_VOXEL + 8 * (len(TRACERS) - 1))
    n_run = int(np.sqrt(machine / per_pixel))
    print(f"  and {n_run}^3 for a whole run of these {len(TRACERS)} tracers (the ideal cubes "
          f"it keeps for observing: {per_pixel} B per sky pixel, synth.preflight.check_cube_size)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
