"""E(B-V) from the (U-B, B-V) two-colour diagram alone, and star by star from
the reddening-free Q index for early-type members.

The intrinsic (U-B, B-V) locus slides along the curved reddening line
E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V) (same mixture of members and a broad field,
no distance information). The Q method: ``Q = (U-B) - 0.72 (B-V)`` is
reddening-free to first order, the locus gives (B-V)_0 from Q, and the
0.05 E(B-V)^2 curvature term is removed iteratively.

References
----------
Q index: Johnson & Morgan 1953, ApJ 117, 313; the curved reddening line: Hiltner &
Johnson 1956, ApJ 124, 367; (B-V)_0 = 0.332 Q for early B stars: Johnson 1958,
Lowell Obs. Bull. 4, 37 (all from memory).
"""
from __future__ import annotations

import numpy as np
from scipy import optimize
from scipy.special import logsumexp

from specpar.core.bands import band_index
from specpar.core.errors import InputError
from specpar.core.sptype import parse_sptypes

from .data import MIN_STARS, Data
from .diagnostics import LIKELY_MEMBER
from .field import MIN_COLOUR_SPREAD
from .likelihood import FIELD_FRACTION_BOUNDS
from .locus import LOCUS_STEP, Locus, fine_sptnum, resolve_locus
from .numerics import EBV_FINE_STEP, curvature_sigma, refine_grid, weighted_mean
from .reddening import Q_SLOPE, UB_CURVATURE, q_index, ub_excess_ratio

__all__ = ["Q_LATEST_SPTNUM", "ub_bv", "two_colour_locus", "two_colour_fit", "intrinsic_bv_from_q",
           "q_method", "two_colour_part", "early_from_sptype"]

#: Q method only for stars earlier than A0 (numeric type 20), where Q is
#: monotonic in (B-V)_0 along the dwarf sequence (O3 ... B9.5).
Q_LATEST_SPTNUM = 20.0
#: Without spectral types, the Q method takes members the main fit places earlier than B8:
#: two subclasses of margin below A0 (numeric type), against noise in the fitted position.
EARLY_MARGIN_SPTNUM = 2.0
#: d(B-V)_0/dQ for early B stars (Johnson 1958, from memory): for error propagation only.
JOHNSON_Q_SLOPE = 0.332
#: Step (numeric type) of the early-type locus the Q method reads, and the fixed-point
#: iterations that remove the curvature term (converged to < 1e-4 mag for E(B-V) < 2).
Q_SPTNUM_STEP = 0.05
Q_ITERATIONS = 4
#: Spacing (mag) of the two-colour locus drawn in the diagrams.
PLOT_LOCUS_STEP = 0.02
#: Tolerance (mag, fraction) of the bounded one-dimensional maximisations.
SCALAR_XTOL = 1e-5
#: Step (mag) of the second difference giving the curvature error of the two-colour E(B-V).
CURVATURE_STEP = 2e-3


def ub_bv(d: Data):
    """(U-B, B-V) per input row with their covariance, from magnitudes or colour columns."""
    N = len(d.y_all)
    vals = {n: (d.y_all[:, k], d.var_all[:, k]) for k, n in enumerate(d.names)}
    nan = np.full(N, np.nan)
    out = {}
    for col, (b1, b2) in (("U-B", ("U", "B")), ("B-V", ("B", "V"))):
        if b1 in vals and b2 in vals:
            v = vals[b1][0] - vals[b2][0]
            var = vals[b1][1] + vals[b2][1]
        else:
            v, var = nan, nan
        if col in vals:
            use = ~np.isfinite(v)
            v = np.where(use, vals[col][0], v)
            var = np.where(use, vals[col][1], var)
        out[col] = (v, var)
    cov = np.zeros(N)
    if all(b in vals for b in "UBV"):
        from_mags = np.isfinite(vals["U"][0]) & np.isfinite(vals["B"][0]) & np.isfinite(vals["V"][0])
        cov = np.where(from_mags, -vals["B"][1], 0.0)
    return out["U-B"], out["B-V"], cov


