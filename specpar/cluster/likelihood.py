"""The mixture likelihood of a cluster fit and its maximum.

Each star is a single member on the locus, an unresolved binary member or a
field star; its member densities are sums over the model clouds of
:mod:`.locus` (only points within :data:`NSIG` sigma in the ordinate), shifted
by the distance modulus and reddened by E(B-V). Parameters ``theta`` are
(dm, E(B-V), binary fraction, field fraction); the gradient is analytic.

References
----------
Byrd, R. H., Lu, P., Nocedal, J. & Zhu, C. 1995, SIAM J. Sci. Comput. 16, 1190
(L-BFGS-B).
"""
from __future__ import annotations

import numpy as np
from scipy import optimize

from specpar.core.errors import InputError

from .data import CHUNK, Data

__all__ = ["NSIG", "observable_shift", "fitted_shift", "component_logdensity", "components", "mixture",
           "negloglike", "parameter_bounds", "maximise", "subset_model", "FIELD_FRACTION_BOUNDS"]

#: Half-width, in sigma of a star's ordinate, of the window of locus points summed for it:
#: the Gaussian tail beyond 6 sigma is ~2e-9, so the sum is exact to a part in 1e7.
NSIG = 6.0
#: Field fraction bounds when it is fitted: above 0 keeps log L finite (common practice).
FIELD_FRACTION_BOUNDS = (1e-3, 0.95)
#: L-BFGS-B settings: iterations, relative tolerance in log L and projected-gradient tolerance.
OPTIMISER_OPTIONS = {"maxiter": 300, "ftol": 1e-10, "gtol": 1e-4}


def observable_shift(d: Data, lin, quad, dm, ebv):
    """Shift of every observable, and its derivatives w.r.t. (dm, E(B-V))."""
    b, c = d.L @ lin, d.L @ quad
    return d.a * dm + b * ebv + c * ebv ** 2, np.stack([d.a, b + 2 * c * ebv])


def fitted_shift(model, theta):
    """Shift of every observable at (dm, E(B-V)) = ``theta[:2]``."""
    return observable_shift(model["data"], model["lin"], model["quad"], theta[0], theta[1])[0]


def component_logdensity(cloud, y, ivar, var_ord, k_ord, shift, gdir, want_post=False):
    """log density of each star under a cloud, and the gradient of it w.r.t. (dm, E).

    Sums only the points within NSIG sigma of the star in the ordinate.
    """
    t = y[:, k_ord] - shift[k_ord]
    half = NSIG * np.sqrt(var_ord)
    lo = np.searchsorted(cloud.m_ord, t - half)
    hi = np.searchsorted(cloud.m_ord, t + half)
    kmax = max(int((hi - lo).max()), 1)
    idx = lo[:, None] + np.arange(kmax)[None, :]
    valid = idx < hi[:, None]
    idx = np.minimum(idx, len(cloud.m_ord) - 1)
    r = y[:, None, :] - cloud.mu0[idx] - shift
    rw = r * ivar[:, None, :]
    lp = np.where(valid, cloud.logw[idx] - 0.5 * np.einsum("npk,npk->np", r, rw), -np.inf)
    top = lp.max(axis=1)
    top = np.where(np.isfinite(top), top, 0.0)
    ex = np.exp(lp - top[:, None])
    tot = ex.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        lse = np.log(tot) + top
        resp = np.where(tot[:, None] > 0, ex / tot[:, None], 0.0)
    grad = np.einsum("np,npk->nk", resp, rw) @ gdir.T
    post = (resp * cloud.spt[idx]).sum(axis=1) if want_post else None
    return lse, grad, post


