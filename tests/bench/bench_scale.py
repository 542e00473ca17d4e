"""Benchmark: scaling with grid size, peak memory under a budget, and dask speed-up.

Three parts, each printing its figures with their targets, one line each:
  * scaling: LTE synthesis of the demo cloud at n/2 and n cells per axis into the same
    128-channel grid; time ratio for 8x the cells (target <= 9);
  * memory: ``synthesize_products`` of an n^3 snapshot stored in HDF5 and read slab by slab
    (``SnapshotFile``) under memory budgets; each budget runs in a fresh subprocess that
    measures the tracemalloc peak of the call and its RSS high-water mark above the pre-call
    RSS; peak / budget (target <= 1) and peak / (snapshot + cube bytes);
  * dask: the same synthesis on a LocalCluster of 1 and of 2 worker processes (one thread
    each), clusters started and warmed (numba compiled on every worker) before the timing,
    with the snapshot in memory (tiles shipped to the workers) and in HDF5 (each worker reads
    its slabs); speed-up t(1 worker) / t(2 workers) (target >= 1.6), the serial in-process
    time (numba on this process's threads), and a plain 2-process speed-up for reference.
Usage:  python tests/bench/bench_scale.py [--n 256] [--quick] [--part scaling|memory|dask]
        [--json out.json]
Not collected by pytest (speed is measured here, never in timed tests).
"""

import argparse
import gc
import json
import logging
import os
import subprocess
import sys
import tempfile
import time
import tracemalloc

import numpy as np

from synth.snapshot.readers import write_hdf5
import astropy.units as u

LINE = ("13CO", "1-0")
ABUNDANCE = 2e-6
DISTANCE = 2.4 * u.kpc
SEED = 3
BUDGETS = ("64MB", "256MB", "1GB")
PARTS = ("scaling", "memory", "dask")


def channel_grid(snap, n_channels):
    """(low km/s, width km/s, n): the 0.5-99.5 percentile range of v_z in n channels."""
    lo, hi = np.percentile(snap.velocity_cms[2] / 1e5, [0.5, 99.5])
    return float(lo), float((hi - lo) / n_channels), int(n_channels)


def grid_kw(grid):
    lo, width, nch = grid
    return dict(distance=DISTANCE, channel_width=width * u.km / u.s,
                velocity_range=(lo, lo + width * nch) * u.km / u.s)


def line():
    import synth
    return synth.Line(*LINE)


def warm(grid, threads=None):
    """Compile (or load from numba's cache) the kernel on a small cloud in this process."""
    if threads:
        import numba
        numba.set_num_threads(threads)
    from synth.snapshot.demo import demo_cloud
    from synth.transfer.synthesize import synthesize_products
    synthesize_products(demo_cloud(cells=16, seed=SEED), line(), ABUNDANCE, **grid_kw(grid))
    return os.getpid()


def timed(fn, *args, **kw):
    t0 = time.perf_counter()
    out = fn(*args, **kw)
    return out, time.perf_counter() - t0


def figure(fig, key, label, value, op=None, target=None, note=""):
    """Record and print one figure with its target."""
    fig[key] = {"label": label, "value": float(value), "op": op, "target": target}
    tgt = f"  (target {op} {target})" if op else ""
    print(f"{label:<52s} {value:10.3f}{tgt}{note}", flush=True)


