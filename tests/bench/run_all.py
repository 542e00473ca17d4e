"""Run every benchmark in tests/bench/ and print one summary table of ratios vs targets.

Each benchmark runs in its own subprocess (clean memory accounting), its output echoed as it
arrives; the figures are then read back (bench_scale.py writes JSON, the others' printed
lines are parsed) into one table: figure, measured value, target, pass/fail.
Usage:  python tests/bench/run_all.py [--quick] [--only NAME ...]
Exit status 1 if a benchmark failed to run or a figure missed its target.
"""

import argparse
import json
import os
import re
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
_NUM = r"([-+0-9.eE]+|nan|inf)"

# name: (script, full-size args, quick args, [(label, regex of one printed figure)])
# The regexes pick the value and, where the script prints one, the target (op, number).
OTHERS = {
    "lte": ("bench_lte.py", [], ["--n", "96", "--nz", "64"], [
        ("LTE synthesis / floor (exp over reached pairs), demo cloud",
         rf"\[demo\] numpy exp on reached pairs .*ratio synth/floor = {_NUM}\s*\(target (<=|>=) {_NUM}\)"),
        ("LTE kernel / floor, demo cloud", rf"\[demo\] kernel / floor = {_NUM}"),
        ("LTE synthesis / floor in CPU seconds (per-core cost), demo cloud",
         rf"\[demo\] CPU seconds.*per-core cost synth/floor = {_NUM}"),
        ("LTE synthesis / numpy exp (cells x channels), demo cloud",
         rf"\[demo\] numpy exp on cells x channels .*ratio synth/exp = {_NUM}"),
        ("LTE synthesis / floor, sine flow",
         rf"\[sine\] numpy exp on reached pairs .*ratio synth/floor = {_NUM}\s*\(target (<=|>=) {_NUM}\)"),
        ("LTE kernel / floor, sine flow", rf"\[sine\] kernel / floor = {_NUM}"),
        ("LTE synthesis / floor in CPU seconds (per-core cost), sine flow",
         rf"\[sine\] CPU seconds.*per-core cost synth/floor = {_NUM}"),
        ("LTE synthesis / numpy exp (cells x channels), sine flow",
         rf"\[sine\] numpy exp on cells x channels .*ratio synth/exp = {_NUM}"),
        ("LTE (snapshot + traced peak) / (snapshot + cube)",
         rf"snapshot \+ cube = .*ratio = {_NUM} \(target (<=|>=) {_NUM}\)"),
    ]),
    "lvg": ("bench_lvg.py", [], ["--n", "96"], [
        ("LVG / LTE synthesis time", rf"ratio LVG/LTE = {_NUM} \(target (<=|>=) {_NUM}\)"),
    ]),
    "observe": ("bench_observe.py", [], ["16"], [
        ("observe / bare gridder calls", rf"\) {_NUM} s; ratio {_NUM} \(target (<=|>=) {_NUM}\)"),
    ]),
    "deconvolve": ("bench_deconvolve.py", [], ["--quick"], [
        ("multi-scale / Högbom CLEAN time per channel", rf"multi-scale / Högbom = {_NUM}"),
        ("CLEAN channel loop, 1 thread / 2 threads",
         rf"channel loop with CLEAN.*speed-up {_NUM} \(target (<=|>=) {_NUM}\)"),
        ("19-pointing multi-scale mosaic: wall time on 2 threads (s)",
         rf"mosaic, multi-scale CLEAN.*wall time on 2 threads {_NUM} s"),
        ("19-pointing multi-scale mosaic, 1 thread / 2 threads",
         rf"mosaic, multi-scale CLEAN.*speed-up {_NUM} \(target (<=|>=) {_NUM}"),
        ("plain 1 -> 2 thread speed-up of GIL-free work (before the mosaic)",
         rf"GIL-free work just before and after: {_NUM},"),
    ]),
    "realisations": ("bench_realisations.py", [], ["--quick"], [
        ("10 noise realisations / one observation, array, no deconvolution",
         rf"no deconvolution: .*ratio N=10 / one = {_NUM} \(target (<=|>=) {_NUM}\)"),
        ("10 noise realisations / one observation, array with Högbom CLEAN",
         rf"Högbom CLEAN: .*ratio N=10 / one = {_NUM} \(target (<=|>=) {_NUM}\)"),
        ("10 noise realisations / one observation, dish map",
         rf"dish map: .*ratio N=10 / one = {_NUM} \(target (<=|>=) {_NUM}\)"),
    ]),
    "mosaic": ("bench_mosaic.py", [], ["--quick"], [
        ("time per pointing, 7 pointings / 1",
         rf"7-pointing mosaic / one pointing .*: {_NUM} \(target (<=|>=) {_NUM}\)"),
        ("time per pointing, 19 pointings / 1",
         rf"19-pointing mosaic / one pointing .*: {_NUM} \(target (<=|>=) {_NUM}\)"),
        ("256^3 run with a 19-pointing mosaic: wall time (s)", rf"wall time {_NUM} s"),
        ("256^3 run with a 19-pointing mosaic: peak RSS (MB)", rf"peak RSS {_NUM} MB"),
    ]),
    "stream": ("bench_stream.py", [], ["--size", "128", "--memory", "1GB"], [
        ("LTE + LVG from HDF5 under --memory: peak RSS / budget",
         rf"peak RSS / budget\s+{_NUM}\s+\(target (<=|>=) {_NUM}"),
        ("LTE + LVG from HDF5 under --memory: wall time (s)", rf"both tracers\s+{_NUM} s"),
    ]),
    "sweep": ("bench_sweep.py", [], ["--quick"], [
        ("sweep of 8 setups / 8 separate runs (time)",
         rf"sweep of 8 setups / 8 separate runs = {_NUM} \(target (<=|>=) {_NUM}\)"),
        ("synth demo cold (s)", rf"synth demo cold = {_NUM} s"),
        ("synth demo warm, ideal cubes reused (s)",
         rf"synth demo warm = {_NUM} s \(target (<=|>=) {_NUM}\)"),
        ("synth demo warm / cold", rf"synth demo warm / cold = {_NUM}"),
    ]),
}
SCALE_PARTS = ("scaling", "memory", "dask")


