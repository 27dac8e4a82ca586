"""Drawing the stars of a problem set from the calibration tables themselves.

Each star gets a tabulated MK type and luminosity class, a true subtype scattered about it, a true
absolute magnitude and true intrinsic colours scattered by the calibration's own intrinsic scatter
(``sig_M_V`` and ``colour_scatter``), a colour excess (uniform) and a distance (uniform in log d
over the part of the distance range that keeps the star's V inside the stated ``v_range``; a star
that cannot be placed there is drawn again). Its apparent magnitudes are
``m = M + (m-M)_0 + R_band E(B-V)`` plus Gaussian photometric noise, rounded to 0.001 mag.
Everything is vectorised over stars (loops run over luminosity classes only).

References
----------
Pogson, N. 1856, MNRAS 17, 12: m - M = 5 log10(d / 10 pc).
"""
from __future__ import annotations

import numpy as np

from specpar.core.bands import BAND_NAMES, CALIBRATION_COLOURS, band_index, chain_matrices
from specpar.calib.tables import default_calibrations
from specpar.core.errors import InputError
from specpar.calib.extinction import band_coefficients
from specpar.core.sptype import DEFAULT_SUBTYPE_SIGMA

__all__ = ["draw_stars", "SHEET_DECIMALS", "MAX_REDRAWS"]

#: Decimals of the magnitudes on a sheet (0.001 mag, as most published photometry; common practice).
SHEET_DECIMALS = 3
#: Half a step of the sheet's last decimal (0.0005 mag): V rounded to SHEET_DECIMALS stays inside v_range.
_HALF_STEP = 0.0005
#: Rounds of redrawing stars that cannot reach ``v_range`` before giving up.
MAX_REDRAWS = 200
_P, _ = chain_matrices()


def _pool(s):
    """Eligible (class, table row) pairs: the types asked for, with every band calibrated."""
    cals = default_calibrations()
    entries, ranges = [], {}
    idx = [band_index(b) for b in s["bands"]]
    for lc in s["classes"]:
        t = cals.by_class[lc].table
        x = np.asarray(t["sptnum"], dtype=float)
        ok = np.isfinite(cals.by_class[lc].evaluate(x).absmag[:, idx]).all(axis=1)
        names = np.asarray(t["sptype"], dtype=str)
        want = np.array([any(n == ty or (len(ty) == 1 and n[0] == ty) for ty in s["types"]) for n in names])
        if ok.any():
            ranges[lc] = (x[ok].min(), x[ok].max())
        entries += [(lc, names[j], x[j]) for j in np.flatnonzero(ok & want)]
    if not entries:
        raise InputError(f"no tabulated type of {', '.join(s['types'])} in class(es) {', '.join(s['classes'])} "
                         f"has a calibration for all of {', '.join(s['bands'])}; choose other types, classes "
                         "or fewer bands")
    return entries, ranges


def _candidates(rng, s, n, entries, per_class):
    """n candidate stars: everything but the distance, vectorised; the distance is fixed later."""
    nb, nc = len(BAND_NAMES), len(CALIBRATION_COLOURS)
    classes = [e[0] for e in entries]
    weights = np.array([1.0 / (len(per_class) * per_class[lc]) for lc in classes])
    pick = rng.choice(len(entries), size=n, p=weights / weights.sum())
    z_spt, z_mv = rng.standard_normal(n), rng.standard_normal(n)
    z_col = rng.standard_normal((n, nc))
    u_logd = rng.uniform(size=n)
    ebv = rng.uniform(*s["ebv_range"], size=n)
    z_phot = rng.standard_normal((n, nb))
    return dict(pick=pick, z_spt=z_spt, z_mv=z_mv, z_col=z_col, u_logd=u_logd, ebv=ebv, z_phot=z_phot)


