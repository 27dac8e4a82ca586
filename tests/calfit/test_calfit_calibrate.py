"""The parallax fitter (specpar.calfit) on synthetic magnitude-limited samples.

Synthetic stars prove the solver only; the science is checked on real stars in
tests/calfit/test_calfit_realdata.py.
"""
import time

import numpy as np
import pandas as pd
import pytest

from specpar import estimate
from specpar.calfit import calibrate, fit_luminosity, write_calibrations
from specpar.calib.tables import load_calibration
from specpar.cli.main import main

MALMQUIST = 0.6 * np.log(10.0)  # Malmquist (1922): <M> of a magnitude-limited sample = M0 - 1.382 sig^2


def draw(rng, n, M0, sig, v_limit, e_plx, radius_pc, slope=0.0, x=None):
    """Stars uniform in a sphere, Gaussian absolute magnitudes, kept when V <= v_limit."""
    d = radius_pc * rng.random(n) ** (1 / 3)
    x = np.full(n, 50.0) if x is None else x
    M = rng.normal(M0 + slope * (x - 50.0), sig)
    V = M + 5 * np.log10(d) - 5
    keep = V <= v_limit
    plx = 1000.0 / d[keep] + rng.normal(0.0, e_plx, keep.sum())
    return x[keep], V[keep], plx, np.full(keep.sum(), e_plx), M[keep], d[keep]


@pytest.mark.parametrize("e_plx", [0.8, 3.0])
def test_malmquist_bias_removed(e_plx):
    rng = np.random.default_rng(12)
    M0, sig = 0.7, 0.5
    x, V, plx, e, M, d = draw(rng, 900_000, M0, sig, 6.5, e_plx, 600.0)
    assert len(V) > 2000 and (plx <= 0).sum() >= (1 if e_plx > 2 else 0)  # negative parallaxes kept
    # naive mean of the true absolute magnitudes: biased by the Malmquist amount
    naive = M.mean()
    assert naive - M0 == pytest.approx(-MALMQUIST * sig ** 2, abs=0.05)
    # naive mean from the parallaxes of well-measured stars: biased as well (bright by Malmquist,
    # or faint when the parallax cut reaches into the magnitude limit: Lutz & Kelker 1973)
    good = plx > 5 * e
    naive_plx = np.mean(V[good] + 5 + 5 * np.log10(plx[good] / 1000))
    assert abs(naive_plx - M0) > 0.15
    fit = fit_luminosity(x, V, plx, e, inv_h=0.0)
    # recovered without bias: within 3 of its own errors and 0.06 mag
    assert abs(fit.M_core[0] - M0) < max(3 * fit.e_M_V[0], 0.06)
    assert abs(fit.M_V[0] - M0) < max(3 * fit.e_M_V[0], 0.06)
    assert fit.sig_core[0] == pytest.approx(sig, abs=0.06)
    assert fit.sig_M_V[0] == pytest.approx(sig, abs=0.06)


def test_disk_density_recovered():
    """Exponential disk of scale height 80 pc, random latitudes; the fit uses that density."""
    rng = np.random.default_rng(3)
    n = 1_500_000
    R = 1500.0
    d = R * rng.random(n) ** (1 / 3)
    sinb = rng.uniform(-1, 1, n)
    keepz = rng.random(n) < np.exp(-d * np.abs(sinb) / 80.0)
    d, sinb = d[keepz], sinb[keepz]
    M = rng.normal(-1.0, 0.6, d.size)
    V = M + 5 * np.log10(d) - 5
    k = V <= 6.0
    plx = 1000 / d[k] + rng.normal(0, 1.0, k.sum())
    fit = fit_luminosity(np.full(k.sum(), 15.0), V[k], plx, np.full(k.sum(), 1.0),
                         inv_h=np.abs(sinb[k]) / 80.0)
    assert M[k].mean() < -1.3  # the naive mean is biased bright
    assert abs(fit.M_core[0] + 1.0) < max(3 * fit.e_M_V[0], 0.08)
    assert fit.sig_core[0] == pytest.approx(0.6, abs=0.08)


