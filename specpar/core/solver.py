"""Vectorised fit of distance modulus and colour excess for many stars.

Model, for every observable k of a star (a magnitude or a colour, written as a
linear combination ``L_k`` of band magnitudes)::

    y_k = L_k . (M + dm * 1 + E(B-V) * R)

with M the calibration's absolute magnitudes, R the band extinction
coefficients A_band/E(B-V) and (dm, E(B-V)) the unknowns. It is a generalised
least-squares problem whose covariance ``C`` holds the photometric errors, the
calibration's intrinsic M_V and colour scatter, the spectral-subtype
uncertainty (through dM/dsubtype) and the R_V uncertainty (through
E(B-V) dR/dR_V). Stars are grouped by the number of observables they use
and each group is solved at its own size with batched linear algebra.
With one magnitude and one colour the fit is exact (classic colour excess then
distance modulus); with more, chi-square measures the bands' consistency.
"""
from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np
from scipy.special import chdtrc

from .bands import BANDS, chain_matrices

__all__ = ["Observables", "solve", "SolverResult", "fit_draws_compact",
           "observable_groups"]

_P, _ = chain_matrices()
_FIXED_E = 1e12  # precision that pins E(B-V) = 0 when no colour is available


@dataclass
class Observables:
    """What was measured, for N stars and K observables.

    y, sigma : (N, K) values and 1-sigma errors, NaN where not usable.
    L : (K, n_bands) each observable as a combination of band magnitudes.
    """

    y: np.ndarray
    sigma: np.ndarray
    L: np.ndarray

    @property
    def is_magnitude(self) -> np.ndarray:
        return self.L.sum(axis=1) != 0


@dataclass
class SolverResult:
    """Per-star fit results (arrays of length N)."""

    dm: np.ndarray
    e_dm: np.ndarray
    ebv: np.ndarray
    e_ebv: np.ndarray
    corr: np.ndarray
    chi2: np.ndarray
    dof: np.ndarray
    n_used: np.ndarray
    colour_known: np.ndarray
    uncalibrated: np.ndarray
    rv: np.ndarray
    e_rv: np.ndarray
    valid: np.ndarray | None = None  # (N, K) observables used
    weights: np.ndarray | None = None  # (N, K, K) inverse covariance, when asked for
    mag_known: np.ndarray | None = None

    def p_value(self) -> np.ndarray:
        """Chi-square tail probability (NaN where dof is 0)."""
        with np.errstate(invalid="ignore"):
            # chdtrc is the chi-square survival function scipy.stats.chi2.sf evaluates (imported alone: faster start)
            return np.where(self.dof > 0, chdtrc(np.maximum(self.dof, 1), self.chi2), np.nan)


def observable_groups(valid):
    """Rows grouped by how many observables they use.

    Parameters
    ----------
    valid : (N, K) bool
        Observables each row uses.

    Yields
    ------
    (rows, kidx) : rows of one group (int array) and, per row, the indices of
    its used observables in column order, shape (len(rows), k). Rows with no
    usable observable are not yielded.
    """
    count = valid.sum(axis=1)
    order = np.argsort(count, kind="stable")
    bounds = np.searchsorted(count[order], np.arange(1, valid.shape[1] + 2))
    for k in range(1, valid.shape[1] + 1):
        rows = order[bounds[k - 1]:bounds[k]]
        if rows.size:
            # each row's used observables in column order: the row-major nonzero entries,
            # exactly k per row (same indices as a stable argsort of "not used", cut at k)
            kidx = np.nonzero(valid[rows])[1].reshape(rows.size, k)
            yield rows, kidx


def _calibration_cov(Lg, l1, LP, sub_modes, var_mv, var_colour):
    """Covariance of the calibration terms for one group of rows, (n, k, k).

    Lg : (n, k, n_bands) each row's observables; l1 : (n, k) their response to a
    common shift of all bands (M_V scatter); LP : (n, k, n_colours) their
    response to the calibration colours; sub_modes : (n, Q, n_bands).
    """
    cov = var_mv[:, None, None] * (l1[:, :, None] * l1[:, None, :])
    cov += (var_colour[:, None, :] * LP) @ np.swapaxes(LP, 1, 2)
    lm = sub_modes @ np.swapaxes(Lg, 1, 2)  # (n, Q, k): subtype modes seen by each observable
    cov += np.swapaxes(lm, 1, 2) @ lm
    return cov


