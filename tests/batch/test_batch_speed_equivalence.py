"""The faster code paths of the estimate give exactly the values of the code they replace.

References: ``scipy.stats.chi2.sf`` (SciPy, the reference library the p-value
used before) and ``numpy.char.mod`` / ``numpy.argsort`` (NumPy). Exact equality
(tolerance 0) throughout: outputs must not change by a bit.
"""
import subprocess
import sys

import numpy as np
from scipy import stats

from specpar.pipeline.fit import chi2_sf as _chi2_sf
from specpar.core.numfmt import format_each
from specpar.core.solver import observable_groups


def test_chi2_sf_matches_scipy_stats_bit_for_bit():
    # reference: scipy.stats.chi2.sf, including its edge values (x <= 0, inf, NaN)
    rng = np.random.default_rng(11)
    x = np.concatenate([rng.chisquare(3, 20000), rng.normal(0, 50, 2000),
                        [0.0, -0.0, -1.0, np.inf, np.nan, 1e-300, 1e300]])
    dof = rng.integers(1, 12, x.size)
    ref = stats.chi2.sf(x, dof)
    got = _chi2_sf(x, dof)
    assert got.dtype == ref.dtype
    assert np.array_equal(got.view(np.uint64), ref.view(np.uint64))


def test_format_each_matches_numpy_char_mod():
    # reference: numpy.char.mod, which the notes used before
    rng = np.random.default_rng(12)
    x = np.concatenate([rng.normal(size=5000) * 10.0 ** rng.integers(-8, 8, 5000),
                        [np.nan, np.inf, -np.inf, 0.0, -0.0]])
    for fmt in ("%.1f", "%+.1f", "%.3f", "%.4g", "%.3g", "%.12f"):
        for v in (x, x[:0], x[3], x[:6].reshape(2, 3)):
            ref = np.char.mod(fmt, v).astype(object)
            got = format_each(fmt, v)
            assert got.dtype == ref.dtype and got.shape == ref.shape
            assert (got == ref).all()


def test_observable_groups_match_stable_argsort():
    # reference: the stable argsort of "not used" the groups were built with before
    rng = np.random.default_rng(13)
    valid = rng.random((30000, 11)) < 0.35
    seen = 0
    for rows, kidx in observable_groups(valid):
        k = kidx.shape[1]
        ref = np.argsort(~valid[rows], axis=1, kind="stable")[:, :k]
        assert kidx.dtype == ref.dtype and np.array_equal(kidx, ref)
        seen += rows.size
    assert seen == int((valid.sum(axis=1) > 0).sum())


def test_import_leaves_cluster_fit_and_scipy_stats_unloaded():
    code = ("import sys, specpar; print(sorted(m for m in ('scipy.stats', 'scipy.ndimage', 'specpar.cluster') "
            "if m in sys.modules)); print(specpar.fit_cluster.__module__, specpar.calibrate.__module__)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split("\n")
    assert out[0] == "[]"
    assert out[1] == "specpar.cluster specpar.calfit.fit"
