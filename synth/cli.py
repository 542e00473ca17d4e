"""Command line: argument parsing only; the work is done by synth.pipeline and the stages.

    synth demo --out DIR            the built-in demo (invented cloud, several tracers)
    synth run CONFIG --out DIR      a TOML run configuration
    synth lines [SPECIES ...]       built-in species and transitions
    synth excite SPECIES --density N --temperature T --column-per-width X
                                    one uniform zone in statistical equilibrium: critical and
                                    effective excitation densities, T_ex, tau, brightness
    synth ratios SPECIES --lines 2-1/1-0 --density LO HI --temperature LO HI
                 --column-per-width X --out DIR
                                    line-ratio grids of one uniform zone: CSV, figure, and
                                    which densities each pair responds to
    synth plan CONFIG               planning estimates per tracer x setup of a config
    synth compare A.fits B.fits     the same statistics of two cubes, side by side

Bad input prints one line ``synth: error: ...`` and exits with status 2. Ctrl-C (130) and
SIGTERM (143) remove the half-built run folder and temporary files and print one line.
"""

import argparse
import os
import sys

from . import __version__
from .errors import SynthError

__all__ = ["main", "build_parser"]


def _add_run_options(p):
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (must not exist)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--quiet", action="store_true", help="no progress bars or messages")
    p.add_argument("--reuse", action="append", default=None, metavar="EARLIER",
                   help="reuse the ideal cubes of an earlier run folder where their inputs are "
                        "unchanged (repeat for several folders; see docs/guide.md)")
    g = p.add_argument_group("execution")
    g.add_argument("--memory", metavar="SIZE", default=None,
                   help="memory budget for the transfer stage, e.g. 8GB or 512MiB "
                        "(snapshot files in HDF5/zarr/FITS are then read tile by tile)")
    g.add_argument("--workers", type=int, default=None, metavar="N",
                   help="run the tiles on a local dask cluster of N worker processes")
    g.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="run the tiles on an existing dask.distributed scheduler, e.g. "
                        "tcp://host:8786 (only a cluster you trust: it runs code this "
                        "process sends and sends back pickled results)")
    g.add_argument("--dashboard", action="store_true",
                   help="with --workers: serve the dask dashboard on 127.0.0.1 (a free port; "
                        "the link is printed)")


def build_parser():
    ap = argparse.ArgumentParser(
        prog="synth", description="Mock molecular-line observations of simulated clouds.")
    ap.add_argument("--version", action="version", version=f"synth {__version__}")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    p = sub.add_parser("demo", help="run the built-in demo on the invented cloud",
                       description="Build the invented demo cloud, synthesize its tracers and "
                                   "write cubes, figures and a summary into --out.")
    _add_run_options(p)
    p.add_argument("--cells", type=int, default=None, metavar="N",
                   help="cells per axis of the demo cloud (default: the demo config's)")

    p = sub.add_parser("run", help="run a TOML configuration",
                       description="Run a configuration file (see docs/config.md).")
    p.add_argument("config", help="path to a TOML configuration")
    _add_run_options(p)

    p = sub.add_parser("lines", help="list built-in species and transitions",
                       description="Frequency, E_up/k, A_ul and g_up of built-in transitions.")
    p.add_argument("species", nargs="*", help="only these species")
    p.add_argument("--max-lines", type=int, default=5, metavar="N",
                   help="transitions to show per species (default 5; 0 = all)")

    p = sub.add_parser("excite", help="excitation of one uniform zone, line by line",
                       description="Statistical equilibrium of one uniform zone with an "
                                   "escape probability. Per transition: the critical "
                                   "densities and the effective excitation density, then "
                                   "T_ex, optical depth, brightness and integrated intensity "
                                   "(see docs/lvg.md).")
    p.add_argument("species")
    p.add_argument("--density", type=float, required=True, metavar="CM-3", help="n(H2), cm^-3")
    p.add_argument("--temperature", type=float, required=True, metavar="K", help="T_kin, K")
    p.add_argument("--column-per-width", type=float, required=True, metavar="CM-2/(KM/S)",
                   help="N(species)/dv, cm^-2 per km/s (dv = FWHM)")
    p.add_argument("--geometry", default="expanding",
                   help='escape-probability geometry: "expanding" (Sobolev / LVG flow, the '
                        'default), "uniform-sphere" or "plane-slab"')
    p.add_argument("--ortho-para-ratio", type=float, default=None, metavar="R",
                   help="fixed H2 ortho/para ratio (default: thermal at --temperature)")
    p.add_argument("--datafile", default=None, help="a Leiden-format molecular data file")
    p.add_argument("--max-lines", type=int, default=10, metavar="N",
                   help="transitions to show (default 10; 0 = all)")
    _add_ratios(sub)
    _add_plan_compare(sub)
    return ap


