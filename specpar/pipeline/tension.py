"""Parallax against distance modulus: the tension statistic and distance posteriors.

``tension_z`` places an observed parallax in the distribution the photometric
distance modulus predicts; ``distance_posterior`` gives percentiles of the
distance from a parallax, alone or together with a distance modulus, under an
exponentially decreasing space density prior. Both are vectorised over stars.

References
----------
Bailer-Jones, C. A. L. 2015, PASP 127, 994, "Estimating distances from
parallaxes" (exponentially decreasing space density prior, its posterior and
the cubic equation for the mode; from memory).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import log_ndtr, logsumexp, ndtr, ndtri, ndtri_exp

from ..core.distance import dm_to_plx_mas

__all__ = ["DEFAULT_LENGTH_SCALE_PC", "DistanceSummary", "distance_posterior", "tension_z"]

#: Default length scale L (pc) of the space density prior r**2 exp(-r/L): a kiloparsec-scale
#: value for stars of the Galactic disc (common practice; not fitted here).
DEFAULT_LENGTH_SCALE_PC = 1350.0

_LN10_5 = np.log(10.0) / 5.0
_CHUNK = 8192  # stars per batch in the vectorised integrals
_QUANTILES = (0.16, 0.5, 0.84)

_NODES, _WEIGHTS = np.polynomial.hermite_e.hermegauss(64)
_WEIGHTS_N = _WEIGHTS / np.sqrt(2.0 * np.pi)
_LOG_WEIGHTS = np.log(_WEIGHTS_N)


def tension_z(plx, e_plx, dm, e_dm):
    """Significance of the difference between a parallax and a distance modulus.

    The parallax expected from the photometry is ``10**(2 - dm'/5) + eps`` mas with
    ``dm' ~ N(dm, e_dm)`` and ``eps ~ N(0, e_plx)``; ``F`` is the probability that it
    falls below the observed ``plx`` and ``z = Phi^-1(F)``, so that ``z`` is a unit
    normal variable when both measurements are right, whatever the skewness of the
    log-normal photometric parallax. When ``e_dm`` is small, ``z`` tends to
    ``(plx - plx_phot) / sqrt(e_plx**2 + e_plx_phot**2)``; when ``e_plx`` is small, to
    ``(dm - (10 - 5 log10(plx))) / e_dm``, the difference of distance moduli.

    ``F`` is a Gauss-Hermite sum (64 nodes) over whichever of the two variables has
    the smaller spread in parallax, computed in logarithms so that large tensions
    keep their sign and size.

    Parameters
    ----------
    plx, e_plx : array_like
        Parallax (any sign) and its error (> 0), mas.
    dm, e_dm : array_like
        Distance modulus and its uncertainty (> 0), mag.

    Returns
    -------
    ndarray
        z; NaN where an input is missing.

    References
    ----------
    Probability integral transform and Gauss-Hermite quadrature (common practice).
    """
    arrays = np.broadcast_arrays(*(np.asarray(a, float) for a in (plx, e_plx, dm, e_dm)))
    flat = [a.ravel() for a in arrays]
    z = np.empty(flat[0].size)
    for s in range(0, z.size, _CHUNK):  # bounded memory: (chunk, nodes) at a time
        z[s:s + _CHUNK] = _tension_chunk(*(a[s:s + _CHUNK, None] for a in flat))
    return z.reshape(arrays[0].shape)


def _tension_chunk(plx, e_plx, dm, e_dm):
    spread = dm_to_plx_mas(dm) * _LN10_5 * e_dm  # first-order spread of the photometric parallax
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        over_dm = (plx - dm_to_plx_mas(dm + e_dm * _NODES)) / e_plx
        y = plx - e_plx * _NODES  # over the parallax error: P(dm_phot > 10 - 5 log10 y)
        # (dm minus the distance modulus of parallax y, terms in this order: it fixes the rounding)
        over_plx = np.where(y > 0, (dm - 10.0 + 5.0 * np.log10(np.abs(y))) / e_dm, -np.inf)
        # nodes over whichever variable is narrower in parallax, so that the other is smooth
        arg = np.where(e_plx > spread, over_dm, over_plx)
        # row-wise sums, not a matrix product: BLAS sums in an order that depends on the
        # number of rows, and a row's result must not depend on its block (streaming)
        f, q = (ndtr(arg) * _WEIGHTS_N).sum(axis=-1), (ndtr(-arg) * _WEIGHTS_N).sum(axis=-1)
        z = np.where(f < q, ndtri(f), -ndtri(q))
        deep = ~np.isfinite(z)  # beyond ~37 sigma: logarithms, nodes over dm (never all -inf)
        if deep.any():
            a = arg[deep]
            a = np.where(np.isneginf(a).all(axis=-1, keepdims=True), over_dm[deep], a)
            log_f = logsumexp(_LOG_WEIGHTS + log_ndtr(a), axis=-1)
            log_q = logsumexp(_LOG_WEIGHTS + log_ndtr(-a), axis=-1)
            z[deep] = np.where(log_f < log_q, ndtri_exp(log_f), -ndtri_exp(log_q))
    ok = np.isfinite(plx[:, 0]) & (e_plx[:, 0] > 0) & np.isfinite(dm[:, 0]) & (e_dm[:, 0] > 0)
    return np.where(ok, z, np.nan)


# ----------------------------------------------------------------------------- posteriors

@dataclass
class DistanceSummary:
    """Percentiles and mode of distance posteriors (arrays over stars, pc; NaN where not computed)."""

    median: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    mode: np.ndarray


def _log_posterior(u, plx, e_plx, dm, e_dm, length):
    """Log posterior density per unit ln(r), up to a constant; u = ln(r / pc) with shape (n, G).

    Exponentially decreasing space density prior r**2 exp(-r/L) (Bailer-Jones 2015), times
    r for the change of variable to ln r, times a Gaussian likelihood in parallax and,
    where ``dm`` is given, a Gaussian likelihood in distance modulus.
    """
    with np.errstate(over="ignore"):  # far outside the posterior: -inf is the right answer
        lp = 3.0 * u - np.exp(u) / length - 0.5 * ((plx - 1000.0 * np.exp(-u)) / e_plx) ** 2
    if dm is not None:
        lp -= 0.5 * ((u / _LN10_5 - 5.0 - dm) / e_dm) ** 2
    return lp


def _start_window(plx, e_plx, dm, e_dm, length):
    """Window in ln r from Gaussian approximations of prior, parallax and photometry (n,)."""
    # prior r^3 exp(-r/L) in ln r: peak ln(3L), curvature -3
    prec = np.full(plx.shape, 3.0)
    wsum = 3.0 * np.log(3.0 * length)
    snr = plx / e_plx
    informative = snr > 2.0
    p_plx = np.where(informative, snr ** 2, 0.0)
    prec = prec + p_plx
    wsum = wsum + p_plx * np.log(1000.0 / np.where(informative, plx, 1.0))
    if dm is not None:
        p_dm = 1.0 / (_LN10_5 * e_dm) ** 2
        prec = prec + p_dm
        wsum = wsum + p_dm * (dm + 5.0) * _LN10_5
    centre, half = wsum / prec, 10.0 / np.sqrt(prec)
    return centre - half, centre + half


def _fit_grid(plx, e_plx, dm, e_dm, length, n_grid, depth=40.0, max_iter=60):
    """Adapt a window in ln r per star until the posterior above exp(-depth) of its peak
    fills at least half of an ``n_grid``-point grid without touching its ends.

    Returns the grids u (n, G) and log posteriors (n, G).
    """
    n = plx.size
    lo, hi = _start_window(plx, e_plx, dm, e_dm, length)
    t = np.linspace(0.0, 1.0, n_grid)
    u_out = np.empty((n, n_grid))
    lp_out = np.empty((n, n_grid))
    todo = np.arange(n)
    col = lambda a: None if a is None else a[todo, None]  # noqa: E731
    for _ in range(max_iter):
        u = lo[todo, None] + (hi - lo)[todo, None] * t
        lp = _log_posterior(u, col(plx), col(e_plx), col(dm), col(e_dm), col(length))
        above = lp > lp.max(axis=1, keepdims=True) - depth
        first = np.argmax(above, axis=1)
        last = n_grid - 1 - np.argmax(above[:, ::-1], axis=1)
        width = hi[todo] - lo[todo]
        at_lo, at_hi = first == 0, last == n_grid - 1
        done = ~at_lo & ~at_hi & (last - first >= n_grid // 2)
        u_out[todo[done]], lp_out[todo[done]] = u[done], lp[done]
        rows = np.arange(todo.size)
        lo[todo] = np.where(at_lo, lo[todo] - 2.0 * width, u[rows, np.maximum(first - 1, 0)])
        hi[todo] = np.where(at_hi, hi[todo] + 2.0 * width, u[rows, np.minimum(last + 1, n_grid - 1)])
        todo = todo[~done]
        if todo.size == 0:
            break
    else:  # not expected; keep the last grid rather than fail
        u_out[todo], lp_out[todo] = u[~done], lp[~done]
    return u_out, lp_out


def _summarise(u, lp):
    """Median, 16th and 84th percentiles in r: the trapezoid rule's CDF on the grid, inverted
    exactly inside the step where it crosses each level (density linear in ln r there)."""
    w = np.exp(lp - lp.max(axis=1, keepdims=True))
    h = u[:, 1] - u[:, 0]
    w /= np.sum(0.5 * (w[:, 1:] + w[:, :-1]), axis=1, keepdims=True) * h[:, None]
    cdf = np.concatenate([np.zeros((u.shape[0], 1)),
                          np.cumsum(0.5 * (w[:, 1:] + w[:, :-1]), axis=1) * h[:, None]], axis=1)
    out = []
    for q in _QUANTILES:
        j = np.clip((cdf < q).sum(axis=1), 1, u.shape[1] - 1)[:, None]
        c0, u0, w0, w1 = (np.take_along_axis(a, j + k, 1)[:, 0] for a, k in
                          ((cdf, -1), (u, -1), (w, -1), (w, 0)))
        # invert the trapezoid's own CDF inside the step (density linear in u): a x^2 + w0 x = q - c0
        rest, a = np.maximum(q - c0, 0.0), (w1 - w0) / (2.0 * h)
        x = 2.0 * rest / (w0 + np.sqrt(np.maximum(w0 ** 2 + 4.0 * a * rest, 0.0)))
        out.append(np.exp(u0 + np.clip(np.nan_to_num(x), 0.0, h)))
    return out[1], out[0], out[2]


def _mode(u, lp, args):
    """Mode of the density in r (density in ln r divided by r): best grid node, then Newton
    steps on finite differences of the log density (all stars at once)."""
    f = lp - u
    x = np.take_along_axis(u, np.argmax(f, axis=1)[:, None], 1)
    step = 0.05 * (u[:, 1:2] - u[:, 0:1])
    g = lambda v: _log_posterior(v, *args) - v  # noqa: E731
    for _ in range(4):
        fm, f0, fp = g(x - step), g(x), g(x + step)
        curv = (fp - 2.0 * f0 + fm) / step ** 2
        move = np.where(curv < 0, -(fp - fm) / (2.0 * step) / np.where(curv < 0, curv, -1.0), 0.0)
        x = x + np.clip(move, -10 * step, 10 * step)
    return np.exp(x[:, 0])


def distance_posterior(plx, e_plx, *, dm=None, e_dm=None, length_scale_pc=DEFAULT_LENGTH_SCALE_PC,
                       n_grid=256, chunk=_CHUNK) -> DistanceSummary:
    """Distance posterior from a parallax, optionally with a distance modulus.

    Posterior density in r (pc)::

        P(r) ~ r**2 exp(-r/L) * N(plx | 1000/r, e_plx) [* N(5 log10 r - 5 | dm, e_dm)]

    evaluated per star on its own grid in ln r (adapted until the posterior is
    resolved by at least ``n_grid/2`` points), all stars of a chunk at once.

    Parameters
    ----------
    plx, e_plx : array_like
        Parallax and its error in mas; any sign of ``plx`` is valid, ``e_plx > 0``.
    dm, e_dm : array_like, optional
        True distance modulus and its uncertainty (mag) for the combined posterior.
    length_scale_pc : float or array_like
        Length scale L of the exponentially decreasing space density prior (pc).
    n_grid, chunk : int
        Grid points per star and stars per batch.

    Returns
    -------
    DistanceSummary
        Median, 16th and 84th percentiles and mode in pc; NaN where an input is
        not finite or an error is not positive.

    References
    ----------
    Bailer-Jones, C. A. L. 2015, PASP 127, 994 (prior and posterior, Sect. 5).
    """
    plx, e_plx = np.broadcast_arrays(np.asarray(plx, float), np.asarray(e_plx, float))
    length = np.broadcast_to(np.asarray(length_scale_pc, float), plx.shape)
    ok = np.isfinite(plx) & (e_plx > 0) & np.isfinite(e_plx)
    if dm is not None:
        dm, e_dm = (np.broadcast_to(np.asarray(a, float), plx.shape) for a in (dm, e_dm))
        ok &= np.isfinite(dm) & (e_dm > 0) & np.isfinite(e_dm)
    res = [np.full(plx.shape, np.nan) for _ in range(4)]
    idx = np.flatnonzero(ok)
    for s in range(0, idx.size, chunk):
        sel = idx[s:s + chunk]
        pick = lambda a: None if a is None else a[sel]  # noqa: E731
        args = (plx[sel], e_plx[sel], pick(dm), pick(e_dm), length[sel])
        u, lp = _fit_grid(*args, n_grid)
        col = tuple(None if a is None else a[:, None] for a in args)
        for arr, val in zip(res, _summarise(u, lp) + (_mode(u, lp, col),)):
            arr[sel] = val
    return DistanceSummary(*res)
