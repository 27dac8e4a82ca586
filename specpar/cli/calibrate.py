"""``specpar calibrate``: fit calibration tables to stars with parallaxes (a thin layer
over :func:`specpar.calibrate` and :func:`specpar.write_calibrations`)."""
from __future__ import annotations

from specpar.calfit.options import CLI_OPTIONS, api_options
from specpar.core.errors import InputError
from specpar.io.formats import FORMATS

__all__ = ["register"]

DESCRIPTION = ("Fit M_V, its intrinsic scatter and intrinsic B-V/U-B per spectral type and luminosity "
               "class to stars with MK types, UBV and trigonometric parallaxes (maximum likelihood of the "
               "parallax given the apparent magnitude; Ratnatunga & Casertano 1991). Writes one ECSV "
               "table per class, usable with 'specpar estimate --calibration'.")


def _run(args):
    from specpar.calfit import calibrate, write_calibrations
    from specpar.io.read import read_table
    from specpar.io.write import write_table
    table = read_table(args.input, args.in_format)
    options = api_options(CLI_OPTIONS.from_namespace(args))
    options["sample"] = options["sample"] or f"stars of {args.input}"
    fit = calibrate(table, **options)
    if not fit.tables:
        raise InputError("no luminosity class had enough usable stars to fit "
                         f"(min_stars = {args.min_stars}); see --stars-out for the reason per row")
    paths = write_calibrations(fit, args.outdir, prefix=args.prefix, overwrite=args.overwrite)
    if args.stars_out:
        write_table(fit.stars, args.stars_out, None, inputs=[args.input], overwrite=args.overwrite)
    if not args.quiet:
        used = int(fit.stars["used"].sum())
        print(f"specpar: {len(fit.stars)} rows, {used} used; wrote " + ", ".join(str(p) for p in paths))
    return 0


def register(subparsers) -> None:
    """Add the ``calibrate`` command to the ``specpar`` sub-command parsers."""
    p = subparsers.add_parser("calibrate", help="fit calibration tables (M_V, scatter, colours) to parallaxes",
                              description=DESCRIPTION)
    p.add_argument("input", help="stars: sptype, V, B-V, plx, e_plx (mas); optional U-B, glat (deg)")
    p.add_argument("-o", "--outdir", required=True, help="folder for the calibration tables")
    p.add_argument("--prefix", default="calibration", help="file names <prefix>_<class>.ecsv")
    p.add_argument("--in-format", choices=list(FORMATS), help="input format if the extension does not tell")
    CLI_OPTIONS.add_arguments(p)
    p.add_argument("--stars-out", metavar="FILE", help="also write every input row with used/reason")
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.add_argument("--quiet", action="store_true", help="no summary line")
    p.set_defaults(func=_run)

