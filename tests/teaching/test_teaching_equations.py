"""Displayed arithmetic (specpar.teaching.equations): every equation a key shows reproduces from the numbers it shows,
and the step arithmetic at full precision gives the solver's result."""
from __future__ import annotations

import re

import numpy as np
import pytest

from specpar.io.read import read_table
from specpar.teaching import render_markdown, worked_solutions

from teaching_cases import SAMPLE, check_equations, displayed_equations, invented_table


def test_displayed_arithmetic_reproduces_solver():
    """Where a step shows its arithmetic (look-up chains, E(B-V) from two bands, A = R E,
    V - M_V - A_V, 10^(dm/5+1), 1000/d ...), doing that arithmetic at full precision gives the
    solver's result. In the classic two-band case E(B-V) = (B-V) - (B-V)_0 exactly
    (common practice: the colour excess definition) and dm = V - M_V - A_V."""
    ws = worked_solutions(invented_table())
    n_checked = 0
    for star in ws.stars:
        for step in star.steps:
            if np.isfinite(step.arith):
                assert step.arith == pytest.approx(step.value, rel=1e-12, abs=1e-12), (star.id, step.key)
                n_checked += 1
    assert n_checked > 40
    classic = ws.stars[0]  # G2V with B and V only
    df = invented_table()
    ebv = classic.step("ebv")
    assert ebv.formula.startswith("(B - V)")
    assert ebv.value == pytest.approx((df.B[0] - df.V[0]) - classic.step("c0_B-V").value, rel=0, abs=1e-12)
    assert classic.step("dm").value == pytest.approx(
        df.V[0] - classic.step("mv").value - classic.step("A_V").value, rel=0, abs=1e-12)
    # V with a B-V colour column: the same classic formula on the colour
    colour = ws.stars[6].step("ebv")
    assert colour.template == "%0 - %1" and colour.arith == pytest.approx(colour.value, abs=1e-12)
    # a multi-band star is a fit, shown with a residual table
    assert ws.stars[4].fit and not np.isfinite(ws.stars[4].step("dm").arith)


def test_displayed_equations_reproduce_on_the_sample_survey_and_invented_stars():
    """Each displayed equation's operands, evaluated as shown, give the displayed result at the
    displayed precision (common practice: an answer key is checkable by hand)."""
    for table, opts in ((read_table(SAMPLE), {}), (invented_table(), {}), (invented_table(), dict(law="CCM89", rv=3.4))):
        md = render_markdown(worked_solutions(table, **opts))
        n, bad = check_equations(md)
        assert n > 90 and bad == [], bad[:5]
    # the parser sees every arithmetic step of the classic B, V star (so a wrong display would be caught)
    eqs = [left for left, _ in displayed_equations(render_markdown(worked_solutions(invented_table().iloc[:1])))]
    assert eqs[:6] == ["4.800 + 0.650", "(10.100 - 9.400) - 0.650", "3.100 × 0.050", "9.400 - 4.800 - 0.155",
                       "10^(4.445/5 + 1)", "77.45 pc"] and len(eqs) == 9


def test_equation_parser_catches_a_last_digit_error():
    n, bad = check_equations("`A_V = R_V × E(B-V) = 3.100 × 0.492 = 1.524 mag` and `x = 1000 / 100.9 = 9.913 mas`")
    assert n == 2 and len(bad) == 2
    n, bad = check_equations("`d = 1040.2 pc = 3393 ly` `d = 10^(10.086/5 + 1) = 1040 pc`")
    assert n == 2 and bad == []


def test_multiband_fit_shows_the_weighted_mean_hand_route():
    ws = worked_solutions(invented_table())
    star = ws.stars[4]  # A0V with six bands: a fit
    hand = star.step("dm_hand")
    md = render_markdown(ws)
    line = next(ln for ln in md.splitlines() if "Hand route" in ln and "SPX" not in ln)
    # the hand route is the mean of the table's m - M - A weighted by 1/(σ^2 + n s_c^2)
    weights = [float(x) for x in re.findall(r"([\d.]+) × ", line.split(" / (")[0])]
    moduli = [float(x) for x in re.findall(r"× (-?[\d.]+)", line)]
    assert len(weights) == len(moduli) == 6
    assert hand.value == pytest.approx(np.dot(weights, moduli) / sum(weights), abs=1e-9)
    assert "The fit gives" in hand.text and "% in distance" in hand.text
    assert hand.value != star.step("dm").value


@pytest.mark.filterwarnings("ignore::specpar.teaching.SmallSeedWarning")
@pytest.mark.parametrize("level", ["full", "simple"])
def test_displayed_equations_reproduce_in_problem_set_keys(level):
    """Full keys (several bands, reddening, fits) and simple keys from several seeds."""
    from specpar.teaching import make_problem_set
    total = 0
    for seed in (1, 2, 3, 20240917, 2 ** 100 + 7):
        ps = make_problem_set(seed=seed, n_stars=10, level=level)
        n, bad = check_equations(render_markdown(ps.worked))
        assert bad == [], (seed, bad[:5])
        total += n
    assert total >= (1400 if level == "full" else 250)  # 300 and 60 per 10-star key
