"""Reddening in the UBV system: the curved reddening line of the (U-B, B-V)
plane, the reddening-free Q index, and the per-band extinction vectors a
cluster fit shifts its locus by.

References
----------
Johnson, H. L. & Morgan, W. W. 1953, ApJ 117, 313 (Q parameter) (from memory).
Hiltner, W. A. & Johnson, H. L. 1956, ApJ 124, 367 (E(U-B)/E(B-V) = 0.72 +
0.05 E(B-V)) (from memory).
"""
from __future__ import annotations

import numpy as np

from specpar.core.bands import band_index
from specpar.core.errors import InputError
from specpar.calib.extinction import band_coefficients

__all__ = ["UB_SLOPE", "UB_CURVATURE", "Q_SLOPE", "U_REDDENING", "ub_excess_ratio", "q_index",
           "reddening_vectors"]

#: E(U-B)/E(B-V) = UB_SLOPE + UB_CURVATURE * E(B-V): Hiltner & Johnson 1956 (from memory).
UB_SLOPE = 0.72
UB_CURVATURE = 0.05
#: Slope in Q = (U-B) - 0.72 (B-V): Johnson & Morgan 1953 (from memory).
Q_SLOPE = 0.72
#: How the U band is reddened: the empirical curved line above, or the extinction law.
U_REDDENING = ("empirical", "law")


def ub_excess_ratio(ebv):
    """E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V).

    References
    ----------
    Hiltner & Johnson 1956, ApJ 124, 367 (from memory).
    """
    return UB_SLOPE + UB_CURVATURE * np.asarray(ebv, dtype=float)


def q_index(ub, bv):
    """Reddening-free parameter ``Q = (U-B) - 0.72 (B-V)``.

    References
    ----------
    Johnson & Morgan 1953, ApJ 117, 313 (from memory).
    """
    return np.asarray(ub, dtype=float) - Q_SLOPE * np.asarray(bv, dtype=float)


def reddening_vectors(law, rv, u_reddening):
    """Per band: linear and quadratic extinction per E(B-V) (A = lin E + quad E^2)."""
    lin = np.array(band_coefficients(law, rv), dtype=float)
    quad = np.zeros_like(lin)
    if u_reddening == "empirical":
        iU, iB = band_index("U"), band_index("B")
        lin[iU] = lin[iB] + UB_SLOPE
        quad[iU] = UB_CURVATURE
    elif u_reddening != "law":
        raise InputError(f"u_reddening must be 'empirical' or 'law', not {u_reddening!r}")
    return lin, quad
