"""Every option of :func:`specpar.fit_cluster` and of ``specpar cluster``,
declared once (default, unit, help text): the Python function takes its
defaults from here and the command line builds its arguments from here.

Options whose command-line form differs from the keyword (``--keep-evolved``
for ``exclude_evolved=False``, ``--no-binaries``, ``--bootstrap N`` for
``method``/``n_boot``, ``--col`` for ``columns``, ``LO,HI`` pairs and
comma-separated band lists) are converted by :mod:`specpar.cli.cluster`.
"""
from __future__ import annotations

import numpy as np

from specpar.core.errors import InputError
from specpar.core.options import Option, OptionSet
from specpar.pipeline.options import OPTIONS as ESTIMATE_OPTIONS
from specpar.calib.extinction import DEFAULT_LAW, DEFAULT_RV, LAWS, check_law

from .diagnostics import DEFAULT_PLX_SYSTEMATIC, DEFAULT_PLX_ZERO_POINT
from .locus import DEFAULT_LOCUS
from .reddening import U_REDDENING
from .uncertainty import DEFAULT_SIGMA_RV

__all__ = ["DEFAULT_WIDTH", "DEFAULT_ERROR", "FIELD_MODELS", "METHODS", "FIT_OPTIONS", "OPTIONS_DOC", "check_fit_options",
           "resolve_fit_options"]

#: Intrinsic width of a cluster sequence added to every observable (mag; common practice).
DEFAULT_WIDTH = 0.03
#: Photometric error (mag) assumed where a magnitude has none (flagged ERROR_DEFAULTED): the
#: declaration of :func:`specpar.estimate` (common practice for catalogue photometry without errors).
DEFAULT_ERROR = ESTIMATE_OPTIONS["default_error"].default
#: Colour densities of the field component (see :mod:`.field`).
FIELD_MODELS = ("dwarfs+broad", "broad")
#: How uncertainties are derived.
METHODS = ("profile", "bootstrap")
#: Accepted ranges of the scalar options: (name, low, high).
_RANGES = (("feh", -2.5, 1.0), ("e_feh", 0.0, 1.0), ("sigma_rv", 0.0, 2.0),
           ("plx_zero_point", -0.2, 0.2), ("plx_systematic", 0.0, 0.5))
#: Plausible E(B-V) limits (mag), the mass-ratio grid sizes, widths (mag) and bootstrap sizes.
_EBV_LIMITS = (-0.5, 10)
_N_Q = (1, 50)
_WIDTHS = (0.005, 0.5)
_MIN_BOOT = 10
#: Accepted cluster ages (Myr): above 0, at most the age of the universe.
_AGE_MYR = (0.0, 14000.0)
#: Smallest error of an E(B-V) prior (mag): a reddening "known exactly" still gets a finite weight.
_MIN_PRIOR_ERROR = 1e-4

