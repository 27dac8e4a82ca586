"""Calibrations fitted to trigonometric parallaxes, and their check on real stars.

Two jobs:

- :func:`validate` compares photometric distances (from :func:`specpar.estimate`
  with a given set of calibrations) with trigonometric parallaxes in
  volume-complete groups (luminosity class x temperature class).
- :func:`calibrate` fits mean absolute magnitude, intrinsic scatter and
  intrinsic colours per spectral type and luminosity class to a sample of
  classified stars with parallaxes, by maximum likelihood in parallax space.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from astropy.table import Table

from .sptype import TEMPERATURE_CLASSES, parse_sptypes

__all__ = ["validate", "format_validation", "group_labels", "UBV_ERRORS"]

#: Photometric errors assumed for bright-star photoelectric UBV (mag); common practice.
UBV_ERRORS = {"V": 0.02, "B-V": 0.015, "U-B": 0.02}


def group_labels(sptypes) -> pd.DataFrame:
    """Luminosity-class label (``V``, ``IV-V``, ``III`` ...) and temperature class per type."""
    p = parse_sptypes(sptypes)
    lb, lf = p["lc_bright"].to_numpy(object), p["lc_faint"].to_numpy(object)
    lab = np.where(lb == lf, lb, np.char.add(np.char.add(lb.astype(str), "-"), lf.astype(str)))
    x = p["sptnum"].to_numpy(float)
    ok = np.isfinite(x) & (lb != "")
    tc = np.full(len(x), "", dtype=object)
    tc[ok] = np.array(list(TEMPERATURE_CLASSES))[np.clip((x[ok] // 10).astype(int), 0, 6)]
    lab = np.where(ok, lab, "")
    # a bare class (flag NO_LUMCLASS) is not a class the star was given
    lab = np.where((p["flags"].to_numpy(np.int64) & 1) != 0, "", lab)
    return pd.DataFrame({"lclass": lab, "tclass": tc, "sptnum": x})


def _photometric(stars: Table, calibrations=(), **estimate_kw) -> pd.DataFrame:
    from .estimate import estimate
    inp = Table()
    inp["sptype"] = stars["sptype"]
    for c, e in UBV_ERRORS.items():
        if c in stars.colnames:
            inp[c] = np.ma.filled(np.ma.asarray(stars[c], dtype=float), np.nan)
            inp["e_" + c] = np.full(len(stars), e)
    out = estimate(inp, calibrations=tuple(calibrations), **estimate_kw)
    return out.to_pandas() if hasattr(out, "to_pandas") else out


def validate(stars, calibrations=(), *, v_limit=6.5, min_stars=25, faint_quantile=0.9,
             min_snr=5.0, **estimate_kw) -> Table:
    """Photometric against trigonometric distances in volume-complete groups.

    Parameters
    ----------
    stars : astropy.table.Table
        Columns ``sptype``, ``V``, ``B-V`` (``U-B`` optional), ``plx``,
        ``e_plx`` (mas). Use the held-out half (odd HIP numbers) when the
        calibrations were fitted to the other half.
    calibrations : sequence of path
        Calibration files replacing shipped tables (as in :func:`specpar.estimate`).
    v_limit : float or array_like
        Apparent-magnitude completeness limit of the sample, one value or one
        per star (e.g. :func:`specpar.brightcat.completeness_limits`, the
        Hipparcos Survey limits). Stars fainter than their limit are left out.
    min_stars : int
        Groups with fewer stars are listed but marked ``tested = False``.
    faint_quantile : float
        The group's volume is the one within which a star at this quantile of
        the group's trigonometric absolute magnitudes (stars with parallax
        S/N >= ``min_snr``), extinguished by the group's 90th percentile A_V,
        is still brighter than ``v_limit``. Stars with parallax above the
        corresponding limit form the volume-complete group.

    Returns
    -------
    astropy.table.Table
        One row per (luminosity class, temperature class): ``n``, the distance
        limit ``d_max_pc``, ``dmag_median`` = 5 log10 of the median
        photometric/trigonometric distance ratio, ``ratio_median``,
        ``coverage`` (fraction of trigonometric distances 1000/plx inside the
        16-84% photometric interval) and ``tested``.

    References
    ----------
    Malmquist 1922, Lund Medd. I 100 (bias of magnitude-limited samples; the
    volume limit avoids it), Lutz & Kelker 1973, PASP 85, 573 (parallax-limited
    samples; kept small by the high parallax S/N of nearby groups) -- from memory.
    """
    stars = Table(stars, masked=False) if not isinstance(stars, Table) else stars
    phot = _photometric(stars, calibrations, **estimate_kw)
    g = group_labels(stars["sptype"])
    V = np.asarray(stars["V"], dtype=float)
    plx = np.asarray(stars["plx"], dtype=float)
    eplx = np.asarray(stars["e_plx"], dtype=float)
    d = phot["dist_pc"].to_numpy(float)
    lo, hi = phot["dist_lo_pc"].to_numpy(float), phot["dist_hi_pc"].to_numpy(float)
    av = np.nan_to_num(phot["av"].to_numpy(float))
    vlim = np.broadcast_to(np.asarray(v_limit, dtype=float), V.shape)
    usable = (g["lclass"].to_numpy(object) != "") & np.isfinite(d) & np.isfinite(V) & (V <= vlim)
    rows = []
    key = g["lclass"].astype(str) + " " + g["tclass"].astype(str)
    for k in sorted(set(key[usable]), key=_group_order):
        sel = usable & (key.to_numpy() == k)
        good = sel & (plx > min_snr * eplx)
        if good.sum() < 3:
            continue
        mtrig = V[good] - av[good] + 5 + 5 * np.log10(plx[good] / 1000.0)
        m_faint = np.quantile(mtrig, faint_quantile)
        a_hi = np.quantile(av[sel], 0.9)
        d_max = 10 ** ((vlim[sel].min() - a_hi - m_faint + 5) / 5)
        vol = sel & (plx >= 1000.0 / d_max)
        n = int(vol.sum())
        if n == 0:
            continue
        dt = 1000.0 / plx[vol]
        ratio = np.median(d[vol] / dt)
        cov = float(np.mean((lo[vol] <= dt) & (dt <= hi[vol])))
        lc, tc = k.split(" ")
        rows.append((lc, tc, n, d_max, 5 * np.log10(ratio), ratio, cov, n >= min_stars))
    out = Table(rows=rows, names=("lclass", "tclass", "n", "d_max_pc", "dmag_median", "ratio_median",
                                  "coverage", "tested"),
                dtype=(str, str, int, float, float, float, float, bool))
    out.meta["calibrations"] = list(map(str, calibrations))
    return out


_LC_ORDER = ("V", "IV-V", "IV", "III-IV", "III", "II-III", "II", "Ib-II", "Ib", "Iab-Ib", "Iab",
             "Ia-Iab", "Ia", "Ia-Ib")


def _group_order(k):
    lc, tc = k.split(" ")
    return (_LC_ORDER.index(lc) if lc in _LC_ORDER else 99, lc, TEMPERATURE_CLASSES.index(tc))


def format_validation(t: Table, title="") -> str:
    """The validation table as fixed-width text (one line per group)."""
    lines = [title] if title else []
    lines.append(f"{'class':>7} {'T':>2} {'n':>5} {'d_max':>7} {'5log(ratio)':>11} {'ratio':>6} {'cover':>6}  status")
    for r in t:
        if r["tested"]:
            ok = abs(r["dmag_median"]) <= 0.25 and 0.55 <= r["coverage"] <= 0.82
            status = "ok" if ok else "FAIL"
        else:
            status = "(n<25)"
        lines.append(f"{r['lclass']:>7} {r['tclass']:>2} {r['n']:5d} {r['d_max_pc']:7.0f} "
                     f"{r['dmag_median']:+11.2f} {r['ratio_median']:6.2f} {r['coverage']:6.2f}  {status}")
    return "\n".join(lines)
