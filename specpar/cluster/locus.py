"""The locus a cluster is fitted with: the calibration table it comes from
(``young``, ``field`` or a file), sampled along its numeric type in the bands
in use, with masses for the binary companions, and the model point clouds
(single stars and unresolved binaries) in the space of the observables.

References
----------
Pecaut, M. J. & Mamajek, E. E. 2013, ApJS 208, 9, and E. Mamajek's online
table v2022.04.16 (mean dwarf masses, ``dwarf_masses.ecsv``).
Hurley, J. & Tout, C. A. 1998, MNRAS 300, 977 (unresolved binaries up to
0.75 mag above the single-star sequence) (from memory).
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from astropy.table import Table

from specpar.core.bands import BAND_NAMES
from specpar.calib.resources import calibration_dir
from specpar.calib.tables import Calibration, default_calibrations, load_calibration
from specpar.core.errors import InputError

__all__ = ["LOCI", "DEFAULT_LOCUS", "DEFAULT_LOCUS_ZP", "DEFAULT_LOCUS_COLOUR_ZP", "FEH_SLOPE",
           "E_FEH_SLOPE", "LOCUS_STEP", "COARSE_STEP", "FINE_SPTNUM_STEP", "Locus", "Cloud",
           "dwarf_masses", "mass_along", "build_locus", "locus_points", "clouds", "resolve_locus",
           "locus_zero_point", "fine_sptnum", "T_MS_SUN_MYR", "T_MS_MASS_EXPONENT", "EVOLVED_LIFE_FRACTION",
           "unevolved_mass_limit", "age_ordinate_limit"]

#: Spacing of the locus grid in the observables (mag): 1.2 times the smallest
#: per-star sigma (5th percentile), within these limits. A sum over points spaced
#: h along a line approximates the integral of a Gaussian of width s to
#: ~2 exp(-2 pi^2 s^2 / h^2) (Poisson summation), i.e. ~1e-6 here.
LOCUS_STEP = (0.01, 0.05)
#: Spacing (mag) of the single-star locus in the coarse start and of the field-dwarf density,
#: whose widths are inflated by half of it to match (common practice for a grid search).
COARSE_STEP = 0.1
#: Step (numeric type) at which a locus table is sampled before it is spaced in magnitude:
#: a hundredth of a subclass.
FINE_SPTNUM_STEP = 0.01

#: Named loci. "young": empirical young (~125 Myr, [Fe/H] ~ 0) main sequence derived from
#: Pleiades members' own Gaia DR2 parallaxes (even source ids; calibrations/young_V.ecsv,
#: built by calibrations/_build/make_young_locus.py), the default because the unevolved part
#: of any cluster sequence follows it; "field": the mean field dwarf sequence of Pecaut &
#: Mamajek 2013 (brighter at a given colour, since it mixes ages).
LOCI = ("young", "field")
DEFAULT_LOCUS = "young"


#: Zero-point uncertainty (mag) of a locus whose file states none (meta zero_point_uncertainty):
#: the mean field sequence differs from a given cluster's by ~0.1 mag (age, metallicity).
DEFAULT_LOCUS_ZP = 0.1
#: Uncertainty of each locus colour (mag) when the locus file states none (common practice:
#: mean colour sequences are tabulated to 0.01 mag and differ by ~0.02 between compilations).
DEFAULT_LOCUS_COLOUR_ZP = 0.02
#: Brightening of the main sequence at fixed colour per dex of [Fe/H], and its uncertainty
#: (mag/dex). About 1 mag/dex for F-K dwarfs at fixed B-V (e.g. An, D. et al. 2007, ApJ 655,
#: 233; Pinsonneault, M. H. et al. 2004, ApJ 600, 946; from memory); taken colour-independent
#: here, with 0.3 mag/dex of slack for that simplification.
FEH_SLOPE, E_FEH_SLOPE = 1.0, 0.3
#: Main-sequence lifetime t_MS = T_MS_SUN_MYR * (M / Msun) ** T_MS_MASS_EXPONENT (Myr): the
#: textbook scaling of ~10 Gyr for the Sun and L ~ M^3.5 (common practice; good to a few tens of
#: per cent for ~0.8-2 Msun).
T_MS_SUN_MYR, T_MS_MASS_EXPONENT = 1.0e4, -2.5
#: A main-sequence star counts as appreciably evolved (brighter than the zero-age sequence at its
#: colour by more than the few hundredths of a magnitude the fit resolves) once it has spent this
#: fraction of its main-sequence life. Adopted, not fitted: stars brighten by some tenths of a
#: magnitude over the first half of their main-sequence life (common practice; from memory).
EVOLVED_LIFE_FRACTION = 0.4
#: Mean dwarf masses by numeric type (see the table's references).
DWARF_MASS_FILE = "dwarf_masses.ecsv"


@dataclass
class Locus:
    """Locus sampled on a fine grid: numeric type, absolute magnitudes per band, mass."""

    cal: Calibration
    sptnum: np.ndarray
    absmag: np.ndarray  # (G, n_bands); bands not in use are 0
    mass: np.ndarray
    needed: np.ndarray  # (n_bands,) bands in use
    offset: float = 0.0  # added to every absolute magnitude (metallicity shift)

    def at(self, spt):
        """Absolute magnitudes at numeric types ``spt`` (NaN outside the grid)."""
        spt = np.asarray(spt, dtype=float)
        out = np.full((spt.size, self.absmag.shape[1]), np.nan)
        ok = (spt >= self.sptnum[0]) & (spt <= self.sptnum[-1])
        out[ok] = np.where(self.needed, self.cal.evaluate(spt[ok]).absmag + self.offset, 0.0)
        return out

    def spt_of_mass(self, m):
        """Numeric type of mass ``m`` (NaN below the locus' lightest star)."""
        order = np.argsort(self.mass, kind="stable")
        s = np.interp(m, self.mass[order], self.sptnum[order], left=np.nan, right=np.nan)
        return np.where(m < self.mass.min(), np.nan, s)


@lru_cache(maxsize=None)
def dwarf_masses() -> Table:
    """Mean dwarf masses (Msun) by numeric type, O3-M9.5: ``dwarf_masses.ecsv``.

    References
    ----------
    E. Mamajek's "A Modern Mean Dwarf Stellar Color and Effective Temperature
    Sequence", v2022.04.16, Msun column (as shipped in the MeanStars package);
    cf. Pecaut & Mamajek 2013, ApJS 208, 9.
    """
    return Table.read(calibration_dir() / DWARF_MASS_FILE, format="ascii.ecsv")


def mass_along(cal: Calibration, spt):
    """Masses along the locus: the locus file's ``mass`` column, else the mean dwarf
    masses of :func:`dwarf_masses`; the few non-monotonic entries are flattened
    (running minimum) before interpolating in log mass."""
    table = cal.table if "mass" in cal.table.colnames else dwarf_masses()
    x = np.asarray(table["sptnum"], float)
    y = np.ma.filled(np.ma.asarray(table["mass"], dtype=float), np.nan)
    ok = np.isfinite(y) & (y > 0)
    y = np.minimum.accumulate(y[ok])
    return np.exp(np.interp(spt, x[ok], np.log(y)))


def unevolved_mass_limit(age_myr: float, fraction: float = EVOLVED_LIFE_FRACTION) -> float:
    """Mass (Msun) above which main-sequence stars have spent more than ``fraction`` of their
    lives at ``age_myr``: (fraction T_MS_SUN / age) ** (1 / -T_MS_MASS_EXPONENT)."""
    return float((fraction * T_MS_SUN_MYR / age_myr) ** (-1.0 / T_MS_MASS_EXPONENT))


def age_ordinate_limit(locus: Locus, L, k_ord, age_myr: float) -> float:
    """Absolute ordinate magnitude of the locus at the mass limit of :func:`unevolved_mass_limit`:
    stars brighter than it (at the fitted distance and reddening) are left out of the fit.
    ``-inf`` (no cut) when the limit lies above the locus' heaviest star; :class:`InputError`
    when it lies below its lightest (every star evolved)."""
    m_lim = unevolved_mass_limit(age_myr)
    if m_lim >= locus.mass.max():
        return -np.inf
    spt = locus.spt_of_mass(np.array([m_lim]))
    if not np.isfinite(spt).all():
        raise InputError(f"at an age of {age_myr:g} Myr every star of the locus {locus.cal.name} "
                         f"(lightest {locus.mass.min():.2f} Msun) has evolved (mass limit "
                         f"{m_lim:.2f} Msun); check the age")
    return float((locus.at(spt) @ L[k_ord])[0])


def fine_sptnum(cal: Calibration) -> np.ndarray:
    """Numeric types over the calibrated range of ``cal``, :data:`FINE_SPTNUM_STEP` apart."""
    lo, hi = cal.sptnum_range
    return np.round(np.arange(lo, hi + 1e-9, FINE_SPTNUM_STEP), 4)


def build_locus(cal: Calibration, bands_needed: np.ndarray, offset: float = 0.0) -> Locus:
    """The locus ``cal`` sampled finely in the bands in use, shifted by ``offset`` mag;
    :class:`InputError` if it does not calibrate those bands together."""
    fine = fine_sptnum(cal)
    absmag = cal.evaluate(fine).absmag + offset
    ok = np.isfinite(absmag[:, bands_needed]).all(axis=1)
    if ok.sum() < 2:
        missing = [BAND_NAMES[i] for i in np.flatnonzero(bands_needed)
                   if not np.isfinite(absmag[:, i]).any()]
        raise InputError(f"the locus {cal.name} does not calibrate band(s) "
                         f"{', '.join(missing) or 'in use together'}; choose other bands "
                         f"(bands=...) or a locus file with those colours")
    spt = fine[ok]
    return Locus(cal, spt, np.where(bands_needed, absmag[ok], 0.0), mass_along(cal, spt),
                  bands_needed, float(offset))


@dataclass
class Cloud:
    """Model points in observable space (absolute, unreddened), sorted by ordinate."""

    m_ord: np.ndarray  # (P,)
    mu0: np.ndarray  # (P, K)
    logw: np.ndarray  # (P,) log prior weight per point, per unit ordinate magnitude
    spt: np.ndarray  # (P,) numeric type of the primary
    q: np.ndarray  # (P,) mass ratio (0 for single stars)

    @classmethod
    def make(cls, absmag, L, k_ord, logw, spt, q):
        mu0 = absmag @ L.T
        order = np.argsort(mu0[:, k_ord], kind="stable")
        return cls(mu0[order, k_ord], mu0[order], logw[order], spt[order], q[order])


def locus_points(locus: Locus, L, step):
    """Numeric types spaced ``step`` mag apart along the locus in observable space."""
    mu = locus.absmag @ L.T
    s = np.concatenate([[0.0], np.cumsum(np.sqrt((np.diff(mu, axis=0) ** 2).sum(axis=1)))])
    n = max(int(np.ceil(s[-1] / step)), 2)
    return np.interp(np.linspace(0.0, s[-1], n + 1), s, locus.sptnum)


def clouds(locus: Locus, L, k_ord, window, n_q, step):
    """Single-star and binary model clouds.

    The prior is uniform in the ordinate's absolute magnitude: each point's
    weight is the ordinate interval it stands for, divided by the observed
    ordinate range ``window`` (so the member density is normalised over it);
    binaries share a primary's weight equally over the ``n_q`` mass ratios.
    """
    spt = locus_points(locus, L, step)
    m1 = locus.at(spt)
    ord_abs = m1 @ L[k_ord]
    with np.errstate(divide="ignore"):
        logw = np.log(np.abs(np.gradient(ord_abs)) / window)
    single = Cloud.make(m1, L, k_ord, logw, spt, np.zeros_like(spt))
    if n_q <= 0:
        return single, None
    qs = (np.arange(n_q) + 0.5) / n_q
    mass1 = mass_along(locus.cal, spt)
    spt2 = locus.spt_of_mass(qs[:, None] * mass1[None, :])  # (n_q, G)
    m2 = locus.at(spt2.ravel()).reshape(n_q, len(spt), -1)
    flux = 10 ** (-0.4 * m1)[None] + np.nan_to_num(10 ** (-0.4 * m2), nan=0.0)
    comb = (-2.5 * np.log10(flux)).reshape(-1, m1.shape[1])
    binary = Cloud.make(comb, L, k_ord, np.tile(logw - np.log(n_q), n_q), np.tile(spt, n_q),
                         np.repeat(qs, len(spt)))
    return single, binary


def resolve_locus(locus):
    """Calibration of a locus: ``None`` (the default, ``"young"``), ``"young"``, ``"field"``,
    a :class:`Calibration` or the path of a locus file."""
    if locus is None:
        locus = DEFAULT_LOCUS
    if isinstance(locus, Calibration):
        return locus
    if locus == "field":
        return default_calibrations().by_class["V"]
    if locus == "young":
        return load_calibration(calibration_dir() / "young_V.ecsv")
    if isinstance(locus, str) and not locus.lower().endswith(".ecsv") and "/" not in locus \
            and "\\" not in locus:
        raise InputError(f"locus {locus!r} is neither one of {', '.join(LOCI)} nor an .ecsv file; "
                         "choose 'young' (default), 'field' or give the path of a locus table")
    return load_calibration(str(locus))


def locus_zero_point(cal: Calibration, key="zero_point_uncertainty", default=DEFAULT_LOCUS_ZP) -> float:
    """Stated zero-point uncertainty of a locus (mag; magnitudes or, with
    ``key="colour_zero_point_uncertainty"``, colours), or the default."""
    try:
        v = float(cal.table.meta.get(key, default))
    except (TypeError, ValueError):
        v = default
    return v if np.isfinite(v) and v >= 0 else default
