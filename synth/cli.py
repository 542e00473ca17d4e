"""Command line: argument parsing only; the work is done by synth.pipeline and the stages.

    synth demo --out DIR            the built-in demo (invented cloud, several tracers)
    synth run CONFIG --out DIR      a TOML run configuration
    synth lines [SPECIES ...]       built-in species and transitions
    synth zone SPECIES --density N --temperature T --column-per-width X
                                    one-zone escape-probability excitation table

Bad input prints one line ``synth: error: ...`` and exits with status 2.
"""

import argparse
import sys

from . import __version__
from .errors import SynthError

__all__ = ["main", "build_parser"]


def _add_run_options(p):
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (must not exist)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--quiet", action="store_true", help="no progress bars or messages")
    g = p.add_argument_group("execution")
    g.add_argument("--memory", metavar="SIZE", default=None,
                   help="memory budget for the transfer stage, e.g. 8GB or 512MiB "
                        "(snapshot files in HDF5/zarr/FITS are then read tile by tile)")
    g.add_argument("--workers", type=int, default=None, metavar="N",
                   help="run the tiles on a local dask cluster of N worker processes")
    g.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="run the tiles on an existing dask.distributed scheduler, e.g. tcp://host:8786")


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
    return ap


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
                         memory=args.memory, workers=args.workers, scheduler=args.scheduler)
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


_COMMANDS = {"demo": _cmd_demo, "run": _cmd_run, "lines": _cmd_lines, "zone": _cmd_zone}


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


def main(argv=None):
    args = build_parser().parse_args(argv)
    _one_line_warnings()
    try:
        return _COMMANDS[args.command](args)
    except SynthError as exc:
        msg = " ".join(str(exc).split())
        print(f"synth: error: {msg}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("synth: interrupted; nothing was written", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
