"""Benchmark: LTE synthesis of an n^3 snapshot into 128 channels (issue: core, speed).

Prints the synthesis time, the peak memory (tracemalloc of numpy allocations plus the
process RSS high-water mark), and ratios against references measured in the same run:
  * numpy ``exp`` once over N_cells x N_channels float32 values (chunked, timed in total);
  * numpy ``exp`` over just the cell-channel pairs the profiles reach (the floor any method pays).
Usage:  python tests/bench/bench_lte.py [--n 256] [--channels 128]
Not collected by pytest (speed is measured here, never in timed tests).
"""

import argparse
import resource
import time
import tracemalloc

import numpy as np
import astropy.units as u


def snapshot(n, seed=3):
    import synth
    try:
        return synth.demo_cloud(cells=n, seed=seed)
    except (ImportError, AttributeError):  # demo cloud not available: a random stand-in
        rng = np.random.default_rng(seed)
        shape = (n, n, n)
        dens = np.exp(rng.normal(np.log(3e3), 1.0, shape)).astype(np.float32)
        temp = np.clip(10 + 40 * rng.random(shape), 10, 60).astype(np.float32)
        vel = (rng.normal(0, 2.0, (3,) + shape)).astype(np.float32)
        return synth.Snapshot(n_h2=dens * u.cm**-3, t_kin=temp * u.K, velocity=vel * u.km / u.s,
                              cell_size=4 / n * u.pc, sigma_turb=0.3 * u.km / u.s)


def exp_reference(n_values, chunk=1 << 24):
    """Seconds numpy takes to evaluate exp on ``n_values`` float32 numbers (in chunks)."""
    rng = np.random.default_rng(0)
    x = -rng.random(chunk, dtype=np.float32) * 10
    out = np.empty_like(x)
    t0 = time.perf_counter()
    done = 0
    while done < n_values:
        m = min(chunk, n_values - done)
        np.exp(x[:m], out=out[:m])
        done += m
    return time.perf_counter() - t0


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=256)
    ap.add_argument("--channels", type=int, default=128)
    args = ap.parse_args()
    import synth
    from synth.transfer.kernel import N_SIGMA
    snap = snapshot(args.n)
    line = synth.Line("13CO", "1-0")
    vz = snap.velocity_cms[2] / 1e5
    lo, hi = np.percentile(vz, [0.5, 99.5])
    width = (hi - lo) / args.channels
    kw = dict(distance=2.4 * u.kpc, channel_width=width * u.km / u.s,
              velocity_range=(lo, lo + width * args.channels) * u.km / u.s)
    # warm-up (numba compilation) on a small piece
    from synth.transfer.synthesize import synthesize
    small = snap._replace(n_h2_cm3=snap.n_h2_cm3[:4], t_kin_k=snap.t_kin_k[:4],
                          velocity_cms=snap.velocity_cms[:, :4],
                          sigma_turb_cms=snap.sigma_turb_cms if np.ndim(snap.sigma_turb_cms) == 0
                          else snap.sigma_turb_cms[:4], abundance=None)
    synthesize(small, line, 2e-6, **kw)
    tracemalloc.start()
    t0 = time.perf_counter()
    cube = synthesize(snap, line, 2e-6, **kw)
    t_syn = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    n_cells = int(np.prod(snap.shape))
    n_ch = cube.shape[0]
    t_exp = exp_reference(n_cells * n_ch)
    # mean number of channels each cell's profile reaches (same window as the kernel)
    from synth.radiation import AMU_CGS, K_CGS
    sig = np.sqrt(K_CGS * snap.t_kin_k / (line.mass_amu * AMU_CGS)
                  + np.square(snap.sigma_turb_cms)) / 1e5
    dlt = np.abs(np.gradient(snap.velocity_cms[2], axis=2)) / 1e5
    reach = float(np.mean(np.minimum(2 * (N_SIGMA * sig + dlt / 2) / width + 1, n_ch)))
    t_floor = exp_reference(int(n_cells * reach))
    data_bytes = snap.nbytes + cube.shape[0] * cube.shape[1] * cube.shape[2] * 4
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(f"grid {args.n}^3 = {n_cells} cells, {n_ch} channels, channel width {width:.3f} km/s")
    print(f"LTE synthesis time               {t_syn:8.2f} s")
    print(f"numpy exp on cells x channels    {t_exp:8.2f} s   ratio synth/exp = {t_syn / t_exp:.2f}  (target <= 1.0)")
    print(f"mean channels reached per cell   {reach:8.1f}")
    print(f"numpy exp on reached pairs only  {t_floor:8.2f} s   ratio synth/floor = {t_syn / t_floor:.2f}")
    total = snap.nbytes + peak
    print(f"peak memory: snapshot {snap.nbytes / 2**20:.1f} MiB + traced during synthesis "
          f"{peak / 2**20:.1f} MiB = {total / 2**20:.1f} MiB; snapshot + cube = "
          f"{data_bytes / 2**20:.1f} MiB; ratio = {total / data_bytes:.2f} (target <= 1.5)")
    print(f"process max RSS                  {rss / 2**20:8.1f} MiB")


if __name__ == "__main__":
    main()
