"""Main-sequence fitting of star clusters (specpar.cluster).

External anchors: the reddening line E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V)
(Hiltner & Johnson 1956, ApJ 124, 367; from memory), the (B-V)_0 = 0.332 Q
relation for early B stars (Johnson 1958, Lowell Obs. Bull. 4, 37; from
memory), the mean dwarf masses of the Mamajek table shipped by MeanStars, and
the 0.75 mag brightening of an equal-mass unresolved pair (common practice).
Synthetic clusters drawn from the locus are round-trip checks beside these.
No published cluster result with data carried by the package registries was
found, so there is no external cluster test.
"""
import numpy as np
import pandas as pd
import pytest
from astropy.table import Table

from specpar import cluster as C
from specpar.core.bands import BAND_NAMES, band_index
from specpar.calib.tables import default_calibrations
from specpar.cli.main import main
from specpar.cluster.locus import build_locus, clouds, dwarf_masses
from specpar.cluster.reddening import reddening_vectors

TRUE_DM, TRUE_EBV = 10.5, 0.4


@pytest.fixture(scope="module")
def field():
    """A synthetic UBVI cluster field: 30 % binaries, 20 % field dwarfs."""
    return C.simulate_cluster(320, dm=TRUE_DM, ebv=TRUE_EBV, binary_fraction=0.3,
                              field_fraction=0.2, seed=11)


@pytest.fixture(scope="module")
def fit(field):
    return C.fit_cluster(field)


# ----------------------------------------------------------------------------- published relations

def test_reddening_line_slope_published():
    # Hiltner & Johnson 1956 (from memory): E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V)
    assert C.ub_excess_ratio(0.0) == pytest.approx(0.72)
    assert C.ub_excess_ratio(1.0) == pytest.approx(0.77)
    lin, quad = reddening_vectors("F99", 3.1, "empirical")
    iu, ib = band_index("U"), band_index("B")
    for e in (0.2, 1.0, 2.0):
        e_ub = (lin[iu] - lin[ib]) * e + (quad[iu] - quad[ib]) * e ** 2
        assert e_ub / e == pytest.approx(0.72 + 0.05 * e, abs=1e-12)


def test_q_is_reddening_free_to_first_order():
    # Johnson & Morgan 1953 (from memory): Q = (U-B) - 0.72 (B-V) does not change with
    # reddening along a slope of 0.72; the 0.05 E^2 curvature is all that remains
    ub0, bv0 = -0.581, -0.156  # a B5 dwarf in the shipped table (Pecaut & Mamajek 2013)
    for e in (0.3, 1.0):
        q = C.q_index(ub0 + e * C.ub_excess_ratio(e), bv0 + e)
        assert q - C.q_index(ub0, bv0) == pytest.approx(0.05 * e ** 2, abs=1e-12)


@pytest.mark.parametrize("q", [-0.85, -0.7, -0.55, -0.4, -0.3, -0.2, -0.15])
def test_q_to_intrinsic_colour_matches_johnson_1958(q):
    # Johnson 1958 (from memory): (B-V)_0 = 0.332 Q for early B stars. The dwarf locus
    # (Pecaut & Mamajek 2013) gives a slightly bluer curve; agreement within 0.03 mag.
    assert C.intrinsic_bv_from_q(q) == pytest.approx(0.332 * q, abs=0.03)


def test_q_outside_early_types_is_not_extrapolated():
    assert np.isnan(C.intrinsic_bv_from_q(-1.3)) and np.isnan(C.intrinsic_bv_from_q(0.3))


def test_dwarf_masses_copied_from_meanstars():
    # E. Mamajek's mean dwarf table v2022.04.16, Msun column, as shipped by MeanStars
    MeanStars = pytest.importorskip("MeanStars").MeanStars
    ms = MeanStars()
    ref = dict(zip(ms.data["SpT"], ms.getFloatData("Msun")))
    from specpar.core.sptype import parse_sptypes
    spts = [s for s in ref if s[0] in "OBAFGKM" and s.endswith("V") and np.isfinite(ref[s])]
    num = parse_sptypes(spts)["sptnum"].to_numpy(float)
    table = dict(zip(dwarf_masses()["sptnum"], dwarf_masses()["mass"]))
    for s, x in zip(spts, num):
        assert table[float(x)] == pytest.approx(ref[s], rel=1e-9), s


