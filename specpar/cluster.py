"""Main-sequence fitting for star clusters: distance modulus and E(B-V) of a
whole group of stars from their photometry alone.

Model
-----
Every star is a draw from a mixture of three components, in the space of the
observables it has (magnitudes and colours, as in :func:`specpar.estimate`):

* **single members** on the locus (by default the empirical young main sequence
  ``young_V.ecsv``; ``locus="field"`` for the class V calibration), at
  any position along it, shifted by the distance modulus ``dm`` and reddened
  by ``E(B-V)``; the prior along the locus is uniform in the absolute
  magnitude of the *ordinate* band (V by default) over the locus;
* **unresolved binary members**: a primary on the locus plus a companion of
  mass ratio ``q`` also on the locus, their fluxes added (an equal-mass pair is
  2.5 log10 2 = 0.75 mag brighter); ``q`` is uniform on (0, 1], sampled at the
  midpoints of ``n_q`` bins; masses along the locus from the locus file's
  ``mass`` column when it has one, else the mean dwarf masses of Pecaut &
  Mamajek (see ``_DWARF_MASS``); companions below the locus' faint end count
  as dark;
* **field stars**: uniform in the ordinate magnitude over the observed range;
  in colour, half a broad Gaussian per colour (the sample's mean and standard
  deviation: giants, evolved members, anything) and half field dwarfs, i.e.
  the locus colours reddened by any E(B-V) between 0 and twice the cluster's
  starting value (``field_model="dwarfs+broad"``, the default; ``"broad"``
  keeps only the Gaussian). If a membership-probability column is given, it
  fixes each star's prior odds of membership; otherwise the field fraction is
  fitted. Field dwarfs that happen to lie on the cluster sequence cannot be
  told from members: with B, V, I alone (reddening vector nearly parallel to
  the sequence) they bias the fit slightly (see the tests); U breaks the
  degeneracy for early types.

Each star's likelihood is marginalised over its position along the locus
(and over ``q`` for binaries) on a grid spaced ~0.02 mag in the observables;
photometric errors are per star, and a small intrinsic width (default
0.03 mag, common practice for a cluster sequence) is added in quadrature to
each observable. Only locus points within 6 sigma in the ordinate of a star
are summed (exact to a part in 1e7), which keeps a 500-star fit to a second or
two.

Evolved members (turn-off, giants, blue stragglers) do not follow the locus:
after a first fit, stars brighter than the equal-mass binary sequence at their
colour (by 0.15 mag and 3 sigma) are set aside (flag ``EVOLVED``), as are stars
fainter than the locus' red end (``BEYOND_LOCUS_END``), and the fit is repeated;
``bright_limit`` removes the upper sequence explicitly. Stars whose colours cannot be reached by the locus for any
allowed E(B-V) are set aside before fitting (flag ``OUTSIDE_LOCUS``).

Reddening: ``A_band = R_band E(B-V)`` from the chosen law at fixed R_V
(:func:`specpar.extinction.band_coefficients`), except that for U the
empirical two-colour slope E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V) is used
(``u_reddening="empirical"``, the default), which carries the curvature that
the broad U band gives.

Metallicity, bounds, degeneracy
-------------------------------
``feh`` moves the locus by ``FEH_SLOPE`` = 1 mag per dex at fixed colour (An et
al. 2007, from memory). E(B-V) >= 0 by default; at the bound the summary gives an
upper limit. With a single colour the reddening vector runs along the sequence
and the fit refuses unless ``ebv_prior=(value, error)`` gives the reddening.

Fit and uncertainty
-------------------
A coarse grid over (dm, E(B-V)) (single-star locus only, distance modulus
binned per star) finds the starting point; then all four parameters
(dm, E(B-V), binary fraction, field fraction) are fitted by L-BFGS-B with the
analytic gradient. Uncertainties: ``method="profile"`` (default) uses the
Hessian of the log-likelihood at the maximum (the curvature of the profile
likelihood of (dm, E(B-V)) with the fractions profiled out) in the sandwich
form H^-1 J H^-1, J the sum of the per-star score outer products (Huber
1967), which stays honest when field stars or binaries are only approximately
described by the mixture;
``method="bootstrap"`` refits ``n_boot`` resamples of the stars drawn with a
seeded generator. Both are reproducible. The quoted errors are totals: the
statistical one plus systematic terms (locus zero point, metallicity, R_V, band
zero points, locus colours), each propagated to first order through the
likelihood maximum, d theta = -H^-1 d g (implicit function theorem), and listed
in ``ClusterResult.budget``. A reduced colour chi-square of the likely single
members measures the goodness of fit. With ``plx``/``e_plx`` columns the cluster's
mean parallax gives an independent distance, its tension and a combined value.

Two-colour diagram (when U, B and V are available)
--------------------------------------------------
An independent E(B-V) comes from sliding the intrinsic (U-B, B-V) locus along
the reddening line (same mixture, no distance information), and the Q method
gives E(B-V) star by star for early-type members: ``Q = (U-B) - 0.72 (B-V)``
is reddening-free to first order, the locus gives (B-V)_0 from Q, and the
0.05 E(B-V)^2 curvature term is removed iteratively.

References
----------
Johnson, H. L. & Morgan, W. W. 1953, ApJ 117, 313 (UBV system, Q parameter)
(from memory).
Hiltner, W. A. & Johnson, H. L. 1956, ApJ 124, 367 (reddening line in the
(U-B, B-V) plane, E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V)) (from memory).
Johnson, H. L. 1958, Lowell Obs. Bull. 4, 37 ((B-V)_0 = 0.332 Q for early
B stars) (from memory).
Pecaut, M. J. & Mamajek, E. E. 2013, ApJS 208, 9, and E. Mamajek's online
table v2022.04.16 (masses along the dwarf sequence).
Hurley, J. & Tout, C. A. 1998, MNRAS 300, 977 (unresolved binaries in cluster
colour-magnitude diagrams, up to 0.75 mag above the single-star sequence)
(from memory).
Godoy-Rivera, D., Pinsonneault, M. H. & Rebull, L. M. 2021, ApJS 257, 46 (Pleiades
members behind the young locus).
Lindegren, L. et al. 2018, A&A 616, A2; 2021, A&A 649, A4 (Gaia parallax zero points).
An, D. et al. 2007, ApJ 655, 233 (metallicity shift of the main sequence) (from memory).
Huber, P. J. 1967, Proc. Fifth Berkeley Symp. Math. Stat. Prob. 1, 221
(sandwich covariance under misspecification) (from memory).
Byrd, R. H., Lu, P., Nocedal, J. & Zhu, C. 1995, SIAM J. Sci. Comput. 16, 1190
(L-BFGS-B).
Efron, B. 1979, Ann. Statist. 7, 1 (bootstrap).
"""
from __future__ import annotations

import enum
import os
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from astropy.table import Table
from scipy import optimize
from scipy.ndimage import gaussian_filter1d
from scipy.special import logsumexp

from . import __version__
from .bands import BAND_NAMES, band_index
from .calibration import Calibration, calibration_dir, default_calibrations, load_calibration
from .extinction import DEFAULT_LAW, DEFAULT_RV, LAWS, band_coefficients, check_law
from .solver import dm_to_pc
from .estimate import EstimateOptions, attach_results, prepare_observables, to_frame

__all__ = ["fit_cluster", "ClusterResult", "ClusterFlag", "ClusterFitWarning", "simulate_cluster", "q_index",
           "intrinsic_bv_from_q", "ub_excess_ratio", "register_cli"]

#: E(U-B)/E(B-V) = UB_SLOPE + UB_CURVATURE * E(B-V): Hiltner & Johnson 1956 (from memory).
UB_SLOPE = 0.72
UB_CURVATURE = 0.05
#: Slope in Q = (U-B) - 0.72 (B-V): Johnson & Morgan 1953 (from memory).
Q_SLOPE = 0.72
#: Q method only for stars earlier than A0 (numeric type 20), where Q is
#: monotonic in (B-V)_0 along the dwarf sequence (O3 ... B9.5).
Q_LATEST_SPTNUM = 20.0
#: Intrinsic width of a cluster sequence added to every observable (mag; common practice).
DEFAULT_WIDTH = 0.03
#: Spacing of the locus grid in the observables (mag): 1.2 times the smallest
#: per-star sigma (5th percentile), within these limits. A sum over points spaced
#: h along a line approximates the integral of a Gaussian of width s to
#: ~2 exp(-2 pi^2 s^2 / h^2) (Poisson summation), i.e. ~1e-6 here.
LOCUS_STEP = (0.01, 0.05)
COARSE_STEP = 0.1
#: Fewest usable stars for a fit.
MIN_STARS = 10
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
#: Uncertainty of R_V used in the error budget (common practice: the Galactic scatter of R_V
#: around 3.1 is ~0.2; Fitzpatrick & Massa 2007, ApJ 663, 320, from memory).
DEFAULT_SIGMA_RV = 0.2
#: Photometric zero-point uncertainty per band (mag) in the error budget (common practice;
#: Gaia DR2: Evans, D. W. et al. 2018, A&A 616, A4, a few mmag in G and ~0.01 in BP/RP,
#: from memory).
PHOT_ZP = {"U": 0.03, "B": 0.015, "V": 0.015, "Rc": 0.015, "Ic": 0.015, "J": 0.01, "H": 0.01,
           "Ks": 0.01, "G": 0.005, "BP": 0.01, "RP": 0.01}
#: Gaia parallax zero point (mas) removed from input parallaxes by default: Gaia EDR3/DR3
#: quasar median -0.017 mas (Lindegren, L. et al. 2021, A&A 649, A4); DR2: -0.029 mas
#: (Lindegren et al. 2018, A&A 616, A2).
DEFAULT_PLX_ZERO_POINT = -0.017
#: Systematic floor (mas) of a cluster's mean parallax: angular covariance of Gaia
#: parallaxes on degree scales, ~0.01 mas in EDR3 (Lindegren et al. 2021; Maiz Apellaniz et al.
#: 2021, A&A 649, A13; from memory), ~0.03-0.04 mas in DR2 (Lindegren et al. 2018).
DEFAULT_PLX_SYSTEMATIC = 0.010
#: A star brighter than the single-star sequence at its colour by more than the equal-mass
#: binary gain (0.75 mag) plus this margin and 3 sigma is not a main-sequence member.
EVOLVED_MARGIN = 0.15
#: Reduced colour chi-square of the likely single members above which the sequence does not fit.
GOF_LIMIT = 2.0
_NSIG = 6.0  # window half-width in the ordinate, in sigma
_CHUNK = 1500  # stars per vectorised block
_SUBFIT = 700  # above this many stars, the first (screening) fit uses an even subsample
#: Ordinate band preference when none is chosen.
_ORDINATE_ORDER = ("V", "G", "Ic", "Rc", "B", "Ks", "J", "H", "RP", "BP", "U")
#: Plotting colour preference (blue band, red band).
_PLOT_COLOURS = (("B", "V"), ("BP", "RP"), ("V", "Ic"), ("G", "RP"), ("V", "Rc"), ("V", "Ks"),
                 ("J", "Ks"), ("U", "B"))

# Mean dwarf masses (Msun) by numeric type, copied from the Msun column of
# E. Mamajek's "A Modern Mean Dwarf Stellar Color and Effective Temperature
# Sequence", v2022.04.16 (EEM_dwarf_UBVIJHK_colors_Teff.txt as shipped in the
# MeanStars package; cf. Pecaut & Mamajek 2013, ApJS 208, 9). The few
# non-monotonic A-type entries are flattened (running minimum) before use.
_DWARF_MASS = (
    (3.0, 59.0), (4.0, 48.0), (5.0, 43.0), (5.5, 38.0), (6.0, 35.0), (6.5, 31.0), (7.0, 28.0),
    (7.5, 26.0), (8.0, 23.6), (8.5, 21.9), (9.0, 20.2), (9.5, 18.7), (10.0, 17.7), (10.5, 14.8),
    (11.0, 11.8), (11.5, 9.9), (12.0, 7.3), (12.5, 6.1), (13.0, 5.4), (14.0, 5.1), (15.0, 4.7),
    (16.0, 4.3), (17.0, 3.92), (18.0, 3.38), (19.0, 2.75), (19.5, 2.68), (20.0, 2.18),
    (21.0, 2.05), (22.0, 1.98), (23.0, 1.86), (24.0, 1.93), (25.0, 1.88), (26.0, 1.83),
    (27.0, 1.77), (28.0, 1.81), (29.0, 1.75), (30.0, 1.61), (31.0, 1.50), (32.0, 1.46),
    (33.0, 1.44), (34.0, 1.38), (35.0, 1.33), (36.0, 1.25), (37.0, 1.21), (38.0, 1.18),
    (39.0, 1.13), (39.5, 1.08), (40.0, 1.06), (41.0, 1.03), (42.0, 1.00), (43.0, 0.99),
    (44.0, 0.985), (45.0, 0.98), (46.0, 0.97), (47.0, 0.95), (48.0, 0.94), (49.0, 0.90),
    (50.0, 0.88), (51.0, 0.86), (52.0, 0.82), (53.0, 0.78), (54.0, 0.73), (55.0, 0.70),
    (56.0, 0.69), (57.0, 0.64), (58.0, 0.62), (59.0, 0.59), (60.0, 0.57), (60.5, 0.54),
    (61.0, 0.50), (61.5, 0.47), (62.0, 0.44), (62.5, 0.40), (63.0, 0.37), (63.5, 0.27),
    (64.0, 0.23), (64.5, 0.184), (65.0, 0.162), (65.5, 0.123), (66.0, 0.102), (66.5, 0.093),
    (67.0, 0.090), (67.5, 0.088), (68.0, 0.085), (68.5, 0.080), (69.0, 0.079), (69.5, 0.078),
)


class ClusterFlag(enum.IntFlag):
    """Per-star conditions of a cluster fit (values are written to files)."""

    PHOT_REJECTED = 1 << 0
    ERROR_DEFAULTED = 1 << 1
    NO_ORDINATE = 1 << 2
    NO_COLOUR = 1 << 3
    OUTSIDE_LOCUS = 1 << 4
    MAG_LIMIT = 1 << 5
    MEMBERSHIP_INVALID = 1 << 6
    NOT_USED = 1 << 7
    LIKELY_FIELD = 1 << 8
    LIKELY_BINARY = 1 << 9
    Q_EARLY_TYPE = 1 << 10
    EVOLVED = 1 << 11
    BEYOND_LOCUS_END = 1 << 12


