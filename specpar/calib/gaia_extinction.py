"""Colour-dependent extinction in the Gaia G, BP and RP bands.

The Gaia bands are broad: how much of a star's light the dust removes in them depends
on the star's spectrum, so one coefficient per band (the extinction law at an effective
wavelength, :mod:`.extinction`) is right for one kind of star only. For main-sequence
stars the Gaia EDR3 coefficients give ``k_X = A_X / A_0`` as a polynomial in the intrinsic
colour ``X = (BP-RP)_0`` and in ``A_0`` (``calibrations/gaia_extinction_edr3.ecsv``, with
its provenance). At (BP-RP)_0 = 1 and low extinction they give E(BP-RP)/E(B-V) = 1.27,
against 1.59 from the effective wavelengths: the difference is what moves the distances
of reddened clusters of K dwarfs (see the README).

specpar takes ``A_0 = R_V E(B-V)`` (A_0 is the extinction at 541.4 nm, close to A_V;
common practice). The coefficients were computed with the Fitzpatrick et al. (2019) curve
at R_V = 3.1; with another law or R_V their colour dependence is kept and their scale
follows R_V through A_0.

References
----------
Riello, M. et al. 2021, A&A 649, A3 (Gaia EDR3 photometry and its extinction coefficients);
Fitzpatrick, E. L. et al. 2019, ApJ 886, 108.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np
from astropy.table import Table

from ..core.bands import band_index
from .resources import data_path

__all__ = ["GAIA_BANDS", "GAIA_EXTINCTION_FILE", "gaia_k", "gaia_coefficients", "replace_gaia"]

GAIA_BANDS = ("G", "BP", "RP")
GAIA_EXTINCTION_FILE = "gaia_extinction_edr3.ecsv"
_TERMS = ("Intercept", "X", "X2", "X3", "A", "A2", "A3", "XA", "AX2", "XA2")


@lru_cache(maxsize=1)
def _table():
    t = Table.read(data_path(GAIA_EXTINCTION_FILE), format="ascii.ecsv")
    coef = {str(r["band"]): np.array([float(r["c_" + c]) for c in _TERMS]) for r in t}
    return coef, tuple(float(x) for x in t.meta["x_range"])


def gaia_k(band: str, x0, a0):
    """``A_band / A_0`` for intrinsic colour ``x0`` = (BP-RP)_0 (held at the ends of the
    table's colour range beyond it) and extinction ``a0`` (mag); broadcasts."""
    coef, (lo, hi) = _table()
    c = coef[band]
    x = np.clip(np.asarray(x0, dtype=float), lo, hi)
    a = np.asarray(a0, dtype=float)
    return (c[0] + c[1] * x + c[2] * x ** 2 + c[3] * x ** 3 + c[4] * a + c[5] * a ** 2 + c[6] * a ** 3
            + c[7] * x * a + c[8] * a * x ** 2 + c[9] * x * a ** 2)


def gaia_coefficients(x0, ebv, rv):
    """``A_band / E(B-V)`` of G, BP and RP (in that order, last axis) for intrinsic colour
    ``x0`` at colour excess ``ebv``: ``R_V k(x0, R_V E(B-V))``. Exact at ``ebv`` (a secant:
    the extinction is ``ebv`` times this); at ``ebv = 0`` the low-extinction limit."""
    a0 = rv * np.asarray(ebv, dtype=float)
    return np.stack([rv * gaia_k(b, x0, a0) for b in GAIA_BANDS], axis=-1)


def replace_gaia(lin, x0, ebv, rv):
    """A copy of the per-band coefficients ``lin`` with G, BP and RP replaced by
    :func:`gaia_coefficients` at (``x0``, ``ebv``)."""
    out = np.array(lin, dtype=float, copy=True)
    out[[band_index(b) for b in GAIA_BANDS]] = gaia_coefficients(x0, ebv, rv)
    return out