def two_colour_locus(locus: Locus, step=PLOT_LOCUS_STEP, mv_range=(-np.inf, np.inf)):
    """Intrinsic (U-B, B-V) along the locus where U-B is calibrated, points ``step`` mag
    apart in the plane; weights uniform in M_V inside ``mv_range``, summing to 1."""
    cal = locus.cal
    fine = fine_sptnum(cal)
    iU, iB, iV = (band_index(b) for b in "UBV")
    v = cal.evaluate(fine).absmag
    ok = np.isfinite(v[:, iU]) & np.isfinite(v[:, iB]) & np.isfinite(v[:, iV])
    if ok.sum() < 2:
        return None
    fine, v = fine[ok], v[ok]
    xy = np.stack([v[:, iU] - v[:, iB], v[:, iB] - v[:, iV]], axis=1)
    s = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(xy, axis=0).T))])
    spt = np.interp(np.linspace(0, s[-1], max(int(s[-1] / step), 2) + 1), s, fine)
    v = cal.evaluate(spt).absmag
    w = np.abs(np.gradient(v[:, iV])) * ((v[:, iV] >= mv_range[0]) & (v[:, iV] <= mv_range[1]))
    with np.errstate(divide="ignore", invalid="ignore"):
        return spt, v[:, iU] - v[:, iB], v[:, iB] - v[:, iV], np.log(w / w.sum())


def two_colour_fit(ub, bv, cov, locus: Locus, ebv_range, mv_range):
    """E(B-V) from the (U-B, B-V) plane alone: grid, refine, curvature error."""
    vu, vb = ub[1], bv[1]  # these already hold the intrinsic width (see cluster_data)
    step = float(np.clip(1.2 * np.percentile(np.sqrt(np.minimum(vu, vb)), 5), *LOCUS_STEP))
    spt, ub0, bv0, logw = two_colour_locus(locus, step, mv_range)
    det = vu * vb - cov ** 2
    x, y = ub[0], bv[0]
    mx, sx = np.mean(x), max(np.std(x), MIN_COLOUR_SPREAD)
    my, sy = np.mean(y), max(np.std(y), MIN_COLOUR_SPREAD)
    logF = -0.5 * (((x - mx) / sx) ** 2 + ((y - my) / sy) ** 2) - np.log(2 * np.pi * sx * sy)

    def member(e):
        du = x[:, None] - (ub0 + e * ub_excess_ratio(e))[None]
        db = y[:, None] - (bv0 + e)[None]
        q = (vb[:, None] * du ** 2 - 2 * cov[:, None] * du * db + vu[:, None] * db ** 2) / det[:, None]
        return logw[None] - 0.5 * q - 0.5 * np.log((2 * np.pi) ** 2 * det)[:, None]

    def profile(e):
        lm = logsumexp(member(e), axis=1)
        f = optimize.minimize_scalar(lambda f: -np.logaddexp(np.log1p(-f) + lm, np.log(f) + logF).sum(),
                                     bounds=FIELD_FRACTION_BOUNDS, method="bounded",
                                     options={"xatol": SCALAR_XTOL})
        return -f.fun

    lo_e, hi_e = ebv_range
    e_best, _ = refine_grid(profile, lo_e, hi_e)
    r = optimize.minimize_scalar(lambda e: -profile(e), bounds=(max(lo_e, e_best - EBV_FINE_STEP),
                                 min(hi_e, e_best + EBV_FINE_STEP)), method="bounded",
                                 options={"xatol": SCALAR_XTOL})
    e_best = float(r.x)
    return e_best, curvature_sigma(profile, e_best, CURVATURE_STEP)