_SENTENCES = {
    ClusterFlag.PHOT_REJECTED: "non-numeric, non-finite or implausible photometry ignored",
    ClusterFlag.ERROR_DEFAULTED: "missing or non-positive photometric error replaced by the default",
    ClusterFlag.NO_ORDINATE: "no usable magnitude in the ordinate band",
    ClusterFlag.NO_COLOUR: "no usable colour (needs a second band)",
    ClusterFlag.OUTSIDE_LOCUS: "colours outside the reach of the locus for any allowed E(B-V)",
    ClusterFlag.MAG_LIMIT: "outside the magnitude limits of the fit (e.g. turn-off cut)",
    ClusterFlag.MEMBERSHIP_INVALID: "membership probability missing or outside [0, 1]",
    ClusterFlag.NOT_USED: "not used in the fit",
    ClusterFlag.LIKELY_FIELD: "more likely a field star than a member (p_member < 0.5)",
    ClusterFlag.LIKELY_BINARY: "member more likely an unresolved binary than single",
    ClusterFlag.Q_EARLY_TYPE: "early-type member: E(B-V) from the Q method given in ebv_q",
    ClusterFlag.EVOLVED: "brighter than the unresolved-binary sequence at its colour (subgiant, giant, "
                         "turn-off star or blue straggler): kept out of the distance fit",
    ClusterFlag.BEYOND_LOCUS_END: "fainter than the faint (red) end of the locus at the fitted distance: "
                                  "outside the calibrated range, kept out of the distance fit",
}

#: Per-star output columns: unit and description.
MEMBER_COLUMNS = {
    "used": ("", "star used in the fit"),
    "p_member": ("", "posterior probability of cluster membership (single or binary)"),
    "p_binary": ("", "posterior probability of being an unresolved binary member"),
    "p_field": ("", "posterior probability of being a field star"),
    "locus_sptnum": ("", "posterior mean position of the (primary) star on the locus, numeric type"),
    "dmag_single": ("mag", "ordinate magnitude minus the fitted single-star sequence at the star's "
                           "fitted locus position (negative: brighter, e.g. binaries)"),
    "chi2_colour": ("", "chi-square of the star's colours against the reddened locus (closest point)"),
    "q_index": ("mag", "reddening-free Q = (U-B) - 0.72 (B-V)"),
    "ebv_q": ("mag", "E(B-V) of an early-type member from the Q method"),
    "e_ebv_q": ("mag", "1-sigma photometric uncertainty of ebv_q"),
    "flags": ("", "bit mask, see metadata 'flag_bits'"),
    "flag_codes": ("", "names of the bits set in flags"),
    "note": ("", "readable reasons for the flags"),
}


# ============================================================================ results

@dataclass
class ClusterResult:
    """Outcome of :func:`fit_cluster`.

    Attributes
    ----------
    dm, e_dm : float
        True distance modulus and its 1-sigma uncertainty (mag).
    ebv, e_ebv : float
        Colour excess E(B-V) and its uncertainty (mag).
    corr : float
        Correlation coefficient of (dm, E(B-V)).
    dist_pc, dist_lo_pc, dist_hi_pc : float
        Distance: median, 16th and 84th percentiles (pc).
    binary_fraction, e_binary_fraction, field_fraction, e_field_fraction : float
        Fitted fractions (binary among members; field among stars used).
        With a membership column the field fraction is the mean prior, not fitted.
    n_input, n_used : int
        Rows given and stars used.
    law, rv : str, float
        Extinction law and fixed R_V.
    magnitude : str
        Ordinate band; ``observables`` the magnitudes/colours fitted.
    method : str
        ``"profile"`` or ``"bootstrap"`` (``n_boot`` resamples, ``seed``).
    ebv_twocolour, e_ebv_twocolour : float
        E(B-V) from the (U-B, B-V) diagram alone (NaN without U, B, V).
    ebv_q, e_ebv_q, n_q : float, float, int
        Mean E(B-V) of early-type members from the Q method.
    log_likelihood : float
    locus : str
        Description of the locus used.
    members : astropy.table.Table or pandas.DataFrame
        Every input row with the per-star columns of :data:`MEMBER_COLUMNS`.
    """

    dm: float
    e_dm: float
    ebv: float
    e_ebv: float
    corr: float
    dist_pc: float
    dist_lo_pc: float
    dist_hi_pc: float
    binary_fraction: float
    e_binary_fraction: float
    field_fraction: float
    e_field_fraction: float
    n_input: int
    n_used: int
    law: str
    rv: float
    magnitude: str
    observables: tuple
    method: str
    n_boot: int
    seed: int
    ebv_twocolour: float
    e_ebv_twocolour: float
    ebv_q: float
    e_ebv_q: float
    n_q: int
    log_likelihood: float
    locus: str
    members: object = field(repr=False, default=None)
    plot_data: dict = field(repr=False, default_factory=dict)
    e_dm_stat: float = np.nan
    e_ebv_stat: float = np.nan
    budget: dict = field(default_factory=dict)
    ebv_upper: float = np.nan
    locus_name: str = ""
    feh: float = 0.0
    e_feh: float = 0.0
    sigma_rv: float = 0.0
    ebv_prior: tuple = ()
    gof_chi2_red: float = np.nan
    n_gof: int = 0
    n_evolved: int = 0
    plx_mean: float = np.nan
    e_plx_mean: float = np.nan
    n_plx: int = 0
    plx_zero_point: float = np.nan
    dm_plx: float = np.nan
    e_dm_plx: float = np.nan
    plx_tension: float = np.nan
    dm_combined: float = np.nan
    e_dm_combined: float = np.nan
    warnings: tuple = ()

    def summary(self) -> str:
        """A few readable lines."""
        if np.isfinite(self.ebv_upper):
            ebv_text = (f"E(B-V) at its lower bound {self.ebv:.3f}: E(B-V) < {self.ebv_upper:.3f} mag "
                        "(95%, total)")
        else:
            ebv_text = (f"E(B-V) {self.ebv:.3f} +- {_err(self.e_ebv)} mag (total; statistical "
                        f"{_err(self.e_ebv_stat)})")
        sys_terms = ", ".join(f"{k} {_err(v[0])}" for k, v in self.budget.items() if v[0] >= 5e-4)
        lines = [
            f"stars used {self.n_used} of {self.n_input}; ordinate {self.magnitude}; "
            f"observables {', '.join(self.observables)}"
            + (f"; {self.n_evolved} evolved stars set aside" if self.n_evolved else ""),
            f"locus {self.locus_name}, [Fe/H] {self.feh:+.2f} +- {self.e_feh:.2f}"
            + (f"; E(B-V) prior {self.ebv_prior[0]:.3f} +- {self.ebv_prior[1]:.3f}"
               if self.ebv_prior else ""),
            f"distance modulus {self.dm:.3f} +- {_err(self.e_dm)} mag (total; statistical "
            f"{_err(self.e_dm_stat)}; systematic terms: {sys_terms or 'none'})",
            f"{ebv_text}; correlation "
            + (f"{self.corr:+.2f}" if np.isfinite(self.corr) else "not determined"),
            f"distance {self.dist_pc:.0f} pc (16-84%: "
            + (f"{self.dist_lo_pc:.0f}-{self.dist_hi_pc:.0f} pc" if np.isfinite(self.dist_lo_pc * self.dist_hi_pc)
               else "not determined") + "); "
            f"{self.law}, R_V = {self.rv:g} +- {self.sigma_rv:g}",
            f"binary fraction {_frac(self.binary_fraction, self.e_binary_fraction)}; "
            f"field fraction {_frac(self.field_fraction, self.e_field_fraction)}",
        ]
        if np.isfinite(self.gof_chi2_red):
            lines.append(f"goodness of fit: reduced colour chi-square {self.gof_chi2_red:.2f} over "
                         f"{self.n_gof} likely single members (expected ~1; above {GOF_LIMIT:g} the "
                         "sequence does not fit)")
        if self.n_plx:
            if np.isfinite(self.dm_plx):
                lines.append(
                    f"parallax: {self.n_plx} likely members, mean {self.plx_mean:.4f} +- "
                    f"{_err(self.e_plx_mean)} mas (zero point {self.plx_zero_point:+.3f} mas removed) "
                    f"-> distance modulus {self.dm_plx:.3f} +- {_err(self.e_dm_plx)}; tension with the "
                    f"main-sequence fit {self.plx_tension:+.1f} sigma; combined {self.dm_combined:.3f} "
                    f"+- {_err(self.e_dm_combined)}")
            else:
                lines.append(f"parallax: {self.n_plx} likely members, mean {self.plx_mean:.4f} +- "
                             f"{_err(self.e_plx_mean)} mas: too uncertain for a distance")
        if np.isfinite(self.ebv_twocolour):
            lines.append(f"two-colour diagram alone: E(B-V) {self.ebv_twocolour:.3f} +- "
                         f"{_err(self.e_ebv_twocolour)} (statistical)")
        if self.n_q:
            lines.append(f"Q method, {self.n_q} early-type members: E(B-V) {self.ebv_q:.3f} +- "
                         f"{_err(self.e_ebv_q)}")
        lines.append(f"uncertainties: {self.method}" +
                     (f" ({self.n_boot} resamples, seed {self.seed})" if self.method == "bootstrap" else ""))
        lines += [f"WARNING: {w}" for w in self.warnings]
        return "\n".join(lines)

    def as_dict(self) -> dict:  # noqa: D102
        """Scalar results as plain Python values (for metadata and JSON)."""
        skip = ("members", "plot_data")
        out = {}
        for k, v in self.__dict__.items():
            if k in skip:
                continue
            if isinstance(v, dict):
                v = {kk: list(vv) if isinstance(vv, tuple) else vv for kk, vv in v.items()}
            out[k] = list(v) if isinstance(v, tuple) else (v.item() if hasattr(v, "item") else v)
        return out


def _err(e):
    """An uncertainty with at least two significant digits (never '0.000' or 'nan')."""
    if not np.isfinite(e):
        return "(not determined)"
    if e >= 0.0095:
        return f"{e:.3f}"
    return f"{e:.2g}"


def _frac(v, e):
    """A fraction with its error, or as a limit when it sits on a bound."""
    if np.isfinite(e):
        return f"{v:.2f} +- {e:.2f}"
    if v <= 1e-3:
        return "0 (at its lower bound; not constrained)"
    if v >= 0.95:
        return f"{v:.2f} (at its upper bound; not constrained)"
    return f"{v:.2f} (fixed)"


class ClusterFitWarning(UserWarning):
    """A cluster fit that ran but whose answer needs care (poor fit, degeneracy, tension)."""


# ============================================================================ reddening

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


def _reddening_vectors(law, rv, u_reddening):
    """Per band: linear and quadratic extinction per E(B-V) (A = lin E + quad E^2)."""
    lin = np.array(band_coefficients(law, rv), dtype=float)
    quad = np.zeros_like(lin)
    if u_reddening == "empirical":
        iU, iB = band_index("U"), band_index("B")
        lin[iU] = lin[iB] + UB_SLOPE
        quad[iU] = UB_CURVATURE
    elif u_reddening != "law":
        raise ValueError(f"u_reddening must be 'empirical' or 'law', not {u_reddening!r}")
    return lin, quad


# ============================================================================ locus

@dataclass
class _Locus:
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


def _mass_along(cal: Calibration, spt):
    """Masses along the locus: the file's ``mass`` column or the mean dwarf masses."""
    if "mass" in cal.table.colnames:
        x = np.asarray(cal.table["sptnum"], float)
        y = np.ma.filled(np.ma.asarray(cal.table["mass"], dtype=float), np.nan)
        ok = np.isfinite(y) & (y > 0)
    else:
        x, y = np.array(_DWARF_MASS).T
        ok = np.ones_like(x, bool)
    y = np.minimum.accumulate(y[ok])
    return np.exp(np.interp(spt, x[ok], np.log(y)))


def _build_locus(cal: Calibration, bands_needed: np.ndarray, offset: float = 0.0) -> _Locus:
    lo, hi = cal.sptnum_range
    fine = np.round(np.arange(lo, hi + 1e-9, 0.01), 4)
    absmag = cal.evaluate(fine).absmag + offset
    ok = np.isfinite(absmag[:, bands_needed]).all(axis=1)
    if ok.sum() < 2:
        missing = [BAND_NAMES[i] for i in np.flatnonzero(bands_needed)
                   if not np.isfinite(absmag[:, i]).any()]
        raise ValueError(f"the locus {cal.name} does not calibrate band(s) "
                         f"{', '.join(missing) or 'in use together'}; choose other bands "
                         f"(bands=...) or a locus file with those colours")
    spt = fine[ok]
    return _Locus(cal, spt, np.where(bands_needed, absmag[ok], 0.0), _mass_along(cal, spt),
                  bands_needed, float(offset))


@dataclass
class _Cloud:
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


def _locus_points(locus: _Locus, L, step):
    """Numeric types spaced ``step`` mag apart along the locus in observable space."""
    mu = locus.absmag @ L.T
    s = np.concatenate([[0.0], np.cumsum(np.sqrt((np.diff(mu, axis=0) ** 2).sum(axis=1)))])
    n = max(int(np.ceil(s[-1] / step)), 2)
    return np.interp(np.linspace(0.0, s[-1], n + 1), s, locus.sptnum)


def _clouds(locus: _Locus, L, k_ord, window, n_q, step):
    """Single-star and binary model clouds.

    The prior is uniform in the ordinate's absolute magnitude: each point's
    weight is the ordinate interval it stands for, divided by the observed
    ordinate range ``window`` (so the member density is normalised over it);
    binaries share a primary's weight equally over the ``n_q`` mass ratios.
    """
    spt = _locus_points(locus, L, step)
    m1 = locus.at(spt)
    ord_abs = m1 @ L[k_ord]
    with np.errstate(divide="ignore"):
        logw = np.log(np.abs(np.gradient(ord_abs)) / window)
    single = _Cloud.make(m1, L, k_ord, logw, spt, np.zeros_like(spt))
    if n_q <= 0:
        return single, None
    qs = (np.arange(n_q) + 0.5) / n_q
    mass1 = _mass_along(locus.cal, spt)
    spt2 = locus.spt_of_mass(qs[:, None] * mass1[None, :])  # (n_q, G)
    m2 = locus.at(spt2.ravel()).reshape(n_q, len(spt), -1)
    flux = 10 ** (-0.4 * m1)[None] + np.nan_to_num(10 ** (-0.4 * m2), nan=0.0)
    comb = (-2.5 * np.log10(flux)).reshape(-1, m1.shape[1])
    binary = _Cloud.make(comb, L, k_ord, np.tile(logw - np.log(n_q), n_q), np.tile(spt, n_q),
                         np.repeat(qs, len(spt)))
    return single, binary


