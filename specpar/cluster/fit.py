"""Fitting a cluster's main sequence: :func:`fit_cluster`, the entry point that
reads the stars, builds the model, finds the starting point, sets aside evolved
stars and stars past the locus' end, maximises the likelihood and derives the
uncertainties (see the package documentation, :mod:`specpar.cluster`)."""
from __future__ import annotations

import inspect

import numpy as np

from specpar.calib.gaia_extinction import GAIA_BANDS, replace_gaia
from specpar.core.bands import band_index
from specpar.core.errors import InputError

from .assemble import assemble_result
from .data import BAD_ROWS, MIN_STARS, cluster_data, finalise_data, require_stars, usable_rows
from .diagnostics import age_mask, beyond_end_mask, evolved_mask
from .field import field_dwarf_logdensity, field_logdensity, outside_locus
from .flags import ClusterFlag
from .likelihood import components, maximise, mixture, subset_model
from .locus import (COARSE_STEP, DEFAULT_LOCUS_COLOUR_ZP, FEH_SLOPE, LOCUS_STEP, age_ordinate_limit,
                    build_locus, clouds, locus_zero_point, resolve_locus)
from .options import FIT_OPTIONS, OPTIONS_DOC, resolve_fit_options
from .reddening import reddening_vectors
from .start import coarse_start
from .uncertainty import bootstrap, hessian_cov, systematics

__all__ = ["fit_cluster"]

#: Above this many stars, the first (screening) fit uses an even subsample of them.
SUBFIT = 700
#: Passes of the coarse start that set aside stars past the locus' faint end; the first pass
#: searches only the brightest FIRST_BRIGHT_FRACTION of the stars.
START_PASSES = 4
FIRST_BRIGHT_FRACTION = 0.4
#: Refits after setting aside evolved stars and stars past the locus' end.
CUT_PASSES = 3
#: Starting binary and field fractions of the maximisation (typical of open clusters; common
#: practice).
START_BINARY_FRACTION, START_FIELD_FRACTION = 0.3, 0.2
#: Field dwarfs are reddened up to this multiple of the starting E(B-V) (at least the floor):
#: dwarfs in front of and behind the cluster.
FIELD_DWARF_EBV_FACTOR, FIELD_DWARF_EBV_FLOOR = 2, 0.05
#: The ordinate range of the stars is widened by this (mag) for the uniform member prior.
WINDOW_PAD = 1.0
#: Locus points are spaced LOCUS_STEP_FACTOR times the 5th percentile of the stars' sigmas
#: (within LOCUS_STEP; see :data:`.locus.LOCUS_STEP`).
LOCUS_STEP_FACTOR, LOCUS_STEP_PERCENTILE = 1.2, 5
#: Gaia-band extinction: at most this many refits with the coefficients of the members'
#: colour, stopping when no coefficient moves by more than GAIA_TOL (per E(B-V));
#: members for that colour are stars with member probability above LIKELY_MEMBER_FOR_COLOUR.
GAIA_PASSES, GAIA_TOL, LIKELY_MEMBER_FOR_COLOUR = 5, 1e-3, 0.5
#: Rows set aside after the first fits.
SET_ASIDE = BAD_ROWS | ClusterFlag.EVOLVED | ClusterFlag.BEYOND_LOCUS_END | ClusterFlag.AGE_LIMIT


