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

__all__ = ["LAWS", "DEFAULT_LAW", "DEFAULT_RV", "band_coefficients", "check_law"]

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


def check_law(law: str, rv: float) -> None:
    """Raise ValueError naming the valid choices if ``law``/``rv`` are unusable."""
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
        Ordered as :data:`specpar.bands.BANDS`.
    """
    rv_arr = np.asarray(rv, dtype=float)
    rows = np.array([_coefficients_scalar(law, float(r)) for r in rv_arr.ravel()])
    return rows.reshape(rv_arr.shape + (len(BANDS),))


def coefficient_derivative(law: str, rv: float, step: float = 0.01) -> np.ndarray:
    """d(A_band/E(B-V)) / dR_V by a central difference inside the law's range."""
    lo, hi = rv_limits(law)
    a, b = max(lo, rv - step), min(hi, rv + step)
    return (band_coefficients(law, b) - band_coefficients(law, a)) / (b - a)