def test_binary_sequence_at_most_075_mag_brighter():
    # common practice: two identical stars give 2.5 log10(2) = 0.753 mag more light; a
    # companion of mass ratio q < 1 gives less, approaching it as q -> 1
    cal = default_calibrations().by_class["V"]
    need = np.isin(BAND_NAMES, ["B", "V"])
    loc = build_locus(cal, need)
    L = np.zeros((2, len(BAND_NAMES)))
    L[0, band_index("V")] = 1
    L[1, band_index("B")] = 1
    single, binary = clouds(loc, L, 0, 10.0, 50, 0.05)
    gain = loc.at(binary.spt)[:, band_index("V")] - binary.m_ord
    assert gain.max() <= 2.5 * np.log10(2) + 1e-9 and gain.min() >= -1e-9
    assert np.median(gain[binary.q == binary.q.max()]) > 0.7
    assert np.median(gain[binary.q == binary.q.min()]) < 0.01


# ----------------------------------------------------------------------------- round trip

def test_recovers_synthetic_cluster(fit, field):
    # synthetic cluster drawn from the locus (round trip): within 3 quoted sigma
    assert abs(fit.dm - TRUE_DM) < 3 * fit.e_dm
    assert abs(fit.ebv - TRUE_EBV) < 3 * fit.e_ebv
    assert 0.0 < fit.e_dm_stat < 0.1 and 0.0 < fit.e_ebv_stat < 0.02  # statistical part
    assert fit.e_dm > fit.e_dm_stat and fit.e_ebv > fit.e_ebv_stat  # totals add systematics
    assert -1 < fit.corr < 1
    assert fit.dist_lo_pc < fit.dist_pc < fit.dist_hi_pc
    assert fit.dist_pc == pytest.approx(10 ** (fit.dm / 5 + 1))
    assert abs(fit.binary_fraction - 0.3) < 0.15
    assert 0.05 < fit.field_fraction < 0.3
    m = fit.members
    member = np.asarray(field["sim_member"])
    assert np.mean(m["p_member"][member]) > 0.9
    # stars set aside (past the locus' end, evolved) have no p_member: nanmean
    assert np.nanmean(m["p_member"][~member]) < 0.7


def test_two_colour_and_q_method_agree_with_truth(fit):
    assert abs(fit.ebv_twocolour - TRUE_EBV) < 3 * fit.e_ebv_twocolour + 0.005
    assert fit.n_q > 20
    assert abs(fit.ebv_q - TRUE_EBV) < 3 * fit.e_ebv_q


def test_every_row_returned_with_flags():
    t = C.simulate_cluster(60, dm=9.0, ebv=0.2, bands=("B", "V"), field_fraction=0.0, seed=2)
    t["V"] = t["V"].astype(object)
    t["V"][0] = "n/a"
    t["V"][1] = np.nan
    t["B"][2] = np.nan
    # one colour: a known E(B-V) is needed (prior), else the fit refuses (see test_cluster_real)
    res = C.fit_cluster(t, two_colour=False, ebv_prior=(0.2, 0.02))
    m = res.members
    assert len(m) == len(t) and list(m["id"]) == list(t["id"])
    assert not m["used"][0] and not m["used"][1] and not m["used"][2]
    assert m["flags"][0] & C.ClusterFlag.PHOT_REJECTED and m["flags"][0] & C.ClusterFlag.NOT_USED
    assert "NO_ORDINATE" in m["flag_codes"][1]
    assert "NO_COLOUR" in m["flag_codes"][2] and "colour" in m["note"][2]
    assert np.isnan(m["p_member"][0]) and np.all(np.isfinite(m["p_member"][m["used"]]))
    assert res.n_used == len(t) - 3
    assert "flag_bits" in m.meta["specpar"] and m.meta["specpar"]["cluster_fit"]["n_used"] == res.n_used


