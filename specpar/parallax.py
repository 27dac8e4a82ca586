"""Trigonometric parallaxes against spectroscopic ones.

When the input of :func:`specpar.estimate` has a ``plx`` column (and ``e_plx``),
in milliarcseconds, every row also gets:

* a tension test in parallax space. The distance modulus is Gaussian,
  ``N(dm, e_dm)``, so the photometric parallax ``10**(2 - dm/5)`` mas is
  log-normal (``plx_phot_mas``, ``e_plx_phot_mas`` from :func:`specpar.estimate`
  are its median and first-order spread). ``plx_z`` places the observed
  parallax in the predicted distribution (that log-normal convolved with the
  Gaussian parallax error), in unit-normal sigma: it is
  ``(plx - plx_phot) / sqrt(e_plx**2 + e_plx_phot**2)`` when the photometric
  parallax is nearly Gaussian, without that formula's skew when it is not
  (see :func:`tension_z`). ``|plx_z|`` above the threshold sets
  :attr:`~specpar.flags.Flag.PLX_TENSION`;
* for rows in tension, a diagnosis (``plx_diag``, codes in :data:`DIAG_CODES`)
  and a sentence with the numbers in the row's note: the luminosity class whose
  calibration fits the parallax, the light an unresolved companion would have
  to add, or reasons to distrust the parallax itself;
* distance posteriors with an exponentially decreasing space density prior
  (Bailer-Jones 2015): parallax alone, and parallax combined with the
  photometric distance modulus; median and 16th/84th percentiles. The
  combined distance is withheld (flag PLX_COMBINED_WITHHELD) where the two
  disagree beyond the threshold: a product of two incompatible likelihoods is
  narrow but describes neither measurement;
* at low parallax signal-to-noise (``|plx| <= threshold * e_plx``) no compound
  diagnosis: such a parallax cannot tell the explanations apart, and the note
  says so (code ``plx_uninformative``).

Zero and negative parallaxes are measurements like any other: they enter the
likelihoods unchanged and are never inverted.

References
----------
Bailer-Jones, C. A. L. 2015, PASP 127, 994, "Estimating distances from
parallaxes" (exponentially decreasing space density prior, its posterior and
the cubic equation for the mode; from memory).
Lutz, T. E. & Kelker, D. H. 1973, PASP 85, 573 (bias of 1/parallax distances;
the correction becomes unreliable beyond a fractional error of about 0.175,
from memory).
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import log_ndtr, logsumexp, ndtr, ndtri, ndtri_exp

from .flags import Flag
from specpar.io.atomic import atomic_write

__all__ = ["COLUMNS", "DIAG_CODES", "crosscheck", "distance_posterior", "DistanceSummary",
           "tension_z", "metadata", "plot_parallax", "register_cli"]

#: Fractional parallax error above which 1/plx is a biased distance (Lutz & Kelker 1973,
#: from memory: their correction is unreliable beyond sigma/plx ~ 0.175).
LOW_SNR_FRACTION = 0.175
#: Brightening of an unresolved equal-mass (equal-light) pair: 2.5 log10(2) mag (Pogson scale).
EQUAL_PAIR_MAG = 2.5 * np.log10(2.0)
#: |plx| above this (mas) is impossible: no star is closer than ~1.3 pc (common practice).
PLX_LIMIT_MAS = 1000.0
#: Median e_plx (mas) below which a column looks like arcsec: per-star parallax errors of a
#: few micro-arcseconds are beyond current catalogues (common practice; a heuristic).
ARCSEC_ERROR_MAS = 0.003

COLUMNS = {
    "plx_corr_mas": ("mas", "parallax used: input plx minus the zero-point offset"),
    "e_plx_corr_mas": ("mas", "parallax error used: input e_plx times the error scale"),
    "plx_snr": ("", "plx_corr_mas / e_plx_corr_mas (below 1/0.175 = 5.7, 1/plx is a biased distance)"),
    "plx_z": ("", "tension in unit-normal sigma: Phi^-1 of the probability of a parallax below plx_corr_mas "
                  "given N(dm, e_dm) and e_plx_corr_mas; about (plx_corr_mas - plx_phot_mas) / "
                  "sqrt(e_plx_corr_mas**2 + e_plx_phot_mas**2) when e_dm is small"),
    "plx_diag": ("", "why parallax and spectral type disagree when |plx_z| is above the threshold: "
                     "'+'-joined codes, see metadata 'parallax_diagnosis_codes'"),
    "dist_plx_pc": ("pc", "distance from the parallax alone with the space-density prior, median"),
    "dist_plx_lo_pc": ("pc", "distance from the parallax alone, 16th percentile"),
    "dist_plx_hi_pc": ("pc", "distance from the parallax alone, 84th percentile"),
    "dist_comb_pc": ("pc", "distance from parallax, distance modulus and prior together, median; "
                           "withheld (NaN, flag PLX_COMBINED_WITHHELD) where |plx_z| is above the threshold"),
    "dist_comb_lo_pc": ("pc", "combined distance, 16th percentile"),
    "dist_comb_hi_pc": ("pc", "combined distance, 84th percentile"),
}

#: Machine codes of ``plx_diag`` (several may be joined with '+').
DIAG_CODES = {
    "class:<X>": "the calibration of luminosity class X puts the star within the threshold of its parallax",
    "companion": "an unresolved companion adding at most an equal-mass pair's 0.75 mag would reconcile it",
    "plx_suspect": "the parallax itself is doubtful: negative beyond the threshold, fractional error "
                   "above 0.175, or apparently in arcsec",
    "plx_uninformative": "the parallax is consistent with zero within the threshold (|plx| <= threshold x "
                         "e_plx): it says only that the star is farther than its type predicts and cannot "
                         "tell a brighter class, a companion and a parallax error apart; given alone",
    "unexplained": "none of the above accounts for the difference",
}

_LN10_5 = np.log(10.0) / 5.0
_CHUNK = 8192  # stars per batch in the vectorised integrals
_QUANTILES = (0.16, 0.5, 0.84)


# ----------------------------------------------------------------------------- tension

def _plx_from_dm(dm):
    """Parallax in mas at distance modulus ``dm`` (Pogson 1856: dm = 5 log10(d / 10 pc))."""
    return 10.0 ** (2.0 - np.asarray(dm, float) / 5.0)


_NODES, _WEIGHTS = np.polynomial.hermite_e.hermegauss(64)
_WEIGHTS_N = _WEIGHTS / np.sqrt(2.0 * np.pi)
_LOG_WEIGHTS = np.log(_WEIGHTS_N)


def tension_z(plx, e_plx, dm, e_dm):
    """Significance of the difference between a parallax and a distance modulus.

    The parallax expected from the photometry is ``10**(2 - dm'/5) + eps`` mas with
    ``dm' ~ N(dm, e_dm)`` and ``eps ~ N(0, e_plx)``; ``F`` is the probability that it
    falls below the observed ``plx`` and ``z = Phi^-1(F)``, so that ``z`` is a unit
    normal variable when both measurements are right, whatever the skewness of the
    log-normal photometric parallax. When ``e_dm`` is small, ``z`` tends to
    ``(plx - plx_phot) / sqrt(e_plx**2 + e_plx_phot**2)``; when ``e_plx`` is small, to
    ``(dm - (10 - 5 log10(plx))) / e_dm``, the difference of distance moduli.

    ``F`` is a Gauss-Hermite sum (64 nodes) over whichever of the two variables has
    the smaller spread in parallax, computed in logarithms so that large tensions
    keep their sign and size.

    Parameters
    ----------
    plx, e_plx : array_like
        Parallax (any sign) and its error (> 0), mas.
    dm, e_dm : array_like
        Distance modulus and its uncertainty (> 0), mag.

    Returns
    -------
    ndarray
        z; NaN where an input is missing.

    References
    ----------
    Probability integral transform and Gauss-Hermite quadrature (common practice).
    """
    arrays = np.broadcast_arrays(*(np.asarray(a, float) for a in (plx, e_plx, dm, e_dm)))
    flat = [a.ravel() for a in arrays]
    z = np.empty(flat[0].size)
    for s in range(0, z.size, _CHUNK):  # bounded memory: (chunk, nodes) at a time
        z[s:s + _CHUNK] = _tension_chunk(*(a[s:s + _CHUNK, None] for a in flat))
    return z.reshape(arrays[0].shape)


def _tension_chunk(plx, e_plx, dm, e_dm):
    spread = _plx_from_dm(dm) * _LN10_5 * e_dm  # first-order spread of the photometric parallax
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        over_dm = (plx - _plx_from_dm(dm + e_dm * _NODES)) / e_plx
        y = plx - e_plx * _NODES  # over the parallax error: P(dm_phot > 10 - 5 log10 y)
        over_plx = np.where(y > 0, (dm - 10.0 + 5.0 * np.log10(np.abs(y))) / e_dm, -np.inf)
        # nodes over whichever variable is narrower in parallax, so that the other is smooth
        arg = np.where(e_plx > spread, over_dm, over_plx)
        # row-wise sums, not a matrix product: BLAS sums in an order that depends on the
        # number of rows, and a row's result must not depend on its block (streaming)
        f, q = (ndtr(arg) * _WEIGHTS_N).sum(axis=-1), (ndtr(-arg) * _WEIGHTS_N).sum(axis=-1)
        z = np.where(f < q, ndtri(f), -ndtri(q))
        deep = ~np.isfinite(z)  # beyond ~37 sigma: logarithms, nodes over dm (never all -inf)
        if deep.any():
            a = arg[deep]
            a = np.where(np.isneginf(a).all(axis=-1, keepdims=True), over_dm[deep], a)
            log_f = logsumexp(_LOG_WEIGHTS + log_ndtr(a), axis=-1)
            log_q = logsumexp(_LOG_WEIGHTS + log_ndtr(-a), axis=-1)
            z[deep] = np.where(log_f < log_q, ndtri_exp(log_f), -ndtri_exp(log_q))
    ok = np.isfinite(plx[:, 0]) & (e_plx[:, 0] > 0) & np.isfinite(dm[:, 0]) & (e_dm[:, 0] > 0)
    return np.where(ok, z, np.nan)


# ----------------------------------------------------------------------------- posteriors

@dataclass
class DistanceSummary:
    """Percentiles and mode of distance posteriors (arrays over stars, pc; NaN where not computed)."""

    median: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    mode: np.ndarray


def _log_posterior(u, plx, e_plx, dm, e_dm, length):
    """Log posterior density per unit ln(r), up to a constant; u = ln(r / pc) with shape (n, G).

    Exponentially decreasing space density prior r**2 exp(-r/L) (Bailer-Jones 2015), times
    r for the change of variable to ln r, times a Gaussian likelihood in parallax and,
    where ``dm`` is given, a Gaussian likelihood in distance modulus.
    """
    with np.errstate(over="ignore"):  # far outside the posterior: -inf is the right answer
        lp = 3.0 * u - np.exp(u) / length - 0.5 * ((plx - 1000.0 * np.exp(-u)) / e_plx) ** 2
    if dm is not None:
        lp -= 0.5 * ((u / _LN10_5 - 5.0 - dm) / e_dm) ** 2
    return lp


def _start_window(plx, e_plx, dm, e_dm, length):
    """Window in ln r from Gaussian approximations of prior, parallax and photometry (n,)."""
    # prior r^3 exp(-r/L) in ln r: peak ln(3L), curvature -3
    prec = np.full(plx.shape, 3.0)
    wsum = 3.0 * np.log(3.0 * length)
    snr = plx / e_plx
    informative = snr > 2.0
    p_plx = np.where(informative, snr ** 2, 0.0)
    prec = prec + p_plx
    wsum = wsum + p_plx * np.log(1000.0 / np.where(informative, plx, 1.0))
    if dm is not None:
        p_dm = 1.0 / (_LN10_5 * e_dm) ** 2
        prec = prec + p_dm
        wsum = wsum + p_dm * (dm + 5.0) * _LN10_5
    centre, half = wsum / prec, 10.0 / np.sqrt(prec)
    return centre - half, centre + half


def _fit_grid(plx, e_plx, dm, e_dm, length, n_grid, depth=40.0, max_iter=60):
    """Adapt a window in ln r per star until the posterior above exp(-depth) of its peak
    fills at least half of an ``n_grid``-point grid without touching its ends.

    Returns the grids u (n, G) and log posteriors (n, G).
    """
    n = plx.size
    lo, hi = _start_window(plx, e_plx, dm, e_dm, length)
    t = np.linspace(0.0, 1.0, n_grid)
    u_out = np.empty((n, n_grid))
    lp_out = np.empty((n, n_grid))
    todo = np.arange(n)
    col = lambda a: None if a is None else a[todo, None]  # noqa: E731
    for _ in range(max_iter):
        u = lo[todo, None] + (hi - lo)[todo, None] * t
        lp = _log_posterior(u, col(plx), col(e_plx), col(dm), col(e_dm), col(length))
        above = lp > lp.max(axis=1, keepdims=True) - depth
        first = np.argmax(above, axis=1)
        last = n_grid - 1 - np.argmax(above[:, ::-1], axis=1)
        width = hi[todo] - lo[todo]
        at_lo, at_hi = first == 0, last == n_grid - 1
        done = ~at_lo & ~at_hi & (last - first >= n_grid // 2)
        u_out[todo[done]], lp_out[todo[done]] = u[done], lp[done]
        rows = np.arange(todo.size)
        lo[todo] = np.where(at_lo, lo[todo] - 2.0 * width, u[rows, np.maximum(first - 1, 0)])
        hi[todo] = np.where(at_hi, hi[todo] + 2.0 * width, u[rows, np.minimum(last + 1, n_grid - 1)])
        todo = todo[~done]
        if todo.size == 0:
            break
    else:  # not expected; keep the last grid rather than fail
        u_out[todo], lp_out[todo] = u[~done], lp[~done]
    return u_out, lp_out


def _summarise(u, lp):
    """Median, 16th and 84th percentiles in r: the trapezoid rule's CDF on the grid, inverted
    exactly inside the step where it crosses each level (density linear in ln r there)."""
    w = np.exp(lp - lp.max(axis=1, keepdims=True))
    h = u[:, 1] - u[:, 0]
    w /= np.sum(0.5 * (w[:, 1:] + w[:, :-1]), axis=1, keepdims=True) * h[:, None]
    cdf = np.concatenate([np.zeros((u.shape[0], 1)),
                          np.cumsum(0.5 * (w[:, 1:] + w[:, :-1]), axis=1) * h[:, None]], axis=1)
    out = []
    for q in _QUANTILES:
        j = np.clip((cdf < q).sum(axis=1), 1, u.shape[1] - 1)[:, None]
        c0, u0, w0, w1 = (np.take_along_axis(a, j + k, 1)[:, 0] for a, k in
                          ((cdf, -1), (u, -1), (w, -1), (w, 0)))
        # invert the trapezoid's own CDF inside the step (density linear in u): a x^2 + w0 x = q - c0
        rest, a = np.maximum(q - c0, 0.0), (w1 - w0) / (2.0 * h)
        x = 2.0 * rest / (w0 + np.sqrt(np.maximum(w0 ** 2 + 4.0 * a * rest, 0.0)))
        out.append(np.exp(u0 + np.clip(np.nan_to_num(x), 0.0, h)))
    return out[1], out[0], out[2]


def _mode(u, lp, args):
    """Mode of the density in r (density in ln r divided by r): best grid node, then Newton
    steps on finite differences of the log density (all stars at once)."""
    f = lp - u
    x = np.take_along_axis(u, np.argmax(f, axis=1)[:, None], 1)
    step = 0.05 * (u[:, 1:2] - u[:, 0:1])
    g = lambda v: _log_posterior(v, *args) - v  # noqa: E731
    for _ in range(4):
        fm, f0, fp = g(x - step), g(x), g(x + step)
        curv = (fp - 2.0 * f0 + fm) / step ** 2
        move = np.where(curv < 0, -(fp - fm) / (2.0 * step) / np.where(curv < 0, curv, -1.0), 0.0)
        x = x + np.clip(move, -10 * step, 10 * step)
    return np.exp(x[:, 0])


def distance_posterior(plx, e_plx, *, dm=None, e_dm=None, length_scale_pc=1350.0,
                       n_grid=256, chunk=_CHUNK) -> DistanceSummary:
    """Distance posterior from a parallax, optionally with a distance modulus.

    Posterior density in r (pc)::

        P(r) ~ r**2 exp(-r/L) * N(plx | 1000/r, e_plx) [* N(5 log10 r - 5 | dm, e_dm)]

    evaluated per star on its own grid in ln r (adapted until the posterior is
    resolved by at least ``n_grid/2`` points), all stars of a chunk at once.

    Parameters
    ----------
    plx, e_plx : array_like
        Parallax and its error in mas; any sign of ``plx`` is valid, ``e_plx > 0``.
    dm, e_dm : array_like, optional
        True distance modulus and its uncertainty (mag) for the combined posterior.
    length_scale_pc : float or array_like
        Length scale L of the exponentially decreasing space density prior (pc).
    n_grid, chunk : int
        Grid points per star and stars per batch.

    Returns
    -------
    DistanceSummary
        Median, 16th and 84th percentiles and mode in pc; NaN where an input is
        not finite or an error is not positive.

    References
    ----------
    Bailer-Jones, C. A. L. 2015, PASP 127, 994 (prior and posterior, Sect. 5).
    """
    plx, e_plx = np.broadcast_arrays(np.asarray(plx, float), np.asarray(e_plx, float))
    length = np.broadcast_to(np.asarray(length_scale_pc, float), plx.shape)
    ok = np.isfinite(plx) & (e_plx > 0) & np.isfinite(e_plx)
    if dm is not None:
        dm, e_dm = (np.broadcast_to(np.asarray(a, float), plx.shape) for a in (dm, e_dm))
        ok &= np.isfinite(dm) & (e_dm > 0) & np.isfinite(e_dm)
    res = [np.full(plx.shape, np.nan) for _ in range(4)]
    idx = np.flatnonzero(ok)
    for s in range(0, idx.size, chunk):
        sel = idx[s:s + chunk]
        pick = lambda a: None if a is None else a[sel]  # noqa: E731
        args = (plx[sel], e_plx[sel], pick(dm), pick(e_dm), length[sel])
        u, lp = _fit_grid(*args, n_grid)
        col = tuple(None if a is None else a[:, None] for a in args)
        for arr, val in zip(res, _summarise(u, lp) + (_mode(u, lp, col),)):
            arr[sel] = val
    return DistanceSummary(*res)


# ----------------------------------------------------------------------------- input

@dataclass
class _Parallaxes:
    plx: np.ndarray      # corrected, NaN where unusable
    e_plx: np.ndarray
    flags: np.ndarray
    detail: np.ndarray


def _strings(values) -> np.ndarray:
    return np.asarray(values, dtype=object).astype(str).astype(object)


def _read_parallaxes(frame: pd.DataFrame, opts) -> _Parallaxes:
    """Corrected parallaxes and errors; rows that cannot be used are flagged, never dropped."""
    from .estimate import numeric_values
    n = len(frame)
    raw, bad = numeric_values(frame["plx"])
    if "e_plx" in frame.columns:
        err, ebad = numeric_values(frame["e_plx"])
        e_given = np.isfinite(err) | ebad
    else:
        err, ebad, e_given = np.full(n, np.nan), np.zeros(n, bool), np.zeros(n, bool)
    with np.errstate(invalid="ignore"):
        far = np.abs(raw) > PLX_LIMIT_MAS
        nonpos = np.isfinite(err) & (err <= 0)
    has = np.isfinite(raw) & ~far
    reasons = [
        (bad, lambda: "plx '" + _strings(frame["plx"].to_numpy()) + "' is not a number: parallax ignored"),
        (far, lambda: "plx " + _strings(raw) + f" mas is outside +-{PLX_LIMIT_MAS:g} mas "
                      "(no star is that close): parallax ignored"),
        (has & ebad, lambda: "e_plx '" + _strings(frame["e_plx"].to_numpy()) + "' is not a number: parallax ignored"),
        (has & nonpos, lambda: "e_plx " + _strings(err) + " mas must be > 0: parallax ignored"),
        (has & ~e_given, lambda: np.full(n, "plx has no error (e_plx missing): parallax ignored", object)),
    ]
    flags = np.zeros(n, np.int64)
    detail = np.full(n, "", object)
    for mask, text in reasons:
        mask = mask & (detail == "")
        if mask.any():
            detail[mask] = text()[mask]
            flags[mask] |= int(Flag.PLX_REJECTED)
    usable = has & (err > 0) & np.isfinite(err)
    plx = np.where(usable, raw - opts.plx_offset, np.nan)
    e_plx = np.where(usable, err * opts.plx_error_scale, np.nan)
    return _Parallaxes(plx, e_plx, flags, detail)


def _units_suspect(p: _Parallaxes, z, dm, e_dm, threshold):
    """Rows whose parallaxes look like arcsec: the column's errors are implausibly small for
    mas, or a row in tension agrees with photometry once multiplied by 1000."""
    ok = np.isfinite(p.plx)
    col = ok.any() and np.median(p.e_plx[ok]) < ARCSEC_ERROR_MAS and np.all(np.abs(p.plx[ok]) < 1.0)
    with np.errstate(invalid="ignore"):
        rows = np.flatnonzero((np.abs(z) > threshold) & (p.plx > threshold * p.e_plx))
    row = np.zeros(z.size, bool)
    row[rows] = np.abs(tension_z(1000.0 * p.plx[rows], 1000.0 * p.e_plx[rows], dm[rows], e_dm[rows])) <= threshold
    return ok & (col | row)


# ----------------------------------------------------------------------------- diagnosis

def _fmt(spec, values) -> np.ndarray:
    from .numfmt import format_each
    return format_each(spec, values)


def _best_class(rows, results, plx, e_plx, cals, sptnum, lc_bright, lc_faint):
    """Best-fitting luminosity class for ``rows``: name, (|z|, plx_phot) and whether it is the
    class already used.

    Swapping the calibration changes the distance modulus by -dM_V and, where E(B-V)
    was measured from colours, by +R_V d(B-V)_0 (the colour excess absorbs the change
    of intrinsic colour); the M_V scatter of the new class replaces the old one.
    First order: the full multi-band fit is not redone.
    """
    n = rows.size
    name = np.full(n, "", object)
    best = np.full((2, n), np.nan)  # |z|, plx_phot
    known = np.isin(lc_bright[rows], list(cals.by_class))
    dm, e_dm, mv, e_mv = (results[k][rows] for k in ("dm", "e_dm", "mv", "e_mv"))
    colour_term = np.where(results["e_ebv"][rows] > 0, results["rv"][rows], 0.0)
    for lc, cal in cals.by_class.items():  # loop over classes (at most 7), not stars
        v = cal.evaluate(sptnum[rows])
        dm_x = dm - (v.absmag[:, 0] - mv) + colour_term * (v.colours[:, 0] - results["bv0"][rows])
        e_x = np.sqrt(np.maximum(e_dm ** 2 - e_mv ** 2 + v.var_mv, 1e-6))
        z_x = np.abs(tension_z(plx, e_plx, dm_x, e_x))
        better = known & np.isfinite(z_x) & ~(z_x >= best[0])
        name[better] = lc
        best[:, better] = np.stack([z_x, _plx_from_dm(dm_x)])[:, better]
    current = (lc_bright[rows] == lc_faint[rows]) & (name == lc_bright[rows])
    return name, best, current


def _companion(plx, e_plx, dm, e_dm, threshold, max_mag=8.0):
    """Least extra light (mag) an unresolved companion must add so that z >= -threshold, for
    stars with z < -threshold; NaN when even ``max_mag`` is not enough. Bisection, all rows
    at once (z grows as the star is made brighter, i.e. farther)."""
    lo, hi = np.zeros_like(dm), np.full_like(dm, max_mag)
    for _ in range(16):  # 8 mag / 2**16: 1e-4 mag
        mid = 0.5 * (lo + hi)
        ok = tension_z(plx, e_plx, dm + mid, e_dm) >= -threshold
        lo, hi = np.where(ok, lo, mid), np.where(ok, mid, hi)
    return np.where(tension_z(plx, e_plx, dm + max_mag, e_dm) >= -threshold, hi, np.nan)


def _diagnose(rows, results, p, units, cals, sptnum, lc_bright, lc_faint, threshold):
    """Codes and sentences for the rows in tension."""
    from .numfmt import format_pm_array
    plx, e_plx = p.plx[rows], p.e_plx[rows]
    P, S, z = (results[k][rows] for k in ("plx_phot_mas", "e_plx_phot_mas", "plx_z"))
    text = ("parallax " + format_pm_array(plx, e_plx, "mas") + " vs photometric "
            + format_pm_array(P, S, "mas") + " (z = " + _fmt("%+.1f", z) + ")")
    head = text.copy()
    codes = np.full(rows.size, "", object)

    def add(mask, sentence, code=None):
        nonlocal text, codes
        if code is not None:
            codes = np.where(mask, np.where(codes == "", code, codes + "+" + code), codes)
        text = np.where(mask, text + "; " + sentence, text)

    name, (zb, pb), current = _best_class(rows, results, plx, e_plx, cals, sptnum, lc_bright, lc_faint)
    fits = (name != "") & ~current & (zb <= threshold)
    add(fits, "fits as class " + name + " (photometric parallax " + _fmt("%.3g", pb) + " mas, |z| = "
        + _fmt("%.1f", zb) + ")", "class:" + name)
    add((name != "") & ~fits, "no luminosity class fits (best " + name + ", |z| = " + _fmt("%.1f", zb) + ")")

    brighter = plx < P
    need = _companion(plx, e_plx, results["dm"][rows], results["e_dm"][rows], threshold)
    ratio = 10.0 ** (0.4 * need) - 1.0
    exact = np.where(plx > 0, "; exact agreement at " + _fmt("%.2f", 10.0 - 5.0 * np.log10(np.abs(plx) + (plx == 0))
                                                             - results["dm"][rows]) + " mag", "")
    pair = brighter & (need <= EQUAL_PAIR_MAG)
    add(pair, "an unresolved companion adding >= " + _fmt("%.2f", need) + " mag (flux >= "
        + _fmt("%.2f", ratio) + " of the primary's, i.e. <= " + _fmt("%.1f", -2.5 * np.log10(ratio))
        + " mag fainter" + exact + ") would reconcile it", "companion")
    add(brighter & (need > EQUAL_PAIR_MAG), "a companion would have to add >= " + _fmt("%.2f", need)
        + " mag, more than an equal-mass pair's 0.75 mag")
    add(brighter & np.isnan(need), "no amount of companion light reconciles it")
    add(~brighter, "the star is fainter than its class predicts, which no companion explains")

    neg = plx < -threshold * e_plx
    weak = ~neg & (e_plx > LOW_SNR_FRACTION * plx)
    add(neg, "parallax negative by " + _fmt("%.1f", -plx / e_plx)
        + " sigma: no distance fits it, the parallax or its error is wrong", "plx_suspect")
    add(weak, "parallax/error only " + _fmt("%.1f", plx / e_plx) + " (fractional error above "
        + f"{100 * LOW_SNR_FRACTION:g} %), where catalogue systematics weigh most", "plx_suspect")
    add(units[rows], "the parallaxes may be in arcsec, not mas", "plx_suspect")
    shift = (plx - P) - np.sign(plx - P) * threshold * np.hypot(e_plx, S)
    add(codes == "", "the parallax would have to be off by about " + _fmt("%.3g", shift)
        + " mas (" + _fmt("%.1f", np.abs(shift) / e_plx) + " times its error) to agree", "unexplained")
    # a parallax within the threshold of zero cannot choose between the explanations above: one
    # plain statement instead of a compound diagnosis (a negative one beyond it is suspect alone)
    base = head
    snr = plx / e_plx
    zero = np.abs(snr) <= threshold
    codes = np.where(zero, "plx_uninformative", np.where(neg, "plx_suspect", codes))
    text = np.where(zero, base + "; parallax/error = " + _fmt("%.1f", snr) + ", consistent with zero within "
                    + f"{threshold:g} sigma: the parallax says only that the star is farther than its type "
                    "predicts and cannot discriminate between a brighter luminosity class, a companion and "
                    "an error in the parallax", text)
    text = np.where(neg, base + "; parallax negative by " + _fmt("%.1f", -snr)
                    + " sigma: no distance fits it, the parallax or its error is wrong", text)
    # each code once (e.g. a weak parallax that also looks like arcsec is 'plx_suspect', not twice)
    distinct = pd.unique(codes)
    once = {c: "+".join(dict.fromkeys(c.split("+"))) for c in distinct}
    return pd.Series(codes, dtype=object).map(once).to_numpy(object), text


# ----------------------------------------------------------------------------- main hook

def crosscheck(frame, results, *, cals, sptnum, lc_bright, lc_faint, opts):
    """Parallax columns, flags and notes for :func:`specpar.estimate`.

    Parameters
    ----------
    frame : pandas.DataFrame
        Input rows with specpar's column names; ``plx`` (mas) present, ``e_plx``
        (mas) maybe absent; values may be unusable (flagged, never raised on).
    results : dict of ndarray
        Columns computed so far (``dm``, ``e_dm``, ``mv``, ``e_mv``, ``bv0``,
        ``rv``, ``e_ebv``, ...).
    cals : CalibrationSet
    sptnum, lc_bright, lc_faint : ndarray
        Numeric type and luminosity class(es) of every row.
    opts : EstimateOptions
        ``plx_offset`` (mas, subtracted), ``plx_error_scale``, ``tension`` (|z|
        threshold), ``length_scale_pc``.

    Returns
    -------
    columns : dict of ndarray
        See :data:`COLUMNS`.
    flags : ndarray of int64
        PLX_TENSION, PLX_REJECTED, PLX_LOW_SNR, PLX_UNITS_SUSPECT bits.
    detail : ndarray of str
        Readable reasons ('' where there is nothing to say).

    References
    ----------
    Bailer-Jones 2015, PASP 127, 994; Lutz & Kelker 1973, PASP 85, 573.
    """
    p = _read_parallaxes(frame, opts)
    dm, e_dm = results["dm"], results["e_dm"]
    with np.errstate(invalid="ignore", divide="ignore"):
        z = tension_z(p.plx, p.e_plx, dm, e_dm)
        snr = p.plx / p.e_plx
    thr = float(opts.tension)
    units = _units_suspect(p, z, dm, e_dm, thr)
    flags = p.flags.copy()
    flags[units] |= int(Flag.PLX_UNITS_SUSPECT)
    with np.errstate(invalid="ignore"):
        flags[snr < 1.0 / LOW_SNR_FRACTION] |= int(Flag.PLX_LOW_SNR)
        tense = np.abs(z) > thr
    flags[tense] |= int(Flag.PLX_TENSION)
    only = distance_posterior(p.plx, p.e_plx, length_scale_pc=opts.length_scale_pc)
    comb = distance_posterior(p.plx, p.e_plx, dm=dm, e_dm=e_dm, length_scale_pc=opts.length_scale_pc)
    # parallax and photometry in tension: their combination would be a tight distance that fits
    # neither, so it is withheld (and flagged) rather than given
    flags[tense] |= int(Flag.PLX_COMBINED_WITHHELD)
    for arr in (comb.median, comb.lo, comb.hi):
        arr[tense] = np.nan
    cols = {
        "plx_corr_mas": p.plx, "e_plx_corr_mas": p.e_plx, "plx_snr": snr,
        "plx_z": z, "plx_diag": np.full(len(z), "", object),
        "dist_plx_pc": only.median, "dist_plx_lo_pc": only.lo, "dist_plx_hi_pc": only.hi,
        "dist_comb_pc": comb.median, "dist_comb_lo_pc": comb.lo, "dist_comb_hi_pc": comb.hi,
    }
    detail = p.detail
    rows = np.flatnonzero(tense)
    if rows.size:
        work = dict(results, plx_z=z)
        codes, text = _diagnose(rows, work, p, units, cals, sptnum, np.asarray(lc_bright, object),
                                np.asarray(lc_faint, object), thr)
        cols["plx_diag"][rows] = codes
        detail = detail.copy()
        detail[rows] = np.where(detail[rows] != "", detail[rows] + "; ", "") + text
    cols["plx_diag"] = cols["plx_diag"].astype(str)
    return cols, flags, detail


def metadata(opts) -> dict:
    """Parallax settings and conventions for the output metadata."""
    return {
        "plx_offset_mas": float(opts.plx_offset),
        "plx_error_scale": float(opts.plx_error_scale),
        "plx_tension_threshold": float(opts.tension),
        "distance_prior": "exponentially decreasing space density r^2 exp(-r/L) (Bailer-Jones 2015, PASP 127, 994)",
        "distance_prior_length_scale_pc": float(opts.length_scale_pc),
        "parallax_diagnosis_codes": dict(DIAG_CODES),
        "combined_distance": ("withheld (NaN, flag PLX_COMBINED_WITHHELD) where |plx_z| exceeds "
                              "plx_tension_threshold: the two measurements disagree and a combined "
                              "distance would describe neither"),
    }


# ----------------------------------------------------------------------------- figure

_PLOT_COLUMNS = (("plx_corr_mas", "plx"), ("e_plx_corr_mas", "e_plx"), ("plx_phot_mas",),
                 ("e_plx_phot_mas",), ("plx_z",), ("flags",))


def _plot_frame(table) -> pd.DataFrame:
    from .estimate import numeric_values, to_frame
    frame = to_frame(table)
    found = {options[-1]: next((c for c in options if c in frame.columns), None) for options in _PLOT_COLUMNS}
    missing = [" or ".join(options) for options in _PLOT_COLUMNS if found[options[-1]] is None]
    if missing:
        raise ValueError(f"the table lacks {', '.join(missing)}; plot-parallax needs the output of "
                         "'specpar estimate' run on an input with plx and e_plx")
    return pd.DataFrame({name: numeric_values(frame[col])[0] for name, col in found.items()})


def _draw(data: pd.DataFrame, threshold: float):
    from matplotlib.figure import Figure
    fig = Figure(figsize=(10, 4.5), layout="constrained")
    ax, hx = fig.subplots(1, 2)
    flags = np.nan_to_num(data["flags"].to_numpy(), nan=0).astype(np.int64)
    tense = (flags & int(Flag.PLX_TENSION)) != 0
    ok = (np.isfinite(data["plx"]) & np.isfinite(data["plx_phot_mas"])).to_numpy()
    for sel, style in ((ok & ~tense, dict(color="0.35", label="consistent")),
                       (ok & tense, dict(color="tab:red", label=f"|z| > {threshold:g}"))):
        ax.errorbar(data["plx_phot_mas"][sel], data["plx"][sel], xerr=data["e_plx_phot_mas"][sel],
                    yerr=data["e_plx"][sel], fmt="o", ms=3, elinewidth=0.6, alpha=0.8, **style)
    if ok.any():
        from matplotlib.ticker import FuncFormatter
        span = np.concatenate([data["plx"][ok], data["plx_phot_mas"][ok]])
        lim = (span.min(), span.max())
        positive = span[span > 0]
        if positive.size:  # equality is only possible for positive parallaxes: no line below zero
            ax.plot((positive.min(), lim[1]), (positive.min(), lim[1]), color="k", lw=1,
                    label="1:1 (equal parallaxes)")
        if lim[0] > 0:
            ax.set_xscale("log"), ax.set_yscale("log")
        else:  # zero or negative parallaxes: logarithmic only beyond the typical error
            lin = float(np.nanmedian(data["e_plx"][ok]))
            ax.set_xscale("symlog", linthresh=lin), ax.set_yscale("symlog", linthresh=lin)
        plain = FuncFormatter(lambda v, _pos: f"{v:g}")  # 0.1, 1, -1, 10 rather than 10^-1 or -10^0
        for axis in (ax.xaxis, ax.yaxis):
            axis.set_major_formatter(plain)
    ax.set_xlabel("photometric parallax (mas)")
    ax.set_ylabel("trigonometric parallax (mas)")
    ax.legend(loc="upper left", fontsize=8)
    z = data["plx_z"].to_numpy()
    z = z[np.isfinite(z)]
    bins = np.linspace(-6, 6, 49)
    outside = int((np.abs(z) >= 6).sum())
    hx.hist(np.clip(z, -6, 6), bins=bins, color="0.6",
            label=f"{z.size} stars" + (f" ({outside} with |z| > 6 in the end bins)" if outside else ""))
    x = np.linspace(-6, 6, 300)
    inside = z.size - outside
    hx.plot(x, inside * (bins[1] - bins[0]) * np.exp(-0.5 * x ** 2) / np.sqrt(2 * np.pi), "k-",
            label=f"expected if both distances are right:\nN(0, 1) scaled to the {inside} stars with |z| < 6")
    for sign in (-1, 1):
        hx.axvline(sign * threshold, color="tab:red", ls="--", lw=1)
    hx.set_xlabel("z: trigonometric minus photometric parallax, in sigma")
    hx.set_ylabel("stars")
    hx.legend(loc="upper left", fontsize=8)
    return fig


def plot_parallax(table, path, *, threshold=None, overwrite=False, inputs=()):
    """Photometric versus trigonometric parallax, and a histogram of z.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        Output of :func:`specpar.estimate` for an input with parallaxes.
    path : str or Path
        Figure file, ``.png`` or ``.pdf``; written atomically.
    threshold : float, optional
        |z| threshold drawn; default from the table's metadata, else 3.
    overwrite : bool
        Replace an existing file.
    inputs : sequence of path
        Files that must never be written over.
    """
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".")
    if fmt not in ("png", "pdf"):
        raise ValueError(f"figure file {path} must end in .png or .pdf, not {path.suffix or 'nothing'!r}")
    if threshold is None:
        meta = (table.attrs if isinstance(table, pd.DataFrame) else table.meta).get("specpar", {})
        threshold = float((meta or {}).get("parallax", {}).get("plx_tension_threshold", 3.0))
    if threshold is not None and not (np.isfinite(threshold) and threshold > 0):
        raise ValueError(f"tension threshold must be a finite number > 0 (in sigma, e.g. 3), got {threshold}")
    fig = _draw(_plot_frame(table), threshold)
    atomic_write(path, lambda tmp: fig.savefig(tmp, format=fmt, dpi=120), inputs=inputs,
                 overwrite=overwrite, what="figure")


def _cmd_plot(args):
    from specpar.io.read import read_table
    if args.tension is not None and not (np.isfinite(args.tension) and args.tension > 0):
        raise ValueError(f"--tension must be a finite number > 0 (in sigma, e.g. 3), got {args.tension}")
    table = read_table(args.table, args.in_format, hdu=args.hdu)
    plot_parallax(table, args.output, threshold=args.tension, overwrite=args.overwrite, inputs=[args.table])
    return 0


def register_cli(sub) -> None:
    """Add ``specpar plot-parallax``."""
    from specpar.io.formats import FORMATS
    p = sub.add_parser("plot-parallax", help="figure: photometric vs trigonometric parallax and z histogram",
                       description="Draw photometric against trigonometric parallax (1:1 line, stars in "
                                   "tension marked) and a histogram of z, from a table written by "
                                   "'specpar estimate' for an input with plx and e_plx.")
    p.add_argument("table", help="output table of 'specpar estimate'")
    p.add_argument("-o", "--output", required=True, help="figure file, .png or .pdf")
    p.add_argument("--in-format", choices=list(FORMATS), help="table format if the extension does not tell")
    p.add_argument("--hdu", metavar="N|NAME", help="FITS: the table HDU to read when the file holds several (VOTable: table index or ID)")
    p.add_argument("--tension", type=float, default=None, metavar="Z",
                   help="|z| threshold to draw (default: the one recorded in the table, else 3)")
    p.add_argument("--overwrite", action="store_true", help="replace the figure if it exists")
    p.set_defaults(func=_cmd_plot)
