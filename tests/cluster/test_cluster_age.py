"""The ``age`` option of the cluster fit: stars more massive than those still unevolved at the
cluster's age are kept out of the distance fit (flag AGE_LIMIT).

Checks: the mass limit against the main-sequence lifetime scaling t_MS = 10 Gyr (M/Msun)^-2.5
(common practice); on synthetic clusters drawn from the locus (they prove the mechanics, not
the science; the science check is Ruprecht 147 in test_cluster_real.py) the stars set aside are
those above the limit, the fit stays unbiased, and an age young enough to leave every locus star
unevolved changes nothing.
"""
import warnings

import numpy as np
import pytest

from specpar import cluster as C
from specpar.cluster.locus import EVOLVED_LIFE_FRACTION, build_locus, resolve_locus, unevolved_mass_limit
from specpar.core.bands import BAND_NAMES, band_index
from specpar.core.errors import InputError

TRUE_DM, TRUE_EBV = 9.0, 0.2
BANDS = ("B", "V", "Ic")


def _fit(t, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", C.ClusterFitWarning)
        return C.fit_cluster(t, **kw)


def test_mass_limit_follows_the_lifetime_scaling():
    # t_MS(1 Msun) = 10 Gyr: at 4 Gyr a 1 Msun star has spent 40% of its life
    assert EVOLVED_LIFE_FRACTION == 0.4
    assert unevolved_mass_limit(4000.0) == pytest.approx(1.0, rel=1e-12)
    # t_MS scales as M^-2.5: at 4000 / 2^2.5 Myr the limit is 2 Msun
    assert unevolved_mass_limit(4000.0 / 2 ** 2.5) == pytest.approx(2.0, rel=1e-12)
    assert unevolved_mass_limit(2700.0) == pytest.approx((4000 / 2700) ** 0.4, rel=1e-12)


@pytest.fixture(scope="module")
def cluster():
    return C.simulate_cluster(300, dm=TRUE_DM, ebv=TRUE_EBV, bands=BANDS, binary_fraction=0.3,
                              field_fraction=0.1, mag_range=(6.0, 18.0), seed=11)


def test_age_sets_aside_the_stars_above_the_limit(cluster):
    r = _fit(cluster, age=2700.0)
    flags = np.asarray(r.members["flags"])
    aside = (flags & int(C.ClusterFlag.AGE_LIMIT)) != 0
    # the absolute V of the locus at the mass limit
    need = np.zeros(len(BAND_NAMES), bool)
    need[[band_index(b) for b in BANDS]] = True
    loc = build_locus(resolve_locus(None), need, 0.0)
    spt_lim = float(loc.spt_of_mass(np.array([unevolved_mass_limit(2700.0)]))[0])
    single = np.asarray(cluster["sim_member"]) & ~np.asarray(cluster["sim_binary"]) & ~np.asarray(cluster["sim_evolved"])
    spt = np.asarray(cluster["sim_sptnum"], float)
    # single members clearly earlier (more massive) than the limit are set aside, clearly later ones kept
    early, late = single & (spt < spt_lim - 3), single & (spt > spt_lim + 3)
    assert early.sum() > 20 and late.sum() > 50
    assert aside[early].mean() > 0.95 and aside[late].mean() == 0.0
    assert r.n_used < _fit(cluster).n_used
    # the fit of the remaining (unevolved) stars is still unbiased
    assert abs(r.dm - TRUE_DM) < 3 * r.e_dm_stat + 0.02 and abs(r.ebv - TRUE_EBV) < 3 * r.e_ebv_stat + 0.01


def test_age_with_no_evolved_locus_star_changes_nothing(cluster):
    # at 1 Myr the limit (27 Msun) lies above the locus' heaviest star (20 Msun, B0 V): no cut
    assert unevolved_mass_limit(1.0) > 25
    a, b = _fit(cluster), _fit(cluster, age=1.0)
    assert (a.dm, a.ebv, a.e_dm, a.n_used) == (b.dm, b.ebv, b.e_dm, b.n_used)
    assert not ((np.asarray(b.members["flags"]) & int(C.ClusterFlag.AGE_LIMIT)) != 0).any()


@pytest.mark.parametrize("age", [0.0, -100.0, 2e4, float("nan"), "old"])
def test_implausible_ages_are_refused(cluster, age):
    with pytest.raises(InputError, match="age"):
        _fit(cluster, age=age)
