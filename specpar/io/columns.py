"""Which input column is which: explicit mappings (``--col OURS=YOURS``) and
the spellings catalogues commonly use, recognised without asking.

:func:`resolve_columns` is applied by :func:`specpar.pipeline.observables.prepare_observables`,
so ``estimate``, ``fit_cluster`` and the worked solutions read columns the same
way. Every mapping is checked before any computing: unknown targets, names not
in the input, two columns ending up with one name, one column claimed twice,
numbers expected where the column holds only text (and the reverse for
``sptype``), and ambiguous catalogue spellings each give one clear error.

The catalogue spellings are the conventions of common astronomical catalogue
services and survey releases (``Vmag``/``e_Vmag``, ``B-V``, ``SpType``, ``Plx``,
``parallax``/``parallax_error``; common practice). Matching ignores case, except
for single lower-case ``u`` and ``g`` (and ``umag``/``gmag``), which name the
SDSS bands rather than Johnson U or Gaia G.
"""
from __future__ import annotations

import re

import pandas as pd

from specpar.core.bands import BAND_NAMES

from ..core.errors import InputError

__all__ = ["resolve_columns", "known_targets", "column_map", "describe_mapping", "NUMERIC_TARGETS"]

#: Non-photometric targets we read (``id`` only names the star in worked solutions and notes).
OTHER_TARGETS = ("id", "sptype", "plx", "e_plx", "period_d", "pmode")
_COLOUR_RE = re.compile(r"^(?:e_)?([A-Za-z]+)-([A-Za-z]+)$")

#: Spellings recognised for each band, in lower case (besides the band name itself).
_BAND_ALIASES = {
    "U": ["umag", "u_mag"], "B": ["bmag", "b_mag"], "V": ["vmag", "v_mag"],
    "Rc": ["rcmag", "rc_mag"], "Ic": ["icmag", "ic_mag"],
    "J": ["jmag", "j_mag"], "H": ["hmag", "h_mag"],
    # 2MASS calls its Ks magnitude 'Kmag' (Skrutskie et al. 2006, AJ 131, 1163)
    "Ks": ["ksmag", "ks_mag", "kmag", "k_mag"],
    "G": ["gmag", "g_mag", "phot_g_mean_mag"], "BP": ["bpmag", "bp_mag", "phot_bp_mean_mag"],
    "RP": ["rpmag", "rp_mag", "phot_rp_mean_mag"],
}
#: Lower-case spellings that are SDSS bands, never Johnson U or Gaia G (exact case only).
_CASE_SENSITIVE = {"u", "g", "umag", "gmag", "u_mag", "g_mag"}
_OTHER_ALIASES = {
    "sptype": ["sptype", "spt", "sp", "sp_type", "spectype", "spec_type", "spectral_type", "sptype_mk"],
    "plx": ["plx", "parallax"],
    "e_plx": ["e_plx", "plx_err", "plx_error", "parallax_error", "e_parallax", "eplx"],
}


def _error_spellings(name: str) -> list:
    """Lower-case spellings of the error column of a column spelled ``name``."""
    n = name.lower()
    out = [f"e_{n}", f"{n}_err", f"{n}_error", f"err_{n}", f"{n}err", f"sig_{n}"]
    if n.endswith("mag"):
        out.append(f"e{n}")
    return out


def known_targets(columns=()) -> list:
    """Our column names: bands, their errors, colours of any two bands (with
    errors), and ``id``, ``sptype``, ``plx``, ``e_plx``, ``period_d``, ``pmode``."""
    return list(BAND_NAMES) + [f"e_{b}" for b in BAND_NAMES] + list(OTHER_TARGETS) + ["X-Y colours"]


def _is_target(name: str) -> bool:
    if name in BAND_NAMES or name in OTHER_TARGETS:
        return True
    if name.startswith("e_") and name[2:] in BAND_NAMES:
        return True
    m = _COLOUR_RE.match(name)
    return bool(m and m[1] in BAND_NAMES and m[2] in BAND_NAMES and m[1] != m[2])


def _numeric_target(name: str) -> bool:
    return name not in ("id", "sptype", "pmode")


NUMERIC_TARGETS = "every target but id, sptype and pmode"


