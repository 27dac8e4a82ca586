"""Reading MK spectral types, vectorised over a column (each distinct string is
parsed once).

Numeric type scale: O0 = 0, B0 = 10, A0 = 20, F0 = 30, G0 = 40, K0 = 50,
M0 = 60 (so B2.5 = 12.5). Luminosity classes map to calibration names
``Ia, Iab, Ib, II, III, IV, V``; an intermediate class (``IV-V``, ``III/IV``,
``Ib-II``) keeps both neighbours, a bare ``I`` means Ia-Ib.

Before parsing, the text is normalised the way catalogues need it: Unicode
NFKC (full-width letters and digits, the Roman-numeral characters such as
U+2162 become plain ASCII), and en dash, em dash, minus sign and the other
dash characters become ``-``. Besides the Morgan-Keenan form, the reader
accepts:

* the prefix notation of the Mount Wilson spectroscopic parallaxes, still in
  old catalogues: ``d`` dwarf (V), ``g`` giant (III), ``sg`` and ``c``
  supergiant (I), e.g. ``dK5``, ``gG8``, ``sgG2``, ``cF5``; ``sd`` (subdwarf)
  stays without calibration (Adams et al. 1935, ApJ 81, 187 for d/g/c;
  Morgan, Keenan & Kellman 1943 for their MK equivalents; from memory);
* metallic-line (Am) types ``kA2hF0mF2``: Ca II K-line, hydrogen-line and
  metallic-line types; the hydrogen-line type is the one that follows the
  temperature and is used (Gray & Corbally 2009, "Stellar Spectral
  Classification", Princeton University Press, ch. 5; from memory);
* class suffixes ``IIIab`` (read as III), ranges such as ``Iab-Ib``, and
  ``Ia-0``/``0-Ia`` (read as Ia, the brightest calibrated class, and flagged);
* composite types ``K0III+A2V``: the first (primary) type is used and the row
  is flagged, the companion's light is not modelled.
"""
from __future__ import annotations

import re
import unicodedata

import numpy as np
import pandas as pd

from .flags import Flag

__all__ = ["parse_sptypes", "parse_one", "normalise", "CLASS_ORDER", "TEMPERATURE_CLASSES"]

TEMPERATURE_CLASSES = "OBAFGKM"
#: Luminosity classes that have calibrations, brightest first.
CLASS_ORDER = ("Ia", "Iab", "Ib", "II", "III", "IV", "V")
DEFAULT_SUBTYPE_SIGMA = 0.5  # half a subclass; common practice for MK types

_LUM = r"(?:IA\+|IA0|IAB|IA|IB|III|II|IV|VI|V|I|0)(?:(?:AB|[AB])(?![A-Z]))?"
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

#: Dash-like characters catalogues write in ranges (hyphen, non-breaking hyphen, figure
#: dash, en dash, em dash, horizontal bar, minus sign, small and full-width hyphen-minus).
_DASHES = re.compile("[\u2010\u2011\u2012\u2013\u2014\u2015\u2212\ufe58\ufe63\uff0d]")
#: Mount Wilson prefixes (case-sensitive: lowercase prefix, uppercase class letter).
#: 'd' only before F-M, where it was used; 'dA', 'dB', 'dO' would read as white dwarfs.
_PREFIX = re.compile(r"^\s*(?P<pre>sg|d|g|c)(?=(?:[FGKM]|(?<!d)[OBA])(?:\s*\d|\s*[:?]?$|\s))")
_PREFIX_CLASS = {"d": "V", "g": "III", "sg": "I", "c": "I"}
_PREFIX_NAME = {"d": "dwarf", "g": "giant", "sg": "supergiant", "c": "supergiant"}
#: Am notation: k<K-line type> h<hydrogen type> m<metallic type>, any of them optional but k or h.
_AM = re.compile(r"^\s*K(?P<k>[OBAFGKM]\d*(?:\.\d+)?)?\s*(?:H(?P<h>[OBAFGKM]\d*(?:\.\d+)?))?\s*"
                 r"(?:M(?P<m>[OBAFGKM]\d*(?:\.\d+)?(?:\s*-\s*[OBAFGKM]?\d+(?:\.\d+)?)?))?(?P<tail>.*)$")
#: '+' that starts a second star's type (not 'Ia+' or suffixes such as 'CN+1').
_COMPOSITE = re.compile(r"\+\s*(?=(?:[OBAFGKM]\s*\d|D[ABOQZCX]|W[NC]|(?:sd|d|g|sg|c)[OBAFGKM]\s*\d))")
#: A luminosity-class token standing where no class was read (e.g. after an unknown character).
_STRAY_CLASS = re.compile(r"(?<![A-Z])(?:IA|IAB|IB|III|II|IV|V|I)(?:AB|A|B)?(?![A-Z])")


def normalise(text: str) -> str:
    """Unicode NFKC, dash characters to ``-``, runs of white space to one blank.

    NFKC turns full-width characters and Roman-numeral characters (U+2160-U+217F)
    into ASCII letters and digits (Unicode Standard Annex #15).
    """
    text = unicodedata.normalize("NFKC", text)
    return re.sub(r"\s+", " ", _DASHES.sub("-", text)).strip()


