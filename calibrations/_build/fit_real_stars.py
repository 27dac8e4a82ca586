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

Steps (every step starts from the LITERAL tables, built by ``make_tables.py`` without
fitted_mv.ecsv in a temporary folder, so a second run gives the same file):
0. The shrinkage scale tau of step 3 is chosen by two-fold cross-validation inside the even
   half (fit on HIP = 0 mod 4, score on HIP = 2 mod 4 and the other way round; function
   ``choose_tau``); the odd half plays no part. ``--tau`` fixes it instead.
1. ``specpar.calibrate`` (maximum likelihood of the parallax given V, Ratnatunga &
   Casertano 1991; second-difference smoothing) per class -> M_V(type), scatter.
2. The fitted curves replace M_V and sig_M_V at the rows of the shipped tables
   inside the fitted type range (intrinsic colours stay as they are).
3. Volume-complete check on the same even half (``specpar.calfit.validate``):
   per class x temperature class with >= MIN_GROUP stars, the median distance offset is
   removed and sig_M_V is rescaled so that 68% of the trigonometric distances fall
   in the 16-84% interval; each group's median correction is shrunk towards the class-wide
   mean by its sampling noise and tau (function ``corrections``); the corrections are set at the groups' median types and
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
#: Shrinkage scales (mag) tried by cross-validation inside the even half; inf = none
TAUS = (0.0, 0.05, 0.1, 0.2, 0.4, np.inf)
#: Classes scored in that cross-validation (the refitted ones and their blends)
SCORED = ("IV-V", "IV", "III-IV", "III", "II-III", "II")
#: A fixed tau (mag) skips the cross-validation; set with --tau
TAU = np.nan
ROUNDS = 4  # correction rounds (the corrections interact through the interpolation in type)
MAX_E_MV = 0.65  # a fitted M_V is used where its uncertainty is at most this (mag)
#: K0 and K1 III: the red clump, M_Ks = -1.61 (Hawkins et al. 2017, from memory) plus the row's
#: (V-Ks)_0; the fit's core (clump) component is compared with it in the report
RED_CLUMP = ("K0", "K1")
RED_CLUMP_MKS = -1.61


def survey_stars():
    t = realdata.load()
    return t[np.asarray(t["hip_survey"], dtype=bool)]


def literal_tables(folder: Path) -> Path:
    """The tables as ``make_tables.py`` builds them WITHOUT fitted_mv.ecsv (literal M_V), in
    ``folder``: the base of every fit, so that running this script again gives the same result
    whatever the shipped tables hold."""
    import contextlib
    import importlib.util
    import io
    spec = importlib.util.spec_from_file_location("_make_tables", Path(__file__).with_name("make_tables.py"))
    mt = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mt)
    mt.OUTDIR = folder
    mt.FITTED_MV = folder / "no_fitted_mv.ecsv"  # absent: literal values only
    with contextlib.redirect_stdout(io.StringIO()):
        mt.main()
    return folder


def candidate_tables(fits, folder: Path, corr=None, base: Path = ROOT / "calibrations"):
    """Shipped tables with M_V, sig_M_V from the fit; returns paths and, per class, the row values.

    Rows where the fit is informative (e_M_V <= MAX_E_MV) take the fitted values;
    the other rows of the class keep their previous value shifted by the fit-minus-
    previous offset interpolated in type from the informative rows (constant
    beyond them), and the scatter interpolated likewise, so no steps appear.
    K0 and K1 III are anchored on the red clump (see RED_CLUMP).
    """
    paths, values = [], {}
    for lc in REPLACE:
        t = Table.read(base / DEFAULT_FILES[lc], format="ascii.ecsv")
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


def corrections(v, values, state, tau=np.inf):
    """Per-class corrections of M_V and sig_M_V^2 from the tested groups of validation ``v``.

    ``state`` holds, per class, the corrections applied so far at the groups' median types
    (``centres``). A group's total correction D = applied + its remaining median offset is
    shrunk towards the class-wide mean T (random-effects mean with weights 1/(se^2 + tau^2)):
    C = T + w (D - T), w = tau^2 / (tau^2 + se^2), se = 1.2533 s / sqrt(n) the standard error
    of the group's median (s the group's per-star scatter in mag). tau = inf keeps D (no
    shrinkage); tau = 0 gives one constant per class. The corrections are interpolated
    linearly in type between the centres (constant beyond them). Returns (row corrections
    per class, new state).
    """
    rows, new_state = {}, {}
    for lc, (x, *_rest) in values.items():
        g = v[(v["lclass"] == lc) & (v["n"] >= MIN_GROUP)]
        if len(g) == 0:
            if state.get(lc) is not None:
                new_state[lc] = state[lc]
                rows[lc] = _rows(x, *state[lc])
            else:
                rows[lc] = (np.zeros(len(x)), np.zeros(len(x)))
            continue
        order = np.argsort(np.asarray(g["sptnum_median"], float))
        g = g[order]
        centres = np.asarray(g["sptnum_median"], float)  # the group's median type
        dm = np.asarray(g["dmag_median"], float)  # phot/trig > 1: table too bright -> fainter
        cov = np.clip(np.asarray(g["coverage"], float), 0.05, 0.98)
        sp = np.asarray(g["sig_pred"], float)
        s_act = sp / norm.ppf((1 + cov) / 2)
        if state.get(lc) is not None:
            c0, applied, dsig2_0 = state[lc]
            applied, dsig2_0 = np.interp(centres, c0, applied), np.interp(centres, c0, dsig2_0)
        else:
            applied, dsig2_0 = np.zeros(len(g)), np.zeros(len(g))
        total = applied + dm
        if np.isfinite(tau):
            se2 = (1.2533 * s_act) ** 2 / np.asarray(g["n"], float)
            wt = 1.0 / (se2 + tau ** 2)
            mean = np.sum(wt * total) / np.sum(wt)
            total = mean + tau ** 2 / (tau ** 2 + se2) * (total - mean)
        dsig2 = dsig2_0 + s_act ** 2 - sp ** 2
        new_state[lc] = (centres, total, dsig2)
        rows[lc] = _rows(x, centres, total, dsig2)
    return rows, new_state