def run(cmd):
    """Run ``cmd``, echoing its merged output line by line; returns (exit code, text, s)."""
    print(f"\n=== {' '.join(os.path.relpath(c, os.getcwd()) if c.endswith('.py') else c for c in cmd[1:])}",
          flush=True)
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                            bufsize=1)
    lines = []
    for row in proc.stdout:
        print("  " + row, end="", flush=True)
        lines.append(row)
    return proc.wait(), "".join(lines), time.perf_counter() - t0


def parse(text, patterns):
    """[(label, value or None, op, target)] from the printed lines."""
    rows = []
    for label, pattern in patterns:
        m = re.search(pattern, text)
        if m is None:
            rows.append((label, None, None, None))
            continue
        groups = m.groups()
        if label.startswith("observe"):  # the first number is the observe time
            groups = groups[1:]
        value = float(groups[0])
        op, target = (groups[1], float(groups[2])) if len(groups) >= 3 else (None, None)
        rows.append((label, value, op, target))
    return rows


def verdict(value, op, target):
    if value is None:
        return "MISSING"
    if op is None:
        return "-"
    ok = value <= target if op == "<=" else value >= target
    return "pass" if ok else "FAIL"


def run_others(names, quick):
    rows = []
    for name in names:
        script, full, short, patterns = OTHERS[name]
        code, text, secs = run([sys.executable, os.path.join(HERE, script)]
                               + (short if quick else full))
        if code != 0:
            rows.append((f"{name}: exited with status {code}", None, None, None, name))
            continue
        rows += [(*r, name) for r in parse(text, patterns)]
    return rows


def run_scale(parts, quick):
    rows = []
    for part in parts:
        with tempfile.TemporaryDirectory(prefix="synth-bench-") as tmp:
            out = os.path.join(tmp, "figures.json")
            code, _, _ = run([sys.executable, os.path.join(HERE, "bench_scale.py"), "--part",
                              part, "--json", out] + (["--quick"] if quick else []))
            if code != 0 or not os.path.exists(out):
                rows.append((f"{part}: exited with status {code}", None, None, None, part))
                continue
            with open(out) as f:
                figures = json.load(f)
        rows += [(fig["label"], fig["value"], fig["op"], fig["target"], part)
                 for fig in figures.values()]
    return rows


def table(rows):
    """The summary table as text."""
    width = max(len(r[0]) for r in rows)
    head = f"{'figure':<{width}}  {'measured':>10}  {'target':>8}  result  benchmark"
    lines = [head, "-" * len(head)]
    for label, value, op, target, name in rows:
        val = "-" if value is None else f"{value:10.3f}"
        tgt = f"{op} {target:g}" if op else ""
        lines.append(f"{label:<{width}}  {val:>10}  {tgt:>8}  {verdict(value, op, target):6s}  "
                     f"{name}")
    return "\n".join(lines)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes for a fast check")
    ap.add_argument("--only", nargs="+", choices=list(OTHERS) + list(SCALE_PARTS),
                    help="run only these benchmarks")
    args = ap.parse_args(argv)
    chosen = args.only or list(OTHERS) + list(SCALE_PARTS)
    t0 = time.perf_counter()
    load0 = os.getloadavg()
    rows = run_others([c for c in chosen if c in OTHERS], args.quick)
    rows += run_scale([c for c in chosen if c in SCALE_PARTS], args.quick)
    print(f"\n=== summary ({'quick' if args.quick else 'full size'}; "
          f"{time.perf_counter() - t0:.0f} s; {os.cpu_count()} cores; load average "
          f"{load0[0]:.1f} at start, {os.getloadavg()[0]:.1f} at end)")
    print(table(rows))
    bad = [r for r in rows if verdict(*r[1:4]) in ("FAIL", "MISSING")]
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