def _lum_classes(text: str) -> tuple[tuple[str, ...], str | None, str]:
    """Calibration classes for a luminosity-class string.

    Returns (classes, reason, remark): classes () with the reason when unusable;
    a remark when part of the class had to be left out (``Ia-0``).
    """
    parts = [p.strip() for p in re.split(r"[-/]", text.replace("IA+", "IAPLUS")) if p.strip()]
    names: list[str] = []
    hyper = []
    for p in parts:
        p = p.replace("IAPLUS", "IA+")
        if p in _HYPERGIANT:
            hyper.append(p)
            continue
        if p == "VI":
            return (), "subdwarf (class VI) has no calibration", ""
        if p in _ROMAN_TO_CLASS:
            base = p
        elif p.endswith("AB") and p[:-2] in _ROMAN_TO_CLASS:
            base = p[:-2]  # IIIab, IIab: between the a and b subdivisions of the class
        else:
            base = p[:-1]  # IIIa/IIIb-style subdivisions
        names.extend(_ROMAN_TO_CLASS.get(base, ()))
    idx = sorted({CLASS_ORDER.index(n) for n in names})
    if hyper and not idx:
        return (), "hypergiant (class 0/Ia+) has no calibration", ""
    if not idx:
        return (), "luminosity class not recognised", ""
    remark = ""
    if hyper:
        shown = re.sub(r"(AB|A|B)(?=$|[-/+])", lambda g: g[0].lower(), text)
        remark = (f"class {shown} reaches class 0 (hypergiants), which has no calibration: read as "
                  f"{CLASS_ORDER[idx[0]]}; the star may be brighter and farther")
    return (CLASS_ORDER[idx[0]], CLASS_ORDER[idx[-1]]), None, remark


def _unreadable(out, why):
    out.update(flags=int(Flag.TYPE_UNREADABLE), detail=why)
    return out


def parse_one(text) -> dict:
    """Parse one spectral-type string.

    The text is normalised first (:func:`normalise`); composite types are read
    as their first (primary) component; Mount Wilson prefixes and Am notation
    are translated (see the module documentation).

    Returns
    -------
    dict
        ``sptnum`` (float, NaN if unreadable), ``e_sptnum`` (subclasses),
        ``lc_bright`` and ``lc_faint`` (calibration class names; equal for a
        single class, '' when unusable), ``flags`` (int) and ``detail`` (str).

    References
    ----------
    Morgan, Keenan & Kellman 1943, "An Atlas of Stellar Spectra"; Adams et al.
    1935, ApJ 81, 187 (Mount Wilson d/g/c prefixes; from memory); Gray &
    Corbally 2009, "Stellar Spectral Classification" (Am k/h/m notation; from
    memory); Unicode Standard Annex #15 (NFKC).
    """
    out = dict(sptnum=np.nan, e_sptnum=np.nan, lc_bright="", lc_faint="", flags=0, detail="")
    if isinstance(text, bytes):
        text = text.decode("utf-8", errors="replace")
    if not isinstance(text, str):
        what = "missing" if text is None or (isinstance(text, float) and np.isnan(text)) else f"{text!r} is not text"
        return _unreadable(out, f"spectral type {what}")
    raw = str(text).strip()
    norm = normalise(raw)
    if not norm or norm.upper() in {"NAN", "NONE", "--", "?"}:
        return _unreadable(out, "spectral type missing")
    comp = _COMPOSITE.search(norm)
    if comp is None:
        return _parse_single(norm, raw, out)
    primary, companion = norm[:comp.start()].strip(), norm[comp.end():].strip()
    res = _parse_single(primary, raw, out)
    if res["flags"] & (Flag.TYPE_UNREADABLE | Flag.TYPE_UNSUPPORTED):
        res["detail"] = f"composite type, primary {primary!r}: " + res["detail"]
        return res
    res["flags"] = int(res["flags"] | Flag.TYPE_COMPOSITE)
    what = (f"composite type {raw!r}: primary {primary!r} used, the light of the companion "
            f"{companion!r} is not modelled")
    res["detail"] = "; ".join(d for d in (what, res["detail"]) if d)
    return res


