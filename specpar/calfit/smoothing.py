"""Curves on type nodes: piecewise-linear bases, second-difference smoothing
penalties, penalised least squares of a colour, and parameter errors from the
curvature of a fit.
"""
from __future__ import annotations

import numpy as np

__all__ = ["hat_matrix", "second_diff", "covariance_from_curvature", "fit_colour"]

#: Ridge added to the normal equations of the colour fit so that they stay solvable where
#: no star falls near a node (numerical safeguard; common practice).
RIDGE = 1e-9

#: Floor of the residual scatter of a colour fit (mag): below the photometric errors of
#: catalogue UBV (common practice).
MIN_COLOUR_RMS = 0.005

#: Sigma-clipping rounds of the colour fit (common practice).
CLIP_ROUNDS = 3


def hat_matrix(x, nodes):
    """Sparse (n, J) linear-interpolation weights of points x on sorted nodes."""
    from scipy.sparse import csr_matrix
    x = np.clip(np.asarray(x, dtype=float), nodes[0], nodes[-1])
    j = np.clip(np.searchsorted(nodes, x, side="right") - 1, 0, len(nodes) - 2)
    w = (x - nodes[j]) / (nodes[j + 1] - nodes[j])
    n = len(x)
    rows = np.repeat(np.arange(n), 2)
    cols = np.stack([j, j + 1], axis=1).ravel()
    vals = np.stack([1.0 - w, w], axis=1).ravel()
    return csr_matrix((vals, (rows, cols)), shape=(n, len(nodes)))


def second_diff(n):
    """The (n - 2, n) second-difference matrix (rows 1, -2, 1)."""
    d = np.zeros((max(n - 2, 0), n))
    for i in range(n - 2):
        d[i, i:i + 3] = (1.0, -2.0, 1.0)
    return d


def covariance_from_curvature(H):
    """Covariance of fitted parameters: the inverse of the curvature (Hessian) matrix
    ``H`` of the negative log-likelihood at its minimum; the pseudo-inverse where
    ``H`` is singular (a parameter the data do not constrain).

    References
    ----------
    Press, W. H. et al. 2007, Numerical Recipes, 3rd ed., Sect. 15.5 (from memory).
    """
    try:
        return np.linalg.inv(H)
    except np.linalg.LinAlgError:
        return np.linalg.pinv(H)


def fit_colour(x, y, nodes, curvature=0.03, noise=0.03, clip=3.0):
    """Penalised least squares of a colour on piecewise-linear nodes, with sigma clipping.

    Parameters
    ----------
    x, y : ndarray
        Numeric types and colours (mag) of the stars.
    nodes : ndarray
        Sorted types at which the colour is tabulated.
    curvature : float
        Width (mag per node^2) of the normal prior on second differences.
    noise : float
        Starting scatter (mag) of the colours about the curve.
    clip : float
        Stars further than ``clip`` times the residual rms are left out.

    Returns
    -------
    values, errors, rms, kept
        Colour and its error at the nodes, residual scatter, stars kept.

    References
    ----------
    Whittaker, E. T. 1923, Proc. Edinburgh Math. Soc. 41, 63; Eilers, P. H. C. &
    Marx, B. D. 1996, Stat. Sci. 11, 89 (second-difference penalty; from memory).
    """
    W = hat_matrix(x, nodes).toarray()
    D = second_diff(len(nodes))
    P = D.T @ D / curvature ** 2
    keep = np.isfinite(y)
    for _ in range(CLIP_ROUNDS):
        A = W[keep].T @ W[keep] / noise ** 2 + P + RIDGE * np.eye(len(nodes))
        c = np.linalg.solve(A, W[keep].T @ y[keep] / noise ** 2)
        r = y - W @ c
        rms = max(np.sqrt(np.nanmean(r[keep] ** 2)) if keep.any() else noise, MIN_COLOUR_RMS)
        new = np.isfinite(y) & (np.abs(r) <= clip * rms)
        if np.array_equal(new, keep):
            break
        keep = new
    A = W[keep].T @ W[keep] / rms ** 2 + P + RIDGE * np.eye(len(nodes))
    return c, np.sqrt(np.diag(covariance_from_curvature(A))), rms, keep
