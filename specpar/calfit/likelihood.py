"""Per-star likelihood of an observed parallax given the apparent magnitude, for a
Gaussian luminosity function (or a mixture of two) and a space density that is
uniform or an exponential disk; and the summary a calibration table stores.
"""
from __future__ import annotations

import numpy as np

__all__ = ["star_loglike", "mixture_summary", "OUTLIER_WIDTH"]

_LN10_5 = np.log(10.0) / 5.0
_HALF_LOG_2PI = 0.5 * np.log(2.0 * np.pi)

#: Starting (and prior-centre) extra width of the second luminosity-function component (mag).
OUTLIER_WIDTH = 1.0

#: Half-width of the integration range in units of the prior width (a normal tail beyond
#: 6.5 sigma holds < 1e-10 of the mass; common practice).
PRIOR_SIGMAS = 6.5
#: Half-width of the integration range in units of the parallax error (as above).
PLX_SIGMAS = 7.0
#: Low end of the normalising integral of the disk prior, in widths below its mode.
DISK_LOW_SIGMAS = 8.0
#: Nodes of each of the two integration grids, and of the disk prior's normalising grid.
N_GRID = 16
N_DISK_GRID = 25
#: Newton steps for the mode of prior x disk density (monotone convergence, see _disk_mode).
NEWTON_STEPS = 60
#: Smallest positive number used in logarithms (keeps log() finite; numerical safeguard).
TINY = 1e-300
#: Narrowest integration range in ln(parallax) (numerical safeguard).
MIN_SPAN = 1e-6


def _disk_mode(uc, s, c):
    """Mode and width of the prior N(uc, s^2) in u = ln p times the disk density
    exp(-c e^-u), by Newton steps from the left; they converge monotonically since
    the derivative of the log density is convex and decreasing in u."""
    mode = uc.copy()
    for _ in range(NEWTON_STEPS):
        ce = c * np.exp(-mode)
        mode = mode + (-(mode - uc) / s ** 2 + ce) / (1.0 / s ** 2 + ce)
    return mode, 1.0 / np.sqrt(1.0 / s ** 2 + c * np.exp(-mode))


def _grid(lo_prior, hi_prior, plx, eplx, n_grid):
    """Integration nodes in u = ln p: a grid even in u and one even in p over the overlap
    of the prior's and the likelihood's supports (over the gap between them where they
    do not overlap, i.e. in strong tension)."""
    t = np.linspace(0.0, 1.0, n_grid)
    p_hi = np.maximum(plx, 0.0) + PLX_SIGMAS * eplx
    p_lo = plx - PLX_SIGMAS * eplx
    lo_lik = np.log(np.where(p_lo > 0, p_lo, TINY))
    hi_lik = np.log(p_hi)
    A, B = np.maximum(lo_prior, lo_lik), np.minimum(hi_prior, hi_lik)
    gap = A >= B
    A2 = np.where(gap, np.minimum(A, B), A)
    B2 = np.where(gap, np.maximum(A, B), B)
    B2 = np.maximum(B2, A2 + MIN_SPAN)
    u1 = A2[:, None] + (B2 - A2)[:, None] * t[None, :]
    pa, pb = np.exp(A2), np.exp(B2)
    u2 = np.log(pa[:, None] + (pb - pa)[:, None] * t[None, 1:-1])
    return np.sort(np.concatenate([u1, u2], axis=1), axis=1)


def _integrate(u, uc, s, inv_h, disk, plx=None, eplx=None):
    """Trapezoid integral over the nodes ``u`` of prior x disk density (x parallax
    likelihood when ``plx`` is given): log of it, and the weighted means of z and
    z^2 - 1 with z = (u - uc) / s."""
    z = (u - uc[:, None]) / s[:, None]
    a = -0.5 * z ** 2 - np.log(s)[:, None] - _HALF_LOG_2PI
    if disk:
        a = a - 1000.0 * np.exp(-u) * inv_h[:, None]
    if plx is not None:
        a = a - 0.5 * ((plx[:, None] - np.exp(u)) / eplx[:, None]) ** 2 - np.log(eplx)[:, None] - _HALF_LOG_2PI
    du = np.diff(u, axis=1)
    wt = np.zeros_like(u)
    wt[:, :-1] += 0.5 * du
    wt[:, 1:] += 0.5 * du
    amax = a.max(axis=1)
    w = np.exp(a - amax[:, None]) * wt
    tot = np.maximum(w.sum(axis=1), TINY)
    logi = amax + np.log(tot)
    ez = (w * z).sum(axis=1) / tot
    ez2 = (w * (z ** 2 - 1.0)).sum(axis=1) / tot
    return logi, ez, ez2


