#!/usr/bin/env python
"""Fit M_V and its scatter per type and luminosity class to real stars; write
``calibrations/_build/fitted_mv.ecsv``, which ``make_tables.py`` folds into the
shipped tables (function ``apply_fitted_mv`` there).

Run from the repository root after ``python -m specpar.calfit.realdata`` (fetches the
catalogues once):

    python calibrations/_build/fit_real_stars.py

Data: Hipparcos Survey stars with V <= 8 (ESA 1997; parallaxes of the new
reduction, van Leeuwen 2007) with MK types from the Bright Star Catalogue 5th ed.
(Hoffleit & Warren 1991) where matched, else the Hipparcos spectral type.
ONLY stars with EVEN HIP numbers are used here; odd HIP numbers are the held-out
half of the tests (tests/calfit/test_calfit_realdata.py).

Steps:
1. ``specpar.calibrate`` (maximum likelihood of the parallax given V, Ratnatunga &
   Casertano 1991; second-difference smoothing) per class -> M_V(type), scatter.
2. The fitted curves replace M_V and sig_M_V at the rows of the shipped tables
   inside the fitted type range (intrinsic colours stay as they are).
3. Volume-complete check on the same even half (``specpar.calfit.validate``):
   per class x temperature class with >= MIN_GROUP stars, the median distance offset is
   removed and sig_M_V is rescaled so that 68% of the trigonometric distances fall
   in the 16-84% interval; the corrections are set at the groups' median types and
   interpolated linearly in type between them (no steps). ROUNDS rounds.
Rows where the fit is uninformative (e_M_V > MAX_E_MV) keep their previous value
shifted by the fit-minus-previous offset interpolated in type. K0-K1 III are set on
the red clump of Hawkins et al. (2017) through the row's (V-Ks)_0.
Class V keeps the published dwarf table (Pecaut & Mamajek 2013) and the supergiant
classes keep theirs (their parallaxes are too few and too small); the fits of those
are written for comparison only (dwarfs_fit_vs_PM13.ecsv, supergiants_fit_vs_table.ecsv).
"""
from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import numpy as np
from astropy.table import Table, vstack
from scipy.stats import norm

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from specpar.calfit import realdata  # noqa: E402
from specpar.calfit import calibrate, format_validation, validate  # noqa: E402
from specpar.calib.tables import DEFAULT_FILES # noqa: E402

OUT = Path(__file__).resolve().parent / "fitted_mv.ecsv"
SAMPLE = ("Hipparcos Survey stars V <= 8 with new-reduction parallaxes; BSC5 MK types where "
          "matched, else Hipparcos types; EVEN HIP numbers only (odd HIP held out)")
REPLACE = ("IV", "III", "II")  # supergiants keep the published (from memory) values; see the report
MIN_GROUP = 10  # fewest stars of a volume-complete group whose median and coverage set a correction
SIG_FLOOR = 0.10
ROUNDS = 4  # correction rounds (the corrections interact through the interpolation in type)
MAX_E_MV = 0.65  # a fitted M_V is used where its uncertainty is at most this (mag)
#: K0 and K1 III: the red clump, M_Ks = -1.61 (Hawkins et al. 2017, from memory) plus the row's
#: (V-Ks)_0; the fit's core (clump) component is compared with it in the report
RED_CLUMP = ("K0", "K1")
RED_CLUMP_MKS = -1.61


def survey_stars():
    t = realdata.load()
    return t[np.asarray(t["hip_survey"], dtype=bool)]


def candidate_tables(fits, folder: Path, corr=None):
    """Shipped tables with M_V, sig_M_V from the fit; returns paths and, per class, the row values.

    Rows where the fit is informative (e_M_V <= MAX_E_MV) take the fitted values;
    the other rows of the class keep their previous value shifted by the fit-minus-
    previous offset interpolated in type from the informative rows (constant
    beyond them), and the scatter interpolated likewise, so no steps appear.
    K0 and K1 III are anchored on the red clump (see RED_CLUMP).
    """
    paths, values = [], {}
    for lc in REPLACE:
        t = Table.read(ROOT / "calibrations" / DEFAULT_FILES[lc], format="ascii.ecsv")
        f = fits.get(lc)
        if f is None or len(f) < 2:
            continue
        x = np.asarray(t["sptnum"], float)
        old = np.asarray(t["M_V"], float)
        fx = np.asarray(f["sptnum"], float)
        mv_f = np.interp(x, fx, f["M_V"])
        sig_f = np.interp(x, fx, f["sig_M_V"])
        emv = np.interp(x, fx, f["e_M_V"])
        near = np.round(np.interp(x, fx, f["n_near"])).astype(int)
        inrange = (x >= fx.min()) & (x <= fx.max())
        good = inrange & (emv <= MAX_E_MV)
        if not good.any():
            continue
        mv = old + np.interp(x, x[good], (mv_f - old)[good])
        sig = np.interp(x, x[good], sig_f[good])
        dmv, dsig2 = (corr or {}).get(lc, (np.zeros(len(x)), np.zeros(len(x))))
        mv = mv + dmv
        sig = np.sqrt(np.clip(sig ** 2 + dsig2, SIG_FLOOR ** 2, None))
        kind = np.where(good, "fit", "shifted")
        if lc == "III":
            for st in RED_CLUMP:
                i = np.flatnonzero(np.asarray(t["sptype"]) == st)
                if i.size:
                    mv[i] = RED_CLUMP_MKS + float(t["V-Ks"][i[0]])
                    kind[i] = "clump"
        t["M_V"] = np.round(mv, 2)
        t["sig_M_V"] = np.round(sig, 2)
        values[lc] = (x, np.ones(len(x), bool), mv, sig, emv, near, np.asarray(t["sptype"]), kind, mv_f)
        p = folder / DEFAULT_FILES[lc]
        t.write(p, format="ascii.ecsv", overwrite=True)
        paths.append(str(p))
    return paths, values