def derivative_modes(absmag_deriv, e_sptnum) -> np.ndarray:
    """First-order subtype modes ``e_sptnum * dM/dsubtype``, shape (N, 1, n_bands)."""
    return (np.nan_to_num(absmag_deriv) * np.nan_to_num(e_sptnum)[:, None])[:, None, :]


def _cholesky_solve(C, B):
    """``C^-1 B`` for a batch of small symmetric positive-definite matrices.

    C : (n, k, k); B : (n, k, m). Cholesky factorisation and the two triangular
    solves are written out element by element over k (k is small), so each row
    is computed with the same operations whatever the batch, without the
    per-matrix overhead of batched LAPACK calls on tiny matrices.
    """
    k = C.shape[1]
    low = [[None] * k for _ in range(k)]
    for j in range(k):
        d = np.sqrt(C[:, j, j] - sum(low[j][p] * low[j][p] for p in range(j)))
        low[j][j] = d
        for i in range(j + 1, k):
            low[i][j] = (C[:, i, j] - sum(low[i][p] * low[j][p] for p in range(j))) / d
    z = [None] * k
    for i in range(k):
        z[i] = (B[:, i, :] - sum(low[i][p][:, None] * z[p] for p in range(i))) / low[i][i][:, None]
    x = [None] * k
    for i in reversed(range(k)):
        x[i] = (z[i] - sum(low[p][i][:, None] * x[p] for p in range(i + 1, k))) / low[i][i][:, None]
    return np.stack(x, axis=1)


def _inverse_2x2(F):
    """Inverse of a batch of 2x2 matrices (explicit formula)."""
    det = F[:, 0, 0] * F[:, 1, 1] - F[:, 0, 1] * F[:, 1, 0]
    inv = np.empty_like(F)
    inv[:, 0, 0] = F[:, 1, 1] / det
    inv[:, 1, 1] = F[:, 0, 0] / det
    inv[:, 0, 1] = -F[:, 0, 1] / det
    inv[:, 1, 0] = -F[:, 1, 0] / det
    return inv


def _normal_equations(A, CiA, Ciy, y, colour_known, mag_known):
    """Best fit, its covariance and chi-square from ``C^-1 A`` and ``C^-1 y``."""
    k = A.shape[1]
    F = np.empty((A.shape[0], 2, 2))
    for i in range(2):
        for j in range(2):
            F[:, i, j] = _dot(A[:, :, i], CiA[:, :, j], k)
    F[:, 1, 1] += np.where(colour_known, 0.0, _FIXED_E)
    F[:, 0, 0] += np.where(mag_known, 0.0, _FIXED_E)  # colours only: E(B-V) but no distance
    b0, b1 = _dot(A[:, :, 0], Ciy, k), _dot(A[:, :, 1], Ciy, k)
    cov = _inverse_2x2(F)
    theta = np.stack([cov[:, 0, 0] * b0 + cov[:, 0, 1] * b1, cov[:, 1, 0] * b0 + cov[:, 1, 1] * b1], axis=1)
    chi2 = _dot(y, Ciy, k) - (theta[:, 0] * b0 + theta[:, 1] * b1)
    return theta, cov, np.maximum(chi2, 0.0)


def _dot(a, b, k):
    """Row-wise dot product of (n, k) arrays, summed in a fixed order over k."""
    out = a[:, 0] * b[:, 0]
    for p in range(1, k):
        out = out + a[:, p] * b[:, p]
    return out


