"""A membership column follows its own rows through every pass of the fit. The fit sets rows
aside more than once (unusable photometry first, then stars past the locus end or above the
turn-off); the prior of each remaining star must still be its own (before the fix, the second
pass indexed the already-shortened prior with whole-table row numbers: an IndexError, or the
priors of other stars). Common practice: rows that cannot be used do not change the result."""
from __future__ import annotations

import warnings

import numpy as np
from astropy.table import vstack

from specpar.cluster import fit_cluster, simulate_cluster


def _fit(t):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fit_cluster(t, membership="p_mem")


def test_unusable_rows_do_not_shift_membership_priors():
    # invented cluster field with turn-off stars, giants and stragglers, so evolved stars are set aside
    t = simulate_cluster(n_members=200, seed=4, dm=10.0, ebv=0.3, n_giants=6, n_turnoff=8, n_stragglers=3,
                         field_fraction=0.2)
    t["p_mem"] = np.random.default_rng(1).uniform(0.5, 1.0, len(t))
    bad = t[:20].copy()
    for band in ("U", "B", "V", "Ic"):
        bad[band] = np.nan
    bad["id"] = [f"NOPHOT-{i}" for i in range(len(bad))]
    plain, padded = _fit(t), _fit(vstack([bad, t]))
    assert np.isfinite(plain.dm)
    assert padded.dm == plain.dm and padded.ebv == plain.ebv