def _component(m, plx, eplx, M0, sig, inv_h, n_grid=N_GRID):
    """Log-likelihood of the observed parallax given the apparent magnitude, for a
    Gaussian luminosity function N(M0, sig) and a space density exp(-|z|/h)
    (``inv_h`` = |sin b|/h in 1/pc; 0 for a uniform density), with its
    derivatives with respect to M0 and sig. All arguments are arrays over stars.

    The true parallax p (mas) is integrated in u = ln p. With a uniform density
    the prior of u given m is normal, N(u0 - 3 s^2, s^2) with s = sig ln10/5 and
    u0 = (M0 - m + 10) ln10/5; the shift -3 s^2 is the Malmquist (1922)
    correction written in parallax space. The integration nodes are the union
    of a grid even in u (resolving the prior) and one even in p (resolving the
    parallax error), over the overlap of the two supports; trapezoid rule.
    """
    s = sig * _LN10_5
    uc = (M0 - m + 10.0) * _LN10_5 - 3.0 * s ** 2
    disk = np.any(inv_h > 0)
    lo_prior, hi_prior = uc - PRIOR_SIGMAS * s, uc + PRIOR_SIGMAS * s
    if disk:
        mode, sd_mode = _disk_mode(uc, s, 1000.0 * inv_h)
        hi_prior = np.maximum(hi_prior, mode + PRIOR_SIGMAS * s)
    u = _grid(lo_prior, hi_prior, plx, eplx, n_grid)
    logn, ez, ez2 = _integrate(u, uc, s, inv_h, disk, plx, eplx)
    if disk:
        zlo, zhi = mode - DISK_LOW_SIGMAS * sd_mode, mode + PRIOR_SIGMAS * s
        unorm = zlo[:, None] + (zhi - zlo)[:, None] * np.linspace(0, 1, N_DISK_GRID)[None, :]
        logz, pz, pz2 = _integrate(unorm, uc, s, inv_h, disk)
        logn, ez, ez2 = logn - logz, ez - pz, ez2 - pz2
    dl_duc, dl_ds = ez / s, ez2 / s
    d_m0 = dl_duc * _LN10_5
    d_sig = _LN10_5 * (dl_ds - 6.0 * s * dl_duc)
    return logn, d_m0, d_sig


def star_loglike(m, plx, eplx, M0, sig, frac, inv_h=0.0, shift=0.0, width=OUTLIER_WIDTH):
    """Per-star log-likelihood of the parallax given the apparent magnitude, for a
    luminosity function made of a core N(M0, sig^2) and a second component
    N(M0 + shift, sig^2 + width^2) holding the fraction ``frac`` (misclassified
    stars, unresolved binaries, a giant branch beside the clump).

    Returns ``(loglike, d/dM0, d/dsig, d/dlogit(frac), d/dshift, d/dlog(width))``,
    arrays over stars.

    References
    ----------
    Ratnatunga, K. U. & Casertano, S. 1991, AJ 101, 1075; Malmquist, K. G. 1922,
    Lund Medd. I 100 (from memory).
    """
    m, plx, eplx, M0, sig = (np.asarray(a, dtype=float) for a in (m, plx, eplx, M0, sig))
    inv_h = np.broadcast_to(np.asarray(inv_h, dtype=float), m.shape)
    l1, a1, b1 = _component(m, plx, eplx, M0, sig, inv_h)
    sig2 = np.sqrt(sig ** 2 + width ** 2)
    l2, a2, b2 = _component(m, plx, eplx, M0 + shift, sig2, inv_h)
    f = frac
    x1, x2 = np.log1p(-f) + l1, np.log(f) + l2
    ll = np.logaddexp(x1, x2)
    r1 = np.exp(x1 - ll)
    r2 = 1.0 - r1
    return (ll, r1 * a1 + r2 * a2, r1 * b1 + r2 * b2 * sig / sig2, -r1 * f + r2 * (1.0 - f),
            r2 * a2, r2 * b2 * width ** 2 / sig2)


#: Range (in widths of the broad component) and points of the grid on which
#: :func:`mixture_summary` reads the quantiles of the mixture.
SUMMARY_SIGMAS, SUMMARY_POINTS = 8, 1601


def mixture_summary(M0, sig, frac, shift, width):
    """Median and half the 16-84% range of the two-component luminosity function,
    the Gaussian summary a calibration table stores (M_V, sig_M_V)."""
    from scipy.stats import norm
    M0, sig = np.atleast_1d(np.asarray(M0, float)), np.atleast_1d(np.asarray(sig, float))
    sig2 = np.sqrt(sig ** 2 + width ** 2)
    grid = M0[:, None] + np.linspace(-SUMMARY_SIGMAS, SUMMARY_SIGMAS, SUMMARY_POINTS)[None, :] * sig2[:, None]
    frac = np.broadcast_to(np.asarray(frac, float), M0.shape)[:, None]
    cdf = (1 - frac) * norm.cdf((grid - M0[:, None]) / sig[:, None]) + \
        frac * norm.cdf((grid - M0[:, None] - shift) / sig2[:, None])
    q = np.array([[np.interp(p, c, g) for p in (0.16, 0.5, 0.84)] for c, g in zip(cdf, grid)])
    return q[:, 1], 0.5 * (q[:, 2] - q[:, 0])