def _resolve_locus(locus):
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
        raise ValueError(f"locus {locus!r} is neither one of {', '.join(LOCI)} nor an .ecsv file; "
                         "choose 'young' (default), 'field' or give the path of a locus table")
    return load_calibration(str(locus))


def _locus_zero_point(cal: Calibration, key="zero_point_uncertainty", default=DEFAULT_LOCUS_ZP) -> float:
    """Stated zero-point uncertainty of a locus (mag; magnitudes or, with
    ``key="colour_zero_point_uncertainty"``, colours), or the default."""
    try:
        v = float(cal.table.meta.get(key, default))
    except (TypeError, ValueError):
        v = default
    return v if np.isfinite(v) and v >= 0 else default


# ============================================================================ input

@dataclass
class _Data:
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

    @property
    def a(self):
        """d(observable)/d(dm): 1 for magnitudes, 0 for colours."""
        return self.L.sum(axis=1)


def _read_observables(frame, columns, default_error):
    """Observables as :func:`specpar.estimate` reads them (same columns and rules)."""
    f = frame if "sptype" in frame.columns else frame.assign(sptype=None)
    return prepare_observables(f, EstimateOptions(columns=dict(columns or {}), default_error=default_error))


def _select_observables(names, L, bands):
    if bands is None:
        return np.ones(len(names), bool)
    bad = [b for b in bands if b not in BAND_NAMES]
    if bad:
        raise ValueError(f"unknown band(s) {', '.join(bad)}; known bands are {', '.join(BAND_NAMES)}")
    allowed = np.isin(BAND_NAMES, list(bands))
    return ~((L != 0) & ~allowed[None, :]).any(axis=1)


def _choose_ordinate(names, L, keep, magnitude):
    mags = {names[k]: k for k in np.flatnonzero(keep) if L[k].sum() != 0}
    if magnitude is not None:
        if magnitude not in mags:
            raise ValueError(f"ordinate band {magnitude!r} has no magnitude column among the bands "
                             f"used; available: {', '.join(mags) or 'none'}")
        return mags[magnitude]
    for b in _ORDINATE_ORDER:
        if b in mags:
            return mags[b]
    raise ValueError("the input has no magnitude column (only colours): a distance modulus needs "
                     f"at least one of {', '.join(BAND_NAMES)}")


def _membership_prior(frame, column, flags):
    if column is None:
        return None
    if column not in frame.columns:
        raise ValueError(f"membership column {column!r} is not in the input; it has "
                         f"{', '.join(map(str, frame.columns))}")
    p = pd.to_numeric(frame[column], errors="coerce").to_numpy(float)
    bad = ~((p >= 0) & (p <= 1))
    flags |= np.where(bad, int(ClusterFlag.MEMBERSHIP_INVALID), 0)
    return np.clip(p, 1e-6, 1 - 1e-6)


def _cluster_data(table, opts) -> _Data:
    frame = to_frame(table)
    prep = _read_observables(frame, opts["columns"], opts["default_error"])
    N = len(frame)
    names, L = list(prep.obs_names), prep.obs.L
    keep = _select_observables(names, L, opts["bands"])
    if not keep.any():
        raise ValueError(f"none of the requested bands {', '.join(opts['bands'])} is in the input "
                         f"(it has {', '.join(names)})")
    k_ord_all = _choose_ordinate(names, L, keep, opts["magnitude"])
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
        raise ValueError(f"no colour can be formed from the photometry used ({', '.join(names)}): "
                         "give at least two bands, e.g. B and V, or a colour column such as B-V")
    flags |= np.where(have[:, k_ord] & ~colour_like.any(axis=1), int(ClusterFlag.NO_COLOUR), 0)
    with np.errstate(invalid="ignore"):
        yo = y[:, k_ord]
        lim = (yo < opts["bright_limit"]) | (yo > opts["faint_limit"])
    flags |= np.where(lim, int(ClusterFlag.MAG_LIMIT), 0)
    prior = _membership_prior(frame, opts["membership"], flags)
    detail = np.full(N, "", dtype=object)
    return _Data(frame, names, L, k_ord, y, var, None, np.zeros(0, int), flags, detail, prior,
                 y, var)


def _finalise_data(d: _Data, usable: np.ndarray) -> None:
    """Fill the arrays over used stars."""
    rows = np.flatnonzero(usable)
    y, var = d.y_all[rows], d.var_all[rows]
    have = np.isfinite(y)
    d.rows = rows
    d.y = np.where(have, y, 0.0)
    d.ivar = np.where(have, 1.0 / np.where(have, var, 1.0), 0.0)
    d.lognorm = -0.5 * np.where(have, np.log(2 * np.pi * np.where(have, var, 1.0)), 0.0).sum(axis=1)
    if d.prior is not None:
        d.prior = d.prior[rows]


_BAD_ROWS = (ClusterFlag.NO_ORDINATE | ClusterFlag.NO_COLOUR | ClusterFlag.MAG_LIMIT
             | ClusterFlag.MEMBERSHIP_INVALID | ClusterFlag.OUTSIDE_LOCUS)


# ============================================================================ colour space

def _colour_space(d: _Data, y, var):
    """Observables relative to the ordinate: c_k = y_k - a_k y_ord (k != ord).

    Unit Jacobian, so densities in this space equal those in the original one.
    Variances ignore the covariance brought by the shared ordinate error.
    """
    a = d.a
    others = np.array([k for k in range(len(d.names)) if k != d.k_ord], dtype=int)
    c = y[:, others] - a[others] * y[:, [d.k_ord]]
    v = var[:, others] + (a[others] ** 2) * var[:, [d.k_ord]]
    return c, v, others


def _field_logdensity(d: _Data, window):
    """Broad field density per used star: uniform in the ordinate, Gaussian per colour."""
    c, v, _ = _colour_space(d, d.y_all[d.rows], d.var_all[d.rows])
    have = np.isfinite(c)
    mean = np.nanmean(c, axis=0)
    sd = np.maximum(np.nanstd(c, axis=0), 0.05)
    z = np.where(have, (c - mean) / sd, 0.0)
    logg = np.where(have, -0.5 * z ** 2 - np.log(sd * np.sqrt(2 * np.pi)), 0.0)
    return logg.sum(axis=1) - np.log(window)


def _field_dwarf_logdensity(d: _Data, window, cloud: _Cloud, red, ebv_max, step=0.05):
    """Field dwarfs: uniform in the ordinate, colours of the locus (uniform-in-magnitude
    weights) reddened by any E(B-V) in [0, ebv_max] (uniform), i.e. dwarfs at all
    distances along the line of sight."""
    c, v, others = _colour_space(d, d.y_all[d.rows], d.var_all[d.rows] + (COARSE_STEP / 2) ** 2)
    have = np.isfinite(c)
    c, iv = np.where(have, c, 0.0), np.where(have, 1.0 / np.where(have, v, 1.0), 0.0)
    lognorm = -0.5 * np.where(have, np.log(2 * np.pi * np.where(have, v, 1.0)), 0.0).sum(axis=1)
    mc = cloud.mu0[:, others] - d.a[others] * cloud.mu0[:, [d.k_ord]]
    logw = cloud.logw - logsumexp(cloud.logw)
    grid = np.arange(0.0, max(ebv_max, step) + 1e-9, step)
    out = np.full((len(grid), len(c)), -np.inf)
    for i, e in enumerate(grid):  # loop over a short E(B-V) grid
        shift, _ = _shift(d, *red, 0.0, e)
        sc = shift[others] - d.a[others] * shift[d.k_ord]
        for s in range(0, len(c), _CHUNK):
            sl = slice(s, min(len(c), s + _CHUNK))
            r = c[sl, None, :] - mc[None] - sc
            out[i, sl] = logsumexp(logw[None] - 0.5 * np.einsum("npk,npk,nk->np", r, r, iv[sl]), axis=1)
    return logsumexp(out, axis=0) - np.log(len(grid)) + lognorm - np.log(window)


def _outside_locus(d: _Data, single: _Cloud, lin, quad, ebv_range):
    """Rows whose colours no reddened locus point can reach (5 sigma margin)."""
    rows = np.flatnonzero((d.flags & int(_BAD_ROWS)) == 0)
    c, v, others = _colour_space(d, d.y_all[rows], d.var_all[rows])
    mc = single.mu0[:, others] - d.a[others] * single.mu0[:, [d.k_ord]]
    out = np.zeros(len(rows), bool)
    for j, k in enumerate(others):
        lo_e = [(d.L[k] @ lin) * e + (d.L[k] @ quad) * e * e - d.a[k] * (d.L[d.k_ord] @ lin) * e
                for e in ebv_range]
        lo = mc[:, j].min() + min(lo_e + [0.0]) - 5 * np.sqrt(v[:, j])
        hi = mc[:, j].max() + max(lo_e + [0.0]) + 5 * np.sqrt(v[:, j])
        with np.errstate(invalid="ignore"):
            out |= (c[:, j] < lo) | (c[:, j] > hi)
    flag = np.zeros(len(d.flags), bool)
    flag[rows] = out
    return flag


# ============================================================================ likelihood

def _shift(d: _Data, lin, quad, dm, ebv):
    """Shift of every observable, and its derivatives w.r.t. (dm, E(B-V))."""
    b, c = d.L @ lin, d.L @ quad
    return d.a * dm + b * ebv + c * ebv ** 2, np.stack([d.a, b + 2 * c * ebv])


def _component(cloud: _Cloud, y, ivar, var_ord, k_ord, shift, gdir, want_post=False):
    """log density of each star under a cloud, and the gradient of it w.r.t. (dm, E).

    Sums only the points within _NSIG sigma of the star in the ordinate.
    """
    t = y[:, k_ord] - shift[k_ord]
    half = _NSIG * np.sqrt(var_ord)
    lo = np.searchsorted(cloud.m_ord, t - half)
    hi = np.searchsorted(cloud.m_ord, t + half)
    kmax = max(int((hi - lo).max()), 1)
    idx = lo[:, None] + np.arange(kmax)[None, :]
    valid = idx < hi[:, None]
    idx = np.minimum(idx, len(cloud.m_ord) - 1)
    r = y[:, None, :] - cloud.mu0[idx] - shift
    rw = r * ivar[:, None, :]
    lp = np.where(valid, cloud.logw[idx] - 0.5 * np.einsum("npk,npk->np", r, rw), -np.inf)
    top = lp.max(axis=1)
    top = np.where(np.isfinite(top), top, 0.0)
    ex = np.exp(lp - top[:, None])
    tot = ex.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        lse = np.log(tot) + top
        resp = np.where(tot[:, None] > 0, ex / tot[:, None], 0.0)
    grad = np.einsum("np,npk->nk", resp, rw) @ gdir.T
    post = (resp * cloud.spt[idx]).sum(axis=1) if want_post else None
    return lse, grad, post


def _components(model, theta, want_post=False):
    """(log S, grad S, log B, grad B[, posterior types]) over all used stars, in blocks."""
    d, single, binary = model["data"], model["single"], model["binary"]
    shift, gdir = _shift(d, model["lin"], model["quad"], theta[0], theta[1])
    var_ord = 1.0 / np.maximum(d.ivar[:, d.k_ord], 1e-300)
    n = len(d.y)
    out = {"lS": np.empty(n), "gS": np.empty((n, 2)), "lB": np.full(n, -np.inf),
           "gB": np.zeros((n, 2)), "pS": np.full(n, np.nan), "pB": np.full(n, np.nan)}
    for s in range(0, n, _CHUNK):
        sl = slice(s, min(n, s + _CHUNK))
        args = (d.y[sl], d.ivar[sl], var_ord[sl], d.k_ord, shift, gdir, want_post)
        out["lS"][sl], out["gS"][sl], out["pS"][sl] = _component(single, *args)
        if binary is not None:
            out["lB"][sl], out["gB"][sl], out["pB"][sl] = _component(binary, *args)
    for k in ("lS", "lB"):
        out[k] = out[k] + d.lognorm
    return out


def _mixture(model, theta, comp, per_star=False):
    """Log-likelihood, its gradient in (dm, E, f_bin, f_field) and responsibilities.

    With ``per_star`` the gradient comes back per star, shape (n_stars, 4)."""
    d = model["data"]
    fb, ff = theta[2], theta[3]
    with np.errstate(divide="ignore"):
        if d.prior is not None:
            lpi, l1pi = np.log(d.prior), np.log1p(-d.prior)
        else:
            lpi, l1pi = np.log1p(-ff), np.log(ff)
        tS = lpi + np.log1p(-fb) + comp["lS"]
        tB = lpi + np.log(fb) + comp["lB"]
        tF = l1pi + model["logF"]
    lT = np.logaddexp(np.logaddexp(tS, tB), tF)
    rS, rB, rF = np.exp(tS - lT), np.exp(tB - lT), np.exp(tF - lT)
    g = np.zeros((lT.size, 4))
    g[:, :2] = rS[:, None] * comp["gS"] + rB[:, None] * comp["gB"]
    if model["binary"] is not None:
        g[:, 2] = np.exp(lpi + comp["lB"] - lT) - np.exp(lpi + comp["lS"] - lT)
    if d.prior is None:
        with np.errstate(divide="ignore"):
            lM = np.logaddexp(np.log1p(-fb) + comp["lS"], np.log(fb) + comp["lB"])
        g[:, 3] = np.exp(model["logF"] - lT) - np.exp(lM - lT)
    return float(lT.sum()), (g if per_star else g.sum(axis=0)), (rS, rB, rF)


def _negloglike(theta, model):
    ll, g, _ = _mixture(model, theta, _components(model, theta))
    prior = model.get("ebv_prior")
    if prior is not None:  # Gaussian prior on E(B-V): a known reddening with its error
        z = (theta[1] - prior[0]) / prior[1]
        ll -= 0.5 * z * z
        g = g.copy()
        g[1] -= z / prior[1]
    return -ll, -g


def _bounds(model):
    d = model["data"]
    fb_hi = 0.0 if model["binary"] is None else 1.0
    ff = (0.0, 0.0) if d.prior is not None else (1e-3, 0.95)  # > 0 keeps log L finite
    return [model["dm_range"], model["ebv_range"], (0.0, fb_hi), ff]


