"""Flags that follow from the fit, and the readable ``note`` of every row."""
from __future__ import annotations

import numpy as np

from ..core.ebvbound import UPPER_LIMIT_LEVEL
from ..core.flags import Flag, describe, flag_names
from ..core.numfmt import decimals_for, format_each, format_pm_array
from .frames import combine_codes
from .options import MAX_MAG_ERROR

__all__ = ["fit_flags", "ebv_detail", "notes", "EBV_NEGATIVE_SIGMA", "BANDS_DISAGREE_P"]

#: E(B-V) of the unbounded fit more than this many sigma below 0 is flagged EBV_NEGATIVE
#: (a type/photometry mismatch; common practice for a significant deviation).
EBV_NEGATIVE_SIGMA = 3.0
#: Chi-square probability below which the bands are flagged as disagreeing (common practice).
BANDS_DISAGREE_P = 1e-3


def fit_flags(fit, typed, opts) -> np.ndarray:
    """Flag bits that follow from the fit itself (``typed``: rows with a calibrated M_V)."""
    nodist = ~np.isfinite(fit["dm"])
    flags = np.where(nodist, int(Flag.NO_DISTANCE), 0)
    flags |= np.where(~nodist & ~fit["colour_known"], int(Flag.EBV_ASSUMED_ZERO), 0)
    flags |= np.where(fit["uncalibrated"] & typed, int(Flag.BAND_UNCALIBRATED), 0)
    with np.errstate(invalid="ignore"):
        raw, e_raw = fit["ebv_unbounded"], fit["e_ebv_unbounded"]
        flags |= np.where(fit["colour_known"] & (raw + EBV_NEGATIVE_SIGMA * e_raw < 0), int(Flag.EBV_NEGATIVE), 0)
        flags |= np.where(fit["at_bound"], int(Flag.EBV_AT_BOUND), 0)
        flags |= np.where(fit["p_value"] < BANDS_DISAGREE_P, int(Flag.BANDS_DISAGREE), 0)
    if opts.fit_rv:
        flags |= np.where(fit["rv_flag"] & ~nodist, int(Flag.RV_UNCONSTRAINED), 0)
    return flags


def ebv_detail(fit, flags) -> np.ndarray:
    """The numbers behind EBV_NEGATIVE, per row ('' elsewhere); vectorised.

    Only the significantly negative rows get numbers in the note (the type/photometry
    inconsistency); any other row at the bound has them in ``ebv_unbounded`` and
    ``ebv_upper`` and shares the flag's sentence.
    """
    out = np.full(len(flags), "", dtype=object)
    rows = np.flatnonzero(fit["at_bound"] & ((flags & int(Flag.EBV_NEGATIVE)) != 0))
    if rows.size == 0:
        return out
    raw, e_raw, upper = fit["ebv_unbounded"][rows], fit["e_ebv_unbounded"][rows], fit["ebv_upper"][rows]
    sigma = format_each("%.1f", -raw / e_raw)
    text = "unbounded fit E(B-V) = " + format_pm_array(raw, e_raw) + " (" + sigma + " sigma below 0)"
    lim = np.full(rows.size, "", dtype=object)
    dec = decimals_for(upper)
    for d in np.unique(dec):
        lim[dec == d] = format_each(f"%.{d}f", upper[dec == d])
    out[rows] = text + f"; E(B-V) held at 0, {100 * UPPER_LIMIT_LEVEL:g} % upper limit " + lim
    return out


def _bands(mask, obs_names) -> str:
    """Names of the observables whose bits are set in ``mask``."""
    return ", ".join(n for k, n in enumerate(obs_names) if mask >> k & 1)


def _note_text(f, r, x, be, big, obs_names, max_error) -> str:
    """The note prefix of one combination of flags and per-observable bit masks."""
    parts = [describe(f)] if f else []
    if r:
        parts.append("rejected: " + _bands(r, obs_names))
    if big:
        parts.append(f"not used, error above max_error = {max_error:g} mag (a catalogue's 'no error' "
                     f"value or a useless measurement): {_bands(big, obs_names)}")
    if be & ~big:
        parts.append(f"not used, error zero, negative or not a finite number: {_bands(be & ~big, obs_names)}")
    if x:
        parts.append("default error used for: " + _bands(x, obs_names))
    return "; ".join(parts)


def notes(flags, detail, rejected, defaulted, obs_names, bad_error=None, bad_error_large=None,
          max_error=MAX_MAG_ERROR):
    """Readable note and flag names per row.

    The flag sentences and band lists are built once per distinct combination
    (there are few); the per-row detail text is appended with a vectorised join.
    """
    bad_error = np.zeros_like(rejected) if bad_error is None else bad_error
    large = np.zeros_like(rejected) if bad_error_large is None else bad_error_large
    codes = combine_codes(flags, rejected, defaulted, bad_error, large)
    first = np.unique(codes, return_index=True)[1]
    texts, names = [], []
    for i in first:
        be = int(bad_error[i])
        texts.append(_note_text(int(flags[i]), int(rejected[i]), int(defaulted[i]), be, be & int(large[i]),
                                obs_names, max_error))
        names.append(",".join(flag_names(int(flags[i]))))
    prefix = np.array(texts, dtype=object)[codes]
    detail = np.asarray(detail, dtype=object)
    has_d, has_p = detail != "", prefix != ""
    note = np.where(has_d, np.where(has_p, prefix + "; ", "") + detail, prefix)
    return note, np.array(names, dtype=object)[codes]
