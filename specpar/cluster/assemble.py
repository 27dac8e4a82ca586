"""Assembling a :class:`.result.ClusterResult` from the fitted parameters: the
per-star columns and flags, the total uncertainties (statistical plus the
systematic budget), the two-colour and parallax parts, the warnings, the
member table with its metadata, and the data the diagrams need."""
from __future__ import annotations

import warnings

import numpy as np

from specpar.core.bands import band_index
from specpar.core.about import VERSION
from specpar.pipeline.estimate import attach_results
from specpar.calib.extinction import LAWS
from specpar.core.distance import dm_to_pc

from .diagnostics import (BINARY_GAIN, LIKELY_MEMBER, cluster_parallax, colour_chi2, dmag_single,
                          goodness_of_fit, member_mv_range)
from .flags import ClusterFlag, flag_text
from .likelihood import components, mixture
from .locus import unevolved_mass_limit
from .result import GOF_LIMIT, MEMBER_COLUMNS, ClusterFitWarning, ClusterResult
from .twocolour import two_colour_locus, two_colour_part
from .uncertainty import uncertainties

__all__ = ["assemble_result", "per_star_columns", "total_errors", "fit_warnings", "parallax_part",
           "member_table", "make_plot_data", "plot_colour", "sequences", "edge_warnings",
           "ASSUMPTIONS"]

#: Plotting colour preference (blue band, red band).
_PLOT_COLOURS = (("B", "V"), ("BP", "RP"), ("V", "Ic"), ("G", "RP"), ("V", "Rc"), ("V", "Ks"),
                 ("J", "Ks"), ("U", "B"))
#: One-sided 95 % point of a Gaussian (upper limit of E(B-V) at its bound).
Z95_ONE_SIDED = 1.645
#: E(B-V) within this of its lower bound (mag) is reported as an upper limit.
AT_BOUND = 1e-3
#: Correlation of (dm, E(B-V)) above which the two count as degenerate.
DEGENERATE_CORR = 0.95
#: Parallax and main-sequence distance moduli disagreeing by more than this (sigma) are in tension.
TENSION_SIGMA = 3
#: A distance modulus this close (mag) to an end of dm_range is not a measurement.
DM_EDGE = 0.05
#: A binary fraction at least this high is at or near its upper bound, with or without an error:
#: open clusters have 0.2-0.6 (common practice), so it signals a model that does not fit.
BINARY_AT_BOUND = 0.95
_PER_STAR = ("p_member", "p_binary", "p_field", "locus_sptnum", "dmag_single", "chi2_colour", "q_index",
             "ebv_q", "e_ebv_q")


def per_star_columns(model, theta, loc):
    """Per-star columns over every input row (NaN for rows not used), the colour
    chi-square of the used stars, and the ``used`` mask."""
    d = model["data"]
    comp = components(model, theta, want_post=True)
    _, _, (rS, rB, rF) = mixture(model, theta, comp)
    chi2c = colour_chi2(model, theta)
    N = len(d.flags)
    cols = {k: np.full(N, np.nan) for k in _PER_STAR}
    r = d.rows
    pm = rS + rB
    cols["p_member"][r], cols["p_binary"][r], cols["p_field"][r] = pm, rB, rF
    with np.errstate(invalid="ignore", divide="ignore"):
        cols["locus_sptnum"][r] = (rS * comp["pS"] + rB * np.nan_to_num(comp["pB"])) / pm
    cols["dmag_single"][r] = dmag_single(model, theta, loc, cols["locus_sptnum"][r])
    cols["chi2_colour"][r] = chi2c
    used = np.zeros(N, bool)
    used[r] = True
    return cols, chi2c, used


def _row_flags(d, cols, used):
    """The fit's flags plus NOT_USED, LIKELY_FIELD and LIKELY_BINARY."""
    flags = d.flags | np.where(~used, int(ClusterFlag.NOT_USED), 0)
    with np.errstate(invalid="ignore"):
        flags |= np.where(used & (cols["p_member"] < LIKELY_MEMBER), int(ClusterFlag.LIKELY_FIELD), 0)
        flags |= np.where(used & (cols["p_binary"] > 0.5 * cols["p_member"])
                          & (cols["p_member"] >= LIKELY_MEMBER), int(ClusterFlag.LIKELY_BINARY), 0)
    return flags


