"""Reading MK spectral types, vectorised over a column (each distinct string is
parsed once).

Numeric type scale: O0 = 0, B0 = 10, A0 = 20, F0 = 30, G0 = 40, K0 = 50,
M0 = 60 (so B2.5 = 12.5). Luminosity classes map to calibration names
``Ia, Iab, Ib, II, III, IV, V``; an intermediate class (``IV-V``, ``III/IV``,
``Ib-II``) keeps both neighbours, a bare ``I`` means Ia-Ib.
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd

from .flags import Flag

__all__ = ["parse_sptypes", "parse_one", "CLASS_ORDER", "TEMPERATURE_CLASSES"]

TEMPERATURE_CLASSES = "OBAFGKM"
#: Luminosity classes that have calibrations, brightest first.
CLASS_ORDER = ("Ia", "Iab", "Ib", "II", "III", "IV", "V")
DEFAULT_SUBTYPE_SIGMA = 0.5  # half a subclass; common practice for MK types

_LUM = r"(?:IA\+|IA0|IAB|IA|IB|III|II|IV|VI|V|I|0)(?:[AB](?![A-Z]))?"
_PATTERN = re.compile(
    r"^(?P<cls>[OBAFGKM])\s*(?P<sub>\d+(?:\.\d+)?)?"
    r"(?:\s*[-/]\s*(?P<cls2>[OBAFGKM])?\s*(?P<sub2>\d+(?:\.\d+)?))?"
    r"\s*(?P<unc1>:)?\s*"
    r"(?P<lum>" + _LUM + r"(?:\s*[-/]\s*" + _LUM + r")?)?"
    r"(?P<rest>.*)$"
)
# Families with no calibration here: white dwarfs, Wolf-Rayet, carbon, S, brown dwarfs, subdwarfs.
_UNSUPPORTED = re.compile(r"^(?:D[ABOQZCX]|W[NCOR]|C[-\d]|C\b|S[\d.C]|S\b|R\d|N\d|[LTY]\s*\d|SD|ESD|USD|MS\b|SC\b)")

_ROMAN_TO_CLASS = {
    "IA": ("Ia",), "IAB": ("Iab",), "IB": ("Ib",), "I": ("Ia", "Ib"),
    "II": ("II",), "III": ("III",), "IV": ("IV",), "V": ("V",),
}
_HYPERGIANT = {"IA+", "IA0", "0"}


def _lum_classes(text: str) -> tuple[tuple[str, ...], str | None]:
    """Calibration classes for a luminosity-class string, or (): reason."""
    parts = [p.strip() for p in re.split(r"[-/]", text.replace("IA+", "IAPLUS")) if p.strip()]
    names: list[str] = []
    for p in parts:
        p = p.replace("IAPLUS", "IA+")
        if p in _HYPERGIANT:
            return (), "hypergiant (class 0/Ia+) has no calibration"
        if p == "VI":
            return (), "subdwarf (class VI) has no calibration"
        base = p if p in _ROMAN_TO_CLASS else p[:-1]  # drop IIIa/IIIb-style suffixes
        names.extend(_ROMAN_TO_CLASS.get(base, ()))
    idx = sorted({CLASS_ORDER.index(n) for n in names})
    if not idx:
        return (), "luminosity class not recognised"
    return (CLASS_ORDER[idx[0]], CLASS_ORDER[idx[-1]]), None


def parse_one(text) -> dict:
    """Parse one spectral-type string.

    Returns
    -------
    dict
        ``sptnum`` (float, NaN if unreadable), ``e_sptnum`` (subclasses),
        ``lc_bright`` and ``lc_faint`` (calibration class names; equal for a
        single class, '' when unusable), ``flags`` (int) and ``detail`` (str).
    """
    out = dict(sptnum=np.nan, e_sptnum=np.nan, lc_bright="", lc_faint="", flags=0, detail="")
    if isinstance(text, bytes):
        text = text.decode("utf-8", errors="replace")
    if not isinstance(text, str):
        what = "missing" if text is None or (isinstance(text, float) and np.isnan(text)) else f"{text!r} is not text"
        out.update(flags=int(Flag.TYPE_UNREADABLE), detail=f"spectral type {what}")
        return out
    raw = str(text).strip()
    spaced = re.sub(r"\s+", " ", raw).replace("?", ":")  # '?' marks uncertainty like ':'
    spaced = re.sub(r"\s*:+", ":", spaced)
    s = spaced.upper()
    if not s or s in {"NAN", "NONE", "--", "?"}:
        out.update(flags=int(Flag.TYPE_UNREADABLE), detail="spectral type missing")
        return out
    if _UNSUPPORTED.match(s.replace(" ", "")):
        out.update(flags=int(Flag.TYPE_UNSUPPORTED), detail=f"type {raw!r} belongs to a family without calibration")
        return out
    m = _PATTERN.match(s)
    if not m:
        out.update(flags=int(Flag.TYPE_UNREADABLE), detail=f"cannot read spectral type {raw!r}")
        return out
    flags = 0
    details = []
    base = TEMPERATURE_CLASSES.index(m["cls"]) * 10.0
    if m["sub"] is None:
        sub, e_sub = 5.0, 10.0 / np.sqrt(12.0)
        flags |= Flag.NO_SUBTYPE
    else:
        sub, e_sub = float(m["sub"]), DEFAULT_SUBTYPE_SIGMA
        if sub >= 10:
            out.update(flags=int(Flag.TYPE_UNREADABLE), detail=f"subtype {m['sub']} in {raw!r} is not 0-9.9")
            return out
    num = base + sub
    if m["sub2"] is not None:
        base2 = TEMPERATURE_CLASSES.index(m["cls2"]) * 10.0 if m["cls2"] else base
        num2 = base2 + float(m["sub2"])
        if float(m["sub2"]) >= 10 or num2 < num:
            out.update(flags=int(Flag.TYPE_UNREADABLE), detail=f"type range in {raw!r} is not increasing")
            return out
        half = (num2 - num) / 2.0
        num, e_sub = num + half, max(e_sub, half)
    rest = spaced[m.start("rest"):].strip() if len(spaced) == len(s) else (m["rest"] or "").strip()
    if m["unc1"] or rest.startswith(":"):
        flags |= Flag.TYPE_UNCERTAIN
        e_sub = max(e_sub, 1.0)
        rest = rest.lstrip(": ")
    lum = m["lum"]
    if lum is None:
        if rest and rest[0].isalpha() and not re.match(r"^(E|N|NN|P|VAR|V|K|M|S|W|SH|SHELL|PEC)\b", rest.upper()):
            out.update(flags=int(Flag.TYPE_UNREADABLE), detail=f"cannot read luminosity class in {raw!r}")
            return out
        classes = ("V", "V")
        flags |= Flag.NO_LUMCLASS
    else:
        classes, why = _lum_classes(lum.replace(" ", ""))
        if why:
            out.update(flags=int(Flag.TYPE_UNSUPPORTED), detail=f"{why}: {raw!r}")
            return out
    if rest:
        flags |= Flag.PECULIAR
        details.append(f"suffix {rest!r}")
    out.update(sptnum=num, e_sptnum=e_sub, lc_bright=classes[0], lc_faint=classes[1],
               flags=int(flags), detail="; ".join(details))
    return out


def parse_sptypes(values) -> pd.DataFrame:
    """Parse a column of spectral types.

    Parameters
    ----------
    values : array_like of str
        Spectral types; anything else (numbers, None, NaN) is flagged unreadable.

    Returns
    -------
    pandas.DataFrame
        One row per input value, in order, with the fields of :func:`parse_one`.
    """
    codes, uniques = pd.factorize(pd.Series(np.asarray(values, dtype=object)), use_na_sentinel=True)
    parsed = pd.DataFrame([parse_one(u) for u in uniques] + [parse_one(None)])
    codes = np.where(codes < 0, len(uniques), codes)
    return parsed.iloc[codes].reset_index(drop=True)