FIT_OPTIONS = OptionSet(
    Option("law", DEFAULT_LAW, "extinction law", kind=str, choices=tuple(LAWS)),
    Option("rv", DEFAULT_RV, "fixed R_V"),
    Option("locus", DEFAULT_LOCUS, "'young' (default: empirical young main sequence), 'field' (mean field "
           "dwarfs) or a locus table in the calibration format", kind=str, metavar="NAME|FILE"),
    Option("feh", 0.0, "cluster [Fe/H]"),
    Option("e_feh", 0.1, "uncertainty of [Fe/H]", unit="dex"),
    Option("ebv_prior", None, "known E(B-V) and its error, used as a prior (needed with one colour): "
           "VALUE ERROR or VALUE,ERROR", kind=tuple, metavar=("VALUE", "ERROR")),
    Option("sigma_rv", DEFAULT_SIGMA_RV, "uncertainty of R_V in the error budget"),
    Option("exclude_evolved", True, "do not set aside stars above the binary sequence (giants, turn-off, "
           "stragglers)", kind=bool, flag="--keep-evolved"),
    Option("plx_zero_point", DEFAULT_PLX_ZERO_POINT, f"parallax zero point removed from plx (default "
           f"{DEFAULT_PLX_ZERO_POINT} mas, Gaia DR3; DR2: -0.029)", unit="mas", metavar="MAS"),
    Option("plx_systematic", DEFAULT_PLX_SYSTEMATIC, "systematic floor of the mean parallax", unit="mas",
           metavar="MAS"),
    Option("bands", None, "use only these bands (comma-separated)", kind=list, metavar="B,V,..."),
    Option("magnitude", None, "ordinate band (default V, else G, Ic, ...)", kind=str, metavar="BAND"),
    Option("membership", None, "column of prior membership probabilities", kind=str, metavar="COLUMN"),
    Option("age", None, "cluster age: stars more massive than those still unevolved at this age are "
           "kept out of the fit (default: no such cut)", unit="Myr", metavar="MYR", show_default=False),
    Option("bright_limit", -np.inf, "ignore stars brighter than this ordinate magnitude (e.g. the turn-off)",
           metavar="MAG", show_default=False),
    Option("faint_limit", np.inf, "ignore stars fainter than this ordinate magnitude", metavar="MAG",
           show_default=False),
    Option("dm_range", (-2.0, 25.0), "allowed distance moduli: LO HI or LO,HI (default -2 25; write "
           "--dm-range=-1,20 for the comma form when LO < 0)", kind=tuple, metavar=("LO", "HI")),
    Option("ebv_range", (0.0, 3.0), "allowed E(B-V): LO HI or LO,HI (default 0 3; write --ebv-range=-0.05,2 "
           "for the comma form when LO < 0)", kind=tuple, metavar=("LO", "HI")),
    Option("binaries", True, "fit without the binary sequence", kind=bool, flag="--no-binaries"),
    Option("field_model", FIELD_MODELS[0], "colour density of field stars", kind=str, choices=FIELD_MODELS),
    Option("width", DEFAULT_WIDTH, "intrinsic width of the sequence", unit="mag", metavar="MAG"),
    Option("u_reddening", U_REDDENING[0], "U-band reddening: E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V) (default) "
           "or the law", kind=str, choices=U_REDDENING),
    Option("method", METHODS[0], "uncertainties from the likelihood curvature (sandwich form) or the "
           "bootstrap", kind=str, flag="--bootstrap"),
    Option("n_boot", 50, "bootstrap resamples", kind=int, flag=""),
    Option("seed", 0, "seed of the bootstrap", kind=int),
    Option("columns", None, "our column names to yours, e.g. {'V': 'Vmag'}", kind=dict, flag="--col"),
    Option("n_q", 10, "mass ratios of the binary sequence (flat in q)", kind=int, flag=""),
    Option("default_error", DEFAULT_ERROR, "error assumed where a magnitude has none", unit="mag", flag=""),
    Option("two_colour", True, "also derive E(B-V) from the (U-B, B-V) diagram and the Q method",
           kind=bool, flag=""),
)