def test_dataframe_in_dataframe_out():
    t = C.simulate_cluster(60, dm=9.0, ebv=0.2, bands=("B", "V", "Ic"), seed=4).to_pandas()
    res = C.fit_cluster(t, two_colour=False)
    assert isinstance(res.members, pd.DataFrame) and len(res.members) == len(t)
    assert res.observables == ("V", "B", "Ic") or set(res.observables) == {"V", "B", "Ic"}


def test_bootstrap_is_reproducible_and_close_to_profile():
    t = C.simulate_cluster(100, dm=9.5, ebv=0.3, bands=("B", "V", "Ic"), seed=5)
    a = C.fit_cluster(t, method="bootstrap", n_boot=10, seed=3)
    b = C.fit_cluster(t, method="bootstrap", n_boot=10, seed=3)
    c = C.fit_cluster(t, method="bootstrap", n_boot=10, seed=4)
    p = C.fit_cluster(t)
    assert a.as_dict() == b.as_dict()
    assert a.e_dm != c.e_dm
    assert a.dm == p.dm  # the estimate itself is the same; only its errors differ
    assert 0.4 < a.e_dm / p.e_dm < 2.5 and 0.4 < a.e_ebv / p.e_ebv < 2.5


def test_user_locus_shifts_distance(tmp_path):
    # a locus 0.3 mag fainter everywhere (e.g. a zero-age sequence) gives dm 0.3 mag smaller
    base = default_calibrations().by_class["V"].table
    zams = Table(base, copy=True)
    zams["M_V"] = zams["M_V"] + 0.3
    zams.meta["name"] = "fainter_test_locus"
    path = tmp_path / "locus.ecsv"
    zams.write(path, format="ascii.ecsv")
    t = C.simulate_cluster(200, dm=10.0, ebv=0.25, bands=("B", "V", "Ic"), seed=6, locus="field")
    a = C.fit_cluster(t, two_colour=False, locus="field")
    b = C.fit_cluster(t, locus=path, two_colour=False)
    assert b.dm - a.dm == pytest.approx(-0.3, abs=0.03)
    assert b.ebv == pytest.approx(a.ebv, abs=0.01)
    assert "fainter_test_locus" in b.locus


def test_membership_column_fixes_field_odds(field):
    t = Table(field, copy=True)
    t["pmem"] = np.where(t["sim_member"], 0.9, 0.1)
    res = C.fit_cluster(t, membership="pmem", two_colour=False)
    used = np.asarray(res.members["used"], bool)  # stars set aside carry no prior
    assert res.field_fraction == pytest.approx(np.mean(1 - t["pmem"][used]))
    assert np.isnan(res.e_field_fraction)
    assert abs(res.dm - TRUE_DM) < 3 * res.e_dm + 0.02


def test_bright_limit_excludes_turn_off(field):
    res = C.fit_cluster(field, bright_limit=10.0, two_colour=False)
    m = res.members
    bright = np.asarray(field["V"]) < 10.0
    assert bright.any() and not np.any(m["used"][bright])
    assert np.all(m["flags"][bright] & C.ClusterFlag.MAG_LIMIT)


# ----------------------------------------------------------------------------- statistics

@pytest.mark.slow
def test_pull_distribution_over_many_seeds():
    # synthetic clusters: 30 % binaries, 20 % field dwarfs at other distances, errors growing
    # to the faint end; the pulls (fit - truth) / quoted error must be ~ N(0, 1)
    pulls = []
    for seed in range(30):
        t = C.simulate_cluster(240, dm=11.0, ebv=0.45, binary_fraction=0.3, field_fraction=0.2,
                               mag_range=(9.0, 19.0), seed=100 + seed)
        r = C.fit_cluster(t, two_colour=False)
        # statistical part only: these clusters realise none of the systematic terms that the
        # total errors add (test_cluster_pulls.py draws those and checks the totals)
        pulls.append(((r.dm - 11.0) / r.e_dm_stat, (r.ebv - 0.45) / r.e_ebv_stat))
    pulls = np.array(pulls)
    mean, width = pulls.mean(axis=0), pulls.std(axis=0, ddof=1)
    print(f"pulls dm: mean {mean[0]:+.2f} width {width[0]:.2f}; "
          f"E(B-V): mean {mean[1]:+.2f} width {width[1]:.2f}")
    # 30 draws: the mean has a standard error of 0.18, the width ~0.13
    assert np.all(np.abs(mean) < 0.55)
    assert np.all((width > 0.65) & (width < 1.45))


