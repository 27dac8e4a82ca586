"""Starting point of a cluster fit: a grid search over E(B-V) with each star's
distance-modulus likelihood binned and smoothed, on the single-star locus only."""
from __future__ import annotations

import numpy as np
from scipy.ndimage import gaussian_filter1d

from specpar.core.errors import InputError

from .data import colour_space, masked_gaussian
from .likelihood import observable_shift
from .locus import COARSE_STEP
from .numerics import refine_grid

__all__ = ["coarse_start", "start_sample", "dm_profile", "START_FIELD_FRACTION", "START_STARS", "START_DM_STEP"]

#: Field fraction held during the grid search (a typical cluster field; common practice).
START_FIELD_FRACTION = 0.3
#: Most stars used by the grid search (an even subsample of the sequence).
START_STARS = 150
#: Bin width (mag) of the distance-modulus likelihood of each star.
START_DM_STEP = 0.05
#: Fewest stars kept when only the brightest part of the sequence is searched.
START_MIN_BRIGHT = 30


def start_sample(d, n_max=START_STARS, bright_fraction=1.0):
    """Indices of at most ``n_max`` used stars spread evenly over the sequence; with
    ``bright_fraction`` < 1 only over that brightest part of it (the part of a sequence
    a locus surely covers; at least :data:`START_MIN_BRIGHT` stars)."""
    pool = np.arange(len(d.y))
    if bright_fraction < 1:
        k = max(int(np.ceil(bright_fraction * len(d.y))), min(len(d.y), START_MIN_BRIGHT))
        pool = np.sort(np.argsort(d.y[:, d.k_ord], kind="stable")[:k])
    return pool[np.unique(np.linspace(0, len(pool) - 1, min(n_max, len(pool))).astype(int))]


def dm_profile(model, sub, dm_step=START_DM_STEP):
    """A function of E(B-V) giving the best (log L, dm) of the stars ``sub``: each
    star's distance-modulus likelihood on the coarse single-star locus (widths
    inflated by half its spacing), binned every ``dm_step`` mag and smoothed, mixed
    with the field density at a fixed :data:`START_FIELD_FRACTION`."""
    d, cloud = model["data"], model["coarse"]
    y, var = (x[sub] for x in d.observed())
    c, v, others = colour_space(d, y, var + (COARSE_STEP / 2) ** 2)
    c, iv, lognorm = masked_gaussian(c, v)
    mc = d.colours_of(cloud.mu0)
    yo = y[:, d.k_ord]
    kern = max(COARSE_STEP, float(np.nanmedian(np.sqrt(var[:, d.k_ord]))))
    lo_dm, hi_dm = model["dm_range"]
    nb = int(np.ceil((hi_dm - lo_dm) / dm_step))
    logF = model["logF"][sub]
    rows = np.arange(len(sub))[:, None] * nb

    def best_dm(ebv):
        shift, _ = observable_shift(d, model["lin"], model["quad"], 0.0, ebv)
        r = c[:, None, :] - mc[None] - d.colours_of(shift)
        lp = cloud.logw[None] - 0.5 * np.einsum("npk,npk,nk->np", r, r, iv) + lognorm[:, None]
        top = np.max(lp, axis=1, keepdims=True)
        top = np.where(np.isfinite(top), top, 0.0)
        ib = np.floor((yo[:, None] - cloud.m_ord[None] - shift[d.k_ord] - lo_dm) / dm_step).astype(int)
        ok = (ib >= 0) & (ib < nb)
        hist = np.bincount((rows + ib)[ok], weights=np.exp(lp - top)[ok], minlength=len(sub) * nb)
        dens = gaussian_filter1d(hist.reshape(len(sub), nb), kern / dm_step, axis=1, mode="constant")
        with np.errstate(divide="ignore"):
            lm = np.log(dens / dm_step) + top
        ll = np.logaddexp(np.log(1 - START_FIELD_FRACTION) + lm,
                          np.log(START_FIELD_FRACTION) + logF[:, None]).sum(axis=0)
        j = int(np.argmax(ll))
        return ll[j], lo_dm + (j + 0.5) * dm_step

    return best_dm


def coarse_start(model, n_max=START_STARS, dm_step=START_DM_STEP, bright_fraction=1.0):
    """Starting (dm, E): grid in E(B-V) (coarse, then fine; :func:`.numerics.refine_grid`)
    of the profile of :func:`dm_profile` over the stars of :func:`start_sample`."""
    sub = start_sample(model["data"], n_max, bright_fraction)
    lo_e, hi_e = model["ebv_range"]
    e_best, (ll_best, dm_best) = refine_grid(dm_profile(model, sub, dm_step), lo_e, hi_e,
                                             key=lambda s: s[0])
    if not np.isfinite(ll_best):
        lo_dm, hi_dm = model["dm_range"]
        raise InputError("no distance modulus in the allowed range puts the locus on these stars; "
                         f"widen dm_range (now {lo_dm:g} to {hi_dm:g}) or check the photometry")
    return dm_best, e_best
