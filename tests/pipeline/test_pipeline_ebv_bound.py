"""E(B-V) >= 0 in the estimate.

External references:
* the bounded distance modulus is the generalised-least-squares fit with
  E(B-V) held at 0 (normal equations, common practice), computed here
  independently from the solver's own weights;
* the upper limit and the root-mean-square error at the bound are checked
  against direct numerical integration of the Gaussian likelihood over
  E(B-V) >= 0 (flat prior on the physical range; common practice);
* round trips on synthetic stars drawn with the solver's error model (see
  tests/test_roundtrip.py) check coverage where the bound acts most, E(B-V) = 0.
"""
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import specpar
from specpar.calib.tables import default_calibrations
from specpar.core.ebvbound import bound_ebv, truncated_mean_square, truncated_quantile
from specpar.pipeline import EstimateOptions, prepare_observables
from specpar.pipeline.estimate import SOURCES
from specpar.pipeline.sources import calibrate_rows
from specpar.calib.extinction import band_coefficients, coefficient_derivative
from specpar.core.flags import Flag
from specpar.core.solver import Observables, solve

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_pipeline_roundtrip import BAND_SETS, ALL_TYPES, draw_stars, summarise, usable_types  # noqa: E402

SAMPLES = Path(__file__).resolve().parents[2] / "samples"


def _blue_star():
    # a B9 V measured too blue for its type: the unbounded fit wants E(B-V) < 0
    return pd.DataFrame([{"id": "SPX-0001", "sptype": "B9V", "B": 8.10, "e_B": 0.01, "V": 8.65, "e_V": 0.01,
                          "U": 7.70, "e_U": 0.02}])


def test_negative_excess_held_at_zero_with_limit_and_note():
    out = specpar.estimate(_blue_star(), explain=True)
    assert out["ebv"][0] == 0.0 and out["av"][0] == 0.0
    assert out["A_V"][0] == 0.0 and out["A_B"][0] == 0.0  # no negative extinction applied
    assert out["ebv_unbounded"][0] < -0.3
    assert 0 < out["ebv_upper"][0] < 0.1 and out["e_ebv"][0] > 0
    f = int(out["flags"][0])
    assert f & Flag.EBV_AT_BOUND and f & Flag.EBV_NEGATIVE
    # the note names the inconsistency with the number
    assert "sigma below 0" in out["note"][0] and f"{out['ebv_unbounded'][0]:.2f}"[:4] in out["note"][0]


def _nominal_fit(df):
    opts = EstimateOptions()
    prep = prepare_observables(df, opts)
    rc = calibrate_rows(prep, default_calibrations(), opts, SOURCES)
    cal, modes = rc.rows(slice(0, len(df)))
    obs = Observables(prep.obs.y, prep.obs.sigma, prep.obs.L)
    R, dR = band_coefficients("F99", 3.1), coefficient_derivative("F99", 3.1)
    res = solve(obs, cal.absmag, modes, cal.var_mv, cal.var_colour, R, dR, 0.2, 3.1, keep_weights=True)
    return obs, cal, R, res


def test_bounded_distance_modulus_is_the_pinned_least_squares_fit():
    df = _blue_star()
    obs, cal, R, res = _nominal_fit(df)
    assert res.ebv[0] < 0
    # independent pinned fit: minimise r^T W r over dm alone with E(B-V) = 0
    W = res.weights[0]
    v = res.valid[0]
    y = (obs.y[0] - np.nan_to_num(cal.absmag[0]) @ obs.L.T)[v]
    a0 = obs.L.sum(axis=1)[v]
    Wv = W[np.ix_(v, v)]
    dm0 = (a0 @ Wv @ y) / (a0 @ Wv @ a0)
    var0 = 1.0 / (a0 @ Wv @ a0)
    chi2_0 = (y - a0 * dm0) @ Wv @ (y - a0 * dm0)
    b = bound_ebv(res.dm, res.e_dm, res.ebv, res.e_ebv, res.corr, res.chi2, res.dof, res.colour_known)
    assert b.dm[0] == pytest.approx(dm0, abs=1e-9)
    assert b.chi2[0] == pytest.approx(chi2_0, rel=1e-9)
    assert b.dof[0] == res.dof[0] + 1
    # the bounded error is the pinned one plus what E(B-V) within its truncated range adds
    assert b.e_dm[0] ** 2 > var0
    out = specpar.estimate(df)
    assert out["dm"][0] == pytest.approx(dm0, abs=1e-9) and out["chi2"][0] == pytest.approx(chi2_0, rel=1e-9)


@pytest.mark.parametrize("mu,s", [(-0.01, 0.03), (-0.05, 0.03), (-0.4, 0.21), (-0.48, 0.041)])
def test_upper_limit_and_rms_against_numerical_integration(mu, s):
    # truncated Gaussian likelihood on E >= 0, integrated on a fine grid (trapezoid rule)
    e = np.linspace(0.0, 12 * s + 0.01, 400_001)
    w = np.exp(-0.5 * ((e - mu) / s) ** 2)
    cdf = np.concatenate([[0], np.cumsum(0.5 * (w[1:] + w[:-1]) * np.diff(e))])
    cdf /= cdf[-1]
    ul = np.interp(0.95, cdf, e)
    ms = np.trapezoid(w * e ** 2, e) / np.trapezoid(w, e)
    b = bound_ebv([10.0], [0.5], [mu], [s], [-0.6], [1.0], [2], [True])
    assert b.ebv_upper[0] == pytest.approx(ul, rel=2e-3)
    assert b.e_ebv[0] == pytest.approx(np.sqrt(ms), rel=2e-3)
    # dm moves along the fit's regression line to E = 0: dm - rho e_dm / e_E * mu
    assert b.dm[0] == pytest.approx(10.0 - (-0.6) * 0.5 / s * mu, abs=1e-12)
    assert b.e_dm[0] == pytest.approx(np.sqrt(0.25 * (1 - 0.36) + (0.6 * 0.5 / s) ** 2 * ms), rel=2e-3)