#: The keywords of :func:`specpar.fit_cluster` as its docstring describes them (numpydoc).
OPTIONS_DOC = """\
    law : str
        Extinction law (``CCM89``, ``O94``, ``F99``, ``F19``, ``G23``).
    rv : float
        Fixed R_V = A_V / E(B-V).
    locus : {"young", "field"}, path or Calibration, optional
        ``"young"`` (default): the empirical young main sequence shipped as
        ``young_V.ecsv`` (Pleiades members' Gaia DR2 parallaxes, ~125 Myr,
        [Fe/H] ~ 0), which the unevolved part of any cluster sequence follows;
        ``"field"``: the mean field dwarf sequence (class V calibration, Pecaut &
        Mamajek 2013), brighter at a given colour; or a locus table in the
        calibration format. An optional ``mass`` column (Msun) is used for the
        binary sequence; an optional meta ``zero_point_uncertainty`` (mag) enters
        the error budget (default 0.1 mag).
    bands : sequence of str, optional
        Restrict the fit to these bands (default: all the input has).
    magnitude : str, optional
        Ordinate band (default the first of V, G, Ic, Rc, B, ... present).
    membership : str, optional
        Column of prior membership probabilities in [0, 1]; when given the field
        fraction is not fitted.
    columns : dict, optional
        Our column names to yours, e.g. ``{"V": "Vmag"}``.
    age : float, optional
        Cluster age (Myr). Stars brighter than the locus at the mass whose
        main-sequence life t_MS = 10 Gyr (M/Msun)^-2.5 is ``age`` /
        ``EVOLVED_LIFE_FRACTION`` (0.4) are set aside (flag ``AGE_LIMIT``) at the
        fitted distance and reddening: the locus describes unevolved stars, and in an
        old cluster the stars below the turn-off have already brightened. Default:
        no such cut (young clusters; or give ``bright_limit``).
    bright_limit, faint_limit : float
        Use only stars with ordinate magnitude inside these limits (e.g.
        ``bright_limit`` below the turn-off).
    dm_range, ebv_range : (float, float)
        Allowed ranges of distance modulus and E(B-V) (E(B-V) >= 0 by default; a
        value at the lower bound is reported as an upper limit).
    binaries : bool
        Include the unresolved-binary sequence (``n_q`` mass ratios, flat in q).
    width : float
        Intrinsic width of the sequence, added in quadrature to every observable (mag).
    u_reddening : {"empirical", "law"}
        U-band reddening from E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V) or from the law.
    method : {"profile", "bootstrap"}
        Uncertainties from the likelihood curvature (sandwich form) or from ``n_boot`` seeded resamples.
    seed : int
        Seed of the bootstrap.
    default_error : float
        Error (mag) assumed where a magnitude has none (flagged).
    two_colour : bool
        Also derive E(B-V) from the (U-B, B-V) diagram and the Q method when U, B, V exist.
    field_model : {"dwarfs+broad", "broad"}
        Colour density of the field component (see the module documentation).
    feh, e_feh : float
        Cluster metallicity [Fe/H] and its uncertainty (dex): the locus is made
        brighter by ``FEH_SLOPE * feh`` mag at fixed colour; both the [Fe/H]
        error and the slope's uncertainty enter the error budget.
    ebv_prior : (float, float), optional
        A known E(B-V) and its 1-sigma error, used as a Gaussian prior. Needed
        with only two bands (one colour), where the reddening vector runs along
        the sequence and distance and reddening cannot be told apart.
    sigma_rv : float
        Uncertainty of R_V propagated into the error budget (0 to leave it out).
    exclude_evolved : bool
        Keep stars brighter than the unresolved-binary sequence at their colour
        (subgiants, giants, turn-off stars, blue stragglers) out of the distance
        fit (flag ``EVOLVED``), then refit.
    plx_zero_point, plx_systematic : float
        With ``plx`` and ``e_plx`` columns (mas): zero point removed from the
        parallaxes (default Gaia EDR3/DR3, -0.017 mas; use -0.029 for DR2) and
        the systematic floor of the cluster mean parallax (mas).
"""


def resolve_fit_options(given: dict) -> tuple[dict, dict]:
    """Every option of a fit (the declared defaults overridden by ``given``), and the
    checked, normalised values of :func:`check_fit_options`; :class:`InputError` for an
    unknown name or a refused value (the messages of :func:`check_fit_options` first)."""
    unknown = set(given) - set(FIT_OPTIONS.names())
    if unknown:
        FIT_OPTIONS.resolve(given, what="fit_cluster options")  # raises, naming them
    values = {**FIT_OPTIONS.defaults(), **given}
    checked = check_fit_options(values)
    return FIT_OPTIONS.resolve(given, what="fit_cluster options"), checked


