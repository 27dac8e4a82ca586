"""Member photometry: the observables of every star read as
:func:`specpar.estimate` reads them (same columns, same rejection rules), the
ordinate band and the colours chosen, per-row flags for the rows that cannot
enter the fit, and the arrays over the stars that do.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from specpar.core.bands import BAND_NAMES
from specpar.core.errors import InputError
from specpar.pipeline.frames import to_frame
from specpar.pipeline.observables import prepare_observables
from specpar.pipeline.options import EstimateOptions

from .flags import BAD_ROWS, ClusterFlag

__all__ = ["MIN_STARS", "Data", "read_observables", "select_observables", "choose_ordinate",
           "membership_prior", "cluster_data", "finalise_data", "colour_space", "require_stars",
           "usable_rows", "chi2_blocks", "CHUNK", "masked_gaussian", "PRIOR_MARGIN", "TINY_IVAR"]

#: Fewest usable stars for a fit.
MIN_STARS = 10
#: Membership priors are kept this far inside (0, 1), so that log odds stay finite.
PRIOR_MARGIN = 1e-6
#: Smallest inverse variance divided by (a missing observable has 0).
TINY_IVAR = 1e-300
#: Stars per vectorised block (bounds the (stars x points x observables) temporaries).
CHUNK = 1500
#: Ordinate band preference when none is chosen.
_ORDINATE_ORDER = ("V", "G", "Ic", "Rc", "B", "Ks", "J", "H", "RP", "BP", "U")


@dataclass
class Data:
    """Observables of the stars used (arrays over used stars) and per-row bookkeeping."""

    frame: pd.DataFrame
    names: list
    L: np.ndarray  # (K, n_bands)
    k_ord: int
    y: np.ndarray  # (n, K) 0 where missing
    ivar: np.ndarray  # (n, K) 1/variance, 0 where missing
    lognorm: np.ndarray  # (n,)
    rows: np.ndarray  # indices of used rows in the input
    flags: np.ndarray  # (N,) per input row
    detail: np.ndarray  # (N,) extra note text
    prior: np.ndarray | None  # (n,) membership prior or None
    y_all: np.ndarray  # (N, K) NaN where missing
    var_all: np.ndarray  # (N, K)
    prior_all: np.ndarray | None = None  # (N,) membership prior per input row, or None

    @property
    def a(self):
        """d(observable)/d(dm): 1 for magnitudes, 0 for colours."""
        return self.L.sum(axis=1)

    @property
    def others(self):
        """Indices of the observables other than the ordinate."""
        return np.array([k for k in range(len(self.names)) if k != self.k_ord], dtype=int)

    def colours_of(self, values):
        """Magnitudes (..., K) as the observables relative to the ordinate (see
        :func:`colour_space`): a locus cloud or a reddening shift."""
        others = self.others
        return values[..., others] - self.a[others] * values[..., [self.k_ord]]

    def subset(self, pick) -> "Data":
        """A copy restricted to the used stars ``pick`` (indices into the used stars)."""
        return replace(self, y=self.y[pick], ivar=self.ivar[pick], lognorm=self.lognorm[pick],
                       rows=self.rows[pick], prior=None if self.prior is None else self.prior[pick])

    def ordinate_variance(self) -> np.ndarray:
        """Variance of each used star's ordinate magnitude."""
        return 1.0 / np.maximum(self.ivar[:, self.k_ord], TINY_IVAR)

    def observed(self):
        """(values, variances) of the used stars, NaN where an observable is missing."""
        y = np.where(self.ivar > 0, self.y, np.nan)
        var = np.where(self.ivar > 0, 1.0 / np.maximum(self.ivar, TINY_IVAR), np.nan)
        return y, var


def masked_gaussian(x, var):
    """Values (0 where missing), inverse variances (0 where missing) and the log of the
    Gaussian normalisation summed over the observables present, per row."""
    have = np.isfinite(x)
    x0 = np.where(have, x, 0.0)
    ivar = np.where(have, 1.0 / np.where(have, var, 1.0), 0.0)
    lognorm = -0.5 * np.where(have, np.log(2 * np.pi * np.where(have, var, 1.0)), 0.0).sum(axis=1)
    return x0, ivar, lognorm


def usable_rows(flags, set_aside=BAD_ROWS) -> np.ndarray:
    """Rows carrying none of the flags in ``set_aside``."""
    return (flags & int(set_aside)) == 0


def read_observables(frame, columns, default_error):
    """Observables as :func:`specpar.estimate` reads them (same columns and rules)."""
    f = frame if "sptype" in frame.columns else frame.assign(sptype=None)
    return prepare_observables(f, EstimateOptions(columns=dict(columns or {}), default_error=default_error))


def select_observables(names, L, bands):
    if bands is None:
        return np.ones(len(names), bool)
    bad = [b for b in bands if b not in BAND_NAMES]
    if bad:
        raise InputError(f"unknown band(s) {', '.join(bad)}; known bands are {', '.join(BAND_NAMES)}")
    allowed = np.isin(BAND_NAMES, list(bands))
    return ~((L != 0) & ~allowed[None, :]).any(axis=1)


