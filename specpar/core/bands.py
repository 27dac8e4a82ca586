"""Photometric bands known to specpar and how their absolute magnitudes follow
from a calibration's M_V and intrinsic colours.

Each band is reached from V through a chain of intrinsic colours as
calibration tables publish them (``B = V + (B-V)``, ``U = B + (U-B)``, ...).
The chain also defines how intrinsic-colour scatter propagates: every link
adds its own independent scatter to all bands downstream of it.

Effective wavelengths
---------------------
- U B V Rc Ic: Bessell (2005, ARA&A 43, 293), Table 1, for an A0 V spectrum (from memory).
- J H Ks: Cohen, Wheaton & Megeath (2003, AJ 126, 1090), 2MASS isophotal
  wavelengths (from memory).
- G BP RP: Gaia passbands, approximate mean wavelengths from Riello et al.
  (2021, A&A 649, A3) (from memory). Gaia extinction coefficients depend
  strongly on the stellar colour; a single effective wavelength is a
  first-order approximation.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from .errors import InputError

__all__ = ["Band", "BANDS", "BAND_NAMES", "band_index", "chain_matrices"]


@dataclass(frozen=True)
class Band:
    """One photometric band.

    Attributes
    ----------
    name : str
        Column name used for the magnitude (``e_<name>`` for its error).
    wavelength_um : float
        Effective wavelength in micron, used to read the extinction law.
    parent : str or None
        Band this one is reached from (None for V).
    colour : str or None
        Calibration colour column linking parent and this band.
    sign : int
        ``M_band = M_parent + sign * colour``.
    system : str
        Photometric system, for documentation.
    """

    name: str
    wavelength_um: float
    parent: str | None
    colour: str | None
    sign: int
    system: str


# Order matters: a band's parent always comes before it.
BANDS: tuple[Band, ...] = (
    Band("V", 0.545, None, None, 0, "Johnson"),
    Band("B", 0.438, "V", "B-V", +1, "Johnson"),
    Band("U", 0.366, "B", "U-B", +1, "Johnson"),
    Band("Rc", 0.641, "V", "V-Rc", -1, "Cousins"),
    Band("Ic", 0.798, "V", "V-Ic", -1, "Cousins"),
    Band("Ks", 2.159, "V", "V-Ks", -1, "2MASS"),
    Band("H", 1.662, "Ks", "H-Ks", +1, "2MASS"),
    Band("J", 1.235, "H", "J-H", +1, "2MASS"),
    Band("G", 0.622, "V", "G-V", +1, "Gaia"),
    Band("RP", 0.777, "G", "G-RP", -1, "Gaia"),
    Band("BP", 0.511, "RP", "BP-RP", +1, "Gaia"),
)
BAND_NAMES: tuple[str, ...] = tuple(b.name for b in BANDS)
CALIBRATION_COLOURS: tuple[str, ...] = tuple(b.colour for b in BANDS if b.colour)


def band_index(name: str) -> int:
    """Position of band ``name`` in :data:`BANDS`."""
    try:
        return BAND_NAMES.index(name)
    except ValueError:
        raise InputError(
            f"unknown band {name!r}; known bands are {', '.join(BAND_NAMES)}"
        ) from None


#: Column of V in arrays of absolute magnitudes ordered as :data:`BANDS`.
V_INDEX = band_index("V")
#: Column of B-V in arrays of intrinsic colours ordered as :data:`CALIBRATION_COLOURS`.
BV_INDEX = CALIBRATION_COLOURS.index("B-V")


def chain_matrices() -> tuple[np.ndarray, np.ndarray]:
    """Linear maps from (M_V, calibration colours) to absolute magnitudes.

    Returns
    -------
    P : ndarray, shape (n_bands, n_colours)
        ``M = M_V + P @ colours`` with colours ordered as
        :data:`CALIBRATION_COLOURS`.
    D : ndarray of bool, shape (n_bands, n_colours)
        ``D[b, c]`` is True when band ``b`` depends on colour ``c``
        (used to propagate missing colours and colour scatter).
    """
    nb, nc = len(BANDS), len(CALIBRATION_COLOURS)
    P = np.zeros((nb, nc))
    for i, band in enumerate(BANDS):
        if band.parent is None:
            continue
        P[i] = P[band_index(band.parent)]
        P[i, CALIBRATION_COLOURS.index(band.colour)] = band.sign
    return P, P != 0
