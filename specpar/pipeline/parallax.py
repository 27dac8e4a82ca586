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
  :attr:`~specpar.core.flags.Flag.PLX_TENSION`;
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

import numpy as np
import pandas as pd

from ..core.coldocs import column_docs
from ..core.bands import BV_INDEX, V_INDEX
from ..core.distance import dm_to_plx_mas, plx_mas_to_dm
from ..core.flags import Flag
from ..core.numfmt import format_each, format_pm_array
from .frames import numeric_values
from .tension import distance_posterior, tension_z

__all__ = ["COLUMNS", "DIAG_CODES", "crosscheck", "metadata"]

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

COLUMNS = column_docs(__package__, "parallax_columns.csv")

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


# ----------------------------------------------------------------------------- input

@dataclass
class _Parallaxes:
    """Parallaxes and errors in use (corrected; NaN where unusable), flags and reasons per row."""

    plx: np.ndarray      # corrected, NaN where unusable
    e_plx: np.ndarray
    flags: np.ndarray
    detail: np.ndarray


def _strings(values) -> np.ndarray:
    return np.asarray(values, dtype=object).astype(str).astype(object)


def _read_parallaxes(frame: pd.DataFrame, opts) -> _Parallaxes:
    """Corrected parallaxes and errors; rows that cannot be used are flagged, never dropped."""
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
        dm_x = dm - (v.absmag[:, V_INDEX] - mv) + colour_term * (v.colours[:, BV_INDEX] - results["bv0"][rows])
        e_x = np.sqrt(np.maximum(e_dm ** 2 - e_mv ** 2 + v.var_mv, 1e-6))
        z_x = np.abs(tension_z(plx, e_plx, dm_x, e_x))
        better = known & np.isfinite(z_x) & ~(z_x >= best[0])
        name[better] = lc
        best[:, better] = np.stack([z_x, dm_to_plx_mas(dm_x)])[:, better]
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



class _Sentences:
    """Diagnosis text and '+'-joined codes of the rows in tension, built sentence by sentence."""

    def __init__(self, head):
        self.text = head.copy()
        self.codes = np.full(head.size, "", object)

    def add(self, mask, sentence, code=None):
        if code is not None:
            self.codes = np.where(mask, np.where(self.codes == "", code, self.codes + "+" + code), self.codes)
        self.text = np.where(mask, self.text + "; " + sentence, self.text)


def _class_sentences(s, rows, results, plx, e_plx, cals, sptnum, lc_bright, lc_faint, threshold):
    """Whether another luminosity class's calibration fits the parallax."""
    name, (zb, pb), current = _best_class(rows, results, plx, e_plx, cals, sptnum, lc_bright, lc_faint)
    fits = (name != "") & ~current & (zb <= threshold)
    s.add(fits, "fits as class " + name + " (photometric parallax " + _fmt("%.3g", pb) + " mas, |z| = "
          + _fmt("%.1f", zb) + ")", "class:" + name)
    s.add((name != "") & ~fits, "no luminosity class fits (best " + name + ", |z| = " + _fmt("%.1f", zb) + ")")


def _companion_sentences(s, plx, e_plx, P, dm, e_dm, threshold):
    """How much light an unresolved companion would have to add."""
    brighter = plx < P
    need = _companion(plx, e_plx, dm, e_dm, threshold)
    ratio = 10.0 ** (0.4 * need) - 1.0
    exact = np.where(plx > 0, "; exact agreement at " + _fmt("%.2f", plx_mas_to_dm(np.abs(plx) + (plx == 0))
                                                             - dm) + " mag", "")
    pair = brighter & (need <= EQUAL_PAIR_MAG)
    s.add(pair, "an unresolved companion adding >= " + _fmt("%.2f", need) + " mag (flux >= "
          + _fmt("%.2f", ratio) + " of the primary's, i.e. <= " + _fmt("%.1f", -2.5 * np.log10(ratio))
          + " mag fainter" + exact + ") would reconcile it", "companion")
    s.add(brighter & (need > EQUAL_PAIR_MAG), "a companion would have to add >= " + _fmt("%.2f", need)
          + " mag, more than an equal-mass pair's 0.75 mag")
    s.add(brighter & np.isnan(need), "no amount of companion light reconciles it")
    s.add(~brighter, "the star is fainter than its class predicts, which no companion explains")


