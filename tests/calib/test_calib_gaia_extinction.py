"""Colour-dependent Gaia extinction coefficients (specpar.calib.gaia_extinction).

References: the Gaia EDR3 extinction coefficients (Riello et al. 2021, A&A 649, A3; the shipped
table) as published in machine-readable form in the registry package dustapprox 0.2.0, and an
independent reference from the same wheel: its precomputed synthetic photometry of Kurucz model
atmospheres through the Gaia DR3 passbands (Fouesneau et al. 2022, A&A 659, A176), with the
effective temperature mapped to (BP-RP)_0 by the Mamajek dwarf table (meanstars package).
The wheel is fetched by ``calibrations/_build/make_gaia_extinction.py --check``; without it these
tests skip (fail when SPECPAR_REQUIRE_REALDATA=1).
"""
import io
import os
import re
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from specpar.calib.gaia_extinction import gaia_coefficients, gaia_k

CACHE = Path(os.environ.get("SPECPAR_REALDATA", "~/.cache/specpar-realdata")).expanduser()
WHEEL = CACHE / "dustapprox-0.2.0-py3-none-any.whl"
COEFFS = "dustapprox/data/Fitz19_EDR3_extinctionlawcoefficients/Fitz19_EDR3_MainSequence.csv"
GRID = "dustapprox/data/precomputed/grids/kurucz_gaiaedr3_small_a0_grid.csv"


@pytest.fixture(scope="module")
def wheel():
    if not WHEEL.exists():
        if os.environ.get("SPECPAR_REQUIRE_REALDATA") == "1":
            pytest.fail(f"{WHEEL.name} missing: run calibrations/_build/make_gaia_extinction.py --check")
        pytest.skip("run calibrations/_build/make_gaia_extinction.py --check to fetch the reference")
    return zipfile.ZipFile(WHEEL)


def test_shipped_coefficients_are_the_published_ones(wheel):
    pub = pd.read_csv(io.BytesIO(wheel.read(COEFFS)))
    pub = pub[pub["Xname"] == "BPRP"].set_index("Kname")
    for band, k in (("G", "kG"), ("BP", "kBP"), ("RP", "kRP")):
        c = pub.loc[k]
        for x0, a0 in ((0.3, 0.1), (1.0, 1.0), (2.0, 3.0)):
            want = (c.Intercept + c.X * x0 + c.X2 * x0 ** 2 + c.X3 * x0 ** 3 + c.A * a0 + c.A2 * a0 ** 2
                    + c.A3 * a0 ** 3 + c.XA * x0 * a0 + c.AX2 * a0 * x0 ** 2 + c.XA2 * x0 * a0 ** 2)
            assert float(gaia_k(band, x0, a0)) == pytest.approx(want, rel=1e-12)


def _teff_to_bprp():
    import importlib.util
    spec = importlib.util.find_spec("MeanStars")
    path = Path(spec.origin).parent / "EEM_dwarf_UBVIJHK_colors_Teff.txt"
    lines = path.read_text().splitlines()
    head = next(ln.split() for ln in lines if ln.startswith("#SpT"))
    rows = [ln.split()[:len(head)] for ln in lines if re.match(r"^[OBAFGKM]\d", ln)]
    df = pd.DataFrame(rows, columns=head)
    te, c = pd.to_numeric(df["Teff"], errors="coerce"), pd.to_numeric(df["Bp-Rp"], errors="coerce")
    ok = np.isfinite(te) & np.isfinite(c)
    order = np.argsort(te[ok].to_numpy())
    return te[ok].to_numpy()[order], c[ok].to_numpy()[order]


def test_colour_dependence_matches_an_independent_synthetic_grid(wheel):
    grid = pd.read_csv(io.BytesIO(wheel.read(GRID)))
    ms = grid[(grid["logg"] == 4.5) & (grid["feh"] == 0.0) & (grid["A0"] == 1.0)]
    ax = ms.pivot_table(index="teff", columns="passband", values="Ax")
    te, bprp = _teff_to_bprp()
    teffs = np.array([4000.0, 5000.0, 6000.0, 7000.0, 8000.0, 10000.0])
    ref = ax.loc[teffs, ["GAIA_GAIA3.G", "GAIA_GAIA3.Gbp", "GAIA_GAIA3.Grp"]].to_numpy()
    ours = np.stack([gaia_k(b, np.interp(teffs, te, bprp), 1.0) for b in ("G", "BP", "RP")], axis=1)
    print("\nTeff, k_G k_BP k_RP (EDR3 relation) vs synthetic grid:")
    for t, o, r in zip(teffs, ours, ref):
        print(f"  {t:6.0f}  {np.round(o, 3)}  {np.round(r, 3)}")
    # the level agrees within 7% (the two differ in extinction curve and model spectra) ...
    assert np.all(np.abs(ours / ref - 1) < 0.07)
    # ... and the colour dependence, 4000 K against 10000 K, within 3%: A_G and E(BP-RP) per A_0
    # fall by 23-25% and 20-21% from A stars to K dwarfs in both
    for o, r in ((ours[:, 0], ref[:, 0]), (ours[:, 1] - ours[:, 2], ref[:, 1] - ref[:, 2])):
        assert o[0] / o[-1] == pytest.approx(r[0] / r[-1], rel=0.03)


def test_coefficients_per_colour_excess():
    # A_band / E(B-V) = R_V k(x0, R_V E(B-V)); the same colour beyond the table's range is clamped
    c = gaia_coefficients(1.0, 0.2, 3.1)
    assert c[0] == pytest.approx(3.1 * float(gaia_k("G", 1.0, 0.62)), rel=1e-12)
    assert np.allclose(gaia_coefficients(3.5, 0.1, 3.1), gaia_coefficients(2.5, 0.1, 3.1))
    # K dwarfs redden less in BP-RP than A stars per unit E(B-V) (common practice)
    assert (c[1] - c[2]) < np.subtract(*gaia_coefficients(0.0, 0.2, 3.1)[1:])
