"""Options of ``specpar worked`` and ``specpar problems``, each declared once.

The Python functions take their defaults from these declarations (e.g.
``make_problem_set(n_stars=PROBLEM_OPTIONS["n_stars"].default)``) and the command line builds
its arguments from them (:meth:`specpar.core.options.OptionSet.add_arguments`), so a default is
written in one place. Values are checked by the functions themselves (their messages name the
Python argument and the valid range).

To add an option: declare it here (name = the Python keyword, ``flag`` = the command-line
spelling if it differs), give the Python function the keyword with the declared default, and the
command line gets it in the same order as declared.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

from specpar.core.bands import BAND_NAMES
from specpar.core.options import RANGE, Option, OptionSet
from specpar.pipeline.options import OPTIONS as ESTIMATE_OPTIONS
from specpar.calib.extinction import LAWS
from specpar.io.formats import FORMATS as TABLE_FORMATS

from .levels import LEVELS
from .seeds import SEED_BITS, SMALL_SEED_BITS

__all__ = ["DEFAULT_DECIMALS", "MAX_DECIMALS", "DOCUMENT_FORMATS", "SpreadOption",
           "WORKED_OPTIONS", "PROBLEM_OPTIONS"]

#: Decimals shown for magnitudes by default (0.001 mag: the precision of most published photometry;
#: common practice).
DEFAULT_DECIMALS = 3
#: Most decimals a key may show (beyond the precision of any magnitude; common practice).
MAX_DECIMALS = 10
#: Output formats of a worked solution, by name and file extension (documents, and the CSV key).
DOCUMENT_FORMATS = {"md": (".md", ".markdown"), "html": (".html", ".htm"), "csv": (".csv",)}

#: The estimate options both commands offer are the estimate's own declarations (law, R_V, ...);
#: the extinction law is offered by name on the command line.
_LAW = dataclasses.replace(ESTIMATE_OPTIONS["law"], choices=tuple(LAWS))
_RV = ESTIMATE_OPTIONS["rv"]


@dataclass(frozen=True)
class SpreadOption(Option):
    """An :class:`~specpar.core.options.Option` whose command-line value is several words
    (``nargs``: ``"+"`` or a count), e.g. ``--types G K`` or ``--dist-range 50 2000``."""

    nargs: Any = None

    def add_argument(self, parser) -> None:
        parser.add_argument(self.cli_flag, dest=self.name, nargs=self.nargs, type=self.kind,
                            metavar=self.metavar, help=self.help)


WORKED_OPTIONS = OptionSet(
    Option("format", None, "output format if the extension does not tell", kind=str,
           choices=tuple(DOCUMENT_FORMATS)),
    Option("decimals", DEFAULT_DECIMALS, f"decimals shown for magnitudes (default {DEFAULT_DECIMALS}); distances "
           "get one more significant figure than this", kind=int),
    Option("title", None, "page title", kind=str),
    Option("in_format", None, "input format if the extension does not tell", kind=str,
           choices=tuple(TABLE_FORMATS)),
    Option("hdu", None, "FITS: the table HDU to read when the file holds several (VOTable: table index or ID)",
           kind=str, metavar="N|NAME"),
    ESTIMATE_OPTIONS["columns"],
    _LAW,
    _RV,
    *(ESTIMATE_OPTIONS[name] for name in ("sigma_rv", "fit_rv", "default_error", "calibrations")),
    Option("overwrite", False, "replace the output file if it exists", kind=bool),
)

PROBLEM_OPTIONS = OptionSet(
    Option("seed", None, f"seed, to make the same set again (default: a fresh {SEED_BITS}-bit seed, written to "
           f"the key only); seeds under {SMALL_SEED_BITS} bits can be found by students and get a warning",
           kind=int),
    Option("n_stars", 10, "number of stars", kind=int, flag="--n", metavar="N"),
    Option("level", "full", "simple: V only, class V, no extinction; full: several bands, reddening, errors",
           kind=str, choices=tuple(LEVELS)),
    SpreadOption("types", None, "temperature classes (e.g. G K) or types (e.g. G2)", kind=str, nargs="+",
                 metavar="T"),
    SpreadOption("classes", None, "luminosity classes (e.g. V III)", kind=str, nargs="+", metavar="LC"),
    SpreadOption("bands", None, f"bands on the sheet, among {' '.join(BAND_NAMES)}", kind=str, nargs="+", metavar="BAND"),
    Option("dist_range_pc", None, "true distances in pc: LO HI or LO,HI", kind=RANGE, flag="--dist-range"),
    Option("ebv_range", None, "true E(B-V) in mag: LO HI or LO,HI", kind=RANGE),
    Option("error_mag", None, "photometric noise, 1 sigma (default 0.02)", flag="--error", metavar="MAG"),
    Option("v_range", None, "apparent V magnitudes allowed on the sheet: BRIGHT FAINT or BRIGHT,FAINT "
           "(default 3 14 simple, 4 16 full)", kind=RANGE, metavar=("BRIGHT", "FAINT")),
    _LAW,
    _RV,
    Option("decimals", DEFAULT_DECIMALS, f"decimals shown in the key (default {DEFAULT_DECIMALS})", kind=int),
)