def column_map(pairs) -> dict:
    """``["V=Vmag", ...]`` (the CLI's ``--col``) -> ``{"V": "Vmag", ...}``.

    Raises
    ------
    InputError
        A pair without ``=`` or with an empty side, or one of our names given twice.
    """
    out = {}
    for p in pairs or ():
        if "=" not in p:
            raise InputError(f"--col takes OURS=YOURS (e.g. V=Vmag), got {p!r}")
        ours, theirs = (s.strip() for s in p.split("=", 1))
        if not ours or not theirs:
            raise InputError(f"--col takes OURS=YOURS with both names given (e.g. V=Vmag), got {p!r}")
        if ours in out and out[ours] != theirs:
            raise InputError(f"--col maps {ours} twice ({out[ours]!r} and {theirs!r}); keep one")
        out[ours] = theirs
    return out


def _colour_spellings(a: str, b: str) -> list:
    a, b = a.lower(), b.lower()
    return [f"{a}-{b}", f"{a}m{b}", f"({a}-{b})", f"{a}_{b}", f"{a}-{b}mag", f"{a}_{b}mag"]


def _alias_table(present_lower_case_names) -> dict:
    """target -> list of lower-case spellings to look for."""
    table = {}
    for b in BAND_NAMES:
        # a bare one-letter name is matched in its exact case only (b, v, h ... are
        # latitude, velocity, ... in many tables)
        names = ([b.lower()] if len(b) > 1 else []) + _BAND_ALIASES.get(b, [])
        table[b] = names
        table[f"e_{b}"] = sorted({e for n in names + [b.lower()] for e in _error_spellings(n)})
    table.update({k: list(v) for k, v in _OTHER_ALIASES.items()})
    for a in BAND_NAMES:
        for b in BAND_NAMES:
            if a == b:
                continue
            sp = _colour_spellings(a, b)
            if not any(s in present_lower_case_names for s in sp):
                continue
            table[f"{a}-{b}"] = sp
            table[f"e_{a}-{b}"] = sorted({e for s in sp for e in _error_spellings(s)})
    return table


def _matches(spelling: str, column: str) -> bool:
    if spelling in _CASE_SENSITIVE:
        return column.lower() == spelling and column != spelling.lower() and column[:1].isupper()
    return column.lower() == spelling


def _check_kind(frame, target, source) -> None:
    col = frame[source]
    if isinstance(col, pd.DataFrame):
        raise InputError(f"the input has more than one column named {source!r}; rename them first")
    kind = col.dtype.kind
    if _numeric_target(target):
        if kind in "fiub":
            return
        if pd.to_numeric(col, errors="coerce").notna().any():
            return  # some numbers: the rest are flagged row by row
        text = col.dropna()
        text = text[text.map(lambda v: str(v).strip() not in ("", "--", "nan", "NaN"))]
        if len(text):
            raise InputError(f"column {source!r} given for {target} holds text (e.g. {str(text.iloc[0])[:40]!r}), "
                             f"not numbers; map {target} to a numeric column")
    elif target == "sptype" and kind in "fiub" and col.notna().any():
        raise InputError(f"column {source!r} given for sptype holds numbers, not MK types such as 'K1 III'; "
                         "map sptype to the column with the spectral types")


def _take_one(candidates, target, what, mapping, used) -> None:
    """Map ``target`` to the single candidate column; several are an error listing them."""
    if len(candidates) > 1:
        raise InputError(f"{what}: {', '.join(map(repr, candidates))}; choose one with --col {target}=NAME "
                         f"(Python: columns={{'{target}': NAME}})")
    if candidates:
        mapping[target] = candidates[0]
        used.add(candidates[0])


def _check_explicit(columns: dict, names: list, present: set) -> None:
    """Errors in an explicit mapping: unknown targets, names not in the input, a column mapped twice."""
    unknown = [t for t in columns if not _is_target(str(t))]
    if unknown:
        raise InputError(f"unknown target column(s) {', '.join(map(repr, unknown))} in the column mapping; "
                         f"ours are {', '.join(BAND_NAMES)}, e_<band>, colours such as B-V and e_B-V, "
                         f"{', '.join(OTHER_TARGETS)}")
    missing = [s for s in columns.values() if s not in present]
    if missing:
        raise InputError(f"column(s) {', '.join(map(repr, missing))} named in the column mapping "
                         f"are not in the input; it has {', '.join(names)}")
    by_source = {}
    for t, s in columns.items():
        by_source.setdefault(s, []).append(t)
    twice = {s: ts for s, ts in by_source.items() if len(ts) > 1}
    if twice:
        s, ts = next(iter(twice.items()))
        raise InputError(f"column {s!r} is mapped to {' and '.join(ts)}; map each column once")