def synthetic_table(rng, n=600_000):
    """Class III K-type stars, M_V = 0.8 + 0.15 (x - 50), scatter 0.3, UBV with E(B-V) ~ d."""
    x = rng.choice(np.arange(48.0, 56.0), n)
    xs, V, plx, e, M, d = draw(rng, n, 0.8, 0.3, 7.0, 0.8, 900.0, slope=0.15, x=x)
    bv0 = 1.0 + 0.08 * (xs - 50)
    ebv = 0.0003 * d * rng.random(d.size)
    names = np.array([f"K{int(v - 50)} III" if v >= 50 else f"G{int(v - 40)} III" for v in xs])
    return pd.DataFrame({"SpT": names, "V": V + 3.1 * ebv, "B-V": bv0 + ebv, "plx": plx, "e_plx": e,
                         "glat": rng.uniform(-90, 90, d.size)}), 0.8 + 0.15 * (xs - 50)


def test_calibrate_api_recovers_law_and_keeps_every_row(tmp_path):
    rng = np.random.default_rng(5)
    df, _ = synthetic_table(rng)
    bad = pd.DataFrame({"SpT": ["K1 III", "Q7 III", "K2 III", None], "V": [np.nan, 5.0, 5.0, 5.0],
                        "B-V": [1.1, 1.1, 1.1, 1.1], "plx": [5.0, 5.0, -1.0, 5.0], "e_plx": [1.0, 1.0, 1.0, 0.0],
                        "glat": [10.0] * 4})
    tab = pd.concat([df, bad], ignore_index=True)
    fit = calibrate(tab, columns={"sptype": "SpT"}, scale_height_pc=None, classes=["III"])
    assert len(fit.stars) == len(tab)                        # no row lost
    tail = fit.stars[-4:]
    assert list(tail["used"]) == [False, False, True, False]  # a negative parallax is data
    assert all(r for r in tail["reason"][[0, 1, 3]])
    t = fit.tables["III"]
    x = np.asarray(t["sptnum"])
    truth = 0.8 + 0.15 * (x - 50)
    inner = (x >= 49) & (x <= 54)
    assert np.all(np.abs(np.asarray(t["M_V"])[inner] - truth[inner]) < 0.12)
    # intrinsic colours fitted to the stars within 100 pc
    assert np.all(np.abs(np.asarray(t["B-V"])[inner] - (1.0 + 0.08 * (x[inner] - 50))) < 0.03)
    paths = write_calibrations(fit, tmp_path, prefix="mine")
    cal = load_calibration(paths[0])
    assert cal.luminosity_class == "III"
    out = estimate(pd.DataFrame({"sptype": ["K1 III"], "V": [6.0], "B-V": [1.08]}), calibrations=paths)
    assert np.isfinite(out["dist_pc"][0])


def test_calibrate_cli(tmp_path, capsys):
    rng = np.random.default_rng(8)
    df, _ = synthetic_table(rng, 300_000)
    src = tmp_path / "stars.csv"
    df.to_csv(src, index=False)
    rc = main(["calibrate", str(src), "-o", str(tmp_path / "cal"), "--col", "sptype=SpT",
               "--uniform-density", "--stars-out", str(tmp_path / "used.csv")])
    assert rc == 0
    assert (tmp_path / "cal" / "calibration_III.ecsv").exists() and (tmp_path / "used.csv").exists()
    # missing columns: one message, status 1, no traceback
    rc = main(["calibrate", str(src), "-o", str(tmp_path / "cal2")])
    err = capsys.readouterr().err
    assert rc == 1 and "sptype" in err and "Traceback" not in err


def test_speed_25000_stars():
    """Issue 9: calibrate on 25,000 stars in under 30 s (2 cores)."""
    rng = np.random.default_rng(21)
    df, _ = synthetic_table(rng, 4_000_000)
    df = df.iloc[:25_000]
    assert len(df) == 25_000
    t0 = time.process_time()
    calibrate(df, columns={"sptype": "SpT"})
    cpu = time.process_time() - t0
    assert cpu < 30.0, cpu
