"""Parallax cross-check: no combined distance at large tension, no compound diagnosis from an
uninformative parallax, numbers printed with their significant digits, a readable figure.

References: Bailer-Jones 2015, PASP 127, 994 (the posteriors); Lutz & Kelker 1973, PASP 85,
573 (low signal-to-noise parallaxes); a parallax within 3 sigma of zero is consistent with any
large distance (common practice); value and error quoted to the error's two significant digits
(common practice).
"""
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from specpar import estimate
from specpar.calib.tables import default_calibrations
from specpar.core.flags import Flag
from specpar.core.numfmt import format_pm, format_pm_array
from specpar.pipeline.parallax_plot import parallax_figure

SAMPLES = Path(__file__).resolve().parents[2] / "samples"


def _flag(out, bit):
    return (np.asarray(out["flags"]) & int(bit)) != 0


def _star(sptype, lum, sptnum, d_true, plx, e_plx, e_v=0.01):
    """Noiseless photometry of a class ``lum`` star at ``d_true`` pc (E(B-V) = 0.1, R_V = 3.1)."""
    cal = default_calibrations().by_class[lum].evaluate(np.array([sptnum], float))
    V = cal.absmag[0, 0] + 5 * np.log10(d_true / 10) + 0.31
    return {"sptype": sptype, "V": V, "e_V": e_v, "B-V": cal.colours[0, 0] + 0.1, "e_B-V": 0.01,
            "plx": plx, "e_plx": e_plx}


def test_combined_distance_withheld_at_large_tension():
    # a giant typed as a dwarf: precise parallax of the true (giant) distance, |z| >> 3
    bad = _star("K1 V", "III", 51, 800.0, 1000 / 800.0, 0.02)
    good = _star("K1 III", "III", 51, 800.0, 1000 / 800.0, 0.02)
    out = estimate(pd.DataFrame([bad, good]))
    z = np.asarray(out["plx_z"])
    assert abs(z[0]) > 10 and abs(z[1]) < 1
    assert _flag(out, Flag.PLX_COMBINED_WITHHELD)[0] and not _flag(out, Flag.PLX_COMBINED_WITHHELD)[1]
    assert np.isnan(out["dist_comb_pc"][0]) and np.isnan(out["dist_comb_lo_pc"][0])
    assert np.isnan(out["dist_comb_hi_pc"][0])
    assert np.isfinite(out["dist_plx_pc"][0]) and np.isfinite(out["dist_pc"][0])  # each alone stays
    assert out["dist_comb_pc"][1] == pytest.approx(800.0, rel=0.05)
    assert "no combined distance" in out["note"][0]


def test_threshold_option_decides_withholding():
    row = _star("G2 V", "V", 42, 100.0, 1000 / 100.0 * 0.8, 0.3)  # a modest disagreement
    out = estimate(pd.DataFrame([row]))
    z = abs(float(out["plx_z"][0]))
    assert 0.5 < z < 5
    loose = estimate(pd.DataFrame([row]), tension=z + 0.1)
    tight = estimate(pd.DataFrame([row]), tension=z - 0.1)
    assert np.isfinite(loose["dist_comb_pc"][0]) and np.isnan(tight["dist_comb_pc"][0])


def test_uninformative_parallax_gives_no_compound_diagnosis():
    # a K0 III at ~70 pc (photometric parallax ~14 mas) with plx = -0.5 +- 1 mas
    row = _star("K0 III", "III", 50, 70.0, -0.5, 1.0)
    out = estimate(pd.DataFrame([row]))
    assert _flag(out, Flag.PLX_TENSION)[0]
    assert out["plx_diag"][0] == "plx_uninformative"
    note = out["note"][0]
    assert "cannot discriminate" in note
    assert "fits as class" not in note and "companion would" not in note


def test_negative_parallax_beyond_threshold_is_suspect_alone():
    out = estimate(pd.DataFrame([{"sptype": "A0 V", "V": 8.0, "B-V": 0.1, "plx": -2.0, "e_plx": 0.2}]))
    assert out["plx_diag"][0] == "plx_suspect"


def test_informative_parallax_still_diagnosed():
    row = _star("K1 V", "III", 51, 300.0, 1000 / 300.0, 0.05)  # S/N 67
    out = estimate(pd.DataFrame([row]))
    assert out["plx_diag"][0].startswith("class:III")


def test_diagnosis_codes_not_repeated():
    t = pd.read_csv(SAMPLES / "survey_parallaxes.csv")
    for d in estimate(t)["plx_diag"]:
        codes = [c for c in str(d).split("+") if c]
        assert len(codes) == len(set(codes)), d


# ----------------------------------------------------------------------------- printing

def test_format_pm_rules():
    assert format_pm(-0.48, 0.0411) == "-0.480 +- 0.041"
    assert format_pm(0.0207, 0.00012, "mas") == "0.02070 +- 0.00012 mas"
    assert format_pm(1234.5, 87) == "1234 +- 87" or format_pm(1234.5, 87) == "1235 +- 87"
    assert "nan" not in format_pm(1.0, np.nan) and "unknown" in format_pm(1.0, np.nan)
    assert "0.000" not in format_pm(0.0, 0.0) and "fixed" in format_pm(0.0, 0.0)
    assert list(format_pm_array([1.0, np.nan], [0.5, 0.1])) == ["1.00 +- 0.50", "not available"]


def test_tiny_parallax_error_keeps_significant_digits():
    row = _star("K1 V", "III", 51, 800.0, 1000 / 800.0, 0.0004)
    note = estimate(pd.DataFrame([row]))["note"][0]
    assert "+- 0.00040 mas" in note and "+- 0.000 " not in note and "+- 0 " not in note


@pytest.mark.parametrize("name", ["survey.csv", "survey_parallaxes.csv", "pulsators.csv"])
@pytest.mark.parametrize("method", ["analytic", "mc"])
def test_no_nan_or_zero_errors_in_notes(name, method):
    out = estimate(pd.read_csv(SAMPLES / name), method=method, n_draws=100)
    for note in out["note"]:
        low = note.lower()
        assert "+- nan" not in low and "± nan" not in low and " nan " not in low, note
        assert "+- 0.000" not in note and "± 0.000" not in note, note


# ----------------------------------------------------------------------------- figure

@pytest.fixture(scope="module")
def figure():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    t = pd.read_csv(SAMPLES / "survey_parallaxes.csv")
    out = estimate(t)
    assert (out["plx"] < 0).any()  # the sample has negative parallaxes: symlog axes
    fig = parallax_figure(out, 3.0)
    FigureCanvasAgg(fig)
    fig.canvas.draw()
    return fig


def test_one_to_one_line_stays_positive(figure):
    ax = figure.axes[0]
    line = [ln for ln in ax.get_lines() if ln.get_label().startswith("1:1")]
    assert len(line) == 1
    x, y = (np.asarray(v, float) for v in line[0].get_data())
    assert (x > 0).all() and (y > 0).all()


def test_tick_labels_are_plain_numbers(figure):
    ax = figure.axes[0]
    labels = [t.get_text() for t in ax.get_xticklabels() + ax.get_yticklabels() if t.get_text()]
    assert labels
    for text in labels:
        assert "$" not in text and "10^" not in text, text
        float(text.replace("\u2212", "-"))  # a plain number


def test_histogram_legend_explains_the_curve(figure):
    hx = figure.axes[1]
    texts = [t.get_text() for t in hx.get_legend().get_texts()]
    curve = [t for t in texts if "N(0, 1)" in t]
    assert curve and "expected" in curve[0] and "|z| < 6" in curve[0]
