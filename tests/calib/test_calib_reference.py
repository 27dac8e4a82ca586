"""Checks of the main job against sources outside specpar: the published CCM89
extinction ratios, astropy's distance-modulus conversion and a few published
anchors (the checks against the ``meanstars`` dwarf table are in
test_calib_reference_meanstars.py)."""
import astropy.units as u
import pandas as pd
import pytest
from astropy.coordinates import Distance
from dust_extinction.parameter_averages import CCM89, G23

import specpar
from specpar.core.bands import BANDS, band_index
from specpar.calib.tables import default_calibrations
from specpar.calib.extinction import band_coefficients
from specpar.core.distance import dm_to_pc
CCM_TABLE3 = {"U": (0.365, 1.569), "B": (0.440, 1.337), "J": (1.25, 0.282), "H": (1.60, 0.190), "K": (2.2, 0.114)}


def _dwarf_values(types):
    parsed = specpar.parse_sptypes(types)
    assert (parsed["lc_bright"] == "V").all()
    cal = default_calibrations().by_class["V"]
    return cal.evaluate(parsed["sptnum"].to_numpy())


def test_dust_extinction_reproduces_ccm89_table3():
    model = CCM89(Rv=3.1)
    for band, (lam, ratio) in CCM_TABLE3.items():
        assert model(lam * u.micron) == pytest.approx(ratio, rel=0.02), band


@pytest.mark.parametrize("ours,theirs", [("U", "U"), ("B", "B")])
def test_optical_band_ratios_ccm89_against_table3(ours, theirs):
    # within 2 %: our U is at 0.366 micron (CCM 0.365); our B ratio is fixed by definition
    # to 1 + 1/R_V (E(B-V) = A_B - A_V), 1.1 % below the monochromatic value at 0.44 micron
    r = band_coefficients("CCM89", 3.1)
    assert r[band_index(ours)] / r[band_index("V")] == pytest.approx(CCM_TABLE3[theirs][1], rel=0.02)


@pytest.mark.parametrize("ours,theirs", [("J", "J"), ("H", "H"), ("Ks", "K")])
def test_infrared_band_ratios_ccm89_against_table3(ours, theirs):
    # CCM89 eq. (2) makes the infrared curve a power law A(lambda) ~ lambda^-1.61, so the
    # Table 3 value is carried from CCM's wavelength to our 2MASS effective wavelength exactly;
    # agreement within 1.5 % (the table is given to 3 decimals)
    lam_table, ratio = CCM_TABLE3[theirs]
    lam_ours = BANDS[band_index(ours)].wavelength_um
    expect = ratio * (lam_table / lam_ours) ** 1.61
    r = band_coefficients("CCM89", 3.1)
    assert r[band_index(ours)] / r[band_index("V")] == pytest.approx(expect, rel=0.015)


def test_g23_coefficients_come_from_dust_extinction():
    # Gordon et al. 2023 curve from dust_extinction at the Ks effective wavelength
    r = band_coefficients("G23", 3.1)
    model = G23(Rv=3.1)
    expect = 3.1 * model(2.159 * u.micron) / model(0.545 * u.micron)
    assert r[band_index("Ks")] == pytest.approx(float(expect), rel=1e-9)


def test_five_magnitudes_is_factor_100_in_flux():
    # Pogson's scale (common practice): Delta m = 5 <=> flux ratio 100 <=> distance ratio 10
    d1, d2 = dm_to_pc(7.0), dm_to_pc(12.0)
    assert (d2 / d1) ** 2 == pytest.approx(100.0, rel=1e-12)


@pytest.mark.parametrize("dm", [-1.0, 0.0, 5.0, 10.3, 17.5])
def test_distance_modulus_agrees_with_astropy(dm):
    # astropy.coordinates.Distance(distmod=...) as the reference implementation
    assert dm_to_pc(dm) == pytest.approx(Distance(distmod=dm * u.mag).to_value(u.pc), rel=1e-12)


def test_parsec_in_light_years_from_astropy():
    # common practice: 1 pc = 3.2616 ly; the value used anywhere comes from astropy units
    assert (1 * u.pc).to_value(u.lyr) == pytest.approx(3.2616, abs=1e-4)


def test_a0v_has_zero_intrinsic_colour():
    # common practice (zero point of the UBV system): A0V has (B-V)_0 = 0
    vals = _dwarf_values(["A0V"])
    assert vals.absmag[0, band_index("B")] - vals.absmag[0, band_index("V")] == pytest.approx(0.0, abs=0.005)


def test_sun_like_dwarf_absolute_magnitude():
    # The Sun is G2V with M_V = 4.81 (Willmer 2018, ApJS 236, 47) to 4.83 (Mamajek et al. 2015,
    # IAU 2015 Resolution B3 nominal values); the mean G2V dwarf in Pecaut & Mamajek is 4.80.
    mv = _dwarf_values(["G2V"]).absmag[0, band_index("V")]
    assert 4.78 <= mv <= 4.85


@pytest.mark.parametrize("sptype", ["K0III", "K0.5III", "K1III"])
def test_red_clump_ks_absolute_magnitude(sptype):
    # Hawkins et al. 2017 (MNRAS 471, 722): red clump M_Ks = -1.61 (scatter ~0.2 mag);
    # checked through our giant M_V and (V-Ks)_0.
    parsed = specpar.parse_sptypes([sptype])
    vals = default_calibrations().by_class["III"].evaluate(parsed["sptnum"].to_numpy())
    assert vals.absmag[0, band_index("Ks")] == pytest.approx(-1.61, abs=0.2)


def test_output_metadata_states_assumptions():
    t = specpar.estimate(pd.DataFrame({"sptype": ["K0III"], "B": [9.0], "V": [8.0]}), law="G23", rv=3.4)
    meta = t.attrs["specpar"]
    assert meta["extinction_law"] == "G23" and meta["R_V"] == 3.4
    assert "Pecaut" in meta["calibrations"]["V"] and "tens of per cent" in meta["assumptions"]