def choose_ordinate(names, L, keep, magnitude):
    mags = {names[k]: k for k in np.flatnonzero(keep) if L[k].sum() != 0}
    if magnitude is not None:
        if magnitude not in mags:
            raise InputError(f"ordinate band {magnitude!r} has no magnitude column among the bands "
                             f"used; available: {', '.join(mags) or 'none'}")
        return mags[magnitude]
    for b in _ORDINATE_ORDER:
        if b in mags:
            return mags[b]
    raise InputError("the input has no magnitude column (only colours): a distance modulus needs "
                     f"at least one of {', '.join(BAND_NAMES)}")


def membership_prior(frame, column, flags):
    if column is None:
        return None
    if column not in frame.columns:
        raise InputError(f"membership column {column!r} is not in the input; it has "
                         f"{', '.join(map(str, frame.columns))}")
    p = pd.to_numeric(frame[column], errors="coerce").to_numpy(float)
    bad = ~((p >= 0) & (p <= 1))
    flags |= np.where(bad, int(ClusterFlag.MEMBERSHIP_INVALID), 0)
    return np.clip(p, PRIOR_MARGIN, 1 - PRIOR_MARGIN)


def cluster_data(table, opts) -> Data:
    frame = to_frame(table)
    prep = read_observables(frame, opts["columns"], opts["default_error"])
    N = len(frame)
    names, L = list(prep.obs_names), prep.obs.L
    keep = select_observables(names, L, opts["bands"])
    if not keep.any():
        raise InputError(f"none of the requested bands {', '.join(opts['bands'])} is in the input "
                         f"(it has {', '.join(names)})")
    k_ord_all = choose_ordinate(names, L, keep, opts["magnitude"])
    idx = np.flatnonzero(keep)
    k_ord = int(np.flatnonzero(idx == k_ord_all)[0])
    names, L = [names[k] for k in idx], L[idx]
    y = prep.obs.y[:, idx]
    var = prep.obs.sigma[:, idx] ** 2 + opts["width"] ** 2
    flags = np.zeros(N, np.int64)
    flags |= np.where(prep.rejected != 0, int(ClusterFlag.PHOT_REJECTED), 0)
    flags |= np.where(prep.defaulted != 0, int(ClusterFlag.ERROR_DEFAULTED), 0)
    have = np.isfinite(y)
    flags |= np.where(~have[:, k_ord], int(ClusterFlag.NO_ORDINATE), 0)
    colour_like = have.copy()
    colour_like[:, k_ord] = False
    if len(names) < 2 or not np.linalg.matrix_rank(L) >= 2:
        raise InputError(f"no colour can be formed from the photometry used ({', '.join(names)}): "
                         "give at least two bands, e.g. B and V, or a colour column such as B-V")
    flags |= np.where(have[:, k_ord] & ~colour_like.any(axis=1), int(ClusterFlag.NO_COLOUR), 0)
    with np.errstate(invalid="ignore"):
        yo = y[:, k_ord]
        lim = (yo < opts["bright_limit"]) | (yo > opts["faint_limit"])
    flags |= np.where(lim, int(ClusterFlag.MAG_LIMIT), 0)
    prior = membership_prior(frame, opts["membership"], flags)
    detail = np.full(N, "", dtype=object)
    return Data(frame, names, L, k_ord, y, var, None, np.zeros(0, int), flags, detail, prior,
                y, var, prior)


def finalise_data(d: Data, usable: np.ndarray) -> None:
    """Fill the arrays over used stars."""
    rows = np.flatnonzero(usable)
    d.rows = rows
    d.y, d.ivar, d.lognorm = masked_gaussian(d.y_all[rows], d.var_all[rows])
    if d.prior_all is not None:  # from the whole input each time: the used rows may shrink twice
        d.prior = d.prior_all[rows]


def colour_space(d: Data, y, var):
    """Observables relative to the ordinate: c_k = y_k - a_k y_ord (k != ord).

    Unit Jacobian, so densities in this space equal those in the original one.
    Variances ignore the covariance brought by the shared ordinate error.
    """
    a = d.a
    others = d.others
    c = y[:, others] - a[others] * y[:, [d.k_ord]]
    v = var[:, others] + (a[others] ** 2) * var[:, [d.k_ord]]
    return c, v, others


def chi2_blocks(c, iv, mc, sc):
    """Chi-square of every star's colours ``c`` (inverse variances ``iv``) against every
    locus point ``mc`` shifted by ``sc``, in blocks of :data:`CHUNK` stars: yields
    (slice of stars, (stars, points) chi-square)."""
    n = len(c)
    for s in range(0, n, CHUNK):
        sl = slice(s, min(n, s + CHUNK))
        r = c[sl, None, :] - mc[None] - sc
        yield sl, np.einsum("npk,npk,nk->np", r, r, iv[sl])


def require_stars(d: Data, usable, what):
    """:class:`InputError` unless at least :data:`MIN_STARS` rows are ``usable``."""
    n = int(usable.sum())
    if n < MIN_STARS:
        counts = {f.name: int(((d.flags & int(f)) != 0).sum()) for f in ClusterFlag}
        why = ", ".join(f"{k} {v}" for k, v in counts.items() if v)
        raise InputError(f"only {n} of {len(d.flags)} stars are usable ({what}); at least {MIN_STARS} "
                         f"are needed" + (f" (rows set aside: {why})" if why else ""))