def _add_ratios(sub):
    p = sub.add_parser("ratios", help="line-ratio grids of one uniform zone",
                       description="Integrated-intensity ratios of pairs of transitions over "
                                   "a grid of H2 density x kinetic temperature (x column per "
                                   "velocity width), from the one-zone escape-probability "
                                   "solver, with each line's critical and effective "
                                   "excitation densities. Writes line_ratios.csv and "
                                   "line_ratios.png into --out (see docs/line_ratios.md).")
    p.add_argument("species")
    p.add_argument("--lines", nargs="+", required=True, metavar="UP/LOW",
                   help="transition pairs NUMERATOR/DENOMINATOR, e.g. 2-1/1-0 3-2/1-0")
    p.add_argument("--density", nargs=2, type=float, required=True, metavar=("LO", "HI"),
                   help="n(H2) range, cm^-3 (log-spaced)")
    p.add_argument("--temperature", nargs=2, type=float, required=True, metavar=("LO", "HI"),
                   help="T_kin range, K (log-spaced)")
    p.add_argument("--column-per-width", nargs="+", type=float, required=True,
                   metavar="X", help="N(species)/dv values, cm^-2 per km/s (dv = FWHM)")
    p.add_argument("--density-points", type=int, default=41, metavar="N",
                   help="densities in the grid (default 41)")
    p.add_argument("--temperature-points", type=int, default=11, metavar="N",
                   help="temperatures in the grid (default 11)")
    p.add_argument("--geometry", default="expanding",
                   help='escape-probability geometry: "expanding" (default), "uniform-sphere" '
                        'or "plane-slab"')
    p.add_argument("--ortho-para-ratio", type=float, default=None, metavar="R",
                   help="fixed H2 ortho/para ratio (default: thermal)")
    p.add_argument("--datafile", default=None, help="a Leiden-format molecular data file")
    p.add_argument("--out", required=True, metavar="DIR",
                   help="write line_ratios.csv and line_ratios.png into this new folder")
    p.add_argument("--overwrite", action="store_true", help="replace an existing --out folder")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def _add_plan_compare(sub):
    p = sub.add_parser("plan", help="planning estimates per tracer and setup of a config",
                       description="Resolution, largest recoverable scale, noise per channel "
                                   "and time to reach a target S/N for every tracer x setup "
                                   "of a config (see docs/planning.md). Estimates only: the "
                                   "observatory's own official tools and policies decide a "
                                   "proposal.")
    p.add_argument("config", help="path to a TOML configuration with [[setup]] tables")
    p.add_argument("--target-snr", type=float, default=None, metavar="S/N",
                   help="S/N per channel to reach (default: [analysis].target_snr, 5)")
    p.add_argument("--percentile", type=float, default=None, metavar="P",
                   help="percentile of the emitting voxels to reach (default 50)")
    p.add_argument("--time", default=None, metavar="TIME",
                   help="time for the noise column, e.g. 1h or 30min (default: each setup's)")
    p.add_argument("--figures", default=None, metavar="DIR",
                   help="write layout_<setup>.png into DIR (a new or existing folder): each "
                        "setup's pointings over the first tracer's moment-0 map")
    p.add_argument("--from-run", default=None, metavar="DIR",
                   help="also print the observing time each statistic needs to reach its "
                        "[analysis] statistic_targets, from a finished run's noise "
                        "realisations (DIR/statistics.csv)")
    p = sub.add_parser("compare", help="compare two cubes with the same statistics",
                       description="Match two FITS cubes (unit, beam, grid, channels) and "
                                   "measure both the same way (see docs/report.md).")
    p.add_argument("cube_a", metavar="A.fits")
    p.add_argument("cube_b", metavar="B.fits")
    p.add_argument("--names", nargs=2, default=None, metavar=("A", "B"),
                   help="labels of the two cubes (default: the file names)")
    p.add_argument("--out", default=None, metavar="DIR",
                   help="write figures and comparison.json into this new folder")
    p.add_argument("--overwrite", action="store_true", help="replace an existing --out folder")
    p.add_argument("--scale-range", nargs=2, type=float, default=None, metavar=("LO", "HI"),
                   help="power-spectrum slope fit range in arcsec (default: from the beam "
                        "and the map)")


