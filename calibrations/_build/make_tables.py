#!/usr/bin/env python
"""Build the specpar calibration tables (one ECSV 1.0 file per luminosity class).

Run from the repository root:

    python calibrations/_build/make_tables.py

What it does
------------
* ``dwarfs_V.ecsv`` is derived programmatically from the mean dwarf sequence
  of E. Mamajek that the ``meanstars`` package ships
  (``EEM_dwarf_UBVIJHK_colors_Teff.txt``, Version 2022.04.16; published as
  Pecaut & Mamajek 2013, ApJS 208, 9, Table 5).  Numbers are copied exactly.
* The other six classes are literal data typed into this script (see the
  ``*_DATA`` blocks below).  Every number there was written down from memory
  of the cited publications; nothing was copied from a file on this machine,
  and every row's ``source`` says so.  A few columns are computed from those
  literal numbers with published transformations (Carpenter 2001 for 2MASS,
  Evans et al. 2018 for Gaia DR2); the code that does this is below.
* Section 6 fills the colours other than B-V, U-B of the non-dwarf classes
  (V-Rc, V-Ic, V-Ks, J-H, H-Ks, G-V, BP-RP, G-RP) and adds rows K4-K5 IV and
  M6-M8 III; its header comment states the rules.

Conventions: sptnum O0=0, B0=10, A0=20, F0=30, G0=40, K0=50, M0=60.
All magnitudes and colours are in mag.  Missing values are masked.
"""

from __future__ import annotations

import importlib.metadata
import importlib.util
import re
import sys
from collections import OrderedDict
from pathlib import Path

import numpy as np
import astropy.units as u
from astropy.table import MaskedColumn, Table
from scipy.interpolate import PchipInterpolator

OUTDIR = Path(__file__).resolve().parent.parent  # the calibrations/ folder

# ---------------------------------------------------------------------------
# Column layout (order is part of the format)
# ---------------------------------------------------------------------------
COLOURS = ["B-V", "U-B", "V-Rc", "V-Ic", "V-Ks", "J-H", "H-Ks",
           "G-V", "BP-RP", "G-RP"]

DESCRIPTIONS = OrderedDict([
    ("sptype", "MK spectral type without luminosity class, e.g. 'B2.5', 'K0'"),
    ("sptnum", "numeric spectral type: O0=0, B0=10, A0=20, F0=30, G0=40, "
               "K0=50, M0=60 (B2.5 -> 12.5)"),
    ("M_V", "absolute visual magnitude (Johnson V)"),
    ("sig_M_V", "intrinsic (cosmic) 1-sigma scatter of M_V at this type and "
                "class; see table meta sig_M_V_source"),
    ("B-V", "intrinsic colour Johnson B - Johnson V"),
    ("U-B", "intrinsic colour Johnson U - Johnson B"),
    ("V-Rc", "intrinsic colour Johnson V - Cousins Rc"),
    ("V-Ic", "intrinsic colour Johnson V - Cousins Ic"),
    ("V-Ks", "intrinsic colour Johnson V - 2MASS Ks"),
    ("J-H", "intrinsic colour 2MASS J - 2MASS H"),
    ("H-Ks", "intrinsic colour 2MASS H - 2MASS Ks"),
    ("G-V", "intrinsic colour Gaia G - Johnson V (Gaia DR2 passbands)"),
    ("BP-RP", "intrinsic colour Gaia G_BP - G_RP (Gaia DR2 passbands)"),
    ("G-RP", "intrinsic colour Gaia G - G_RP (Gaia DR2 passbands)"),
    ("source", "reference(s) for the values in this row; 'from memory' marks "
               "numbers recalled rather than copied from a file"),
])

# ---------------------------------------------------------------------------
# References (used in table meta)
# ---------------------------------------------------------------------------
REF = {
    "PM13": ("Pecaut, M. J. & Mamajek, E. E. 2013, ApJS 208, 9, 'Intrinsic "
             "colors, temperatures, and bolometric corrections of pre-main-"
             "sequence stars', Table 5; bibcode 2013ApJS..208....9P; "
             "doi:10.1088/0067-0049/208/1/9"),
    "EEM": ("Mamajek, E. E., 'A Modern Mean Dwarf Stellar Color and "
            "Effective Temperature Sequence', online table Version "
            "2022.04.16, as shipped in the meanstars package "
            "(EEM_dwarf_UBVIJHK_colors_Teff.txt)"),
    "SK82": ("Schmidt-Kaler, Th. 1982, in Landolt-Boernstein, New Series, "
             "Group VI, Vol. 2b, Stars and Star Clusters, ed. K. Schaifers & "
             "H. H. Voigt (Berlin: Springer), Sect. 4.1.2, tables of M_V and "
             "of intrinsic colours (B-V)0, (U-B)0 versus spectral type and "
             "luminosity class (from memory; table numbers, bibcode and DOI "
             "not verified here)"),
    "BB88": ("Bessell, M. S. & Brett, J. M. 1988, PASP 100, 1134, 'JHKLM "
             "photometry: standard systems, passbands, and intrinsic colors', "
             "Table III (intrinsic colours of giants); bibcode "
             "1988PASP..100.1134B (from memory)"),
    "B79": ("Bessell, M. S. 1979, PASP 91, 589, 'UBVRI photometry. II. The "
            "Cousins VRI system, its temperature and absolute flux "
            "calibration, and relevance for two-dimensional photometry'; "
            "bibcode 1979PASP...91..589B (Cousins V-R, V-I of giants; from "
            "memory, table number not verified)"),
    "C01": ("Carpenter, J. M. 2001, AJ 121, 2851, 'Color transformations for "
            "the 2MASS Second Incremental Data Release', Appendix A "
            "(Bessell & Brett system -> 2MASS); bibcode 2001AJ....121.2851C "
            "(coefficients from memory)"),
    "E18": ("Evans, D. W. et al. 2018, A&A 616, A4, 'Gaia Data Release 2: "
            "photometric content and validation', Appendix A, Table A.2 "
            "(Johnson-Cousins relations in V-Ic); bibcode "
            "2018A&A...616A...4E; doi:10.1051/0004-6361/201832756 "
            "(coefficients from memory)"),
    "R21": ("Riello, M. et al. 2021, A&A 649, A3, 'Gaia Early Data Release "
            "3: Photometric content and validation', Appendix C, Table C.2; "
            "bibcode 2021A&A...649A...3R; doi:10.1051/0004-6361/202039587 "
            "(cited for the DR2->DR3 comparison in the notes only)"),
    "H17": ("Hawkins, K., Leistedt, B., Bovy, J. & Hogg, D. W. 2017, MNRAS "
            "471, 722, 'Red clump stars and Gaia: calibration of the "
            "standard candle using a hierarchical probabilistic model', "
            "red-clump absolute magnitude M_Ks = -1.61 (table number not "
            "verified); bibcode 2017MNRAS.471..722H (from memory)"),
    "JG98": ("Jaschek, C. & Gomez, A. E. 1998, A&A 330, 619, absolute "
             "magnitudes of MK standards from Hipparcos parallaxes; "
             "bibcode 1998A&A...330..619J (from memory; used qualitatively "
             "for sig_M_V)"),
}

# ---------------------------------------------------------------------------
# Helpers
# ---------------------------------------------------------------------------
_CLASS_OFFSET = {"O": 0.0, "B": 10.0, "A": 20.0, "F": 30.0, "G": 40.0,
                 "K": 50.0, "M": 60.0}


def sptnum(sptype: str) -> float:
    """'B2.5' -> 12.5, 'M3' -> 63.0 (luminosity class must be stripped)."""
    return _CLASS_OFFSET[sptype[0]] + float(sptype[1:])


def bb_to_2mass(vk_bb, jh_bb, hk_bb):
    """Bessell & Brett (1988) system -> 2MASS, Carpenter (2001) App. A.

    Ks(2MASS)  = K_BB - 0.039 + 0.001 (J-K)_BB
    (J-H)2MASS = 0.990 (J-H)_BB - 0.049
    (H-Ks)2MASS = 0.971 (H-K)_BB + 0.034
    (coefficients from memory)
    """
    jk_bb = jh_bb + hk_bb
    vks = vk_bb + 0.039 - 0.001 * jk_bb
    jh = 0.990 * jh_bb - 0.049
    hks = 0.971 * hk_bb + 0.034
    return vks, jh, hks


# Gaia DR2 relations in x = V-Ic (Evans et al. 2018, Table A.2; from memory).
# Applied only inside GAIA_VI_RANGE (about the colour range of the Landolt
# standards they were fitted to).  Checked against the dwarf table below.
GAIA_VI_RANGE = (-0.3, 2.7)