def test_q_method_recovers_ebv_of_early_type_stars():
    # synthetic O-B6 dwarfs (no binaries, no field) reddened by E(B-V) = 0.6: the per-star
    # Q-method value must agree with the truth within the photometric error
    t = C.simulate_cluster(150, dm=9.0, ebv=0.6, bands=("U", "B", "V"), mag_range=(5.5, 10.5),
                           binary_fraction=0.0, field_fraction=0.0, error_floor=0.01,
                           error_scale=0.01, width=0.005, seed=8)
    res = C.fit_cluster(t, width=0.005)
    m = res.members
    ok = np.isfinite(m["ebv_q"])
    assert ok.sum() > 100
    z = (m["ebv_q"][ok] - 0.6) / m["e_ebv_q"][ok]
    assert np.mean(np.abs(z) < 3) > 0.97
    assert abs(res.ebv_q - 0.6) < 3 * res.e_ebv_q


# ----------------------------------------------------------------------------- bad input

def test_too_few_stars_api():
    t = C.simulate_cluster(5, dm=9.0, ebv=0.2, bands=("B", "V", "Ic"), field_fraction=0.0, seed=1)
    with pytest.raises(ValueError, match="at least 10"):
        C.fit_cluster(t)


def _cli(tmp_path, table, *extra):
    path = tmp_path / "in.csv"
    table.write(path, format="ascii.csv", overwrite=True)
    return main(["cluster", str(path), *extra])


def test_cli_bad_inputs(tmp_path, capsys, field):
    cases = {
        "at least 10": field[:5],
        "no colour": Table({"id": field["id"], "V": field["V"]}),
        "locus can reach": Table({"id": field["id"][:40], "V": field["V"][:40],
                                  "B": field["V"][:40] + 7.5, "Ic": field["V"][:40] - 9.0}),
        "only one colour": Table({"id": field["id"], "V": field["V"], "B": field["B"]}),
    }
    for needle, table in cases.items():
        rc = _cli(tmp_path, table)
        err = capsys.readouterr().err
        assert rc == 1 and needle in err and "Traceback" not in err
        assert err.count("\n") == 1


def test_cli_bad_option(tmp_path, capsys, field):
    rc = _cli(tmp_path, field[:50], "--ebv-range", "0.5")
    err = capsys.readouterr().err
    assert rc == 1 and "LO HI or LO,HI" in err


def test_cli_writes_members_and_diagrams(tmp_path, capsys, field):
    t = Table(field, copy=True)
    t.remove_columns([c for c in t.colnames if c.startswith("sim_")])
    out, cmd, tc = tmp_path / "members.ecsv", tmp_path / "cmd.png", tmp_path / "tc.pdf"
    rc = _cli(tmp_path, t, "-o", str(out), "--plot", str(cmd), "--twocolour", str(tc),
              "--bands", "U,B,V,Ic", "--dm-range=-1,20")
    text = capsys.readouterr().out
    assert rc == 0 and "distance modulus" in text and "E(B-V)" in text
    m = Table.read(out)
    assert len(m) == len(t) and "p_member" in m.colnames
    assert cmd.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert tc.read_bytes()[:5] == b"%PDF-"
    # never over the input, never over an existing file without --overwrite
    rc = main(["cluster", str(tmp_path / "in.csv"), "-o", str(tmp_path / "in.csv")])
    assert rc == 1 and "input" in capsys.readouterr().err
    rc = main(["cluster", str(tmp_path / "in.csv"), "--plot", str(cmd)])
    assert rc == 1 and "exists" in capsys.readouterr().err