def components(model, theta, want_post=False):
    """(log S, grad S, log B, grad B[, posterior types]) over all used stars, in blocks."""
    d, single, binary = model["data"], model["single"], model["binary"]
    shift, gdir = observable_shift(d, model["lin"], model["quad"], theta[0], theta[1])
    var_ord = d.ordinate_variance()
    n = len(d.y)
    out = {"lS": np.empty(n), "gS": np.empty((n, 2)), "lB": np.full(n, -np.inf),
           "gB": np.zeros((n, 2)), "pS": np.full(n, np.nan), "pB": np.full(n, np.nan)}
    for s in range(0, n, CHUNK):
        sl = slice(s, min(n, s + CHUNK))
        args = (d.y[sl], d.ivar[sl], var_ord[sl], d.k_ord, shift, gdir, want_post)
        out["lS"][sl], out["gS"][sl], out["pS"][sl] = component_logdensity(single, *args)
        if binary is not None:
            out["lB"][sl], out["gB"][sl], out["pB"][sl] = component_logdensity(binary, *args)
    for k in ("lS", "lB"):
        out[k] = out[k] + d.lognorm
    return out


def mixture(model, theta, comp, per_star=False):
    """Log-likelihood, its gradient in (dm, E, f_bin, f_field) and responsibilities.

    With ``per_star`` the gradient comes back per star, shape (n_stars, 4)."""
    d = model["data"]
    fb, ff = theta[2], theta[3]
    with np.errstate(divide="ignore"):
        if d.prior is not None:
            lpi, l1pi = np.log(d.prior), np.log1p(-d.prior)
        else:
            lpi, l1pi = np.log1p(-ff), np.log(ff)
        tS = lpi + np.log1p(-fb) + comp["lS"]
        tB = lpi + np.log(fb) + comp["lB"]
        tF = l1pi + model["logF"]
    lT = np.logaddexp(np.logaddexp(tS, tB), tF)
    rS, rB, rF = np.exp(tS - lT), np.exp(tB - lT), np.exp(tF - lT)
    g = np.zeros((lT.size, 4))
    g[:, :2] = rS[:, None] * comp["gS"] + rB[:, None] * comp["gB"]
    if model["binary"] is not None:
        g[:, 2] = np.exp(lpi + comp["lB"] - lT) - np.exp(lpi + comp["lS"] - lT)
    if d.prior is None:
        with np.errstate(divide="ignore"):
            lM = np.logaddexp(np.log1p(-fb) + comp["lS"], np.log(fb) + comp["lB"])
        g[:, 3] = np.exp(model["logF"] - lT) - np.exp(lM - lT)
    return float(lT.sum()), (g if per_star else g.sum(axis=0)), (rS, rB, rF)


def negloglike(theta, model):
    """-log L and its gradient, with the Gaussian E(B-V) prior when the model has one."""
    ll, g, _ = mixture(model, theta, components(model, theta))
    prior = model.get("ebv_prior")
    if prior is not None:  # Gaussian prior on E(B-V): a known reddening with its error
        z = (theta[1] - prior[0]) / prior[1]
        ll -= 0.5 * z * z
        g = g.copy()
        g[1] -= z / prior[1]
    return -ll, -g


def parameter_bounds(model):
    """(low, high) of each parameter of ``theta``; fixed parameters get low == high."""
    d = model["data"]
    fb_hi = 0.0 if model["binary"] is None else 1.0
    ff = (0.0, 0.0) if d.prior is not None else FIELD_FRACTION_BOUNDS
    return [model["dm_range"], model["ebv_range"], (0.0, fb_hi), ff]


def maximise(model, x0):
    """The maximum-likelihood ``theta`` from ``x0`` (clipped into the bounds) and log L there."""
    bounds = parameter_bounds(model)
    x0 = np.clip(np.asarray(x0, float), [b[0] for b in bounds], [b[1] for b in bounds])
    res = optimize.minimize(negloglike, x0, args=(model,), jac=True, method="L-BFGS-B",
                            bounds=bounds, options=dict(OPTIMISER_OPTIONS))
    if not np.isfinite(res.fun):
        raise InputError("the cluster likelihood could not be evaluated (no star is near the locus for "
                         "the starting point); check the photometry, bands and dm_range/ebv_range")
    return res.x, -res.fun


def subset_model(model, pick):
    """The model restricted to the used stars ``pick`` (indices into the used stars)."""
    return {**model, "data": model["data"].subset(pick), "logF": model["logF"][pick]}