def _rows(x, centres, total, dsig2):
    return np.interp(x, centres, total), np.interp(x, centres, dsig2)


def build(stars, fits, tmp: Path, base: Path, tau=np.inf, verbose=True, label="even half (fitting stars)"):
    """ROUNDS correction rounds with shrinkage ``tau`` on the maximum-likelihood ``fits`` of
    ``stars`` (``calibrate(stars).tables``, which do not depend on tau). Returns the row values
    of the final candidate tables and their paths."""
    if verbose:
        for lc, f in fits.items():
            print(f"class {lc}: {f.meta['notes'][:160]}...")
    corr, state = {}, {}
    vlim = realdata.completeness_limits(stars)
    for rnd in range(ROUNDS + 1):
        folder = Path(tempfile.mkdtemp(prefix=f"round{rnd}_", dir=tmp))  # new paths: the loader caches by path
        paths, values = candidate_tables(fits, folder, corr, base)
        if rnd < ROUNDS or verbose:
            v = validate(stars, calibrations=paths, v_limit=vlim)
        if verbose:
            print(format_validation(v, f"{label}, round {rnd}"))
        if rnd < ROUNDS:
            corr, state = corrections(v, values, state, tau)
    return values, paths


def choose_tau(stars, tmp: Path, base: Path):
    """Shrinkage tau by two-fold cross-validation INSIDE the fitting half: fit on HIP = 0 mod 4,
    score on HIP = 2 mod 4, and the other way round. Score: star-weighted mean squared
    5 log10(median d_phot/d_trig) over the scored fold's groups of >= MIN_GROUP stars in the
    refitted classes and their blends."""
    hip = np.asarray(stars["hip"])
    folds = (stars[hip % 4 == 0], stars[hip % 4 == 2])
    fold_fits = [calibrate(f, sample=SAMPLE).tables for f in folds]
    scores = {}
    for tau in TAUS:
        num = den = 0.0
        for k in (0, 1):
            _v, paths = build(folds[k], fold_fits[k], tmp, base, tau, verbose=False)
            held = folds[1 - k]
            v = validate(held, calibrations=paths, v_limit=realdata.completeness_limits(held))
            g = v[np.isin(v["lclass"], SCORED) & (v["n"] >= MIN_GROUP)]
            num += float(np.sum(g["n"] * g["dmag_median"] ** 2))
            den += float(np.sum(g["n"]))
        scores[tau] = num / den
        print(f"  tau {tau:>5}: cross-validated mean squared offset {scores[tau]:.4f} mag^2 ({den:.0f} stars)")
    best = min(scores, key=scores.get)
    return best, scores


def main(argv=None):
    import argparse
    ap = argparse.ArgumentParser(description="Fit M_V and its scatter of classes IV, III, II to even-HIP stars.")
    ap.add_argument("--tau", type=float, default=TAU, help="fixed shrinkage scale in mag (inf: none); "
                    "default: chosen by cross-validation inside the even half")
    args = ap.parse_args(argv)
    stars = survey_stars()
    even, odd = realdata.fit_half(stars), realdata.test_half(stars)
    print(f"{len(stars)} Survey stars; fitting on {len(even)} with even HIP numbers")
    with tempfile.TemporaryDirectory() as tmp:
        base = literal_tables(Path(tempfile.mkdtemp(prefix="literal_", dir=tmp)))
        if not np.isnan(args.tau):
            tau = args.tau
        else:
            print("choosing the shrinkage by cross-validation inside the even half (HIP mod 4):")
            tau, _scores = choose_tau(even, Path(tmp), base)
            print(f"  chosen tau = {tau}")
        fits = calibrate(even, sample=SAMPLE).tables
        values, _paths = build(even, fits, Path(tmp), base, tau)
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