def fit_cluster(table, **options):
    """Distance modulus and E(B-V) of a cluster by fitting its main-sequence locus.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        One row per star with magnitudes ``U B V Rc Ic J H Ks G BP RP`` and
        errors ``e_<band>``, and/or colours such as ``B-V`` (as for
        :func:`specpar.estimate`); no spectral types needed.
    {options}
    Returns
    -------
    ClusterResult
        Fitted values, their total uncertainties (statistical and systematic terms
        in ``budget``), goodness of fit, warnings, parallax comparison, and a
        per-star table ``members`` (every input row).

    Raises
    ------
    InputError
        (a ValueError) Unusable options or input: too few usable stars, no colour, all stars outside the
        locus, or a single colour without ``ebv_prior`` (distance and reddening degenerate).

    Warns
    -----
    ClusterFitWarning
        Poor goodness of fit, near-degenerate (dm, E(B-V)), E(B-V) at its bound, a binary
        fraction at its bound, or parallax tension above 3 sigma (also in ``warnings``).

    References
    ----------
    See the module documentation (:mod:`specpar.cluster`).
    """
    v, opts = resolve_fit_options(options)
    opts["u_reddening"] = v["u_reddening"]
    d, loc, red = _prepare(table, v, opts)
    model, window = _build_model(d, loc, red, v, opts)
    # absolute ordinate magnitude above which stars have evolved at the given age (None: no cut)
    model["age_limit"] = None if v["age"] is None else age_ordinate_limit(loc, d.L, d.k_ord, float(v["age"]))
    opts["age"] = None if v["age"] is None else float(v["age"])
    dm0, e0 = _starting_point(model, opts)
    model["logF"] = _field_density(model, window, v["field_model"], e0)
    ff0 = 0.0 if d.prior is not None else START_FIELD_FRACTION
    x0 = [dm0, e0, START_BINARY_FRACTION if model["binary"] is not None else 0.0, ff0]
    theta, ll = _fit_with_cuts(model, x0, v["exclude_evolved"])
    theta, ll = _gaia_reddening(model, theta, ll, loc, float(v["rv"]))
    cov = hessian_cov(model, theta, robust=True)
    opts["budget"] = systematics(model, theta, opts)
    boot = bootstrap(model, theta, v["n_boot"], v["seed"]) if v["method"] == "bootstrap" else None
    opts["seed"] = int(v["seed"])
    opts["columns"] = v["columns"]
    return assemble_result(table, d, model, theta, ll, cov, boot, opts, loc, v["two_colour"])


fit_cluster.__doc__ = fit_cluster.__doc__.replace("    {options}", OPTIONS_DOC)


fit_cluster.__signature__ = inspect.Signature(
    [inspect.Parameter("table", inspect.Parameter.POSITIONAL_OR_KEYWORD)]
    + [inspect.Parameter(o.name, inspect.Parameter.KEYWORD_ONLY, default=o.default) for o in FIT_OPTIONS])


def _prepare(table, v, opts):
    """The stars' data, the locus (shifted for [Fe/H]) and the reddening vectors; the locus'
    stated zero-point uncertainties go into ``opts``."""
    cal = resolve_locus(v["locus"])
    d = cluster_data(table, dict(columns=v["columns"], default_error=v["default_error"], bands=v["bands"],
                                 magnitude=v["magnitude"], width=v["width"], bright_limit=v["bright_limit"],
                                 faint_limit=v["faint_limit"], membership=v["membership"]))
    if np.linalg.matrix_rank(d.L) < 3 and opts["ebv_prior"] is None:
        raise InputError(
            f"only one colour can be formed from the bands used ({', '.join(d.names)}): along a "
            "single colour the reddening vector runs nearly parallel to the main sequence, so the "
            "distance modulus and E(B-V) cannot be separated (any point of a long valley fits). Give "
            "a known reddening as a prior, ebv_prior=(value, error) (CLI --ebv-prior VALUE,ERROR), or "
            "add a band (a second colour, e.g. U or Ks with B and V, or BP and RP with G)")
    red = reddening_vectors(v["law"], v["rv"], v["u_reddening"])
    opts["locus_zp"] = locus_zero_point(cal)
    opts["locus_colour_zp"] = locus_zero_point(cal, "colour_zero_point_uncertainty", DEFAULT_LOCUS_COLOUR_ZP)
    loc = build_locus(cal, (d.L != 0).any(axis=0), -FEH_SLOPE * opts["feh"])
    return d, loc, red


