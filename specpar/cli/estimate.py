"""``specpar estimate``: distance for every star of a table."""
from __future__ import annotations

import argparse
import sys

from specpar.core.bands import BAND_NAMES
from specpar.core.errors import InputError
from specpar.estimate import MAX_MAG_ERROR
from specpar.calib.extinction import DEFAULT_LAW, DEFAULT_RV, LAWS
from specpar.io.atomic import check_output
from specpar.io.formats import FORMATS

from .common import column_map

__all__ = ["register"]

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


def run(args) -> int:
    from specpar.io.columns import describe_mapping
    from specpar.batch.parquet import is_dataset
    from specpar.batch.stream import estimate_file
    inputs = [args.input, *(args.calibration or ())]
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


def register(sub) -> None:
    p = sub.add_parser("estimate", help="distance for every star of a table",
                       description="Distance, colour excess and extinction for every row of a table "
                                   "of classified stars.",
                       epilog=EPILOG_ESTIMATE, formatter_class=argparse.RawDescriptionHelpFormatter)
    _add_estimate_options(p)
    p.set_defaults(func=run)