def _gls_group(y, A, C, u, sig_rv, colour_known, mag_known, free, keep_weights):
    """Generalised least squares for one group of rows that all use k observables.

    One factorisation of ``C`` serves both passes: the R_V term of the second
    pass, ``(E(B-V) sigma_RV)^2 u u^T`` with ``u = L dR/dR_V``, is a rank-one
    update applied with the Sherman-Morrison formula.

    Returns theta (n, 2), cov (n, 2, 2), chi2 (n,), e_rv of the ``free`` rows
    (or None) and the inverse covariance (n, k, k) when ``keep_weights``.

    References
    ----------
    Sherman & Morrison 1950, Ann. Math. Stat. 21, 124 (rank-one inverse update).
    """
    X = _cholesky_solve(C, np.concatenate([A, y[:, :, None], u[:, :, None]], axis=2))
    CiA, Ciy, Ciu = X[:, :, :2], X[:, :, 2], X[:, :, 3]
    theta, cov, chi2 = _normal_equations(A, CiA, Ciy, y, colour_known, mag_known)
    second = bool(np.any(sig_rv > 0))
    if second:
        # second pass: the R_V term scales with E(B-V) itself
        c = (np.clip(theta[:, 1], 0.0, None) * sig_rv) ** 2
        k = u.shape[1]
        denom = 1.0 + c * _dot(u, Ciu, k)
        g = c / denom
        uCiA = np.stack([_dot(u, CiA[:, :, 0], k), _dot(u, CiA[:, :, 1], k)], axis=1)
        CiA = CiA - (g[:, None] * Ciu)[:, :, None] * uCiA[:, None, :]
        Ciy = Ciy - (g * _dot(u, Ciy, k))[:, None] * Ciu
        Ciu = Ciu / denom[:, None]
        theta, cov, chi2 = _normal_equations(A, CiA, Ciy, y, colour_known, mag_known)
    e_rv = None
    if free is not None and free.any():
        # covariance of (dm, E(B-V), R_V) from the Fisher matrix at the best fit;
        # the model derivative with respect to R_V is E(B-V) * L dR/dR_V
        e = theta[free, 1][:, None]
        A3 = np.concatenate([A[free], (e * u[free])[:, :, None]], axis=2)
        CiA3 = np.concatenate([CiA[free], (e * Ciu[free])[:, :, None]], axis=2)
        F3 = np.einsum("nki,nkj->nij", A3, CiA3)
        F3 += np.eye(3)[None] * 1e-12  # keeps the inverse finite where R_V is barely constrained
        cov3 = np.linalg.inv(F3)
        cov[free] = cov3[:, :2, :2]
        e_rv = np.sqrt(cov3[:, 2, 2])
    W = None
    if keep_weights:
        W = _cholesky_solve(C, np.broadcast_to(np.eye(C.shape[1]), C.shape))
        if second:
            z = X[:, :, 3]  # C^-1 u
            W = W - g[:, None, None] * z[:, :, None] * z[:, None, :]
    return theta, cov, chi2, e_rv, W


def solve(obs: Observables, absmag, sub_modes, var_mv, var_colour,
          R, dR, sigma_rv=0.0, rv=3.1, rv_free=None, keep_weights=False, codes=None):
    """Fit distance modulus and E(B-V) for every star.

    Parameters
    ----------
    obs : Observables
    absmag : (N, n_bands) calibration absolute magnitudes (NaN where not calibrated).
    sub_modes : (N, Q, n_bands) subtype-uncertainty modes: the covariance the
        subtype uncertainty gives the absolute magnitudes is ``sum_q m_q m_q^T``
        (see :func:`derivative_modes` for the first-order form).
    var_mv : (N,) variance of M_V; var_colour : (N, n_colours).
    R, dR : (N, n_bands) or (n_bands,) extinction coefficients A/E(B-V) and
        their derivative with respect to R_V.
    sigma_rv : float or (N,) uncertainty of R_V (0 where R_V is a fitted parameter).
    rv : float or (N,) the R_V the coefficients belong to (reported back).
    rv_free : (N,) bool, optional
        Rows whose R_V was fitted from the same photometry: their uncertainties
        come from the Fisher matrix of (dm, E(B-V), R_V) and one degree of
        freedom is spent on R_V.
    keep_weights : bool
        Also return the inverse covariance per star (for :func:`fit_draws_compact`).
    codes : (N,) int, optional
        When given, ``absmag``, ``sub_modes``, ``var_mv`` and ``var_colour``
        hold one row per distinct calibration (e.g. per spectral type) and
        star i uses row ``codes[i]`` of them; this avoids copying the
        calibration out to every star.

    Returns
    -------
    SolverResult
    """
    N, K = obs.y.shape
    absmag = np.asarray(absmag, float)
    per_code = codes is not None
    codes = np.asarray(np.arange(N) if codes is None else codes, np.intp)
    use = _usable(obs, absmag, codes, sigma_rv, rv_free)
    fit = _solve_groups(obs, absmag, codes, per_code, use, R, dR, sub_modes, var_mv, var_colour,
                        keep_weights)
    return _result(fit, use, rv, N)