def total_errors(theta, cov, boot, budget, ebv_low):
    """Statistical and total errors, distance percentiles and the E(B-V) upper limit."""
    e_dm, e_ebv, corr, e_fb, e_ff, d50, d16, d84 = uncertainties(theta, cov, boot)
    sys_dm = float(np.sqrt(sum(v[0] ** 2 for v in budget.values() if np.isfinite(v[0]))))
    sys_ebv = float(np.sqrt(sum(v[1] ** 2 for v in budget.values() if np.isfinite(v[1]))))
    e_dm_tot, e_ebv_tot = float(np.hypot(e_dm, sys_dm)), float(np.hypot(e_ebv, sys_ebv))
    if np.isfinite(e_dm_tot):
        d16, d84 = (float(x) for x in dm_to_pc(theta[0] + np.array([-e_dm_tot, e_dm_tot])))
    ebv_upper = ebv_low + Z95_ONE_SIDED * e_ebv_tot if theta[1] - ebv_low < AT_BOUND else np.nan
    return dict(e_dm=e_dm, e_ebv=e_ebv, corr=corr, e_fb=e_fb, e_ff=e_ff, d50=d50, d16=d16, d84=d84,
                e_dm_tot=e_dm_tot, e_ebv_tot=e_ebv_tot, ebv_upper=ebv_upper)


def parallax_part(plx, dm, e_dm_tot, zero_point):
    """Result fields of the mean parallax (empty without one) and a tension warning, if any."""
    if plx is None:
        return {}, []
    out = dict(plx_mean=plx["plx"], e_plx_mean=plx["e_plx"], n_plx=plx["n"], plx_zero_point=zero_point,
               dm_plx=plx["dm"], e_dm_plx=plx["e_dm"])
    if not np.isfinite(plx["dm"]):
        return out, []
    z = (dm - plx["dm"]) / np.hypot(e_dm_tot, plx["e_dm"])
    w1, w2 = 1 / e_dm_tot ** 2, 1 / plx["e_dm"] ** 2
    out.update(plx_tension=float(z), dm_combined=float((w1 * dm + w2 * plx["dm"]) / (w1 + w2)),
               e_dm_combined=float(np.sqrt(1 / (w1 + w2))))
    if not abs(z) > TENSION_SIGMA:
        return out, []
    return out, [f"the main-sequence distance modulus {dm:.3f} and the parallax one "
                 f"{plx['dm']:.3f} disagree by {z:+.1f} sigma: the combined value is not "
                 "meaningful; check the locus, [Fe/H], reddening and parallax zero point"]


def fit_warnings(gof, err, has_prior, ebv_low):
    """Warnings on the goodness of fit, (dm, E(B-V)) degeneracy and an E(B-V) at its bound."""
    warn = []
    if np.isfinite(gof) and gof > GOF_LIMIT:
        warn.append(f"the sequence does not fit the members: reduced colour chi-square {gof:.2f} "
                    f"> {GOF_LIMIT:g}; check the photometric system, the locus (locus='young' or "
                    "'field', [Fe/H]) and the membership")
    corr = err["corr"]
    if np.isfinite(corr) and abs(corr) > DEGENERATE_CORR and not has_prior:
        warn.append(f"distance modulus and E(B-V) are almost degenerate (correlation {corr:+.2f}): "
                    "the colours barely separate reddening from distance; give ebv_prior or add bands")
    if np.isfinite(err["ebv_upper"]):
        warn.append(f"E(B-V) sits at its lower bound {ebv_low:g}: only an upper limit, "
                    f"E(B-V) < {err['ebv_upper']:.3f} (95%)")
    return warn


def edge_warnings(model, theta, err, ff):
    """Warnings on a fit without curvature, a distance modulus at the edge of its range and a
    binary fraction at its upper bound."""
    warn = []
    dm_range = model["dm_range"]
    if not (np.isfinite(err["e_dm_tot"]) and np.isfinite(err["e_ebv_tot"])):
        warn.append(f"no cluster sequence found: the likelihood has no curvature at the best point "
                    f"(distance modulus {theta[0]:.2f}, field fraction {ff:.2f}); the stars may "
                    "not be a cluster, or the locus, bands or dm_range do not fit them")
    elif min(theta[0] - dm_range[0], dm_range[1] - theta[0]) < DM_EDGE:
        warn.append(f"the distance modulus {theta[0]:.2f} sits at the edge of dm_range "
                    f"{dm_range[0]:g} to {dm_range[1]:g}: not a measurement")
    if model["binary"] is not None and theta[2] >= BINARY_AT_BOUND:
        warn.append(f"binary fraction {theta[2]:.2f}, at or near its upper bound: many members lie above the single-star "
                    "locus (a locus too faint for this cluster, e.g. a young or metal-rich one, or "
                    "unresolved evolved stars: for an old cluster give its age)")
    return warn


