"""``specpar problems``: invent a problem set, student sheet and answer key (a thin layer over
:mod:`specpar.teaching`; the options are declared in :mod:`specpar.teaching.options`)."""
from __future__ import annotations

import sys
import warnings

from specpar.teaching import SmallSeedWarning, make_problem_set, write_problem_set
from specpar.teaching.options import PROBLEM_OPTIONS

__all__ = ["register"]

#: Options shown before ``--out-dir`` in the help (the order the command has always had).
_FIRST = ("seed", "n_stars", "level")

#: Help line and description of the command.
_HELP = "invent a problem set: student sheet and answer key"
_DESCRIPTION = ("Invent stars from the calibrations (true type, absolute magnitude and "
                "colours with the calibration's scatter, distance, reddening, noisy "
                "photometry) and write a student sheet (CSV, Markdown, HTML) and the key with "
                "true values, solved values and worked steps (CSV, Markdown, HTML). "
                "The same seed gives the same files; the seed is written to the key only.")


def _cmd_problems(args) -> int:
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", SmallSeedWarning)
        ps = make_problem_set(**PROBLEM_OPTIONS.from_namespace(args))
    for w in caught:
        if issubclass(w.category, SmallSeedWarning):
            print(f"specpar: warning: {w.message}", file=sys.stderr)
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    files = write_problem_set(ps, args.out_dir, overwrite=args.overwrite)
    if not args.quiet:
        print(f"specpar: problem set {ps.label} ({ps.level}, {len(ps.sheet)} stars): "
              + ", ".join(str(p) for p in files.values()))
    return 0


def register(sub) -> None:
    """Add ``specpar problems`` to the command line's subparsers."""
    p = sub.add_parser("problems", help=_HELP, description=_DESCRIPTION)
    PROBLEM_OPTIONS.add_arguments(p, skip=[n for n in PROBLEM_OPTIONS.names() if n not in _FIRST])
    p.add_argument("--out-dir", required=True, help="folder for the six files")
    PROBLEM_OPTIONS.add_arguments(p, skip=_FIRST)
    p.add_argument("--overwrite", action="store_true", help="replace existing files")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=_cmd_problems)
