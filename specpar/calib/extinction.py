"""Interstellar extinction in the bands specpar knows, from laws shipped by
``dust_extinction``.

Convention
----------
The fitted quantity is the colour excess E(B-V). A band's extinction is
``A_band = R_band * E(B-V)`` with ``R_band = R_V * A(lambda_band)/A(V)`` read
from the chosen law at the band's effective wavelength. Two coefficients are
fixed by definition rather than read from the curve: ``R_V`` itself
(A_V = R_V E(B-V)) and ``R_B = R_V + 1`` (E(B-V) = A_B - A_V), so that a
colour excess measured in B-V is exactly the E(B-V) reported. At a single
effective wavelength the laws give R_B within about 1-4 % of this (the
monochromatic curve is not a band average).

References
----------
Cardelli, Clayton & Mathis 1989, ApJ 345, 245 (CCM89);
Fitzpatrick 1999, PASP 111, 63 (F99);
Gordon et al. 2023, ApJ 950, 86 (G23).
"""
from __future__ import annotations

from functools import lru_cache

import astropy.units as u
import numpy as np
from dust_extinction import parameter_averages as _pa

from ..core.bands import BANDS, band_index
from ..core.errors import InputError
from ..core.solver import solve

__all__ = ["LAWS", "DEFAULT_LAW", "DEFAULT_RV", "RV_FIT_STEP", "RV_TABLE_STEP", "band_coefficients",
           "check_law", "rv_limits", "rv_grid", "coefficient_derivative", "coefficients_at", "fit_free_rv"]

#: Laws offered, by the names their papers give them.
LAWS = {
    "CCM89": (_pa.CCM89, "Cardelli, Clayton & Mathis 1989, ApJ 345, 245"),
    "O94": (_pa.O94, "O'Donnell 1994, ApJ 422, 158"),
    "F99": (_pa.F99, "Fitzpatrick 1999, PASP 111, 63"),
    "F19": (_pa.F19, "Fitzpatrick et al. 2019, ApJ 886, 108"),
    "G23": (_pa.G23, "Gordon et al. 2023, ApJ 950, 86"),
}
DEFAULT_LAW = "F99"
DEFAULT_RV = 3.1
#: Step of the R_V grid on which a star's chi-square profile is computed when R_V is free
#: (fine enough for a parabola through the three nodes around the minimum; common practice).
RV_FIT_STEP = 0.1
#: Step of the R_V grid on which coefficients are tabulated and interpolated linearly.
RV_TABLE_STEP = 0.05


def check_law(law: str, rv: float) -> None:
    """Raise :class:`InputError` naming the valid choices if ``law``/``rv`` are unusable."""
    if law not in LAWS:
        raise InputError(
            f"unknown extinction law {law!r}; choose one of {', '.join(LAWS)}"
        )
    lo, hi = LAWS[law][0].Rv_range
    if not (np.isfinite(rv) and lo <= rv <= hi):
        raise InputError(
            f"R_V = {rv} is outside the range of {law} [{lo} <= R_V <= {hi}]"
        )


def rv_limits(law: str) -> tuple[float, float]:
    """Valid R_V range of ``law``."""
    lo, hi = LAWS[law][0].Rv_range
    return float(lo), float(hi)


@lru_cache(maxsize=256)
def _coefficients_scalar(law: str, rv: float) -> tuple[float, ...]:
    check_law(law, rv)
    model = LAWS[law][0](Rv=rv)
    lam = np.array([b.wavelength_um for b in BANDS]) * u.micron
    a_over_av = np.asarray(model(lam), dtype=float)
    a_over_av = a_over_av / a_over_av[band_index("V")]
    r = rv * a_over_av
    r[band_index("B")] = rv + 1.0
    return tuple(r)


