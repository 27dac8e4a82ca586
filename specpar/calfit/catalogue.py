"""Readers of the catalogue files behind the real calibrators, each in its published
layout: the Bright Star Catalogue 5th ed. (Hoffleit & Warren 1991, CDS V/50), its
HR/HD/HIP cross-index, the Hipparcos Catalogue (ESA 1997, CDS I/239) and the
Hipparcos new reduction (van Leeuwen 2007, CDS I/311).

References
----------
Hoffleit, D. & Warren, W. H. 1991, The Bright Star Catalogue, 5th rev. ed., CDS V/50;
ESA 1997, The Hipparcos and Tycho Catalogues, ESA SP-1200, CDS I/239;
van Leeuwen, F. 2007, A&A 474, 653, CDS I/311.
"""
from __future__ import annotations

import gzip
from pathlib import Path

import numpy as np
from astropy.table import Table

__all__ = ["read_bsc5", "read_hip_main", "read_hip2", "read_cross_index"]


def _num(s: str) -> float:
    s = s.strip()
    try:
        return float(s)
    except ValueError:
        return np.nan


def read_bsc5(path) -> Table:
    """Bright Star Catalogue 5th ed. (V/50), fixed byte layout of the CDS ReadMe."""
    rows = []
    for raw in Path(path).read_bytes().split(b"\n"):
        s = raw.decode("latin-1").rstrip("\r")
        if len(s) < 107 or not s[0:4].strip():
            continue
        ra_s = s[75:83]
        if not ra_s.strip():  # the few non-stellar entries have no position
            continue
        ra = 15.0 * (int(s[75:77]) + int(s[77:79]) / 60.0 + float(s[79:83]) / 3600.0)
        dec = int(s[84:86]) + int(s[86:88]) / 60.0 + int(s[88:90]) / 3600.0
        dec = -dec if s[83] == "-" else dec
        rows.append((int(s[0:4]), int(s[25:31]) if s[25:31].strip() else -1, ra, dec,
                     _num(s[96:102]), _num(s[102:107]), s[108:109].strip(), _num(s[109:114]),
                     s[114:115].strip(), _num(s[115:120]), s[120:121].strip(),
                     s[127:147].strip() if len(s) > 127 else "", s[43:44].strip()))
    names = ("hr", "hd", "ra_bsc", "dec_bsc", "glat", "V", "u_V", "B-V", "u_B-V", "U-B", "u_U-B",
             "sptype", "bsc_multiple")
    return Table(rows=rows, names=names)


def read_hip_main(path) -> Table:
    """Hipparcos main catalogue (I/239 hip_main, '|'-separated fields H0-H77), gzip."""
    rows = []
    with gzip.open(path, "rt", encoding="latin-1") as f:
        for line in f:
            h = line.rstrip("\n").split("|")
            if len(h) < 77 or not h[8].strip():
                continue
            rows.append((int(h[1]), float(h[8]), float(h[9]), _num(h[5]), _num(h[37]), _num(h[38]),
                         int(h[71]) if h[71].strip() else -1, h[76].strip(), h[68].strip() == "S",
                         h[59].strip()))
    return Table(rows=rows, names=("hip", "ra_hip", "dec_hip", "V_hip", "B-V_hip", "e_B-V_hip", "hd_hip",
                                   "sptype_hip", "hip_survey", "hip_multflag"))


def read_hip2(path) -> Table:
    """Hipparcos new reduction (I/311 hip2.dat): HIP, Plx, e_Plx (mas) and the solution type."""
    a = np.loadtxt(path, usecols=(0, 1, 6, 11), dtype=float)
    return Table({"hip": a[:, 0].astype(int), "sn": a[:, 1].astype(int), "plx": a[:, 2], "e_plx": a[:, 3]})


def read_cross_index(path) -> Table:
    """HR/HD/HIP cross-index shipped with the BSC5 copy (tab-separated; rows with an HR number)."""
    hip, hd, hr = [], [], []
    for line in Path(path).read_text(encoding="latin-1").splitlines():
        if line.startswith("#") or not line.strip():
            continue
        f = line.split("\t")
        if len(f) >= 5 and f[4].strip():
            hip.append(int(f[0])); hr.append(int(f[4]))
            hd.append(int(f[3]) if f[3].strip() else -1)
    return Table({"hip": hip, "hd_x": hd, "hr": hr})