def gaia_dr2_from_vi(vi):
    vi = np.asarray(vi, dtype=float)
    g_v = -0.01746 + 0.008092 * vi - 0.2810 * vi**2 + 0.03655 * vi**3
    bp_rp = -0.04212 + 1.286 * vi - 0.09494 * vi**2
    ok = np.isfinite(vi) & (vi >= GAIA_VI_RANGE[0]) & (vi <= GAIA_VI_RANGE[1])
    return np.where(ok, g_v, np.nan), np.where(ok, bp_rp, np.nan)


def pchip_at(x_known, y_known, x_new):
    """PCHIP in sptnum through the finite points; NaN outside their range."""
    x_known = np.asarray(x_known, float)
    y_known = np.asarray(y_known, float)
    good = np.isfinite(y_known)
    out = np.full(np.shape(x_new), np.nan)
    if good.sum() < 2:
        return out
    xk, yk = x_known[good], y_known[good]
    f = PchipInterpolator(xk, yk, extrapolate=False)
    x_new = np.asarray(x_new, float)
    inside = (x_new >= xk.min()) & (x_new <= xk.max())
    out[inside] = f(x_new[inside])
    return out


def make_table(rows, meta):
    """rows: list of dicts with sptype, M_V, sig_M_V, colours (NaN=missing),
    source.  Returns an astropy Table in the exact column order."""
    rows = sorted(rows, key=lambda r: sptnum(r["sptype"]))
    t = Table(meta=meta)
    t["sptype"] = np.array([r["sptype"] for r in rows], dtype=str)
    t["sptnum"] = np.array([sptnum(r["sptype"]) for r in rows], dtype=np.float64)
    t["M_V"] = np.array([r["M_V"] for r in rows], dtype=np.float64) * u.mag
    t["sig_M_V"] = np.array([r["sig_M_V"] for r in rows], dtype=np.float64) * u.mag
    for c in COLOURS:
        vals = np.array([r.get(c, np.nan) for r in rows], dtype=np.float64)
        vals = np.round(vals, 3)
        t[c] = MaskedColumn(np.where(np.isfinite(vals), vals, 0.0),
                            mask=~np.isfinite(vals), dtype=np.float64,
                            unit=u.mag)
    t["source"] = np.array([r["source"] for r in rows], dtype=str)
    for name, desc in DESCRIPTIONS.items():
        t[name].description = desc
    # sanity
    assert np.all(np.diff(t["sptnum"]) > 0), "duplicate or unsorted sptnum"
    assert np.all(np.isfinite(t["M_V"])) and np.all(np.isfinite(t["sig_M_V"]))
    assert not np.any(t["B-V"].mask), "every row needs B-V"
    return t


def write(t, fname):
    path = OUTDIR / fname
    t.write(path, format="ascii.ecsv", overwrite=True)
    print(f"wrote {fname}: {len(t)} rows, sptnum {t['sptnum'][0]:g}"
          f"..{t['sptnum'][-1]:g}")


# ===========================================================================
# 1. Dwarfs: from the meanstars package's Mamajek table
# ===========================================================================
EEM_FILE = "EEM_dwarf_UBVIJHK_colors_Teff.txt"
EEM_VERSION = "2022.04.16"
# file column -> our column
EEM_MAP = OrderedDict([("Mv", "M_V"), ("B-V", "B-V"), ("U-B", "U-B"),
                       ("V-Rc", "V-Rc"), ("V-Ic", "V-Ic"), ("V-Ks", "V-Ks"),
                       ("J-H", "J-H"), ("H-Ks", "H-Ks"), ("G-V", "G-V"),
                       ("Bp-Rp", "BP-RP"), ("G-Rp", "G-RP")])


def eem_path() -> Path:
    spec = importlib.util.find_spec("MeanStars")
    if spec is None or spec.origin is None:
        sys.exit("the meanstars package (import name MeanStars) is required")
    return Path(spec.origin).resolve().parent / EEM_FILE


def _num(tok: str) -> float:
    """'...'/'.....' -> NaN; strips ':' / '*' uncertainty flags."""
    tok = tok.strip().rstrip(":*")
    if not tok or set(tok) <= {"."}:
        return np.nan
    try:
        return float(tok)
    except ValueError:
        return np.nan


def read_eem(path: Path):
    lines = path.read_text().splitlines()
    if not any(EEM_VERSION in ln for ln in lines[:40]):
        print(f"WARNING: {EEM_FILE} is not Version {EEM_VERSION}; "
              "check the citation", file=sys.stderr)
    start = next(i for i, ln in enumerate(lines) if ln.startswith("SpT"))
    stop = next(i for i, ln in enumerate(lines)
                if i > start and ln.lstrip().startswith("#SpT"))
    header = lines[start].split()
    records = []
    for ln in lines[start + 1:stop]:
        if not ln.strip() or ln.lstrip().startswith("#"):
            continue
        tok = ln.split()
        if len(tok) < len(header) - 1:  # trailing #SpT copy may be missing
            raise ValueError(f"short row in {EEM_FILE}: {ln!r}")
        rec = {h: tok[k] for k, h in enumerate(header) if k < len(tok)}
        records.append(rec)
    return records


DWARF_SIG = [  # (first sptnum, last sptnum, sig_M_V) -- see meta for reasoning
    (0.0, 9.99, 0.6),    # O
    (10.0, 29.99, 0.5),  # B, A
    (30.0, 39.99, 0.45),  # F
    (40.0, 59.99, 0.35),  # G, K
    (60.0, 69.99, 0.4),  # M
]


def dwarf_sig(n):
    for lo, hi, s in DWARF_SIG:
        if lo <= n <= hi:
            return s
    raise ValueError(n)


def build_dwarfs():
    path = eem_path()
    try:
        ms_version = importlib.metadata.version("meanstars")
    except importlib.metadata.PackageNotFoundError:
        ms_version = "unknown"
    rows = []
    for rec in read_eem(path):
        spt = rec["SpT"]
        if spt[0] not in "OBAFGKM" or not spt.endswith("V"):
            continue  # skips L, T, Y
        st = spt[:-1]
        vals = {ours: _num(rec[theirs]) for theirs, ours in EEM_MAP.items()}
        if not (np.isfinite(vals["M_V"]) and np.isfinite(vals["B-V"])):
            continue  # e.g. M9.5V has no B-V
        row = {"sptype": st, "sig_M_V": dwarf_sig(sptnum(st)),
               "source": (f"M_V and all colours: Mamajek online table "
                          f"v{EEM_VERSION} ({EEM_FILE} shipped in the "
                          f"meanstars package {ms_version}), copied; "
                          "cf. Pecaut & Mamajek 2013 Table 5; G-V, BP-RP, "
                          "G-RP are Gaia DR2; sig_M_V: common-practice "
                          "default (see meta)")}
        row.update(vals)
        rows.append(row)

    meta = OrderedDict()
    meta["name"] = "dwarfs_V"
    meta["luminosity_class"] = "V"
    meta["title"] = ("Main-sequence (class V) absolute magnitudes and "
                     "intrinsic colours, O3-M9 (Mamajek mean dwarf sequence)")
    meta["references"] = [REF["PM13"], REF["EEM"], REF["JG98"]]
    meta["colour_scatter"] = 0.03
    meta["colour_scatter_source"] = (
        "Adopted default. The mean dwarf sequence is tabulated to 0.01 mag; "
        "the star-to-star spread of intrinsic colours at fixed subtype "
        "(classification error of ~0.5 subtype, metallicity) is a few "
        "hundredths of a mag in B-V for A-K dwarfs (Pecaut & Mamajek 2013 "
        "discuss colour scatter of this order); 0.03 mag is used for every "
        "colour.")
    meta["sig_M_V_source"] = (
        "Common-practice default, not a fit: O 0.6, B-A 0.5, F 0.45, G-K "
        "0.35, M 0.4 mag. Reasoning: for A-G types the main-sequence band is "
        "~0.5-1 mag wide because stars evolve off the ZAMS; G-K dwarfs "
        "evolve little but metallicity and unresolved binaries spread M_V "
        "by ~0.3 mag; M dwarfs add metallicity/activity effects; O-B "
        "stars have the widest spread. Jaschek & Gomez 1998 (Hipparcos M_V "
        "of MK standards; from memory) found dispersions of a few tenths "
        "of a mag per MK box for dwarfs, larger for evolved classes.")
    meta["notes"] = (
        f"Derived programmatically from {EEM_FILE} (Version {EEM_VERSION}) "
        "in the meanstars package: rows O3V..M9V with both Mv and B-V "
        "(L, T, Y and M9.5V, which lacks B-V, are skipped). Mv->M_V, "
        "Bp-Rp->BP-RP, G-Rp->G-RP; the file's H-Ks (labelled H-K in its "
        "trailing header) is 2MASS H-Ks; its G-V, Bp-Rp, G-Rp are Gaia DR2. "
        "'...' entries are masked. Regenerate with "
        "'python calibrations/_build/make_tables.py'.")
    return make_table(rows, meta)


