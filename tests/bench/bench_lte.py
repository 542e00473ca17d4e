"""Benchmark: LTE synthesis time against the floor, on two workloads (issue: kernel near its floor).

Workloads:
  * ``demo``: the n^3 demo cloud (default 256^3) into 128 channels spanning the 0.5-99.5
    percentiles of v_z (the project's benchmark since the first kernel);
  * ``sine``: an n^2 x nz box (default 256^2 x 128) with a sine flow of several km/s across the
    box, sigma_turb 0.3 km/s, 0.08 km/s channels (a stronger velocity field: more channels
    reached per cell, a larger velocity change across cells).

Printed, each measured in the same run:
  * the synthesis time (``synthesize``, excitation + kernel + cube assembly) and, of it, the
    time inside the line-of-sight kernel (``transfer_columns``);
  * the floor: one numpy ``exp`` (float32, in chunks of 2^24) over exactly as many values as
    there are cell-channel pairs the profiles reach: per cell, the channels the kernel visits
    (centroid +- the kernel's window, t_w dispersions + half the velocity change across the cell,
    clipped to the channel range), counted from the kernel's own inputs in a second, untimed pass;
  * numpy ``exp`` over all cells x channels;
  * the ratios synthesis / floor (target <= 1.5), kernel / floor, synthesis / exp(all);
  * a float64 bound: numpy's float64 ``expm1`` once per reached pair (the transfer step of
    the kernel, which keeps float64 for its accuracy, without any profile), divided by the
    number of cores; its ratio to the floor is what float64 arithmetic costs at least;
  * accuracy on 256 random columns of the first block: the kernel, and the formal solution
    run in float32, each against the formal solution over every (sub-)channel in float64
    (what a float32 kernel would give up; see precision_check);
  * the same from CPU seconds (process time, all threads): the per-core cost, which a busy
    shared machine distorts less than wall time (the synthesis runs on every core, the
    reference on one; on an idle 2-core machine the wall ratio is about half the CPU ratio
    for the parts that use both cores);
  * for ``demo``: peak memory (tracemalloc of numpy allocations during the synthesis) against
    the snapshot + cube bytes (target <= 1.5), and the process RSS high-water mark.
The numpy exp reference depends on the SIMD path numpy dispatches (AVX-512 vs AVX2 vs SSE
differ by ~3-6x on the same machine); the path is printed beside it.
Usage:  python tests/bench/bench_lte.py [--workload demo|sine|both] [--n 256] [--nz 128]
        [--channels 128]
Not collected by pytest (speed is measured here, never in timed tests).
"""

import argparse
import os
import resource
import time
import tracemalloc

import numpy as np
import astropy.units as u

#: Sine workload: flow amplitude (km/s), turbulent dispersion (km/s), channel width (km/s).
SINE_AMPLITUDE_KMS = 4.0
SINE_SIGMA_KMS = 0.3
SINE_CHANNEL_KMS = 0.08


def demo_workload(n, channels):
    import synth
    snap = synth.demo_cloud(cells=n, seed=3)
    vz = snap.velocity_cms[2] / 1e5
    lo, hi = np.percentile(vz, [0.5, 99.5])
    width = (hi - lo) / channels
    kw = dict(distance=2.4 * u.kpc, channel_width=width * u.km / u.s,
              velocity_range=(lo, lo + width * channels) * u.km / u.s)
    return snap, kw


def sine_workload(n, nz, seed=5):
    """v_z = A sin(2 pi x/L) cos(2 pi z/L) + (A/2) sin(2 pi (y + z)/L): up to 1.5 A across the
    box and a velocity change of ~2 pi A / nz per cell along the line of sight (invented)."""
    import synth
    rng = np.random.default_rng(seed)
    x = ((np.arange(n) + 0.5) / n).astype(np.float32)
    z = ((np.arange(nz) + 0.5) / nz).astype(np.float32)
    a = SINE_AMPLITUDE_KMS
    vz = (a * np.sin(2 * np.pi * x)[:, None, None] * np.cos(2 * np.pi * z)[None, None, :]
          + 0.5 * a * np.sin(2 * np.pi * (x[None, :, None] + z[None, None, :])))
    vel = np.zeros((3, n, n, nz), dtype=np.float32)
    vel[2] = vz
    dens = np.exp(rng.normal(np.log(3e3), 0.8, (n, n, nz))).astype(np.float32)
    temp = np.full((n, n, nz), 15.0, dtype=np.float32)
    snap = synth.Snapshot(n_h2=dens * u.cm**-3, t_kin=temp * u.K, velocity=vel * u.km / u.s,
                          cell_size=4 / n * u.pc, sigma_turb=SINE_SIGMA_KMS * u.km / u.s)
    w = SINE_CHANNEL_KMS
    lo = -1.5 * a - 2.0
    nch = int(np.ceil((-2 * lo) / w))
    kw = dict(distance=2.4 * u.kpc, channel_width=w * u.km / u.s,
              velocity_range=(lo, lo + w * nch) * u.km / u.s)
    return snap, kw


