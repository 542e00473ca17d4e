"""Benchmark: LVG vs LTE synthesis of an n^3 snapshot into 128 channels (issue: non-LTE, speed).

Times, in the same run and on the same snapshot and channel grid:
  * ``synthesize(..., excitation="lte")``;
  * ``synthesize(..., excitation="lvg")`` (Sobolev columns, refined population table, transfer);
  * ``lvg_excitation`` alone, with its table size, direct solves and achieved T_R accuracy.
Prints the ratio LVG / LTE synthesis time (target <= 1.5).
Usage:  python tests/bench/bench_lvg.py [--n 256] [--channels 128] [--line "13CO 1-0"]
Not collected by pytest (speed is measured here, never in timed tests).
"""

import argparse
import time

import numpy as np
import astropy.units as u


def snapshot(n, seed=3):
    """The invented demo cloud, or a random stand-in if it is not available."""
    import synth
    try:
        return synth.demo_cloud(cells=n, seed=seed)
    except (ImportError, AttributeError):
        rng = np.random.default_rng(seed)
        shape = (n, n, n)
        dens = np.exp(rng.normal(np.log(3e3), 1.0, shape)).astype(np.float32)
        temp = np.clip(10 + 40 * rng.random(shape), 10, 60).astype(np.float32)
        vel = rng.normal(0, 2.0, (3,) + shape).astype(np.float32)
        return synth.Snapshot(n_h2=dens * u.cm**-3, t_kin=temp * u.K, velocity=vel * u.km / u.s,
                              cell_size=4 / n * u.pc, sigma_turb=0.3 * u.km / u.s)


def _small(snap, m=8):
    """A corner of the snapshot for the warm-up (numba compilation)."""
    sig = snap.sigma_turb_cms
    return snap._replace(n_h2_cm3=snap.n_h2_cm3[:m, :m, :m], t_kin_k=snap.t_kin_k[:m, :m, :m],
                         velocity_cms=snap.velocity_cms[:, :m, :m, :m],
                         sigma_turb_cms=sig if np.ndim(sig) == 0 else sig[:m, :m, :m],
                         abundance=None)


def _timed(fn, *args, **kw):
    t0 = time.perf_counter()
    out = fn(*args, **kw)
    return out, time.perf_counter() - t0


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=256)
    ap.add_argument("--channels", type=int, default=128)
    ap.add_argument("--line", default="13CO 1-0")
    ap.add_argument("--abundance", type=float, default=2e-6)
    args = ap.parse_args()
    import synth
    from synth.excitation.lvg import lvg_excitation
    species, transition = args.line.split()
    line = synth.Line(species, transition)
    snap = snapshot(args.n)
    vz = snap.velocity_cms[2] / 1e5
    lo, hi = np.percentile(vz, [0.5, 99.5])
    width = (hi - lo) / args.channels
    kw = dict(distance=2.4 * u.kpc, channel_width=width * u.km / u.s,
              velocity_range=(lo, lo + width * args.channels) * u.km / u.s)
    small = _small(snap)
    for method in ("lte", "lvg"):  # warm-up: numba compilation, cached molecular data
        synth.synthesize(small, line, args.abundance, excitation=method, **kw)
    cube_lte, t_lte = _timed(synth.synthesize, snap, line, args.abundance, excitation="lte", **kw)
    cube_lvg, t_lvg = _timed(synth.synthesize, snap, line, args.abundance, excitation="lvg", **kw)
    exc, t_exc = _timed(lvg_excitation, snap, line, args.abundance)
    info = exc.info
    a = cube_lte.unmasked_data[:].value
    b = cube_lvg.unmasked_data[:].value
    print(f"grid {args.n}^3 = {int(np.prod(snap.shape))} cells, {cube_lte.shape[0]} channels, "
          f"line {line}, abundance {args.abundance:g}")
    print(f"LTE synthesis time          {t_lte:8.2f} s")
    print(f"LVG synthesis time          {t_lvg:8.2f} s   ratio LVG/LTE = {t_lvg / t_lte:.2f} "
          "(target <= 1.5)")
    print(f"lvg_excitation alone        {t_exc:8.2f} s   table {info['table_shape']} = "
          f"{info['table_nodes']} nodes, {info['direct_solves']} direct solves, "
          f"{info['levels']} levels")
    print(f"table T_R error on {info['n_check']} random cells: {100 * info['table_error']:.3f} % "
          f"(goal {100 * info['accuracy']:.1f} %)")
    print(f"peak T_B: LTE {np.nanmax(a):.2f} K, LVG {np.nanmax(b):.2f} K; "
          f"sum LVG/LTE = {np.nansum(b) / np.nansum(a):.3f}")


if __name__ == "__main__":
    main()