# ---- scaling ----------------------------------------------------------------------------------
def part_scaling(n, n_channels, fig):
    from synth.snapshot.demo import demo_cloud
    from synth.transfer.synthesize import synthesize_products
    big = demo_cloud(cells=n, seed=SEED)
    grid = channel_grid(big, n_channels)
    small = demo_cloud(cells=n // 2, seed=SEED)
    warm(grid)
    times = {}
    for snap in (small, big):  # best of two runs each (the machine is shared)
        times[snap.shape[0]] = min(timed(synthesize_products, snap, line(), ABUNDANCE,
                                         **grid_kw(grid))[1] for _ in range(2))
    t_small, t_big = times[n // 2], times[n]
    print(f"grid {n // 2}^3 and {n}^3 into {n_channels} channels of {grid[1]:.3f} km/s "
          f"from {grid[0]:.2f} km/s (same grid)")
    figure(fig, "time_small_s", f"LTE synthesis {n // 2}^3 time [s]", t_small)
    figure(fig, "time_big_s", f"LTE synthesis {n}^3 time [s]", t_big)
    figure(fig, "scaling", f"time ratio {n}^3 / {n // 2}^3 (8x cells)", t_big / t_small,
           "<=", 9.0)


# ---- memory -----------------------------------------------------------------------------------
def _status_kib(key):
    with open("/proc/self/status") as f:
        for row in f:
            if row.startswith(key + ":"):
                return int(row.split()[1])
    raise KeyError(key)


def _reset_high_water():
    """Reset VmHWM to the current RSS (Linux >= 4.0, /proc/self/clear_refs value 5)."""
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
        return True
    except OSError:
        return False


def measure_budget(path, budget, grid, sigma_kms):
    """In a fresh process: peak memory of one tiled synthesis from the file under ``budget``."""
    from synth.snapshot.lazy import SnapshotFile
    from synth.transfer.synthesize import synthesize_products
    from synth.transfer.tiles import plan_tiles
    source = SnapshotFile(path, sigma_turb=sigma_kms * u.km / u.s)
    warm(grid)
    memory = None if budget == "none" else budget
    gc.collect()
    reset = _reset_high_water()
    rss0 = _status_kib("VmRSS") * 1024
    tracemalloc.start()
    res, t = timed(synthesize_products, source, line(), ABUNDANCE, memory=memory,
                   **grid_kw(grid))
    traced = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    hwm = _status_kib("VmHWM") * 1024
    plan = plan_tiles(source.view_shape(), grid[2], memory, n_cubes=1)
    nx, ny, nz = source.shape
    return {"budget": budget, "time_s": t, "traced": traced, "rss_rise": hwm - rss0,
            "rss_reset": reset, "predicted": plan.peak_bytes, "tiles": res.stats["tiles"],
            "snapshot_bytes": nx * ny * nz * 5 * 4, "cube_bytes": res.cube.size * 4}


def part_memory(n, n_channels, budgets, fig):
    from synth.snapshot.demo import demo_cloud
    from synth.transfer.tiles import parse_memory
    with tempfile.TemporaryDirectory(prefix="synth-bench-") as tmp:
        path = os.path.join(tmp, f"cloud{n}.h5")
        snap = demo_cloud(cells=n, seed=SEED)
        grid = channel_grid(snap, n_channels)
        sigma_kms = float(snap.sigma_turb_cms) / 1e5
        write_hdf5(snap, path)
        del snap
        gc.collect()
        print(f"{n}^3 snapshot in HDF5 ({os.path.getsize(path) / 2**20:.0f} MiB on disk), "
              f"{n_channels} channels; each budget in a fresh process")
        for budget in tuple(budgets) + ("none",):
            cmd = [sys.executable, __file__, "--child-memory", path, budget,
                   json.dumps([*grid, sigma_kms])]
            out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
            r = json.loads(out.strip().splitlines()[-1])
            data = r["snapshot_bytes"] + r["cube_bytes"]
            print(f"budget {budget:>5s}: {r['tiles']:3d} tiles, {r['time_s']:6.2f} s, "
                  f"traced peak {r['traced'] / 2**20:7.1f} MiB, RSS rise "
                  f"{r['rss_rise'] / 2**20:7.1f} MiB{'' if r['rss_reset'] else ' (no HWM reset)'}"
                  f", plan predicted {r['predicted'] / 2**20:7.1f} MiB; snapshot + cube "
                  f"{data / 2**20:.0f} MiB")
            key = f"memory_{budget}"
            if budget == "none":
                figure(fig, key + "_traced_vs_data", "no budget: traced peak / (snapshot + cube)",
                       r["traced"] / data)
                continue
            b = parse_memory(budget)
            figure(fig, key + "_traced", f"budget {budget}: traced peak / budget",
                   r["traced"] / b, "<=", 1.0)
            figure(fig, key + "_rss", f"budget {budget}: RSS rise / budget", r["rss_rise"] / b,
                   "<=", 1.0)
            figure(fig, key + "_traced_vs_data",
                   f"budget {budget}: traced peak / (snapshot + cube)", r["traced"] / data)


# ---- dask -------------------------------------------------------------------------------------
def same_tiles_budget(shape, n_channels, rows, workers):
    """The memory budget whose tile plan has ``rows`` x rows per tile with ``workers`` tiles
    in flight, so every executor runs the same tiles."""
    from synth.transfer.tiles import plan_tiles
    default = plan_tiles(shape, n_channels, None, n_cubes=1)
    row = default.tile_bytes // default.tile_rows
    return int(default.fixed_bytes + workers * rows * row + row // 2)


def _burn(reps):
    """A fixed amount of CPU work: numpy exp on 2^22 float64 numbers, ``reps`` times, in
    cache-sized pieces (compute-bound, not memory-bound)."""
    x = np.linspace(-5.0, 0.0, 1 << 16)
    for _ in range(reps * 64):
        np.exp(x, out=x)
        x -= 1.0
    return float(x[0])


def machine_speedup(reps=30):
    """Speed-up of two identical CPU-bound jobs in 2 processes vs one after the other in 1,
    measured now: the ceiling any 2-worker run can reach on the cores left free by others."""
    from concurrent.futures import ProcessPoolExecutor
    times = {}
    for procs in (1, 2):
        with ProcessPoolExecutor(procs) as pool:
            list(pool.map(_burn, [1] * procs))  # start the processes
            t0 = time.perf_counter()
            list(pool.map(_burn, [reps, reps]))
            times[procs] = time.perf_counter() - t0
    return times[1] / times[2]


def _cluster_times(snap, sources, grid, rows, n_channels):
    """{(source name, workers): seconds} of the synthesis on 1- and 2-worker clusters."""
    from synth.parallel import executor_context
    from synth.snapshot.demo import demo_cloud
    from synth.transfer.synthesize import synthesize_products
    kw = grid_kw(grid)
    times = {}
    for workers in (1, 2):
        with executor_context(workers=workers) as ex:
            pids = ex.client.run(warm, grid, 1)  # numba compiled (or cache-loaded) everywhere
            small = demo_cloud(cells=32, seed=SEED)  # and the scatter/submit path warmed
            synthesize_products(small, line(), ABUNDANCE, executor=ex, **kw)
            budget = same_tiles_budget(snap.shape, n_channels, rows, workers)
            for name, source in sources.items():
                res, t = timed(synthesize_products, source, line(), ABUNDANCE, executor=ex,
                               memory=budget, **kw)
                times[name, workers] = t
                print(f"{workers} worker(s) {sorted(pids.values())}, snapshot {name}: "
                      f"{res.stats['tiles']} tiles, {t:.2f} s", flush=True)
    return times


def part_dask(n, n_channels, fig):
    from synth.snapshot.demo import demo_cloud
    from synth.snapshot.lazy import SnapshotFile
    from synth.transfer.synthesize import synthesize_products
    import numba
    logging.getLogger("distributed").setLevel(logging.ERROR)  # nanny shutdown chatter
    snap = demo_cloud(cells=n, seed=SEED)
    grid = channel_grid(snap, n_channels)
    warm(grid)
    rows = max(1, n // 16)
    res, t_serial = timed(synthesize_products, snap, line(), ABUNDANCE,
                          memory=same_tiles_budget(snap.shape, n_channels, rows, 1),
                          **grid_kw(grid))
    print(f"serial: {res.stats['tiles']} tiles, {t_serial:.2f} s", flush=True)
    ceiling = [machine_speedup()]
    with tempfile.TemporaryDirectory(prefix="synth-bench-") as tmp:
        path = os.path.join(tmp, f"cloud{n}.h5")
        write_hdf5(snap, path)
        sources = {"in memory": snap, "in HDF5": SnapshotFile(
            path, sigma_turb=float(snap.sigma_turb_cms) / 1e5 * u.km / u.s)}
        times = _cluster_times(snap, sources, grid, rows, n_channels)
    ceiling = float(np.mean(ceiling + [machine_speedup()]))  # before and after the timings
    print(f"grid {n}^3 into {n_channels} channels; serial run with {numba.get_num_threads()} "
          f"numba threads on {os.cpu_count()} cores")
    figure(fig, "serial_s", "serial in-process time [s]", t_serial)
    for key, name in (("", "in memory"), ("_file", "in HDF5")):
        t1, t2 = times[name, 1], times[name, 2]
        figure(fig, f"dask1{key}_s", f"dask 1 worker time, snapshot {name} [s]", t1)
        figure(fig, f"dask2{key}_s", f"dask 2 workers time, snapshot {name} [s]", t2)
        figure(fig, f"dask_speedup{key}", f"dask speed-up 1 -> 2 workers, snapshot {name}",
               t1 / t2, ">=", 1.6)
        figure(fig, f"dask_vs_ceiling{key}",
               f"dask speed-up, snapshot {name} / plain 2-process", t1 / t2 / ceiling)
    figure(fig, "dask2_vs_serial", "serial time / dask 2 workers time (in memory)",
           t_serial / times["in memory", 2])
    figure(fig, "machine_speedup", "plain 2-process speed-up of numpy work", ceiling,
           note=f"  (load average {os.getloadavg()[0]:.1f})")


def main(argv=None):
    """Run the chosen parts; returns {key: {label, value, op, target}} of the printed figures."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=256)
    ap.add_argument("--channels", type=int, default=128)
    ap.add_argument("--quick", action="store_true", help="n = 96 (scaling 48 -> 96)")
    ap.add_argument("--part", choices=PARTS, action="append")
    ap.add_argument("--budgets", default=",".join(BUDGETS))
    ap.add_argument("--json", help="also write the figures to this JSON file")
    ap.add_argument("--child-memory", nargs=3, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child_memory:
        path, budget, extra = args.child_memory
        *grid, sigma_kms = json.loads(extra)
        print(json.dumps(measure_budget(path, budget, (grid[0], grid[1], int(grid[2])),
                                        sigma_kms)))
        return {}
    n = 96 if args.quick else args.n
    fig = {}
    for part in args.part or PARTS:
        print(f"--- {part} ---", flush=True)
        if part == "scaling":
            part_scaling(n, args.channels, fig)
        elif part == "memory":
            part_memory(n, args.channels, args.budgets.split(","), fig)
        else:
            part_dask(n, args.channels, fig)
    if args.json:
        with open(args.json, "w") as f:
            json.dump(fig, f, indent=1)
    return fig


if __name__ == "__main__":
    main()
