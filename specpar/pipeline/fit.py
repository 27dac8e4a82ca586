"""The per-star fit: distance modulus and E(B-V) (and R_V where free) of every
row, in blocks, analytic or with Monte Carlo errors, then the bound E(B-V) >= 0."""
from __future__ import annotations

import numpy as np
from scipy.special import chdtrc

from ..calib.extinction import band_coefficients, coefficient_derivative, coefficients_at, fit_free_rv
from ..core.distance import dm_to_pc
from ..core.ebvbound import bound_ebv
from ..core.mcdraws import row_keys
from ..core.solver import Observables, solve
from .montecarlo import monte_carlo

__all__ = ["CHUNK", "RV_MAX_ERROR", "FIT_RV_MIN_MAGS", "FIT_RV_MIN_EBV_SIGMA", "solve_rows", "solve_chunk",
           "chi2_sf"]

#: Rows solved at once (bounds the memory of a block).
CHUNK = 100_000
#: A fitted R_V counts as constrained only when its 1-sigma error is below this (a third
#: of its typical value; a judgement kept from the first release, common practice).
RV_MAX_ERROR = 1.0
#: R_V is fitted only with at least this many magnitudes (two unknowns besides R_V).
FIT_RV_MIN_MAGS = 3
#: ... and a colour excess at least this many sigma above zero (clear reddening).
FIT_RV_MIN_EBV_SIGMA = 3.0


def solve_chunk(obs, cal, modes, opts, codes=None):
    """Analytic fit of a block of rows; ``cal``/``modes`` hold one row per
    calibration code (``codes``, default one per row).

    Returns the :class:`~specpar.core.solver.SolverResult` and, per row, whether
    a requested free R_V could not be fitted (R_V held at ``opts.rv``).
    """
    N = obs.y.shape[0]
    if not opts.fit_rv:
        R, dR = band_coefficients(opts.law, opts.rv), coefficient_derivative(opts.law, opts.rv)
        res = solve(obs, cal.absmag, modes, cal.var_mv, cal.var_colour, R, dR, np.full(N, float(opts.sigma_rv)),
                    np.full(N, float(opts.rv)), rv_free=None, keep_weights=opts.method == "mc", codes=codes)
        return res, np.zeros(N, bool)
    return _solve_free_rv(obs, cal, modes, opts, codes)


def _solve_free_rv(obs, cal, modes, opts, codes):
    """:func:`solve_chunk` with R_V fitted where at least three magnitudes and a clear
    reddening constrain it, and held at ``opts.rv`` (flagged) elsewhere."""
    args = (obs, cal.absmag, modes, cal.var_mv, cal.var_colour)
    keep = opts.method == "mc"
    rv_fit, e_fit = fit_free_rv(obs, cal, modes, opts.law, codes)
    base = solve(*args, band_coefficients(opts.law, opts.rv), coefficient_derivative(opts.law, opts.rv),
                 opts.sigma_rv, opts.rv, codes=codes)
    n_mag = (np.isfinite(obs.y) & obs.is_magnitude).sum(axis=1)
    free = (e_fit < RV_MAX_ERROR) & (n_mag >= FIT_RV_MIN_MAGS) & (base.ebv > FIT_RV_MIN_EBV_SIGMA * base.e_ebv)
    rv = np.where(free, rv_fit, float(opts.rv))
    sig_rv = np.where(free, 0.0, float(opts.sigma_rv))  # a fitted parameter now, not a prior
    R, dR = coefficients_at(opts.law, rv)
    res = solve(*args, R, dR, sig_rv, rv, rv_free=free, keep_weights=keep, codes=codes)
    weak = free & ~(res.e_rv < RV_MAX_ERROR)  # R_V not pinned down once dm and E(B-V) are free too
    if weak.any():
        free &= ~weak
        rv, sig_rv = np.where(weak, opts.rv, rv), np.where(weak, opts.sigma_rv, sig_rv)
        R, dR = coefficients_at(opts.law, rv)
        res = solve(*args, R, dR, sig_rv, rv, rv_free=free, keep_weights=keep, codes=codes)
    return res, ~free


