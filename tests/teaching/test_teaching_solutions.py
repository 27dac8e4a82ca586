"""Worked solutions (specpar.teaching.solutions): the same numbers as estimate, a hand-computed example, decimals,
Monte Carlo, limits and bounds written as such."""
from __future__ import annotations

import math
import re

import numpy as np
import pandas as pd
import pytest

from astropy.table import Table

from specpar import estimate
from specpar.io.read import read_table
from specpar.teaching import answer_key, render_markdown, worked_solutions

from teaching_cases import SAMPLE, check_equations, compare_with_estimate, invented_table


def test_numbers_equal_estimate_for_every_invented_star():
    ws, ref = compare_with_estimate(invented_table())
    solved = [s.solved for s in ws.stars]
    assert solved == list(np.isfinite(np.asarray(ref["dm"], float)))
    assert solved.count(False) >= 2  # the bad rows are there, unsolved, with their flags
    bad = ws.stars[8]
    assert not bad.solved and "TYPE_UNREADABLE" in bad.flag_codes


def test_numbers_equal_estimate_astropy_input_and_options():
    compare_with_estimate(Table.from_pandas(invented_table()), law="CCM89", rv=3.4, sigma_rv=0.1)


@pytest.mark.skipif(not SAMPLE.exists(), reason="samples/survey.csv not written yet")
def test_numbers_equal_estimate_for_sample_survey():
    compare_with_estimate(read_table(SAMPLE))


def test_period_luminosity_rows_are_presented_without_a_type_chain():
    t = invented_table().iloc[:2].copy()
    t["period_d"] = [10.0, np.nan]  # first row: absolute magnitudes from the period instead of the type
    ws, ref = compare_with_estimate(t)
    cep = ws.stars[0]
    assert cep.solved and "spectral type" in cep.steps[0].text
    assert "subtype" not in cep.step("e_dm").text


def test_hand_computed_g2v_example():
    """Distance of an invented G2V star written out by hand.

    Calibration values read from the mean dwarf table shipped in the meanstars package
    (Mamajek, 'A Modern Mean Dwarf Stellar Color and Effective Temperature Sequence',
    v2022.04.16 = Pecaut & Mamajek 2013, ApJS 208, 9, Table 5): G2V M_V = 4.80,
    (B-V)_0 = 0.65.
    """
    MeanStars = pytest.importorskip("MeanStars").MeanStars
    data = MeanStars().data
    row = list(np.asarray(data["SpT"], dtype=str)).index("G2V")
    mv_pub = float(data["Mv"][row])
    bv0_pub = float(data["B-V"][row])
    assert mv_pub == 4.80 and bv0_pub == 0.65  # Pecaut & Mamajek 2013 Table 5 (via meanstars)

    V, B = 9.412, 10.274
    # Step 1: colour excess, E(B-V) = (B - V) - (B-V)_0 (definition; common practice)
    ebv = (B - V) - bv0_pub                      # = 0.862 - 0.650 = 0.212
    # Step 2: extinction, A_V = R_V E(B-V) with R_V = 3.1 (Cardelli et al. 1989 mean Galactic value)
    av = 3.1 * ebv                               # = 0.6572
    # Step 3: distance modulus, (m - M)_0 = V - M_V - A_V (Pogson 1856 magnitude scale)
    dm = V - mv_pub - av                         # = 3.9548
    # Step 4: d = 10^((m - M)_0 / 5 + 1) pc
    d_pc = 10 ** (dm / 5 + 1)                    # = 61.80 pc
    # Step 5: light years from the definitions: 1 pc = 648000/pi au (IAU 2015 B2), 1 au =
    # 149597870700 m (IAU 2012 B2), 1 ly = c x Julian year = 299792458 m/s x 365.25 x 86400 s
    d_ly = d_pc * (648000 / math.pi) * 149597870700 / (299792458 * 365.25 * 86400)
    assert (round(ebv, 3), round(av, 4), round(dm, 4), round(d_pc, 2)) == (0.212, 0.6572, 3.9548, 61.80)

    star_table = pd.DataFrame({"id": ["SPX-0100"], "sptype": ["G2V"], "B": [B], "e_B": [0.01],
                               "V": [V], "e_V": [0.01]})
    ws = worked_solutions(star_table, decimals=3)
    s = ws.stars[0]
    assert s.step("mv").value == mv_pub
    assert s.step("c0_B-V").value == bv0_pub
    assert s.step("ebv").value == pytest.approx(ebv, abs=1e-12)
    assert s.step("A_V").value == pytest.approx(av, abs=1e-12)
    assert s.step("dm").value == pytest.approx(dm, abs=1e-12)
    assert s.step("dist_pc").value == pytest.approx(d_pc, rel=1e-12)
    assert s.step("dist_ly").value == pytest.approx(d_ly, rel=1e-9)
    assert "dwarfs_V.ecsv, row G2" in s.step("mv").source
    md = render_markdown(ws)
    assert "E(B-V) = (B - V) - (B-V)_0 = (10.274 - 9.412) - 0.650 = 0.212" in md
    assert "A_V = R_V × E(B-V) = 3.100 × 0.212 = 0.657" in md
    assert "(m-M)_0 = V - M_V - A_V = 9.412 - 4.800 - 0.657 = 3.955" in md
    assert "10^(3.955/5 + 1) = 61.80 pc" in md
    assert f"= {d_ly:.1f} ly" in md


