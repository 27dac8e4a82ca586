"""Command line: ``specpar <command> ...``; a thin layer over the library."""
from __future__ import annotations

import argparse
import sys

from . import __version__
from .bands import BAND_NAMES
from .extinction import DEFAULT_LAW, DEFAULT_RV, LAWS
from .estimate import MAX_MAG_ERROR
from .tableio import FORMATS, check_output

__all__ = ["main"]

EPILOG_ESTIMATE = f"""\
input columns:
  sptype            MK type, e.g. 'K1 III', 'B2.5IV-V', 'G8III:' (class V assumed if absent)
  {' '.join(BAND_NAMES)}
                    magnitudes, each with an optional error column e_<band>
  B-V, U-B, V-Ic... colours as catalogues give them (with e_B-V ...), used where
                    the two magnitudes are not both present
  other columns     carried through unchanged
  Catalogue spellings are recognised (Vmag, e_Vmag, SpType, B-V, BmV, Jmag, Plx,
  parallax, parallax_error ...; ambiguous ones are refused). Use --col OURS=YOURS
  for other names, e.g. --col V=mag_v --col sptype=class_mk.

output: every input row, in order, plus dist_pc, dist_lo_pc, dist_hi_pc (16th/84th
percentiles), dm, e_dm, ebv, e_ebv, av, mv, plx_phot_mas, flags, flag_codes, note...
Assumptions (calibrations, extinction law, R_V) are written into the file's metadata.

example:
  specpar estimate samples/survey.csv -o survey_distances.ecsv
"""


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line and status 2, as argparse does, without the full usage
        self.print_usage(sys.stderr)
        self.exit(2, f"{self.prog}: error: {message}\n")


def column_map(pairs):
    """``--col`` pairs to a mapping (see :func:`specpar.columns.column_map`)."""
    from .columns import column_map as _column_map
    return _column_map(pairs)


def _add_estimate_options(p):
    p.add_argument("input", help="table of stars (CSV, text, ECSV, FITS, VOTable or Parquet; .gz allowed "
                                 "for CSV/text)")
    p.add_argument("-o", "--output", required=True,
                   help="output table; format from its extension; '-' writes CSV (or --out-format) to "
                        "standard output")
    p.add_argument("--hdu", metavar="N|NAME", help="FITS: the table HDU to read when the file holds several "
                                                    "(VOTable: the table index or ID)")
    p.add_argument("--in-format", choices=list(FORMATS), help="input format if the extension does not tell")
    p.add_argument("--out-format", choices=list(FORMATS), help="output format if the extension does not tell")
    p.add_argument("--col", action="append", metavar="OURS=YOURS",
                   help="map one of our column names to yours (repeatable)")
    p.add_argument("--law", default=DEFAULT_LAW, choices=list(LAWS),
                   help=f"extinction law from dust_extinction (default {DEFAULT_LAW})")
    p.add_argument("--rv", type=float, default=DEFAULT_RV, help=f"R_V = A_V/E(B-V) (default {DEFAULT_RV})")
    p.add_argument("--sigma-rv", type=float, default=0.2, help="uncertainty of R_V (default 0.2)")
    p.add_argument("--fit-rv", action="store_true",
                   help="fit R_V per star where >= 3 magnitudes and clear reddening constrain it")
    p.add_argument("--mc", type=int, metavar="N", default=0,
                   help="Monte Carlo error propagation with N >= 10 draws per star; 0 (the default) "
                        "means analytic first-order propagation")
    p.add_argument("--seed", type=int, default=0, help="seed for --mc (default 0)")
    p.add_argument("--default-error", type=float, default=0.05,
                   help="error in mag assumed where a magnitude has none (flagged; default 0.05)")
    p.add_argument("--max-error", type=float, default=MAX_MAG_ERROR, metavar="MAG",
                   help="a magnitude whose error is above MAG (or zero, negative, infinite: catalogue "
                        f"sentinels such as 9.99) is not used (flagged; default {MAX_MAG_ERROR:g})")
    p.add_argument("--max-field-length", type=int, default=None, metavar="N",
                   help="cut text cells of the output to N characters (counted in the metadata; "
                        "default: no cut)")
    p.add_argument("--calibration", action="append", metavar="FILE",
                   help="your own calibration table (ECSV, same format as the shipped ones); "
                        "replaces the shipped table of its luminosity class (repeatable)")
    p.add_argument("--explain", action="store_true", help="add M_<band> and A_<band> columns")
    g = p.add_argument_group("parallax cross-check (when the input has plx and e_plx in mas)")
    g.add_argument("--plx-offset", type=float, default=0.0, metavar="MAS",
                   help="parallax zero point, subtracted from plx (default 0)")
    g.add_argument("--plx-error-scale", type=float, default=1.0, metavar="F",
                   help="multiply e_plx by F (default 1)")
    g.add_argument("--tension", type=float, default=3.0, metavar="Z",
                   help="flag stars with |z| above Z (default 3)")
    g.add_argument("--length-scale", type=float, default=1350.0, metavar="PC",
                   help="length scale of the exponentially decreasing space density prior "
                        "(Bailer-Jones 2015; default 1350 pc)")
    p.add_argument("--overwrite", action="store_true", help="replace the output file if it exists")
    p.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    g = p.add_argument_group("large inputs (Parquet and CSV are streamed in blocks; a folder is a Parquet dataset)")
    g.add_argument("--chunk-rows", type=int, default=100_000, metavar="N",
                   help="rows per block (default 100000; 0 reads the table whole)")
    g.add_argument("--threads", type=int, default=None, metavar="N",
                   help="blocks solved at once in this process (default 2 on 2 or more cores, else 1)")
    g.add_argument("--engine", choices=("local", "dask"), default="local",
                   help="'dask' runs the blocks on a Dask cluster (default local)")
    g.add_argument("--workers", type=int, default=None, metavar="N",
                   help="dask: workers of the local cluster started for the run (default: one per core)")
    g.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="dask: address of a running scheduler, e.g. tcp://127.0.0.1:8786")


