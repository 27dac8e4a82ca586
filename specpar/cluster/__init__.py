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
  Mamajek (``dwarf_masses.ecsv``); companions below the locus' faint end count
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
(:func:`specpar.calib.extinction.band_coefficients`), except that for U the
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

Modules
-------
``options`` (every option, declared once), ``data`` (reading and cleaning the
photometry), ``locus`` (locus tables, masses, model clouds), ``reddening``
(UBV reddening line, Q), ``likelihood`` (the mixture and its maximum),
``field`` (field densities), ``start`` (coarse start), ``uncertainty``
(curvature, bootstrap, error budget), ``diagnostics`` (per-star checks,
parallax), ``twocolour`` (two-colour diagram, Q method), ``result``
(:class:`ClusterResult`), ``assemble`` (building it), ``fit``
(:func:`fit_cluster`), ``simulate`` (:func:`simulate_cluster`), ``plots``
(diagrams), ``flags`` (per-star flags), ``numerics`` (grid search, curvature
errors).

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

from .fit import fit_cluster
from .flags import ClusterFlag
from .plots import plot_cmd, plot_two_colour
from .reddening import q_index, ub_excess_ratio
from .result import ClusterFitWarning, ClusterResult
from .simulate import simulate_cluster
from .twocolour import intrinsic_bv_from_q

__all__ = ["fit_cluster", "ClusterResult", "ClusterFlag", "ClusterFitWarning", "simulate_cluster", "q_index",
           "intrinsic_bv_from_q", "ub_excess_ratio", "plot_cmd", "plot_two_colour"]

# the public names say where users import them from (as specpar.fit_cluster.__module__ did)
for _obj in (fit_cluster, simulate_cluster, ClusterResult, ClusterFitWarning, intrinsic_bv_from_q, q_index,
             ub_excess_ratio, plot_cmd, plot_two_colour):
    _obj.__module__ = __name__
del _obj