def exp_reference(n_values, chunk=1 << 24, func=np.exp, dtype=np.float32):
    """Seconds numpy takes to evaluate ``func`` (exp) on ``n_values`` numbers of ``dtype``
    (float32), in chunks: (wall, CPU)."""
    rng = np.random.default_rng(0)
    x = -rng.random(chunk).astype(dtype) * 10
    out = np.empty_like(x)
    t0, c0 = time.perf_counter(), time.process_time()
    done = 0
    while done < n_values:
        m = min(chunk, n_values - done)
        func(x[:m], out=out[:m])
        done += m
    return time.perf_counter() - t0, time.process_time() - c0


def numpy_simd():
    """The widest SIMD extension numpy dispatches to on this CPU (for the exp reference)."""
    try:
        from numpy._core._multiarray_umath import __cpu_features__ as feats
    except ImportError:  # numpy < 2
        from numpy.core._multiarray_umath import __cpu_features__ as feats
    for name in ("AVX512_SKX", "AVX512F", "AVX2", "AVX", "SSE42"):
        if feats.get(name):
            return name
    return "baseline"


def reached_pairs(tau_int, v0, sigma, delta, e0, dv, nch):
    """Cell-channel pairs the kernel visits (channels, not sub-channels), its window."""
    from synth.transfer.kernel import window_halfwidth
    v = v0.astype(np.float64)
    half = window_halfwidth(tau_int, sigma, delta)
    k_lo = np.clip(np.floor((v - half - e0) / dv), 0, nch)
    k_hi = np.clip(np.ceil((v + half - e0) / dv), 0, nch)
    return int(np.sum(np.where(tau_int != 0, np.maximum(k_hi - k_lo, 0), 0)))


def precision_check(tau_int, src, v0, sigma, delta, e0, dv, nch, j_bg, ncols=256, seed=0):
    """What float32 arithmetic in the transfer would cost, on ``ncols`` random columns of a
    block: the formal solution over every (sub-)channel (no window) in float64 numpy, the
    profile from the kernel's own cumulative_profile and its sub-channel counts, against
    (a) the kernel and (b) the same formal solution run in float32 (float32 expm1 and
    products, the float64 optical depths rounded to float32). Returns the largest error
    of each over the columns, relative to each column's peak |T_B|."""
    from synth.transfer.kernel import cumulative_profile, sub_channels, transfer_columns
    m_all = sub_channels(tau_int, sigma, dv)
    cols = np.random.default_rng(seed).choice(tau_int.shape[0], min(ncols, tau_int.shape[0]),
                                              replace=False)
    got = np.empty((cols.size, nch), np.float32)
    transfer_columns(tau_int[cols], src[cols], v0[cols], sigma[cols], delta[cols], e0, dv, nch,
                     j_bg, got, np.zeros((0, 0), np.float32))
    err = [0.0, 0.0]
    for i, c in enumerate(cols):
        m = int(m_all[c])
        edges = e0 + dv / m * np.arange(nch * m + 1)
        zs = np.flatnonzero(tau_int[c])
        tau = np.array([tau_int[c, z] * m / dv * np.diff(
            cumulative_profile(edges, v0[c, z], sigma[c, z], delta[c, z])) for z in zs])
        res = []
        for dt in (np.float64, np.float32):
            trans, inten = np.ones(nch * m, dt), np.zeros(nch * m, dt)
            for k, z in enumerate(zs):
                em = np.expm1(-tau[k].astype(dt))
                inten -= dt(src[c, z]) * em * trans
                trans += trans * em
            t_b = (inten + dt(j_bg) * trans).astype(np.float64).reshape(nch, m).mean(axis=1)
            res.append(t_b - j_bg)
        peak = np.abs(res[0]).max()
        if peak > 0:
            err[0] = max(err[0], float(np.abs(got[i] - res[0]).max() / peak))
            err[1] = max(err[1], float(np.abs(res[1] - res[0]).max() / peak))
    return tuple(err)