def _cmd_estimate(args):
    from .columns import describe_mapping
    from .stream import estimate_file, is_dataset
    inputs = [args.input, *(args.calibration or ())]
    # everything about the output is checked before reading and computing
    # (a dataset folder or a Dask run publishes a folder or file of its own, checked there)
    if not (is_dataset(args.input) or args.engine == "dask"):
        check_output(args.output, args.out_format, inputs=inputs, overwrite=args.overwrite)
    if args.max_field_length is not None and args.max_field_length < 1:
        raise ValueError(f"--max-field-length must be >= 1 character, got {args.max_field_length}")
    summary = estimate_file(
        args.input, args.output, in_format=args.in_format, out_format=args.out_format,
        chunk_rows=args.chunk_rows, threads=args.threads, engine=args.engine, workers=args.workers,
        scheduler=args.scheduler, overwrite=args.overwrite, progress=not args.quiet,
        hdu=args.hdu, max_field_length=args.max_field_length,
        law=args.law, rv=args.rv, sigma_rv=args.sigma_rv, fit_rv=args.fit_rv,
        method="mc" if args.mc else "analytic", n_draws=args.mc or 1000, seed=args.seed,
        default_error=args.default_error, calibrations=tuple(args.calibration or ()),
        columns=column_map(args.col), explain=args.explain,
        plx_offset=args.plx_offset, plx_error_scale=args.plx_error_scale, tension=args.tension,
        length_scale_pc=args.length_scale, max_error=args.max_error)
    if not args.quiet:
        mapping = describe_mapping(summary.get("column_mapping") or {})
        stream = sys.stderr if args.output == "-" else sys.stdout
        print(f"specpar: {summary['rows']} rows -> {args.output}: {summary['with_distance']} with a distance, "
              f"{summary['flagged']} flagged (see the 'note' column)"
              + (f"; columns used: {mapping}" if mapping else ""), file=stream)
    return 0


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


#: Modules that add their own sub-commands through ``register_cli(subparsers)``.
_SUBCOMMAND_MODULES = ("parallax", "cluster", "cli_worked", "cli_problems")


def _register_optional(sub):
    import importlib
    for name in _SUBCOMMAND_MODULES:
        try:
            mod = importlib.import_module(f"specpar.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"specpar.{name}":
                continue  # that part of specpar is not built yet
            raise
        mod.register_cli(sub)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="specpar", description=(
        "Distances to stars from MK spectral type and photometry (spectroscopic parallax): "
        "calibrated absolute magnitudes and intrinsic colours, colour excess, extinction, "
        "distance modulus and distance with uncertainties."))
    parser.add_argument("--version", action="version", version=f"specpar {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    p = sub.add_parser("estimate", help="distance for every star of a table",
                       description="Distance, colour excess and extinction for every row of a table "
                                   "of classified stars.",
                       epilog=EPILOG_ESTIMATE, formatter_class=argparse.RawDescriptionHelpFormatter)
    _add_estimate_options(p)
    p.set_defaults(func=_cmd_estimate)
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
    _register_optional(sub)
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