def _parse_single(norm: str, raw: str, out: dict) -> dict:
    """Parse one (normalised, non-composite) type; ``raw`` is quoted in messages."""
    out = dict(out)
    details = []
    pre, norm = _strip_prefix(norm)
    norm, am_star = _am_type(norm, details)
    spaced = norm.replace("?", ":")  # '?' marks uncertainty like ':'
    spaced = re.sub(r"\s*:+", ":", spaced)
    s = spaced.upper()
    if _UNSUPPORTED.match(s.replace(" ", "")):
        out.update(flags=int(Flag.TYPE_UNSUPPORTED), detail=f"type {raw!r} belongs to a family without calibration")
        return out
    m = _PATTERN.match(s)
    if not m:
        return _unreadable(out, f"cannot read spectral type {raw!r}: it does not start with a temperature "
                                f"class {'/'.join(TEMPERATURE_CLASSES)} and a subtype")
    temperature = _temperature(m, raw)
    if isinstance(temperature, str):
        return _unreadable(out, temperature)
    num, e_sub, flags = temperature
    rest = spaced[m.start("rest"):].strip() if len(spaced) == len(s) else (m["rest"] or "").strip()
    if m["unc1"] or rest.startswith(":"):
        flags |= Flag.TYPE_UNCERTAIN
        e_sub = max(e_sub, 1.0)
        rest = rest.lstrip(": ")
    lumin = _luminosity(m["lum"], rest, raw, pre, details)
    if isinstance(lumin, dict):
        out.update(lumin)
        return out
    if isinstance(lumin, str):
        return _unreadable(out, lumin)
    classes, lum_flags = lumin
    flags |= lum_flags
    if am_star:
        flags |= Flag.PECULIAR
    if rest:
        flags |= Flag.PECULIAR
        details.append(f"suffix {rest!r}")
    out.update(sptnum=num, e_sptnum=e_sub, lc_bright=classes[0], lc_faint=classes[1],
               flags=int(flags), detail="; ".join(details))
    return out


def _strip_prefix(norm: str):
    """Mount Wilson prefix (``d``, ``g``, ``sg``, ...) and the rest of the type."""
    prefix = _PREFIX.match(norm)
    if not prefix:
        return None, norm
    return prefix["pre"], norm[prefix.end():].strip()


def _am_type(norm: str, details: list):
    """An Am type (K-line, hydrogen, metallic types) read as its hydrogen-line type
    (else its K-line type), Gray & Corbally 2009; returns (type, is Am)."""
    am = _AM.match(norm.upper())
    if not (am and am["k"] and (am["h"] or am["m"])):
        return norm, False
    used = am["h"] or am["k"]
    parts = ", ".join(f"{n} {am[g]}" for n, g in (("K-line", "k"), ("hydrogen", "h"), ("metallic", "m"))
                      if am[g])
    details.append(f"Am type ({parts}): the {'hydrogen-line' if am['h'] else 'K-line'} type {used} "
                   "is used (Gray & Corbally 2009)")
    return used + (" " + am["tail"].strip() if am["tail"].strip() else ""), True


def _temperature(m, raw: str):
    """(numeric type, its uncertainty, flags) from the matched type, or the reason it is unreadable."""
    flags = 0
    base = TEMPERATURE_CLASSES.index(m["cls"]) * 10.0
    if m["sub"] is None:
        sub, e_sub = 5.0, 10.0 / np.sqrt(12.0)
        flags |= Flag.NO_SUBTYPE
    else:
        sub, e_sub = float(m["sub"]), DEFAULT_SUBTYPE_SIGMA
        if sub >= 10:
            return f"subtype {m['sub']} in {raw!r} is not 0-9.9"
    num = base + sub
    if m["sub2"] is not None:
        base2 = TEMPERATURE_CLASSES.index(m["cls2"]) * 10.0 if m["cls2"] else base
        num2 = base2 + float(m["sub2"])
        if float(m["sub2"]) >= 10 or num2 < num:
            return f"type range in {raw!r} is not increasing"
        half = (num2 - num) / 2.0
        num, e_sub = num + half, max(e_sub, half)
    return num, e_sub, flags


def _luminosity(lum, rest: str, raw: str, pre, details: list):
    """((bright, faint) classes, flags); or the reason the type is unreadable (str); or the
    fields of an unsupported class (dict)."""
    flags = 0
    if lum is None:
        if rest and rest[0].isalpha() and not re.match(r"^(E|N|NN|P|VAR|V|K|M|S|W|SH|SHELL|PEC)\b", rest.upper()):
            return (f"cannot read {rest!r} in {raw!r}: neither a luminosity class "
                    "(Ia, Iab, Ib, II, III, IV, V) nor a known peculiarity code")
        if rest and not rest.startswith("(") and _STRAY_CLASS.search(rest.upper()):
            return (f"cannot read {rest!r} in {raw!r}: it looks like a luminosity class "
                    "but does not follow the type as one")
        if pre:
            details.insert(0, f"prefix '{pre}' ({_PREFIX_NAME[pre]}, Mount Wilson notation) read as class "
                              f"{_PREFIX_CLASS[pre]}")
            return _lum_pair(_PREFIX_CLASS[pre]), flags
        return ("V", "V"), flags | Flag.NO_LUMCLASS
    classes, why, remark = _lum_classes(lum.replace(" ", ""))
    if why:
        return {"flags": int(Flag.TYPE_UNSUPPORTED), "detail": f"{why}: {raw!r}"}
    if remark:
        flags |= Flag.LUMCLASS_NEAREST
        details.append(remark)
    if pre and _lum_pair(_PREFIX_CLASS[pre]) != classes:
        details.append(f"prefix '{pre}' ({_PREFIX_NAME[pre]}) disagrees with class {lum}: class {lum} used")
    return classes, flags


def _lum_pair(roman: str) -> tuple[str, str]:
    names = _ROMAN_TO_CLASS[roman.upper()]
    return names[0], names[-1]


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
