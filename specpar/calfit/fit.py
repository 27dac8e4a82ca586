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

from dataclasses import dataclass

import numpy as np
import pandas as pd
from astropy.table import Table

from specpar.sptype import TEMPERATURE_CLASSES, parse_sptypes

__all__ = ["calibrate", "write_calibrations", "CalibrationFit", "fit_luminosity", "star_loglike",
           "validate", "format_validation", "group_labels", "default_scale_height", "UBV_ERRORS"]

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
    from specpar.estimate import estimate
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
        the group's trigonometric absolute magnitudes (V + 5 log10(plx/100 mas),
        stars with parallax S/N >= ``min_snr``; no extinction, so the volume
        does not depend on the calibration tested) is still brighter than the
        faintest ``v_limit`` of the group. Stars with parallax above the
        corresponding limit form the volume-complete group.

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
    V = np.asarray(stars["V"], dtype=float)
    plx = np.asarray(stars["plx"], dtype=float)
    eplx = np.asarray(stars["e_plx"], dtype=float)
    d = phot["dist_pc"].to_numpy(float)
    lo, hi = phot["dist_lo_pc"].to_numpy(float), phot["dist_hi_pc"].to_numpy(float)
    vlim = np.broadcast_to(np.asarray(v_limit, dtype=float), V.shape)
    usable = (g["lclass"].to_numpy(object) != "") & np.isfinite(d) & np.isfinite(V) & (V <= vlim)
    rows = []
    key = g["lclass"].astype(str) + " " + g["tclass"].astype(str)
    for k in sorted(set(key[usable]), key=_group_order):
        sel = usable & (key.to_numpy() == k)
        good = sel & (plx > min_snr * eplx)
        if good.sum() < 3:
            continue
        # the volume does not depend on the calibration tested: no extinction enters it
        mtrig = V[good] + 5 + 5 * np.log10(plx[good] / 1000.0)
        m_faint = np.quantile(mtrig, faint_quantile)
        d_max = 10 ** ((vlim[sel].min() - m_faint + 5) / 5)
        vol = sel & (plx >= 1000.0 / d_max)
        n = int(vol.sum())
        if n == 0:
            continue
        dt = 1000.0 / plx[vol]
        ratio = np.median(d[vol] / dt)
        cov = float(np.mean((lo[vol] <= dt) & (dt <= hi[vol])))
        sig_pred = float(np.median(2.5 * np.log10(hi[vol] / lo[vol])))
        x_med = float(np.median(g["sptnum"].to_numpy(float)[vol]))
        lc, tc = k.split(" ")
        rows.append((lc, tc, n, d_max, 5 * np.log10(ratio), ratio, cov, sig_pred, x_med, n >= min_stars))
    out = Table(rows=rows, names=("lclass", "tclass", "n", "d_max_pc", "dmag_median", "ratio_median",
                                  "coverage", "sig_pred", "sptnum_median", "tested"),
                dtype=(str, str, int, float, float, float, float, float, float, bool))
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


# ---------------------------------------------------------------------------
# The fitter
# ---------------------------------------------------------------------------
_LN10_5 = np.log(10.0) / 5.0
_HALF_LOG_2PI = 0.5 * np.log(2.0 * np.pi)
#: Starting (and prior-centre) extra width of the second luminosity-function component (mag).
OUTLIER_WIDTH = 1.0
_FIT_CLASSES = ("V", "IV", "III", "II", "Ib", "Iab", "Ia")


def default_scale_height(sptnum, lclass):
    """Exponential-disk scale height (pc) of a stellar group, by type and class.

    Typical values, from memory (e.g. Mihalas & Binney 1981, Galactic
    Astronomy, Table 4-16): O-B 60 pc, A 115 pc, F 190 pc, G-M 300 pc; young
    bright giants and supergiants 60 pc up to F and 100 pc later.
    """
    x = np.asarray(sptnum, dtype=float)
    h = np.select([x < 20, x < 30, x < 40], [60.0, 115.0, 190.0], 300.0)
    young = np.isin(np.asarray(lclass, dtype=object), ["II", "Ib", "Iab", "Ia"])
    return np.where(young, np.where(x < 40, 60.0, 100.0), h)


