"""The Cepheid relations hold over exactly the published period range of their calibrators.

Benedict et al. 2007, AJ 133, 1810: ten Galactic Cepheids with HST parallaxes,
periods 3.7-35.6 d (from memory); their V, Ic, Ks and W_VI relations must accept
both ends of that range and reject periods beyond it (never extrapolated).
"""
import numpy as np
import pandas as pd
import pytest

from specpar import estimate
from specpar.calib.cepheid_pl import load_pl_calibration
from specpar.core.flags import Flag


@pytest.mark.parametrize("name", ["V", "Ic", "Ks", "W_VI"])
def test_limits_are_the_calibrators_periods(name):
    rel = load_pl_calibration().relations[name]
    # the stored limits are log10 of 3.7 d and 35.6 d, not rounded inwards
    assert 10 ** rel.logp_min == pytest.approx(3.7, abs=1e-9)
    assert 10 ** rel.logp_max == pytest.approx(35.6, abs=1e-9)
    assert rel.inside(np.log10([3.7, 35.56, 35.6])).all()
    assert not rel.inside(np.log10([3.6, 36.0])).any()


def test_longest_period_calibrator_gets_a_distance():
    # a 35.56-day fundamental-mode Cepheid (log P = 1.551) with V and Ic
    df = pd.DataFrame({"id": ["SPX-0001", "SPX-0002"], "period_d": [35.56, 37.0], "pmode": ["F", "F"],
                       "V": [9.0, 9.0], "Ic": [7.8, 7.8]})
    out = estimate(df)
    flags = out["flags"].to_numpy()
    assert not flags[0] & Flag.PERIOD_OUT_OF_RANGE, out.note[0]
    assert np.isfinite(out.dm[0])
    assert flags[1] & Flag.PERIOD_OUT_OF_RANGE
    assert "3.7-35.6 d" in out.note[1]