# ===========================================================================
# 2. Giants (III) -- literal data
# ===========================================================================
# (sptype, M_V, (B-V)0, (U-B)0)   Schmidt-Kaler 1982 (from memory).
# K1: M_V is NOT SK82 (it would give about +0.6 by interpolation); it is the
# red-clump value M_V = M_Ks(RC) + (V-Ks), with M_Ks(RC) = -1.61 (Hawkins et
# al. 2017), because field K0-K1 III stars are mostly core-He-burning clump
# stars.  Note: SK82 K0 III (+0.7) already agrees with the clump to 0.05 mag.
NaN = np.nan
SK82_III = [
    ("B0", -5.1, -0.29, -1.08),
    ("B1", -4.4, -0.26, -0.97),
    ("B2", -3.6, -0.24, -0.91),
    ("B3", -2.9, -0.20, -0.74),
    ("B5", -2.2, -0.17, -0.58),
    ("B7", -1.6, -0.13, -0.45),
    ("B8", -1.2, -0.11, -0.37),
    ("B9", -0.9, -0.07, -0.20),
    ("A0", -0.6, -0.03, -0.07),
    ("A5", +0.3, +0.15, +0.11),
    ("F0", +0.6, +0.30, +0.08),
    ("F5", +1.0, +0.43, +0.09),
    ("G0", +1.0, +0.65, +0.21),
    ("G5", +0.9, +0.86, +0.56),
    ("G8", +0.8, +0.94, +0.70),
    ("K0", +0.7, +1.00, +0.84),
    ("K1", None, +1.07, +1.00),   # M_V from the red clump, see above
    ("K2", +0.5, +1.16, +1.16),
    ("K3", +0.3, +1.27, +1.39),
    ("K4", +0.0, +1.38, +1.62),
    ("K5", -0.2, +1.50, +1.81),
    ("M0", -0.4, +1.56, +1.87),
    ("M1", -0.5, +1.58, +1.88),
    ("M2", -0.6, +1.60, +1.89),
    ("M3", -0.6, +1.61, +1.88),
    ("M4", -0.5, +1.62, +1.73),   # (U-B)0 turns over for M4-M5 III in SK82
    ("M5", -0.3, +1.63, +1.58),
]
RC_MKS = -1.61  # Hawkins et al. 2017 red-clump M_Ks (from memory)

# Bessell & Brett 1988, Table III, giants, Johnson-Glass system (from memory):
# (sptype, V-K, J-H, H-K).  Converted to 2MASS below (Carpenter 2001).
BB88_III = [
    ("G8", 2.16, 0.50, 0.08),
    ("K0", 2.31, 0.54, 0.09),
    ("K1", 2.50, 0.58, 0.10),
    ("K2", 2.70, 0.63, 0.12),
    ("K3", 3.00, 0.68, 0.14),
    ("K4", 3.26, 0.73, 0.15),
    ("K5", 3.60, 0.79, 0.17),
    ("M0", 3.85, 0.83, 0.19),
    ("M1", 4.05, 0.85, 0.21),
    ("M2", 4.30, 0.87, 0.22),
    ("M3", 4.64, 0.90, 0.24),
    ("M4", 5.10, 0.93, 0.25),
    ("M5", 5.96, 0.95, 0.29),
]

# Cousins (V-Rc, V-Ic) of giants, Bessell 1979 / Bessell & Brett 1988
# (from memory; approximate to a few hundredths): (sptype, V-Rc, V-Ic)
COUSINS_III = [
    ("G8", 0.48, 0.94),
    ("K0", 0.51, 1.00),
    ("K1", 0.54, 1.06),
    ("K2", 0.58, 1.14),
    ("K3", 0.64, 1.25),
    ("K4", 0.72, 1.41),
    ("K5", 0.81, 1.58),
    ("M0", 0.86, 1.71),
    ("M1", 0.92, 1.84),
    ("M2", 1.00, 2.01),
    ("M3", 1.13, 2.32),
    ("M4", 1.33, 2.80),
    ("M5", 1.65, 3.50),
]


def giant_sig(n):
    # G-K giants (clump + RGB) 0.5; B-F and M giants 0.6
    return 0.5 if 40.0 <= n < 60.0 else 0.6


SRC_SK82 = "Schmidt-Kaler 1982, LB VI/2b (from memory)"
SRC_BB88 = ("Bessell & Brett 1988 Table III (from memory), transformed to "
            "2MASS with Carpenter 2001 App. A (coefficients from memory)")
SRC_COUS = "Bessell 1979 / Bessell & Brett 1988 Cousins V-R, V-I of giants (from memory)"
SRC_GAIA = ("computed from this row's V-Ic with the Gaia DR2 relations of "
            "Evans et al. 2018 Table A.2 (coefficients from memory; they "
            "reproduce the meanstars dwarf table with rms 0.03 mag, max "
            "0.1 mag, in G-V and BP-RP for V-Ic<2.7)")


def grp_from_bprp(dwarfs, bprp):
    """G-RP from BP-RP through the dwarf table's own sequence (Mamajek table via
    meanstars). Assumes the relation between the two Gaia colours does not depend
    on surface gravity; used for giants, whose published relations give no G-RP."""
    x = np.ma.filled(np.ma.asarray(dwarfs["BP-RP"], dtype=float), np.nan)
    y = np.ma.filled(np.ma.asarray(dwarfs["G-RP"], dtype=float), np.nan)
    ok = np.isfinite(x) & np.isfinite(y)
    order = np.argsort(x[ok])
    xs, ys = x[ok][order], y[ok][order]
    inside = np.isfinite(bprp) & (bprp >= xs[0]) & (bprp <= xs[-1])
    return np.where(inside, np.interp(bprp, xs, ys), np.nan)


def build_giants(dwarfs):
    bb = {s: bb_to_2mass(vk, jh, hk) for s, vk, jh, hk in BB88_III}
    cous = {s: (vr, vi) for s, vr, vi in COUSINS_III}
    rows = []
    for st, mv, bv, ub in SK82_III:
        n = sptnum(st)
        row = {"sptype": st, "B-V": bv, "U-B": ub, "sig_M_V": giant_sig(n)}
        parts = []
        if st in bb:
            row["V-Ks"], row["J-H"], row["H-Ks"] = bb[st]
        if st in cous:
            row["V-Rc"], row["V-Ic"] = cous[st]
            gv, bprp = gaia_dr2_from_vi(row["V-Ic"])
            row["G-V"], row["BP-RP"] = float(gv), float(bprp)
            row["G-RP"] = float(grp_from_bprp(dwarfs, bprp))
        if mv is None:
            row["M_V"] = round(RC_MKS + row["V-Ks"], 2)
            parts.append("M_V: red-clump M_Ks=-1.61 of Hawkins et al. 2017 "
                         "(from memory) plus this row's V-Ks (SK82 would "
                         "give about +0.6)")
            parts.append(f"B-V, U-B: {SRC_SK82}")
        else:
            row["M_V"] = mv
            parts.append(f"M_V, B-V, U-B: {SRC_SK82}")
        if st in bb:
            parts.append(f"V-Ks, J-H, H-Ks: {SRC_BB88}")
        if st in cous:
            parts.append(f"V-Rc, V-Ic: {SRC_COUS}")
            if np.isfinite(row["G-V"]):
                parts.append(f"G-V, BP-RP: {SRC_GAIA}")
            if np.isfinite(row["G-RP"]):
                parts.append("G-RP: from this row's BP-RP through the G-RP(BP-RP) sequence of the "
                             "dwarf table (Mamajek table via meanstars; gravity dependence neglected)")
        parts.append("sig_M_V: common-practice default")
        row["source"] = "; ".join(parts)
        rows.append(row)

    meta = OrderedDict()
    meta["name"] = "giants_III"
    meta["luminosity_class"] = "III"
    meta["title"] = ("Giants (class III) absolute magnitudes and intrinsic "
                     "colours, B0-M5")
    meta["references"] = [REF["SK82"], REF["BB88"], REF["B79"], REF["C01"],
                          REF["E18"], REF["H17"], REF["JG98"], REF["R21"]]
    meta["colour_scatter"] = 0.04
    meta["colour_scatter_source"] = (
        "Adopted default: star-to-star spread of intrinsic colours of giants "
        "at fixed subtype (metallicity, ~0.5-subtype classification error) "
        "is a few hundredths of a mag in B-V and V-Ic for G-K giants; the "
        "transformations used for 2MASS and Gaia colours add ~0.02-0.05 mag "
        "rms. 0.04 mag is used for every colour.")
    meta["sig_M_V_source"] = (
        "Common-practice default: 0.5 mag for G-K giants, 0.6 mag for B-F "
        "and M giants. Reasoning: G8-K2 III mixes red-clump stars (M_V "
        "spread ~0.2-0.3) with first-ascent giants over ~1 mag; early-type "
        "and M giants span a wider luminosity range per MK box. Jaschek & "
        "Gomez 1998 (from memory) found larger M_V dispersions for giants "
        "than for dwarfs among Hipparcos-measured MK standards.")
    meta["notes"] = (
        "All literal numbers were typed from memory of the cited sources "
        "and should be checked against the printed tables before being "
        "relied upon individually (expected accuracy: M_V ~0.1-0.2 mag, "
        "colours ~0.02 mag). V-Ks, J-H, H-Ks: Bessell & Brett 1988 "
        "Johnson-Glass colours converted to 2MASS with Ks = K_BB - 0.039 + "
        "0.001(J-K)_BB, (J-H) = 0.990(J-H)_BB - 0.049, (H-Ks) = "
        "0.971(H-K)_BB + 0.034 (Carpenter 2001). Gaia colours use the DR2 "
        "relations (Evans et al. 2018) so that all tables share the DR2 "
        "system of the dwarf table; DR3 relations (Riello et al. 2021) "
        "differ by <~0.02 mag in this range. Gaia colours are given only "
        "for V-Ic <= 2.7 (masked beyond, M5-M8 III); G-RP follows from BP-RP "
        "through the dwarf table's G-RP(BP-RP) sequence (gravity dependence "
        "neglected; no published V-Ic relation for G-RP was used). Red-clump check: K0 III M_Ks = "
        "M_V - (V-Ks) = -1.65 and K1 III -1.61, versus -1.61 (Hawkins et al. "
        "2017). M6-M8 III rows and the colours of B0-G5 III: see "
        "colour_notes.")
    return make_table(rows, meta)


