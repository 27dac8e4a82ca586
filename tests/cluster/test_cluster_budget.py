"""Cluster fit: bounds, limits, metallicity shift, parallaxes, evolved stars, error budget.

External anchors: the distance modulus of a parallax, m - M = 10 - 5 log10(plx / mas)
(common practice); the metallicity shift of FEH_SLOPE = 1 mag/dex at fixed colour (An et
al. 2007, ApJ 655, 233; from memory); the equal-mass binary gain 2.5 log10 2 = 0.75 mag
(common practice). Synthetic clusters here are round trips of the solver, not science checks
(those are in test_cluster_real.py).
"""
import warnings

import numpy as np
import pytest

from specpar import cluster as C
from specpar.cli.cluster import register
from specpar.cluster.locus import E_FEH_SLOPE, FEH_SLOPE


@pytest.fixture(scope="module")
def field():
    return C.simulate_cluster(160, dm=9.0, ebv=0.25, bands=("B", "V", "Ic"), binary_fraction=0.3,
                              field_fraction=0.1, n_giants=5, n_stragglers=3, seed=21)


def _fit(t, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", C.ClusterFitWarning)
        return C.fit_cluster(t, two_colour=False, **kw)


@pytest.fixture(scope="module")
def base(field):
    return _fit(field)


def test_metallicity_shifts_distance_by_published_slope(field, base):
    # a metal-rich locus is brighter by FEH_SLOPE * [Fe/H] at fixed colour, so dm grows by it
    r = _fit(field, feh=0.2)
    assert r.dm - base.dm == pytest.approx(FEH_SLOPE * 0.2, abs=0.01)
    assert r.budget["metallicity"][0] == pytest.approx(np.hypot(FEH_SLOPE * 0.1, E_FEH_SLOPE * 0.2))


def test_total_error_is_statistical_plus_listed_terms(base):
    terms = np.array([v for v in base.budget.values()])
    assert base.e_dm == pytest.approx(np.sqrt(base.e_dm_stat ** 2 + (terms[:, 0] ** 2).sum()))
    assert base.e_ebv == pytest.approx(np.sqrt(base.e_ebv_stat ** 2 + (terms[:, 1] ** 2).sum()))
    for k in ("locus_zero_point", "metallicity", "R_V", "zero_point_V", "zero_point_B",
              "zero_point_Ic", "locus_colour_B-V", "locus_colour_Ic-V"):
        assert k in base.budget
    meta = base.members.meta["specpar"]["cluster_fit"]
    assert meta["locus_name"] == "young_V" and "budget" in meta
    assert "young_V" in base.summary()


def test_evolved_stars_listed_with_reason(field, base):
    ev = np.asarray(field["sim_evolved"], bool)
    flags = np.asarray(base.members["flags"])
    hit = (flags & int(C.ClusterFlag.EVOLVED)) != 0
    assert hit[ev].mean() >= 0.6 and hit[~ev].mean() < 0.05
    assert all("binary sequence" in n for n in np.asarray(base.members["note"])[hit])
    assert not np.any(np.asarray(base.members["used"])[hit])
    assert base.n_evolved == hit.sum()


def test_reddening_at_bound_is_an_upper_limit():
    t = C.simulate_cluster(150, dm=8.0, ebv=0.0, bands=("B", "V", "Ic"), field_fraction=0.0, seed=5)
    r = _fit(t)
    text = r.summary()
    if r.ebv < 1e-3:
        assert np.isfinite(r.ebv_upper) and "E(B-V) <" in text
    assert r.ebv >= 0.0
    assert "+- nan" not in text and "+- 0.000" not in text


def test_parallax_distance_tension_and_combination(field, base):
    t = field.copy()
    rng = np.random.default_rng(3)
    true_plx = 10 ** ((10.0 - 9.0) / 5.0)  # mas, for dm = 9.0: m - M = 10 - 5 log10(plx)
    t["plx"] = true_plx + rng.normal(0, 0.05, len(t)) - 0.017  # Gaia DR3 zero point added
    t["e_plx"] = 0.05
    r = _fit(t)
    assert r.dm_plx == pytest.approx(9.0, abs=3 * r.e_dm_plx)
    assert abs(r.plx_tension) < 3
    assert r.e_dm_combined < min(r.e_dm, r.e_dm_plx) + 1e-12
    assert "parallax:" in r.summary()


def test_one_colour_needs_a_prior_and_prior_is_used():
    t = C.simulate_cluster(120, dm=9.0, ebv=0.3, bands=("B", "V"), field_fraction=0.0, seed=9)
    with pytest.raises(ValueError, match="ebv_prior"):
        C.fit_cluster(t)
    r = _fit(t, ebv_prior=(0.3, 0.01))
    assert abs(r.ebv - 0.3) < 3 * 0.01 and r.ebv_prior == (0.3, 0.01)
    with pytest.raises(ValueError, match="error be > 0"):
        C.fit_cluster(t, ebv_prior=(0.3, 0.0))


def test_cli_options_are_keywords():
    import argparse
    import inspect
    sub = argparse.ArgumentParser().add_subparsers()
    register(sub)
    p = sub.choices["cluster"]
    kws = set(inspect.signature(C.fit_cluster).parameters)
    aliases = {"bootstrap": "method", "no_binaries": "binaries", "keep_evolved": "exclude_evolved",
               "col": "columns", "twocolour": "two_colour"}
    # file options (reading and writing tables, plots) belong to the command, not to the fit
    skip = {"help", "input", "output", "plot", "in_format", "out_format", "overwrite", "quiet", "hdu"}
    for a in p._actions:
        if a.dest in skip:
            continue
        assert aliases.get(a.dest, a.dest) in kws, a.dest
