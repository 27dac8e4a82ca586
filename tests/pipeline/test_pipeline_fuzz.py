"""Robustness of the batch API against arbitrary input (hypothesis).

The contract (project rules, common practice for batch catalogue tools): bad
input never crashes a batch and never loses or reorders a row; every row comes
out with a machine-readable flag and a readable reason.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from astropy.table import Table
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from specpar import estimate, parse_sptypes
from specpar.core.bands import BAND_NAMES
from specpar.core.flags import Flag

# derandomize: the examples are a fixed function of the test (stochastic tests are seeded)
FUZZ = settings(max_examples=120, deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow])
FUZZ_SLOW = settings(FUZZ, max_examples=40)

# ----------------------------------------------------------------------------- spectral types

_TYPE_PIECES = st.sampled_from(["O", "B", "A", "F", "G", "K", "M", "L", "T", "W", "D", "C", "S",
                                "sd", "0", "2.5", "9.9", "10", " ", "-", "/", ":", "I", "II",
                                "III", "IV", "V", "VI", "Ia", "Iab", "Ia+", "a", "b", "e", "n",
                                "p", "pec", "var", "+", "(", ")", "?", "...", "\u00b1", "\u2013"])
SPTYPE = st.one_of(st.text(), st.text(alphabet=st.characters(codec="ascii")),
                   st.lists(_TYPE_PIECES, max_size=8).map("".join))


@FUZZ
@given(st.lists(SPTYPE, max_size=30))
def test_parse_sptypes_never_raises(values):
    out = parse_sptypes(values)
    assert len(out) == len(values)
    assert {"sptnum", "e_sptnum", "lc_bright", "lc_faint", "flags", "detail"} <= set(out.columns)
    spt = out["sptnum"].to_numpy(float)
    read = np.isfinite(spt)
    # a numeric type lies on the O0 = 0 ... M9.9 = 69.9 scale (definition of the scale)
    assert np.all((spt[read] >= 0) & (spt[read] < 70))
    assert np.all(out["e_sptnum"].to_numpy(float)[read] > 0)
    unusable = int(Flag.TYPE_UNREADABLE | Flag.TYPE_UNSUPPORTED)
    assert np.all(out["flags"].to_numpy()[~read] & unusable)
    assert all(d for d in out["detail"][~read])  # the reason is spelled out


@FUZZ
@given(st.lists(st.one_of(st.none(), st.floats(), st.integers(), st.booleans(), SPTYPE), max_size=20))
def test_parse_sptypes_non_strings(values):
    out = parse_sptypes(values)
    assert len(out) == len(values)
    for v, f in zip(values, out["flags"]):
        if not isinstance(v, str):
            assert f & Flag.TYPE_UNREADABLE


# ----------------------------------------------------------------------------- estimate

CELL = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=-5, max_value=30),
    st.floats(min_value=-1e300, max_value=1e300),
    st.integers(min_value=-10**20, max_value=10**20),
    st.none(),
    st.just(""), st.just("--"), st.just("nan"), st.just(" 12.5 "), st.just("1e400"),
    st.text(max_size=6),
)
ERROR_CELL = st.one_of(CELL, st.floats(min_value=0, max_value=0.5))
GOOD_TYPES = st.sampled_from(["G2 V", "K0 III", "B3 V", "A0 V", "M1 V", "F5 IV-V", "B1 Iab",
                              "K5 III", "O5 V", "G8 III:", "B2.5 IV"])
SPT_CELL = st.one_of(GOOD_TYPES, SPTYPE, st.none(), st.floats(), st.integers())


@st.composite
def garbage_catalogue(draw, colours=False):
    n = draw(st.integers(min_value=0, max_value=12))
    bands = draw(st.lists(st.sampled_from(BAND_NAMES), min_size=1, max_size=5, unique=True))
    colours = draw(st.lists(st.sampled_from(["B-V", "U-B", "V-Ic", "J-Ks", "BP-RP"]),
                            min_size=1, max_size=2, unique=True)) if colours else []
    cols = {
        # few distinct ids: duplicates are common
        "id": draw(st.lists(st.sampled_from(["SPX-0001", "SPX-0002", "", "SPX-0001 "]),
                            min_size=n, max_size=n)),
        "sptype": draw(st.lists(SPT_CELL, min_size=n, max_size=n)),
    }
    for name in bands + colours:
        cols[name] = draw(st.lists(CELL, min_size=n, max_size=n))
        if draw(st.booleans()):  # error columns are sometimes missing
            cols[f"e_{name}"] = draw(st.lists(ERROR_CELL, min_size=n, max_size=n))
    cols["extra"] = list(range(n))  # carried through: tells whether rows kept their order
    return cols


def _check_output(out, n):
    assert len(out) == n
    assert list(np.asarray(out["extra"])) == list(range(n))
    flags = np.asarray(out["flags"], dtype=np.int64)
    dm = np.asarray(out["dm"], float)
    nodist = ~np.isfinite(dm)
    assert np.all((flags[nodist] & Flag.NO_DISTANCE) != 0)
    assert np.all((flags[~nodist] & Flag.NO_DISTANCE) == 0)
    notes = [str(x) for x in np.asarray(out["note"])]
    assert all(notes[i].strip() for i in np.flatnonzero(nodist))
    dist = np.asarray(out["dist_pc"], float)[~nodist]
    assert np.all(np.isfinite(dist) & (dist > 0))
    e_dm = np.asarray(out["e_dm"], float)[~nodist]
    assert np.all(np.isfinite(e_dm) & (e_dm >= 0))
    lo = np.asarray(out["dist_lo_pc"], float)[~nodist]
    hi = np.asarray(out["dist_hi_pc"], float)[~nodist]
    assert np.all(lo <= dist) and np.all(dist <= hi)


@FUZZ
@given(garbage_catalogue())
def test_estimate_garbage_pandas(cols):
    df = pd.DataFrame({k: pd.Series(v, dtype=object) for k, v in cols.items()})
    out = estimate(df)
    assert isinstance(out, pd.DataFrame)
    _check_output(out, len(df))
    assert list(out["id"]) == list(df["id"])


@FUZZ
@given(garbage_catalogue())
def test_estimate_garbage_astropy(cols):
    t = Table({k: np.array(v, dtype=object) if k != "extra" else np.array(v, dtype=int)
               for k, v in cols.items()})
    out = estimate(t)
    assert isinstance(out, Table)
    _check_output(out, len(t))
    assert list(out["id"]) == list(t["id"])


@FUZZ_SLOW
@given(garbage_catalogue(), st.integers(min_value=0, max_value=2**63))
def test_estimate_garbage_monte_carlo(cols, seed):
    df = pd.DataFrame({k: pd.Series(v, dtype=object) for k, v in cols.items()})
    _check_output(estimate(df, method="mc", n_draws=10, seed=seed), len(df))


@FUZZ
@given(garbage_catalogue(colours=True), st.booleans())
def test_estimate_garbage_with_colours(cols, as_table):
    if as_table:
        src = Table({k: np.array(v, dtype=object) for k, v in cols.items()})
    else:
        src = pd.DataFrame({k: pd.Series(v, dtype=object) for k, v in cols.items()})
    _check_output(estimate(src), len(cols["extra"]))


def test_colour_without_magnitude():
    # the second row has no V: no distance, but the batch must not fail (this once raised
    # LinAlgError for the whole batch: singular Fisher matrix)
    t = Table({"sptype": ["G2 V", "G2 V", "K0 III"], "V": [8.0, np.nan, 9.0],
               "B-V": [0.9, 0.9, 1.2], "extra": [0, 1, 2]})
    out = estimate(t)
    _check_output(out, 3)
    assert out["flags"][1] & Flag.NO_DISTANCE
    assert np.isfinite(out["dm"][0]) and np.isfinite(out["dm"][2])
    # one colour alone: E(B-V) = (B-V) - (B-V)_0, the classic colour excess (common practice)
    assert out["ebv"][1] == pytest.approx(0.9 - out["bv0"][1], abs=1e-9)


NUMBER = st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                   st.floats(min_value=-2, max_value=25), st.just(-1e308), st.just(1e308))


@FUZZ_SLOW
@given(st.integers(min_value=1, max_value=15).flatmap(lambda n: st.tuples(
    st.lists(st.one_of(GOOD_TYPES, SPTYPE), min_size=n, max_size=n),
    st.lists(NUMBER, min_size=n, max_size=n), st.lists(NUMBER, min_size=n, max_size=n),
    st.lists(NUMBER, min_size=n, max_size=n))))
def test_estimate_float_columns(data):
    """Proper float columns (the fast path) holding NaN, inf and absurd values."""
    spt, b, v, e = data
    t = Table({"sptype": spt, "B": np.array(b, float), "V": np.array(v, float),
               "e_V": np.array(e, float), "extra": np.arange(len(spt))})
    with np.errstate(all="ignore"):
        out = estimate(t, fit_rv=True)
    _check_output(out, len(t))


@pytest.mark.parametrize("kind", ["pandas", "astropy"])
def test_masked_and_empty(kind):
    """Masked cells (astropy) and an empty table come through."""
    t = Table({"sptype": ["G2 V", "K0 III", "B3 V"], "V": [7.0, 8.0, 9.0], "B": [7.7, 9.1, 8.9],
               "extra": [0, 1, 2]}, masked=True)
    t["V"].mask = [False, True, False]
    t["sptype"].mask = [False, False, True]
    src = t.to_pandas() if kind == "pandas" else t
    out = estimate(src)
    _check_output(out, 3)
    flags = np.asarray(out["flags"])
    assert flags[0] == Flag.ERROR_DEFAULTED  # G2 V with B and V, no errors given
    assert flags[1] & Flag.EBV_ASSUMED_ZERO  # B alone: distance with E(B-V) = 0
    assert flags[2] & Flag.TYPE_UNREADABLE and flags[2] & Flag.NO_DISTANCE
    _check_output(estimate(src[:0]), 0)