def _component(m, plx, eplx, M0, sig, inv_h, n_grid=16):
    """Log-likelihood of the observed parallax given the apparent magnitude, for a
    Gaussian luminosity function N(M0, sig) and a space density exp(-|z|/h)
    (``inv_h`` = |sin b|/h in 1/pc; 0 for a uniform density), with its
    derivatives with respect to M0 and sig. All arguments are arrays over stars.

    The true parallax p (mas) is integrated in u = ln p. With a uniform density
    the prior of u given m is normal, N(u0 - 3 s^2, s^2) with s = sig ln10/5 and
    u0 = (M0 - m + 10) ln10/5; the shift -3 s^2 is the Malmquist (1922)
    correction written in parallax space. The integration nodes are the union
    of a grid even in u (resolving the prior) and one even in p (resolving the
    parallax error), over the overlap of the two supports; trapezoid rule.
    """
    s = sig * _LN10_5
    uc = (M0 - m + 10.0) * _LN10_5 - 3.0 * s ** 2
    t = np.linspace(0.0, 1.0, n_grid)
    disk = np.any(inv_h > 0)
    lo_prior, hi_prior = uc - 6.5 * s, uc + 6.5 * s
    if disk:
        # mode of prior x disk density (Newton from the left; converges monotonically since the
        # derivative of the log density is convex and decreasing in u)
        c = 1000.0 * inv_h
        mode = uc.copy()
        for _ in range(60):
            ce = c * np.exp(-mode)
            mode = mode + (-(mode - uc) / s ** 2 + ce) / (1.0 / s ** 2 + ce)
        sd_mode = 1.0 / np.sqrt(1.0 / s ** 2 + c * np.exp(-mode))
        hi_prior = np.maximum(hi_prior, mode + 6.5 * s)
    p_hi = np.maximum(plx, 0.0) + 7.0 * eplx
    p_lo = plx - 7.0 * eplx
    lo_lik = np.log(np.where(p_lo > 0, p_lo, 1e-300))
    hi_lik = np.log(p_hi)
    A, B = np.maximum(lo_prior, lo_lik), np.minimum(hi_prior, hi_lik)
    # no overlap (strong tension): integrate over the gap between the two supports
    gap = A >= B
    A2 = np.where(gap, np.minimum(A, B), A)
    B2 = np.where(gap, np.maximum(A, B), B)
    B2 = np.maximum(B2, A2 + 1e-6)
    u1 = A2[:, None] + (B2 - A2)[:, None] * t[None, :]
    pa, pb = np.exp(A2), np.exp(B2)
    u2 = np.log(pa[:, None] + (pb - pa)[:, None] * t[None, 1:-1])
    u = np.sort(np.concatenate([u1, u2], axis=1), axis=1)

    def integrate(u, with_plx):
        z = (u - uc[:, None]) / s[:, None]
        a = -0.5 * z ** 2 - np.log(s)[:, None] - _HALF_LOG_2PI
        if disk:
            a = a - 1000.0 * np.exp(-u) * inv_h[:, None]
        if with_plx:
            a = a - 0.5 * ((plx[:, None] - np.exp(u)) / eplx[:, None]) ** 2 - np.log(eplx)[:, None] - _HALF_LOG_2PI
        du = np.diff(u, axis=1)
        wt = np.zeros_like(u)
        wt[:, :-1] += 0.5 * du
        wt[:, 1:] += 0.5 * du
        amax = a.max(axis=1)
        w = np.exp(a - amax[:, None]) * wt
        tot = np.maximum(w.sum(axis=1), 1e-300)
        logi = amax + np.log(tot)
        ez = (w * z).sum(axis=1) / tot
        ez2 = (w * (z ** 2 - 1.0)).sum(axis=1) / tot
        return logi, ez, ez2

    logn, ez, ez2 = integrate(u, True)
    if disk:
        zlo, zhi = mode - 8.0 * sd_mode, mode + 6.5 * s
        logz, pz, pz2 = integrate(zlo[:, None] + (zhi - zlo)[:, None] * np.linspace(0, 1, 25)[None, :], False)
        logn, ez, ez2 = logn - logz, ez - pz, ez2 - pz2
    dl_duc, dl_ds = ez / s, ez2 / s
    d_m0 = dl_duc * _LN10_5
    d_sig = _LN10_5 * (dl_ds - 6.0 * s * dl_duc)
    return logn, d_m0, d_sig


def star_loglike(m, plx, eplx, M0, sig, frac, inv_h=0.0, shift=0.0, width=OUTLIER_WIDTH):
    """Per-star log-likelihood of the parallax given the apparent magnitude, for a
    luminosity function made of a core N(M0, sig^2) and a second component
    N(M0 + shift, sig^2 + width^2) holding the fraction ``frac`` (misclassified
    stars, unresolved binaries, a giant branch beside the clump).

    Returns ``(loglike, d/dM0, d/dsig, d/dlogit(frac), d/dshift, d/dlog(width))``,
    arrays over stars.
    """
    m, plx, eplx, M0, sig = (np.asarray(a, dtype=float) for a in (m, plx, eplx, M0, sig))
    inv_h = np.broadcast_to(np.asarray(inv_h, dtype=float), m.shape)
    l1, a1, b1 = _component(m, plx, eplx, M0, sig, inv_h)
    sig2 = np.sqrt(sig ** 2 + width ** 2)
    l2, a2, b2 = _component(m, plx, eplx, M0 + shift, sig2, inv_h)
    f = frac
    x1, x2 = np.log1p(-f) + l1, np.log(f) + l2
    ll = np.logaddexp(x1, x2)
    r1 = np.exp(x1 - ll)
    r2 = 1.0 - r1
    return (ll, r1 * a1 + r2 * a2, r1 * b1 + r2 * b2 * sig / sig2, -r1 * f + r2 * (1.0 - f),
            r2 * a2, r2 * b2 * width ** 2 / sig2)


def mixture_summary(M0, sig, frac, shift, width):
    """Median and half the 16-84% range of the two-component luminosity function,
    the Gaussian summary a calibration table stores (M_V, sig_M_V)."""
    from scipy.stats import norm
    M0, sig = np.atleast_1d(np.asarray(M0, float)), np.atleast_1d(np.asarray(sig, float))
    sig2 = np.sqrt(sig ** 2 + width ** 2)
    grid = M0[:, None] + np.linspace(-8, 8, 1601)[None, :] * sig2[:, None]
    frac = np.broadcast_to(np.asarray(frac, float), M0.shape)[:, None]
    cdf = (1 - frac) * norm.cdf((grid - M0[:, None]) / sig[:, None]) + \
        frac * norm.cdf((grid - M0[:, None] - shift) / sig2[:, None])
    q = np.array([[np.interp(p, c, g) for p in (0.16, 0.5, 0.84)] for c, g in zip(cdf, grid)])
    return q[:, 1], 0.5 * (q[:, 2] - q[:, 0])