def _cmd_demo(args):
    from .config import load_config
    from .pipeline import DEMO_CONFIG, run_config
    conf = load_config(DEMO_CONFIG)
    if args.cells is not None:
        if args.cells < 8:
            raise SynthError(f"--cells must be >= 8 per axis, got {args.cells}")
        conf["cloud"]["cells"] = args.cells
    return _run(conf, args, run_config)


def _cmd_run(args):
    from .pipeline import run_config
    return _run(args.config, args, run_config)


def _run(conf, args, run_config):
    log = (lambda *a, **k: None) if args.quiet else print
    summary = run_config(conf, args.out, overwrite=args.overwrite, progress=not args.quiet, log=log,
                         memory=args.memory, workers=args.workers, scheduler=args.scheduler,
                         dashboard=args.dashboard, reuse=args.reuse)
    if not args.quiet:
        for name, t in summary["tracers"].items():
            print(f"{name:>14s}: peak T_B {t['peak_tb_k']:7.2f} K, peak ∫T dv "
                  f"{t['peak_integrated_k_kms']:8.2f} K km/s, tau_max {t['tau_max']:8.3g}")
        print(f"wrote {args.out} in {summary['elapsed_s']:.1f} s")
    return 0


def _cmd_lines(args):
    from .molecules.registry import format_line_table, line_table
    if args.max_lines < 0:
        raise SynthError(f"--max-lines must be >= 0 (0 = all), got {args.max_lines}")
    rows = []
    for species in (args.species or [None]):
        rows += line_table(species, max_lines=args.max_lines or None)
    print(format_line_table(rows))
    return 0


def _cmd_excite(args):
    import astropy.units as u
    import numpy as np
    from .excitation.escape import check_geometry
    from .excitation.lvg import excite, format_excitation_table
    from .excitation.line_ratios import effective_excitation_density
    check_geometry(args.geometry, "--geometry")
    if args.max_lines < 0:
        raise SynthError(f"--max-lines must be >= 0 (0 = all), got {args.max_lines}")
    ndv = args.column_per_width * u.cm**-2 / (u.km / u.s)
    res = excite(args.species, n_h2=args.density * u.cm**-3, t_kin=args.temperature * u.K,
                 column_per_width=ndv, geometry=args.geometry,
                 ortho_para_ratio=args.ortho_para_ratio, datafile=args.datafile)
    shown = res.transitions[:args.max_lines or None]
    n_eff = effective_excitation_density(
        args.species, res.t_kin, ndv, list(shown), geometry=args.geometry,
        ortho_para_ratio=args.ortho_para_ratio, datafile=args.datafile) if ndv.value > 0 \
        else np.full(len(shown), np.nan) * u.cm**-3
    print(format_excitation_table(res, max_lines=len(shown), effective_density=n_eff))
    return 0


def _cmd_ratios(args):
    import astropy.units as u
    import numpy as np
    from .excitation.escape import check_geometry
    from .excitation.line_ratios import MAX_GRID_ZONES, line_ratio_grid, parse_pairs
    from .molecules.registry import molecule
    from .report.comparison import check_out_dir
    from .report.line_ratios import ratio_summary, write_line_ratios
    check_geometry(args.geometry, "--geometry")
    for flag, (lo, hi) in (("--density", args.density), ("--temperature", args.temperature)):
        if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo < hi):
            raise SynthError(f"{flag} {lo:g} {hi:g}: give LO HI with 0 < LO < HI")
    for flag, n in (("--density-points", args.density_points),
                    ("--temperature-points", args.temperature_points)):
        if not 2 <= n <= 400:
            raise SynthError(f"{flag} must be 2..400, got {n}")
    cols = args.column_per_width
    if not all(np.isfinite(c) and c > 0 for c in cols):
        raise SynthError(f"--column-per-width must be > 0, got {' '.join(f'{c:g}' for c in cols)}")
    if len(cols) > 6:
        raise SynthError(f"--column-per-width takes at most 6 values (one figure column "
                         f"each), got {len(cols)}")
    zones = args.density_points * args.temperature_points * len(cols)
    if zones > MAX_GRID_ZONES:
        raise SynthError(f"the grid has {zones:,} zones; at most {MAX_GRID_ZONES:,} (fewer "
                         "--density-points or --temperature-points)")
    mol = molecule(args.species, datafile=args.datafile, need_collisions=True)
    try:
        pairs = parse_pairs(args.lines, mol)
    except SynthError as exc:
        raise SynthError(f"--lines: {exc}") from None
    check_out_dir(args.out, args.overwrite)
    from tqdm.auto import tqdm
    with tqdm(total=1.0, desc="line ratios", disable=args.quiet,
              bar_format="{l_bar}{bar}| {elapsed}") as bar:
        grid = line_ratio_grid(
            mol, pairs, np.geomspace(*args.density, args.density_points) * u.cm**-3,
            np.geomspace(*args.temperature, args.temperature_points) * u.K,
            np.array(cols) * u.cm**-2 / (u.km / u.s), geometry=args.geometry,
            ortho_para_ratio=args.ortho_para_ratio, progress=bar)
    print(ratio_summary(grid))
    files = write_line_ratios(grid, args.out, overwrite=args.overwrite)
    print(f"wrote {', '.join(files)} into {args.out}")
    return 0


