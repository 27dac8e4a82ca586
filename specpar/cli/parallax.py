"""``specpar plot-parallax``: the figure of the parallax cross-check
(:func:`specpar.pipeline.parallax_plot.plot_parallax`) from an estimate output."""
from __future__ import annotations

import numpy as np

from specpar.core.errors import InputError
from specpar.io.formats import FORMATS

__all__ = ["register"]


def _cmd_plot(args):
    from specpar.pipeline.parallax_plot import plot_parallax
    from specpar.io.read import read_table
    if args.tension is not None and not (np.isfinite(args.tension) and args.tension > 0):
        raise InputError(f"--tension must be a finite number > 0 (in sigma, e.g. 3), got {args.tension}")
    table = read_table(args.table, args.in_format, hdu=args.hdu)
    plot_parallax(table, args.output, threshold=args.tension, overwrite=args.overwrite, inputs=[args.table])
    return 0


def register(sub) -> None:
    """Add ``specpar plot-parallax``."""
    p = sub.add_parser("plot-parallax", help="figure: photometric vs trigonometric parallax and z histogram",
                       description="Draw photometric against trigonometric parallax (1:1 line, stars in "
                                   "tension marked) and a histogram of z, from a table written by "
                                   "'specpar estimate' for an input with plx and e_plx.")
    p.add_argument("table", help="output table of 'specpar estimate'")
    p.add_argument("-o", "--output", required=True, help="figure file, .png or .pdf")
    p.add_argument("--in-format", choices=list(FORMATS), help="table format if the extension does not tell")
    p.add_argument("--hdu", metavar="N|NAME", help="FITS: the table HDU to read when the file holds several "
                                                    "(VOTable: table index or ID)")
    p.add_argument("--tension", type=float, default=None, metavar="Z",
                   help="|z| threshold to draw (default: the one recorded in the table, else 3)")
    p.add_argument("--overwrite", action="store_true", help="replace the figure if it exists")
    p.set_defaults(func=_cmd_plot)