def _hat_matrix(x, nodes):
    """Sparse (n, J) linear-interpolation weights of points x on sorted nodes."""
    from scipy.sparse import csr_matrix
    x = np.clip(np.asarray(x, dtype=float), nodes[0], nodes[-1])
    j = np.clip(np.searchsorted(nodes, x, side="right") - 1, 0, len(nodes) - 2)
    w = (x - nodes[j]) / (nodes[j + 1] - nodes[j])
    n = len(x)
    rows = np.repeat(np.arange(n), 2)
    cols = np.stack([j, j + 1], axis=1).ravel()
    vals = np.stack([1.0 - w, w], axis=1).ravel()
    return csr_matrix((vals, (rows, cols)), shape=(n, len(nodes)))


def _second_diff(n):
    d = np.zeros((max(n - 2, 0), n))
    for i in range(n - 2):
        d[i, i:i + 3] = (1.0, -2.0, 1.0)
    return d


@dataclass
class LuminosityFit:
    """Result of :func:`fit_luminosity`, at the nodes.

    ``M_V``/``sig_M_V`` summarise the fitted luminosity function by its median and
    half its 16-84% range; ``M_core``/``sig_core`` are the core Gaussian;
    ``frac``, ``shift``, ``width`` describe the second component.
    """

    nodes: np.ndarray
    M_V: np.ndarray
    e_M_V: np.ndarray
    sig_M_V: np.ndarray
    e_sig_M_V: np.ndarray
    M_core: np.ndarray
    sig_core: np.ndarray
    frac: np.ndarray
    shift: float
    width: float
    n_stars: np.ndarray
    converged: bool
    message: str
    neg_loglike: float
    theta: np.ndarray = None