def _build_model(d, loc, red, v, opts):
    """The likelihood model: model clouds spaced for these stars' errors, rows the reddened
    locus cannot reach set aside (OUTSIDE_LOCUS), and the broad field density."""
    ebv_range = v["ebv_range"]
    require_stars(d, usable_rows(d.flags), "with an ordinate magnitude, a colour and inside the limits")
    pre = usable_rows(d.flags)
    window = float(np.ptp(d.y_all[:, d.k_ord][pre]) + WINDOW_PAD)
    step = float(np.clip(LOCUS_STEP_FACTOR * np.nanpercentile(np.sqrt(d.var_all[pre]), LOCUS_STEP_PERCENTILE),
                         *LOCUS_STEP))
    single, binary = clouds(loc, d.L, d.k_ord, window, v["n_q"] if v["binaries"] else 0, step)
    d.flags |= np.where(outside_locus(d, single, *red, ebv_range), int(ClusterFlag.OUTSIDE_LOCUS), 0)
    usable = usable_rows(d.flags)
    require_stars(d, usable, "with colours the locus can reach for E(B-V) in "
                             f"[{ebv_range[0]:g}, {ebv_range[1]:g}] (locus {loc.cal.name}, "
                             f"types {loc.sptnum[0]:g}-{loc.sptnum[-1]:g})")
    finalise_data(d, usable)
    model = {"data": d, "single": single, "binary": binary, "lin": red[0], "quad": red[1],
             "dm_range": tuple(map(float, v["dm_range"])), "ebv_range": tuple(map(float, ebv_range)),
             "logF": field_logdensity(d, window), "width": float(v["width"]),
             "coarse": clouds(loc, d.L, d.k_ord, window, 0, COARSE_STEP)[0],
             "ebv_prior": opts["ebv_prior"], "window": window}
    return model, window


def _starting_point(model, opts):
    """Starting (dm, E(B-V)) from the coarse start; stars past the locus' faint end at it are
    set aside (BEYOND_LOCUS_END) and the start repeated. A prior fixes the start's E(B-V)."""
    d = model["data"]
    for it in range(START_PASSES):
        dm0, e0 = coarse_start(model, bright_fraction=FIRST_BRIGHT_FRACTION if it == 0 else 1.0)
        if opts["ebv_prior"] is not None:
            e0 = float(np.clip(opts["ebv_prior"][0], *model["ebv_range"]))
        end = beyond_end_mask(model, np.array([dm0, e0]))
        old = _age_cut(model, np.array([dm0, e0]))
        if not (end.any() or old.any()) or (~(end | old)).sum() < MIN_STARS:
            break
        d.flags[d.rows[end]] |= int(ClusterFlag.BEYOND_LOCUS_END)
        d.flags[d.rows[old]] |= int(ClusterFlag.AGE_LIMIT)
        finalise_data(d, usable_rows(d.flags, SET_ASIDE))
        model["logF"] = field_logdensity(d, model["window"])
    return dm0, e0


def _field_density(model, window, field_model, e_start):
    """Log density of the field component per used star: the broad density, mixed half and
    half with field dwarfs for ``field_model="dwarfs+broad"``."""
    d = model["data"]
    logF = field_logdensity(d, window)
    if field_model == "dwarfs+broad":
        dwarfs = field_dwarf_logdensity(d, window, model["coarse"], (model["lin"], model["quad"]),
                                        FIELD_DWARF_EBV_FACTOR * max(e_start, FIELD_DWARF_EBV_FLOOR))
        logF = np.logaddexp(dwarfs, logF) - np.log(2.0)
    return logF


def _uses_gaia(d) -> bool:
    return any((d.L[:, band_index(b)] != 0).any() for b in GAIA_BANDS)


