"""E(B-V) >= 0: the physical bound on the colour excess, applied after the fit.

The solver fits distance modulus and E(B-V) without bounds; its likelihood in
(dm, E(B-V)) is Gaussian with mean (dm, E), standard errors (e_dm, e_E) and
correlation rho. Interstellar extinction cannot be negative, so for the rows
whose unbounded E(B-V) is below 0 this module

* pins E(B-V) at 0 and takes the distance modulus of the fit with E(B-V) held
  there. For a Gaussian likelihood that is the conditional mean
  ``dm0 = dm - b E`` with ``b = rho e_dm / e_E``, with conditional variance
  ``e_dm**2 (1 - rho**2)``: the same numbers as re-solving those rows with
  E(B-V) pinned at 0 (the route the solver takes for rows without colours),
  without a second pass through the batched solver;
* describes what the bound leaves of E(B-V): the likelihood truncated to
  E(B-V) >= 0 (a flat prior on the physical range) is a truncated normal; its
  95th percentile is reported as the upper limit ``ebv_upper``, and the
  uncertainty ``e_ebv`` becomes its root mean square about the reported value
  0, ``sqrt(<E^2>)``;
* widens ``e_dm`` by what the bound implies: E(B-V) anywhere in the truncated
  distribution moves dm by ``b E``, so ``e_dm**2 = e_dm**2 (1 - rho**2) + b**2 <E^2>``;
* adds the bound's price to the goodness of fit: ``chi2 += (E / e_E)**2`` and
  one more degree of freedom (E(B-V) is no longer fitted).

Rows without colour information already have E(B-V) pinned at 0 (flagged
EBV_ASSUMED_ZERO); they are left alone. Everything is vectorised over rows.

References
----------
Johnson, N. L., Kotz, S. & Balakrishnan, N. 1994, "Continuous Univariate
Distributions", vol. 1, ch. 13 (moments and quantiles of the truncated normal;
from memory). Conditional mean and variance of a bivariate normal: common
practice.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import truncnorm

__all__ = ["EbvBound", "bound_ebv", "UPPER_LIMIT_LEVEL"]

#: Probability level of the reported upper limit of E(B-V) at the bound (common practice).
UPPER_LIMIT_LEVEL = 0.95


@dataclass
class EbvBound:
    """Results with E(B-V) >= 0 (arrays over rows).

    ``at_bound`` marks the rows that were changed; ``ebv_upper`` is their
    upper limit (NaN elsewhere); ``ebv_unbounded`` and ``e_ebv_unbounded`` keep
    the fit before the bound for every row.
    """

    dm: np.ndarray
    e_dm: np.ndarray
    ebv: np.ndarray
    e_ebv: np.ndarray
    chi2: np.ndarray
    dof: np.ndarray
    at_bound: np.ndarray
    ebv_upper: np.ndarray
    ebv_unbounded: np.ndarray
    e_ebv_unbounded: np.ndarray


def bound_ebv(dm, e_dm, ebv, e_ebv, corr, chi2, dof, colour_known) -> EbvBound:
    """Hold E(B-V) at 0 where the unbounded fit put it below 0.

    Parameters
    ----------
    dm, e_dm : array_like
        Unbounded distance modulus and its error (NaN where there is none, e.g.
        colours only).
    ebv, e_ebv : array_like
        Unbounded E(B-V) and its error.
    corr : array_like
        Correlation of dm and E(B-V) in the fit (NaN or 0 where undefined).
    chi2, dof : array_like
        Chi-square and degrees of freedom of the unbounded fit.
    colour_known : array_like of bool
        Rows whose E(B-V) was fitted (the others have it pinned at 0 already).

    Returns
    -------
    EbvBound

    References
    ----------
    Johnson, Kotz & Balakrishnan 1994, "Continuous Univariate Distributions",
    vol. 1, ch. 13 (truncated normal; from memory).
    """
    dm, e_dm, ebv, e_ebv, corr, chi2 = (np.array(a, dtype=float) for a in (dm, e_dm, ebv, e_ebv, corr, chi2))
    dof = np.array(dof, dtype=np.int64)
    raw, e_raw = ebv.copy(), e_ebv.copy()
    with np.errstate(invalid="ignore"):
        at = np.asarray(colour_known, bool) & np.isfinite(ebv) & (ebv < 0) & (e_ebv > 0)
    upper = np.full(ebv.shape, np.nan)
    if at.any():
        mu, s = ebv[at], e_ebv[at]
        alpha = -mu / s  # the bound in units of the error, > 0
        t_mean, t_var = truncnorm.stats(alpha, np.inf, moments="mv")
        ms = t_var + (t_mean - alpha) ** 2  # <(Z - alpha)^2>: mean square of E/s about 0
        upper[at] = (truncnorm.ppf(UPPER_LIMIT_LEVEL, alpha, np.inf) - alpha) * s
        r = np.nan_to_num(corr[at])
        b = np.where(np.isfinite(e_dm[at]), r * np.nan_to_num(e_dm[at]) / s, 0.0)
        dm[at] = dm[at] - b * mu
        e_dm[at] = np.sqrt(e_dm[at] ** 2 * (1.0 - r ** 2) + b ** 2 * ms * s ** 2)
        ebv[at] = 0.0
        e_ebv[at] = np.sqrt(ms) * s
        chi2[at] = chi2[at] + alpha ** 2
        dof[at] = dof[at] + 1
    return EbvBound(dm, e_dm, ebv, e_ebv, chi2, dof, at, upper, raw, e_raw)
