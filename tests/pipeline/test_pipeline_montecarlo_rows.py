"""Monte Carlo mode must treat rows it cannot solve exactly as analytic mode does.

Reference: analytic mode of the same code (first-order propagation, common
practice); a row with no usable magnitude has no distance in either mode.
"""
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import specpar
from specpar.core.flags import Flag

SAMPLES = Path(__file__).resolve().parents[2] / "samples"


@pytest.mark.parametrize("name", ["survey.csv", "survey_parallaxes.csv", "pulsators.csv"])
def test_flags_equal_in_both_modes_on_every_sample_row(name):
    t = pd.read_csv(SAMPLES / name)
    a = specpar.estimate(t)
    m = specpar.estimate(t, method="mc", n_draws=200, seed=3)
    assert len(a) == len(m) == len(t)
    fa, fm = a["flags"].to_numpy(np.int64), m["flags"].to_numpy(np.int64)
    # E(B-V) held at 0 is decided on each mode's own estimate: where the analytic E(B-V) is within
    # 1 sigma of 0 the draws' mean may fall on the other side of 0 (sampling noise), so that one
    # bit is compared only away from 0; every other bit must agree on every row
    near_zero = np.abs(a["ebv_unbounded"].to_numpy(float)) < a["e_ebv"].to_numpy(float)
    mask = np.where(near_zero, ~np.int64(Flag.EBV_AT_BOUND), ~np.int64(0))
    assert list(fa & mask) == list(fm & mask)
    nodist = np.isnan(a["dm"].to_numpy(float))
    # unsolvable rows: no distance in either mode, identical notes (no "only one band")
    assert np.isnan(m["dm"].to_numpy(float)[nodist]).all()
    assert np.isnan(m["dist_pc"].to_numpy(float)[nodist]).all()
    assert list(a["note"][nodist]) == list(m["note"][nodist])


def test_unsolvable_rows_keep_no_distance_flag_in_monte_carlo():
    df = pd.DataFrame({
        "id": ["SPX-0001", "SPX-0002", "SPX-0003", "SPX-0004", "SPX-0005", "SPX-0006", "SPX-0007"],
        "sptype": ["DA3", "G5V", None, "B9V", "K0III", "C5,2", "O5III"],
        "V": [12.0, np.nan, 11.0, 10.0, np.nan, 9.0, 8.3],
        "B-V": [0.0, np.nan, 0.5, 0.1, 1.2, 2.5, -0.3],
    })
    m = specpar.estimate(df, method="mc", n_draws=100, seed=1)
    a = specpar.estimate(df)
    flags = m["flags"].to_numpy()
    assert list(flags) == list(a["flags"]) and list(m["note"]) == list(a["note"])
    # white dwarf, no photometry, no type, colour only, carbon star, type outside the calibration
    for i in (0, 1, 2, 4, 5, 6):
        assert flags[i] & Flag.NO_DISTANCE, m.note[i]
        assert not flags[i] & Flag.EBV_ASSUMED_ZERO, m.note[i]
        assert np.isnan(m["dist_pc"][i]) and np.isnan(m["dm"][i])
    # the colour-only row still gives E(B-V), as in analytic mode
    assert np.isfinite(m["ebv"][4]) and m["ebv"][4] == pytest.approx(a["ebv"][4], abs=3 * a["e_ebv"][4])
    assert np.isfinite(m["dist_pc"][3])