def solve_rows(frame, prep, rc, cals, opts) -> dict:
    """Solve every row in chunks (progress bar on long runs); arrays over all rows."""
    N = len(frame)
    parts = []
    chunks = range(0, max(N, 1), CHUNK)
    if opts.progress and N > CHUNK:
        from tqdm.auto import tqdm  # optional display; loaded only for long runs
        chunks = tqdm(chunks, total=len(chunks), unit="chunk", desc="specpar estimate")
    for s in chunks:
        sl = slice(s, min(N, s + CHUNK))
        codes = rc.code[sl]
        obs = Observables(prep.obs.y[sl], prep.obs.sigma[sl], prep.obs.L)
        r, rv_flag = solve_chunk(obs, rc.ucal, rc.modes, opts, codes)
        part = {k: getattr(r, k) for k in ("dm", "e_dm", "ebv", "e_ebv", "corr", "rv", "e_rv", "n_used",
                                            "colour_known", "chi2", "dof", "uncalibrated")}
        part.update(rv_flag=rv_flag)
        if opts.method == "mc":
            mc = monte_carlo(obs, rc.ucal, rc.modes, cals, rc.sptnum[sl], rc.e_spt[sl], rc.lcb[sl],
                             rc.lcf[sl], row_keys(frame.iloc[sl]), r, opts, codes)
            part.update(_merge_monte_carlo(mc, r))
        else:
            part.update(d50=dm_to_pc(r.dm), d16=dm_to_pc(r.dm - r.e_dm), d84=dm_to_pc(r.dm + r.e_dm))
        part.update(_apply_ebv_bound(part))
        parts.append(part)
    return {k: np.concatenate([part[k] for part in parts])[:N] for k in parts[0]}


def chi2_sf(x, dof):
    """Chi-square survival function, value for value what ``scipy.stats.chi2.sf`` returns.

    1 at x <= 0, 0 at x = inf, NaN at NaN, ``chdtrc`` in between (the function
    ``scipy.stats.chi2.sf`` calls); calling it directly skips the import of
    ``scipy.stats`` and the argument checks of the generic distribution class.
    ``dof`` must be >= 1.
    """
    x = np.asarray(x, dtype=float)
    inside = (x > 0) & (x < np.inf)
    out = np.where(x <= 0, 1.0, 0.0)
    out[np.isnan(x)] = np.nan
    out[inside] = chdtrc(np.broadcast_to(dof, x.shape)[inside], x[inside])
    return out


def _apply_ebv_bound(part) -> dict:
    """E(B-V) >= 0 (see :mod:`specpar.core.ebvbound`): rows fitted below 0 are held at 0, with
    the distance modulus of that fit, errors widened by what the bound allows, and the
    distance percentiles of the bounded distance modulus (Monte Carlo rows too)."""
    b = bound_ebv(part["dm"], part["e_dm"], part["ebv"], part["e_ebv"], part["corr"], part["chi2"],
                  part["dof"], part["colour_known"])
    at = b.at_bound
    with np.errstate(invalid="ignore"):
        p_value = np.where(b.dof > 0, chi2_sf(b.chi2, np.maximum(b.dof, 1)), np.nan)
    return dict(
        dm=b.dm, e_dm=b.e_dm, ebv=b.ebv, e_ebv=b.e_ebv, chi2=b.chi2, dof=b.dof, p_value=p_value,
        at_bound=at, ebv_upper=b.ebv_upper, ebv_unbounded=b.ebv_unbounded, e_ebv_unbounded=b.e_ebv_unbounded,
        d50=np.where(at, dm_to_pc(b.dm), part["d50"]), d16=np.where(at, dm_to_pc(b.dm - b.e_dm), part["d16"]),
        d84=np.where(at, dm_to_pc(b.dm + b.e_dm), part["d84"]))


def _merge_monte_carlo(mc, r) -> dict:
    """Monte Carlo summaries where the analytic fit has an answer, the analytic fit's
    (missing or pinned) values where it has none.

    A row without a magnitude (or without any usable observable) has no distance
    modulus, and a row without colour information has E(B-V) pinned at 0; the draws
    of such rows are refits of nothing and must not turn into numbers (they would
    all give dm = 0, i.e. 10 pc). So the rows come out exactly as in analytic mode:
    same missing values, hence the same flags and notes.
    """
    has_dm = np.isfinite(r.dm)
    has_ebv = np.isfinite(r.ebv) & r.colour_known
    nan = np.full(has_dm.shape, np.nan)
    return dict(
        dm=np.where(has_dm, mc["dm"], nan), e_dm=np.where(has_dm, mc["e_dm"], r.e_dm),
        ebv=np.where(has_ebv, mc["ebv"], r.ebv), e_ebv=np.where(has_ebv, mc["e_ebv"], r.e_ebv),
        corr=np.where(has_dm & has_ebv, mc["corr"], r.corr),
        d50=np.where(has_dm, mc["d50"], nan), d16=np.where(has_dm, mc["d16"], nan),
        d84=np.where(has_dm, mc["d84"], nan))
