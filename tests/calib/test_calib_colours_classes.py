"""Intrinsic colours of the non-dwarf classes (IV, III, II, Ib, Iab, Ia).

(1) The user-trial case: a reddened OB supergiant with V and 2MASS J, H, Ks gets a
    measured E(B-V), and an A0 III with only J, H, Ks gets a distance (synthetic stars
    from our own tables: this proves the solver uses the new colours, not the science).
(2) Colours are monotone in spectral type where physics says so.
(3) The colours agree with the published values they were taken from, at listed types.
The check against real stars (Hipparcos photometry) is in test_colours_realdata.py.
"""
import numpy as np
import pandas as pd
import pytest

import specpar
from specpar.core.bands import CALIBRATION_COLOURS, band_index, chain_matrices
from specpar.calib.tables import default_calibrations
from specpar.calib.extinction import DEFAULT_LAW, band_coefficients
from specpar.core.flags import Flag
NONDWARF = ("IV", "III", "II", "Ib", "Iab", "Ia")
MY_COLOURS = ("V-Rc", "V-Ic", "V-Ks", "J-H", "H-Ks", "G-V", "BP-RP", "G-RP")


def _absmag(sptype):
    p = specpar.parse_sptypes([sptype]).iloc[0]
    vals = default_calibrations().evaluate([p["sptnum"]], [p["lc_bright"]], [p["lc_faint"]])
    return vals.absmag[0]


def _observed(sptype, dm, ebv, bands, rng=None, sigma=0.0):
    """Apparent magnitudes of a star of this type, reddened with the package's own
    extinction coefficients (default law, R_V = 3.1)."""
    m = _absmag(sptype)
    R = band_coefficients(DEFAULT_LAW, 3.1)
    row = {"sptype": sptype}
    for b in bands:
        j = band_index(b)
        noise = rng.normal(0.0, sigma) if rng is not None else 0.0
        row[b] = float(m[j] + dm + ebv * R[j] + noise)
        row[f"e_{b}"] = max(sigma, 0.01)
    return row


# --- (1) user-trial case --------------------------------------------------------------

def test_ob_supergiant_with_v_and_2mass_gets_measured_reddening():
    truth_dm, truth_ebv = 12.5, 0.65
    row = _observed("B1Ia", truth_dm, truth_ebv, ["V", "J", "H", "Ks"])
    out = specpar.estimate(pd.DataFrame([row]))
    flags = int(out["flags"][0])
    assert not flags & Flag.EBV_ASSUMED_ZERO and not flags & Flag.BAND_UNCALIBRATED
    assert out["n_obs"][0] == 4
    assert out["ebv"][0] == pytest.approx(truth_ebv, abs=1e-6)
    assert out["e_ebv"][0] > 0
    assert out["dist_lo_pc"][0] < 10 ** (truth_dm / 5 + 1) < out["dist_hi_pc"][0]


@pytest.mark.parametrize("sptype", ["B1Ia", "B1Ib", "B1Iab", "B5II", "F5Ib", "K0Iab", "M2Ia"])
def test_supergiants_with_noisy_v_jhks_cover_the_true_reddening(sptype):
    # seeded: 300 stars whose intrinsic colours scatter by the table's colour_scatter and
    # whose photometry has 0.02 mag noise; the 1-sigma E(B-V) interval should hold the
    # truth for at least 68 % of them.  The solver's interval also carries the spectral-type
    # (+-0.5 subclass) and R_V (+-0.2) uncertainties, which this simulation does not draw,
    # so coverage above 68 % is expected; the interval must still be informative.
    rng = np.random.default_rng(20261202)
    p = specpar.parse_sptypes([sptype]).iloc[0]
    cal = default_calibrations().by_class[p["lc_bright"]]
    v = cal.evaluate(np.array([p["sptnum"]]))
    P, _ = chain_matrices()
    R = band_coefficients(DEFAULT_LAW, 3.1)
    bands = ["V", "J", "H", "Ks"]
    idx = [band_index(b) for b in bands]
    n = 300
    cols = np.nan_to_num(v.colours[0]) + cal.colour_scatter * rng.standard_normal((n, len(CALIBRATION_COLOURS)))
    absmag = v.absmag[0, band_index("V")] + cols @ P.T
    mags = absmag[:, idx] + 12.0 + 0.5 * R[idx] + rng.normal(0.0, 0.02, (n, len(bands)))
    frame = pd.DataFrame(mags, columns=bands)
    for b in bands:
        frame[f"e_{b}"] = 0.02
    frame.insert(0, "sptype", sptype)
    out = specpar.estimate(frame)
    flags = np.asarray(out["flags"], dtype=np.int64)
    assert not np.any(flags & int(Flag.EBV_ASSUMED_ZERO | Flag.NO_DISTANCE))
    z = (np.asarray(out["ebv"]) - 0.5) / np.asarray(out["e_ebv"])
    assert np.mean(np.abs(z) < 1) >= 0.68
    assert np.median(out["e_ebv"]) < 0.15