def corrections(v, values, old):
    """Per-class corrections of M_V and sig_M_V^2 interpolated from the tested groups."""
    out = {}
    for lc, (x, inside, mv, sig, *_rest) in values.items():  # noqa: B007
        g = v[(v["lclass"] == lc) & (v["n"] >= MIN_GROUP)]
        dmv0, dsig20 = old.get(lc, (np.zeros(len(x)), np.zeros(len(x))))
        if len(g) == 0:
            out[lc] = (dmv0, dsig20)
            continue
        centres = np.asarray(g["sptnum_median"], float)  # the group's median type
        dm = np.asarray(g["dmag_median"], float)  # phot/trig > 1: table too bright -> fainter
        cov = np.clip(np.asarray(g["coverage"], float), 0.05, 0.98)
        sp = np.asarray(g["sig_pred"], float)
        s_act = sp / norm.ppf((1 + cov) / 2)
        dsig2 = s_act ** 2 - sp ** 2
        order = np.argsort(centres)
        out[lc] = (dmv0 + np.interp(x, centres[order], dm[order]),
                   dsig20 + np.interp(x, centres[order], dsig2[order]))
    return out


def main():
    stars = survey_stars()
    even, odd = realdata.fit_half(stars), realdata.test_half(stars)
    print(f"{len(stars)} Survey stars; fitting on {len(even)} with even HIP numbers")
    res = calibrate(even, sample=SAMPLE)
    fits = res.tables
    for lc, f in fits.items():
        print(f"class {lc}: {f.meta['notes'][:160]}...")
    corr = {}
    with tempfile.TemporaryDirectory() as tmp:
        for rnd in range(ROUNDS + 1):
            folder = Path(tmp) / f"round{rnd}"  # new paths: the table loader caches by path
            folder.mkdir()
            paths, values = candidate_tables(fits, folder, corr)
            v = validate(even, calibrations=paths, v_limit=realdata.completeness_limits(even))
            print(format_validation(v, f"even half (fitting stars), round {rnd}"))
            if rnd < ROUNDS:
                corr = corrections(v, values, corr)
    rows = []
    for lc, (x, inside, mv, sig, emv, near, names, kind, mv_f) in values.items():
        for i in np.flatnonzero(inside):
            rows.append((lc, str(names[i]), x[i], round(float(mv[i]), 2), round(float(sig[i]), 2),
                         round(float(emv[i]), 2), int(near[i]), str(kind[i]), round(float(mv_f[i]), 2)))
    out = Table(rows=rows, names=("lclass", "sptype", "sptnum", "M_V", "sig_M_V", "e_M_V", "n_near", "kind",
                                  "M_V_ml"))
    # supergiants: published (from memory) values kept; the fit for comparison
    comp = []
    for lc in ("Ib", "Iab", "Ia"):
        f = fits.get(lc)
        if f is None:
            continue
        t = Table.read(ROOT / "calibrations" / DEFAULT_FILES[lc], format="ascii.ecsv")
        for r in f:
            j = np.flatnonzero(np.isclose(t["sptnum"], r["sptnum"]))
            if j.size:
                comp.append((lc, r["sptype"], float(t["M_V"][j[0]]), float(r["M_V"]), float(r["e_M_V"]),
                             int(r["n_near"])))
    if comp:
        Table(rows=comp, names=("lclass", "sptype", "M_V_table", "M_V_fit", "e_M_V_fit", "n_near")).write(
            OUT.with_name("supergiants_fit_vs_table.ecsv"), format="ascii.ecsv", overwrite=True)
    # class V: the fit, for comparison with the published dwarf table
    if "V" in fits:
        fv = fits["V"]
        dw = Table.read(ROOT / "calibrations" / DEFAULT_FILES["V"], format="ascii.ecsv")
        xv = np.asarray(dw["sptnum"], float)
        ok = (xv >= fv["sptnum"].min()) & (xv <= fv["sptnum"].max())
        comp = Table({"sptype": dw["sptype"][ok], "M_V_PM13": dw["M_V"][ok],
                      "M_V_fit": np.round(np.interp(xv[ok], fv["sptnum"], fv["M_V"]), 2),
                      "e_M_V_fit": np.round(np.interp(xv[ok], fv["sptnum"], fv["e_M_V"]), 2),
                      "sig_fit": np.round(np.interp(xv[ok], fv["sptnum"], fv["sig_M_V"]), 2)})
        comp.write(OUT.with_name("dwarfs_fit_vs_PM13.ecsv"), format="ascii.ecsv", overwrite=True)
    out.meta["description"] = ("M_V and sig_M_V fitted to real stars by calibrations/_build/fit_real_stars.py "
                               "(maximum likelihood, specpar.calibrate, then volume-complete median and "
                               "coverage corrections on the same stars)")
    out.meta["sample"] = SAMPLE
    out.meta["fit_notes"] = {lc: f.meta["notes"] for lc, f in fits.items()}
    out.write(OUT, format="ascii.ecsv", overwrite=True)
    print(f"{len(out)} rows -> {OUT.relative_to(ROOT)}")


if __name__ == "__main__":
    main()
