#!/usr/bin/env python
"""Build ``calibrations/young_V.ecsv``: an empirical young (near zero-age) main sequence.

Run from the repository root after ``python calibrations/_build/fetch_cluster_members.py``:

    python calibrations/_build/make_young_locus.py

Method (stated here and in the table's metadata)
------------------------------------------------
The mean field dwarf sequence (``dwarfs_V.ecsv``, Pecaut & Mamajek 2013) mixes stars
of all ages: at a given colour it is brighter than a young cluster's sequence, which
is the origin of the too-large distances and negative reddenings of a cluster fit on
young clusters. This locus keeps every colour of the dwarf table and moves its
absolute magnitudes (all bands alike, i.e. a change of luminosity at fixed colour) by
an offset Delta(BP-RP_0) measured on real stars with their own parallaxes:

* stars: probable members of the Pleiades (Godoy-Rivera et al. 2021, ApJS 257, 46;
  Gaia DR2 photometry and parallaxes), **even record numbers (recno) of the published table only**
  (the odd ones are the held-out half used by the tests; the table's Gaia source ids are
  rounded, so their parity is no split), parallax over error > 20;
* absolute magnitude from each star's own parallax after removing the Gaia DR2
  parallax zero point of -0.029 mas (Lindegren et al. 2018, A&A 616, A2);
* dereddened with E(B-V) = 0.045 (Gaia Collaboration, Babusiaux et al. 2018, A&A
  616, A10, Table 2; from memory) and the package's default law (F99, R_V = 3.1);
* offset = M_G(star) - M_G(dwarf table at the star's BP-RP_0); per 0.2 mag bin of
  BP-RP_0 with at least 5 stars, the median after iterative clipping to +-0.25 mag
  around it (keeps unresolved binaries, up to 0.75 mag brighter, from pulling it);
* the same bins give the median observed-minus-table (G-RP)_0 at the star's BP-RP_0,
  which corrects the table's G-RP (the Gaia colour-colour relation of real DR2 photometry
  fixes the reddening in a G, BP, RP fit);
* offsets are interpolated linearly in numeric type between bin centres and held
  constant blueward of the bluest bin; rows redder than the reddest bin are left
  out, as are stars redder than BP-RP_0 = 2.0 (~K7/M0; see MAX_COLOUR: the Gaia colours
  of M dwarfs do not separate reddening from distance, and the Pleiades M dwarfs redder
  than BP-RP_0 ~ 2.8 are still contracting); this locus makes no claim there.

Age ~125 Myr (Stauffer et al. 1998, ApJ 499, L199; from memory) and [Fe/H] ~ 0
(e.g. Soderblom et al. 2009, AJ 138, 1292; from memory): over F-M types, a sequence
of this age is indistinguishable from the zero-age sequence at the 0.05 mag level,
while A and B stars have begun to evolve.
"""
from __future__ import annotations

import os
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from astropy.table import Table

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from specpar.core.bands import band_index # noqa: E402
from specpar.calib.tables import load_calibration # noqa: E402
from specpar.calib.extinction import band_coefficients # noqa: E402

EBV_PLEIADES = 0.045  # Gaia Collaboration 2018 (Babusiaux), Table 2, from memory
PLX_ZP = -0.029  # Gaia DR2 parallax zero point, Lindegren et al. 2018 (mas)
BIN, MIN_STARS, CLIP = 0.2, 5, 0.25
#: reddest BP-RP_0 used (about K7/M0). Redder, the table's K-M dwarf magnitudes are off by
#: 0.4-0.5 mag (Pleiades and Praesepe alike), the Pleiades stars beyond BP-RP_0 ~ 2.8 are still
#: contracting, and the Gaia colour-colour sequence runs parallel to the reddening vector: fits
#: of the red half of the Pleiades members alone gave E(B-V) 0.17 against 0.065 from the blue
#: half (measured on this data while building the locus), so the locus stops here.
MAX_COLOUR = 2.0