# ===========================================================================
# 3. Supergiants (Ib, Iab, Ia) -- literal data
# ===========================================================================
# SK82 intrinsic colours of supergiants (one sequence for class I; from
# memory): (sptype, (B-V)0, (U-B)0)
SK82_I_COLOURS = [
    ("O9", -0.27, -1.13),
    ("B0", -0.23, -1.06),
    ("B1", -0.19, -1.00),
    ("B2", -0.17, -0.94),
    ("B3", -0.13, -0.83),
    ("B5", -0.10, -0.72),
    ("B8", -0.03, -0.55),
    ("A0", -0.01, -0.38),
    ("A2", +0.03, -0.25),
    ("A5", +0.09, -0.08),
    ("F0", +0.17, +0.15),
    ("F2", +0.23, +0.18),
    ("F5", +0.32, +0.27),
    ("F8", +0.56, +0.41),
    ("G0", +0.76, +0.52),
    ("G2", +0.87, +0.63),
    ("G5", +1.02, +0.83),
    ("G8", +1.14, +1.07),
    ("K0", +1.25, +1.17),
    ("K2", +1.36, +1.32),
    ("K3", +1.46, +1.44),
    ("K5", +1.60, +1.80),
    ("M0", +1.67, +1.90),
    ("M1", +1.69, +1.90),
    ("M2", +1.71, +1.95),
]

# SK82 M_V of supergiants (from memory; approximate to ~0.2-0.3 mag):
# sptype: (Ib, Iab, Ia)
SK82_I_MV = OrderedDict([
    ("O9", (-6.0, -6.5, -7.0)),
    ("B0", (-5.8, -6.4, -7.0)),
    ("B1", (-5.7, -6.4, -7.0)),
    ("B2", (-5.7, -6.4, -7.1)),
    ("B3", (-5.7, -6.3, -7.1)),
    ("B5", (-5.7, -6.2, -7.0)),
    ("B8", (-5.6, -6.2, -7.1)),
    ("A0", (-5.0, -6.3, -7.1)),
    ("A2", (-4.9, -6.5, -7.3)),
    ("A5", (-4.8, -6.6, -7.6)),
    ("F0", (-4.6, -6.6, -8.0)),
    ("F2", (-4.6, -6.6, -8.0)),
    ("F5", (-4.4, -6.6, -8.0)),
    ("F8", (-4.3, -6.5, -8.0)),
    ("G0", (-4.2, -6.4, -8.0)),
    ("G2", (-4.2, -6.3, -8.0)),
    ("G5", (-4.1, -6.2, -8.0)),
    ("G8", (-4.1, -6.1, -8.0)),
    ("K0", (-4.0, -6.0, -8.0)),
    ("K2", (-4.0, -5.9, -7.9)),
    ("K3", (-4.0, -5.8, -7.8)),
    ("K5", (-4.2, -5.8, -7.6)),
    ("M0", (-4.5, -5.6, -7.5)),
    ("M1", (-4.5, -5.6, -7.5)),
    ("M2", (-4.5, -5.6, -7.5)),
])

SUPERGIANT_SIG = {"Ib": 0.8, "Iab": 0.9, "Ia": 1.0}


def build_supergiants(lc):
    idx = {"Ib": 0, "Iab": 1, "Ia": 2}[lc]
    col = {s: (bv, ub) for s, bv, ub in SK82_I_COLOURS}
    rows = []
    for st, mvs in SK82_I_MV.items():
        bv, ub = col[st]
        rows.append({"sptype": st, "M_V": mvs[idx], "sig_M_V": SUPERGIANT_SIG[lc],
                     "B-V": bv, "U-B": ub,
                     "source": (f"M_V ({lc}): {SRC_SK82}, approximate; "
                                f"B-V, U-B: {SRC_SK82}, supergiant colour "
                                "sequence (same for Ib, Iab, Ia); "
                                "sig_M_V: common-practice default")})
    name = {"Ib": "supergiants_Ib", "Iab": "supergiants_Iab",
            "Ia": "supergiants_Ia"}[lc]
    meta = OrderedDict()
    meta["name"] = name
    meta["luminosity_class"] = lc
    meta["title"] = (f"Supergiants (class {lc}) absolute magnitudes and "
                     "intrinsic colours, O9-M2")
    meta["references"] = [REF["SK82"], REF["JG98"]]
    meta["colour_scatter"] = 0.05
    meta["colour_scatter_source"] = (
        "Adopted default: intrinsic (B-V)0 of supergiants at fixed subtype "
        "scatter more than for dwarfs/giants (wider range of gravities, "
        "metallicity, classification error, and the colour-type relation is "
        "steep for F-G supergiants); 0.05 mag is used for every colour.")
    meta["sig_M_V_source"] = (
        f"Common-practice default: {SUPERGIANT_SIG[lc]} mag for class {lc} "
        "(Ib 0.8, Iab 0.9, Ia 1.0). Reasoning: supergiant luminosities "
        "depend strongly on initial mass and on the evolutionary phase, "
        "which the MK class resolves only coarsely; Jaschek & Gomez 1998 "
        "(from memory) found the largest M_V dispersions for supergiants.")
    meta["notes"] = (
        "M_V and the (B-V)0, (U-B)0 sequence are from Schmidt-Kaler 1982 as "
        "recalled, not copied; individual M_V may be off by 0.2-0.3 mag "
        "and should be checked against the printed table. SK82 gives one "
        "colour sequence for all supergiants; it is repeated in the Ib, Iab "
        "and Ia files. Colours other than B-V, U-B: see colour_notes.")
    return make_table(rows, meta)


# ===========================================================================
# 4. Bright giants (II) -- literal M_V; colours interpolated between classes
# ===========================================================================
# SK82 M_V of class II (from memory; approximate to ~0.3 mag)
SK82_II_MV = OrderedDict([
    ("B0", -5.4), ("B1", -5.0), ("B2", -4.6), ("B3", -4.2), ("B5", -3.6),
    ("B8", -3.0), ("A0", -2.6), ("A2", -2.5), ("A5", -2.4), ("F0", -2.3),
    ("F2", -2.3), ("F5", -2.2), ("F8", -2.1), ("G0", -2.1), ("G2", -2.1),
    ("G5", -2.1), ("G8", -2.2), ("K0", -2.3), ("K2", -2.4), ("K3", -2.4),
    ("K5", -2.5), ("M0", -2.6), ("M1", -2.7), ("M2", -2.8),
])


def _seq(table, key):
    """sptnum array and values of column `key` of an astropy table
    (masked -> NaN)."""
    x = np.asarray(table["sptnum"], float)
    col = table[key]
    y = np.asarray(col.filled(np.nan) if hasattr(col, "filled") else col, float)
    return x, y


