"""Command line: ``specpar <command> ...``; a thin layer over the library."""
from __future__ import annotations

import argparse
import sys

from . import __version__
from .tableio import FORMATS

__all__ = ["main"]

class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line and status 2, as argparse does, without the full usage
        self.print_usage(sys.stderr)
        self.exit(2, f"{self.prog}: error: {message}\n")


def column_map(pairs):
    """``--col`` pairs to a mapping (see :func:`specpar.columns.column_map`)."""
    from .columns import column_map as _column_map
    return _column_map(pairs)


def _cmd_calibrations(args):
    from .calibration import default_calibrations
    cals = default_calibrations()
    for lc, cal in cals.by_class.items():
        lo, hi = cal.sptnum_range
        print(f"{lc:>4}  {cal.name}: {cal.title}")
        print(f"      types {lo:g}-{hi:g} (O0=0 ... M0=60); bands {' '.join(cal.bands)}")
        for ref in cal.references:
            print(f"      ref: {ref}")
    return 0


def _cmd_calibrate(args):
    from .calibrate import calibrate, write_calibrations
    from .tableio import read_table, write_table
    table = read_table(args.input, args.in_format)
    fit = calibrate(table, classes=args.lclass, columns=column_map(args.col), rv=args.rv,
                    scale_height_pc=None if args.uniform_density else (
                        "auto" if args.scale_height is None else args.scale_height),
                    v_limit=args.v_limit, min_stars=args.min_stars, min_per_node=args.min_per_node,
                    sample=args.sample or f"stars of {args.input}")
    if not fit.tables:
        raise ValueError("no luminosity class had enough usable stars to fit "
                         f"(min_stars = {args.min_stars}); see --stars-out for the reason per row")
    paths = write_calibrations(fit, args.outdir, prefix=args.prefix, overwrite=args.overwrite)
    if args.stars_out:
        write_table(fit.stars, args.stars_out, None, inputs=[args.input], overwrite=args.overwrite)
    if not args.quiet:
        used = int(fit.stars["used"].sum())
        print(f"specpar: {len(fit.stars)} rows, {used} used; wrote " + ", ".join(str(p) for p in paths))
    return 0


def _cmd_bench(args):
    from .bench import run_benchmark, run_dataset_benchmark
    if args.dataset:
        run_dataset_benchmark(n_rows=args.rows, workdir=args.workdir)
    else:
        run_benchmark(n_rows=args.rows, n_loop=args.loop_rows, workdir=args.workdir, mixed=args.mixed,
                      threads=args.threads)
    return 0


#: Modules that add their own sub-commands through ``register(subparsers)`` (``register_cli``
#: in modules not moved yet); the first is registered before the commands of this file.
_SUBCOMMAND_MODULES = ("cli_estimate", "cli_parallax", "cluster", "worked", "problems")


def _register_optional(sub, names=_SUBCOMMAND_MODULES):
    import importlib
    for name in names:
        try:
            mod = importlib.import_module(f"specpar.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"specpar.{name}":
                continue  # that part of specpar is not built yet
            raise
        (getattr(mod, "register", None) or mod.register_cli)(sub)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="specpar", description=(
        "Distances to stars from MK spectral type and photometry (spectroscopic parallax): "
        "calibrated absolute magnitudes and intrinsic colours, colour excess, extinction, "
        "distance modulus and distance with uncertainties."))
    parser.add_argument("--version", action="version", version=f"specpar {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    _register_optional(sub, _SUBCOMMAND_MODULES[:1])
    p = sub.add_parser("calibrations", help="list the calibration tables and their sources")
    p.set_defaults(func=_cmd_calibrations)
    p = sub.add_parser("calibrate", help="fit calibration tables (M_V, scatter, colours) to parallaxes",
                       description="Fit M_V, its intrinsic scatter and intrinsic B-V/U-B per spectral type "
                                   "and luminosity class to stars with MK types, UBV and trigonometric "
                                   "parallaxes (maximum likelihood of the parallax given the apparent "
                                   "magnitude; Ratnatunga & Casertano 1991). Writes one ECSV table per "
                                   "class, usable with 'specpar estimate --calibration'.")
    p.add_argument("input", help="stars: sptype, V, B-V, plx, e_plx (mas); optional U-B, glat (deg)")
    p.add_argument("-o", "--outdir", required=True, help="folder for the calibration tables")
    p.add_argument("--prefix", default="calibration", help="file names <prefix>_<class>.ecsv")
    p.add_argument("--in-format", choices=list(FORMATS), help="input format if the extension does not tell")
    p.add_argument("--col", action="append", metavar="OURS=YOURS", help="map one of our column names to yours")
    p.add_argument("--class", dest="lclass", action="append", metavar="LC",
                   help="luminosity class to fit (repeatable; default all with enough stars)")
    p.add_argument("--rv", type=float, default=3.1, help="A_V/E(B-V) for the calibrators (default 3.1)")
    p.add_argument("--scale-height", type=float, default=None, metavar="PC",
                   help="one disk scale height for all types (default: by type and class)")
    p.add_argument("--uniform-density", action="store_true", help="uniform space density instead of a disk")
    p.add_argument("--v-limit", type=float, default=None, help="use only stars with V at most this")
    p.add_argument("--min-stars", type=int, default=30, help="fewest stars to fit a class (default 30)")
    p.add_argument("--min-per-node", type=int, default=8,
                   help="fewest stars within 1.5 subtypes for a type to be tabulated (default 8)")
    p.add_argument("--sample", default="", help="description of the sample, written into the tables")
    p.add_argument("--stars-out", metavar="FILE", help="also write every input row with used/reason")
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.add_argument("--quiet", action="store_true", help="no summary line")
    p.set_defaults(func=_cmd_calibrate)
    p = sub.add_parser("bench", help="time estimate on synthetic rows (Parquet in and out)")
    p.add_argument("--rows", type=int, default=1_000_000, help="rows for the vectorised run (default 1e6)")
    p.add_argument("--loop-rows", type=int, default=20_000,
                   help="rows for the plain per-row Python comparison (default 20000)")
    p.add_argument("--workdir", default=None, help="folder for the Parquet files (default: a temporary one)")
    p.add_argument("--mixed", action="store_true",
                   help="realistic mix: 11 bands, 3.1 per star on average (default: B and V only)")
    p.add_argument("--threads", type=int, default=None, help="blocks solved at once (default as for estimate)")
    p.add_argument("--dataset", action="store_true",
                   help="write --rows mixed rows as a Parquet dataset and time 'specpar estimate' on it "
                        "in a child process, reporting rows/s and peak memory")
    p.set_defaults(func=_cmd_bench)
    _register_optional(sub, _SUBCOMMAND_MODULES[1:])
    return parser


def main(args=None) -> int:
    """Entry point; returns the exit status."""
    from .tableio import Terminated
    parser = build_parser()
    ns = parser.parse_args(args)
    if not ns.command:
        parser.print_help()
        return 2
    try:
        return ns.func(ns)
    except (ValueError, TypeError, OSError, KeyError) as exc:
        msg = exc.args[0] if isinstance(exc, KeyError) and exc.args else exc
        print(f"specpar: error: {msg}", file=sys.stderr)
        return 1
    except MemoryError:
        print("specpar: error: out of memory; use smaller blocks (--chunk-rows) or fewer draws (--mc)",
              file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("specpar: interrupted", file=sys.stderr)
        return 130
    except Terminated:
        print("specpar: terminated (SIGTERM); no output written, temporary file removed", file=sys.stderr)
        return 143


if __name__ == "__main__":
    sys.exit(main())
