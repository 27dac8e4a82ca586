"""``specpar worked``: worked solutions / answer key for every star of a table (a thin layer over
:mod:`specpar.teaching`; the options are declared in :mod:`specpar.teaching.options`)."""
from __future__ import annotations

from pathlib import Path

from specpar.io.columns import column_map
from specpar.io.read import read_table
from specpar.teaching import worked_solutions, write_worked
from specpar.teaching.options import WORKED_OPTIONS

__all__ = ["register"]

#: Options that go to :func:`specpar.teaching.worked_solutions` (via :func:`specpar.estimate`).
_ESTIMATE_NAMES = ("law", "rv", "sigma_rv", "fit_rv", "default_error")

#: Help line and description of the command.
_HELP = "worked solutions / answer key for every star of a table"
_DESCRIPTION = ("Write every step of each star's distance (type read, calibration values "
                "and their sources, colour excess, extinction, distance modulus, distance in "
                "pc and ly, uncertainty) as Markdown, a standalone HTML page or a CSV "
                "answer key. The numbers are those of 'specpar estimate'.")


def _cmd_worked(args) -> int:
    opts = WORKED_OPTIONS.from_namespace(args)
    table = read_table(args.input, opts["in_format"], hdu=opts["hdu"])
    ws = worked_solutions(table, decimals=opts["decimals"], **{k: opts[k] for k in _ESTIMATE_NAMES},
                          calibrations=tuple(opts["calibrations"]), columns=column_map(opts["columns"]))
    write_worked(ws, args.output, opts["format"], inputs=[args.input], overwrite=opts["overwrite"],
                 title=opts["title"] or f"Worked solutions: {Path(args.input).name}")
    n_solved = sum(st.solved for st in ws.stars)
    print(f"specpar: worked solutions for {len(ws.stars)} rows -> {args.output} ({n_solved} with a distance)")
    return 0


def register(sub) -> None:
    """Add ``specpar worked`` to the command line's subparsers."""
    p = sub.add_parser("worked", help=_HELP, description=_DESCRIPTION)
    p.add_argument("input", help="table of stars, as for 'specpar estimate'")
    p.add_argument("-o", "--output", required=True, help="output file (.md, .html or .csv)")
    WORKED_OPTIONS.add_arguments(p)
    p.set_defaults(func=_cmd_worked)