def check_fit_options(v: dict) -> dict:
    """Check the options of a fit; returns the normalised law, rv, method, n_boot, feh,
    e_feh, ebv_prior, sigma_rv, plx_zero_point and plx_systematic."""
    check_law(v["law"], v["rv"])
    _check_ranges(v["dm_range"], v["ebv_range"])
    n_q, width, method, n_boot = v["n_q"], v["width"], v["method"], v["n_boot"]
    if not (isinstance(n_q, (int, np.integer)) and _N_Q[0] <= n_q <= _N_Q[1]):
        raise InputError(f"n_q (mass-ratio grid size) must be an integer in 1..50, got {n_q}")
    if not (np.isfinite(width) and _WIDTHS[0] <= width <= _WIDTHS[1]):
        raise InputError(f"width must be between 0.005 and 0.5 mag, got {width}")
    if method not in METHODS:
        raise InputError(f"method must be 'profile' or 'bootstrap', not {method!r}")
    if method == "bootstrap" and not (isinstance(n_boot, (int, np.integer)) and n_boot >= _MIN_BOOT):
        raise InputError(f"n_boot must be an integer >= 10 for the bootstrap, got {n_boot}")
    if not (np.isfinite(v["default_error"]) and v["default_error"] > 0):
        raise InputError(f"default_error must be > 0 mag, got {v['default_error']}")
    age = v.get("age")
    if age is not None and not (isinstance(age, (int, float, np.integer, np.floating)) and np.isfinite(age)
                                and _AGE_MYR[0] < age <= _AGE_MYR[1]):
        raise InputError(f"age must be a number of Myr in ({_AGE_MYR[0]:g}, {_AGE_MYR[1]:g}], got {age!r}")
    if not v["bright_limit"] < v["faint_limit"]:
        raise InputError(f"bright_limit ({v['bright_limit']}) must be brighter (smaller) than "
                         f"faint_limit ({v['faint_limit']})")
    out = dict(law=v["law"], rv=float(v["rv"]), method=method, n_boot=int(n_boot))
    out.update(_check_scalars(v))
    out["ebv_prior"] = _check_prior(v["ebv_prior"], v["ebv_range"])
    if v["field_model"] not in FIELD_MODELS:
        raise InputError(f"field_model must be 'dwarfs+broad' or 'broad', not {v['field_model']!r}")
    if v["u_reddening"] not in U_REDDENING:
        raise InputError(f"u_reddening must be 'empirical' or 'law', not {v['u_reddening']!r}")
    return out


def _check_ranges(dm_range, ebv_range):
    for name, rng in (("dm_range", dm_range), ("ebv_range", ebv_range)):
        if len(rng) != 2 or not (np.isfinite(rng[0]) and np.isfinite(rng[1]) and rng[0] < rng[1]):
            raise InputError(f"{name} must be two finite numbers, low < high; got {rng}")
    if ebv_range[0] < _EBV_LIMITS[0] or ebv_range[1] > _EBV_LIMITS[1]:
        raise InputError(f"ebv_range {ebv_range} is implausible; use limits within [-0.5, 10] mag")


def _check_scalars(v):
    out = {}
    for name, lo, hi in _RANGES:
        try:
            x = float(v[name])
        except (TypeError, ValueError):
            raise InputError(f"{name} must be a number, got {v[name]!r}") from None
        if not (np.isfinite(x) and lo <= x <= hi):
            raise InputError(f"{name} = {x} is outside the accepted range [{lo:g}, {hi:g}]; "
                             f"give a value inside it")
        out[name] = x
    return out


def _check_prior(ebv_prior, ebv_range):
    if ebv_prior is None:
        return None
    try:
        mu, sig = (float(x) for x in ebv_prior)
    except (TypeError, ValueError):
        raise InputError(f"ebv_prior must be (value, error) in mag, e.g. (0.04, 0.01); got "
                         f"{ebv_prior!r}") from None
    if not (np.isfinite(mu) and np.isfinite(sig) and sig > 0 and ebv_range[0] <= mu <= ebv_range[1]):
        raise InputError(f"ebv_prior {ebv_prior!r}: the value must lie in ebv_range "
                         f"[{ebv_range[0]:g}, {ebv_range[1]:g}] and the error be > 0 (use a small "
                         f"error, e.g. 0.005, for a reddening known well)")
    return (mu, max(sig, _MIN_PRIOR_ERROR))