def _usable(obs: Observables, absmag, codes, sigma_rv, rv_free) -> SimpleNamespace:
    """Which observables each star can use, and what they let the fit determine."""
    N = obs.y.shape[0]
    touches = obs.L != 0  # (K, nb)
    # an observable is uncalibrated where any band it touches has no calibration
    uncalibrated = ((~np.isfinite(absmag)).astype(float) @ touches.T.astype(float) > 0)[codes]  # (N, K)
    measured = np.isfinite(obs.y) & np.isfinite(obs.sigma)
    valid = measured & ~uncalibrated
    is_mag = obs.is_magnitude
    n_mag = (valid & is_mag).sum(axis=1)
    n_col = (valid & ~is_mag).sum(axis=1)
    colour_known = (n_mag >= 2) | (n_col >= 1)
    mag_known = n_mag >= 1
    sig_rv = np.broadcast_to(np.asarray(sigma_rv, float), (N,))
    n_used = valid.sum(axis=1)
    dof = n_used - colour_known.astype(int) - mag_known.astype(int)
    free = np.zeros(N, bool) if rv_free is None else np.asarray(rv_free, bool) & colour_known & mag_known
    return SimpleNamespace(valid=valid, colour_known=colour_known, mag_known=mag_known, sig_rv=sig_rv,
                           n_used=n_used, dof=dof, free=free,
                           uncalibrated=(uncalibrated & measured).any(axis=1))


def _solve_groups(obs, absmag, codes, per_code, use, R, dR, sub_modes, var_mv, var_colour,
                  keep_weights) -> SimpleNamespace:
    """Every row solved at its own size: rows are grouped by the number of observables they
    use, and each row's own observables are gathered."""
    N, K = obs.y.shape
    # one set of coefficients for all stars: in observable space once
    LR = obs.L @ np.asarray(R, float) if np.ndim(R) == 1 else None
    LdR = obs.L @ np.asarray(dR, float) if np.ndim(dR) == 1 else None
    R = np.broadcast_to(np.asarray(R, float), (N, len(BANDS)))
    dR = np.broadcast_to(np.asarray(dR, float), (N, len(BANDS)))
    out = SimpleNamespace(theta=np.zeros((N, 2)), cov=np.broadcast_to(np.eye(2), (N, 2, 2)).copy(),
                          chi2=np.zeros(N), e_rv=use.sig_rv.copy(),
                          W=np.broadcast_to(np.eye(K), (N, K, K)).copy() if keep_weights else None)
    # per calibration row (few when codes are given): observable-space values
    model = np.nan_to_num(absmag) @ obs.L.T  # (U, K)
    var_mv = np.nan_to_num(np.asarray(var_mv, float))
    var_colour = np.nan_to_num(var_colour)
    sub_modes = np.nan_to_num(sub_modes)
    l1_all = obs.L.sum(axis=1)
    LP_all = obs.L @ _P
    if per_code:
        # calibration covariance once per calibration row over all K observables;
        # each star then takes the block of the observables it uses
        ccal = _calibration_cov(np.broadcast_to(obs.L, (len(var_mv),) + obs.L.shape),
                                np.broadcast_to(l1_all, (len(var_mv), K)),
                                np.broadcast_to(LP_all, (len(var_mv),) + LP_all.shape),
                                sub_modes, var_mv, var_colour)
    for rows, kidx in observable_groups(use.valid):
        k = kidx.shape[1]
        c = codes[rows]
        Lg = obs.L[kidx]  # (n, k, nb)
        y = np.take_along_axis(obs.y[rows], kidx, axis=1)
        sig = np.take_along_axis(obs.sigma[rows], kidx, axis=1)
        ydiff = y - np.take_along_axis(model[c], kidx, axis=1)
        l1 = l1_all[kidx]
        a1 = LR[kidx] if LR is not None else np.einsum("nkb,nb->nk", Lg, R[rows])
        A = np.stack([l1, a1], axis=-1)
        u = LdR[kidx] if LdR is not None else np.einsum("nkb,nb->nk", Lg, dR[rows])
        if per_code:
            C = ccal[c[:, None, None], kidx[:, :, None], kidx[:, None, :]]
        else:
            C = _calibration_cov(Lg, l1, LP_all[kidx], sub_modes[c], var_mv[c], var_colour[c])
        C[:, np.arange(k), np.arange(k)] += sig ** 2
        th, cv, c2, erv, Wg = _gls_group(ydiff, A, C, u, use.sig_rv[rows], use.colour_known[rows],
                                         use.mag_known[rows], use.free[rows], keep_weights)
        out.theta[rows], out.cov[rows], out.chi2[rows] = th, cv, c2
        if erv is not None:
            out.e_rv[rows[use.free[rows]]] = erv
        if keep_weights:
            # unused observables keep the identity block the padded solve gave them
            out.W[rows[:, None, None], kidx[:, :, None], kidx[:, None, :]] = Wg
    return out