def _maximise(model, x0):
    bounds = _bounds(model)
    x0 = np.clip(np.asarray(x0, float), [b[0] for b in bounds], [b[1] for b in bounds])
    res = optimize.minimize(_negloglike, x0, args=(model,), jac=True, method="L-BFGS-B",
                            bounds=bounds, options={"maxiter": 300, "ftol": 1e-10, "gtol": 1e-4})
    if not np.isfinite(res.fun):
        raise ValueError("the cluster likelihood could not be evaluated (no star is near the locus for "
                         "the starting point); check the photometry, bands and dm_range/ebv_range")
    return res.x, -res.fun


# ============================================================================ coarse start

def _coarse_start(model, n_max=150, dm_step=0.05, bright_fraction=1.0):
    """Starting (dm, E): grid in E(B-V) (0.05 then 0.01 steps), single-star locus
    sampled every 0.1 mag (widths inflated to match), each star's distance
    modulus likelihood binned and smoothed, field fraction held at 0.3."""
    d, cloud = model["data"], model["coarse"]
    pool = np.arange(len(d.y))
    if bright_fraction < 1:  # the brightest stars: the part of a sequence a locus surely covers
        k = max(int(np.ceil(bright_fraction * len(d.y))), min(len(d.y), 30))
        pool = np.sort(np.argsort(d.y[:, d.k_ord], kind="stable")[:k])
    sub = pool[np.unique(np.linspace(0, len(pool) - 1, min(n_max, len(pool))).astype(int))]
    y = np.where(d.ivar[sub] > 0, d.y[sub], np.nan)
    var = np.where(d.ivar[sub] > 0, 1.0 / np.maximum(d.ivar[sub], 1e-300), np.nan)
    c, v, others = _colour_space(d, y, var + (COARSE_STEP / 2) ** 2)
    have = np.isfinite(c)
    c, iv = np.where(have, c, 0.0), np.where(have, 1.0 / np.where(have, v, 1.0), 0.0)
    lognorm = -0.5 * np.where(have, np.log(2 * np.pi * np.where(have, v, 1.0)), 0.0).sum(axis=1)
    mc = cloud.mu0[:, others] - d.a[others] * cloud.mu0[:, [d.k_ord]]
    yo = y[:, d.k_ord]
    kern = max(COARSE_STEP, float(np.nanmedian(np.sqrt(var[:, d.k_ord]))))
    lo_dm, hi_dm = model["dm_range"]
    nb = int(np.ceil((hi_dm - lo_dm) / dm_step))
    logF = model["logF"][sub]
    rows = np.arange(len(sub))[:, None] * nb

    def best_dm(ebv):
        shift, _ = _shift(d, model["lin"], model["quad"], 0.0, ebv)
        r = c[:, None, :] - mc[None] - (shift[others] - d.a[others] * shift[d.k_ord])
        lp = cloud.logw[None] - 0.5 * np.einsum("npk,npk,nk->np", r, r, iv) + lognorm[:, None]
        top = np.max(lp, axis=1, keepdims=True)
        top = np.where(np.isfinite(top), top, 0.0)
        ib = np.floor((yo[:, None] - cloud.m_ord[None] - shift[d.k_ord] - lo_dm) / dm_step).astype(int)
        ok = (ib >= 0) & (ib < nb)
        hist = np.bincount((rows + ib)[ok], weights=np.exp(lp - top)[ok], minlength=len(sub) * nb)
        dens = gaussian_filter1d(hist.reshape(len(sub), nb), kern / dm_step, axis=1, mode="constant")
        with np.errstate(divide="ignore"):
            lm = np.log(dens / dm_step) + top
        ll = np.logaddexp(np.log(0.7) + lm, np.log(0.3) + logF[:, None]).sum(axis=0)
        j = int(np.argmax(ll))
        return ll[j], lo_dm + (j + 0.5) * dm_step

    lo_e, hi_e = model["ebv_range"]
    grid = np.arange(lo_e, hi_e + 1e-9, 0.05)
    for _ in range(2):  # a coarse pass, then a fine one around its best
        scores = [best_dm(e) for e in grid]  # loop over the E(B-V) grid only
        j = int(np.argmax([s[0] for s in scores]))
        e_best, (ll_best, dm_best) = grid[j], scores[j]
        grid = np.arange(max(lo_e, e_best - 0.05), min(hi_e, e_best + 0.05) + 1e-9, 0.01)
    if not np.isfinite(ll_best):
        raise ValueError("no distance modulus in the allowed range puts the locus on these stars; "
                         f"widen dm_range (now {lo_dm:g} to {hi_dm:g}) or check the photometry")
    return dm_best, e_best


# ============================================================================ uncertainty

def _hessian_cov(model, theta, robust=False):
    """Covariance of the free parameters from the numerical Hessian of -log L
    (or the sandwich estimator built on it, with ``robust``)."""
    bounds = _bounds(model)
    # dm and E(B-V) always (the likelihood is defined a little beyond the E(B-V) bound, so a
    # value at the bound still gets its curvature); the fractions only off their bounds
    free = [i for i, (lo, hi) in enumerate(bounds) if i < 2 or (hi > lo
            and min(theta[i] - lo, hi - theta[i]) > 2e-3)]
    H = np.zeros((len(free), len(free)))
    for a, i in enumerate(free):
        h = 1e-3
        tp, tm = theta.copy(), theta.copy()
        tp[i] += h
        tm[i] -= h
        gp, gm = _negloglike(tp, model)[1], _negloglike(tm, model)[1]
        H[a] = (gp - gm)[free] / (2 * h)
    H = 0.5 * (H + H.T)
    cov = np.full((4, 4), np.nan)
    try:
        inv = np.linalg.inv(H)
    except np.linalg.LinAlgError:
        return cov
    if robust:
        # Huber (1967) sandwich H^-1 J H^-1 with J = sum of per-star score outer products:
        # stays honest when the mixture model is only approximately right
        g = _mixture(model, theta, _components(model, theta), per_star=True)[1][:, free]
        J = g.T @ g
        if model.get("ebv_prior") is not None:
            J[1, 1] += 1.0 / model["ebv_prior"][1] ** 2
        inv = inv @ J @ inv
    if np.all(np.diag(inv) > 0):
        cov[np.ix_(free, free)] = inv
    model["_hessian"] = (H, free)
    return cov


def _bootstrap(model, theta, n_boot, seed):
    """Refit ``n_boot`` resamples of the stars (seeded); returns the (n_boot, 4) fits."""
    rng = np.random.default_rng(seed)
    d = model["data"]
    fits = np.empty((n_boot, 4))
    for i in range(n_boot):  # loop over resamples; each fit is vectorised over stars
        pick = rng.integers(0, len(d.y), len(d.y))
        dd = _Data(**{**d.__dict__})
        dd.y, dd.ivar, dd.lognorm = d.y[pick], d.ivar[pick], d.lognorm[pick]
        dd.prior = None if d.prior is None else d.prior[pick]
        m = {**model, "data": dd, "logF": model["logF"][pick]}
        fits[i], _ = _maximise(m, theta)
    return fits


# ============================================================================ two-colour diagram

def _ub_bv(d: _Data):
    """(U-B, B-V) per input row with their covariance, from magnitudes or colour columns."""
    N = len(d.y_all)
    vals = {n: (d.y_all[:, k], d.var_all[:, k]) for k, n in enumerate(d.names)}
    nan = np.full(N, np.nan)
    out = {}
    for col, (b1, b2) in (("U-B", ("U", "B")), ("B-V", ("B", "V"))):
        if b1 in vals and b2 in vals:
            v = vals[b1][0] - vals[b2][0]
            var = vals[b1][1] + vals[b2][1]
        else:
            v, var = nan, nan
        if col in vals:
            use = ~np.isfinite(v)
            v = np.where(use, vals[col][0], v)
            var = np.where(use, vals[col][1], var)
        out[col] = (v, var)
    cov = np.zeros(N)
    if all(b in vals for b in "UBV"):
        from_mags = np.isfinite(vals["U"][0]) & np.isfinite(vals["B"][0]) & np.isfinite(vals["V"][0])
        cov = np.where(from_mags, -vals["B"][1], 0.0)
    return out["U-B"], out["B-V"], cov


def _two_colour_locus(locus: _Locus, step=0.02, mv_range=(-np.inf, np.inf)):
    """Intrinsic (U-B, B-V) along the locus where U-B is calibrated, points ``step`` mag
    apart in the plane; weights uniform in M_V inside ``mv_range``, summing to 1."""
    cal = locus.cal
    lo, hi = cal.sptnum_range
    fine = np.round(np.arange(lo, hi + 1e-9, 0.01), 4)
    iU, iB, iV = (band_index(b) for b in "UBV")
    v = cal.evaluate(fine).absmag
    ok = np.isfinite(v[:, iU]) & np.isfinite(v[:, iB]) & np.isfinite(v[:, iV])
    if ok.sum() < 2:
        return None
    fine, v = fine[ok], v[ok]
    xy = np.stack([v[:, iU] - v[:, iB], v[:, iB] - v[:, iV]], axis=1)
    s = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(xy, axis=0).T))])
    spt = np.interp(np.linspace(0, s[-1], max(int(s[-1] / step), 2) + 1), s, fine)
    v = cal.evaluate(spt).absmag
    w = np.abs(np.gradient(v[:, iV])) * ((v[:, iV] >= mv_range[0]) & (v[:, iV] <= mv_range[1]))
    with np.errstate(divide="ignore", invalid="ignore"):
        return spt, v[:, iU] - v[:, iB], v[:, iB] - v[:, iV], np.log(w / w.sum())


def _two_colour_fit(ub, bv, cov, locus: _Locus, ebv_range, mv_range):
    """E(B-V) from the (U-B, B-V) plane alone: grid, refine, curvature error."""
    vu, vb = ub[1], bv[1]  # these already hold the intrinsic width (see _cluster_data)
    step = float(np.clip(1.2 * np.percentile(np.sqrt(np.minimum(vu, vb)), 5), *LOCUS_STEP))
    spt, ub0, bv0, logw = _two_colour_locus(locus, step, mv_range)
    det = vu * vb - cov ** 2
    x, y = ub[0], bv[0]
    mx, sx = np.mean(x), max(np.std(x), 0.05)
    my, sy = np.mean(y), max(np.std(y), 0.05)
    logF = -0.5 * (((x - mx) / sx) ** 2 + ((y - my) / sy) ** 2) - np.log(2 * np.pi * sx * sy)

    def member(e):
        du = x[:, None] - (ub0 + e * ub_excess_ratio(e))[None]
        db = y[:, None] - (bv0 + e)[None]
        q = (vb[:, None] * du ** 2 - 2 * cov[:, None] * du * db + vu[:, None] * db ** 2) / det[:, None]
        return logw[None] - 0.5 * q - 0.5 * np.log((2 * np.pi) ** 2 * det)[:, None]

    def profile(e):
        lm = logsumexp(member(e), axis=1)
        f = optimize.minimize_scalar(lambda f: -np.logaddexp(np.log1p(-f) + lm, np.log(f) + logF).sum(),
                                     bounds=(1e-3, 0.95), method="bounded", options={"xatol": 1e-5})
        return -f.fun

    lo_e, hi_e = ebv_range
    grid = np.arange(lo_e, hi_e + 1e-9, 0.05)
    for _ in range(2):  # coarse pass, then a finer one around its best (loop over E only)
        prof = np.array([profile(e) for e in grid])
        j = int(np.argmax(prof))
        e_best = grid[j]
        grid = np.arange(max(lo_e, e_best - 0.05), min(hi_e, e_best + 0.05) + 1e-9, 0.01)
    r = optimize.minimize_scalar(lambda e: -profile(e), bounds=(max(lo_e, e_best - 0.01),
                                 min(hi_e, e_best + 0.01)), method="bounded", options={"xatol": 1e-5})
    e_best, h = float(r.x), 2e-3
    curv = (profile(e_best + h) - 2 * profile(e_best) + profile(e_best - h)) / h ** 2
    return e_best, float(np.sqrt(-1.0 / curv)) if curv < 0 else np.nan


def intrinsic_bv_from_q(q, locus=None):
    """Intrinsic (B-V)_0 of an early-type (O3-A0) dwarf from its Q, read off the locus.

    Parameters
    ----------
    q : array_like
        Reddening-free ``Q = (U-B)_0 - 0.72 (B-V)_0`` (mag).
    locus : path or Calibration, optional
        Default: the shipped class V calibration.

    Returns
    -------
    ndarray
        (B-V)_0; NaN outside the range of Q covered by O3-A0 on the locus.

    References
    ----------
    Johnson & Morgan 1953, ApJ 117, 313 (Q); Johnson 1958, Lowell Obs. Bull. 4, 37
    (the linear form (B-V)_0 = 0.332 Q for early B stars) (from memory).
    """
    cal = _resolve_locus(locus)
    lo, _ = cal.sptnum_range
    spt = np.arange(lo, Q_LATEST_SPTNUM + 1e-9, 0.05)
    v = cal.evaluate(spt)
    iU, iB, iV = (band_index(b) for b in "UBV")
    bv0 = v.absmag[:, iB] - v.absmag[:, iV]
    q0 = q_index(v.absmag[:, iU] - v.absmag[:, iB], bv0)
    ok = np.isfinite(q0) & np.isfinite(bv0)
    if ok.sum() < 2:
        raise ValueError(f"the locus {cal.name} has no U-B for early types: the Q method needs it")
    order = np.argsort(q0[ok])
    return np.interp(np.asarray(q, float), q0[ok][order], bv0[ok][order], left=np.nan, right=np.nan)


def _q_method(ub, bv, cov, early, locus):
    """Per-star E(B-V) from Q for early-type stars, with the 0.05 E^2 curvature removed."""
    q = q_index(ub[0], bv[0])
    e = np.zeros_like(q)
    for _ in range(4):  # fixed-point iteration on the curvature term
        bv0 = intrinsic_bv_from_q(q - UB_CURVATURE * e ** 2, locus.cal)
        e = bv[0] - bv0
    e = np.where(early, e, np.nan)
    k = 0.332  # d(B-V)_0/dQ (Johnson 1958), for error propagation only
    var = (1 + Q_SLOPE * k) ** 2 * bv[1] + k ** 2 * ub[1] - 2 * k * (1 + Q_SLOPE * k) * cov
    return q, e, var


def _weighted_mean(x, var):
    ok = np.isfinite(x) & np.isfinite(var) & (var > 0)
    x, w = x[ok], 1.0 / var[ok]
    if x.size == 0:
        return np.nan, np.nan, 0
    med = np.median(x)
    mad = 1.4826 * np.median(np.abs(x - med)) if x.size > 2 else np.inf
    keep = np.abs(x - med) <= max(3 * mad, 3 * np.sqrt(1.0 / w.max()))
    x, w = x[keep], w[keep]
    mean = float((w * x).sum() / w.sum())
    err = np.sqrt(1.0 / w.sum())
    if x.size > 2:
        err = max(err, float(np.sqrt((w * (x - mean) ** 2).sum() / w.sum() / (x.size - 1))))
    return mean, float(err), int(x.size)