@pytest.mark.parametrize("alpha", [0.0, 0.5, 3.0, 19.99, 20.01, 40.0, 100.0, 1000.0])
def test_truncated_normal_closed_forms_against_quadrature(alpha):
    # <(Z - a)^2> and the 95 % quantile of Z - a for Z ~ N(0, 1) truncated to Z >= a, by the
    # trapezoid rule in t = Z - a with the density scaled by exp(a^2 / 2) (no underflow), on
    # both sides of the switch to the asymptotic series at a = 20
    t = np.linspace(0.0, 40.0 / max(alpha, 1.0) + (8.0 if alpha < 5 else 0.0), 2_000_001)
    w = np.exp(-(t * t + 2.0 * alpha * t) / 2.0)
    den = np.trapezoid(w, t)
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (w[1:] + w[:-1]) * np.diff(t))]) / den
    assert truncated_mean_square(alpha) == pytest.approx(np.trapezoid(w * t * t, t) / den, rel=1e-7)
    assert truncated_quantile(0.95, alpha) == pytest.approx(np.interp(0.95, cdf, t), rel=1e-6)


def test_bound_is_vectorised_and_fast():
    # 200 000 rows at the bound in well under a second (no per-row scipy.stats calls)
    import time
    n = 200_000
    mu = -np.abs(np.random.default_rng(1).normal(0.0, 0.03, n))
    start = time.perf_counter()
    b = bound_ebv(np.full(n, 10.0), np.full(n, 0.5), mu, np.full(n, 0.03), np.full(n, -0.5),
                  np.ones(n), np.ones(n, int), np.ones(n, bool))
    assert time.perf_counter() - start < 2.0
    assert np.isfinite(b.e_ebv).all() and (b.ebv == 0).all()


def test_positive_and_pinned_rows_untouched():
    b = bound_ebv([10.0, 9.0, np.nan], [0.5, 0.4, np.nan], [0.3, 0.0, -0.2], [0.03, 0.0, 0.05],
                  [-0.5, 0.0, np.nan], [2.0, 1.0, 0.0], [3, 1, 0], [True, False, True])
    assert list(b.at_bound) == [False, False, True]
    assert b.dm[0] == 10.0 and b.ebv[0] == 0.3 and b.e_ebv[1] == 0.0
    assert np.isnan(b.dm[2]) and b.ebv[2] == 0.0 and np.isfinite(b.ebv_upper[2])  # colours only


@pytest.mark.parametrize("name", ["survey.csv", "survey_parallaxes.csv", "pulsators.csv"])
@pytest.mark.parametrize("method", ["analytic", "mc"])
def test_no_negative_extinction_anywhere(name, method):
    out = specpar.estimate(pd.read_csv(SAMPLES / name), method=method, n_draws=100, explain=True)
    ebv = out["ebv"].to_numpy(float)
    assert (ebv[np.isfinite(ebv)] >= 0).all()
    for col in [c for c in out.columns if c.startswith("A_")] + ["av"]:
        a = out[col].to_numpy(float)
        assert (a[np.isfinite(a)] >= 0).all(), col


def test_monte_carlo_bound_uses_the_draws_moments():
    out = specpar.estimate(_blue_star(), method="mc", n_draws=400, seed=2)
    assert out["ebv"][0] == 0.0 and out["flags"][0] & Flag.EBV_AT_BOUND
    assert out["dist_lo_pc"][0] < out["dist_pc"][0] < out["dist_hi_pc"][0]


@pytest.mark.parametrize("ebv_range", [(0.0, 0.0), (0.0, 0.05)])
def test_roundtrip_coverage_where_the_bound_acts(ebv_range):
    # 3000 stars: binomial standard error of a 68 % coverage 0.85 %, so +-3 % is 3.5 sigma
    spec = BAND_SETS["BVJHKs"]
    types = usable_types(ALL_TYPES, spec["mags"])
    t, truth = draw_stars(np.random.default_rng(99), 3000, types, spec["mags"], ebv_range=ebv_range)
    out = specpar.estimate(t)
    at = (out["flags"] & Flag.EBV_AT_BOUND) != 0
    # the bound acts on a large part of these stars (about 0.45 when all are unreddened,
    # about 0.2 when E(B-V) is uniform in 0-0.05, depending on the tables' colour scatter)
    assert 0.1 < at.mean() < 0.6
    s = summarise(out, truth)
    assert abs(s["coverage"] - 0.6827) < 0.03, s
    assert abs(s["pull_dm"] - 1.0) < 0.05, s
    assert (np.asarray(out["ebv"]) >= 0).all()
    # the upper limits hold the true E(B-V) at least as often as stated
    ul = np.asarray(out["ebv_upper"], float)[at]
    assert np.mean(truth["ebv"][at] <= ul) >= 0.95
