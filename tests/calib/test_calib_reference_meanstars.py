"""Checks against the Mamajek dwarf table shipped by ``meanstars`` (Pecaut &
Mamajek 2013, ApJS 208, 9, Table 5); skipped when meanstars is not installed."""
import numpy as np
import pandas as pd
import pytest

import specpar
from specpar.calib.tables import default_calibrations
from specpar.core.bands import band_index

MeanStars = pytest.importorskip("MeanStars").MeanStars


@pytest.fixture(scope="module")
def mamajek():
    """The Pecaut & Mamajek (2013, ApJS 208, 9, Table 5; online version 2022.04.16)
    mean dwarf sequence, as shipped by the meanstars package."""
    ms = MeanStars()
    rows = []
    for spt, mv, bv in zip(ms.data["SpT"], ms.getFloatData("Mv"), ms.getFloatData("B-V")):
        if spt[0] in "OBAFGKM" and spt.endswith("V") and np.isfinite(mv) and np.isfinite(bv):
            rows.append((spt, mv, bv))
    return pd.DataFrame(rows, columns=["spt", "mv", "bv"])


def _dwarf_values(types):
    parsed = specpar.parse_sptypes(types)
    assert (parsed["lc_bright"] == "V").all()
    cal = default_calibrations().by_class["V"]
    return cal.evaluate(parsed["sptnum"].to_numpy())


def test_dwarf_calibration_matches_meanstars_at_every_type(mamajek):
    # Pecaut & Mamajek 2013 Table 5 via meanstars: B-V within 0.01 mag, M_V within 0.02 mag
    vals = _dwarf_values(list(mamajek["spt"]))
    iv, ib = band_index("V"), band_index("B")
    mv, bv = vals.absmag[:, iv], vals.absmag[:, ib] - vals.absmag[:, iv]
    assert len(mamajek) > 60
    np.testing.assert_array_less(np.abs(mv - mamajek["mv"]), 0.02)
    np.testing.assert_array_less(np.abs(bv - mamajek["bv"]), 0.01)


def test_dwarf_interpolation_stays_between_neighbours(mamajek):
    # half-subtypes not in the table lie between their tabulated neighbours (monotone PCHIP)
    vals = _dwarf_values(["G2.5V", "K4.5V", "A1.5V"])
    lo, hi = _dwarf_values(["G2V", "K4V", "A1V"]), _dwarf_values(["G3V", "K5V", "A2V"])
    for k in (band_index("V"), band_index("B")):
        a, b = lo.absmag[:, k], hi.absmag[:, k]
        assert np.all((vals.absmag[:, k] >= np.minimum(a, b) - 1e-9) & (vals.absmag[:, k] <= np.maximum(a, b) + 1e-9))


# Cardelli, Clayton & Mathis (1989, ApJ 345, 245), Table 3: A(lambda)/A(V) for R_V = 3.1
# at the Johnson band wavelengths (micron) listed there.
def test_classic_two_band_solution_with_published_dwarf_values(mamajek):
    # A worked example built from the distance-modulus formula with Pecaut & Mamajek values
    # (read from meanstars, not from specpar): G2V, V = 10.00, B - V = 0.95.
    row = mamajek.set_index("spt").loc["G2V"]
    V, BV = 10.00, 0.95
    ebv = BV - row["bv"]                     # E(B-V) = (B-V) - (B-V)_0
    av = 3.1 * ebv                           # A_V = R_V E(B-V)
    dm = V - row["mv"] - av                  # m - M - A_V = 5 log10(d / 10 pc)
    d = 10 ** (dm / 5 + 1)
    out = specpar.estimate(pd.DataFrame({"sptype": ["G2V"], "B": [V + BV], "V": [V],
                                         "e_B": [0.01], "e_V": [0.01]}), law="CCM89", rv=3.1)
    assert out["ebv"][0] == pytest.approx(ebv, abs=1e-9)
    assert out["av"][0] == pytest.approx(av, abs=1e-9)
    assert out["dm"][0] == pytest.approx(dm, abs=1e-9)
    assert out["dist_pc"][0] == pytest.approx(d, rel=1e-9)
    assert out["plx_phot_mas"][0] == pytest.approx(1000 / d, rel=1e-9)
    # the 16-84 interval brackets the median, asymmetric in distance
    lo, hi = out["dist_lo_pc"][0], out["dist_hi_pc"][0]
    assert lo < d < hi and (hi - d) > (d - lo)