def _two_colour_columns(d, model, theta, loc, cols, used, flags):
    """The two-colour and Q-method part (None without U, B, V), its per-star columns and
    the Q_EARLY_TYPE flag added to ``flags`` (returned)."""
    r = d.rows
    pm = cols["p_member"][r]
    tc = two_colour_part(d, r, loc, model["ebv_range"], pm, cols["locus_sptnum"][r],
                         member_mv_range(model, theta, pm))
    if tc is not None:
        cols["q_index"], cols["ebv_q"], cols["e_ebv_q"] = tc["q"], tc["ebv_q_star"], tc["e_ebv_q_star"]
        flags |= np.where(tc["early"] & np.isfinite(tc["ebv_q_star"]), int(ClusterFlag.Q_EARLY_TYPE), 0)
    return tc, flags


def _two_colour_fields(tc):
    """Result fields of the two-colour part (NaN and 0 without it)."""
    if not tc:
        return dict(ebv_twocolour=np.nan, e_ebv_twocolour=np.nan, ebv_q=np.nan, e_ebv_q=np.nan, n_q=0)
    return dict(ebv_twocolour=tc["ebv_tc"], e_ebv_twocolour=tc["e_ebv_tc"], ebv_q=tc["ebv_q"],
                e_ebv_q=tc["e_ebv_q"], n_q=tc["n_q"])


def _age_fields(age, flags):
    """The age given, its unevolved mass limit and the number of stars set aside by it."""
    if age is None:
        return {}
    return {"age_myr": age, "age_mass_limit": unevolved_mass_limit(age),
            "n_age_limit": int(((flags & int(ClusterFlag.AGE_LIMIT)) != 0).sum())}


def _gaia_fields(model):
    """The members' (BP-RP)_0 that set the Gaia extinction coefficients, and those (per E(B-V))."""
    x0 = model.get("gaia_x0", np.nan)
    if not np.isfinite(x0):
        return {}
    lin = model["lin"]
    return {"gaia_bprp0": float(x0),
            "gaia_coefficients": {b: float(lin[band_index(b)]) for b in ("G", "BP", "RP")}}


def assemble_result(table, d, model, theta, ll, cov, boot, opts, loc, two_colour):
    """The :class:`ClusterResult` at the fitted ``theta`` (warnings are also issued as
    :class:`ClusterFitWarning`)."""
    cols, chi2c, used = per_star_columns(model, theta, loc)
    flags = _row_flags(d, cols, used)
    tc = None
    if two_colour:
        tc, flags = _two_colour_columns(d, model, theta, loc, cols, used, flags)
    budget = {k: (float(v[0]), float(v[1])) for k, v in opts["budget"].items()}
    lo_e = model["ebv_range"][0]
    err = total_errors(theta, cov, boot, budget, lo_e)
    ff = float(theta[3]) if d.prior is None else float(np.mean(1 - d.prior))
    e_ff = np.nan if d.prior is not None else err["e_ff"]
    r = d.rows
    gof, n_gof = goodness_of_fit(d, chi2c, cols["p_member"][r], cols["p_binary"][r])
    plx = cluster_parallax(d.frame, opts.get("columns"), r, cols["p_member"][r], opts["plx_zero_point"],
                           opts["plx_systematic"])
    warn = fit_warnings(gof, err, opts["ebv_prior"] is not None, lo_e)
    res_plx, plx_warn = parallax_part(plx, theta[0], err["e_dm_tot"], opts["plx_zero_point"])
    warn += plx_warn + edge_warnings(model, theta, err, ff)
    for w in warn:
        warnings.warn(w, ClusterFitWarning, stacklevel=3)
    res = ClusterResult(
        dm=float(theta[0]), e_dm=err["e_dm_tot"], ebv=float(theta[1]), e_ebv=err["e_ebv_tot"],
        corr=err["corr"], dist_pc=err["d50"], dist_lo_pc=err["d16"], dist_hi_pc=err["d84"],
        binary_fraction=float(theta[2]) if model["binary"] is not None else 0.0,
        e_binary_fraction=float(err["e_fb"]), field_fraction=ff, e_field_fraction=float(e_ff),
        n_input=len(d.flags), n_used=len(r), law=opts["law"], rv=opts["rv"], magnitude=d.names[d.k_ord],
        observables=tuple(d.names), method=opts["method"],
        n_boot=opts["n_boot"] if boot is not None else 0, seed=opts["seed"], **_two_colour_fields(tc),
        log_likelihood=ll, locus=loc.cal.describe(), e_dm_stat=float(err["e_dm"]),
        e_ebv_stat=float(err["e_ebv"]), budget=budget, ebv_upper=float(err["ebv_upper"]),
        locus_name=loc.cal.name, feh=opts["feh"], e_feh=opts["e_feh"], sigma_rv=opts["sigma_rv"],
        ebv_prior=tuple(opts["ebv_prior"] or ()), gof_chi2_red=gof, n_gof=n_gof,
        n_evolved=int(((flags & int(ClusterFlag.EVOLVED)) != 0).sum()), warnings=tuple(warn),
        **_age_fields(opts.get("age"), flags), **_gaia_fields(model), **res_plx)
    res.members = member_table(table, d, cols, used, flags, res)
    res.plot_data = make_plot_data(d, model, theta, loc, cols, used, tc)
    return res


