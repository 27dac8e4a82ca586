"""``specpar calibrate``: fit calibration tables to stars with parallaxes."""
from __future__ import annotations

from specpar.core.errors import InputError
from specpar.tableio import FORMATS

from .common import column_map

__all__ = ["register"]


def run(args) -> int:
    from specpar.calibrate import calibrate, write_calibrations
    from specpar.tableio import read_table, write_table
    table = read_table(args.input, args.in_format)
    fit = calibrate(table, classes=args.lclass, columns=column_map(args.col), rv=args.rv,
                    scale_height_pc=None if args.uniform_density else (
                        "auto" if args.scale_height is None else args.scale_height),
                    v_limit=args.v_limit, min_stars=args.min_stars, min_per_node=args.min_per_node,
                    sample=args.sample or f"stars of {args.input}")
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


def register(sub) -> None:
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
    p.set_defaults(func=run)
