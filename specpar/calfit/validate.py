"""Check of calibrations on real stars: photometric against trigonometric
distances in volume-complete groups (luminosity class x temperature class).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from astropy.table import Table

from specpar.core.sptype import TEMPERATURE_CLASSES

from .sample import UBV_ERRORS, group_labels

__all__ = ["validate", "format_validation", "DMAG_TOLERANCE", "COVERAGE_RANGE", "MIN_GROUP"]

#: Pass criteria of a tested group (issue 9 of the project): |5 log10 median ratio| at most
#: this (mag), and the 16-84% interval covering this range of trigonometric distances.
DMAG_TOLERANCE = 0.25
COVERAGE_RANGE = (0.55, 0.82)
#: Default smallest group that is tested.
MIN_GROUP = 25

_LC_ORDER = ("V", "IV-V", "IV", "III-IV", "III", "II-III", "II", "Ib-II", "Ib", "Iab-Ib", "Iab",
             "Ia-Iab", "Ia", "Ia-Ib")
_COLUMNS = ("lclass", "tclass", "n", "d_max_pc", "dmag_median", "ratio_median", "coverage", "sig_pred",
            "sptnum_median", "tested")


def _photometric(stars: Table, calibrations=(), **estimate_kw) -> pd.DataFrame:
    from specpar.pipeline.estimate import estimate
    inp = Table()
    inp["sptype"] = stars["sptype"]
    for c, e in UBV_ERRORS.items():
        if c in stars.colnames:
            inp[c] = np.ma.filled(np.ma.asarray(stars[c], dtype=float), np.nan)
            inp["e_" + c] = np.full(len(stars), e)
    out = estimate(inp, calibrations=tuple(calibrations), **estimate_kw)
    return out.to_pandas() if hasattr(out, "to_pandas") else out


def _group_order(k):
    lc, tc = k.split(" ")
    return (_LC_ORDER.index(lc) if lc in _LC_ORDER else 99, lc, TEMPERATURE_CLASSES.index(tc))


def _group_row(sel, V, plx, eplx, vlim, phot, sptnum, min_snr, faint_quantile):
    """The figures of one group (``sel``), or None when it has too few stars."""
    d, lo, hi = phot
    good = sel & (plx > min_snr * eplx)
    if good.sum() < 3:
        return None
    # the volume does not depend on the calibration tested: no extinction enters it
    mtrig = V[good] + 5 + 5 * np.log10(plx[good] / 1000.0)
    m_faint = np.quantile(mtrig, faint_quantile)
    d_max = 10 ** ((vlim[sel].min() - m_faint + 5) / 5)
    vol = sel & (plx >= 1000.0 / d_max)
    n = int(vol.sum())
    if n == 0:
        return None
    dt = 1000.0 / plx[vol]
    ratio = np.median(d[vol] / dt)
    cov = float(np.mean((lo[vol] <= dt) & (dt <= hi[vol])))
    sig_pred = float(np.median(2.5 * np.log10(hi[vol] / lo[vol])))
    return n, d_max, 5 * np.log10(ratio), ratio, cov, sig_pred, float(np.median(sptnum[vol]))


def validate(stars, calibrations=(), *, v_limit=6.5, min_stars=MIN_GROUP, faint_quantile=0.9,
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
        Completeness limit in V, one value or one per star (e.g.
        :func:`specpar.calfit.realdata.completeness_limits`). Fainter stars are left out.
    min_stars : int
        Groups with fewer stars are listed but marked ``tested = False``.
    faint_quantile : float
        The group's volume is the one within which a star at this quantile of
        the group's trigonometric absolute magnitudes (V + 5 log10(plx/100 mas),
        parallax S/N >= ``min_snr``; no extinction, so the volume does not depend
        on the calibration tested) is still brighter than the group's faintest
        ``v_limit``; stars with parallax above that limit form the group.

    Returns
    -------
    astropy.table.Table
        One row per (luminosity class, temperature class): ``n``, the distance
        limit ``d_max_pc``, ``dmag_median`` = 5 log10 of the median
        photometric/trigonometric distance ratio, ``ratio_median``,
        ``coverage`` (fraction of trigonometric distances 1000/plx inside the
        16-84% photometric interval), ``sig_pred`` (median half-width of that
        interval in mag), ``sptnum_median`` (median numeric type) and ``tested``.

    References
    ----------
    Malmquist 1922, Lund Medd. I 100 (bias of magnitude-limited samples; the
    volume limit avoids it), Lutz & Kelker 1973, PASP 85, 573 (parallax-limited
    samples; kept small by the high parallax S/N of nearby groups) -- from memory.
    """
    stars = Table(stars, masked=False) if not isinstance(stars, Table) else stars
    phot = _photometric(stars, calibrations, **estimate_kw)
    g = group_labels(stars["sptype"])
    V, plx, eplx = (np.asarray(stars[c], dtype=float) for c in ("V", "plx", "e_plx"))
    d = phot["dist_pc"].to_numpy(float)
    dist = (d, phot["dist_lo_pc"].to_numpy(float), phot["dist_hi_pc"].to_numpy(float))
    vlim = np.broadcast_to(np.asarray(v_limit, dtype=float), V.shape)
    usable = (g["lclass"].to_numpy(object) != "") & np.isfinite(d) & np.isfinite(V) & (V <= vlim)
    rows = []
    key = g["lclass"].astype(str) + " " + g["tclass"].astype(str)
    for k in sorted(set(key[usable]), key=_group_order):
        sel = usable & (key.to_numpy() == k)
        row = _group_row(sel, V, plx, eplx, vlim, dist, g["sptnum"].to_numpy(float), min_snr, faint_quantile)
        if row is not None:
            rows.append((*k.split(" "), *row, row[0] >= min_stars))
    out = Table(rows=rows, names=_COLUMNS, dtype=(str, str, int, float, float, float, float, float, float, bool))
    out.meta["calibrations"] = list(map(str, calibrations))
    return out


def format_validation(t: Table, title="") -> str:
    """The validation table as fixed-width text (one line per group), each tested group
    marked ``ok`` or ``FAIL`` by :data:`DMAG_TOLERANCE` and :data:`COVERAGE_RANGE`."""
    lines = [title] if title else []
    lines.append(f"{'class':>7} {'T':>2} {'n':>5} {'d_max':>7} {'5log(ratio)':>11} {'ratio':>6} {'cover':>6}  status")
    for r in t:
        if r["tested"]:
            ok = abs(r["dmag_median"]) <= DMAG_TOLERANCE and COVERAGE_RANGE[0] <= r["coverage"] <= COVERAGE_RANGE[1]
            status = "ok" if ok else "FAIL"
        else:
            status = f"(n<{MIN_GROUP})"
        lines.append(f"{r['lclass']:>7} {r['tclass']:>2} {r['n']:5d} {r['d_max_pc']:7.0f} "
                     f"{r['dmag_median']:+11.2f} {r['ratio_median']:6.2f} {r['coverage']:6.2f}  {status}")
    return "\n".join(lines)