def fit_luminosity(sptnum, m0, plx, e_plx, *, nodes=None, inv_h=0.0, extra_var=0.0, smooth_mv=0.15,
                   smooth_logsig=0.1, sig_node_step=5.0, init_mv=None, theta_init=None) -> LuminosityFit:
    """Maximum-likelihood M_V(type) and intrinsic scatter from parallaxes of a magnitude-limited sample.

    The likelihood of each star is that of its observed parallax given its
    extinction-corrected apparent magnitude ``m0`` (Ratnatunga & Casertano 1991):
    the true distance is integrated out under the space density and the
    luminosity function. Conditioning on the apparent magnitude makes any
    selection that depends only on apparent magnitude and direction (a
    magnitude limit: Malmquist bias) drop out of the likelihood; integrating
    over the true parallax with its Gaussian error (negative and zero parallaxes
    included) treats the Lutz-Kelker bias.

    The luminosity function at type x is a core N(M(x), sig(x)^2) plus a second
    component N(M(x) + shift, sig(x)^2 + width^2) with fraction ``frac``
    (misclassified stars, unresolved binaries, giant branch beside the clump);
    ``frac`` varies with type like sig, ``shift`` and ``width`` are fitted per class. The table values are the
    median of this function and half its 16-84% range, so that the distance
    intervals of :func:`specpar.estimate` keep their meaning.

    M(x) is piecewise linear on ``nodes`` (default one per subtype) and log sig on
    nodes every ``sig_node_step`` subtypes; both are smoothed by a penalty on
    their second differences (Whittaker 1923; Eilers & Marx 1996), i.e. a normal
    prior of width ``smooth_mv`` mag (``smooth_logsig``) per subtype^2 on the
    curvature. Uncertainties come from the inverse Hessian of the penalised
    negative log-likelihood.

    Parameters
    ----------
    sptnum, m0, plx, e_plx : array_like
        Numeric type, apparent V corrected for extinction, parallax and error (mas).
    inv_h : float or array_like
        |sin b| / scale height (1/pc) of an exponential disk; 0 for a uniform density.
    extra_var : float or array_like
        Known per-star variance (mag^2) added to the core's: the subtype and
        reddening uncertainty that :func:`specpar.estimate` adds itself, so that
        sig is the remainder.

    References
    ----------
    Ratnatunga, K. U. & Casertano, S. 1991, AJ 101, 1075 (from memory);
    Malmquist, K. G. 1922, Lund Medd. I 100; Lutz, T. E. & Kelker, D. H. 1973,
    PASP 85, 573; Whittaker, E. T. 1923, Proc. Edinburgh Math. Soc. 41, 63;
    Eilers, P. H. C. & Marx, B. D. 1996, Stat. Sci. 11, 89 (all from memory).
    """
    from scipy.optimize import minimize
    x = np.asarray(sptnum, dtype=float)
    m0, plx, e_plx = (np.asarray(a, dtype=float) for a in (m0, plx, e_plx))
    inv_h = np.broadcast_to(np.asarray(inv_h, dtype=float), x.shape).copy()
    extra_var = np.broadcast_to(np.asarray(extra_var, dtype=float), x.shape).copy()
    if nodes is None:
        nodes = np.arange(np.floor(x.min()), np.ceil(x.max()) + 1.0)
    nodes = np.asarray(nodes, dtype=float)
    if len(nodes) < 2:
        nodes = np.array([nodes[0] - 1.0, nodes[0] + 1.0])
    nsig = max(2, int(np.ceil((nodes[-1] - nodes[0]) / sig_node_step)) + 1)
    snodes = np.linspace(nodes[0], nodes[-1], nsig)
    WM, WS = _hat_matrix(x, nodes), _hat_matrix(x, snodes)
    D2m, D2s = _second_diff(len(nodes)), _second_diff(nsig)
    # penalty per subtype^2: second differences scale with the node spacing squared
    hm = np.diff(nodes).mean() ** 2 * smooth_mv
    hs = np.diff(snodes).mean() ** 2 * smooth_logsig
    Pm, Ps = D2m.T @ D2m / hm ** 2, D2s.T @ D2s / hs ** 2
    J, K = len(nodes), nsig
    if init_mv is None:
        good = plx > 5 * e_plx
        mtrig = m0 + 5 + 5 * np.log10(np.where(good, plx, 1.0) / 1000.0)
        init_mv = np.full(J, np.median(mtrig[good]) if good.any() else np.median(m0) - 5)
        for j, xn in enumerate(nodes):
            sel = good & (np.abs(x - xn) <= 1.5)
            if sel.sum() >= 3:
                init_mv[j] = np.median(mtrig[sel])
    # logit(frac) on the scatter nodes (normal prior per node, curvature penalty as for log sig);
    # global shift and log(width) of the second component, with weak normal priors (centre, sd)
    f_prior = (np.log(0.1 / 0.9), 1.5)
    gprior = np.array([[0.0, 2.0], [np.log(OUTLIER_WIDTH), 0.7]])
    theta0 = np.concatenate([np.asarray(init_mv, float), np.full(K, np.log(0.5)), np.full(K, f_prior[0]),
                             gprior[:, 0] + [0.3, 0.0]])
    if theta_init is not None and len(theta_init) == len(theta0):
        theta0 = np.asarray(theta_init, dtype=float).copy()

    def split(th):
        return th[:J], th[J:J + K], th[J + K:J + 2 * K], th[J + 2 * K:]

    def nll(th):
        mv, ls, lf, gp = split(th)
        M0 = WM @ mv
        sig = np.exp(WS @ ls)
        f = 1.0 / (1.0 + np.exp(-(WS @ lf)))
        sig_t = np.sqrt(sig ** 2 + extra_var)
        ll, dm, ds, dphi, dsh, dlw = star_loglike(m0, plx, e_plx, M0, sig_t, f, inv_h, gp[0], np.exp(gp[1]))
        zg = (gp - gprior[:, 0]) / gprior[:, 1]
        zf = (lf - f_prior[0]) / f_prior[1]
        val = (-ll.sum() + 0.5 * mv @ Pm @ mv + 0.5 * ls @ Ps @ ls + 0.5 * lf @ Ps @ lf
               + 0.5 * zg @ zg + 0.5 * zf @ zf)
        g = np.concatenate([-(WM.T @ dm) + Pm @ mv, -(WS.T @ (ds * sig ** 2 / sig_t)) + Ps @ ls,
                            -(WS.T @ dphi) + Ps @ lf + zf / f_prior[1],
                            -np.array([dsh.sum(), dlw.sum()]) + zg / gprior[:, 1]])
        return val, g

    bounds = ([(-12.0, 18.0)] * J + [(np.log(0.03), np.log(3.0))] * K + [(-6.0, 0.0)] * K
              + [(-4.0, 4.0), (np.log(0.2), np.log(4.0))])
    # stop when an iteration changes the penalised log-likelihood by < ~1e-8 relative (about
    # 1e-4 for 10^4 stars), far below what moves a table value
    opts = {"maxiter": 3000, "maxfun": 6000, "maxcor": 30, "ftol": 1e-8}
    res = minimize(nll, theta0, jac=True, method="L-BFGS-B", bounds=bounds, options=opts)
    if not res.success:  # a line search stopped by quadrature noise: restart once from there
        res = minimize(nll, res.x, jac=True, method="L-BFGS-B", bounds=bounds, options=opts)
    th = res.x
    # curvature: outer product of the per-star gradients (Berndt, Hall, Hall & Hausman 1974),
    # equal to the Hessian at the maximum for a correct model, plus the penalty and prior terms
    mv, ls, lf, gp = split(th)
    M0, sig = WM @ mv, np.exp(WS @ ls)
    f = 1.0 / (1.0 + np.exp(-(WS @ lf)))
    sig_t = np.sqrt(sig ** 2 + extra_var)
    _, dm, ds, dphi, dsh, dlw = star_loglike(m0, plx, e_plx, M0, sig_t, f, inv_h, gp[0], np.exp(gp[1]))
    from scipy.sparse import csr_matrix, diags, hstack
    G = hstack([diags(dm) @ WM, diags(ds * sig ** 2 / sig_t) @ WS, diags(dphi) @ WS,
                csr_matrix(np.stack([dsh, dlw], axis=1))]).tocsr()
    H = (G.T @ G).toarray()
    n = len(th)
    H[:J, :J] += Pm
    H[J:J + K, J:J + K] += Ps
    H[J + K:J + 2 * K, J + K:J + 2 * K] += Ps + np.eye(K) / f_prior[1] ** 2
    H[n - 2:, n - 2:] += np.diag(1.0 / gprior[:, 1] ** 2)
    try:
        cov = np.linalg.inv(H)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(H)
    mv, ls, lf, gp = split(th)
    shift, width = gp[0], np.exp(gp[1])
    Wn = _hat_matrix(nodes, snodes).toarray()
    sig_nodes = np.exp(Wn @ ls)
    frac = 1.0 / (1.0 + np.exp(-(Wn @ lf)))
    cs = cov[J:J + K, J:J + K]
    e_ls = np.sqrt(np.clip(np.einsum("ij,jk,ik->i", Wn, cs, Wn), 0, None))
    med, sig_eff = mixture_summary(mv, sig_nodes, frac, shift, width)
    n_stars = np.array([int(np.sum(np.abs(x - xn) <= 0.5)) for xn in nodes])
    # uncertainties of the summaries: those of the core node values (the mixture
    # parameters are shared by all types and much better determined)
    return LuminosityFit(nodes, med, np.sqrt(np.clip(np.diag(cov)[:J], 0, None)), sig_eff,
                         sig_eff * e_ls, mv, sig_nodes, frac, float(shift), float(width), n_stars,
                         bool(res.success), str(res.message), float(res.fun), th)