def _result(fit, use, rv, N) -> SolverResult:
    """Pinned and unsolvable rows set, errors and correlation from the covariance."""
    theta, cov, colour_known, mag_known = fit.theta, fit.cov, use.colour_known, use.mag_known
    dof = use.dof - use.free.astype(int)
    nodata = use.n_used == 0
    theta[~colour_known, 1] = 0.0  # pinned, not fitted
    theta[~mag_known, 0] = np.nan
    theta[nodata] = np.nan
    e_dm = np.where(mag_known, np.sqrt(cov[:, 0, 0]), np.nan)
    e_e = np.sqrt(cov[:, 1, 1])
    corr = cov[:, 0, 1] / (e_dm * e_e)
    e_e = np.where(colour_known, e_e, 0.0)
    corr = np.where(colour_known, corr, 0.0)
    chi2 = np.where(nodata, np.nan, fit.chi2)
    return SolverResult(
        dm=theta[:, 0], e_dm=np.where(nodata, np.nan, e_dm), ebv=theta[:, 1],
        e_ebv=np.where(nodata, np.nan, e_e), corr=np.where(nodata, np.nan, corr),
        chi2=chi2, dof=dof, n_used=use.n_used, colour_known=colour_known,
        uncalibrated=use.uncalibrated,
        rv=np.broadcast_to(np.asarray(rv, float), (N,)).copy(), e_rv=fit.e_rv,
        valid=use.valid, weights=fit.W, mag_known=mag_known,
    )

def fit_draws_compact(weights, colour_known, mag_known, ydiff, a0, a1):
    """Refit many draws per star with each star's weights held fixed, for stars that all use
    their k observables.

    Parameters
    ----------
    weights : (m, k, k) inverse covariance of each star's nominal fit,
        restricted to the observables it used.
    colour_known, mag_known : (m,) bool
    ydiff : (m, n, k) observables minus the drawn absolute magnitudes.
    a0 : (m, k) response of each observable to the distance modulus.
    a1 : (m, n, k) response of each observable to E(B-V), per draw.

    Returns
    -------
    (m, n, 2) distance modulus and E(B-V) per draw; NaN where a draw needs an
    observable with no calibration.

    Notes
    -----
    The sums over observables are written out one observable at a time, so
    every star's result depends on that star alone, whatever the batch.
    """
    m, n, k = ydiff.shape
    wa0 = [sum(weights[:, p, j] * a0[:, j] for j in range(k)) for p in range(k)]  # (m,) each
    wa1 = [sum(weights[:, p, j, None] * a1[:, :, j] for j in range(k)) for p in range(k)]  # (m, n)
    f00 = sum(a0[:, p] * wa0[p] for p in range(k))[:, None]
    f01 = sum(a0[:, p, None] * wa1[p] for p in range(k))
    f10 = sum(a1[:, :, p] * wa0[p][:, None] for p in range(k))
    f11 = sum(a1[:, :, p] * wa1[p] for p in range(k))
    b0 = sum(wa0[p][:, None] * ydiff[:, :, p] for p in range(k))
    b1 = sum(wa1[p] * ydiff[:, :, p] for p in range(k))
    f11 = f11 + np.where(colour_known, 0.0, _FIXED_E)[:, None]
    f00 = f00 + np.where(mag_known, 0.0, _FIXED_E)[:, None]
    det = f00 * f11 - f01 * f10
    with np.errstate(invalid="ignore", divide="ignore"):
        dm = (f11 * b0 - f01 * b1) / det
        ebv = (f00 * b1 - f10 * b0) / det
    theta = np.stack([dm, np.where(colour_known[:, None], ebv, 0.0)], axis=-1)
    theta[~np.isfinite(ydiff).all(axis=-1)] = np.nan
    return theta