def make_plot_data(d, model, theta, loc, cols, used, tc):
    """What :mod:`.plots` draws: stars, membership, fitted sequences, two-colour loci."""
    name, colour, pair = plot_colour(d)
    out = {"magnitude": d.names[d.k_ord], "mag": d.y_all[:, d.k_ord], "used": used,
           "p_member": cols["p_member"], "p_binary": cols["p_binary"], "colour_name": name,
           "colour": colour, "dm": theta[0], "ebv": theta[1]}
    if pair is not None:
        out["sequence"] = sequences(model, theta, loc, pair, d.names[d.k_ord])
    if tc is not None:
        spt, ub0, bv0, _ = two_colour_locus(loc)
        out["two_colour"] = {"ub": tc["ub"], "bv": tc["bv"], "ub0": ub0, "bv0": bv0,
                             "early": tc["early"], "ebv_tc": tc["ebv_tc"]}
    return out


def plot_colour(d):
    """(label, observed colour per input row, (blue band, red band)) for the diagrams."""
    mags = {n: k for k, n in enumerate(d.names) if d.L[k].sum() != 0}
    cols = {n: k for k, n in enumerate(d.names) if d.L[k].sum() == 0}
    pairs = list(_PLOT_COLOURS) + [tuple(n.split("-")) for n in cols]
    pairs += [(d.names[d.k_ord], n) for n in mags if n != d.names[d.k_ord]]
    for b1, b2 in pairs:
        name = f"{b1}-{b2}"
        val = np.full(len(d.y_all), np.nan)
        if b1 in mags and b2 in mags:
            val = d.y_all[:, mags[b1]] - d.y_all[:, mags[b2]]
        if name in cols:
            val = np.where(np.isfinite(val), val, d.y_all[:, cols[name]])
        if np.isfinite(val).any():
            return name, val, (b1, b2)
    return None, None, None


def sequences(model, theta, loc, pair, ordinate):
    """Fitted single and equal-mass binary sequences in (colour, ordinate magnitude)."""
    lin, quad = model["lin"], model["quad"]
    dm, e = theta[0], theta[1]
    A = lin * e + quad * e ** 2
    i1, i2, io = band_index(pair[0]), band_index(pair[1]), band_index(ordinate)
    M = loc.absmag
    colour = M[:, i1] - M[:, i2] + A[i1] - A[i2]
    mag = M[:, io] + dm + A[io]
    return {"colour": colour, "single": mag, "binary": mag - BINARY_GAIN,
            "colour0": M[:, i1] - M[:, i2], "mag0": M[:, io]}


#: What the member table's metadata says the fit assumed.
ASSUMPTIONS = (
    "Members lie on the locus (single stars) or on the unresolved-binary sequence "
    "(flat mass-ratio distribution); the prior along the locus is uniform in the "
    "ordinate's absolute magnitude; field stars follow a broad density; one extinction "
    "law at fixed R_V for the whole cluster; stars brighter than the binary sequence at "
    "their colour (flag EVOLVED) are left out of the fit; uncertainties are totals: "
    "statistical plus the systematic terms listed in cluster_fit.budget (locus zero "
    "point, metallicity, R_V, photometric zero points).")


def member_table(table, d, cols, used, flags, res):
    """Every input row with the per-star columns of :data:`MEMBER_COLUMNS` and metadata."""
    codes, notes = flag_text(flags)
    results = {"used": used, **cols, "flags": flags, "flag_codes": codes, "note": notes}
    meta = {"specpar_version": VERSION, "cluster_fit": res.as_dict(),
            "extinction_law_reference": LAWS[res.law][1],
            "flag_bits": {f.name: int(f) for f in ClusterFlag},
            "columns": {k: v[1] for k, v in MEMBER_COLUMNS.items()},
            "assumptions": ASSUMPTIONS}
    return attach_results(table, d.frame, results, meta, MEMBER_COLUMNS)