def _plan_settings(conf, args):
    import astropy.units as u
    from .report.run_analysis import analysis_settings
    settings = analysis_settings(conf)
    if args.target_snr is not None:
        if not args.target_snr > 0:
            raise SynthError(f"--target-snr must be > 0, got {args.target_snr}")
        settings["target_snr"] = args.target_snr
    if args.percentile is not None:
        if not 0 <= args.percentile <= 100:
            raise SynthError(f"--percentile must be in 0..100, got {args.percentile}")
        settings["percentile"] = args.percentile
    if args.time is not None:
        try:
            hours = u.Quantity(args.time).to_value(u.hour)
        except (ValueError, TypeError, u.UnitsError):
            raise SynthError(f"--time {args.time!r} is not a time; e.g. 1h, 30min, 2.5 h"
                             ) from None
        if not hours > 0:
            raise SynthError(f"--time must be > 0, got {args.time!r}")
        settings["time_h"] = hours
    return settings


def _cmd_plan(args):
    from .config import load_config
    from .pipeline import ideal_cubes
    from .report.run_analysis import plan_config, plan_text
    from .preflight import preflight
    conf = load_config(args.config)
    settings = _plan_settings(conf, args)
    if not conf["setup"]:
        raise SynthError(f"{args.config} has no [[setup]] tables: nothing to plan")
    preflight(conf, observing=False)
    if args.figures is not None:
        _check_figure_dir(args.figures)
    stat_rows = _run_statistics_rows(args.from_run) if args.from_run is not None else None
    ideal = ideal_cubes(conf)
    plans, rows, skipped = plan_config(conf, ideal, settings)
    print(f"target: S/N {settings['target_snr']:g} per channel on the "
          f"{settings['percentile']:g}th percentile of the emission")
    print(plan_text(rows))
    first = next(iter(ideal))
    layouts = {}
    for row, p in zip(rows, plans):
        if row["tracer"] == first and p.layout is not None:
            layouts[row["setup"]] = p.layout
    print(f"pointings ({first}; the ones a run makes):")
    for name, lay in layouts.items():
        print(f"  {name}: {lay.describe()}")
    if args.figures is not None:
        from .report.figures import layout_figure
        for name, lay in layouts.items():
            path = os.path.join(args.figures, f"layout_{name}.png")
            layout_figure(lay, ideal[first], f"{name}: {lay.describe()}", path)
            print(f"wrote {path}")
    for sk in skipped:
        print(f"not planned: {sk['setup']} / {sk['tracer']}: {sk['reason']}")
    if stat_rows is not None:
        from .analysis.stat_survival import planning_lines
        lines = planning_lines(stat_rows)
        print(f"time for each statistic to reach its target ({args.from_run}):")
        print("\n".join(f"  {line}" for line in lines) if lines else
              "  none: the run had no [analysis] statistic_targets")
    return 0


def _run_statistics_rows(folder):
    """The rows of a run's statistics.csv, numbers as floats (blank = NaN, and a blank
    time_for_target_s with a target = not reachable); refused in one line when absent."""
    import csv
    path = os.path.join(folder, "statistics.csv")
    if not os.path.isfile(path):
        raise SynthError(f"--from-run {folder}: no statistics.csv there (a run with "
                         "[analysis] statistics = true writes it)")
    rows = []
    with open(path, newline="") as fh:
        for r in csv.DictReader(fh):
            out = {}
            for k, v in r.items():
                try:
                    out[k] = float(v) if v != "" else None
                except ValueError:
                    out[k] = v
            if out.get("target") is not None and out.get("time_for_target_s") is None:
                out["time_for_target_s"] = float("inf")
            out["realisations"] = int(out.get("realisations") or 0)
            rows.append(out)
    return rows


def _check_figure_dir(path):
    """A folder for plan figures: an existing folder or one we can create (its parent
    exists); refused in one line otherwise."""
    if os.path.isdir(path):
        if not os.access(path, os.W_OK):
            raise SynthError(f"--figures {path}: the folder is not writable")
        return
    if os.path.exists(path):
        raise SynthError(f"--figures {path}: exists and is not a folder")
    parent = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(parent):
        raise SynthError(f"--figures {path}: the folder {parent} does not exist")
    os.mkdir(path)