def band_coefficients(law: str = DEFAULT_LAW, rv=DEFAULT_RV) -> np.ndarray:
    """Extinction per unit colour excess, ``A_band / E(B-V)``, for every band.

    Parameters
    ----------
    law : str
        One of :data:`LAWS`.
    rv : float or array_like
        Total-to-selective extinction ratio R_V; an array gives one row per value.

    Returns
    -------
    ndarray, shape (n_bands,) or (n_rv, n_bands)
        Ordered as :data:`specpar.core.bands.BANDS`.
    """
    rv_arr = np.asarray(rv, dtype=float)
    rows = np.array([_coefficients_scalar(law, float(r)) for r in rv_arr.ravel()])
    return rows.reshape(rv_arr.shape + (len(BANDS),))


def coefficient_derivative(law: str, rv: float, step: float = 0.01) -> np.ndarray:
    """d(A_band/E(B-V)) / dR_V by a central difference inside the law's range."""
    lo, hi = rv_limits(law)
    a, b = max(lo, rv - step), min(hi, rv + step)
    return (band_coefficients(law, b) - band_coefficients(law, a)) / (b - a)


def rv_grid(law: str, step: float) -> np.ndarray:
    """R_V nodes from the lower to the upper end of ``law``'s range, ``step`` apart."""
    lo, hi = rv_limits(law)
    return np.round(np.arange(lo, hi + 1e-9, step), 3)


def coefficients_at(law, rv):
    """Extinction coefficients and their R_V derivatives at per-star R_V.

    Interpolated linearly on the :data:`RV_TABLE_STEP` grid of the law's range.

    Returns
    -------
    R, dR : ndarray, shape rv.shape + (n_bands,)
    """
    grid = rv_grid(law, RV_TABLE_STEP)
    tab = band_coefficients(law, grid)
    R = np.stack([np.interp(rv, grid, tab[:, b]) for b in range(len(BANDS))], axis=-1)
    dtab = np.gradient(tab, grid, axis=0)
    dR = np.stack([np.interp(rv, grid, dtab[:, b]) for b in range(len(BANDS))], axis=-1)
    return R, dR


#: Square of :data:`RV_FIT_STEP` (rounded so that it is the double nearest 0.01).
_RV_FIT_STEP_SQ = round(RV_FIT_STEP ** 2, 12)


def fit_free_rv(obs, cal, modes, law, codes=None):
    """Per-star R_V from the chi-square profile on the :data:`RV_FIT_STEP` grid.

    The fit (:func:`specpar.core.solver.solve`) is repeated at every grid node,
    vectorised over stars; a parabola through the best node and its two
    neighbours gives R_V (moved by at most one step) and its error
    ``sqrt(2 / chi2'')``.

    Parameters
    ----------
    obs : Observables
    cal : CalibrationValues
        One row per calibration code.
    modes : ndarray
        Subtype-uncertainty modes per calibration code.
    law : str
    codes : ndarray of int, optional
        Calibration code per row (default one per row).

    Returns
    -------
    rv, e_rv : ndarray
        e_rv is inf where the profile has no curvature.
    """
    lo, hi = rv_limits(law)
    grid = rv_grid(law, RV_FIT_STEP)
    coeffs = band_coefficients(law, grid)
    chi2 = np.empty((len(grid), obs.y.shape[0]))
    for i, R in enumerate(coeffs):  # loop over the R_V grid, not over stars
        r = solve(obs, cal.absmag, modes, cal.var_mv, cal.var_colour, R, 0 * R, codes=codes)
        chi2[i] = np.nan_to_num(r.chi2, nan=np.inf)
    i0 = np.clip(np.argmin(chi2, axis=0), 1, len(grid) - 2)
    n = np.arange(chi2.shape[1])
    c_m, c_0, c_p = chi2[i0 - 1, n], chi2[i0, n], chi2[i0 + 1, n]
    with np.errstate(invalid="ignore", divide="ignore"):
        curv = (c_p - 2 * c_0 + c_m) / _RV_FIT_STEP_SQ  # second derivative per unit R_V^2
        shift = np.where(curv > 0, -0.5 * (c_p - c_m) / RV_FIT_STEP / curv, 0.0)
        e_rv = np.sqrt(2.0 / curv)
    rv = np.clip(grid[i0] + np.clip(shift, -RV_FIT_STEP, RV_FIT_STEP), lo, hi)
    return rv, np.where(np.isfinite(e_rv), e_rv, np.inf)
