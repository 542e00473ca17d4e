"""Command line: argument parsing only; the work is done by synth.pipeline and the stages.

    synth demo --out DIR            the built-in demo (invented cloud, several tracers)
    synth run CONFIG --out DIR      a TOML run configuration
    synth lines [SPECIES ...]       built-in species and transitions
    synth zone SPECIES --density N --temperature T --column-per-width X
                                    one-zone escape-probability excitation table
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
    p.add_argument("--size", type=int, default=None, metavar="N",
                   help="cells per axis of the demo cloud (default: the demo config's)")

    p = sub.add_parser("run", help="run a TOML configuration",
                       description="Run a configuration file (see docs/config.md).")
    p.add_argument("config", help="path to a TOML configuration")
    _add_run_options(p)

    p = sub.add_parser("lines", help="list built-in species and transitions",
                       description="Frequency, E_up/k, A_ul and g_up of built-in transitions.")
    p.add_argument("species", nargs="*", help="only these species")
    p.add_argument("--max-jup", type=int, default=5, metavar="J",
                   help="show transitions up to this upper level (default 5; 0 = all)")

    p = sub.add_parser("zone", help="one-zone escape-probability excitation table",
                       description="T_ex, tau, T_R and integrated intensity of every "
                                   "transition of one uniform zone (see docs/lvg.md).")
    p.add_argument("species")
    p.add_argument("--density", type=float, required=True, metavar="CM-3", help="n(H2), cm^-3")
    p.add_argument("--temperature", type=float, required=True, metavar="K", help="T_kin, K")
    p.add_argument("--column-per-width", type=float, required=True, metavar="CM-2/(KM/S)",
                   help="N(species)/dv, cm^-2 per km/s (dv = FWHM)")
    p.add_argument("--geometry", default="lvg", help='"lvg", "sphere" or "slab"')
    p.add_argument("--ortho-para", type=float, default=None, help="H2 ortho/para ratio")
    p.add_argument("--datafile", default=None, help="a Leiden-format molecular data file")
    p.add_argument("--max-rows", type=int, default=10, help="transitions to show (0 = all)")
    _add_plan_compare(sub)
    return ap


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
    if args.size is not None:
        if args.size < 8:
            raise SynthError(f"--size must be >= 8 cells per axis, got {args.size}")
        conf["cloud"]["size"] = args.size
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
    rows = []
    for species in (args.species or [None]):
        rows += line_table(species)
    if args.max_jup > 0:
        rows = [r for r in rows if _jup(r["transition"]) <= args.max_jup]
    print(format_line_table(rows))
    return 0


def _jup(label):
    try:
        return int(str(label).split("-")[0])
    except ValueError:
        return 0


def _cmd_zone(args):
    import astropy.units as u
    from .excitation.lvg import excite, format_zone_table
    res = excite(args.species, n_h2=args.density * u.cm**-3, t_kin=args.temperature * u.K,
                 column_per_width=args.column_per_width * u.cm**-2 / (u.km / u.s),
                 geometry=args.geometry, ortho_para_ratio=args.ortho_para,
                 datafile=args.datafile)
    print(format_zone_table(res, max_lines=args.max_rows or None))
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
    return 0


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


_COMMANDS = {"demo": _cmd_demo, "run": _cmd_run, "lines": _cmd_lines, "zone": _cmd_zone,
             "plan": _cmd_plan, "compare": _cmd_compare}


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
