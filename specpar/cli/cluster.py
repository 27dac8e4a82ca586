"""``specpar cluster``: main-sequence fitting of a cluster field from the command
line, a thin layer over :func:`specpar.cluster.fit_cluster`. The fit's options
come from their declarations (:data:`specpar.cluster.options.FIT_OPTIONS`);
the command adds the files (input, output table, diagrams)."""
from __future__ import annotations

import argparse
import os
import warnings

from specpar.io.columns import column_map
from specpar.core.options import parse_pair
from specpar.io.figures import figure_format

__all__ = ["register", "fit_options"]

#: Command-line order of the fit options; entries in _SPECIAL take a command-line form of
#: their own (pairs, lists, inverted switches), the rest are added from the declarations.
_ORDER = ("law", "rv", "locus", "feh", "e_feh", "ebv_prior", "sigma_rv", "exclude_evolved", "plx_zero_point",
          "plx_systematic", "bands", "magnitude", "membership", "age", "bright_limit", "faint_limit", "dm_range",
          "ebv_range", "binaries", "field_model", "width", "u_reddening", "method", "seed", "columns")
_PAIRS = ("dm_range", "ebv_range", "ebv_prior")
_SWITCHES_OFF = ("exclude_evolved", "binaries")


def _add_fit_option(p, opt):
    """One fit option on the command line, in its command-line form."""
    if opt.name in _PAIRS:  # LO HI or LO,HI; parsed by parse_pair after argparse
        default = None if opt.default is None else [",".join(f"{x:g}" for x in opt.default)]
        p.add_argument(opt.cli_flag, dest=opt.name, default=default, nargs="+", metavar=opt.metavar,
                       help=opt.help)
    elif opt.name in _SWITCHES_OFF:
        p.add_argument(opt.cli_flag, dest=opt.name, action="store_false", help=opt.help)
    elif opt.name == "bands":
        p.add_argument(opt.cli_flag, dest=opt.name, metavar=opt.metavar, help=opt.help)
    elif opt.name == "method":
        p.add_argument(opt.cli_flag, dest="bootstrap", type=int, metavar="N", default=0,
                       help="uncertainties from N bootstrap resamples (default: likelihood curvature, "
                            "sandwich form)")
    elif opt.name == "columns":
        p.add_argument(opt.cli_flag, dest="col", action="append", metavar="OURS=YOURS",
                       help="map a column name (repeatable)")
    else:
        opt.add_argument(p)


def register(sub):
    """Add ``specpar cluster``."""
    from specpar.cluster.options import FIT_OPTIONS
    p = sub.add_parser(
        "cluster", help="distance modulus and E(B-V) of a cluster by main-sequence fitting",
        description="Fit the main-sequence locus to a cluster field's photometry: distance modulus, "
                    "E(B-V), binary and field fractions, with per-star membership.",
        epilog="input: the same magnitude/colour columns as 'specpar estimate' (no spectral types "
               "needed).\nexample:\n  specpar cluster field.csv -o members.ecsv --plot cmd.png "
               "--twocolour ub_bv.png", formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("input", help="table of stars (CSV, ECSV, FITS, VOTable or Parquet)")
    p.add_argument("-o", "--output", help="per-star table (membership, residuals, flags)")
    p.add_argument("--plot", metavar="FILE", help="colour-magnitude diagram (.png or .pdf)")
    p.add_argument("--twocolour", metavar="FILE", help="(U-B, B-V) diagram (.png or .pdf; needs U, B, V)")
    for name in _ORDER:
        _add_fit_option(p, FIT_OPTIONS[name])
    p.add_argument("--in-format", help="input format if the extension does not tell")
    p.add_argument("--hdu", metavar="N|NAME", help="FITS: the table HDU to read when the file holds several (VOTable: table index or ID)")
    p.add_argument("--out-format", help="output format if the extension does not tell")
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=_cmd_cluster)



def fit_options(args) -> dict:
    """The keywords of :func:`fit_cluster` from parsed command-line arguments."""
    from specpar.cluster.options import FIT_OPTIONS
    special = set(_PAIRS) | {"bands", "method", "columns"}
    kw = {k: v for k, v in FIT_OPTIONS.from_namespace(args, skip=special).items() if k in _ORDER}
    kw["bands"] = [b.strip() for b in args.bands.split(",")] if args.bands else None
    kw["columns"] = column_map(args.col)
    kw.update({name: parse_pair(getattr(args, name), FIT_OPTIONS[name].cli_flag) if getattr(args, name) else None
               for name in _PAIRS})
    kw["method"] = "bootstrap" if args.bootstrap else "profile"
    kw["n_boot"] = args.bootstrap or FIT_OPTIONS["n_boot"].default
    return kw


def _cmd_cluster(args):
    from specpar.cluster import ClusterFitWarning, fit_cluster, plot_cmd, plot_two_colour
    from specpar.io.atomic import check_output
    from specpar.io.read import read_table
    from specpar.io.write import write_table
    for f in (args.plot, args.twocolour):
        if f:
            figure_format(f)
    locus_file = [args.locus] if args.locus and os.path.isfile(str(args.locus)) else []
    if args.output:  # checked before any computing (never over the table or the locus file)
        check_output(args.output, args.out_format, inputs=[args.input, *locus_file], overwrite=args.overwrite)
    table = read_table(args.input, args.in_format, hdu=args.hdu)
    kw = fit_options(args)
    with warnings.catch_warnings():  # the summary prints them as WARNING lines
        warnings.simplefilter("ignore", ClusterFitWarning)
        res = fit_cluster(table, **kw)
    if args.output:
        write_table(res.members, args.output, args.out_format, inputs=[args.input, *locus_file],
                    overwrite=args.overwrite)
    if args.plot:
        plot_cmd(res, args.plot, inputs=[args.input], overwrite=args.overwrite)
    if args.twocolour:
        plot_two_colour(res, args.twocolour, inputs=[args.input], overwrite=args.overwrite)
    if not args.quiet:
        print(res.summary())
    return 0