def build_bright_giants(giants):
    sk_bv = {s: bv for s, bv, ub in SK82_I_COLOURS}
    sk_ub = {s: ub for s, bv, ub in SK82_I_COLOURS}
    sx = np.array([sptnum(s) for s, _, _ in SK82_I_COLOURS])
    rows = []
    for st, mv in SK82_II_MV.items():
        n = sptnum(st)
        row = {"sptype": st, "M_V": mv, "sig_M_V": 0.7}
        for c, sk in (("B-V", sk_bv), ("U-B", sk_ub)):
            x3, y3 = _seq(giants, c)
            v3 = pchip_at(x3, y3, [n])[0]
            v1 = pchip_at(sx, [sk[s] for s, _, _ in SK82_I_COLOURS], [n])[0]
            row[c] = round(0.5 * (v3 + v1), 3)
        row["source"] = (f"M_V: {SRC_SK82}, approximate; B-V, U-B: mean of "
                         "the class III and class I sequences of "
                         "Schmidt-Kaler 1982 (from memory) at this type, "
                         "PCHIP in sptnum where the III grid has no entry; "
                         "sig_M_V: common-practice default")
        rows.append(row)
    meta = OrderedDict()
    meta["name"] = "bright_giants_II"
    meta["luminosity_class"] = "II"
    meta["title"] = ("Bright giants (class II) absolute magnitudes and "
                     "intrinsic colours, B0-M2")
    meta["references"] = [REF["SK82"], REF["JG98"]]
    meta["colour_scatter"] = 0.05
    meta["colour_scatter_source"] = (
        "Adopted default: the colours are an interpolation halfway between "
        "the class III and class I sequences, whose difference is <=0.1 mag "
        "in B-V for B-A and K-M types and up to ~0.3 mag for F-G types; "
        "0.05 mag covers the interpolation uncertainty for most types "
        "(F5-G5 II colours are less certain).")
    meta["sig_M_V_source"] = (
        "Common-practice default: 0.7 mag, between the giant (0.5-0.6) and "
        "supergiant (0.8-1.0) values; Jaschek & Gomez 1998 (from memory) "
        "found M_V dispersion increasing with luminosity class.")
    meta["notes"] = (
        "M_V from Schmidt-Kaler 1982 as recalled (approximate, check "
        "against the printed table). No separate class II colour sequence "
        "was used: (B-V)0 and (U-B)0 are the mean of the class III sequence "
        "(giants_III.ecsv) and the class I sequence (supergiants files) at "
        "the same type. Other colours: see colour_notes.")
    return make_table(rows, meta)


# ===========================================================================
# 5. Subgiants (IV) -- literal M_V; colours interpolated between V and III
# ===========================================================================
# SK82 M_V of class IV (from memory; approximate to ~0.2-0.3 mag)
SK82_IV_MV = OrderedDict([
    ("B0", -4.6), ("B2", -3.1), ("B5", -1.6), ("B8", -0.6), ("A0", +0.1),
    ("A5", +1.1), ("F0", +1.7), ("F5", +2.2), ("G0", +2.8), ("G5", +3.0),
    ("G8", +3.1), ("K0", +3.1), ("K1", +3.2), ("K2", +3.2), ("K3", +3.2),
])


def build_subgiants(dwarfs, giants):
    rows = []
    for st, mv in SK82_IV_MV.items():
        n = sptnum(st)
        row = {"sptype": st, "M_V": mv, "sig_M_V": 0.5}
        for c in COLOURS:
            xv, yv = _seq(dwarfs, c)
            x3, y3 = _seq(giants, c)
            vv = pchip_at(xv, yv, [n])[0]
            v3 = pchip_at(x3, y3, [n])[0]
            row[c] = round(0.5 * (vv + v3), 3) if np.isfinite(vv + v3) else np.nan
        have = [c for c in COLOURS if np.isfinite(row[c])]
        row["source"] = (f"M_V: {SRC_SK82}, approximate; "
                         f"{', '.join(have)}: mean of the class V value "
                         "(Mamajek table v2022.04.16 in meanstars, copied) "
                         "and the class III value (giants_III.ecsv, from "
                         "memory of SK82/BB88) at this type; "
                         "sig_M_V: common-practice default")
        rows.append(row)
    meta = OrderedDict()
    meta["name"] = "subgiants_IV"
    meta["luminosity_class"] = "IV"
    meta["title"] = ("Subgiants (class IV) absolute magnitudes and "
                     "intrinsic colours, B0-K3")
    meta["references"] = [REF["SK82"], REF["PM13"], REF["EEM"], REF["BB88"],
                          REF["C01"], REF["E18"], REF["JG98"]]
    meta["colour_scatter"] = 0.04
    meta["colour_scatter_source"] = (
        "Adopted default: colours are the mean of the class V and class III "
        "sequences; V and III differ by <=0.03 mag in B-V for B-F types and "
        "by up to ~0.3 mag for K types, so the interpolation uncertainty "
        "is ~0.01 mag early and a few hundredths late; with the intrinsic "
        "spread this gives ~0.04 mag.")
    meta["sig_M_V_source"] = (
        "Common-practice default: 0.5 mag. Reasoning: class IV spans the "
        "region between the main sequence and the giant branch, ~1 mag "
        "wide at fixed type; Jaschek & Gomez 1998 (from memory) found "
        "dispersions intermediate between dwarfs and giants.")
    meta["notes"] = (
        "M_V from Schmidt-Kaler 1982 as recalled (approximate, check "
        "against the printed table). No separate class IV colour sequence "
        "was used: every colour is the mean of dwarfs_V.ecsv and "
        "giants_III.ecsv at the same sptnum (PCHIP in sptnum); a colour is "
        "masked where either class lacks it. K4-K5 IV rows: M_V from "
        "memory, see their source. Colours: see colour_notes.")
    return make_table(rows, meta)


# ===========================================================================
# 6. Intrinsic colours other than B-V, U-B of the non-dwarf classes, and the
#    extra rows IV K4-K5, III M6-M8 (owner of this block: colour helper)
# ===========================================================================
# Every non-dwarf row gets V-Rc, V-Ic, V-Ks, J-H, H-Ks, G-V, BP-RP, G-RP here,
# after the class builders above have set M_V, sig_M_V, B-V, U-B.  Rules:
#
# * III, B0-G5, and supergiants O9-K3 ((B-V)0 <= LOCUS_BV_MAX): the colours of
#   the composite colour-colour locus at the row's own (B-V)0.  The locus is
#   the Mamajek dwarf sequence (meanstars file, copied) for (B-V)0 < 0.90 and
#   the giant sequence of Bessell & Brett 1988 / Bessell 1979 (G8-K5 III) for
#   (B-V)0 >= 0.94.  Colour-colour relations of early-type and F-G stars
#   depend little on gravity (common practice; at (B-V)0 = 0.94-1.00 the two
#   sequences agree to 0.03 mag in V-Ic and 0.08 mag in V-Ks, checked in
#   check_locus_junction below).
# * III, G8-M5: Bessell & Brett 1988 Table III (2MASS via Carpenter 2001) and
#   Bessell 1979 Cousins colours, as built by build_giants.
# * III, M6-M8 (new rows): EXTRA_III below.
# * Supergiants K5-M2: (B-V)0 saturates near 1.6 for K5-M giants and
#   supergiants, so matching on it fails; the giant colours at the same
#   spectral type are adopted.
# * II: mean of the class III and class I colours at the same type (as the
#   B-V, U-B of class II are built).
# * IV: mean of the class V and class III colours at the same type.
# * Gaia G-V, BP-RP: from the row's V-Ic with the Evans et al. 2018 DR2
#   relations (gaia_dr2_from_vi); G-RP from BP-RP along the dwarf sequence
#   (grp_from_bprp).  Means and same-type copies carry the Gaia colours too.
MY_COLOURS = ["V-Rc", "V-Ic", "V-Ks", "J-H", "H-Ks", "G-V", "BP-RP", "G-RP"]
LOCUS_COLOURS = ["V-Rc", "V-Ic", "V-Ks", "J-H", "H-Ks"]
LOCUS_DWARF_BV_MAX = 0.90   # dwarf rows with (B-V)0 below this enter the locus
LOCUS_GIANTS = ["G8", "K0", "K1", "K2", "K3", "K4", "K5"]  # giant rows used
LOCUS_BV_MAX = 1.46         # rows redder than this use same-type colours

SRC_LOCUS = ("{cols}: colour-colour locus at this row's (B-V)0 = {bv:+.3f} "
             "(Mamajek dwarf table v2022.04.16 in meanstars, copied, for "
             "(B-V)0 < 0.90; Bessell & Brett 1988 Table III giants via "
             "Carpenter 2001 and Bessell 1979 Cousins colours, from memory, "
             "for (B-V)0 >= 0.94; gravity dependence neglected, common "
             "practice)")
SRC_GAIA_ROW = ("G-V, BP-RP: from this row's V-Ic with Evans et al. 2018 "
                "Table A.2 (coefficients from memory); G-RP: from BP-RP "
                "along the dwarf table's G-RP(BP-RP) sequence (gravity "
                "dependence neglected)")