def _doubt_sentences(s, plx, e_plx, P, S, suspect_units, threshold):
    """Reasons to distrust the parallax itself; what it would take when nothing explains the row."""
    neg = plx < -threshold * e_plx
    weak = ~neg & (e_plx > LOW_SNR_FRACTION * plx)
    s.add(neg, "parallax negative by " + _fmt("%.1f", -plx / e_plx)
          + " sigma: no distance fits it, the parallax or its error is wrong", "plx_suspect")
    s.add(weak, "parallax/error only " + _fmt("%.1f", plx / e_plx) + " (fractional error above "
          + f"{100 * LOW_SNR_FRACTION:g} %), where catalogue systematics weigh most", "plx_suspect")
    s.add(suspect_units, "the parallaxes may be in arcsec, not mas", "plx_suspect")
    shift = (plx - P) - np.sign(plx - P) * threshold * np.hypot(e_plx, S)
    s.add(s.codes == "", "the parallax would have to be off by about " + _fmt("%.3g", shift)
          + " mas (" + _fmt("%.1f", np.abs(shift) / e_plx) + " times its error) to agree", "unexplained")
    return neg


def _diagnose(rows, results, p, units, cals, sptnum, lc_bright, lc_faint, threshold):
    """Codes and sentences for the rows in tension."""
    plx, e_plx = p.plx[rows], p.e_plx[rows]
    P, S, z = (results[k][rows] for k in ("plx_phot_mas", "e_plx_phot_mas", "plx_z"))
    head = ("parallax " + format_pm_array(plx, e_plx, "mas") + " vs photometric "
            + format_pm_array(P, S, "mas") + " (z = " + _fmt("%+.1f", z) + ")")
    s = _Sentences(head)
    _class_sentences(s, rows, results, plx, e_plx, cals, sptnum, lc_bright, lc_faint, threshold)
    _companion_sentences(s, plx, e_plx, P, results["dm"][rows], results["e_dm"][rows], threshold)
    neg = _doubt_sentences(s, plx, e_plx, P, S, units[rows], threshold)
    # a parallax within the threshold of zero cannot choose between the explanations above: one
    # plain statement instead of a compound diagnosis (a negative one beyond it is suspect alone)
    snr = plx / e_plx
    zero = np.abs(snr) <= threshold
    codes = np.where(zero, "plx_uninformative", np.where(neg, "plx_suspect", s.codes))
    text = np.where(zero, head + "; parallax/error = " + _fmt("%.1f", snr) + ", consistent with zero within "
                    + f"{threshold:g} sigma: the parallax says only that the star is farther than its type "
                    "predicts and cannot discriminate between a brighter luminosity class, a companion and "
                    "an error in the parallax", s.text)
    text = np.where(neg, head + "; parallax negative by " + _fmt("%.1f", -snr)
                    + " sigma: no distance fits it, the parallax or its error is wrong", text)
    # each code once (e.g. a weak parallax that also looks like arcsec is 'plx_suspect', not twice)
    once = {c: "+".join(dict.fromkeys(c.split("+"))) for c in pd.unique(codes)}
    return pd.Series(codes, dtype=object).map(once).to_numpy(object), text


# ----------------------------------------------------------------------------- main hook

def _tension_flags(p, z, snr, units, threshold):
    """Flags of the parallax check per row, and the rows in tension."""
    flags = p.flags.copy()
    flags[units] |= int(Flag.PLX_UNITS_SUSPECT)
    with np.errstate(invalid="ignore"):
        flags[snr < 1.0 / LOW_SNR_FRACTION] |= int(Flag.PLX_LOW_SNR)
        tense = np.abs(z) > threshold
    flags[tense] |= int(Flag.PLX_TENSION) | int(Flag.PLX_COMBINED_WITHHELD)
    return flags, tense


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
        PLX_TENSION, PLX_COMBINED_WITHHELD, PLX_REJECTED, PLX_LOW_SNR, PLX_UNITS_SUSPECT bits.
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
    units = _units_suspect(p, z, dm, e_dm, thr := float(opts.tension))
    flags, tense = _tension_flags(p, z, snr, units, thr)
    only = distance_posterior(p.plx, p.e_plx, length_scale_pc=opts.length_scale_pc)
    comb = distance_posterior(p.plx, p.e_plx, dm=dm, e_dm=e_dm, length_scale_pc=opts.length_scale_pc)
    # parallax and photometry in tension: their combination would be a tight distance that fits
    # neither, so it is withheld (flagged PLX_COMBINED_WITHHELD) rather than given
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
