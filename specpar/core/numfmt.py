"""Numbers with uncertainties for notes and summaries.

Rules (common practice for quoting measurements): the uncertainty gets two
significant digits and the value is rounded to the same decimal place, so a
small error is never printed as ``0.000``; a missing uncertainty is said in
words instead of ``nan``; a parameter held fixed (error exactly 0) is printed
as fixed, not as ``+- 0``.
"""
from __future__ import annotations

import numpy as np

__all__ = ["format_pm", "format_pm_array", "decimals_for", "format_each"]

PM = "+-"
_MAX_DECIMALS = 12


def format_each(fmt: str, values) -> np.ndarray:
    """``fmt % v`` for every value, as an object array of Python strings.

    The same text as ``np.char.mod(fmt, values).astype(object)`` (both apply
    Python's ``%`` operator to each float) at about a third of the cost: no
    fixed-width unicode array is built and copied back to objects.
    """
    a = np.asarray(values, dtype=float)
    out = np.empty(a.size, dtype=object)
    out[:] = [fmt % v for v in a.ravel().tolist()]
    return out.reshape(a.shape)


def decimals_for(error, digits: int = 2) -> np.ndarray:
    """Decimal places that give ``error`` ``digits`` significant digits (>= 0, <= 12)."""
    e = np.abs(np.asarray(error, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        d = digits - 1 - np.floor(np.log10(np.where(e > 0, e, np.nan)))
    return np.clip(np.nan_to_num(d, nan=0.0), 0, _MAX_DECIMALS).astype(int)


def format_pm(value, error, unit: str = "", digits: int = 2) -> str:
    """``value +- error`` with the error's significant digits (see module rules)."""
    return str(format_pm_array([value], [error], unit=unit, digits=digits)[0])


def format_pm_array(values, errors, unit: str = "", digits: int = 2) -> np.ndarray:
    """Vectorised :func:`format_pm`: one string per row (object array).

    The formats are built once per distinct number of decimal places.
    """
    v = np.asarray(values, dtype=float).ravel()
    e = np.asarray(errors, dtype=float).ravel()
    tail = f" {unit}" if unit else ""
    out = np.full(v.size, "", dtype=object)
    ok_e = np.isfinite(e) & (e > 0)
    dec = decimals_for(e, digits)
    good = np.isfinite(v) & ok_e
    for d in np.unique(dec[good]):
        sel = good & (dec == d)
        out[sel] = (format_each(f"%.{d}f", v[sel]) + f" {PM} " + format_each(f"%.{d}f", e[sel]) + tail)
    fixed = np.isfinite(v) & (e == 0)
    out[fixed] = format_each("%.4g", v[fixed]) + tail + " (held fixed)"
    unknown = np.isfinite(v) & ~ok_e & ~fixed
    out[unknown] = format_each("%.4g", v[unknown]) + tail + " (uncertainty unknown)"
    out[~np.isfinite(v)] = "not available"
    return out