def run(name, snap, kw, memory):
    import synth
    from synth.transfer import synthesize as S
    from synth.transfer.kernel import sub_channels
    line = synth.Line("13CO", "1-0")
    # warm-up (numba compilation or cache load) on a small piece
    small = snap._replace(n_h2_cm3=snap.n_h2_cm3[:2], t_kin_k=snap.t_kin_k[:2],
                          velocity_cms=snap.velocity_cms[:, :2],
                          sigma_turb_cms=snap.sigma_turb_cms if np.ndim(snap.sigma_turb_cms) == 0
                          else snap.sigma_turb_cms[:2], abundance=None)
    S.synthesize(small, line, 2e-6, **kw)
    kernel = S.transfer_columns
    spent = [0.0, 0.0]

    def timed(*args):
        t0, c0 = time.perf_counter(), time.process_time()
        kernel(*args)
        spent[0] += time.perf_counter() - t0
        spent[1] += time.process_time() - c0

    S.transfer_columns = timed
    try:
        if memory:
            tracemalloc.start()
        t0, c0 = time.perf_counter(), time.process_time()
        cube = S.synthesize(snap, line, 2e-6, **kw)
        t_syn, c_syn = time.perf_counter() - t0, time.process_time() - c0
        peak = tracemalloc.get_traced_memory()[1] if memory else 0
        if memory:
            tracemalloc.stop()
        t_kernel, c_kernel = spent
        counts = [0, 0, 0]
        precision = []

        def count(tau_int, src, v0, sigma, delta, e0, dv, nch, j_bg, out, tau_out):
            if not precision:
                precision.append(precision_check(tau_int, src, v0, sigma, delta, e0, dv, nch,
                                                 j_bg))
            out[...] = 0.0  # this pass only counts; the cube it makes is discarded
            tau_out[...] = 0.0
            counts[0] += reached_pairs(tau_int, v0, sigma, delta, e0, dv, nch)
            m = sub_channels(tau_int, sigma, dv)
            emitting = np.count_nonzero(tau_int, axis=1)
            counts[1] += int(np.sum(m * emitting))
            counts[2] += int(emitting.sum())

        S.transfer_columns = count
        S.synthesize(snap, line, 2e-6, **kw)
    finally:
        S.transfer_columns = kernel
    n_cells = int(np.prod(snap.shape))
    n_ch = cube.shape[0]
    width = kw["channel_width"].to_value(u.km / u.s)
    pairs = counts[0]
    t_floor, c_floor = exp_reference(pairs)
    t_exp = exp_reference(n_cells * n_ch)[0]
    # what the float64 arithmetic of the kernel costs at least: numpy's float64 expm1 once per
    # reached pair (the transfer step alone, no profile), spread perfectly over every core
    import numba
    cores = numba.get_num_threads()
    t_e64 = exp_reference(pairs, func=np.expm1, dtype=np.float64)[0] / cores
    shape = "x".join(str(s) for s in snap.shape)
    print(f"[{name}] grid {shape} = {n_cells} cells, {n_ch} channels of {width:.3f} km/s")
    print(f"[{name}] LTE synthesis time               {t_syn:8.2f} s (of it, in the kernel "
          f"{t_kernel:.2f} s)")
    print(f"[{name}] reached cell-channel pairs       {pairs:.4g} ({pairs / n_cells:.1f} per cell;"
          f" sub-channels per channel, mean over cells {counts[1] / max(1, counts[2]):.2f})")
    print(f"[{name}] numpy exp on reached pairs (floor) {t_floor:6.2f} s   "
          f"ratio synth/floor = {t_syn / t_floor:.2f}  (target <= 1.5)")
    print(f"[{name}] kernel / floor = {t_kernel / t_floor:.2f};  "
          f"ns per reached pair: synthesis {t_syn / pairs * 1e9:.2f}, floor "
          f"{t_floor / pairs * 1e9:.2f}")
    print(f"[{name}] CPU seconds (all threads): synthesis {c_syn:.2f}, kernel {c_kernel:.2f}, "
          f"floor {c_floor:.2f}; per-core cost synth/floor = {c_syn / c_floor:.2f}, "
          f"kernel/floor = {c_kernel / c_floor:.2f}")
    print(f"[{name}] float64 bound: numpy float64 expm1 on reached pairs / {cores} cores "
          f"{t_e64:6.2f} s   bound/floor = {t_e64 / t_floor:.2f}  (the transfer step alone, "
          "before any profile)")
    err_kernel, err_f32 = precision[0]
    print(f"[{name}] accuracy on 256 columns, max |error| / column peak, against the formal "
          f"solution over every channel in float64: this kernel {err_kernel:.1e}; the same "
          f"solution in float32 {err_f32:.1e} (float32 output rounding 6e-8)")
    print(f"[{name}] numpy exp on cells x channels    {t_exp:8.2f} s   "
          f"ratio synth/exp = {t_syn / t_exp:.2f}")
    if memory:
        data_bytes = snap.nbytes + cube.shape[0] * cube.shape[1] * cube.shape[2] * 4
        total = snap.nbytes + peak
        print(f"[{name}] peak memory: snapshot {snap.nbytes / 2**20:.1f} MiB + traced during "
              f"synthesis {peak / 2**20:.1f} MiB = {total / 2**20:.1f} MiB; snapshot + cube = "
              f"{data_bytes / 2**20:.1f} MiB; ratio = {total / data_bytes:.2f} (target <= 1.5)")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workload", choices=("demo", "sine", "both"), default="both")
    ap.add_argument("--n", type=int, default=256, help="cells per axis (sine: per sky axis)")
    ap.add_argument("--nz", type=int, default=128, help="sine: cells along the line of sight")
    ap.add_argument("--channels", type=int, default=128, help="demo: channels")
    args = ap.parse_args()
    import numba
    print(f"numpy {np.__version__} exp on {numpy_simd()}; numba {numba.__version__} on "
          f"{numba.get_num_threads()} threads; load average {os.getloadavg()[0]:.1f}")
    if args.workload in ("demo", "both"):
        snap, kw = demo_workload(args.n, args.channels)
        run("demo", snap, kw, memory=True)
        del snap
    if args.workload in ("sine", "both"):
        snap, kw = sine_workload(args.n, args.nz)
        run("sine", snap, kw, memory=False)
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(f"process max RSS                  {rss / 2**20:8.1f} MiB")


if __name__ == "__main__":
    main()