# ============================================================================ error budget

def _subset_model(model, pick):
    """The model restricted to the used stars ``pick`` (indices into the used stars)."""
    d = model["data"]
    dd = _Data(**{**d.__dict__})
    dd.y, dd.ivar, dd.lognorm, dd.rows = d.y[pick], d.ivar[pick], d.lognorm[pick], d.rows[pick]
    dd.prior = None if d.prior is None else d.prior[pick]
    return {**model, "data": dd, "logF": model["logF"][pick]}


def _shifted_theta(model, theta, perturbed):
    """First-order change of the free parameters when the model changes to ``perturbed``:
    d theta = -H^-1 (g' - g), g the gradient of -log L at ``theta`` (implicit function theorem)."""
    H, free = model["_hessian"]
    if "_g0" not in model:
        model["_g0"] = _negloglike(theta, model)[1][free]
    g0 = model["_g0"]
    g1 = _negloglike(theta, perturbed)[1][free]
    try:
        step = -np.linalg.solve(H, g1 - g0)
    except np.linalg.LinAlgError:
        return np.array([np.nan, np.nan])
    return step[:2]


def _systematics(model, theta, opts):
    """Systematic terms of the error budget: name -> (d dm, d E(B-V)) at 1 sigma.

    * locus zero point (age, calibration), as stated by the locus file;
    * metallicity: the [Fe/H] error and the slope of the metallicity shift;
    * R_V: refit to first order with R_V +- sigma_rv;
    * photometric zero point of each band used (:data:`PHOT_ZP`), to first order.
    """
    d = model["data"]
    out = {"locus_zero_point": (opts["locus_zp"], 0.0)}
    feh, e_feh = opts["feh"], opts["e_feh"]
    out["metallicity"] = (float(np.hypot(FEH_SLOPE * e_feh, E_FEH_SLOPE * feh)), 0.0)
    if "_hessian" not in model:
        return out
    if opts["sigma_rv"] > 0:
        lin, _ = _reddening_vectors(opts["law"], opts["rv"] + opts["sigma_rv"], opts["u_reddening"])
        dt = _shifted_theta(model, theta, {**model, "lin": lin})
        out["R_V"] = (abs(float(dt[0])), abs(float(dt[1])))
    # first order, (dm, E) are linear in a shift of the observed values: one derivative per
    # observable, then every band zero point and locus colour is a combination of them
    h = 0.01
    jac = np.zeros((len(d.names), 2))  # d(dm, E) / d(observable k)
    for k in range(len(d.names)):
        dd = _Data(**{**d.__dict__})
        step = np.zeros(len(d.names))
        step[k] = h
        dd.y = d.y + np.where(d.ivar > 0, step[None, :], 0.0)
        jac[k] = _shifted_theta(model, theta, {**model, "data": dd}) / h
    for b in BAND_NAMES:
        ib = band_index(b)
        if not (d.L[:, ib] != 0).any():
            continue
        dt = (d.L[:, ib] @ jac) * PHOT_ZP.get(b, 0.01)
        out[f"zero_point_{b}"] = (abs(float(dt[0])), abs(float(dt[1])))
    # each locus colour, relative to the ordinate band, uncertain by locus_colour_zp
    for k in range(len(d.names)):
        if k != d.k_ord:
            dt = jac[k] * opts["locus_colour_zp"]
            out[f"locus_colour_{d.names[k]}-{d.names[d.k_ord]}"] = (abs(float(dt[0])), abs(float(dt[1])))
    return out


def _goodness_of_fit(d: _Data, chi2c, p_member, p_binary):
    """Reduced colour chi-square of the likely single members (expected ~1)."""
    ncol = (d.ivar > 0).sum(axis=1) - (d.ivar[:, d.k_ord] > 0)
    single = (p_member >= 0.5) & (p_binary < 0.5 * p_member) & np.isfinite(chi2c) & (ncol > 0)
    if single.sum() < 3:
        return np.nan, int(single.sum())
    return float(chi2c[single].sum() / ncol[single].sum()), int(single.sum())


def _colour_offsets(model, theta):
    """Each star's colours (zero where missing) with their inverse variances, the locus
    colours and the reddening shift at (dm, E(B-V)) = theta: what a colour chi-square
    against the locus needs."""
    d, single = model["data"], model["single"]
    y = np.where(d.ivar > 0, d.y, np.nan)
    var = np.where(d.ivar > 0, 1.0 / np.maximum(d.ivar, 1e-300), np.nan)
    c, v, others = _colour_space(d, y, var)
    have = np.isfinite(c)
    c, iv = np.where(have, c, 0.0), np.where(have, 1.0 / np.where(have, v, 1.0), 0.0)
    shift, _ = _shift(d, model["lin"], model["quad"], theta[0], theta[1])
    mc = single.mu0[:, others] - d.a[others] * single.mu0[:, [d.k_ord]]
    sc = shift[others] - d.a[others] * shift[d.k_ord]
    return c, iv, mc, sc


def _evolved(model, theta):
    """Stars brighter than the unresolved-binary sequence at their colour.

    The single-star locus point closest in colour (at the fitted dm, E(B-V)) gives the
    ordinate magnitude a main-sequence star of that colour has; a binary is at most
    0.75 mag brighter (equal masses). Brighter than that by EVOLVED_MARGIN and 3 sigma:
    off the main sequence (subgiant, giant, turn-off star, blue straggler).
    """
    c, iv, mc, sc = _colour_offsets(model, theta)
    single, n = model["single"], len(c)
    ms_ord = np.empty(n)
    for s in range(0, n, _CHUNK):
        sl = slice(s, min(n, s + _CHUNK))
        r = c[sl, None, :] - mc[None] - sc
        chi = np.einsum("npk,npk,nk->np", r, r, iv[sl])
        # brightest locus point compatible with the colours (within 3 sigma of the best):
        # a conservative reference where the locus folds back in colour (upper main sequence)
        ok = chi <= chi.min(axis=1, keepdims=True) + 9.0
        ms_ord[sl] = np.where(ok, single.m_ord[None, :], np.inf).min(axis=1)
    d = model["data"]
    shift, _ = _shift(d, model["lin"], model["quad"], theta[0], theta[1])
    ms_ord = ms_ord + shift[d.k_ord]
    sig = np.sqrt(1.0 / np.maximum(d.ivar[:, d.k_ord], 1e-300))
    return d.y[:, d.k_ord] < ms_ord - 2.5 * np.log10(2.0) - EVOLVED_MARGIN - 3 * sig


def _beyond_end(model, theta, margin=-0.3):
    """Stars fainter (ordinate) than the faint end of the single-star locus at the fitted
    (dm, E(B-V)) by more than ``margin`` and 3 sigma: past the calibrated range."""
    d, single = model["data"], model["single"]
    shift, _ = _shift(d, model["lin"], model["quad"], theta[0], theta[1])
    end = single.m_ord.max() + shift[d.k_ord]
    sig = np.sqrt(1.0 / np.maximum(d.ivar[:, d.k_ord], 1e-300))
    return d.y[:, d.k_ord] > end + margin + 3 * sig


def _parallax(frame, columns, rows, p_member, zero_point, systematic):
    """Cluster mean parallax of the likely members: weighted mean of plx - zero_point,
    error from the weights, inflated by the excess scatter (depth, underestimated errors),
    plus the systematic floor in quadrature. Returns a dict, or None without plx/e_plx."""
    cols = dict(columns or {})
    pc, ec = cols.get("plx", "plx"), cols.get("e_plx", "e_plx")
    if pc not in frame.columns or ec not in frame.columns:
        return None
    plx = pd.to_numeric(frame[pc], errors="coerce").to_numpy(float)[rows]
    err = pd.to_numeric(frame[ec], errors="coerce").to_numpy(float)[rows]
    ok = np.isfinite(plx) & np.isfinite(err) & (err > 0) & (p_member >= 0.5)
    if ok.sum() < 3:
        return None
    x, w = plx[ok] - zero_point, 1.0 / err[ok] ** 2
    mean = float((w * x).sum() / w.sum())
    chi2 = float((w * (x - mean) ** 2).sum() / (ok.sum() - 1))
    stat = float(np.sqrt(1.0 / w.sum() * max(chi2, 1.0)))
    e = float(np.hypot(stat, systematic))
    if mean <= 0 or mean < 3 * e:
        return {"plx": mean, "e_plx": e, "n": int(ok.sum()), "dm": np.nan, "e_dm": np.nan}
    dm = 10.0 - 5.0 * np.log10(mean)
    e_dm = float(5.0 / np.log(10.0) * e / mean)
    return {"plx": mean, "e_plx": e, "n": int(ok.sum()), "dm": float(dm), "e_dm": e_dm}


# ============================================================================ main entry