def test_a0_giant_with_only_jhks_gets_a_distance():
    truth_dm, truth_ebv = 9.0, 0.3
    row = _observed("A0III", truth_dm, truth_ebv, ["J", "H", "Ks"])
    out = specpar.estimate(pd.DataFrame([row]))
    flags = int(out["flags"][0])
    assert not flags & Flag.NO_DISTANCE and not flags & Flag.BAND_UNCALIBRATED
    assert np.isfinite(out["dist_pc"][0])
    assert out["dm"][0] == pytest.approx(truth_dm, abs=1e-6)
    assert out["dist_lo_pc"][0] < 10 ** (truth_dm / 5 + 1) < out["dist_hi_pc"][0]


@pytest.mark.parametrize("lc", NONDWARF)
def test_every_class_has_2mass_and_cousins_over_its_whole_m_v_range(lc):
    cal = default_calibrations().by_class[lc]
    t = cal.table
    for c in ("V-Ic", "V-Ks", "J-H", "H-Ks"):
        vals = np.ma.filled(np.ma.asarray(t[c], dtype=float), np.nan)
        if lc == "III" and c == "V-Ic":
            vals = vals[np.asarray(t["sptnum"]) < 66]  # M6-M8 III: no V-Ic (none published to hand)
        assert np.all(np.isfinite(vals[1:])), (lc, c)  # O9/B0 may lack only V-Rc
    assert {"V", "Ic", "J", "H", "Ks"} <= set(cal.bands)


def test_type_coverage_extended():
    by = default_calibrations().by_class
    assert by["IV"].sptnum_range[1] >= 55.0   # subgiants at least to K5
    assert by["III"].sptnum_range[1] >= 68.0  # giants to M8


# --- (2) smooth and monotone ------------------------------------------------------------

def _column(lc, c):
    t = default_calibrations().by_class[lc].table
    x = np.asarray(t["sptnum"], float)
    y = np.ma.filled(np.ma.asarray(t[c], dtype=float), np.nan)
    ok = np.isfinite(y)
    return x[ok], y[ok]


@pytest.mark.parametrize("lc", NONDWARF)
@pytest.mark.parametrize("colour", ["V-Rc", "V-Ic", "V-Ks", "BP-RP"])
def test_colour_increases_from_b_to_m(lc, colour):
    # common practice: V-Rc, V-Ic, V-Ks and BP-RP of normal stars grow monotonically
    # with decreasing temperature, i.e. with spectral type, within a luminosity class
    x, y = _column(lc, colour)
    assert len(x) >= 10
    assert np.all(np.diff(y) > 0), (lc, colour, y)
    # and the interpolated curve between rows is monotone too (PCHIP), half-subtype steps
    cal = default_calibrations().by_class[lc]
    fine = np.arange(x[0], x[-1] + 1e-9, 0.5)
    vals = cal.evaluate(fine).colours[:, CALIBRATION_COLOURS.index(colour)]
    assert np.all(np.diff(vals) > 0)