# New class III rows beyond M5 (all from memory; the late-M giants are
# semiregular and Mira variables, so every number is uncertain by ~0.1 mag in
# B-V and by 0.2-0.5 mag in V-Ks; sig_M_V 1.0).
#   V-K, J-H, H-K (Johnson-Glass, Bessell & Brett 1988 Table III, M6 and M7;
#   M8 from Fluks et al. 1994 Table 7, approximate); converted to 2MASS with
#   Carpenter 2001 like the other giants.
#   M_V = M_Ks + (V-Ks) with M_Ks of late-M giants -7.0 (M6), -7.3 (M7),
#   -7.6 (M8), read from the semiregular/Mira period-luminosity relations
#   (Whitelock, Feast & van Leeuwen 2008), from memory.
#   (B-V)0 of M6, M7: linear fit to Hipparcos B-V (ESA 1997) of 76 class III
#   M4-M8 stars with EVEN HIP numbers, parallax > 2 mas (fit_mgiant_colours.py;
#   rms 0.10 mag): 1.378 +- 0.020 and 1.303 +- 0.030.  M8: 1.50 from memory;
#   the three even-HIP M8 III stars have median 1.47, while the linear trend
#   would give 1.23, so the trend is not extrapolated to M8.  Reddening not
#   corrected (a few hundredths of a mag).
#   No Cousins or Gaia colours: none recalled with confidence (masked).
# (sptype, B-V, V-K_BB, J-H_BB, H-K_BB, M_Ks)
EXTRA_III = [
    ("M6", 1.378, 6.84, 0.96, 0.30, -7.0),
    ("M7", 1.303, 7.80, 0.96, 0.33, -7.3),
    ("M8", 1.50, 9.00, 0.95, 0.38, -7.6),
]
EXTRA_III_BV_SRC = {
    "M6": ("B-V: fitted to Hipparcos B-V of 76 even-HIP M4-M8 III stars "
           "(linear in type; fit_mgiant_colours.py), +-0.02"),
    "M7": ("B-V: fitted to Hipparcos B-V of 76 even-HIP M4-M8 III stars "
           "(linear in type; fit_mgiant_colours.py), +-0.03"),
    "M8": ("B-V: from memory (+-0.1; median of the 3 even-HIP M8 III stars "
           "in Hipparcos: 1.47)"),
}
EXTRA_III_SIG = 1.0

# New class IV rows K4, K5: M_V from memory (no printed table recalled: the
# lower red-giant branch just above the K3 IV value; Hipparcos K4-K5 IV stars
# scatter around M_V ~ +3), sig_M_V 0.8.  B-V, U-B and colours: mean of the
# class V and class III values at the same type (as for the other IV rows).
EXTRA_IV = [("K4", +3.1), ("K5", +3.0)]
EXTRA_IV_SIG = 0.8

# V-Ic of M0-M5 III fitted to Hipparcos V-I (ESA 1997) of 56 class III stars
# with EVEN HIP numbers (odd numbers held out for tests), measured V-I (source
# codes A-K), parallax > 5 mas; quadratic in sptnum, 3-sigma clipped, rms 0.16
# mag; printed by calibrations/_build/fit_mgiant_colours.py and copied here.  The
# remembered Bessell values (M4 2.80, M5 3.50) were 0.3-0.7 mag too red.
# (sptype: (V-Ic, formal error))
MGIANT_VI_FIT = OrderedDict([
    ("M0", (1.734, 0.045)), ("M1", (1.875, 0.028)), ("M2", (2.051, 0.030)),
    ("M3", (2.261, 0.029)), ("M4", (2.505, 0.039)), ("M5", (2.784, 0.077)),
])
MGIANT_VRC_MASK = ("M4", "M5")  # remembered V-Rc inconsistent with the fitted V-Ic
SRC_MGIANT_VI = ("V-Ic: fitted to Hipparcos V-I (ESA 1997) of 56 even-HIP class "
                 "III M0-M5 stars with measured V-I and parallax > 5 mas "
                 "(quadratic in type, 3-sigma clipped; fit_mgiant_colours.py), "
                 "{vi:.3f} +- {err:.3f}")

REF_COLOURS = {
    "F94": ("Fluks, M. A. et al. 1994, A&AS 105, 311, 'The photospheric "
            "spectra of M giants and synthetic photometry', Table 7 "
            "(intrinsic colours of M0-M10 giants); bibcode "
            "1994A&AS..105..311F (from memory, approximate)"),
    "HIP": ("ESA 1997, The Hipparcos and Tycho Catalogues, ESA SP-1200, "
            "Hipparcos main catalogue (CDS I/239), fields V-I (H40), its "
            "source (H42), parallax (H11) and spectral type (H76); used to "
            "fit V-Ic of M0-M5 III on even HIP numbers (odd numbers held "
            "out for tests)"),
    "W08": ("Whitelock, P. A., Feast, M. W. & van Leeuwen, F. 2008, MNRAS "
            "386, 313, 'AGB variables and the Mira period-luminosity "
            "relation'; bibcode 2008MNRAS.386..313W (M_Ks of late-M giants, "
            "from memory)"),
}


def _table_rows(t):
    """Astropy table -> list of row dicts (masked -> NaN), for rebuilding.
    Every column except the derived sptnum is carried, so columns that other
    builders add survive the colour step."""
    rows = []
    for r in t:
        d = {}
        for name in t.colnames:
            if name == "sptnum":
                continue
            v = r[name]
            if t[name].dtype.kind in "US":
                d[name] = str(v)
            elif t[name].dtype.kind in "iu":
                d[name] = int(v) if not np.ma.is_masked(v) else v
            else:
                d[name] = np.nan if np.ma.is_masked(v) else float(v)
        rows.append(d)
    return rows


def _strip_colour_sources(source, drop=None):
    """Drop the statements about the colours ``drop`` (default MY_COLOURS) from
    a row's source string (parts are '; '-separated and start with
    'col, col: ...'); keep the rest."""
    drop = MY_COLOURS if drop is None else drop
    keep = []
    for part in source.split("; "):
        head, sep, tail = part.partition(": ")
        names = [n.strip() for n in head.split(",")]
        if sep and all(n in COLOURS for n in names):
            rest = [n for n in names if n not in drop]
            if rest:
                keep.append(", ".join(rest) + ": " + tail)
        else:
            keep.append(part)
    return "; ".join(keep)


def colour_locus(dwarfs, giants):
    """Composite (B-V)0 -> colour locus: {colour: (bv, value)} arrays."""
    xd, yd = {}, {}
    bvd = np.asarray(dwarfs["B-V"], float)
    use_d = bvd < LOCUS_DWARF_BV_MAX
    gsel = np.isin(np.asarray(giants["sptype"]), LOCUS_GIANTS)
    bvg = np.asarray(giants["B-V"], float)[gsel]
    locus = {}
    for c in LOCUS_COLOURS:
        _, vd = _seq(dwarfs, c)
        _, vg = _seq(giants, c)
        x = np.concatenate([bvd[use_d], bvg])
        y = np.concatenate([vd[use_d], vg[gsel]])
        ok = np.isfinite(y)
        assert np.all(np.diff(x[ok]) > 0), f"locus {c}: B-V not increasing"
        locus[c] = (x[ok], y[ok])
    return locus


def locus_at(locus, bv):
    """Colours of the composite locus at (B-V)0 = bv (PCHIP; NaN outside)."""
    return {c: float(pchip_at(x, y, [bv])[0]) for c, (x, y) in locus.items()}


def _gaia_from_row(row, dwarfs):
    gv, bprp = gaia_dr2_from_vi(row.get("V-Ic", np.nan))
    row["G-V"], row["BP-RP"] = float(gv), float(bprp)
    row["G-RP"] = float(grp_from_bprp(dwarfs, float(bprp)))


def _set_meta_range(t):
    """Rewrite the 'Xn-Ym' range at the end of the title after the rows changed."""
    title = t.meta["title"]
    head = title.rsplit(",", 1)[0] if "," in title else title
    t.meta["title"] = f"{head}, {t['sptype'][0]}-{t['sptype'][-1]}"


def extend_giants(giants):
    """Append the M6-M8 III rows (EXTRA_III) to the giant table."""
    rows = _table_rows(giants)
    have = {r["sptype"] for r in rows}
    for st, bv, vk, jh, hk, mks in EXTRA_III:
        if st in have:
            continue
        vks, jh2, hks = bb_to_2mass(vk, jh, hk)
        rows.append({
            "sptype": st, "B-V": bv, "U-B": np.nan,
            "M_V": round(mks + vks, 2), "sig_M_V": EXTRA_III_SIG,
            "V-Ks": vks, "J-H": jh2, "H-Ks": hks,
            "source": (f"M_V: M_Ks = {mks} of late-M giants (Whitelock et al. "
                       "2008 period-luminosity relations, from memory) plus "
                       f"this row's V-Ks; {EXTRA_III_BV_SRC[st]}; "
                       + ("V-Ks, J-H, H-Ks: Bessell & Brett 1988 Table III "
                          "(from memory)" if st != "M8" else
                          "V-Ks, J-H, H-Ks: Fluks et al. 1994 Table 7 (from "
                          "memory, approximate)")
                       + ", transformed to 2MASS with Carpenter 2001 App. A; "
                       "V-Rc, V-Ic, Gaia: none recalled (masked); U-B: none; "
                       "sig_M_V: common-practice default for variable late-M "
                       "giants")})
    t = make_table(rows, OrderedDict(giants.meta))
    t.meta["references"] = list(giants.meta["references"]) + [
        REF_COLOURS["F94"], REF_COLOURS["W08"]]
    _set_meta_range(t)
    return t