def main():
    cache = Path(os.environ.get("SPECPAR_REALDATA", "~/.cache/specpar-realdata")).expanduser()
    d = pd.read_csv(cache / "cluster_members.csv")
    s = d[(d.cluster == "Pleiades") & (d.member_class == "probable-member") & (d["recno"] % 2 == 0)]
    s = s[(s.plx / s.e_plx > 20) & np.isfinite(s.G + s.BP + s.RP)]
    lin = np.array(band_coefficients("F99", 3.1))
    iG, iB, iR = band_index("G"), band_index("BP"), band_index("RP")
    c0 = (s.BP - s.RP - (lin[iB] - lin[iR]) * EBV_PLEIADES).to_numpy()
    mg = (s.G - lin[iG] * EBV_PLEIADES - 5 * np.log10(100.0 / (s.plx - PLX_ZP))).to_numpy()

    base = load_calibration(ROOT / "calibrations" / "dwarfs_V.ecsv")
    spt = np.asarray(base.table["sptnum"], float)
    v = base.evaluate(spt).absmag
    tbprp, tmg = v[:, iB] - v[:, iR], v[:, iG]
    ok = np.isfinite(tbprp) & np.isfinite(tmg)
    order = np.argsort(tbprp[ok])
    star_spt = np.interp(c0, tbprp[ok][order], spt[ok][order])
    fine = np.arange(spt[ok].min(), spt[ok].max() + 1e-9, 0.01)
    fv = base.evaluate(fine).absmag
    fok = np.isfinite(fv[:, iB] - fv[:, iR]) & np.isfinite(fv[:, iG])
    fv = fv[fok]
    fb = fv[:, iB] - fv[:, iR]
    j = np.abs(c0[:, None] - fb[None]).argmin(axis=1)  # nearest point of the fine table in colour
    resid = mg - fv[j, iG]
    grp0 = (s.G - s.RP - (lin[iG] - lin[iR]) * EBV_PLEIADES).to_numpy()
    dgrp = grp0 - (fv[j, iG] - fv[j, iR])  # observed minus table G-RP at the same BP-RP

    edges = np.arange(np.floor(c0.min() / BIN) * BIN, MAX_COLOUR - BIN + 1e-9, BIN)
    centres, offsets, errs, counts, cbin, gbin = [], [], [], [], [], []
    for lo in edges:
        sel = (c0 >= lo) & (c0 < lo + BIN)
        if sel.sum() < MIN_STARS:
            continue
        r = resid[sel]
        med = np.median(r)
        for _ in range(5):
            keep = np.abs(r - med) <= CLIP
            med = np.median(r[keep])
        n = int(keep.sum())
        if n < MIN_STARS:
            continue
        centres.append(float(np.median(star_spt[sel][keep])))
        cbin.append(float(np.median(c0[sel][keep])))
        gbin.append(float(np.median(dgrp[sel][keep])))
        offsets.append(float(med))
        errs.append(float(1.253 * 1.4826 * np.median(np.abs(r[keep] - med)) / np.sqrt(n)))
        counts.append(n)
    centres, offsets = np.array(centres), np.array(offsets)
    print("bins (sptnum, offset, error, n, BP-RP_0, G-RP correction):")
    for row in zip(np.round(centres, 2), np.round(offsets, 3), np.round(errs, 3), counts,
                   np.round(cbin, 3), np.round(gbin, 3)):
        print("  ", row)

    keep_rows = spt <= centres.max() + 1e-9
    out = Table(base.table[keep_rows], copy=True)
    delta = np.interp(spt[keep_rows], centres, offsets)
    out["M_V"] = np.round(np.asarray(out["M_V"], float) + delta, 3)
    # G-RP from the same stars: the table's value at the row's BP-RP plus the median
    # observed-minus-table difference of the bins (interpolated in BP-RP, held at the ends);
    # M_V moves so that M_G keeps the measured offset (G = V + (G-V) is unchanged)
    bprp = np.ma.filled(np.ma.asarray(out["BP-RP"], dtype=float), np.nan)
    dg = np.interp(bprp, cbin, gbin)
    grp = np.ma.filled(np.ma.asarray(out["G-RP"], dtype=float), np.nan) + dg
    out["G-RP"] = np.ma.masked_invalid(np.round(grp, 3))
    out["source"] = [f"{src}; G-RP moved by {g:+.3f} mag" if np.isfinite(g) else src
                     for src, g in zip(out["source"], dg)]
    out["source"] = [f"{src}; M_V moved by {dlt:+.3f} mag (Pleiades even-recno parallax sequence, "
                     "see meta method)" for src, dlt in zip(out["source"], delta)]
    meta = dict(base.table.meta)
    meta["name"] = "young_V"
    meta["title"] = ("Empirical young (~125 Myr, [Fe/H] ~ 0) main sequence: the mean dwarf colours with "
                     "absolute magnitudes from Pleiades members' Gaia DR2 parallaxes (even record numbers)")
    meta["references"] = list(meta.get("references", [])) + [
        "Godoy-Rivera, D., Pinsonneault, M. H. & Rebull, L. M. 2021, ApJS 257, 46 (Pleiades members, "
        "Gaia DR2 photometry and parallaxes)",
        "Lindegren, L. et al. 2018, A&A 616, A2 (DR2 parallax zero point -0.029 mas)",
        "Gaia Collaboration, Babusiaux, C. et al. 2018, A&A 616, A10 (Pleiades E(B-V) = 0.045; from memory)"]
    meta["method"] = (__doc__.split("Method (stated here and in the table's metadata)")[1]
                      .split("Age ~125")[0].replace("-" * 48, "").strip())
    meta["offset_bins"] = [dict(sptnum=float(a), offset=float(b), error=float(c), n=int(n))
                           for a, b, c, n in zip(centres, offsets, errs, counts)]
    meta["age_myr"] = 125
    meta["feh"] = 0.0
    # zero point of the whole locus: Pleiades mean-parallax systematics ~0.02 mas (0.006 mag),
    # E(B-V) +-0.01 (A_G 0.026 mag), age spread of clusters it is applied to (0.04 mag):
    # 0.05 mag combined (rounded up), see meta method
    meta["zero_point_uncertainty"] = 0.05
    # colours: the bin medians scatter by ~0.01-0.02 mag about a smooth curve, and the
    # table colours are given to 0.01 mag
    meta["colour_zero_point_uncertainty"] = 0.02
    out.meta = meta
    path = ROOT / "calibrations" / "young_V.ecsv"
    out.write(path, format="ascii.ecsv", overwrite=True)
    print(f"wrote {path} ({len(out)} rows, sptnum {spt[keep_rows][0]:g}-{spt[keep_rows][-1]:g})")


if __name__ == "__main__":
    main()
