"""Pulls of the cluster fit's total uncertainties on synthetic clusters with the hard parts
of real ones: a turn-off, red giants, blue stragglers, 30 % unresolved binaries and 20 %
field dwarfs, and every systematic the error budget names realised at random per cluster
(locus zero point and colours, [Fe/H], R_V, photometric zero points), each drawn from the
uncertainty the fit states for it. This checks the solver and the error budget, not the
science (the locus is our own); real clusters are in test_cluster_real.py.

Common practice: pulls (fit - truth) / quoted error of an honest estimator have mean ~0 and
width ~1; with N clusters the mean scatters by 1/sqrt(N) and the width by ~1/sqrt(2N).
"""
import os
import warnings

import numpy as np
import pytest

from specpar import cluster as C
from specpar.cluster.locus import DEFAULT_LOCUS_COLOUR_ZP, FEH_SLOPE, locus_zero_point, resolve_locus
from specpar.cluster.uncertainty import DEFAULT_SIGMA_RV, PHOT_ZP

TRUE_DM, TRUE_EBV = 10.0, 0.3
#: Synthetic clusters per band set: 14 by default (about 20 s each); SPECPAR_PULL_CLUSTERS=120
#: runs enough (about 3 min each) for the issue's bounds to be tested as they stand.
N_CLUSTERS = int(os.environ.get("SPECPAR_PULL_CLUSTERS", "14"))
#: From this many clusters on, the bounds are asserted without sampling slack (standard
#: error of the mean 1/sqrt(N) <= 0.1, of the width <= 0.07).
STRICT_FROM = 100


def _cluster(seed, bands):
    rng = np.random.default_rng(1000 + seed)
    cal = resolve_locus(None)
    feh = rng.normal(0.0, 0.1)  # the fit assumes [Fe/H] = 0 +- 0.1
    offset = rng.normal(0.0, locus_zero_point(cal)) - FEH_SLOPE * feh
    rv = rng.normal(3.1, DEFAULT_SIGMA_RV)
    t = C.simulate_cluster(200, dm=TRUE_DM, ebv=TRUE_EBV, binary_fraction=0.3, field_fraction=0.2,
                           bands=bands, mag_range=(9.0, 18.0), rv=rv, locus_offset=offset,
                           n_giants=6, n_turnoff=8, n_stragglers=3, seed=seed)
    colour_zp = locus_zero_point(cal, "colour_zero_point_uncertainty", DEFAULT_LOCUS_COLOUR_ZP)
    for b in bands:  # photometric zero points, and the locus colours relative to V
        t[b] = t[b] + rng.normal(0.0, PHOT_ZP[b]) + (rng.normal(0.0, colour_zp) if b != "V" else 0.0)
    return t, rng


def _pulls(bands, n=14, prior=False):
    out = []
    for seed in range(n):
        t, rng = _cluster(seed, bands)
        kw = {"ebv_prior": (TRUE_EBV + rng.normal(0, 0.03), 0.03)} if prior else {}
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", C.ClusterFitWarning)
            r = C.fit_cluster(t, two_colour=False, **kw)
        ev = np.asarray(t["sim_evolved"], bool)
        flagged = (np.asarray(r.members["flags"]) & int(C.ClusterFlag.EVOLVED)) != 0
        out.append(((r.dm - TRUE_DM) / r.e_dm, (r.ebv - TRUE_EBV) / r.e_ebv,
                    flagged[ev].mean(), flagged[~ev].mean()))
    return np.array(out)


@pytest.mark.slow
@pytest.mark.parametrize("bands,prior", [(("B", "V", "Ic"), False), (("U", "B", "V", "Ic"), False),
                                         (("B", "V"), True)])
def test_total_error_pulls(bands, prior):
    p = _pulls(bands, n=N_CLUSTERS, prior=prior)
    mean, width = p[:, :2].mean(axis=0), p[:, :2].std(axis=0, ddof=1)
    print(f"\n{N_CLUSTERS} clusters, {'+'.join(bands)}{' with E(B-V) prior' if prior else ''}: pulls dm mean {mean[0]:+.2f} "
          f"width {width[0]:.2f}; E(B-V) mean {mean[1]:+.2f} width {width[1]:.2f}; evolved stars "
          f"flagged {p[:, 2].mean():.2f}, main-sequence stars flagged {p[:, 3].mean():.3f}")
    # asked: mean within 0.2 and width 0.8-1.3. With 14 clusters the standard error of the
    # mean is 0.27 and of the width ~0.19, so the default run allows that slack on top;
    # with STRICT_FROM clusters or more the bounds are asserted as asked.
    slack_mean, slack_width = (0.0, 0.0) if N_CLUSTERS >= STRICT_FROM else (0.3, 0.25)
    assert np.all(np.abs(mean) < 0.2 + slack_mean)
    assert np.all((width > 0.8 - slack_width) & (width < 1.3 + slack_width))
    assert p[:, 2].mean() > 0.5 and p[:, 3].mean() < 0.05


def test_two_bands_refused_without_prior():
    t, _ = _cluster(0, ("B", "V"))
    with pytest.raises(ValueError, match="cannot be separated"):
        C.fit_cluster(t)