def _cmd_compare(args):
    import os
    from .analysis.compare import compare
    from .report.comparison import (check_out_dir, comparison_text, read_cube,
                                    write_comparison)
    names = args.names or [os.path.splitext(os.path.basename(p))[0]
                           for p in (args.cube_a, args.cube_b)]
    if names[0] == names[1]:
        names = ["a", "b"]
    if args.out is not None:
        check_out_dir(args.out, args.overwrite, (args.cube_a, args.cube_b))
    a, b = read_cube(args.cube_a, "A.fits"), read_cube(args.cube_b, "B.fits")
    rng = None if args.scale_range is None else tuple(args.scale_range)
    if rng is not None and not 0 < rng[0] < rng[1]:
        raise SynthError(f"--scale-range needs 0 < LO < HI arcsec, got {rng[0]:g} {rng[1]:g}")
    result = compare(a, b, names=tuple(names), scale_range=rng)
    print(comparison_text(result))
    if args.out is not None:
        files = write_comparison(result, args.out, overwrite=args.overwrite,
                                 inputs=(args.cube_a, args.cube_b))
        print(f"wrote {', '.join(files)} into {args.out}")
    return 0


_COMMANDS = {"demo": _cmd_demo, "run": _cmd_run, "lines": _cmd_lines, "excite": _cmd_excite,
             "ratios": _cmd_ratios, "plan": _cmd_plan, "compare": _cmd_compare}

#: Former command and option names, refused in one line with the name to use now.
RENAMED_COMMANDS = {"zone": "excite"}
RENAMED_OPTIONS = {"--ortho-para": "--ortho-para-ratio", "--max-rows": "--max-lines",
                   "--max-jup": "--max-lines"}


def _renamed(argv):
    """The one-line message for a former command or option name in ``argv``, else None."""
    words = [a for a in argv if not a.startswith("-")]
    if words and words[0] in RENAMED_COMMANDS:
        return f"the command `synth {words[0]}` was renamed to `synth {RENAMED_COMMANDS[words[0]]}`"
    for a in argv:
        old = a.split("=", 1)[0]
        if old in RENAMED_OPTIONS:
            return f"the option {old} was renamed to {RENAMED_OPTIONS[old]}"
    return None


def _one_line_warnings():
    """Show each distinct warning once, on one line, as ``synth: warning: ...``."""
    import warnings
    seen = set()

    def show(message, category, filename, lineno, file=None, line=None):
        text = " ".join(str(message).split())
        if text not in seen:
            seen.add(text)
            print(f"synth: warning: {text}", file=sys.stderr)

    warnings.showwarning = show


class Terminated(BaseException):
    """Raised in the main thread when SIGTERM arrives, so cleanup runs as for Ctrl-C."""


_SIGNALLED = []


def _on_sigterm(signum, frame):
    if not _SIGNALLED:
        _SIGNALLED.append(signum)
        raise Terminated()
    # a second SIGTERM (the first was swallowed somewhere, or cleanup hangs): clean up and die
    import os
    import signal
    from .rundir import cleanup_registered
    cleanup_registered()
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    os.kill(os.getpid(), signal.SIGTERM)


def _terminated(cleanup):
    cleanup()
    print("synth: terminated (SIGTERM); nothing was written", file=sys.stderr)
    return 143


def main(argv=None):
    import signal
    from .rundir import cleanup_registered
    hint = _renamed(sys.argv[1:] if argv is None else list(argv))
    if hint is not None:
        print(f"synth: error: {hint}", file=sys.stderr)
        return 2
    args = build_parser().parse_args(argv)
    _one_line_warnings()
    _SIGNALLED.clear()
    try:
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
    except ValueError:  # not the main thread: leave signals alone
        previous = None
    try:
        return _COMMANDS[args.command](args)
    except SynthError as exc:
        if _SIGNALLED:  # a library turned our Terminated into its own error
            return _terminated(cleanup_registered)
        msg = " ".join(str(exc).split())
        print(f"synth: error: {msg}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        cleanup_registered()
        print("synth: interrupted; nothing was written", file=sys.stderr)
        return 130
    except Terminated:
        return _terminated(cleanup_registered)
    except Exception:
        if _SIGNALLED:  # a library turned our Terminated into its own error
            return _terminated(cleanup_registered)
        raise
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


if __name__ == "__main__":
    sys.exit(main())