def intrinsic_bv_from_q(q, locus=None):
    """Intrinsic (B-V)_0 of an early-type (O3-A0) dwarf from its Q, read off the locus.

    Parameters
    ----------
    q : array_like
        Reddening-free ``Q = (U-B)_0 - 0.72 (B-V)_0`` (mag).
    locus : path or Calibration, optional
        Default: the shipped class V calibration.

    Returns
    -------
    ndarray
        (B-V)_0; NaN outside the range of Q covered by O3-A0 on the locus.

    References
    ----------
    Johnson & Morgan 1953, ApJ 117, 313 (Q); Johnson 1958, Lowell Obs. Bull. 4, 37
    (the linear form (B-V)_0 = 0.332 Q for early B stars) (from memory).
    """
    cal = resolve_locus(locus)
    lo, _ = cal.sptnum_range
    spt = np.arange(lo, Q_LATEST_SPTNUM + 1e-9, Q_SPTNUM_STEP)
    v = cal.evaluate(spt)
    iU, iB, iV = (band_index(b) for b in "UBV")
    bv0 = v.absmag[:, iB] - v.absmag[:, iV]
    q0 = q_index(v.absmag[:, iU] - v.absmag[:, iB], bv0)
    ok = np.isfinite(q0) & np.isfinite(bv0)
    if ok.sum() < 2:
        raise InputError(f"the locus {cal.name} has no U-B for early types: the Q method needs it")
    order = np.argsort(q0[ok])
    return np.interp(np.asarray(q, float), q0[ok][order], bv0[ok][order], left=np.nan, right=np.nan)


def q_method(ub, bv, cov, early, locus):
    """Per-star E(B-V) from Q for early-type stars, with the 0.05 E^2 curvature removed."""
    q = q_index(ub[0], bv[0])
    e = np.zeros_like(q)
    for _ in range(Q_ITERATIONS):  # fixed-point iteration on the curvature term
        bv0 = intrinsic_bv_from_q(q - UB_CURVATURE * e ** 2, locus.cal)
        e = bv[0] - bv0
    e = np.where(early, e, np.nan)
    k = JOHNSON_Q_SLOPE
    var = (1 + Q_SLOPE * k) ** 2 * bv[1] + k ** 2 * ub[1] - 2 * k * (1 + Q_SLOPE * k) * cov
    return q, e, var


def two_colour_part(d: Data, rows, loc: Locus, ebv_range, p_member, locus_spt, mv_range):
    """Independent E(B-V) from the two-colour diagram and the Q method (or None).

    Early-type stars for the Q method are members (p_member >= 0.5) typed earlier
    than A0 by an input ``sptype`` column, else placed earlier than B8 (a subclass
    margin) by the main fit. Selecting on the fitted position rather than on Q
    itself avoids picking stars whose Q was scattered blueward by noise.
    """
    if not loc.needed[[band_index(b) for b in "UBV"]].all():
        return None
    ub, bv, cov = ub_bv(d)
    ok = np.isfinite(ub[0]) & np.isfinite(bv[0])
    use = np.zeros(len(ok), bool)
    use[rows] = True
    use &= ok
    if use.sum() < MIN_STARS:
        return None
    sel = (ub[0][use], ub[1][use]), (bv[0][use], bv[1][use]), cov[use]
    e_tc, err_tc = two_colour_fit(*sel, loc, ebv_range, mv_range)
    pm, spt = np.zeros(len(ok)), np.full(len(ok), np.nan)
    pm[rows], spt[rows] = p_member, locus_spt
    sptype_early = early_from_sptype(d.frame)
    with np.errstate(invalid="ignore"):
        early = sptype_early if sptype_early is not None else spt < Q_LATEST_SPTNUM - EARLY_MARGIN_SPTNUM
    early = early & use & (pm >= LIKELY_MEMBER)
    q, e_q, var_q = q_method(ub, bv, cov, early, loc)
    mean_q, err_q, n_q = weighted_mean(e_q, var_q)
    return {"ebv_tc": e_tc, "e_ebv_tc": err_tc, "q": np.where(ok, q, np.nan), "ebv_q_star": e_q,
            "e_ebv_q_star": np.where(np.isfinite(e_q), np.sqrt(var_q), np.nan),
            "early": early & np.isfinite(e_q), "ebv_q": mean_q, "e_ebv_q": err_q, "n_q": n_q,
            "ub": ub[0], "bv": bv[0]}


def early_from_sptype(frame):
    """Early type (earlier than A0) from an optional ``sptype`` column, else None."""
    if "sptype" not in frame.columns:
        return None
    vals = frame["sptype"].map(lambda v: v if isinstance(v, str) else None).tolist()
    spt = parse_sptypes(vals)["sptnum"].to_numpy(float)
    return np.isfinite(spt) & (spt < Q_LATEST_SPTNUM)
