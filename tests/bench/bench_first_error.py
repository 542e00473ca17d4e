"""Time from start to the first error for a bad [[setup]] on a 128^3 snapshot file.

The config has two tracers (one LVG) and an array setup without `antennas`. Before the
preflight pass (synth.preflight) this error came only after both tracers were synthesised;
now it comes before the snapshot is read. The figure is the wall time of `synth run` (a fresh
process, so imports included) until it exits with status 2, next to the time of a full tiny
run (demo cloud of 16^3, one tracer, no setups) measured in the same session.

    python tests/bench/bench_first_error.py            # 128^3 (goal: first error < 1 s)
    python tests/bench/bench_first_error.py --n 64
"""

import argparse
import os
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

BAD = """
[cloud]
source = "cloud.h5"
[sky]
distance_pc = 2000
[channels]
width_kms = 0.2
[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6
[[tracer]]
species = "C18O"
transition = "1-0"
abundance = 2e-7
excitation = "lvg"
[[setup]]
name = "arr"
kind = "array"
latitude_deg = 8
tsys_k = 90
integration_time_h = 1
"""

TINY = """
[cloud]
source = "demo"
cells = 16
[sky]
distance_pc = 2000
[channels]
width_kms = 0.5
[[tracer]]
species = "13CO"
transition = "1-0"
abundance = 2e-6
[output]
figures = false
"""


def _timed(argv, cwd):
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "synth"] + argv, cwd=cwd, env=env,
                          capture_output=True, text=True)
    return time.perf_counter() - t0, proc


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=128, help="cells per axis of the snapshot")
    args = ap.parse_args()
    sys.path.insert(0, ROOT)
    from synth.snapshot.demo import demo_cloud
    from synth.snapshot.readers import write_hdf5
    with tempfile.TemporaryDirectory() as tmp:
        write_hdf5(demo_cloud(cells=args.n, seed=1), os.path.join(tmp, "cloud.h5"))
        with open(os.path.join(tmp, "bad.toml"), "w") as fh:
            fh.write(BAD)
        with open(os.path.join(tmp, "tiny.toml"), "w") as fh:
            fh.write(TINY)
        t_err, proc = _timed(["run", "bad.toml", "--out", "out", "--quiet"], tmp)
        assert proc.returncode == 2, proc.stderr
        t_tiny, done = _timed(["run", "tiny.toml", "--out", "tiny", "--quiet"], tmp)
        assert done.returncode == 0, done.stderr
        left = sorted(set(os.listdir(tmp)) - {"cloud.h5", "bad.toml", "tiny.toml", "tiny"})
    print(f"first error on a {args.n}^3 snapshot: {t_err:.2f} s (goal < 1 s; before the "
          "preflight pass the same error came after both tracers were synthesised)")
    print(f"  message: {proc.stderr.strip().splitlines()[-1]}")
    print(f"full tiny run (16^3, one tracer): {t_tiny:.2f} s; ratio first error / tiny run "
          f"= {t_err / t_tiny:.2f}")
    print(f"files left beside the run: {left or 'none'}")


if __name__ == "__main__":
    main()
