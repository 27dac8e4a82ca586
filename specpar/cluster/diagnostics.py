"""Per-star diagnostics at the fitted (dm, E(B-V)): colour chi-square against the
reddened locus, stars above the binary sequence (evolved) or past the locus'
faint end, goodness of fit, offsets from the single-star sequence, and the
cluster's mean parallax.

References
----------
Lindegren, L. et al. 2018, A&A 616, A2; 2021, A&A 649, A4 (Gaia parallax zero points).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from specpar.core.bands import band_index

from .data import chi2_blocks, colour_space, masked_gaussian
from .likelihood import fitted_shift
from .locus import Locus

__all__ = ["DEFAULT_PLX_ZERO_POINT", "DEFAULT_PLX_SYSTEMATIC", "EVOLVED_MARGIN", "BINARY_GAIN",
           "colour_offsets", "colour_chi2", "evolved_mask", "beyond_end_mask", "age_mask", "goodness_of_fit",
           "dmag_single", "member_mv_range", "cluster_parallax", "CUT_SIGMA", "CHI2_3SIGMA", "BEYOND_END_MARGIN", "LIKELY_MEMBER",
           "MIN_SUMMARY_STARS"]

#: Gaia parallax zero point (mas) removed from input parallaxes by default: Gaia EDR3/DR3
#: quasar median -0.017 mas (Lindegren, L. et al. 2021, A&A 649, A4); DR2: -0.029 mas
#: (Lindegren et al. 2018, A&A 616, A2).
DEFAULT_PLX_ZERO_POINT = -0.017
#: Systematic floor (mas) of a cluster's mean parallax: angular covariance of Gaia
#: parallaxes on degree scales, ~0.01 mas in EDR3 (Lindegren et al. 2021; Maiz Apellaniz et al.
#: 2021, A&A 649, A13; from memory), ~0.03-0.04 mas in DR2 (Lindegren et al. 2018).
DEFAULT_PLX_SYSTEMATIC = 0.010
#: A star brighter than the single-star sequence at its colour by more than the equal-mass
#: binary gain (0.75 mag) plus this margin and 3 sigma is not a main-sequence member.
EVOLVED_MARGIN = 0.15
#: Light gained by an equal-mass unresolved binary: 2.5 log10 2 = 0.75 mag (common practice).
BINARY_GAIN = 2.5 * np.log10(2.0)
#: Significance (sigma) of the cuts above the binary sequence and past the locus' faint end,
#: and of a mean parallax good enough for a distance (common practice).
CUT_SIGMA = 3
#: Chi-square interval of 3 sigma for one parameter: locus points this close to the best in
#: colour all count as compatible (common practice).
CHI2_3SIGMA = 9.0
#: A star is past the locus' faint end when fainter than it by this (mag; negative: already
#: 0.3 mag before the end, where the last points of a table are least certain) and CUT_SIGMA.
BEYOND_END_MARGIN = -0.3
#: Posterior membership probability above which a star counts as a likely member.
LIKELY_MEMBER = 0.5
#: Fewest stars for a goodness of fit or a mean parallax.
MIN_SUMMARY_STARS = 3


def colour_offsets(model, theta):
    """Each star's colours (zero where missing) with their inverse variances, the locus
    colours and the reddening shift at (dm, E(B-V)) = theta: what a colour chi-square
    against the locus needs."""
    d, single = model["data"], model["single"]
    c, v, _ = colour_space(d, *d.observed())
    c, iv, _ = masked_gaussian(c, v)
    return c, iv, d.colours_of(single.mu0), d.colours_of(fitted_shift(model, theta))


def colour_chi2(model, theta):
    """Chi-square of each star's colours against the closest point of the reddened locus."""
    c, iv, mc, sc = colour_offsets(model, theta)
    chi2 = np.empty(len(c))
    for sl, chi in chi2_blocks(c, iv, mc, sc):
        chi2[sl] = chi.min(axis=1)
    return chi2


def evolved_mask(model, theta):
    """Stars brighter than the unresolved-binary sequence at their colour.

    The single-star locus point closest in colour (at the fitted dm, E(B-V)) gives the
    ordinate magnitude a main-sequence star of that colour has; a binary is at most
    0.75 mag brighter (equal masses). Brighter than that by EVOLVED_MARGIN and 3 sigma:
    off the main sequence (subgiant, giant, turn-off star, blue straggler).
    """
    c, iv, mc, sc = colour_offsets(model, theta)
    single = model["single"]
    ms_ord = np.empty(len(c))
    for sl, chi in chi2_blocks(c, iv, mc, sc):
        # brightest locus point compatible with the colours (within 3 sigma of the best):
        # a conservative reference where the locus folds back in colour (upper main sequence)
        ok = chi <= chi.min(axis=1, keepdims=True) + CHI2_3SIGMA
        ms_ord[sl] = np.where(ok, single.m_ord[None, :], np.inf).min(axis=1)
    d = model["data"]
    ms_ord = ms_ord + fitted_shift(model, theta)[d.k_ord]
    sig = np.sqrt(d.ordinate_variance())
    return d.y[:, d.k_ord] < ms_ord - BINARY_GAIN - EVOLVED_MARGIN - CUT_SIGMA * sig


