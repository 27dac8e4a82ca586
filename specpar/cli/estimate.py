"""``specpar estimate``: the command line of :func:`specpar.estimate` (through
:func:`specpar.batch.stream.estimate_file`). The estimate options are made from their
declarations in :mod:`specpar.pipeline.options`; ``--mc N`` (method and draws),
``--col`` (column mapping) and the file and block options are this command's own."""
from __future__ import annotations

import argparse
import dataclasses
import sys

from specpar.core.bands import BAND_NAMES
from specpar.calib.extinction import LAWS
from specpar.io.columns import column_map
from specpar.core.errors import InputError
from specpar.core.options import OptionSet
from specpar.pipeline.options import OPTIONS
from specpar.batch.options import RUN_OPTIONS
from specpar.io.atomic import check_output
from specpar.io.formats import FORMATS

__all__ = ["register", "EPILOG_ESTIMATE"]

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

#: The declarations as the command line offers them: the law is one of a fixed set there.
_CLI_OPTIONS = OptionSet(*(dataclasses.replace(o, choices=tuple(LAWS)) if o.name == "law" else o
                           for o in OPTIONS), groups=OPTIONS.groups)


def _declared(parser, *names) -> None:
    """Add the declared options ``names`` (in their declared order)."""
    _CLI_OPTIONS.add_arguments(parser, skip=[n for n in _CLI_OPTIONS.names() if n not in names])


def _add_file_options(p) -> None:
    p.add_argument("input", help="table of stars (CSV, text, ECSV, FITS, VOTable or Parquet; .gz allowed "
                                 "for CSV/text)")
    p.add_argument("-o", "--output", required=True,
                   help="output table; format from its extension; '-' writes CSV (or --out-format) to "
                        "standard output")
    p.add_argument("--hdu", metavar="N|NAME", help="FITS: the table HDU to read when the file holds several "
                                                    "(VOTable: the table index or ID)")
    p.add_argument("--in-format", choices=list(FORMATS), help="input format if the extension does not tell")
    p.add_argument("--out-format", choices=list(FORMATS), help="output format if the extension does not tell")


def _add_block_options(p) -> None:
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
    RUN_OPTIONS.add_arguments(g)


def add_estimate_options(p) -> None:
    """Every argument of ``specpar estimate``, in the order its help lists them."""
    _add_file_options(p)
    _declared(p, "columns")
    _declared(p, "law", "rv", "sigma_rv", "fit_rv")
    p.add_argument("--mc", type=int, metavar="N", default=0,
                   help="Monte Carlo error propagation with N >= 10 draws per star; 0 (the default) "
                        "means analytic first-order propagation")
    _declared(p, "seed", "default_error", "max_error")
    p.add_argument("--max-field-length", type=int, default=None, metavar="N",
                   help="cut text cells of the output to N characters (counted in the metadata; "
                        "default: no cut)")
    _declared(p, "calibrations", "explain", "plx_offset", "plx_error_scale", "tension", "length_scale_pc")
    p.add_argument("--overwrite", action="store_true", help="replace the output file if it exists")
    p.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    _add_block_options(p)


def estimate_options(args) -> dict:
    """The keyword options of :func:`specpar.estimate` from parsed arguments."""
    values = _CLI_OPTIONS.from_namespace(args)
    values.update(method="mc" if args.mc else "analytic", n_draws=args.mc or OPTIONS["n_draws"].default,
                  calibrations=tuple(values["calibrations"]), columns=column_map(values["columns"]))
    return values


def _cmd_estimate(args):
    from specpar.io.columns import describe_mapping
    from specpar.batch.parquet import is_dataset
    from specpar.batch.stream import estimate_file
    options = estimate_options(args)
    inputs = [args.input, *options["calibrations"]]
    # everything about the output is checked before reading and computing
    # (a dataset folder or a Dask run publishes a folder or file of its own, checked there)
    if not (is_dataset(args.input) or args.engine == "dask"):
        check_output(args.output, args.out_format, inputs=inputs, overwrite=args.overwrite)
    if args.max_field_length is not None and args.max_field_length < 1:
        raise InputError(f"--max-field-length must be >= 1 character, got {args.max_field_length}")
    summary = estimate_file(
        args.input, args.output, in_format=args.in_format, out_format=args.out_format,
        chunk_rows=args.chunk_rows, threads=args.threads, engine=args.engine, workers=args.workers,
        scheduler=args.scheduler, overwrite=args.overwrite, progress=not args.quiet,
        hdu=args.hdu, max_field_length=args.max_field_length, **RUN_OPTIONS.from_namespace(args), **options)
    if not args.quiet:
        mapping = describe_mapping(summary.get("column_mapping") or {})
        stream = sys.stderr if args.output == "-" else sys.stdout
        print(f"specpar: {summary['rows']} rows -> {args.output}: {summary['with_distance']} with a distance, "
              f"{summary['flagged']} flagged (see the 'note' column)"
              + (f"; columns used: {mapping}" if mapping else ""), file=stream)
    return 0


def register(sub) -> None:
    """Add ``specpar estimate``."""
    p = sub.add_parser("estimate", help="distance for every star of a table",
                       description="Distance, colour excess and extinction for every row of a table "
                                   "of classified stars.",
                       epilog=EPILOG_ESTIMATE, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_estimate_options(p)
    p.set_defaults(func=_cmd_estimate)
