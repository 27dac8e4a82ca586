"""Small numerical tools shared by the fits: a coarse-then-fine grid search in
E(B-V), curvature-based uncertainties (a numerical Hessian from a gradient,
and a 1-sigma error from a second difference), and a clipped weighted mean."""
from __future__ import annotations

import numpy as np

__all__ = ["EBV_COARSE_STEP", "EBV_FINE_STEP", "refine_grid", "hessian_from_gradient", "curvature_sigma", "weighted_mean"]

#: E(B-V) steps (mag) of the grid searches: a coarse pass, then a fine one within one
#: coarse step of its best point (common practice for a grid search).
EBV_COARSE_STEP = 0.05
EBV_FINE_STEP = 0.01
#: Median absolute deviation to Gaussian sigma (common practice), and the clipping limit.
MAD_TO_SIGMA = 1.4826
CLIP_SIGMA = 3


def refine_grid(score, lo, hi, key=None):
    """Best point of ``score`` over [lo, hi]: a pass every :data:`EBV_COARSE_STEP`, then
    one every :data:`EBV_FINE_STEP` within a coarse step of the best. ``key`` picks the
    number to maximise from what ``score`` returns (default: the value itself).

    Returns
    -------
    (float, object)
        The best point and what ``score`` returned there.
    """
    key = key or (lambda v: v)
    grid = np.arange(lo, hi + 1e-9, EBV_COARSE_STEP)
    for _ in range(2):  # a coarse pass, then a fine one around its best (loop over the grid only)
        scores = [score(x) for x in grid]
        j = int(np.argmax([key(v) for v in scores]))
        best, value = grid[j], scores[j]
        grid = np.arange(max(lo, best - EBV_COARSE_STEP), min(hi, best + EBV_COARSE_STEP) + 1e-9,
                         EBV_FINE_STEP)
    return best, value


def hessian_from_gradient(gradient, theta, free, h):
    """Symmetrised numerical Hessian of a function over the parameters ``free`` from
    central differences (step ``h``) of its ``gradient``."""
    H = np.zeros((len(free), len(free)))
    for a, i in enumerate(free):
        tp, tm = theta.copy(), theta.copy()
        tp[i] += h
        tm[i] -= h
        H[a] = (gradient(tp) - gradient(tm))[free] / (2 * h)
    return 0.5 * (H + H.T)


def curvature_sigma(loglike, x, h):
    """1-sigma error of ``x`` from the curvature of ``loglike`` there (second difference,
    step ``h``): sqrt(-1 / (d^2 log L / dx^2)); NaN where the curvature is not negative."""
    curv = (loglike(x + h) - 2 * loglike(x) + loglike(x - h)) / h ** 2
    return float(np.sqrt(-1.0 / curv)) if curv < 0 else np.nan


def weighted_mean(x, var):
    """Inverse-variance weighted mean of ``x`` after clipping beyond :data:`CLIP_SIGMA`
    robust sigma (MAD) of the median, its error (at least the scatter's), and the count."""
    ok = np.isfinite(x) & np.isfinite(var) & (var > 0)
    x, w = x[ok], 1.0 / var[ok]
    if x.size == 0:
        return np.nan, np.nan, 0
    med = np.median(x)
    mad = MAD_TO_SIGMA * np.median(np.abs(x - med)) if x.size > 2 else np.inf
    keep = np.abs(x - med) <= max(CLIP_SIGMA * mad, CLIP_SIGMA * np.sqrt(1.0 / w.max()))
    x, w = x[keep], w[keep]
    mean = float((w * x).sum() / w.sum())
    err = np.sqrt(1.0 / w.sum())
    if x.size > 2:
        err = max(err, float(np.sqrt((w * (x - mean) ** 2).sum() / w.sum() / (x.size - 1))))
    return mean, float(err), int(x.size)
