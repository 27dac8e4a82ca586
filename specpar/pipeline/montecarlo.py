"""Monte Carlo error propagation: redraw photometry, subtype, M_V and colour
scatter and R_V, refit each draw with the nominal fit's weights, summarise.

The draws of a star depend only on its row key, the seed and the component
(see :mod:`specpar.core.mcdraws`), so results do not depend on how a
catalogue is split into blocks.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from ..calib.extinction import RV_TABLE_STEP, band_coefficients, rv_grid, rv_limits
from ..core.bands import BANDS, CALIBRATION_COLOURS, chain_matrices
from ..core.distance import dm_to_pc
from ..core.errors import InputError
from ..core.mcdraws import normal_draws
from ..core.solver import fit_draws_compact, observable_groups
from .frames import combine_codes

__all__ = ["MC_BATCH_DRAWS", "MC_MEMORY_BUDGET", "monte_carlo", "nan_percentiles"]

#: Monte Carlo work per batch: rows x draws held in memory at once.
MC_BATCH_DRAWS = 200_000
#: Memory one batch of Monte Carlo draws may take (bytes); a request whose single
#: star needs more is refused with a clear message instead of running out of memory.
MC_MEMORY_BUDGET = 2 * 1024 ** 3
#: The subtype distribution is tabulated from -Z_TABLE to +Z_TABLE sigma ...
Z_TABLE = 6.0
#: ... at this many nodes, and interpolated linearly per draw.
Z_NODES = 121
#: Show a progress bar when rows x draws exceed this.
PROGRESS_DRAWS = 2_000_000
_P, _ = chain_matrices()


def _mc_bytes_per_star(n_draws, k):
    """Rough peak memory of the Monte Carlo draws of one star with k observables."""
    return int(n_draws) * 8 * (6 * k + 24)


def nan_percentiles(d, qs):
    """Per-row percentiles (linear interpolation) ignoring NaN, as ``np.nanpercentile``
    with its default method, through one sort per row."""
    s = np.sort(d, axis=1)  # NaN sort last
    c = np.isfinite(s).sum(axis=1)
    out = []
    rows = np.arange(s.shape[0])
    for q in qs:
        pos = q / 100.0 * np.maximum(c - 1, 0)
        lo = np.floor(pos).astype(np.intp)
        hi = np.minimum(lo + 1, np.maximum(c - 1, 0))
        t = pos - lo
        a, b = s[rows, lo], s[rows, hi]
        v = np.where(t >= 0.5, b - (b - a) * (1 - t), a + (b - a) * t)
        out.append(np.where(c > 0, v, np.nan))
    return out


@dataclass
class _Tables:
    """What every batch of draws reads: the calibration along each distinct type's
    subtype distribution and the extinction coefficients on the R_V grid, both in
    observable space, with the per-code scatter."""

    ucode: np.ndarray
    zg: np.ndarray
    tab_flat: np.ndarray
    rgrid: np.ndarray
    rtab: np.ndarray
    rslope: np.ndarray
    rstep: float
    sd_mv: np.ndarray
    sd_col: np.ndarray


def _subtype_table(L, cal, cals, sptnum, e_spt, lcb, lcf, codes):
    """Codes of distinct (type, spread, class) and the calibration along each one's
    subtype distribution at z = -6..6 sigma, in observable space, flattened."""
    N = len(sptnum)
    own = ~np.isin(lcb, list(cals.by_class))  # e.g. period-luminosity rows: each row its own relation
    ucode = combine_codes(sptnum, e_spt, lcb, lcf, np.where(own, np.arange(N), -1))
    first = np.unique(ucode, return_index=True)[1]
    ucode = np.unique(ucode, return_inverse=True)[1].ravel()
    zg = np.linspace(-Z_TABLE, Z_TABLE, Z_NODES)
    x = sptnum[first, None] + e_spt[first, None] * zg[None]
    G = zg.size
    table = cals.evaluate(x.ravel(), np.repeat(lcb[first], G), np.repeat(lcf[first], G)).absmag
    table = table.reshape(first.size, G, len(BANDS))
    linear = own[first]
    fc = codes[first]
    table[linear] = (cal.absmag[fc][linear, None, :]
                     + cal.dabsmag[fc][linear, None, :] * (e_spt[first][linear, None] * zg[None])[:, :, None])
    # a band without calibration must not poison the others through NaN * 0
    touches = (L != 0).T.astype(float)  # (nb, K)
    tab_obs = np.where(np.isnan(table) @ touches > 0, np.nan, np.nan_to_num(table) @ L.T)  # (U, G, K)
    return ucode, zg, tab_obs.ravel()


def _tables(obs, cal, cals, sptnum, e_spt, lcb, lcf, law, codes) -> _Tables:
    ucode, zg, tab_flat = _subtype_table(obs.L, cal, cals, sptnum, e_spt, lcb, lcf, codes)
    # extinction coefficients on the R_V grid of coefficients_at, in observable space
    rgrid = rv_grid(law, RV_TABLE_STEP)
    rtab = band_coefficients(law, rgrid) @ obs.L.T  # (n_rv, K)
    rslope = (rtab[1:] - rtab[:-1]) / (rgrid[1:] - rgrid[:-1])[:, None]
    rstep = (rgrid[-1] - rgrid[0]) / (rgrid.size - 1)
    return _Tables(ucode, zg, tab_flat, rgrid, rtab, rslope, rstep, np.sqrt(np.nan_to_num(cal.var_mv)),
                   np.sqrt(np.nan_to_num(cal.var_colour)))


def _model_draws(t: _Tables, b, kidx, kb, codes, K, L, seed, n):
    """Model magnitudes of the draws (m, n, k): subtype, M_V scatter and colour scatter."""
    ncol = len(CALIBRATION_COLOURS)
    c_mv, c_col, c_spt = K + 1, K + 2 + np.arange(ncol), K + 2 + ncol
    zg, G = t.zg, t.zg.size
    # subtype draw: calibration read along the tabulated subtype distribution
    pos = (np.clip(normal_draws(kb, seed, c_spt, n), zg[0], zg[-1]) - zg[0]) / (zg[1] - zg[0])
    j0 = np.minimum(pos.astype(int), G - 2)
    frac = (pos - j0)[:, :, None]
    at = ((t.ucode[b][:, None, None] * G + j0[:, :, None]) * K + kidx[:, None, :])  # (m, n, k)
    model = t.tab_flat[at] * (1.0 - frac) + t.tab_flat[at + K] * frac
    # M_V scatter moves every band alike; colour scatter moves the bands downstream
    c = codes[b]
    l1, LP = L.sum(axis=1), L @ _P  # (K,), (K, ncol)
    model += (t.sd_mv[c][:, None] * normal_draws(kb, seed, c_mv, n))[:, :, None] * l1[kidx][:, None, :]
    LPg = LP[kidx]  # (m, k, ncol)
    for ci in range(ncol):
        need = np.flatnonzero((t.sd_col[c, ci] > 0) & (LPg[:, :, ci] != 0).any(axis=1))
        if need.size:
            z = t.sd_col[c[need], ci][:, None] * normal_draws(kb[need], seed, c_col[ci], n)
            model[need] += z[:, :, None] * LPg[need, None, :, ci]
    return model


def _batch(t: _Tables, obs, res, b, kidx, keys, codes, opts, rv_range):
    """Refitted (dm, E(B-V)) of the draws of rows ``b`` (all with observables ``kidx``)."""
    N, K = obs.y.shape
    n, m, k = int(opts.n_draws), b.size, kidx.shape[1]
    kb = keys[b]
    model = _model_draws(t, b, kidx, kb, codes, K, obs.L, opts.seed, n)
    # photometry: each observable keeps its own random component (components 1..K)
    y = np.take_along_axis(obs.y[b], kidx, axis=1)
    sig = np.take_along_axis(obs.sigma[b], kidx, axis=1)
    ydiff = np.empty((m, n, k))
    for slot in range(k):
        ydiff[:, :, slot] = y[:, slot, None] - model[:, :, slot]
    for kk in np.unique(kidx):
        r, slot = np.nonzero(kidx == kk)
        ydiff[r, :, slot] += sig[r, slot][:, None] * normal_draws(kb[r], opts.seed, 1 + int(kk), n)
    # R_V draw: coefficients interpolated on the grid, in observable space
    c_rv = K + 3 + len(CALIBRATION_COLOURS)
    rv_d = np.clip(res.rv[b, None] + res.e_rv[b, None] * normal_draws(kb, opts.seed, c_rv, n), *rv_range)
    j = np.clip(((rv_d - t.rgrid[0]) / t.rstep).astype(np.intp), 0, t.rgrid.size - 2)
    dx = (rv_d - t.rgrid[j])[:, :, None]
    at = j[:, :, None] * K + kidx[:, None, :]
    a1 = t.rslope.ravel()[at] * dx + t.rtab.ravel()[at]
    a0 = obs.L.sum(axis=1)[kidx]  # (m, k)
    W = res.weights[b[:, None, None], kidx[:, :, None], kidx[:, None, :]]  # (m, k, k)
    return fit_draws_compact(W, res.colour_known[b], res.mag_known[b], ydiff, a0, a1)


def monte_carlo(obs, cal, modes, cals, sptnum, e_spt, lcb, lcf, keys, res, opts, codes=None):
    """Monte Carlo: redraw photometry, subtype, M_V and colour scatter and R_V; refit.

    Each star is refitted with its nominal fit's weights held fixed, on the
    observables that fit used only (rows grouped by their number of
    observables, as in :func:`specpar.core.solver.solve`). Draws are made in
    batches of rows, so memory is bounded by :data:`MC_BATCH_DRAWS`, not by
    the number of rows. ``cal`` holds one row per calibration code
    (``codes``, default one per star). Random components are numbered:
    photometry 1..K, M_V, colours, subtype, R_V.

    References
    ----------
    Monte Carlo propagation of errors (common practice).
    """
    N, K = obs.y.shape
    n = int(opts.n_draws)
    codes = np.arange(N) if codes is None else np.asarray(codes, np.intp)
    per_star = _mc_bytes_per_star(n, K)
    if per_star > MC_MEMORY_BUDGET:
        most = MC_MEMORY_BUDGET // _mc_bytes_per_star(1, K)
        raise InputError(f"{n} Monte Carlo draws per star need about {per_star / 1024 ** 3:.1f} GB for "
                         f"one star with {K} observables; at most {most} draws fit in the "
                         f"{MC_MEMORY_BUDGET / 1024 ** 3:.0f} GB budget: ask for fewer draws (--mc)")
    out = {k: np.full(N, np.nan) for k in ("dm", "e_dm", "ebv", "e_ebv", "d50", "d16", "d84", "corr")}
    t = _tables(obs, cal, cals, sptnum, e_spt, lcb, lcf, opts.law, codes)
    rv_range = rv_limits(opts.law)
    bar = None
    if opts.progress and N * n > PROGRESS_DRAWS:
        from tqdm.auto import tqdm  # optional display; loaded only for long runs
        bar = tqdm(total=N, unit="row", desc="specpar Monte Carlo")
    n_done = 0
    for grows, gkidx in observable_groups(res.valid):
        step = max(1, MC_BATCH_DRAWS // (n * max(gkidx.shape[1], 1)))
        for s in range(0, grows.size, step):
            b = grows[s:s + step]
            _summary(out, b, _batch(t, obs, res, b, gkidx[s:s + step], keys, codes, opts, rv_range))
            n_done += b.size
            if bar is not None:
                bar.update(b.size)
    nodata = ~res.valid.any(axis=1)
    # rows without data: what the padded refit always gave them (a zero solution)
    for key in ("dm", "e_dm", "ebv", "e_ebv"):
        out[key][nodata] = 0.0
    for key in ("d50", "d16", "d84"):
        out[key][nodata] = dm_to_pc(0.0)
    if bar is not None:
        bar.update(N - n_done)
        bar.close()
    return out


def _summary(out, b, theta):
    """Mean, scatter and distance percentiles of the draws of rows ``b``."""
    dm, eb = theta[..., 0], theta[..., 1]
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows give NaN, as wanted
        out["dm"][b] = np.nanmean(dm, axis=1)
        out["e_dm"][b] = np.nanstd(dm, axis=1)
        out["ebv"][b] = np.nanmean(eb, axis=1)
        out["e_ebv"][b] = np.nanstd(eb, axis=1)
        d = dm_to_pc(dm)
        out["d16"][b], out["d50"][b], out["d84"][b] = nan_percentiles(d, (16, 50, 84))
        dmc, ebc = dm - out["dm"][b, None], eb - out["ebv"][b, None]
        out["corr"][b] = np.nanmean(dmc * ebc, axis=1) / (out["e_dm"][b] * out["e_ebv"][b])