def _recognise_values(names: list, present: set, columns: dict, mapping: dict) -> None:
    """Add to ``mapping`` the value columns (not errors) found by their catalogue spellings."""
    used = set(mapping.values()) | set(columns.values())
    lower_names = {n.lower() for n in names}
    for target, spellings in _alias_table(lower_names).items():
        if target.startswith("e_") or target in mapping or target in present:
            continue
        hits = [n for n in names if n not in used and not _is_target(n)
                and any(_matches(sp, n) for sp in spellings)]
        _take_one(hits, target, f"several columns could be {target}", mapping, used)


def _add_error_columns(names: list, present: set, columns: dict, mapping: dict, recognise: bool) -> None:
    """A band, colour or parallax brings its error column along, spelled after the
    column actually used (Vmag -> e_Vmag, Vmag_err ...; parallax -> parallax_error)."""
    used = set(mapping.values()) | set(columns.values())
    lower = {}
    for n in names:
        lower.setdefault(n.lower(), []).append(n)
    for t in [t for t in list(mapping) + [n for n in names if _is_target(n)] if not t.startswith("e_")]:
        if t in ("id", "sptype", "pmode", "period_d"):
            continue
        et = f"e_{t}"
        if et in mapping or et in present or et in columns:
            continue
        src = mapping.get(t, t)
        if src == t and not recognise:
            continue
        found = [n for e in _error_spellings(src) for n in lower.get(e, []) if n not in used]
        _take_one(list(dict.fromkeys(found)), et, f"several columns could be the error of {src} ({et})",
                  mapping, used)


def resolve_columns(frame: pd.DataFrame, columns=None, *, recognise=True):
    """Rename the input's columns to ours; returns ``(frame, mapping)``.

    Parameters
    ----------
    frame : pandas.DataFrame
        The input (not modified).
    columns : dict, optional
        Our name -> the input's name, e.g. ``{"V": "Vmag"}``. A mapped band or
        colour brings its error column along when that is spelled as
        catalogues do (``Vmag`` -> ``e_Vmag``, ``Vmag_err`` ...).
    recognise : bool
        Also recognise catalogue spellings (case-insensitive) for our names
        the input lacks.

    Returns
    -------
    frame : pandas.DataFrame
        Shallow copy with the mapped columns renamed.
    mapping : dict
        Our name -> the input column used, for every renamed column.

    Raises
    ------
    InputError
        Unknown target; a name not in the input (the message lists the columns
        found); one column claimed by two targets; a result name that already
        exists; a column whose content does not fit the target; two or more
        columns matching one target (listed).
    """
    columns = dict(columns or {})
    names = [str(c) for c in frame.columns]
    present = set(names)
    _check_explicit(columns, names, present)
    mapping = {t: s for t, s in columns.items() if t != s}
    if recognise:  # values first; each error column is then found from its value's spelling
        _recognise_values(names, present, columns, mapping)
    _add_error_columns(names, present, columns, mapping, recognise)
    # result names must be unique: a target that exists and is not itself mapped away
    sources = set(mapping.values())
    clash = [t for t in mapping if t in present and t not in sources]
    if clash:
        t = clash[0]
        raise InputError(f"mapping {t}={mapping[t]} gives a second {t!r} column: the input already has "
                         f"one; rename or map away the input's {t!r} first")
    for t, s in mapping.items():
        _check_kind(frame, t, s)
    renamed = frame.rename(columns={s: t for t, s in mapping.items()})
    dup = [c for c in pd.Index(renamed.columns)[pd.Index(renamed.columns).duplicated()]]
    if dup:
        raise InputError(f"the column mapping leaves duplicate columns {', '.join(map(repr, dup))}; "
                         "map each of our names to one column")
    return renamed, mapping


def describe_mapping(mapping: dict) -> str:
    """``"V <- Vmag, e_V <- e_Vmag"`` for summaries; '' if nothing was renamed."""
    return ", ".join(f"{t} <- {s}" for t, s in mapping.items())