def member_colour(model, theta, loc):
    """Median, 16th and 84th percentile of the intrinsic (BP-RP)_0 of the likely members at
    ``theta``: the locus colour at each star's posterior type, over stars more likely members
    than field (NaN if none)."""
    comp = components(model, theta, want_post=True)
    rS, rB, _ = mixture(model, theta, comp, per_star=True)[2]
    spt = np.where(rS >= rB, comp["pS"], comp["pB"])
    ok = (rS + rB > LIKELY_MEMBER_FOR_COLOUR) & np.isfinite(spt)
    mags = loc.cal.evaluate(spt[ok]).absmag
    c = mags[:, band_index("BP")] - mags[:, band_index("RP")]
    c = c[np.isfinite(c)]
    if not c.size:
        return np.nan, np.nan, np.nan
    return tuple(float(x) for x in np.percentile(c, [50, 16, 84]))


def _gaia_reddening(model, theta, ll, loc, rv):
    """With Gaia bands: their extinction coefficients for the members' median intrinsic
    (BP-RP)_0 at the fitted E(B-V) (:mod:`specpar.calib.gaia_extinction`), and the refit,
    repeated until the coefficients settle (at most GAIA_PASSES times)."""
    d = model["data"]
    model["gaia_x0"], model["gaia_x0_range"] = np.nan, (np.nan, np.nan)
    if not _uses_gaia(d):
        return theta, ll
    for i in range(GAIA_PASSES):
        x0, lo, hi = member_colour(model, theta, loc)
        if not np.isfinite(x0):
            break
        lin = replace_gaia(model["lin"], x0, theta[1], rv)  # only G, BP and RP change
        model["gaia_x0"], model["gaia_x0_range"] = x0, (lo, hi)
        if np.max(np.abs(lin - model["lin"])) < GAIA_TOL:
            break
        model["lin"] = lin
        theta, ll = _best_of(model, theta) if i == 0 else maximise(model, theta)
    return theta, ll


def _best_of(model, theta):
    """Maximise from ``theta`` and from a new coarse start (new coefficients move the reddening
    vector, and with it the valley the likelihood follows); the higher maximum."""
    fits = [maximise(model, theta)]
    if model["ebv_prior"] is None:
        dm0, e0 = coarse_start(model)
        fits.append(maximise(model, np.array([dm0, e0, *theta[2:]])))
    return max(fits, key=lambda f: f[1])


def _age_cut(model, theta):
    """Stars past the age limit at ``theta`` (none without the ``age`` option)."""
    if model.get("age_limit") is None:
        return np.zeros(len(model["data"].rows), bool)
    return age_mask(model, theta, model["age_limit"])


def _fit_with_cuts(model, x0, exclude_evolved):
    """Maximise from ``x0``; set aside evolved stars and stars past the locus' end and refit
    (up to :data:`CUT_PASSES` times). Large samples screen on an even subsample first."""
    d = model["data"]
    ll = None
    if len(d.rows) > SUBFIT:
        pick = np.unique(np.linspace(0, len(d.rows) - 1, SUBFIT).astype(int))
        theta, _ = maximise(subset_model(model, pick), x0)
    else:
        theta, ll = maximise(model, x0)
    for _ in range(CUT_PASSES):
        ev = evolved_mask(model, theta) if exclude_evolved else np.zeros(len(d.rows), bool)
        end = beyond_end_mask(model, theta)
        old = _age_cut(model, theta)
        ev &= ~old
        if not (ev.any() or end.any() or old.any()) or (~(ev | end | old)).sum() < MIN_STARS:
            break
        d.flags[d.rows[old]] |= int(ClusterFlag.AGE_LIMIT)
        d.flags[d.rows[ev]] |= int(ClusterFlag.EVOLVED)
        d.flags[d.rows[end & ~ev & ~old]] |= int(ClusterFlag.BEYOND_LOCUS_END)
        old_rows, old_logF = d.rows, model["logF"]
        finalise_data(d, usable_rows(d.flags, SET_ASIDE))
        model["logF"] = old_logF[np.isin(old_rows, d.rows)]  # field density of the full sample
        theta, ll = maximise(model, theta)
    if ll is None:
        theta, ll = maximise(model, theta)
    return theta, ll