def extend_subgiants(sub, dwarfs, giants):
    """Append the K4-K5 IV rows (EXTRA_IV); B-V, U-B = mean of V and III."""
    rows = _table_rows(sub)
    have = {r["sptype"] for r in rows}
    for st, mv in EXTRA_IV:
        if st in have:
            continue
        n = sptnum(st)
        row = {"sptype": st, "M_V": mv, "sig_M_V": EXTRA_IV_SIG}
        for c in ("B-V", "U-B"):
            vv = pchip_at(*_seq(dwarfs, c), [n])[0]
            v3 = pchip_at(*_seq(giants, c), [n])[0]
            row[c] = round(0.5 * (vv + v3), 3)
        row["source"] = ("M_V: from memory (lower red-giant branch just "
                         "above K3 IV; no printed table), approximate; "
                         "B-V, U-B: mean of the class V value (Mamajek table "
                         "v2022.04.16 in meanstars, copied) and the class III "
                         "value (giants_III.ecsv, from memory of SK82) at "
                         "this type; sig_M_V: common-practice default, wider "
                         "for these rows")
        rows.append(row)
    t = make_table(rows, OrderedDict(sub.meta))
    _set_meta_range(t)
    return t


def _finish(t, rows, note):
    out = make_table(rows, OrderedDict(t.meta))
    out.meta["colour_notes"] = note
    return out


def add_giant_colours(giants, dwarfs):
    """Fill V-Rc ... G-RP of the B0-G5 III rows from the colour locus."""
    locus = colour_locus(dwarfs, giants)
    rows = _table_rows(giants)
    for row in rows:
        if row["sptype"] in MGIANT_VI_FIT:
            vi, err = MGIANT_VI_FIT[row["sptype"]]
            row["V-Ic"] = vi
            drop = ["V-Ic", "G-V", "BP-RP", "G-RP"]
            if row["sptype"] in MGIANT_VRC_MASK:
                row["V-Rc"] = np.nan
                drop.append("V-Rc")
            _gaia_from_row(row, dwarfs)
            parts = [_strip_colour_sources(row["source"], drop),
                     SRC_MGIANT_VI.format(vi=vi, err=err)]
            if np.isfinite(row["G-V"]):
                parts.append(SRC_GAIA_ROW)
            row["source"] = "; ".join(parts)
            continue
        if np.isfinite(row["V-Ks"]) or np.isfinite(row["V-Ic"]):
            continue  # G8-K5, M6-M8: Bessell & Brett / Bessell / EXTRA_III values
        row.update(locus_at(locus, row["B-V"]))
        _gaia_from_row(row, dwarfs)
        src = _strip_colour_sources(row["source"])
        have = [c for c in LOCUS_COLOURS if np.isfinite(row[c])]
        row["source"] = "; ".join([src, SRC_LOCUS.format(cols=", ".join(have), bv=row["B-V"]),
                                   SRC_GAIA_ROW])
    out = _finish(giants, rows, (
        "Colours other than B-V, U-B: B0-G5 III from the composite colour-"
        "colour locus at the row's (B-V)0 (Mamajek dwarf sequence for "
        "(B-V)0 < 0.90, Bessell & Brett 1988 / Bessell 1979 giants G8-K5 "
        "for (B-V)0 >= 0.94); G8-M5 III: Bessell & Brett 1988 Table III "
        "(2MASS via Carpenter 2001), Bessell 1979 Cousins, except V-Ic of "
        "M0-M5 III, fitted to Hipparcos V-I of even-HIP giants "
        "(MGIANT_VI_FIT), and V-Rc of M4-M5 III, masked; M6-M8 III: "
        "Bessell & Brett 1988 / Fluks et al. 1994, V-Ks, J-H, H-Ks only. "
        "Gaia colours from V-Ic (Evans et al. 2018) for V-Ic <= 2.7. All "
        "from memory except the dwarf locus and the fitted M-giant V-Ic."))
    if REF_COLOURS["HIP"] not in out.meta["references"]:
        out.meta["references"] = list(out.meta["references"]) + [REF_COLOURS["HIP"]]
    return out


def add_supergiant_colours(sg, dwarfs, giants):
    """Fill V-Rc ... G-RP of a supergiant table (Ib, Iab or Ia)."""
    locus = colour_locus(dwarfs, giants)
    rows = _table_rows(sg)
    for row in rows:
        src = _strip_colour_sources(row["source"])
        if row["B-V"] <= LOCUS_BV_MAX:
            row.update(locus_at(locus, row["B-V"]))
            _gaia_from_row(row, dwarfs)
            have = [c for c in LOCUS_COLOURS if np.isfinite(row[c])]
            parts = [SRC_LOCUS.format(cols=", ".join(have), bv=row["B-V"]), SRC_GAIA_ROW]
        else:
            n = sptnum(row["sptype"])
            for c in MY_COLOURS:
                row[c] = float(pchip_at(*_seq(giants, c), [n])[0])
            parts = [", ".join(MY_COLOURS) + ": class III values at the same "
                     "type (giants_III.ecsv: Bessell & Brett 1988, Bessell "
                     "1979, Evans et al. 2018, from memory), because (B-V)0 "
                     "saturates for K5-M stars; M supergiants may be redder "
                     "by up to ~0.3 mag in V-Ks"]
        row["source"] = "; ".join([src] + parts)
    return _finish(sg, rows, (
        "Colours other than B-V, U-B: O9-K3 from the composite colour-colour "
        "locus at the row's (B-V)0 (Mamajek dwarf sequence, copied, for "
        "(B-V)0 < 0.90; Bessell & Brett 1988 / Bessell 1979 giants G8-K5 "
        "for (B-V)0 >= 0.94, from memory); K5-M2: class III colours at the "
        "same type. Gaia colours from V-Ic (Evans et al. 2018). Not "
        "modelled: free-free infrared excess from the winds of OB "
        "supergiants (a few hundredths of a mag in H-Ks for Ia stars)."))


def add_mean_colours(t, a, b, label_a, label_b):
    """Fill MY_COLOURS of table t with the mean of tables a and b at the same
    sptnum (PCHIP in sptnum; masked where either lacks the colour)."""
    rows = _table_rows(t)
    for row in rows:
        n = sptnum(row["sptype"])
        for c in MY_COLOURS:
            va = pchip_at(*_seq(a, c), [n])[0]
            vb = pchip_at(*_seq(b, c), [n])[0]
            row[c] = 0.5 * (va + vb) if np.isfinite(va + vb) else np.nan
        have = [c for c in MY_COLOURS if np.isfinite(row[c])]
        src = _strip_colour_sources(row["source"])
        if have:
            src += (f"; {', '.join(have)}: mean of the {label_a} and "
                    f"{label_b} values at this type")
        row["source"] = src
    return _finish(t, rows, (
        f"Colours other than B-V, U-B: mean of the {label_a} and {label_b} "
        "tables at the same type (PCHIP in sptnum); masked where either "
        "lacks the colour."))


def check_locus_junction(dwarfs, giants):
    """Print how the dwarf and giant colour sequences meet at (B-V)0 ~ 0.94."""
    for st in ("G8", "K0"):
        g = giants[giants["sptype"] == st][0]
        for c in ("V-Ic", "V-Ks", "J-H", "H-Ks"):
            x, y = _seq(dwarfs, "B-V")[1], _seq(dwarfs, c)[1]
            ok = np.isfinite(y)
            dv = float(np.interp(g["B-V"], x[ok], y[ok]))
            print(f"check locus junction {st} III (B-V)0={g['B-V']:.2f}: {c} "
                  f"giant {g[c]:.3f} vs dwarf at same B-V {dv:.3f} "
                  f"(diff {g[c] - dv:+.3f})")


# ===========================================================================
# Self-checks and main
# ===========================================================================
def check_gaia_relations(dwarfs):
    vi = np.asarray(dwarfs["V-Ic"].filled(np.nan), float)
    gv, bprp = gaia_dr2_from_vi(vi)
    for c, pred in (("G-V", gv), ("BP-RP", bprp)):
        obs = np.asarray(dwarfs[c].filled(np.nan), float)
        ok = np.isfinite(obs) & np.isfinite(pred)
        d = pred[ok] - obs[ok]
        print(f"check Evans+2018 {c}(V-Ic) vs dwarf table: n={ok.sum()} "
              f"mean {d.mean():+.3f} rms {np.sqrt((d**2).mean()):.3f} "
              f"max|d| {np.abs(d).max():.3f}")