def beyond_end_mask(model, theta, margin=BEYOND_END_MARGIN):
    """Stars fainter (ordinate) than the faint end of the single-star locus at the fitted
    (dm, E(B-V)) by more than ``margin`` and 3 sigma: past the calibrated range."""
    d, single = model["data"], model["single"]
    end = single.m_ord.max() + fitted_shift(model, theta)[d.k_ord]
    sig = np.sqrt(d.ordinate_variance())
    return d.y[:, d.k_ord] > end + margin + CUT_SIGMA * sig


def age_mask(model, theta, ord_limit):
    """Stars brighter (ordinate) than the absolute magnitude ``ord_limit`` at the fitted
    (dm, E(B-V)): more massive than the stars still unevolved at the cluster's age."""
    d = model["data"]
    return d.y[:, d.k_ord] < ord_limit + fitted_shift(model, theta)[d.k_ord]


def goodness_of_fit(d, chi2c, p_member, p_binary):
    """Reduced colour chi-square of the likely single members (expected ~1)."""
    ncol = (d.ivar > 0).sum(axis=1) - (d.ivar[:, d.k_ord] > 0)
    single = (p_member >= LIKELY_MEMBER) & (p_binary < 0.5 * p_member) & np.isfinite(chi2c) & (ncol > 0)
    if single.sum() < MIN_SUMMARY_STARS:
        return np.nan, int(single.sum())
    return float(chi2c[single].sum() / ncol[single].sum()), int(single.sum())


def dmag_single(model, theta, loc: Locus, spt):
    """Ordinate magnitude minus the single-star sequence at the fitted locus position."""
    d = model["data"]
    ok = np.isfinite(spt)
    model_ord = np.full(len(spt), np.nan)
    model_ord[ok] = loc.at(spt[ok]) @ d.L[d.k_ord] + fitted_shift(model, theta)[d.k_ord]
    return d.y[:, d.k_ord] - model_ord


def member_mv_range(model, theta, p_member):
    """Absolute V range of the likely members at the fitted (dm, E): the prior range
    along the locus for the two-colour fit (a wider range than the stars populate
    biases E(B-V) there)."""
    d = model["data"]
    if "V" not in d.names or d.L[d.names.index("V")].sum() == 0:
        return (-np.inf, np.inf)
    iv = band_index("V")
    shift = theta[0] + model["lin"][iv] * theta[1] + model["quad"][iv] * theta[1] ** 2
    v = d.y_all[d.rows, d.names.index("V")][p_member >= LIKELY_MEMBER] - shift
    if not np.isfinite(v).any():
        return (-np.inf, np.inf)
    return float(np.nanmin(v)), float(np.nanmax(v))


def cluster_parallax(frame, columns, rows, p_member, zero_point, systematic):
    """Cluster mean parallax of the likely members: weighted mean of plx - zero_point,
    error from the weights, inflated by the excess scatter (depth, underestimated errors),
    plus the systematic floor in quadrature. Returns a dict, or None without plx/e_plx."""
    cols = dict(columns or {})
    pc, ec = cols.get("plx", "plx"), cols.get("e_plx", "e_plx")
    if pc not in frame.columns or ec not in frame.columns:
        return None
    plx = pd.to_numeric(frame[pc], errors="coerce").to_numpy(float)[rows]
    err = pd.to_numeric(frame[ec], errors="coerce").to_numpy(float)[rows]
    ok = np.isfinite(plx) & np.isfinite(err) & (err > 0) & (p_member >= LIKELY_MEMBER)
    if ok.sum() < MIN_SUMMARY_STARS:
        return None
    x, w = plx[ok] - zero_point, 1.0 / err[ok] ** 2
    mean = float((w * x).sum() / w.sum())
    chi2 = float((w * (x - mean) ** 2).sum() / (ok.sum() - 1))
    stat = float(np.sqrt(1.0 / w.sum() * max(chi2, 1.0)))
    e = float(np.hypot(stat, systematic))
    if mean <= 0 or mean < CUT_SIGMA * e:
        return {"plx": mean, "e_plx": e, "n": int(ok.sum()), "dm": np.nan, "e_dm": np.nan}
    dm = 10.0 - 5.0 * np.log10(mean)
    e_dm = float(5.0 / np.log(10.0) * e / mean)
    return {"plx": mean, "e_plx": e, "n": int(ok.sum()), "dm": float(dm), "e_dm": e_dm}