def fit_cluster(table, *, law=DEFAULT_LAW, rv=DEFAULT_RV, locus=None, bands=None, magnitude=None,
                membership=None, columns=None, bright_limit=-np.inf, faint_limit=np.inf,
                dm_range=(-2.0, 25.0), ebv_range=(0.0, 3.0), binaries=True, n_q=10,
                width=DEFAULT_WIDTH, u_reddening="empirical", method="profile", n_boot=50,
                seed=0, default_error=0.05, two_colour=True, field_model="dwarfs+broad",
                feh=0.0, e_feh=0.1, ebv_prior=None, sigma_rv=DEFAULT_SIGMA_RV, exclude_evolved=True,
                plx_zero_point=DEFAULT_PLX_ZERO_POINT, plx_systematic=DEFAULT_PLX_SYSTEMATIC):
    """Distance modulus and E(B-V) of a cluster by fitting its main-sequence locus.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        One row per star with magnitudes ``U B V Rc Ic J H Ks G BP RP`` and
        errors ``e_<band>``, and/or colours such as ``B-V`` (as for
        :func:`specpar.estimate`); no spectral types needed.
    law : str
        Extinction law (``CCM89``, ``O94``, ``F99``, ``F19``, ``G23``).
    rv : float
        Fixed R_V = A_V / E(B-V).
    locus : {"young", "field"}, path or Calibration, optional
        ``"young"`` (default): the empirical young main sequence shipped as
        ``young_V.ecsv`` (Pleiades members' Gaia DR2 parallaxes, ~125 Myr,
        [Fe/H] ~ 0), which the unevolved part of any cluster sequence follows;
        ``"field"``: the mean field dwarf sequence (class V calibration, Pecaut &
        Mamajek 2013), brighter at a given colour; or a locus table in the
        calibration format. An optional ``mass`` column (Msun) is used for the
        binary sequence; an optional meta ``zero_point_uncertainty`` (mag) enters
        the error budget (default 0.1 mag).
    bands : sequence of str, optional
        Restrict the fit to these bands (default: all the input has).
    magnitude : str, optional
        Ordinate band (default the first of V, G, Ic, Rc, B, ... present).
    membership : str, optional
        Column of prior membership probabilities in [0, 1]; when given the field
        fraction is not fitted.
    columns : dict, optional
        Our column names to yours, e.g. ``{"V": "Vmag"}``.
    bright_limit, faint_limit : float
        Use only stars with ordinate magnitude inside these limits (e.g.
        ``bright_limit`` below the turn-off).
    dm_range, ebv_range : (float, float)
        Allowed ranges of distance modulus and E(B-V) (E(B-V) >= 0 by default; a
        value at the lower bound is reported as an upper limit).
    binaries : bool
        Include the unresolved-binary sequence (``n_q`` mass ratios, flat in q).
    width : float
        Intrinsic width of the sequence, added in quadrature to every observable (mag).
    u_reddening : {"empirical", "law"}
        U-band reddening from E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V) or from the law.
    method : {"profile", "bootstrap"}
        Uncertainties from the likelihood curvature (sandwich form) or from ``n_boot`` seeded resamples.
    seed : int
        Seed of the bootstrap.
    default_error : float
        Error (mag) assumed where a magnitude has none (flagged).
    two_colour : bool
        Also derive E(B-V) from the (U-B, B-V) diagram and the Q method when U, B, V exist.
    field_model : {"dwarfs+broad", "broad"}
        Colour density of the field component (see the module documentation).
    feh, e_feh : float
        Cluster metallicity [Fe/H] and its uncertainty (dex): the locus is made
        brighter by ``FEH_SLOPE * feh`` mag at fixed colour; both the [Fe/H]
        error and the slope's uncertainty enter the error budget.
    ebv_prior : (float, float), optional
        A known E(B-V) and its 1-sigma error, used as a Gaussian prior. Needed
        with only two bands (one colour), where the reddening vector runs along
        the sequence and distance and reddening cannot be told apart.
    sigma_rv : float
        Uncertainty of R_V propagated into the error budget (0 to leave it out).
    exclude_evolved : bool
        Keep stars brighter than the unresolved-binary sequence at their colour
        (subgiants, giants, turn-off stars, blue stragglers) out of the distance
        fit (flag ``EVOLVED``), then refit.
    plx_zero_point, plx_systematic : float
        With ``plx`` and ``e_plx`` columns (mas): zero point removed from the
        parallaxes (default Gaia EDR3/DR3, -0.017 mas; use -0.029 for DR2) and
        the systematic floor of the cluster mean parallax (mas).

    Returns
    -------
    ClusterResult
        Fitted values, their total uncertainties (statistical and systematic terms
        in ``budget``), goodness of fit, warnings, parallax comparison, and a
        per-star table ``members`` (every input row).

    Raises
    ------
    ValueError
        Unusable options or input: too few usable stars, no colour, all stars outside the
        locus, or a single colour without ``ebv_prior`` (distance and reddening degenerate).

    Warns
    -----
    ClusterFitWarning
        Poor goodness of fit, near-degenerate (dm, E(B-V)), E(B-V) at its bound, a binary
        fraction at its bound, or parallax tension above 3 sigma (also in ``warnings``).

    References
    ----------
    See the module documentation (:mod:`specpar.cluster`).
    """
    opts = _check_options(law, rv, dm_range, ebv_range, n_q, width, method, n_boot, default_error,
                          bright_limit, faint_limit)
    opts.update(_check_new_options(feh, e_feh, ebv_prior, sigma_rv, plx_zero_point, plx_systematic,
                                   ebv_range))
    opts["u_reddening"] = u_reddening
    if field_model not in ("dwarfs+broad", "broad"):
        raise ValueError(f"field_model must be 'dwarfs+broad' or 'broad', not {field_model!r}")
    cal = _resolve_locus(locus)
    d = _cluster_data(table, dict(columns=columns, default_error=default_error, bands=bands,
                             magnitude=magnitude, width=width, bright_limit=bright_limit,
                             faint_limit=faint_limit, membership=membership))
    if np.linalg.matrix_rank(d.L) < 3 and opts["ebv_prior"] is None:
        raise ValueError(
            f"only one colour can be formed from the bands used ({', '.join(d.names)}): along a "
            "single colour the reddening vector runs nearly parallel to the main sequence, so the "
            "distance modulus and E(B-V) cannot be separated (any point of a long valley fits). Give "
            "a known reddening as a prior, ebv_prior=(value, error) (CLI --ebv-prior VALUE,ERROR), or "
            "add a band (a second colour, e.g. U or Ks with B and V, or BP and RP with G)")
    lin, quad = _reddening_vectors(law, rv, u_reddening)
    bands_needed = (d.L != 0).any(axis=0)
    opts["locus_zp"] = _locus_zero_point(cal)
    opts["locus_colour_zp"] = _locus_zero_point(cal, "colour_zero_point_uncertainty",
                                                DEFAULT_LOCUS_COLOUR_ZP)
    loc = _build_locus(cal, bands_needed, -FEH_SLOPE * opts["feh"])
    _require(d, (d.flags & int(_BAD_ROWS)) == 0, "with an ordinate magnitude, a colour and inside the limits")
    yo = d.y_all[:, d.k_ord]
    pre = (d.flags & int(_BAD_ROWS)) == 0
    window = float(np.ptp(yo[pre]) + 1.0)
    step = float(np.clip(1.2 * np.nanpercentile(np.sqrt(d.var_all[pre]), 5), *LOCUS_STEP))
    single, binary = _clouds(loc, d.L, d.k_ord, window, n_q if binaries else 0, step)
    d.flags |= np.where(_outside_locus(d, single, lin, quad, ebv_range), int(ClusterFlag.OUTSIDE_LOCUS), 0)
    usable = (d.flags & int(_BAD_ROWS)) == 0
    _require(d, usable, "with colours the locus can reach for E(B-V) in "
                        f"[{ebv_range[0]:g}, {ebv_range[1]:g}] (locus {cal.name}, "
                        f"types {loc.sptnum[0]:g}-{loc.sptnum[-1]:g})")
    _finalise_data(d, usable)
    model = {"data": d, "single": single, "binary": binary, "lin": lin, "quad": quad,
             "dm_range": tuple(map(float, dm_range)), "ebv_range": tuple(map(float, ebv_range)),
             "logF": _field_logdensity(d, window), "width": float(width),
             "coarse": _clouds(loc, d.L, d.k_ord, window, 0, COARSE_STEP)[0],
             "ebv_prior": opts["ebv_prior"]}
    set_aside = _BAD_ROWS | ClusterFlag.EVOLVED | ClusterFlag.BEYOND_LOCUS_END
    for it in range(4):  # coarse start; stars past the locus' faint end at it are set aside
        dm0, e0 = _coarse_start(model, bright_fraction=0.4 if it == 0 else 1.0)
        if opts["ebv_prior"] is not None:
            e0 = float(np.clip(opts["ebv_prior"][0], *ebv_range))
        end = _beyond_end(model, np.array([dm0, e0]), margin=-0.3)
        if not end.any() or (~end).sum() < MIN_STARS:
            break
        d.flags[d.rows[end]] |= int(ClusterFlag.BEYOND_LOCUS_END)
        _finalise_data(d, (d.flags & int(set_aside)) == 0)
        model["logF"] = _field_logdensity(d, window)

    def field_density(e_start):
        logF = _field_logdensity(d, window)
        if field_model == "dwarfs+broad":
            dwarfs = _field_dwarf_logdensity(d, window, model["coarse"], (lin, quad),
                                             2 * max(e_start, 0.05))
            logF = np.logaddexp(dwarfs, logF) - np.log(2.0)
        return logF

    model["logF"] = field_density(e0)
    ff0 = 0.0 if d.prior is not None else 0.2
    x0 = [dm0, e0, 0.3 if binary is not None else 0.0, ff0]
    ll = None
    if len(d.rows) > _SUBFIT:  # a first fit on an even subsample finds the stars to set aside
        pick = np.unique(np.linspace(0, len(d.rows) - 1, _SUBFIT).astype(int))
        theta, _ = _maximise(_subset_model(model, pick), x0)
    else:
        theta, ll = _maximise(model, x0)
    for _ in range(3):  # set aside stars off the main sequence or past the locus' end, refit
        ev = _evolved(model, theta) if exclude_evolved else np.zeros(len(d.rows), bool)
        end = _beyond_end(model, theta)
        if not (ev.any() or end.any()) or (~(ev | end)).sum() < MIN_STARS:
            break
        d.flags[d.rows[ev]] |= int(ClusterFlag.EVOLVED)
        d.flags[d.rows[end & ~ev]] |= int(ClusterFlag.BEYOND_LOCUS_END)
        old_rows, old_logF = d.rows, model["logF"]
        _finalise_data(d, (d.flags & int(set_aside)) == 0)
        model["logF"] = old_logF[np.isin(old_rows, d.rows)]  # field density of the full sample
        theta, ll = _maximise(model, theta)
    if ll is None:
        theta, ll = _maximise(model, theta)
    cov = _hessian_cov(model, theta, robust=True)
    opts["budget"] = _systematics(model, theta, opts)
    boot = _bootstrap(model, theta, n_boot, seed) if method == "bootstrap" else None
    opts["seed"] = int(seed)
    opts["columns"] = columns
    return _assemble_result(table, d, model, theta, ll, cov, boot, opts, loc, two_colour)


def _check_options(law, rv, dm_range, ebv_range, n_q, width, method, n_boot, default_error,
                   bright_limit, faint_limit):
    check_law(law, rv)
    for name, rng in (("dm_range", dm_range), ("ebv_range", ebv_range)):
        if len(rng) != 2 or not (np.isfinite(rng[0]) and np.isfinite(rng[1]) and rng[0] < rng[1]):
            raise ValueError(f"{name} must be two finite numbers, low < high; got {rng}")
    if ebv_range[0] < -0.5 or ebv_range[1] > 10:
        raise ValueError(f"ebv_range {ebv_range} is implausible; use limits within [-0.5, 10] mag")
    if not (isinstance(n_q, (int, np.integer)) and 1 <= n_q <= 50):
        raise ValueError(f"n_q (mass-ratio grid size) must be an integer in 1..50, got {n_q}")
    if not (np.isfinite(width) and 0.005 <= width <= 0.5):
        raise ValueError(f"width must be between 0.005 and 0.5 mag, got {width}")
    if method not in ("profile", "bootstrap"):
        raise ValueError(f"method must be 'profile' or 'bootstrap', not {method!r}")
    if method == "bootstrap" and not (isinstance(n_boot, (int, np.integer)) and n_boot >= 10):
        raise ValueError(f"n_boot must be an integer >= 10 for the bootstrap, got {n_boot}")
    if not (np.isfinite(default_error) and default_error > 0):
        raise ValueError(f"default_error must be > 0 mag, got {default_error}")
    if not bright_limit < faint_limit:
        raise ValueError(f"bright_limit ({bright_limit}) must be brighter (smaller) than "
                         f"faint_limit ({faint_limit})")
    return dict(law=law, rv=float(rv), method=method, n_boot=int(n_boot))


def _check_new_options(feh, e_feh, ebv_prior, sigma_rv, plx_zero_point, plx_systematic, ebv_range):
    for name, v, lo, hi in (("feh", feh, -2.5, 1.0), ("e_feh", e_feh, 0.0, 1.0),
                            ("sigma_rv", sigma_rv, 0.0, 2.0),
                            ("plx_zero_point", plx_zero_point, -0.2, 0.2),
                            ("plx_systematic", plx_systematic, 0.0, 0.5)):
        try:
            v = float(v)
        except (TypeError, ValueError):
            raise ValueError(f"{name} must be a number, got {v!r}") from None
        if not (np.isfinite(v) and lo <= v <= hi):
            raise ValueError(f"{name} = {v} is outside the accepted range [{lo:g}, {hi:g}]; "
                             f"give a value inside it")
    prior = None
    if ebv_prior is not None:
        try:
            mu, sig = (float(x) for x in ebv_prior)
        except (TypeError, ValueError):
            raise ValueError(f"ebv_prior must be (value, error) in mag, e.g. (0.04, 0.01); got "
                             f"{ebv_prior!r}") from None
        if not (np.isfinite(mu) and np.isfinite(sig) and sig > 0 and ebv_range[0] <= mu <= ebv_range[1]):
            raise ValueError(f"ebv_prior {ebv_prior!r}: the value must lie in ebv_range "
                             f"[{ebv_range[0]:g}, {ebv_range[1]:g}] and the error be > 0 (use a small "
                             f"error, e.g. 0.005, for a reddening known well)")
        prior = (mu, max(sig, 1e-4))
    return dict(feh=float(feh), e_feh=float(e_feh), ebv_prior=prior, sigma_rv=float(sigma_rv),
                plx_zero_point=float(plx_zero_point), plx_systematic=float(plx_systematic))


def _require(d: _Data, usable, what):
    n = int(usable.sum())
    if n < MIN_STARS:
        counts = {f.name: int(((d.flags & int(f)) != 0).sum()) for f in ClusterFlag}
        why = ", ".join(f"{k} {v}" for k, v in counts.items() if v)
        raise ValueError(f"only {n} of {len(d.flags)} stars are usable ({what}); at least {MIN_STARS} "
                         f"are needed" + (f" (rows set aside: {why})" if why else ""))


# ============================================================================ per-star results

def _colour_chi2(model, theta):
    """Chi-square of each star's colours against the closest point of the reddened locus."""
    c, iv, mc, sc = _colour_offsets(model, theta)
    n = len(c)
    chi2 = np.empty(n)
    for s in range(0, n, _CHUNK):
        sl = slice(s, min(n, s + _CHUNK))
        r = c[sl, None, :] - mc[None] - sc
        chi2[sl] = np.einsum("npk,npk,nk->np", r, r, iv[sl]).min(axis=1)
    return chi2


def _dmag_single(model, theta, loc: _Locus, spt):
    """Ordinate magnitude minus the single-star sequence at the fitted locus position."""
    d = model["data"]
    shift, _ = _shift(d, model["lin"], model["quad"], theta[0], theta[1])
    ok = np.isfinite(spt)
    model_ord = np.full(len(spt), np.nan)
    model_ord[ok] = loc.at(spt[ok]) @ d.L[d.k_ord] + shift[d.k_ord]
    return d.y[:, d.k_ord] - model_ord


def _plot_colour(d: _Data):
    """(label, observed colour per input row, (blue band, red band)) for the diagrams."""
    mags = {n: k for k, n in enumerate(d.names) if d.L[k].sum() != 0}
    cols = {n: k for k, n in enumerate(d.names) if d.L[k].sum() == 0}
    pairs = list(_PLOT_COLOURS) + [tuple(n.split("-")) for n in cols]
    pairs += [(d.names[d.k_ord], n) for n in mags if n != d.names[d.k_ord]]
    for b1, b2 in pairs:
        name = f"{b1}-{b2}"
        val = np.full(len(d.y_all), np.nan)
        if b1 in mags and b2 in mags:
            val = d.y_all[:, mags[b1]] - d.y_all[:, mags[b2]]
        if name in cols:
            val = np.where(np.isfinite(val), val, d.y_all[:, cols[name]])
        if np.isfinite(val).any():
            return name, val, (b1, b2)
    return None, None, None


def _sequences(model, theta, loc: _Locus, pair, ordinate):
    """Fitted single and equal-mass binary sequences in (colour, ordinate magnitude)."""
    lin, quad = model["lin"], model["quad"]
    dm, e = theta[0], theta[1]
    A = lin * e + quad * e ** 2
    i1, i2, io = band_index(pair[0]), band_index(pair[1]), band_index(ordinate)
    M = loc.absmag
    colour = M[:, i1] - M[:, i2] + A[i1] - A[i2]
    mag = M[:, io] + dm + A[io]
    return {"colour": colour, "single": mag, "binary": mag - 2.5 * np.log10(2.0),
            "colour0": M[:, i1] - M[:, i2], "mag0": M[:, io]}


def _two_colour_part(d: _Data, rows, loc: _Locus, ebv_range, p_member, locus_spt, mv_range):
    """Independent E(B-V) from the two-colour diagram and the Q method (or None).

    Early-type stars for the Q method are members (p_member >= 0.5) typed earlier
    than A0 by an input ``sptype`` column, else placed earlier than B8 (a subclass
    margin) by the main fit. Selecting on the fitted position rather than on Q
    itself avoids picking stars whose Q was scattered blueward by noise.
    """
    if not loc.needed[[band_index(b) for b in "UBV"]].all():
        return None
    ub, bv, cov = _ub_bv(d)
    ok = np.isfinite(ub[0]) & np.isfinite(bv[0])
    use = np.zeros(len(ok), bool)
    use[rows] = True
    use &= ok
    if use.sum() < MIN_STARS:
        return None
    sel = (ub[0][use], ub[1][use]), (bv[0][use], bv[1][use]), cov[use]
    e_tc, err_tc = _two_colour_fit(*sel, loc, ebv_range, mv_range)
    pm, spt = np.zeros(len(ok)), np.full(len(ok), np.nan)
    pm[rows], spt[rows] = p_member, locus_spt
    sptype_early = _early_from_sptype(d.frame)
    with np.errstate(invalid="ignore"):
        early = sptype_early if sptype_early is not None else spt < Q_LATEST_SPTNUM - 2.0
    early = early & use & (pm >= 0.5)
    q, e_q, var_q = _q_method(ub, bv, cov, early, loc)
    mean_q, err_q, n_q = _weighted_mean(e_q, var_q)
    return {"ebv_tc": e_tc, "e_ebv_tc": err_tc, "q": np.where(ok, q, np.nan), "ebv_q_star": e_q,
            "e_ebv_q_star": np.where(np.isfinite(e_q), np.sqrt(var_q), np.nan),
            "early": early & np.isfinite(e_q), "ebv_q": mean_q, "e_ebv_q": err_q, "n_q": n_q,
            "ub": ub[0], "bv": bv[0]}