FILES = ["dwarfs_V.ecsv", "subgiants_IV.ecsv", "giants_III.ecsv",
         "bright_giants_II.ecsv", "supergiants_Ib.ecsv",
         "supergiants_Iab.ecsv", "supergiants_Ia.ecsv"]
META_KEYS = ["name", "luminosity_class", "title", "references",
             "colour_scatter", "colour_scatter_source", "sig_M_V_source",
             "notes"]


def validate():
    """Read every file back and check the format; print a summary."""
    expected = list(DESCRIPTIONS)
    for fname in FILES:
        raw = (OUTDIR / fname).read_text()
        assert raw.startswith("# %ECSV 1.0"), fname
        # no absolute path of the machine that built the table (any /dir/dir/ run)
        assert not re.search(r"(?<![\w.:])/[A-Za-z_][\w.-]*/[\w.-]+/", raw), f"absolute path in {fname}"
        t = Table.read(OUTDIR / fname, format="ascii.ecsv")
        assert t.colnames == expected, (fname, t.colnames)
        assert t["sptype"].dtype.kind == "U" and t["source"].dtype.kind == "U"
        for c in expected[1:-1]:
            assert t[c].dtype == np.float64, (fname, c, t[c].dtype)
            assert (t[c].unit == u.mag) == (c != "sptnum"), (fname, c)
            assert t[c].description, (fname, c)
        for c in ("sptnum", "M_V", "sig_M_V", "B-V"):
            col = t[c]
            assert not (hasattr(col, "mask") and np.any(col.mask)), (fname, c)
        assert np.all(np.diff(np.asarray(t["sptnum"])) > 0), fname
        assert np.all(np.asarray(t["sig_M_V"]) > 0), fname
        for k in META_KEYS:
            assert k in t.meta, (fname, k)
        assert isinstance(t.meta["references"], list)
        assert isinstance(t.meta["colour_scatter"], float)
        assert t.meta["name"] + ".ecsv" == fname
        assert all(s for s in t["source"]), fname
        if fname != "dwarfs_V.ecsv":
            assert all("from memory" in s for s in t["source"]), fname
        nmask = {c: int(np.sum(t[c].mask)) if hasattr(t[c], "mask") else 0
                 for c in COLOURS}
        print(f"  {fname:24s} {len(t):3d} rows  sptnum {t['sptnum'][0]:4g}.."
              f"{t['sptnum'][-1]:4g}  ({t['sptype'][0]}-{t['sptype'][-1]})  "
              "filled colours: " + " ".join(
                  f"{c}:{len(t) - n}" for c, n in nmask.items()))

    # dwarfs agree with the meanstars file at every shared type
    d = Table.read(OUTDIR / "dwarfs_V.ecsv", format="ascii.ecsv")
    recs = {r["SpT"][:-1]: r for r in read_eem(eem_path())}
    for row in d:
        r = recs[row["sptype"]]
        assert abs(row["B-V"] - _num(r["B-V"])) < 0.01
        assert abs(row["M_V"] - _num(r["Mv"])) < 0.02
    a0 = d[d["sptype"] == "A0"][0]
    assert a0["B-V"] == 0.0
    print("  dwarfs match the meanstars file at all "
          f"{len(d)} types; A0V (B-V)0 = {a0['B-V']}")

    g = Table.read(OUTDIR / "giants_III.ecsv", format="ascii.ecsv")
    for st in ("K0", "K1"):
        r = g[g["sptype"] == st][0]
        mks = r["M_V"] - r["V-Ks"]
        print(f"  {st} III: M_V = {r['M_V']:+.2f}, V-Ks = {r['V-Ks']:.3f}, "
              f"M_Ks = {mks:+.2f} (red clump -1.61, Hawkins et al. 2017)")
        assert 0.65 <= r["M_V"] <= 0.95 and abs(mks + 1.61) < 0.1


# ===========================================================================
# Real-star M_V and sig_M_V (helper "calib"): classes IV, III, II
# ===========================================================================
# calibrations/_build/fit_real_stars.py fits M_V(type) and its scatter to
# Hipparcos stars with EVEN HIP numbers (odd numbers are the held-out test half)
# and writes fitted_mv.ecsv next to this script; this block folds it in. Colours
# are not touched here.
FITTED_MV = Path(__file__).resolve().parent / "fitted_mv.ecsv"
FIT_REF = ("M_V and sig_M_V of the rows marked 'fitted here': maximum likelihood of the "
           "parallax given V (Ratnatunga & Casertano 1991, AJ 101, 1075; from memory) "
           "on Hipparcos Survey stars (ESA 1997) with new-reduction parallaxes (van "
           "Leeuwen 2007, A&A 474, 653), MK types from the Bright Star Catalogue 5th ed. "
           "(Hoffleit & Warren 1991) or the Hipparcos Catalogue; stars with EVEN HIP "
           "numbers only (odd HIP numbers are held out for tests); smoothed by a "
           "second-difference penalty (Whittaker 1923; Eilers & Marx 1996; from memory); "
           "volume-complete median and 68%-coverage corrections on the same even half")


def apply_fitted_mv(t, lc):
    """Replace M_V, sig_M_V (and extend ``source``) of class ``lc`` rows listed in fitted_mv.ecsv."""
    if not FITTED_MV.exists():
        print(f"  {FITTED_MV.name} missing: class {lc} keeps its literal M_V")
        return t
    f = Table.read(FITTED_MV, format="ascii.ecsv")
    f = f[f["lclass"] == lc]
    by = {str(r["sptype"]): r for r in f}
    n = 0
    src = list(t["source"])
    for i, st in enumerate(t["sptype"]):
        r = by.get(str(st))
        if r is None:
            continue
        t["M_V"][i] = r["M_V"]
        t["sig_M_V"][i] = r["sig_M_V"]
        head = {"fit": f"M_V, sig_M_V: fitted here to parallaxes ({r['n_near']} even-HIP stars within "
                       f"1.5 subtypes; e_M_V {r['e_M_V']:.2f} mag)",
                "shifted": (f"M_V: the literal value shifted by the fit-minus-literal offset of the "
                            f"nearest fitted types (fit here uninformative, e_M_V {r['e_M_V']:.2f} mag); "
                            f"sig_M_V: fitted here"),
                "clump": (f"M_V: red clump M_Ks = -1.61 (Hawkins et al. 2017, from memory) + this row's "
                          f"V-Ks; fitted here: {r['M_V_ml']:+.2f} (median of the luminosity function, "
                          f"before volume corrections); sig_M_V: fitted here")}[str(r["kind"])]
        old = src[i].replace("sig_M_V: common-practice default", "").strip("; ")
        src[i] = head + "; literal values: " + old
        n += 1
    t["source"] = np.array(src, dtype=str)
    if n:
        t.meta["references"] = list(t.meta["references"]) + [FIT_REF]
        t.meta["sig_M_V_source"] = ("Rows fitted here: intrinsic scatter of the luminosity function "
                                    "(half its 16-84% range) from the parallax fit, rescaled so that 68% of "
                                    "the even-HIP volume-complete groups' trigonometric distances fall in "
                                    "specpar's 16-84% interval. Other rows: " + t.meta["sig_M_V_source"])
        t.meta["notes"] = str(t.meta.get("notes", "")) + (
            f" {n} rows carry M_V and sig_M_V fitted to real stars (even HIP numbers; "
            "calibrations/_build/fit_real_stars.py).")
    print(f"  class {lc}: {n} rows with M_V, sig_M_V from {FITTED_MV.name}")
    return t


def main():
    dwarfs = build_dwarfs()
    giants = build_giants(dwarfs)
    # colour block (section 6): extra rows, then the colours of every class
    check_locus_junction(dwarfs, giants)
    giants = add_giant_colours(extend_giants(giants), dwarfs)
    sg = {lc: add_supergiant_colours(build_supergiants(lc), dwarfs, giants)
          for lc in ("Ib", "Iab", "Ia")}
    bright = add_mean_colours(build_bright_giants(giants), giants, sg["Ib"],
                              "class III", "class Ib")
    sub = extend_subgiants(build_subgiants(dwarfs, giants), dwarfs, giants)
    sub = add_mean_colours(sub, dwarfs, giants, "class V", "class III")
    check_gaia_relations(dwarfs)
    write(dwarfs, "dwarfs_V.ecsv")
    sub, giants, bright = (apply_fitted_mv(t, lc) for t, lc in ((sub, "IV"), (giants, "III"), (bright, "II")))
    write(sub, "subgiants_IV.ecsv")
    write(giants, "giants_III.ecsv")
    write(bright, "bright_giants_II.ecsv")
    write(sg["Ib"], "supergiants_Ib.ecsv")
    write(sg["Iab"], "supergiants_Iab.ecsv")
    write(sg["Ia"], "supergiants_Ia.ecsv")
    print("validation (files read back):")
    validate()
    print("all checks passed")


if __name__ == "__main__":
    main()