# ---------------------------------------------------------------------------
# calibrate(): the user-facing fit
# ---------------------------------------------------------------------------
#: Low-reddening selection for intrinsic colours: parallax above this (mas), i.e.
#: within 100 pc, inside the Local Bubble where E(B-V) is ~0.01 (common practice).
LOW_RED_PLX = 10.0


def _fit_colour(x, y, nodes, curvature=0.03, noise=0.03, clip=3.0):
    """Penalised least squares of a colour on piecewise-linear nodes, with sigma
    clipping; returns values, errors and residual scatter."""
    W = _hat_matrix(x, nodes).toarray()
    D = _second_diff(len(nodes))
    P = D.T @ D / curvature ** 2
    keep = np.isfinite(y)
    for _ in range(3):
        A = W[keep].T @ W[keep] / noise ** 2 + P + 1e-9 * np.eye(len(nodes))
        c = np.linalg.solve(A, W[keep].T @ y[keep] / noise ** 2)
        r = y - W @ c
        rms = max(np.sqrt(np.nanmean(r[keep] ** 2)) if keep.any() else noise, 0.005)
        new = np.isfinite(y) & (np.abs(r) <= clip * rms)
        if np.array_equal(new, keep):
            break
        keep = new
    A = W[keep].T @ W[keep] / rms ** 2 + P + 1e-9 * np.eye(len(nodes))
    return c, np.sqrt(np.diag(np.linalg.inv(A))), rms, keep


