"""Colours of the non-dwarf classes against the dwarf colour locus of the Mamajek
table shipped by ``meanstars`` (Pecaut & Mamajek 2013, ApJS 208, 9, Table 5);
skipped when meanstars is not installed."""
import numpy as np
import pytest

import specpar
from specpar.calib.tables import default_calibrations
from specpar.core.bands import CALIBRATION_COLOURS

MeanStars = pytest.importorskip("MeanStars").MeanStars


@pytest.fixture(scope="module")
def dwarf_locus():
    """(B-V, colour) pairs of the Pecaut & Mamajek (2013, ApJS 208, 9, Table 5; online
    version 2022.04.16) mean dwarf sequence, read from the file the meanstars package ships."""
    ms = MeanStars()
    bv = ms.getFloatData("B-V")
    out = {}
    for ours, theirs in (("V-Ic", "V-Ic"), ("V-Ks", "V-Ks"), ("J-H", "J-H"), ("H-Ks", "H-Ks"),
                         ("V-Rc", "V-Rc")):
        y = ms.getFloatData(theirs)
        spt = np.asarray(ms.data["SpT"])
        ok = np.isfinite(bv) & np.isfinite(y) & np.char.endswith(spt.astype(str), "V") & (bv < 0.9)
        order = np.argsort(bv[ok])
        out[ours] = (bv[ok][order], y[ok][order])
    return out


@pytest.mark.parametrize("lc,spt", [("III", "B2"), ("III", "A0"), ("III", "F0"), ("III", "G0"),
                                    ("Ia", "B1"), ("Ib", "A0"), ("Iab", "F5"), ("II", "A0")])
def test_early_type_colours_follow_the_dwarf_colour_locus(lc, spt, dwarf_locus):
    # colour-colour locus of Pecaut & Mamajek 2013 at the row's own (B-V)0, within 0.02 mag
    # (linear vs monotone-cubic interpolation between the dwarf rows)
    cal = default_calibrations().by_class[lc]
    p = specpar.parse_sptypes([spt + lc]).iloc[0]
    c = cal.evaluate(np.array([p["sptnum"]])).colours[0]
    bv0 = c[CALIBRATION_COLOURS.index("B-V")]
    for name, (x, y) in dwarf_locus.items():
        if bv0 < x[0]:
            continue
        assert c[CALIBRATION_COLOURS.index(name)] == pytest.approx(np.interp(bv0, x, y), abs=0.02), name
