"""Uncertainties of a cluster fit: the curvature of the log-likelihood in the
sandwich form, the bootstrap, and the systematic terms of the error budget
propagated to first order through the likelihood maximum.

References
----------
Huber, P. J. 1967, Proc. Fifth Berkeley Symp. Math. Stat. Prob. 1, 221
(sandwich covariance under misspecification) (from memory).
Efron, B. 1979, Ann. Statist. 7, 1 (bootstrap).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from specpar.calib.gaia_extinction import replace_gaia
from specpar.core.bands import BAND_NAMES, band_index
from specpar.core.distance import dm_to_pc
from specpar.pipeline.options import OPTIONS as ESTIMATE_OPTIONS

from .likelihood import components, maximise, mixture, negloglike, parameter_bounds, subset_model
from .locus import E_FEH_SLOPE, FEH_SLOPE
from .numerics import hessian_from_gradient
from .reddening import reddening_vectors

__all__ = ["DEFAULT_SIGMA_RV", "PHOT_ZP", "hessian_cov", "bootstrap", "shifted_theta", "systematics",
           "uncertainties"]

#: Uncertainty of R_V used in the error budget: the estimate's own declaration (the Galactic
#: scatter of R_V around 3.1 is ~0.2; Fitzpatrick & Massa 2007, ApJ 663, 320, from memory).
DEFAULT_SIGMA_RV = ESTIMATE_OPTIONS["sigma_rv"].default
#: Photometric zero-point uncertainty per band (mag) in the error budget (common practice;
#: Gaia DR2: Evans, D. W. et al. 2018, A&A 616, A4, a few mmag in G and ~0.01 in BP/RP,
#: from memory).
PHOT_ZP = {"U": 0.03, "B": 0.015, "V": 0.015, "Rc": 0.015, "Ic": 0.015, "J": 0.01, "H": 0.01,
           "Ks": 0.01, "G": 0.005, "BP": 0.01, "RP": 0.01}
#: Zero-point uncertainty (mag) of a band not listed in PHOT_ZP (common practice).
PHOT_ZP_OTHER = 0.01
#: Step of the numerical Hessian in each parameter (mag for dm and E(B-V); fractions).
HESSIAN_STEP = 1e-3
#: A fraction closer than this to a bound is held fixed in the Hessian (no curvature there).
BOUND_MARGIN = 2e-3
#: Shift (mag) of one observable for the first-order derivatives of the error budget.
BUDGET_STEP = 0.01


def hessian_cov(model, theta, robust=False):
    """Covariance of the free parameters from the numerical Hessian of -log L
    (or the sandwich estimator built on it, with ``robust``)."""
    bounds = parameter_bounds(model)
    # dm and E(B-V) always (the likelihood is defined a little beyond the E(B-V) bound, so a
    # value at the bound still gets its curvature); the fractions only off their bounds
    free = [i for i, (lo, hi) in enumerate(bounds) if i < 2 or (hi > lo
            and min(theta[i] - lo, hi - theta[i]) > BOUND_MARGIN)]
    H = hessian_from_gradient(lambda t: negloglike(t, model)[1], theta, free, HESSIAN_STEP)
    cov = np.full((len(theta), len(theta)), np.nan)
    try:
        inv = np.linalg.inv(H)
    except np.linalg.LinAlgError:
        return cov
    if robust:
        # Huber (1967) sandwich H^-1 J H^-1 with J = sum of per-star score outer products:
        # stays honest when the mixture model is only approximately right
        g = mixture(model, theta, components(model, theta), per_star=True)[1][:, free]
        J = g.T @ g
        if model.get("ebv_prior") is not None:
            J[1, 1] += 1.0 / model["ebv_prior"][1] ** 2
        inv = inv @ J @ inv
    if np.all(np.diag(inv) > 0):
        cov[np.ix_(free, free)] = inv
    model["_hessian"] = (H, free)
    return cov


def bootstrap(model, theta, n_boot, seed):
    """Refit ``n_boot`` resamples of the stars (seeded); returns the (n_boot, 4) fits."""
    rng = np.random.default_rng(seed)
    n = len(model["data"].y)
    fits = np.empty((n_boot, len(theta)))
    for i in range(n_boot):  # loop over resamples; each fit is vectorised over stars
        pick = rng.integers(0, n, n)
        fits[i], _ = maximise(subset_model(model, pick), theta)
    return fits


def shifted_theta(model, theta, perturbed):
    """First-order change of the free parameters when the model changes to ``perturbed``:
    d theta = -H^-1 (g' - g), g the gradient of -log L at ``theta`` (implicit function theorem)."""
    H, free = model["_hessian"]
    if "_g0" not in model:
        model["_g0"] = negloglike(theta, model)[1][free]
    g0 = model["_g0"]
    g1 = negloglike(theta, perturbed)[1][free]
    try:
        step = -np.linalg.solve(H, g1 - g0)
    except np.linalg.LinAlgError:
        return np.array([np.nan, np.nan])
    return step[:2]


def systematics(model, theta, opts):
    """Systematic terms of the error budget: name -> (d dm, d E(B-V)) at 1 sigma.

    * locus zero point (age, calibration), as stated by the locus file;
    * metallicity: the [Fe/H] error and the slope of the metallicity shift;
    * R_V: refit to first order with R_V +- sigma_rv;
    * photometric zero point of each band used (:data:`PHOT_ZP`), to first order.
    """
    d = model["data"]
    out = {"locus_zero_point": (opts["locus_zp"], 0.0)}
    feh, e_feh = opts["feh"], opts["e_feh"]
    out["metallicity"] = (float(np.hypot(FEH_SLOPE * e_feh, E_FEH_SLOPE * feh)), 0.0)
    if "_hessian" not in model:
        return out
    x0 = model.get("gaia_x0", np.nan)
    if opts["sigma_rv"] > 0:
        rv1 = opts["rv"] + opts["sigma_rv"]
        lin, _ = reddening_vectors(opts["law"], rv1, opts["u_reddening"])
        if np.isfinite(x0):
            lin = replace_gaia(lin, x0, theta[1], rv1)
        dt = shifted_theta(model, theta, {**model, "lin": lin})
        out["R_V"] = (abs(float(dt[0])), abs(float(dt[1])))
    if np.isfinite(x0):
        # one set of Gaia coefficients for every member: those of the members' 16th and 84th
        # percentile colours bracket the error of that simplification
        ends = [shifted_theta(model, theta, {**model, "lin": replace_gaia(model["lin"], x, theta[1],
                                                                          opts["rv"])})
                for x in model["gaia_x0_range"]]
        dt = 0.5 * np.abs(ends[1] - ends[0])
        out["gaia_extinction_colour"] = (float(dt[0]), float(dt[1]))
    # first order, (dm, E) are linear in a shift of the observed values: one derivative per
    # observable, then every band zero point and locus colour is a combination of them
    h = BUDGET_STEP
    jac = np.zeros((len(d.names), 2))  # d(dm, E) / d(observable k)
    for k in range(len(d.names)):
        step = np.zeros(len(d.names))
        step[k] = h
        moved = replace(d, y=d.y + np.where(d.ivar > 0, step[None, :], 0.0))
        jac[k] = shifted_theta(model, theta, {**model, "data": moved}) / h
    for b in BAND_NAMES:
        ib = band_index(b)
        if not (d.L[:, ib] != 0).any():
            continue
        dt = (d.L[:, ib] @ jac) * PHOT_ZP.get(b, PHOT_ZP_OTHER)
        out[f"zero_point_{b}"] = (abs(float(dt[0])), abs(float(dt[1])))
    # each locus colour, relative to the ordinate band, uncertain by locus_colour_zp
    for k in range(len(d.names)):
        if k != d.k_ord:
            dt = jac[k] * opts["locus_colour_zp"]
            out[f"locus_colour_{d.names[k]}-{d.names[d.k_ord]}"] = (abs(float(dt[0])), abs(float(dt[1])))
    return out


def uncertainties(theta, cov, boot):
    """(e_dm, e_ebv, corr, e_fb, e_ff, d50, d16, d84)."""
    if boot is not None:
        e = boot.std(axis=0, ddof=1)
        corr = float(np.corrcoef(boot[:, 0], boot[:, 1])[0, 1]) if e[0] > 0 and e[1] > 0 else np.nan
        d16, d50, d84 = np.percentile(dm_to_pc(boot[:, 0]), [16, 50, 84])
        return e[0], e[1], corr, e[2], e[3], float(dm_to_pc(theta[0])), float(d16), float(d84)
    e = np.sqrt(np.diag(cov))
    corr = float(cov[0, 1] / (e[0] * e[1]))
    d = dm_to_pc(theta[0] + np.array([0.0, -e[0], e[0]]))
    return e[0], e[1], corr, e[2], e[3], float(d[0]), float(d[1]), float(d[2])
