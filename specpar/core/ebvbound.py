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
  0, ``sqrt(<E^2>)`` (closed forms with vectorised special functions: see
  :func:`truncated_mean_square`, :func:`truncated_quantile`);
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
from memory). Abramowitz, M. & Stegun, I. A. 1964, "Handbook of Mathematical
Functions", 7.1.23 (asymptotic series of the complementary error function;
from memory). Conditional mean and variance of a bivariate normal: common
practice.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import erfcx, log_ndtr, ndtri_exp

__all__ = ["EbvBound", "bound_ebv", "truncated_mean_square", "truncated_quantile", "UPPER_LIMIT_LEVEL"]

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


#: Above this bound (in sigma) the mean square uses its asymptotic series (relative error < 1e-8).
_ASYMPTOTIC = 20.0


def truncated_mean_square(alpha) -> np.ndarray:
    """``<(Z - alpha)^2>`` for a unit normal Z truncated to ``Z >= alpha`` (alpha >= 0).

    With the inverse Mills ratio ``lam = phi(alpha) / Q(alpha)`` it is ``1 + alpha^2 -
    alpha lam`` (mean ``lam`` and second moment ``1 + alpha lam`` of the truncated normal);
    ``Q / phi`` comes from the scaled complementary error function so that no tail
    probability underflows. For large alpha that difference cancels and the asymptotic
    series ``2/a^2 - 10/a^4 + 74/a^6 - 706/a^8 + 8162/a^10`` is used instead (obtained by
    inverting the asymptotic series of the Mills ratio, ``Q/phi ~ (1/a)(1 - 1/a^2 + 3/a^4
    - 15/a^6 + ...)``, Abramowitz & Stegun 1964, 7.1.23). Vectorised ufuncs only.
    """
    a = np.asarray(alpha, dtype=float)
    mills = np.sqrt(np.pi / 2.0) * erfcx(a / np.sqrt(2.0))  # Q(a) / phi(a)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        direct = 1.0 + a * a - a / mills
        x = 1.0 / (a * a)
        series = x * (2.0 + x * (-10.0 + x * (74.0 + x * (-706.0 + x * 8162.0))))
    return np.where(a < _ASYMPTOTIC, direct, series)


def truncated_quantile(p, alpha) -> np.ndarray:
    """Quantile ``p`` of ``Z - alpha`` for a unit normal Z truncated to ``Z >= alpha``.

    ``P(Z > z) = (1 - p) Q(alpha)`` solved in logarithms (``log_ndtr``, ``ndtri_exp``), so
    that it holds however far the bound lies in the tail.
    """
    a = np.asarray(alpha, dtype=float)
    z = -ndtri_exp(np.log1p(-p) + log_ndtr(-a))
    return np.maximum(z - a, 0.0)


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
        ms = truncated_mean_square(alpha)  # <(E/s)^2> over the truncated likelihood
        upper[at] = truncated_quantile(UPPER_LIMIT_LEVEL, alpha) * s
        r = np.nan_to_num(corr[at])
        b = np.where(np.isfinite(e_dm[at]), r * np.nan_to_num(e_dm[at]) / s, 0.0)
        dm[at] = dm[at] - b * mu
        e_dm[at] = np.sqrt(e_dm[at] ** 2 * (1.0 - r ** 2) + b ** 2 * ms * s ** 2)
        ebv[at] = 0.0
        e_ebv[at] = np.sqrt(ms) * s
        chi2[at] = chi2[at] + alpha ** 2
        dof[at] = dof[at] + 1
    return EbvBound(dm, e_dm, ebv, e_ebv, chi2, dof, at, upper, raw, e_raw)
