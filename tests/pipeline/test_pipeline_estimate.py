"""Behaviour of estimate() on hand-made rows (synthetic stars computed from the
calibration, so the expected answers follow from the model, not from demo data)."""
import numpy as np
import pandas as pd
import pytest
from astropy.table import Table

import specpar
from specpar.core.bands import CALIBRATION_COLOURS, band_index
from specpar.calib.tables import default_calibrations, load_calibration, calibration_dir
from specpar.calib.extinction import band_coefficients
from specpar.core.flags import Flag


def synth(sptype, dm, ebv, bands, rv=3.1, law="F99"):
    p = specpar.parse_sptypes([sptype]).iloc[0]
    vals = default_calibrations().evaluate([p["sptnum"]], [p["lc_bright"]], [p["lc_faint"]])
    R = band_coefficients(law, rv)
    row = {"sptype": sptype}
    for b in bands:
        j = band_index(b)
        row[b] = float(vals.absmag[0, j] + dm + ebv * R[j])
        row[f"e_{b}"] = 0.01
    return row


def test_noiseless_star_recovered_exactly_with_many_bands():
    row = synth("K2III", 9.0, 0.4, ["U", "B", "V", "Ic", "J", "H", "Ks"])
    out = specpar.estimate(pd.DataFrame([row]))
    assert out["dm"][0] == pytest.approx(9.0, abs=1e-6)
    assert out["ebv"][0] == pytest.approx(0.4, abs=1e-6)
    assert out["chi2"][0] == pytest.approx(0.0, abs=1e-6) and out["dof"][0] == 5
    assert out["flags"][0] == 0


def test_colour_columns_equal_magnitudes():
    row = synth("F5V", 7.0, 0.3, ["U", "B", "V"])
    mags = pd.DataFrame([row])
    cols = pd.DataFrame([{"sptype": "F5V", "V": row["V"], "e_V": 0.01, "B-V": row["B"] - row["V"],
                          "e_B-V": 0.01, "U-B": row["U"] - row["B"], "e_U-B": 0.01}])
    a, b = specpar.estimate(mags), specpar.estimate(cols)
    assert a["dm"][0] == pytest.approx(b["dm"][0], abs=1e-9)
    assert a["ebv"][0] == pytest.approx(b["ebv"][0], abs=1e-9)


def test_intermediate_class_blends_neighbours_and_widens_scatter():
    out = specpar.estimate(pd.DataFrame([{"sptype": t, "B": 10.0, "V": 9.5} for t in ("G8III", "G8IV", "G8III-IV")]))
    mv = np.asarray(out["mv"])
    assert mv[2] == pytest.approx((mv[0] + mv[1]) / 2)
    assert out["e_mv"][2] > max(out["e_mv"][0], out["e_mv"][1])
    assert out["lum_class"][2] == "III-IV"


def test_negative_reddening_reported_and_flagged_not_clipped():
    # changed deliberately (issue 9 item 5): E(B-V) is now bounded at 0; the unbounded value is
    # still reported (ebv_unbounded and the note) and flagged
    out = specpar.estimate(pd.DataFrame([{"sptype": "B9V", "B": 8.10, "e_B": 0.01, "V": 8.65, "e_V": 0.01}]))
    assert out["ebv_unbounded"][0] < -0.3 and out["ebv"][0] == 0.0
    assert out["flags"][0] & Flag.EBV_NEGATIVE and out["flags"][0] & Flag.EBV_AT_BOUND


def test_type_outside_calibration_flagged_no_extrapolation():
    lo, _ = default_calibrations().by_class["III"].sptnum_range
    out = specpar.estimate(pd.DataFrame([{"sptype": "O5III", "B": 8.0, "V": 8.3}]))
    assert lo > 5 and out["flags"][0] & Flag.TYPE_OUTSIDE_CALIBRATION
    assert out["flags"][0] & Flag.NO_DISTANCE and np.isnan(out["dist_pc"][0])


def test_band_without_calibration_left_out_and_flagged():
    # the giant table gives no (V-Ic)_0 for M6-M8 III (none published to hand)
    cal = default_calibrations().by_class["III"]
    assert np.isnan(cal.evaluate(np.array([66.0])).colours[0, CALIBRATION_COLOURS.index("V-Ic")])
    row = synth("M6III", 12.0, 0.8, ["B", "V"])
    row.update(Ic=8.0, e_Ic=0.02)
    out = specpar.estimate(pd.DataFrame([row]))
    assert out["flags"][0] & Flag.BAND_UNCALIBRATED and out["n_obs"][0] == 2
    assert out["dm"][0] == pytest.approx(12.0, abs=1e-6)


def test_inconsistent_bands_flagged():
    row = synth("G5V", 6.0, 0.2, ["B", "V", "J", "H", "Ks"])
    row["Ks"] += 1.5
    out = specpar.estimate(pd.DataFrame([row]))
    assert out["flags"][0] & Flag.BANDS_DISAGREE


def test_single_band_assumes_no_reddening():
    out = specpar.estimate(pd.DataFrame([{"sptype": "G2V", "V": 9.8, "e_V": 0.02}]))
    assert out["flags"][0] & Flag.EBV_ASSUMED_ZERO and out["ebv"][0] == 0
    assert out["dm"][0] == pytest.approx(9.8 - out["mv"][0])


def test_free_rv_recovered_for_strongly_reddened_star():
    row = synth("B2V", 10.0, 1.5, ["U", "B", "V", "Rc", "Ic", "J", "H", "Ks"], rv=4.2)
    out = specpar.estimate(pd.DataFrame([row]), fit_rv=True)
    assert out["rv"][0] == pytest.approx(4.2, abs=0.06)
    assert out["dm"][0] == pytest.approx(10.0, abs=0.05)
    assert not out["flags"][0] & Flag.RV_UNCONSTRAINED


def test_user_calibration_replaces_class(tmp_path):
    t = load_calibration(calibration_dir() / "dwarfs_V.ecsv").table.copy()
    t["M_V"] += 1.0
    t.meta["name"] = "shifted_dwarfs"
    path = tmp_path / "shifted.ecsv"
    t.write(path, format="ascii.ecsv")
    star = pd.DataFrame([{"sptype": "K0V", "B": 10.9, "V": 10.0}])
    a = specpar.estimate(star)
    b = specpar.estimate(star, calibrations=[path])
    assert b["dm"][0] == pytest.approx(a["dm"][0] - 1.0)
    assert "shifted_dwarfs" in b.attrs["specpar"]["calibrations"]["V"]


def test_column_mapping_and_astropy_table_roundtrip():
    t = Table({"name": ["X-1", "X-2"], "SpT": ["K0III", "A0V"], "Vmag": [9.0, 7.0], "Bmag": [10.1, 7.2]})
    out = specpar.estimate(t, columns={"sptype": "SpT", "V": "Vmag", "B": "Bmag"})
    assert isinstance(out, Table) and list(out["name"]) == ["X-1", "X-2"]
    assert str(out["dist_pc"].unit) == "pc" and "R_V" in out.meta["specpar"]


def test_bad_options_raise_clear_errors():
    star = pd.DataFrame([{"sptype": "K0V", "V": 10.0}])
    with pytest.raises(ValueError, match=r"unknown extinction law 'XYZ'; choose one of"):
        specpar.estimate(star, law="XYZ")
    with pytest.raises(ValueError, match=r"R_V = 9.0 is outside the range of F99"):
        specpar.estimate(star, rv=9.0)
    with pytest.raises(ValueError, match=r"no 'sptype' column"):
        specpar.estimate(pd.DataFrame({"V": [1.0]}))