@pytest.mark.parametrize("lc", NONDWARF)
def test_near_infrared_colours_increase_up_to_early_m(lc):
    # J-H and H-Ks of giants and supergiants redden from B to early M (Bessell & Brett
    # 1988 Table III for giants; common practice for the other classes)
    for c in ("J-H", "H-Ks"):
        x, y = _column(lc, c)
        y = y[x <= 65]
        assert np.all(np.diff(y) >= 0), (lc, c, y)


@pytest.mark.parametrize("lc", NONDWARF)
def test_g_minus_v_decreases_to_the_red(lc):
    x, y = _column(lc, "G-V")
    # common practice: G-V falls monotonically to the red from A0 on (flat near A0)
    assert np.all(np.diff(y[x >= 20]) <= 0), (lc, y)
    assert np.all(np.diff(y[x >= 30]) < 0), (lc, y)


@pytest.mark.parametrize("lc", NONDWARF)
def test_no_jumps_between_neighbouring_rows(lc):
    # smoothness: between tabulated neighbours V-Ks changes by less than 0.45 mag per
    # subclass everywhere except the late-M giants (M4-M8 III: ~0.5-1.2 mag per subclass,
    # Bessell & Brett 1988 Table III)
    x, y = _column(lc, "V-Ks")
    step = np.diff(y) / np.diff(x)
    early = x[1:] <= 63
    assert np.all(step[early] < 0.45), (lc, step)


# --- (3) agreement with the published values ---------------------------------------------

def _bb_to_2mass(vk, jh, hk):
    # Carpenter 2001, AJ 121, 2851, Appendix A (Bessell & Brett system -> 2MASS; from memory)
    return vk + 0.039 - 0.001 * (jh + hk), 0.990 * jh - 0.049, 0.971 * hk + 0.034


# Bessell & Brett 1988, PASP 100, 1134, Table III, giants (V-K, J-H, H-K; from memory)
BB88_GIANTS = {"G8": (2.16, 0.50, 0.08), "K0": (2.31, 0.54, 0.09), "K3": (3.00, 0.68, 0.14),
               "K5": (3.60, 0.79, 0.17), "M0": (3.85, 0.83, 0.19), "M2": (4.30, 0.87, 0.22),
               "M5": (5.96, 0.95, 0.29), "M6": (6.84, 0.96, 0.30), "M7": (7.80, 0.96, 0.33)}


@pytest.mark.parametrize("spt", sorted(BB88_GIANTS))
def test_giant_2mass_colours_match_bessell_brett_1988(spt):
    cal = default_calibrations().by_class["III"]
    p = specpar.parse_sptypes([spt + "III"]).iloc[0]
    c = cal.evaluate(np.array([p["sptnum"]])).colours[0]
    vks, jh, hks = _bb_to_2mass(*BB88_GIANTS[spt])
    assert c[CALIBRATION_COLOURS.index("V-Ks")] == pytest.approx(vks, abs=0.01)
    assert c[CALIBRATION_COLOURS.index("J-H")] == pytest.approx(jh, abs=0.01)
    assert c[CALIBRATION_COLOURS.index("H-Ks")] == pytest.approx(hks, abs=0.01)


@pytest.mark.parametrize("spt", ["B0", "A0", "F0", "G0", "K0", "K3", "K5"])
def test_subgiant_colours_lie_between_dwarfs_and_giants(spt):
    by = default_calibrations().by_class
    n = specpar.parse_sptypes([spt + "V"]).iloc[0]["sptnum"]
    v, iii, iv = (by[k].evaluate(np.array([n])).colours[0] for k in ("V", "III", "IV"))
    for c in MY_COLOURS:
        k = CALIBRATION_COLOURS.index(c)
        if np.isfinite(iv[k]):
            assert iv[k] == pytest.approx(0.5 * (v[k] + iii[k]), abs=1e-3), c


def test_every_row_names_its_colour_source():
    for lc in NONDWARF:
        t = default_calibrations().by_class[lc].table
        for row in t:
            have = [c for c in MY_COLOURS if not np.ma.is_masked(row[c])]
            assert all(c in row["source"] for c in have), (lc, row["sptype"])
            assert "from memory" in row["source"] or "copied" in row["source"]
