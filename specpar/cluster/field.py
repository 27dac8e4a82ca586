"""Densities of the field component and the rows no reddened locus can reach.

The broad field density is uniform in the ordinate over the observed range and
Gaussian in each colour (the sample's mean and spread); field dwarfs follow the
locus colours reddened by any E(B-V) up to a limit (dwarfs at all distances
along the line of sight).
"""
from __future__ import annotations

import numpy as np
from scipy.special import logsumexp

from .data import Data, chi2_blocks, colour_space, masked_gaussian, usable_rows
from .likelihood import observable_shift
from .locus import COARSE_STEP, Cloud

__all__ = ["field_logdensity", "field_dwarf_logdensity", "outside_locus", "MIN_COLOUR_SPREAD",
           "FIELD_DWARF_EBV_STEP", "OUTSIDE_SIGMA"]

#: Smallest spread (mag) of the broad field density in a colour (common practice: a few
#: times typical photometric errors, so a tight sample does not make it a second sequence).
MIN_COLOUR_SPREAD = 0.05
#: E(B-V) step (mag) of the field-dwarf reddening grid.
FIELD_DWARF_EBV_STEP = 0.05
#: Margin, in sigma of a star's colour, before it counts as out of the locus' reach.
OUTSIDE_SIGMA = 5.0


def field_logdensity(d: Data, window):
    """Broad field density per used star: uniform in the ordinate, Gaussian per colour."""
    c, v, _ = colour_space(d, d.y_all[d.rows], d.var_all[d.rows])
    have = np.isfinite(c)
    mean = np.nanmean(c, axis=0)
    sd = np.maximum(np.nanstd(c, axis=0), MIN_COLOUR_SPREAD)
    z = np.where(have, (c - mean) / sd, 0.0)
    logg = np.where(have, -0.5 * z ** 2 - np.log(sd * np.sqrt(2 * np.pi)), 0.0)
    return logg.sum(axis=1) - np.log(window)


def field_dwarf_logdensity(d: Data, window, cloud: Cloud, red, ebv_max, step=FIELD_DWARF_EBV_STEP):
    """Field dwarfs: uniform in the ordinate, colours of the locus (uniform-in-magnitude
    weights) reddened by any E(B-V) in [0, ebv_max] (uniform), i.e. dwarfs at all
    distances along the line of sight."""
    c, v, _ = colour_space(d, d.y_all[d.rows], d.var_all[d.rows] + (COARSE_STEP / 2) ** 2)
    c, iv, lognorm = masked_gaussian(c, v)
    mc = d.colours_of(cloud.mu0)
    logw = cloud.logw - logsumexp(cloud.logw)
    grid = np.arange(0.0, max(ebv_max, step) + 1e-9, step)
    out = np.full((len(grid), len(c)), -np.inf)
    for i, e in enumerate(grid):  # loop over a short E(B-V) grid
        sc = d.colours_of(observable_shift(d, *red, 0.0, e)[0])
        for sl, chi in chi2_blocks(c, iv, mc, sc):
            out[i, sl] = logsumexp(logw[None] - 0.5 * chi, axis=1)
    return logsumexp(out, axis=0) - np.log(len(grid)) + lognorm - np.log(window)


def outside_locus(d: Data, single: Cloud, lin, quad, ebv_range):
    """Rows whose colours no reddened locus point can reach (:data:`OUTSIDE_SIGMA` margin)."""
    rows = np.flatnonzero(usable_rows(d.flags))
    c, v, others = colour_space(d, d.y_all[rows], d.var_all[rows])
    mc = d.colours_of(single.mu0)
    out = np.zeros(len(rows), bool)
    for j, k in enumerate(others):
        lo_e = [(d.L[k] @ lin) * e + (d.L[k] @ quad) * e * e - d.a[k] * (d.L[d.k_ord] @ lin) * e
                for e in ebv_range]
        lo = mc[:, j].min() + min(lo_e + [0.0]) - OUTSIDE_SIGMA * np.sqrt(v[:, j])
        hi = mc[:, j].max() + max(lo_e + [0.0]) + OUTSIDE_SIGMA * np.sqrt(v[:, j])
        with np.errstate(invalid="ignore"):
            out |= (c[:, j] < lo) | (c[:, j] > hi)
    flag = np.zeros(len(d.flags), bool)
    flag[rows] = out
    return flag