def _early_from_sptype(frame):
    """Early type (earlier than A0) from an optional ``sptype`` column, else None."""
    if "sptype" not in frame.columns:
        return None
    from .sptype import parse_sptypes
    vals = frame["sptype"].map(lambda v: v if isinstance(v, str) else None).tolist()
    spt = parse_sptypes(vals)["sptnum"].to_numpy(float)
    return np.isfinite(spt) & (spt < Q_LATEST_SPTNUM)


def _uncertainties(theta, cov, boot):
    """(e_dm, e_ebv, corr, e_fb, e_ff, d50, d16, d84)."""
    if boot is not None:
        e = boot.std(axis=0, ddof=1)
        corr = float(np.corrcoef(boot[:, 0], boot[:, 1])[0, 1]) if e[0] > 0 and e[1] > 0 else np.nan
        d16, d50, d84 = np.percentile(dm_to_pc(boot[:, 0]), [16, 50, 84])
        return e[0], e[1], corr, e[2], e[3], float(dm_to_pc(theta[0])), float(d16), float(d84)
    e = np.sqrt(np.diag(cov))
    corr = float(cov[0, 1] / (e[0] * e[1]))
    d = dm_to_pc(theta[0] + np.array([0.0, -e[0], e[0]]))
    return e[0], e[1], corr, e[2], e[3], float(d[0]), float(d[1]), float(d[2])


def _assemble_result(table, d: _Data, model, theta, ll, cov, boot, opts, loc, two_colour):
    comp = _components(model, theta, want_post=True)
    _, _, (rS, rB, rF) = _mixture(model, theta, comp)
    chi2c = _colour_chi2(model, theta)
    N = len(d.flags)
    cols = {k: np.full(N, np.nan) for k in ("p_member", "p_binary", "p_field", "locus_sptnum",
                                            "dmag_single", "chi2_colour", "q_index", "ebv_q",
                                            "e_ebv_q")}
    r = d.rows
    pm = rS + rB
    cols["p_member"][r], cols["p_binary"][r], cols["p_field"][r] = pm, rB, rF
    with np.errstate(invalid="ignore", divide="ignore"):
        cols["locus_sptnum"][r] = (rS * comp["pS"] + rB * np.nan_to_num(comp["pB"])) / pm
    cols["dmag_single"][r] = _dmag_single(model, theta, loc, cols["locus_sptnum"][r])
    cols["chi2_colour"][r] = chi2c
    used = np.zeros(N, bool)
    used[r] = True
    flags = d.flags | np.where(~used, int(ClusterFlag.NOT_USED), 0)
    with np.errstate(invalid="ignore"):
        flags |= np.where(used & (cols["p_member"] < 0.5), int(ClusterFlag.LIKELY_FIELD), 0)
        flags |= np.where(used & (cols["p_binary"] > 0.5 * cols["p_member"])
                          & (cols["p_member"] >= 0.5), int(ClusterFlag.LIKELY_BINARY), 0)
    tc = _two_colour_part(d, r, loc, model["ebv_range"], pm, cols["locus_sptnum"][r],
                          _mv_range(model, theta, pm)) \
        if two_colour else None
    if tc is not None:
        cols["q_index"], cols["ebv_q"], cols["e_ebv_q"] = tc["q"], tc["ebv_q_star"], tc["e_ebv_q_star"]
        flags |= np.where(tc["early"] & np.isfinite(tc["ebv_q_star"]), int(ClusterFlag.Q_EARLY_TYPE), 0)
    e_dm, e_ebv, corr, e_fb, e_ff, d50, d16, d84 = _uncertainties(theta, cov, boot)
    ff = float(theta[3]) if d.prior is None else float(np.mean(1 - d.prior))
    if d.prior is not None:
        e_ff = np.nan
    budget = {k: (float(v[0]), float(v[1])) for k, v in opts["budget"].items()}
    sys_dm = float(np.sqrt(sum(v[0] ** 2 for v in budget.values() if np.isfinite(v[0]))))
    sys_ebv = float(np.sqrt(sum(v[1] ** 2 for v in budget.values() if np.isfinite(v[1]))))
    e_dm_tot, e_ebv_tot = float(np.hypot(e_dm, sys_dm)), float(np.hypot(e_ebv, sys_ebv))
    if np.isfinite(e_dm_tot):
        d16, d84 = (float(x) for x in dm_to_pc(theta[0] + np.array([-e_dm_tot, e_dm_tot])))
    lo_e = model["ebv_range"][0]
    ebv_upper = lo_e + 1.645 * e_ebv_tot if theta[1] - lo_e < 1e-3 else np.nan
    pm_used = cols["p_member"][r]
    gof, n_gof = _goodness_of_fit(d, chi2c, pm_used, cols["p_binary"][r])
    plx = _parallax(d.frame, opts.get("columns"), r, pm_used, opts["plx_zero_point"],
                    opts["plx_systematic"])
    warn = []
    if np.isfinite(gof) and gof > GOF_LIMIT:
        warn.append(f"the sequence does not fit the members: reduced colour chi-square {gof:.2f} "
                    f"> {GOF_LIMIT:g}; check the photometric system, the locus (locus='young' or "
                    "'field', [Fe/H]) and the membership")
    if np.isfinite(corr) and abs(corr) > 0.95 and opts["ebv_prior"] is None:
        warn.append(f"distance modulus and E(B-V) are almost degenerate (correlation {corr:+.2f}): "
                    "the colours barely separate reddening from distance; give ebv_prior or add bands")
    if np.isfinite(ebv_upper):
        warn.append(f"E(B-V) sits at its lower bound {lo_e:g}: only an upper limit, "
                    f"E(B-V) < {ebv_upper:.3f} (95%)")
    n_ev = int(((flags & int(ClusterFlag.EVOLVED)) != 0).sum())
    res_plx = {}
    if plx is not None:
        res_plx = dict(plx_mean=plx["plx"], e_plx_mean=plx["e_plx"], n_plx=plx["n"],
                       plx_zero_point=opts["plx_zero_point"], dm_plx=plx["dm"], e_dm_plx=plx["e_dm"])
        if np.isfinite(plx["dm"]):
            z = (theta[0] - plx["dm"]) / np.hypot(e_dm_tot, plx["e_dm"])
            w1, w2 = 1 / e_dm_tot ** 2, 1 / plx["e_dm"] ** 2
            res_plx.update(plx_tension=float(z), dm_combined=float((w1 * theta[0] + w2 * plx["dm"]) / (w1 + w2)),
                           e_dm_combined=float(np.sqrt(1 / (w1 + w2))))
            if abs(z) > 3:
                warn.append(f"the main-sequence distance modulus {theta[0]:.3f} and the parallax one "
                            f"{plx['dm']:.3f} disagree by {z:+.1f} sigma: the combined value is not "
                            "meaningful; check the locus, [Fe/H], reddening and parallax zero point")
    if not (np.isfinite(e_dm_tot) and np.isfinite(e_ebv_tot)):
        warn.append(f"no cluster sequence found: the likelihood has no curvature at the best point "
                    f"(distance modulus {theta[0]:.2f}, field fraction {ff:.2f}); the stars may "
                    "not be a cluster, or the locus, bands or dm_range do not fit them")
    elif min(theta[0] - model["dm_range"][0], model["dm_range"][1] - theta[0]) < 0.05:
        warn.append(f"the distance modulus {theta[0]:.2f} sits at the edge of dm_range "
                    f"{model['dm_range'][0]:g} to {model['dm_range'][1]:g}: not a measurement")
    if model["binary"] is not None and not np.isfinite(e_fb) and theta[2] >= 0.95:
        warn.append("binary fraction at its upper bound: many members lie above the single-star "
                    "locus (a locus too faint for this cluster, e.g. a young or metal-rich one, or "
                    "unresolved evolved stars)")
    import warnings as _warnings
    for w in warn:
        _warnings.warn(w, ClusterFitWarning, stacklevel=3)
    res = ClusterResult(
        dm=float(theta[0]), e_dm=float(e_dm_tot), ebv=float(theta[1]), e_ebv=float(e_ebv_tot),
        corr=corr, dist_pc=d50, dist_lo_pc=d16, dist_hi_pc=d84,
        binary_fraction=float(theta[2]) if model["binary"] is not None else 0.0,
        e_binary_fraction=float(e_fb), field_fraction=ff, e_field_fraction=float(e_ff),
        n_input=N, n_used=len(r), law=opts["law"], rv=opts["rv"], magnitude=d.names[d.k_ord],
        observables=tuple(d.names), method=opts["method"],
        n_boot=opts["n_boot"] if boot is not None else 0, seed=opts["seed"],
        ebv_twocolour=tc["ebv_tc"] if tc else np.nan, e_ebv_twocolour=tc["e_ebv_tc"] if tc else np.nan,
        ebv_q=tc["ebv_q"] if tc else np.nan, e_ebv_q=tc["e_ebv_q"] if tc else np.nan,
        n_q=tc["n_q"] if tc else 0, log_likelihood=ll, locus=loc.cal.describe(),
        e_dm_stat=float(e_dm), e_ebv_stat=float(e_ebv), budget=budget, ebv_upper=float(ebv_upper),
        locus_name=loc.cal.name, feh=opts["feh"], e_feh=opts["e_feh"], sigma_rv=opts["sigma_rv"],
        ebv_prior=tuple(opts["ebv_prior"] or ()), gof_chi2_red=gof, n_gof=n_gof, n_evolved=n_ev,
        warnings=tuple(warn), **res_plx)
    res.e_dm, res.e_ebv = e_dm_tot, e_ebv_tot
    res.members = _member_table(table, d, cols, used, flags, res)
    res.plot_data = _plot_data(d, model, theta, loc, cols, used, tc)
    return res


def _mv_range(model, theta, p_member):
    """Absolute V range of the likely members at the fitted (dm, E): the prior range
    along the locus for the two-colour fit (a wider range than the stars populate
    biases E(B-V) there)."""
    d = model["data"]
    if "V" not in d.names or d.L[d.names.index("V")].sum() == 0:
        return (-np.inf, np.inf)
    iv = band_index("V")
    shift = theta[0] + model["lin"][iv] * theta[1] + model["quad"][iv] * theta[1] ** 2
    v = d.y_all[d.rows, d.names.index("V")][p_member >= 0.5] - shift
    if not np.isfinite(v).any():
        return (-np.inf, np.inf)
    return float(np.nanmin(v)), float(np.nanmax(v))


def _plot_data(d, model, theta, loc, cols, used, tc):
    name, colour, pair = _plot_colour(d)
    out = {"magnitude": d.names[d.k_ord], "mag": d.y_all[:, d.k_ord], "used": used,
           "p_member": cols["p_member"], "p_binary": cols["p_binary"], "colour_name": name,
           "colour": colour, "dm": theta[0], "ebv": theta[1]}
    if pair is not None:
        out["sequence"] = _sequences(model, theta, loc, pair, d.names[d.k_ord])
    if tc is not None:
        spt, ub0, bv0, _ = _two_colour_locus(loc)
        out["two_colour"] = {"ub": tc["ub"], "bv": tc["bv"], "ub0": ub0, "bv0": bv0,
                             "early": tc["early"], "ebv_tc": tc["ebv_tc"]}
    return out


def _member_table(table, d: _Data, cols, used, flags, res):
    codes, notes = _flag_text(flags)
    results = {"used": used, **cols, "flags": flags, "flag_codes": codes, "note": notes}
    meta = {"specpar_version": __version__, "cluster_fit": res.as_dict(),
            "extinction_law_reference": LAWS[res.law][1],
            "flag_bits": {f.name: int(f) for f in ClusterFlag},
            "columns": {k: v[1] for k, v in MEMBER_COLUMNS.items()},
            "assumptions": (
                "Members lie on the locus (single stars) or on the unresolved-binary sequence "
                "(flat mass-ratio distribution); the prior along the locus is uniform in the "
                "ordinate's absolute magnitude; field stars follow a broad density; one extinction "
                "law at fixed R_V for the whole cluster; stars brighter than the binary sequence at "
                "their colour (flag EVOLVED) are left out of the fit; uncertainties are totals: "
                "statistical plus the systematic terms listed in cluster_fit.budget (locus zero "
                "point, metallicity, R_V, photometric zero points).")}
    return attach_results(table, d.frame, results, meta, MEMBER_COLUMNS)


def _flag_text(flags):
    uniq, inv = np.unique(flags, return_inverse=True)
    codes = np.array([",".join(f.name for f in ClusterFlag if u & f) for u in uniq], dtype=object)
    notes = np.array(["; ".join(_SENTENCES[f] for f in ClusterFlag if u & f) for u in uniq], dtype=object)
    return codes[inv.ravel()].astype(str), notes[inv.ravel()].astype(str)


# ============================================================================ synthetic clusters

