#!/usr/bin/env python
"""Fit intrinsic colours of M giants to Hipparcos photometry: V-Ic of M0-M5 III
and (B-V)0 of the M6-M8 III rows.

Run from the repository root after ``python calibrations/_build/fetch_hip_colours.py``:

    python calibrations/_build/fit_mgiant_colours.py

Data: Hipparcos main catalogue (ESA 1997, ESA SP-1200; fields H40 V-I, H42 its
source, H11 parallax, H76 spectral type), as written by fetch_hip_colours.py.

Selection: stars with EVEN HIP numbers only (the odd half is held out for
tests/test_colours_realdata.py); luminosity class exactly III; types M0-M5
(half subtypes kept, ranges such as M3/M4 at their mean); V-I measured
photoelectrically (H42 source codes A-K; codes L and later are derived from
the satellite's own photometry and are not used); parallax > 5 mas and
relative error < 20 % (within ~200 pc, where E(V-I) is a few hundredths of a
mag; it is not corrected, B-V being saturated for M giants).

Method: least-squares quadratic in sptnum (M0 = 60) with iterative 3-sigma
clipping (common practice); prints the fitted V-Ic at M0..M5, the number of
stars used, the rms scatter, and the formal error of the fitted values.  The
numbers printed are copied into make_tables.py (MGIANT_VI_FIT).

(B-V)0 of M6-M8 III: same selection but M4-M8 (types rounded to whole
subclasses; only the B-V is needed, any V-I source), parallax > 2 mas with
relative error < 30 %; linear in sptnum, 3-sigma clipped; evaluated at M6, M7,
M8 and copied into make_tables.py (EXTRA_III).  Long-period variables
dominate these types; B-V is that of the catalogue's mean V.  Reddening
(E(B-V) of a few hundredths within 500 pc) is not corrected.
"""
from __future__ import annotations

import os
import sys
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
import specpar  # noqa: E402

MEASURED_CODES = tuple("ABCDEFGHIJK")


def cache_file() -> Path:
    root = Path(os.environ.get("SPECPAR_REALDATA", Path.home() / ".cache" / "specpar-realdata"))
    return root / "hip_colours.csv"


def select_m_giants(d: pd.DataFrame, half: int, plx_min: float = 5.0, types=(60, 65),
                    measured_vi: bool = True, rel_err: float = 0.2) -> pd.DataFrame:
    """Class III M stars of one HIP half (0 = even, 1 = odd), types ``types``
    (sptnum range), with measured V-I when ``measured_vi``."""
    p = specpar.parse_sptypes(list(d["sptype"]))
    flags = np.array([int(f) for f in p["flags"]])
    bad = 1 | 2 | 4 | 16 | 32 | 4096  # no class, unreadable, unsupported, peculiar, uncertain, no subtype
    ok = ((flags & bad) == 0) & (p["lc_bright"] == "III").to_numpy() & (p["lc_faint"] == "III").to_numpy()
    ok &= (p["sptnum"] >= types[0]).to_numpy() & (p["sptnum"] <= types[1]).to_numpy()
    if measured_vi:
        ok &= d["r_vi"].isin(MEASURED_CODES).to_numpy() & np.isfinite(d["vi"]).to_numpy()
    ok &= (d["plx"] > plx_min).to_numpy() & (d["e_plx"] < rel_err * d["plx"]).to_numpy()
    ok &= (d["hip"] % 2 == half).to_numpy()
    return d[ok].assign(sptnum=p["sptnum"][ok].to_numpy())


def fit(x, y, deg=2, clip=3.0, iters=5):
    keep = np.ones(len(x), bool)
    for _ in range(iters):
        coef, cov = np.polyfit(x[keep] - 60.0, y[keep], deg, cov=True)
        res = y - np.polyval(coef, x - 60.0)
        rms = np.sqrt(np.mean(res[keep] ** 2))
        new = np.abs(res) < clip * rms
        if np.array_equal(new, keep):
            break
        keep = new
    return coef, cov, keep, rms


def main() -> int:
    path = cache_file()
    if not path.exists():
        sys.exit(f"{path} not found; run calibrations/_build/fetch_hip_colours.py first")
    d = pd.read_csv(path, keep_default_na=False, na_values=[""])
    s = select_m_giants(d, half=0)
    coef, cov, keep, rms = fit(s["sptnum"].to_numpy(), s["vi"].to_numpy())
    print(f"even-HIP M0-M5 III with measured V-I, plx > 5 mas: {len(s)} stars, {keep.sum()} kept "
          f"after 3-sigma clipping; rms {rms:.3f} mag")
    print("coefficients (V-Ic = c0 (n-60)^2 + c1 (n-60) + c2):", np.round(coef, 4).tolist())
    for k in range(6):
        t = float(k)
        J = np.array([t * t, t, 1.0])
        err = float(np.sqrt(J @ cov @ J))
        print(f"  M{k} III: V-Ic = {np.polyval(coef, t):.3f} +- {err:.3f}")

    s = select_m_giants(d, half=0, plx_min=2.0, types=(64, 68), measured_vi=False, rel_err=0.3)
    s = s[np.isfinite(s["bv"])]
    x = np.round(s["sptnum"].to_numpy())
    coef, cov, keep, rms = fit(x, s["bv"].to_numpy(), deg=1)
    print(f"even-HIP M4-M8 III with B-V, plx > 2 mas: {len(s)} stars, {keep.sum()} kept; "
          f"rms {rms:.3f} mag; (B-V) = {coef[0]:+.4f} (n-60) {coef[1]:+.4f}")
    for k in (4, 5, 6, 7, 8):
        J = np.array([float(k), 1.0])
        err = float(np.sqrt(J @ cov @ J))
        print(f"  M{k} III: B-V = {np.polyval(coef, float(k)):.3f} +- {err:.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
