"""The options of :func:`specpar.estimate`, each declared once.

:data:`OPTIONS` holds every option (default, unit, help text); the dataclass
:class:`EstimateOptions` is made from it, :func:`specpar.estimate` resolves its
keywords through it, and ``specpar estimate`` builds its command-line options
from it (see ``specpar/cli/estimate.py``). To add an option: declare it here,
read it where the pipeline needs it; the API, its signature, its docstring and
the command line follow.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from ..calib.extinction import DEFAULT_LAW, DEFAULT_RV, check_law
from ..core.errors import InputError
from ..core.options import Option, OptionSet
from .tension import DEFAULT_LENGTH_SCALE_PC

__all__ = ["OPTIONS", "EstimateOptions", "options_from", "DEFAULT_MAG_ERROR", "MAX_MAG_ERROR", "PLX_GROUP"]

#: Documented default photometric error (mag) where none is given (common practice
#: for catalogue photometry of moderate quality).
DEFAULT_MAG_ERROR = 0.05
#: Largest photometric error (mag) taken as a measurement. Catalogues write
#: sentinels such as 9.99 or 99 for "no error"; an error above 1 mag also means
#: the magnitude itself is no measurement worth weighting (a 1-mag error spans a
#: factor 2.5 in flux). A magnitude whose error is above this, zero, negative,
#: infinite or not a number is not used (flagged); only a missing error gets
#: the default. Common practice for catalogue photometry.
MAX_MAG_ERROR = 1.0
#: Fewest Monte Carlo draws per star that give usable percentiles (common practice).
MIN_DRAWS = 10
#: Help section of the parallax options on the command line.
PLX_GROUP = "parallax cross-check (when the input has plx and e_plx in mas)"

#: Every option of :func:`specpar.estimate`, in the order of :class:`EstimateOptions`'s
#: fields. ``flag=""``: not on the command line as such (``--mc``, ``--quiet`` map to them).
OPTIONS = OptionSet(
    Option("law", DEFAULT_LAW, "extinction law from dust_extinction", kind=str),
    Option("rv", DEFAULT_RV, "R_V = A_V/E(B-V)"),
    Option("sigma_rv", 0.2, "uncertainty of R_V"),
    Option("fit_rv", False, "fit R_V per star where >= 3 magnitudes and clear reddening constrain it",
           kind=bool),
    Option("method", "analytic", "error propagation: 'analytic' (first order) or 'mc' (Monte Carlo)",
           kind=str, flag=""),
    Option("n_draws", 1000, "Monte Carlo draws per star", kind=int, flag=""),
    Option("seed", 0, "seed for --mc", kind=int),
    Option("default_error", DEFAULT_MAG_ERROR,
           f"error in mag assumed where a magnitude has none (flagged; default {DEFAULT_MAG_ERROR:g})",
           unit="mag"),
    Option("calibrations", (), "your own calibration table (ECSV, same format as the shipped ones); "
           "replaces the shipped table of its luminosity class (repeatable)",
           kind=list, flag="--calibration", metavar="FILE"),
    Option("columns", None, "map one of our column names to yours (repeatable)",
           kind=list, flag="--col", metavar="OURS=YOURS"),
    Option("progress", False, "progress bar (tqdm) on long runs", kind=bool, flag=""),
    Option("explain", False, "add M_<band> and A_<band> columns", kind=bool),
    Option("plx_offset", 0.0, "parallax zero point, subtracted from plx", metavar="MAS", group=PLX_GROUP),
    Option("plx_error_scale", 1.0, "multiply e_plx by F", metavar="F", group=PLX_GROUP),
    Option("tension", 3.0, "flag stars with |z| above Z", metavar="Z", group=PLX_GROUP),
    Option("length_scale_pc", DEFAULT_LENGTH_SCALE_PC,
           "length scale of the exponentially decreasing space density prior "
           f"(Bailer-Jones 2015; default {DEFAULT_LENGTH_SCALE_PC:g} pc)",
           unit="pc", flag="--length-scale", metavar="PC", group=PLX_GROUP),
    Option("max_error", MAX_MAG_ERROR,
           "a magnitude whose error is above MAG (or zero, negative, infinite: catalogue "
           f"sentinels such as 9.99) is not used (flagged; default {MAX_MAG_ERROR:g})",
           unit="mag", metavar="MAG"),
)

_TYPES = {float: float, int: int, str: str, bool: bool}
_FACTORIES = {"calibrations": tuple, "columns": dict}


def _field(opt: Option):
    if opt.name in _FACTORIES:
        return (opt.name, _FACTORIES[opt.name], dataclasses.field(default_factory=_FACTORIES[opt.name]))
    return (opt.name, _TYPES[opt.kind], dataclasses.field(default=opt.default))


def _check(self) -> None:
    """Raise :class:`InputError` naming the bad value and the valid range."""
    check_law(self.law, self.rv)
    if self.method not in ("analytic", "mc"):
        raise InputError(f"method must be 'analytic' or 'mc', not {self.method!r}")
    _require(self.sigma_rv >= 0, f"sigma_rv must be >= 0, got {self.sigma_rv}", self.sigma_rv)
    _require(self.default_error > 0, f"default_error must be > 0 mag, got {self.default_error}",
             self.default_error)
    _require(self.max_error > 0, f"max_error must be a number of mag > 0, got {self.max_error}", self.max_error)
    if self.default_error > self.max_error:
        raise InputError(f"default_error {self.default_error} mag is above max_error {self.max_error} mag; "
                         "lower the default error or raise max_error")
    _require(self.plx_error_scale > 0, f"plx_error_scale must be > 0, got {self.plx_error_scale}",
             self.plx_error_scale)
    _require(True, f"plx_offset must be a finite number of mas, got {self.plx_offset}", self.plx_offset)
    _require(self.tension > 0, f"tension threshold must be > 0, got {self.tension}", self.tension)
    _require(self.length_scale_pc > 0, f"length_scale_pc must be > 0, got {self.length_scale_pc}",
             self.length_scale_pc)
    if self.method == "mc" and not (isinstance(self.n_draws, (int, np.integer)) and self.n_draws >= MIN_DRAWS):
        raise InputError(f"n_draws must be an integer >= {MIN_DRAWS}, got {self.n_draws}")


def _require(ok, message, value) -> None:
    """:class:`InputError` with ``message`` unless ``value`` is finite and ``ok``."""
    if not (np.isfinite(value) and ok):
        raise InputError(message)


EstimateOptions = dataclasses.make_dataclass(
    "EstimateOptions", [_field(o) for o in OPTIONS], namespace={"check": _check})
EstimateOptions.__module__ = __name__
EstimateOptions.__doc__ = ("Options of :func:`specpar.estimate` (every CLI option has its field here).\n\n"
                           "Attributes\n----------\n" + OPTIONS.doc())


def options_from(options: dict) -> EstimateOptions:
    """:class:`EstimateOptions` from :func:`specpar.estimate` keywords: defaults from the
    declarations, unknown names refused (:class:`InputError`), calibrations and columns normalised."""
    opts = OPTIONS.resolve(options, what="estimate() options")
    opts["calibrations"] = tuple(opts["calibrations"] or ())
    opts["columns"] = dict(opts["columns"] or {})
    return EstimateOptions(**opts)