def test_decimals_change_display_not_values():
    t = invented_table().iloc[:2]
    ws2, ws5 = worked_solutions(t, decimals=2), worked_solutions(t, decimals=5)
    assert [st.value for st in ws2.stars[0].steps] == [st.value for st in ws5.stars[0].steps]
    assert "M_V = 4.80 ± 0.35 mag" in render_markdown(ws2)
    assert "M_V = 4.80000 ± 0.35000 mag" in render_markdown(ws5)
    assert render_markdown(ws2, decimals=1) != render_markdown(ws2)
    key = answer_key(ws2, decimals=1)
    assert key["dm"][0] == round(float(ws2.stars[0].step("dm").value), 1)
    with pytest.raises(ValueError, match="decimals"):
        worked_solutions(t, decimals=-1)


def test_monte_carlo_distances_are_estimate_percentiles():
    t = invented_table().iloc[:3]
    ws = worked_solutions(t, method="mc", n_draws=200, seed=3)
    ref = estimate(t, method="mc", n_draws=200, seed=3)
    for i, s in enumerate(ws.stars):
        assert s.step("dist_pc").value == float(ref["dist_pc"][i])
        assert "Monte Carlo" in s.step("dist_pc").text


def test_tiny_errors_keep_significant_digits():
    from specpar.teaching import Step, equation, fmt_error
    assert fmt_error(0.00031, "mag", 3) == "0.00031" and fmt_error(0.0123, "mag", 3) == "0.012"
    assert fmt_error(np.nan, "mag", 3) == "" and fmt_error(0.0, "mag", 3) == ""
    st = Step("x", "x", lhs="x", value=1.0, error=0.0002)
    assert equation(st, 3) == "x = 1.000 ± 0.00020 mag"
    assert equation(Step("x", "x", lhs="x", value=1.0, error=np.nan), 3) == "x = 1.000 mag"


def test_fitted_rv_at_the_law_limit_is_written_as_a_limit():
    """R_V fitted per star stops at the law's range (F99 in dust_extinction: 2-6); such a value is a
    bound, so the key says so instead of quoting R_V ± error as a measurement."""
    rows = [dict(id=f"SPX-09{k}", sptype="B2V", B=11.0, V=10.0, Ic=8.5, J=7.4, H=6.9, Ks=ks)
            for k, ks in enumerate((5.0, 7.5))]  # invented: far too faint in the infrared, then plausible
    df = pd.DataFrame(rows)
    for b in ("B", "V", "Ic", "J", "H", "Ks"):
        df[f"e_{b}"] = 0.02
    ws = worked_solutions(df, fit_rv=True)
    rv = np.asarray(ws.result["rv"], float)
    assert rv[0] == pytest.approx(6.0) and 2.0 < rv[1] < 6.0
    limit, free = ws.stars
    assert "this is a limit, not a measurement" in limit.step("A_V").source
    assert "R_V at the limit" in limit.step("e_dm").text and "R_V uncertainty (±" not in limit.step("e_dm").text
    assert "limit" not in free.step("A_V").source and "R_V uncertainty (±" in free.step("e_dm").text


def test_key_of_a_row_held_at_the_reddening_bound_is_one_chain():
    """Regression: a star bluer than its type (E(B-V) held at 0) showed the exact two-band
    E(B-V) = -0.48 and V - M_V = 8.150 while the distance step used the bounded fit's
    modulus: the steps contradicted each other. Now the key shows the fit, the bound in
    words, and the distance from the modulus it shows."""
    t = pd.DataFrame({"id": ["BLUE-1"], "sptype": ["B9V"], "B": [8.10], "e_B": [0.01],
                      "V": [8.65], "e_V": [0.01]})  # invented
    md = render_markdown(worked_solutions(t))
    assert "held at 0" in md and "E(B-V) = 0.000" in md
    dm_shown = re.search(r"\(m-M\)_0 = (\d+\.\d+) ± ", md).group(1)
    assert f"10^({dm_shown[:4]}" in md  # the distance step starts from the modulus shown
    check_equations(md)