def _type_name(x):
    cls = TEMPERATURE_CLASSES[int(x // 10)]
    sub = x - 10 * (x // 10)
    return f"{cls}{sub:g}"


@dataclass
class CalibrationFit:
    """Result of :func:`calibrate`.

    tables : dict
        Luminosity class -> calibration table (astropy Table in the shipped
        format, with uncertainty and star-count columns and provenance).
    stars : astropy.table.Table
        One row per input row, in order: ``lclass``, ``sptnum``, ``ebv``,
        ``av``, ``used`` (bool) and ``reason`` (why a row was not used).
    """

    tables: dict
    stars: Table


def calibrate(table, *, classes=None, columns=None, rv=3.1, scale_height_pc="auto", v_limit=None,
              min_stars=30, min_per_node=8, smooth_mv=0.15, smooth_logsig=0.1, sample="",
              base_calibrations=(), n_jobs=2) -> CalibrationFit:
    """Fit calibration tables (M_V, intrinsic scatter, B-V, U-B per type and class) to parallaxes.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        One row per star: ``sptype`` (MK type with luminosity class), ``V``,
        ``B-V``, ``plx`` and ``e_plx`` (mas; negative and zero parallaxes are
        data and are used); optional ``U-B`` and ``glat`` (galactic latitude,
        deg, for the disk density). The sample's selection must depend only on
        apparent magnitude and direction (not on parallax or proper motion).
    classes : sequence of str, optional
        Luminosity classes to fit (default: every class with ``min_stars``).
    columns : dict, optional
        Our column names to yours, e.g. ``{"V": "Vmag"}``.
    rv : float
        A_V = rv * E(B-V) for the calibrators (default 3.1).
    scale_height_pc : "auto", float or None
        Exponential-disk scale height of the space density: "auto" uses
        :func:`default_scale_height` by type and class, a number applies to all,
        None means a uniform density. Without ``glat`` the density is uniform.
    v_limit : float, optional
        Drop stars fainter than this V (stated in the output).
    min_stars : int
        Fewest stars for a class to be fitted.
    min_per_node : int
        A type is tabulated when at least this many stars lie within 1.5 subtypes.
    smooth_mv, smooth_logsig : float
        Widths of the curvature priors (see :func:`fit_luminosity`).
    sample : str
        Description of the sample, written into the tables' provenance.
    base_calibrations : sequence of path
        Tables that supply intrinsic colours where too few nearby stars fit
        them (default: the shipped tables).
    n_jobs : int
        Classes fitted in parallel threads (default 2). The result does not depend on it.

    Returns
    -------
    CalibrationFit

    Notes
    -----
    Reddening of the calibrators: the intrinsic B-V (and U-B) per type are fitted
    to the stars within 100 pc (parallax > 10 mas, S/N > 5), where reddening is
    negligible; every star's E(B-V) is its B-V minus that intrinsic colour,
    clipped at zero, and A_V = rv E(B-V).

    References
    ----------
    Ratnatunga & Casertano 1991, AJ 101, 1075 (likelihood of the parallax given
    the apparent magnitude; from memory). See :func:`fit_luminosity`.
    """
    from specpar.calibration import CalibrationSet
    frame = _input_frame(table, columns)
    n = len(frame)
    parsed = parse_sptypes(frame["sptype"].to_numpy(object))
    labels = group_labels(frame["sptype"].to_numpy(object))
    lclass = labels["lclass"].to_numpy(object)
    x = parsed["sptnum"].to_numpy(float)
    e_x = parsed["e_sptnum"].to_numpy(float)
    V = _num_col(frame, "V")
    bv = _num_col(frame, "B-V")
    ub = _num_col(frame, "U-B")
    plx, eplx = _num_col(frame, "plx"), _num_col(frame, "e_plx")
    glat = _num_col(frame, "glat")
    reason = np.full(n, "", dtype=object)

    def why(mask, text):
        reason[mask & (reason == "")] = text

    why(~np.isfinite(x), "spectral type not readable or not calibratable")
    why(lclass == "", "no luminosity class in the spectral type")
    why(np.char.find(lclass.astype(str), "-") >= 0, "intermediate luminosity class (fitted only as single classes)")
    why(e_x > 1.0, "spectral type uncertain by more than one subtype")
    why(~np.isfinite(V), "no V magnitude")
    why(~np.isfinite(bv), "no B-V colour")
    why(~np.isfinite(plx) | ~(eplx > 0), "no parallax or no positive parallax error")
    if v_limit is not None:
        why(V > v_limit, f"fainter than v_limit = {v_limit:g}")
    want = tuple(classes) if classes else _FIT_CLASSES
    bad = [c for c in want if c not in _FIT_CLASSES]
    if bad:
        raise ValueError(f"classes {bad} are not luminosity classes with calibration tables; "
                         f"choose from {', '.join(_FIT_CLASSES)}")
    why(~np.isin(lclass, list(want)), "luminosity class not requested")
    base = CalibrationSet(tuple(base_calibrations or ()))
    ebv = np.full(n, np.nan)
    tables = {}
    def one_class(lc):
        sel = (reason == "") & (lclass == lc)
        if sel.sum() < min_stars:
            why(sel, f"class {lc} has {int(sel.sum())} usable stars, fewer than min_stars = {min_stars}")
            return
        xs = x[sel]
        nodes = np.arange(np.floor(xs.min()), np.ceil(xs.max()) + 1.0)
        if len(nodes) < 2:
            nodes = np.array([nodes[0], nodes[0] + 1.0])
        near = np.array([np.sum(np.abs(xs - xn) <= 1.5) for xn in nodes])
        support = near >= min_per_node
        if support.sum() < 2:
            why(sel, f"class {lc}: fewer than two types with min_per_node = {min_per_node} stars "
                     "within 1.5 subtypes")
            return
        # intrinsic colours from the nearby (unreddened) stars; the base table where they are too few
        low = sel & (plx > LOW_RED_PLX) & (plx > 5 * eplx)
        nlow = np.array([np.sum(np.abs(x[low] - xn) <= 1.5) for xn in nodes])
        basecal = base.by_class.get(lc)
        colours, e_colours, col_src, rms_c = {}, {}, {}, {}
        for cname, y in (("B-V", bv), ("U-B", ub)):
            yb = basecal.evaluate(nodes).colours[:, _colour_index(cname)] if basecal else np.full(len(nodes), np.nan)
            ok_low = low & np.isfinite(y)
            nl = np.array([np.sum(np.abs(x[ok_low] - xn) <= 1.5) for xn in nodes])
            fitted = nl >= min_per_node
            if fitted.any():
                c, ec, rms, _ = _fit_colour(x[ok_low], y[ok_low], nodes)
            else:
                c, ec, rms = np.full(len(nodes), np.nan), np.full(len(nodes), np.nan), np.nan
            colours[cname] = np.where(fitted, c, yb)
            e_colours[cname] = np.where(fitted, ec, np.nan)
            col_src[cname] = fitted
            rms_c[cname] = rms
        bv0 = np.interp(xs, nodes, colours["B-V"]) if np.isfinite(colours["B-V"]).all() else \
            np.interp(xs, nodes[np.isfinite(colours["B-V"])], colours["B-V"][np.isfinite(colours["B-V"])])
        e_sel = np.clip(bv[sel] - bv0, 0.0, None)
        ebv[sel] = e_sel
        m0 = V[sel] - rv * e_sel
        if scale_height_pc is None or not np.isfinite(glat[sel]).all():
            inv_h, density = 0.0, "uniform space density"
        elif scale_height_pc == "auto":
            inv_h = np.abs(np.sin(np.radians(glat[sel]))) / default_scale_height(xs, np.full(len(xs), lc, dtype=object))
            density = "exponential disk, scale heights by type (default_scale_height; from memory)"
        else:
            inv_h = np.abs(np.sin(np.radians(glat[sel]))) / float(scale_height_pc)
            density = f"exponential disk, scale height {float(scale_height_pc):g} pc"
        fit = fit_luminosity(xs, m0, plx[sel], eplx[sel], nodes=nodes, inv_h=inv_h,
                             smooth_mv=smooth_mv, smooth_logsig=smooth_logsig)
        # second pass: the part of the spread that specpar.estimate adds itself (subtype,
        # reddening and photometric uncertainty, through its own error model) is given to the
        # fit as known per-star variance, so that sig_M_V is the remainder
        info = dict(n_fit=int(sel.sum()), rv=rv, density=density, sample=sample, v_limit=v_limit)
        trial = _calibration_table(lc, fit, support, near, colours, e_colours, col_src, nlow, rms_c,
                                   basecal, info)
        extra = _estimate_variance(trial, frame.loc[sel], rv)
        fit = fit_luminosity(xs, m0, plx[sel], eplx[sel], nodes=nodes, inv_h=inv_h, extra_var=extra,
                             smooth_mv=smooth_mv, smooth_logsig=smooth_logsig, theta_init=fit.theta)
        tables[lc] = _calibration_table(lc, fit, support, near, colours, e_colours, col_src, nlow, rms_c,
                                        basecal, dict(n_fit=int(sel.sum()), rv=rv, density=density,
                                                      sample=sample, v_limit=v_limit))

    # classes are independent: fit them in threads (numpy releases the GIL in the heavy loops)
    order = sorted(want, key=lambda c: -int(np.sum((reason == "") & (lclass == c))))
    if n_jobs > 1 and len(order) > 1:
        from concurrent.futures import ThreadPoolExecutor
        with ThreadPoolExecutor(max_workers=n_jobs) as pool:
            list(pool.map(one_class, order))
    else:
        for lc in order:
            one_class(lc)
    tables = {lc: tables[lc] for lc in want if lc in tables}
    stars = Table({"lclass": lclass.astype(str), "sptnum": x, "ebv": ebv, "av": rv * ebv,
                   "used": reason == "", "reason": reason.astype(str)})
    return CalibrationFit(tables, stars)


def _estimate_variance(trial: Table, rows: pd.DataFrame, rv) -> np.ndarray:
    """Variance of the distance modulus that :func:`specpar.estimate` gives these stars
    when the calibration has (almost) no intrinsic M_V scatter."""
    import os
    import tempfile
    from specpar.estimate import estimate
    if len(trial) < 2:
        return np.zeros(len(rows))
    t = trial.copy()
    t["sig_M_V"] = 0.001
    inp = pd.DataFrame({"sptype": rows["sptype"].to_numpy(object)})
    for c, e in UBV_ERRORS.items():
        if c in rows.columns:
            inp[c] = pd.to_numeric(rows[c], errors="coerce").to_numpy(float)
            ec = "e_" + c
            inp[ec] = pd.to_numeric(rows[ec], errors="coerce").to_numpy(float) if ec in rows.columns else e
    fd, path = tempfile.mkstemp(suffix=".ecsv")
    os.close(fd)
    try:
        t.write(path, format="ascii.ecsv", overwrite=True)
        out = estimate(inp, calibrations=(path,), rv=rv)
    finally:
        os.unlink(path)
    v = pd.to_numeric(out["e_dm"], errors="coerce").to_numpy(float) ** 2
    return np.where(np.isfinite(v), v, 0.0)


def _colour_index(name):
    from specpar.bands import CALIBRATION_COLOURS
    return CALIBRATION_COLOURS.index(name)


def _num_col(frame, name):
    if name not in frame.columns:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[name], errors="coerce").to_numpy(float)


def _input_frame(table, columns):
    if isinstance(table, Table):
        frame = _masked_to_frame(table)
    elif isinstance(table, pd.DataFrame):
        frame = table
    else:
        raise TypeError(f"calibrate takes an astropy Table or a pandas DataFrame, not {type(table).__name__}")
    rename = {theirs: ours for ours, theirs in (columns or {}).items()}
    missing = [t for t in rename if t not in frame.columns]
    if missing:
        raise ValueError(f"column(s) {', '.join(missing)} named in columns= are not in the input; "
                         f"it has {', '.join(map(str, frame.columns))}")
    frame = frame.rename(columns=rename)
    need = [c for c in ("sptype", "V", "B-V", "plx", "e_plx") if c not in frame.columns]
    if need:
        raise ValueError(f"calibrate needs columns sptype, V, B-V, plx, e_plx (mas); missing "
                         f"{', '.join(need)}. Name yours with columns={{'V': 'Vmag', ...}} "
                         f"(CLI: --col V=Vmag)")
    return frame.reset_index(drop=True)


def _masked_to_frame(t: Table) -> pd.DataFrame:
    data = {}
    for name in t.colnames:
        col = t[name]
        if col.ndim > 1:
            continue
        if col.dtype.kind in "fiu":
            data[name] = np.ma.filled(np.ma.asarray(col, dtype=float), np.nan)
        else:
            data[name] = np.ma.filled(np.ma.asarray(col).astype(object), None) if np.ma.isMaskedArray(col) \
                else np.asarray(col, dtype=object)
    return pd.DataFrame(data)


def _calibration_table(lc, fit, support, near, colours, e_colours, col_src, nlow, rms_c, basecal, info):
    from specpar.bands import CALIBRATION_COLOURS
    from specpar.sptype import CLASS_ORDER  # noqa: F401
    keep = np.flatnonzero(support)
    rows = slice(keep[0], keep[-1] + 1) if keep.size else slice(0, 0)
    idx = np.arange(len(fit.nodes))[rows]
    t = Table()
    t["sptype"] = [_type_name(v) for v in fit.nodes[idx]]
    t["sptnum"] = fit.nodes[idx]
    t["M_V"] = np.round(fit.M_V[idx], 3)
    t["sig_M_V"] = np.round(fit.sig_M_V[idx], 3)
    base_cols = basecal.evaluate(fit.nodes[idx]).colours if basecal is not None else None
    for j, cname in enumerate(CALIBRATION_COLOURS):
        if cname in colours:
            vals = colours[cname][idx]
        elif base_cols is not None:
            vals = base_cols[:, j]
        else:
            vals = np.full(len(idx), np.nan)
        t[cname] = np.ma.masked_invalid(np.round(vals, 3))
    t["M_core"] = np.round(fit.M_core[idx], 3)
    t["sig_core"] = np.round(fit.sig_core[idx], 3)
    t["frac2"] = np.round(np.broadcast_to(fit.frac, fit.nodes.shape)[idx], 3)
    t["e_M_V"] = np.round(fit.e_M_V[idx], 3)
    t["e_sig_M_V"] = np.round(fit.e_sig_M_V[idx], 3)
    t["e_B-V"] = np.ma.masked_invalid(np.round(e_colours["B-V"][idx], 3))
    t["e_U-B"] = np.ma.masked_invalid(np.round(e_colours["U-B"][idx], 3))
    t["n_stars"] = fit.n_stars[idx]
    t["n_near"] = near[idx]
    t["n_colour"] = nlow[idx]
    src = []
    basename = basecal.name if basecal is not None else "none"
    for k, i in enumerate(idx):
        parts = [f"M_V, sig_M_V: fitted here to parallaxes (maximum likelihood of the parallax given V, "
                 f"Ratnatunga & Casertano 1991; {near[i]} stars within 1.5 subtypes)"]
        fitted_c = [c for c in ("B-V", "U-B") if col_src[c][i]]
        if fitted_c:
            parts.append(f"{', '.join(fitted_c)}: fitted here to {nlow[i]} stars within 100 pc")
        other = [c for c in ("B-V", "U-B") if not col_src[c][i]]
        parts.append(f"{', '.join(other + ['other colours']) if other else 'other colours'}: table {basename}")
        if info.get("sample"):
            parts.append(f"sample: {info['sample']}")
        src.append("; ".join(parts))
    t["source"] = src
    units = {c: "mag" for c in ("M_V", "sig_M_V", "M_core", "sig_core", "e_M_V", "e_sig_M_V", "e_B-V", "e_U-B") + CALIBRATION_COLOURS}
    for c, u in units.items():
        if c in t.colnames:
            t[c].unit = u
    rms = [v for v in rms_c.values() if np.isfinite(v)]
    t.meta.update({
        "name": f"fitted_{lc}",
        "luminosity_class": lc,
        "title": f"class {lc}: M_V and intrinsic scatter fitted to trigonometric parallaxes",
        "references": [
            "Ratnatunga, K. U. & Casertano, S. 1991, AJ 101, 1075 (likelihood of the parallax given "
            "the apparent magnitude; from memory)",
            "Whittaker 1923, Proc. Edinburgh Math. Soc. 41, 63; Eilers & Marx 1996, Stat. Sci. 11, 89 "
            "(second-difference smoothing penalty; from memory)",
        ] + ([f"intrinsic colours outside the fitted types: {basecal.describe()}"] if basecal is not None else []),
        "colour_scatter": float(round(max(rms), 3)) if rms else 0.03,
        "colour_scatter_source": "rms residual of the intrinsic-colour fit to stars within 100 pc",
        "sig_M_V_source": "fitted intrinsic scatter of the Gaussian luminosity function (maximum likelihood)",
        "notes": (f"Fitted by specpar.calibrate to {info['n_fit']} stars ({info['sample'] or 'user sample'}); "
                  f"{info['density']}; A_V = {info['rv']:g} E(B-V) with E(B-V) = B-V minus the intrinsic "
                  f"colour, clipped at 0; luminosity function: core plus a second component with fraction "
                  f"{fit.frac.min():.3f}-{fit.frac.max():.3f} (by type), offset {fit.shift:+.2f} mag, extra width {fit.width:.2f} mag; M_V and "
                  f"sig_M_V are its median and half its 16-84% range; "
                  + (f"V <= {info['v_limit']:g}; " if info.get("v_limit") is not None else "")
                  + f"optimizer: {'converged' if fit.converged else 'NOT converged: ' + fit.message}. "
                  "Rows are types with at least the minimum number of stars within 1.5 subtypes "
                  "(n_near); n_stars counts stars within 0.5 subtype. M_core, sig_core: the core "
                  "Gaussian; frac2: fraction in the second component (offset and extra width above)."),
    })
    return t


def write_calibrations(fit: CalibrationFit, outdir, prefix="calibration", overwrite=False) -> list:
    """Write each fitted class to ``<outdir>/<prefix>_<class>.ecsv`` (atomically); returns the paths."""
    import os
    from pathlib import Path
    out = Path(outdir)
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for lc, t in fit.tables.items():
        p = out / f"{prefix}_{lc}.ecsv"
        if p.exists() and not overwrite:
            raise ValueError(f"{p} exists; use overwrite=True (CLI: --overwrite) or another folder")
        tmp = p.with_name(p.name + ".tmp")
        t.write(tmp, format="ascii.ecsv", overwrite=True)
        os.replace(tmp, p)
        paths.append(p)
    return paths