def _stars(s, c, entries, ranges):
    """True parameters of candidate stars (absolute magnitudes, colours) and their feasible log d."""
    n, nb = len(c["pick"]), len(BAND_NAMES)
    lc = np.array([entries[k][0] for k in c["pick"]], dtype=object)
    nominal = np.array([entries[k][2] for k in c["pick"]])
    true_spt = nominal.copy()
    absmag = np.full((n, nb), np.nan)
    bv0 = np.full(n, np.nan)
    cals = default_calibrations()
    idx = [band_index(b) for b in s["bands"]]
    for cl in set(lc):  # a loop over luminosity classes, each vectorised over its stars
        sel = lc == cl
        cal = cals.by_class[cl]
        spt = np.clip(nominal[sel] + DEFAULT_SUBTYPE_SIGMA * c["z_spt"][sel], *ranges[cl])
        v = cal.evaluate(spt)
        hole = ~np.isfinite(v.absmag[:, idx]).all(axis=1)  # masked cells inside the range: keep the row's type
        if hole.any():
            spt[hole] = nominal[sel][hole]
            v = cal.evaluate(spt)
        true_spt[sel] = spt
        mv = v.absmag[:, 0] + np.sqrt(v.var_mv) * c["z_mv"][sel]
        colours = np.nan_to_num(v.colours) + cal.colour_scatter * c["z_col"][sel]
        absmag[sel] = mv[:, None] + colours @ _P.T
        bv0[sel] = colours[:, CALIBRATION_COLOURS.index("B-V")]
    R = band_coefficients(s["law"], s["rv"])
    iv = band_index("V")
    # V on the sheet = M_V + (m-M)_0 + A_V + noise, rounded to 0.001 mag: keep it inside v_range
    v_wo_dm = absmag[:, iv] + c["ebv"] * R[iv] + s["error_mag"] * c["z_phot"][:, iv]
    vlo, vhi = s["v_range"]
    dlo, dhi = np.log10(s["dist_range_pc"])
    lo = np.maximum(dlo, (vlo + _HALF_STEP - v_wo_dm + 5.0) / 5.0)
    hi = np.minimum(dhi, (vhi - _HALF_STEP - v_wo_dm + 5.0) / 5.0)
    return dict(lc=lc, nominal=nominal, true_spt=true_spt, absmag=absmag, bv0=bv0, lo=lo, hi=hi, R=R)


def draw_stars(s, gen_seed):
    """True parameters and noisy photometry, vectorised over stars.

    A candidate whose V cannot fall inside ``v_range`` at any distance of ``dist_range_pc`` is
    drawn again (whole star, vectorised over the rejected ones); log d is uniform over the part of
    the distance range that keeps V inside ``v_range``.
    """
    rng = np.random.default_rng(gen_seed)
    n = s["n_stars"]
    entries, ranges = _pool(s)
    classes = [e[0] for e in entries]
    per_class = {lc: classes.count(lc) for lc in dict.fromkeys(classes)}
    c = _candidates(rng, s, n, entries, per_class)
    st = _stars(s, c, entries, ranges)
    for _ in range(MAX_REDRAWS):
        bad = np.flatnonzero(~(st["lo"] <= st["hi"]))
        if bad.size == 0:
            break
        c2 = _candidates(rng, s, bad.size, entries, per_class)
        st2 = _stars(s, c2, entries, ranges)
        for key in c:
            c[key][bad] = c2[key]
        for key in ("lc", "nominal", "true_spt", "absmag", "bv0", "lo", "hi"):
            st[key][bad] = st2[key]
    if not np.all(st["lo"] <= st["hi"]):
        raise InputError(f"the types {', '.join(s['types'])} of class(es) {', '.join(s['classes'])} rarely or "
                         f"never reach V = {s['v_range'][0]:g}-{s['v_range'][1]:g} mag at "
                         f"{s['dist_range_pc'][0]:g}-{s['dist_range_pc'][1]:g} pc with E(B-V) "
                         f"{s['ebv_range'][0]:g}-{s['ebv_range'][1]:g}; widen v_range (--v-range) or dist_range_pc "
                         "(--dist-range), or choose other types (--types)")
    logd = st["lo"] + c["u_logd"] * (st["hi"] - st["lo"])
    dm = 5.0 * logd - 5.0
    ebv, R = c["ebv"], st["R"]
    mags = st["absmag"] + dm[:, None] + ebv[:, None] * R[None] + s["error_mag"] * c["z_phot"]
    return dict(lc=st["lc"], sptype=[f"{entries[k][1]} {entries[k][0]}" for k in c["pick"]],
                nominal=st["nominal"], true_spt=st["true_spt"], absmag=st["absmag"], bv0=st["bv0"],
                dist=10.0 ** logd, dm=dm, ebv=ebv, av=ebv * R[band_index("V")], mags=np.round(mags, SHEET_DECIMALS))
