"""Cluster fits in the Gaia bands with colour-dependent extinction coefficients.

Synthetic clusters whose Gaia magnitudes are reddened star by star with the coefficients of
each star's own (BP-RP)_0 (Riello et al. 2021 relation, as the simulator applies it) prove the
fit's handling (one set of coefficients for the members' median colour, refitted until it
settles, with a budget term for that simplification); the science check is on real clusters
(test_cluster_real.py).
"""
import warnings

import numpy as np
import pytest

from specpar import cluster as C
from specpar.calib.extinction import band_coefficients
from specpar.calib.gaia_extinction import gaia_coefficients
from specpar.core.bands import band_index


def _fit(t, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", C.ClusterFitWarning)
        return C.fit_cluster(t, **kw)


@pytest.mark.parametrize("seed,ebv", [(1, 0.3), (2, 0.05)])
def test_gaia_cluster_recovered_with_colour_dependent_extinction(seed, ebv):
    t = C.simulate_cluster(500, dm=9.5, ebv=ebv, bands=("G", "BP", "RP"), magnitude="G", field_fraction=0.1,
                           seed=seed)
    r = _fit(t)
    # the members' median colour sets the coefficients, which are reported (settled to GAIA_TOL)
    assert 0.3 < r.gaia_bprp0 < 1.5
    want = gaia_coefficients(r.gaia_bprp0, r.ebv, 3.1)
    assert [r.gaia_coefficients[b] for b in ("G", "BP", "RP")] == pytest.approx(list(want), abs=2e-3)
    assert "gaia_extinction_colour" in r.budget and "Gaia-band extinction" in r.summary()
    # unbiased within the total errors (the statistical ones alone are a few mmag here)
    assert abs(r.dm - 9.5) < 2 * r.e_dm and abs(r.ebv - ebv) < 2 * r.e_ebv


def test_without_gaia_bands_the_law_coefficients_stay():
    t = C.simulate_cluster(200, dm=9.0, ebv=0.2, bands=("B", "V", "Ic"), seed=3)
    r = _fit(t)
    assert not np.isfinite(r.gaia_bprp0) and "gaia_extinction_colour" not in r.budget


def test_k_dwarfs_redden_less_than_the_effective_wavelength_coefficients_say():
    # the reason for the change (common practice: broad-band coefficients depend on the spectrum):
    # at (BP-RP)_0 = 1 the EDR3 relation gives E(BP-RP)/E(B-V) ~1.28, the law at the bands'
    # effective wavelengths 1.59
    law = band_coefficients("F99", 3.1)
    k = gaia_coefficients(1.0, 0.0, 3.1)
    assert law[band_index("BP")] - law[band_index("RP")] > 1.5 and 1.2 < k[1] - k[2] < 1.35