def simulate_cluster(n_members=400, *, dm=10.0, ebv=0.3, binary_fraction=0.3, field_fraction=0.2,
                     field="dwarfs", bands=("U", "B", "V", "Ic"), magnitude="V",
                     mag_range=(8.0, 18.0), law=DEFAULT_LAW, rv=DEFAULT_RV, locus=None,
                     error_floor=0.01, error_scale=0.04, width=DEFAULT_WIDTH,
                     u_reddening="empirical", seed=0, locus_offset=0.0, n_giants=0, n_turnoff=0,
                     n_stragglers=0):
    """A synthetic cluster field drawn from the locus, for tests and demonstrations.

    Members are uniform in the ordinate's absolute magnitude (apparent range
    ``mag_range``); a fraction are unresolved binaries with q uniform on (0, 1).
    Field stars (``field_fraction`` of all stars) are either ``"broad"``:
    uniform in the ordinate over ``mag_range`` and uniform in every colour over
    the members' range widened by a quarter on each side, or ``"dwarfs"``:
    dwarfs spread over +-3 mag in distance modulus around the cluster with
    E(B-V) proportional to distance (many of these fall on the cluster
    sequence and cannot be told from members). Every band of every star is
    scattered by ``width`` (the intrinsic width of the sequence the fit
    assumes) and by its photometric error ``error_floor + error_scale *
    10**(0.4 (m_ord - faint limit))`` (1.5 times larger in U).

    Returns
    -------
    astropy.table.Table
        ``id``, magnitudes and ``e_<band>``, and the truth: ``sim_member``,
        ``sim_binary``, ``sim_q``, ``sim_sptnum``, ``sim_ebv``.
    """
    if field not in ("broad", "dwarfs"):
        raise ValueError(f"field must be 'broad' or 'dwarfs', not {field!r}")
    if magnitude not in bands:  # else the draw below never fills its quota
        raise ValueError(f"magnitude {magnitude!r} must be one of the bands simulated "
                         f"({', '.join(bands)}); pass magnitude=...")
    rng = np.random.default_rng(seed)
    cal = _resolve_locus(locus)
    ib = [band_index(b) for b in bands]
    need = np.zeros(len(BAND_NAMES), bool)
    need[ib] = True
    loc = _build_locus(cal, need, float(locus_offset))
    io = band_index(magnitude)
    red = _reddening_vectors(law, rv, u_reddening)
    n_field = int(round(n_members * field_fraction / max(1.0 - field_fraction, 1e-9)))
    spec = dict(loc=loc, io=io, red=red, mag_range=mag_range, rng=rng)
    parts = [_draw_members(n_members, dm, ebv, binary_fraction, 0.0, **spec)]
    if n_field and field == "dwarfs":
        parts.append(_draw_members(n_field, dm, ebv, 0.0, 3.0, **spec))
    elif n_field:
        parts.append(_broad_field(n_field, parts[0][0], ib, io, mag_range, rng))
    mags, is_bin, q, spt, ei = (np.concatenate([p[i] for p in parts]) for i in range(5))
    extra = _evolved_stars(n_giants, n_turnoff, n_stragglers, dm, ebv, loc, io, red, rng)
    if extra is not None:
        mags = np.concatenate([mags, extra[0]])
        is_bin, q = np.concatenate([is_bin, np.zeros(len(extra[0]), bool)]), np.concatenate([q, np.zeros(len(extra[0]))])
        spt, ei = np.concatenate([spt, extra[1]]), np.concatenate([ei, np.full(len(extra[0]), ebv)])
    member = np.arange(len(mags)) < n_members
    evolved = np.zeros(len(mags), bool)
    if extra is not None:
        evolved[-len(extra[0]):] = True
        member |= evolved
    sig = error_floor + error_scale * 10 ** (0.4 * (mags[:, io] - mag_range[1]))
    t = Table()
    t["id"] = [f"SIM-{i:05d}" for i in range(len(mags))]
    for b, i in zip(bands, ib):
        s = sig * (1.5 if b == "U" else 1.0)
        t[b] = np.round(mags[:, i] + np.hypot(s, width) * rng.standard_normal(len(mags)), 4)
        t[f"e_{b}"] = np.round(s, 4)
    t["sim_member"], t["sim_binary"], t["sim_q"] = member, is_bin, q
    t["sim_sptnum"], t["sim_ebv"] = spt, ei
    t["sim_evolved"] = evolved
    t.meta["simulation"] = dict(dm=dm, ebv=ebv, binary_fraction=binary_fraction, field=field,
                                field_fraction=field_fraction, law=law, rv=rv, seed=seed)
    return t


def _evolved_stars(n_giants, n_turnoff, n_stragglers, dm, ebv, loc, io, red, rng):
    """Members off the main sequence: red-clump/RGB giants (class III table, G8-K3),
    turn-off stars (the locus' blue part moved 0.4-1.5 mag brighter and 0.05-0.3 mag
    redder in every colour relative to V, as subgiants) and blue stragglers (the locus 0.5-2
    mag above the brightest drawn member is not used: they are put 1-2.5 mag above the
    single-star sequence at their colour, as merged binaries)."""
    lin, quad = red
    parts, spts = [], []
    if n_giants:
        g = default_calibrations().by_class["III"]
        s = rng.uniform(48.0, 53.0, n_giants)
        parts.append(np.where(loc.needed, g.evaluate(s).absmag, 0.0))
        spts.append(s)
    lo, hi = loc.sptnum[0], loc.sptnum[-1]
    blue = np.clip(np.array([30.0, 40.0]), lo, hi)
    for n, up, red_shift in ((n_turnoff, (0.4, 1.5), (0.05, 0.3)), (n_stragglers, (1.0, 2.5), (0.0, 0.0))):
        if not n:
            continue
        s = rng.uniform(*blue, n)
        m = loc.at(s)
        m = m - rng.uniform(*up, n)[:, None] * loc.needed
        # redder: every band but V moves by a fraction of its distance from V in wavelength order
        dc = rng.uniform(*red_shift, n)[:, None]
        m = m + dc * (np.array([b in ("U", "B", "BP", "G") for b in BAND_NAMES]) * 1.0
                      - np.array([b in ("Rc", "Ic", "J", "H", "Ks", "RP") for b in BAND_NAMES]) * 1.0) * loc.needed
        parts.append(m)
        spts.append(s)
    if not parts:
        return None
    m = np.concatenate(parts)
    return m + dm + lin * ebv + quad * ebv ** 2, np.concatenate(spts)


def _draw_members(n, dm, ebv, binary_fraction, dm_spread, *, loc, io, red, mag_range, rng):
    """n stars on the locus (binaries with flat q), uniform in the ordinate's absolute
    magnitude, kept inside ``mag_range``; ``dm_spread`` > 0 scatters them in distance
    (E(B-V) proportional to distance) as field dwarfs."""
    lin, quad = red
    got, have = [], 0
    while have < n:  # rejection sampling in batches
        m = 4 * n + 50
        dmi = dm + rng.uniform(-dm_spread, dm_spread, m)
        ei = ebv * dm_to_pc(dmi) / dm_to_pc(dm)
        target = rng.uniform(mag_range[0] - dmi - lin[io] * ei - 0.8, mag_range[1] - dmi - lin[io] * ei)
        order = np.argsort(loc.absmag[:, io])
        spt = np.interp(target, loc.absmag[order, io], loc.sptnum[order], left=np.nan, right=np.nan)
        is_bin = rng.uniform(size=m) < binary_fraction
        q = np.where(is_bin, rng.uniform(0, 1, m), 0.0)
        M2 = loc.at(np.where(is_bin, loc.spt_of_mass(q * _mass_along(loc.cal, spt)), np.nan))
        flux = 10 ** (-0.4 * loc.at(spt)) + np.nan_to_num(10 ** (-0.4 * M2), nan=0.0)
        with np.errstate(invalid="ignore"):
            mags = -2.5 * np.log10(flux) + dmi[:, None] + lin * ei[:, None] + quad * ei[:, None] ** 2
            keep = (mags[:, io] >= mag_range[0]) & (mags[:, io] <= mag_range[1]) & np.isfinite(spt)
        got.append((mags[keep], is_bin[keep], q[keep], spt[keep], ei[keep]))
        have += int(keep.sum())
    return tuple(np.concatenate([g[i] for g in got])[:n] for i in range(5))


def _broad_field(n, member_mags, ib, io, mag_range, rng):
    """n stars uniform in the ordinate and in each colour over the members' widened range."""
    mags = np.zeros((n, member_mags.shape[1]))
    mags[:, io] = rng.uniform(*mag_range, n)
    for i in ib:
        if i == io:
            continue
        col = member_mags[:, i] - member_mags[:, io]
        lo, hi = col.min(), col.max()
        pad = 0.25 * (hi - lo)
        mags[:, i] = mags[:, io] + rng.uniform(lo - pad, hi + pad, n)
    nan = np.full(n, np.nan)
    return mags, np.zeros(n, bool), np.zeros(n), nan, nan


# ============================================================================ command line

def _range_pair(text):
    try:
        lo, hi = (float(x) for x in text.split(","))
    except ValueError:
        raise ValueError(f"expected LOW,HIGH (two numbers separated by a comma), got {text!r}") from None
    return lo, hi


def register_cli(sub):
    """Add ``specpar cluster``."""
    import argparse
    p = sub.add_parser(
        "cluster", help="distance modulus and E(B-V) of a cluster by main-sequence fitting",
        description="Fit the main-sequence locus to a cluster field's photometry: distance modulus, "
                    "E(B-V), binary and field fractions, with per-star membership.",
        epilog="input: the same magnitude/colour columns as 'specpar estimate' (no spectral types "
               "needed).\nexample:\n  specpar cluster field.csv -o members.ecsv --plot cmd.png "
               "--twocolour ub_bv.png", formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("input", help="table of stars (CSV, ECSV, FITS, VOTable or Parquet)")
    p.add_argument("-o", "--output", help="per-star table (membership, residuals, flags)")
    p.add_argument("--plot", metavar="FILE", help="colour-magnitude diagram (.png or .pdf)")
    p.add_argument("--twocolour", metavar="FILE", help="(U-B, B-V) diagram (.png or .pdf; needs U, B, V)")
    p.add_argument("--law", default=DEFAULT_LAW, choices=list(LAWS),
                   help=f"extinction law (default {DEFAULT_LAW})")
    p.add_argument("--rv", type=float, default=DEFAULT_RV, help=f"fixed R_V (default {DEFAULT_RV})")
    p.add_argument("--locus", metavar="NAME|FILE", default=DEFAULT_LOCUS,
                   help="'young' (default: empirical young main sequence), 'field' (mean field dwarfs) "
                        "or a locus table in the calibration format")
    p.add_argument("--feh", type=float, default=0.0, help="cluster [Fe/H] (default 0)")
    p.add_argument("--e-feh", type=float, default=0.1, help="uncertainty of [Fe/H] (default 0.1 dex)")
    p.add_argument("--ebv-prior", metavar="VALUE,ERROR",
                   help="known E(B-V) and its error, used as a prior (needed with one colour)")
    p.add_argument("--sigma-rv", type=float, default=DEFAULT_SIGMA_RV,
                   help=f"uncertainty of R_V in the error budget (default {DEFAULT_SIGMA_RV})")
    p.add_argument("--keep-evolved", action="store_true",
                   help="do not set aside stars above the binary sequence (giants, turn-off, stragglers)")
    p.add_argument("--plx-zero-point", type=float, default=DEFAULT_PLX_ZERO_POINT, metavar="MAS",
                   help=f"parallax zero point removed from plx (default {DEFAULT_PLX_ZERO_POINT} mas, "
                        "Gaia DR3; DR2: -0.029)")
    p.add_argument("--plx-systematic", type=float, default=DEFAULT_PLX_SYSTEMATIC, metavar="MAS",
                   help=f"systematic floor of the mean parallax (default {DEFAULT_PLX_SYSTEMATIC} mas)")
    p.add_argument("--bands", metavar="B,V,...", help="use only these bands (comma-separated)")
    p.add_argument("--magnitude", metavar="BAND", help="ordinate band (default V, else G, Ic, ...)")
    p.add_argument("--membership", metavar="COLUMN", help="column of prior membership probabilities")
    p.add_argument("--bright-limit", type=float, default=-np.inf, metavar="MAG",
                   help="ignore stars brighter than this ordinate magnitude (e.g. the turn-off)")
    p.add_argument("--faint-limit", type=float, default=np.inf, metavar="MAG",
                   help="ignore stars fainter than this ordinate magnitude")
    p.add_argument("--dm-range", default="-2,25", metavar="LO,HI",
                   help="allowed distance moduli (default -2,25; write --dm-range=-1,20 when LO < 0)")
    p.add_argument("--ebv-range", default="0,3", metavar="LO,HI",
                   help="allowed E(B-V) (default 0,3; write --ebv-range=-0.05,2 when LO < 0)")
    p.add_argument("--no-binaries", action="store_true", help="fit without the binary sequence")
    p.add_argument("--field-model", choices=("dwarfs+broad", "broad"), default="dwarfs+broad",
                   help="colour density of field stars (default dwarfs+broad)")
    p.add_argument("--width", type=float, default=DEFAULT_WIDTH, metavar="MAG",
                   help=f"intrinsic width of the sequence (default {DEFAULT_WIDTH} mag)")
    p.add_argument("--u-reddening", choices=("empirical", "law"), default="empirical",
                   help="U-band reddening: E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V) (default) or the law")
    p.add_argument("--bootstrap", type=int, metavar="N", default=0,
                   help="uncertainties from N bootstrap resamples (default: likelihood curvature, sandwich form)")
    p.add_argument("--seed", type=int, default=0, help="seed of the bootstrap (default 0)")
    p.add_argument("--col", action="append", metavar="OURS=YOURS", help="map a column name (repeatable)")
    p.add_argument("--in-format", help="input format if the extension does not tell")
    p.add_argument("--hdu", metavar="N|NAME", help="FITS: the table HDU to read when the file holds several (VOTable: table index or ID)")
    p.add_argument("--out-format", help="output format if the extension does not tell")
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=_cmd_cluster)


def _cmd_cluster(args):
    from .cli import column_map
    from specpar.io.read import read_table
    from specpar.io.write import write_table
    for f in (args.plot, args.twocolour):
        if f and not str(f).lower().endswith((".png", ".pdf")):
            raise ValueError(f"plot file {f} must end in .png or .pdf")
    locus_file = [args.locus] if args.locus and os.path.isfile(str(args.locus)) else []
    if args.output:  # checked before any computing (never over the table or the locus file)
        from specpar.io.atomic import check_output
        check_output(args.output, args.out_format, inputs=[args.input, *locus_file], overwrite=args.overwrite)
    table = read_table(args.input, args.in_format, hdu=args.hdu)
    import warnings
    with warnings.catch_warnings():  # the summary prints them as WARNING lines
        warnings.simplefilter("ignore", ClusterFitWarning)
        res = fit_cluster(
            table, law=args.law, rv=args.rv, locus=args.locus, magnitude=args.magnitude,
            bands=[b.strip() for b in args.bands.split(",")] if args.bands else None,
            width=args.width, u_reddening=args.u_reddening,
            membership=args.membership, columns=column_map(args.col), bright_limit=args.bright_limit,
            faint_limit=args.faint_limit, dm_range=_range_pair(args.dm_range),
            ebv_range=_range_pair(args.ebv_range), binaries=not args.no_binaries,
            method="bootstrap" if args.bootstrap else "profile", n_boot=args.bootstrap or 50,
            seed=args.seed, field_model=args.field_model, feh=args.feh, e_feh=args.e_feh,
            ebv_prior=_range_pair(args.ebv_prior) if args.ebv_prior else None, sigma_rv=args.sigma_rv,
            exclude_evolved=not args.keep_evolved, plx_zero_point=args.plx_zero_point,
            plx_systematic=args.plx_systematic)
    if args.output:
        write_table(res.members, args.output, args.out_format, inputs=[args.input, *locus_file],
                    overwrite=args.overwrite)
    from .clusterplots import plot_cmd, plot_two_colour
    if args.plot:
        plot_cmd(res, args.plot, inputs=[args.input], overwrite=args.overwrite)
    if args.twocolour:
        plot_two_colour(res, args.twocolour, inputs=[args.input], overwrite=args.overwrite)
    if not args.quiet:
        print(res.summary())
    return 0
