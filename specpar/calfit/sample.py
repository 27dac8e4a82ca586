"""Selecting and cleaning calibrators: the input table read into arrays, every
row given the reason it cannot be used (or none), and the star groups
(luminosity class x temperature class) that fits and checks work on.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from astropy.table import Table

from specpar.core.errors import InputError
from specpar.core.sptype import TEMPERATURE_CLASSES, parse_sptypes

__all__ = ["UBV_ERRORS", "FIT_CLASSES", "LOW_RED_PLX", "NEAR_SUBTYPES", "group_labels",
           "default_scale_height", "input_frame", "Sample", "select_calibrators", "count_near"]

#: Photometric errors assumed for bright-star photoelectric UBV (mag); common practice.
UBV_ERRORS = {"V": 0.02, "B-V": 0.015, "U-B": 0.02}

#: Luminosity classes that have calibration tables, so that a fit of them can replace one.
FIT_CLASSES = ("V", "IV", "III", "II", "Ib", "Iab", "Ia")

#: Low-reddening selection for intrinsic colours: parallax above this (mas), i.e.
#: within 100 pc, inside the Local Bubble where E(B-V) is ~0.01 (common practice).
LOW_RED_PLX = 10.0

#: Stars within this many subtypes of a tabulated type count as its neighbours (common practice:
#: MK types are given to about one subtype).
NEAR_SUBTYPES = 1.5

#: Widest spectral-type uncertainty (subtypes) of a calibrator (common practice, as above).
MAX_TYPE_ERROR = 1.0

#: Bit of ``parse_sptypes`` flags saying the class was not given but assumed (flag NO_LUMCLASS).
_NO_LUMCLASS = 1


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
    lab = np.where((p["flags"].to_numpy(np.int64) & _NO_LUMCLASS) != 0, "", lab)
    return pd.DataFrame({"lclass": lab, "tclass": tc, "sptnum": x})


def default_scale_height(sptnum, lclass):
    """Exponential-disk scale height (pc) of a stellar group, by type and class.

    Typical values, from memory (e.g. Mihalas & Binney 1981, Galactic
    Astronomy, Table 4-16): O-B 60 pc, A 115 pc, F 190 pc, G-M 300 pc; young
    bright giants and supergiants 60 pc up to F and 100 pc later.

    References
    ----------
    Mihalas, D. & Binney, J. 1981, Galactic Astronomy, 2nd ed., Freeman (from memory).
    """
    x = np.asarray(sptnum, dtype=float)
    h = np.select([x < 20, x < 30, x < 40], [60.0, 115.0, 190.0], 300.0)
    young = np.isin(np.asarray(lclass, dtype=object), ["II", "Ib", "Iab", "Ia"])
    return np.where(young, np.where(x < 40, 60.0, 100.0), h)


def count_near(x, nodes) -> np.ndarray:
    """Number of the types ``x`` within :data:`NEAR_SUBTYPES` of each node."""
    return np.array([np.sum(np.abs(x - xn) <= NEAR_SUBTYPES) for xn in nodes])


def _num_col(frame, name):
    if name not in frame.columns:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[name], errors="coerce").to_numpy(float)


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


def input_frame(table, columns) -> pd.DataFrame:
    """The stars as a data frame with our column names (``columns``: ours -> theirs).

    Raises :class:`~specpar.core.errors.InputError` when a named column or a
    needed one is missing.
    """
    if isinstance(table, Table):
        frame = _masked_to_frame(table)
    elif isinstance(table, pd.DataFrame):
        frame = table
    else:
        raise TypeError(f"calibrate takes an astropy Table or a pandas DataFrame, not {type(table).__name__}")
    rename = {theirs: ours for ours, theirs in (columns or {}).items()}
    missing = [t for t in rename if t not in frame.columns]
    if missing:
        raise InputError(f"column(s) {', '.join(missing)} named in columns= are not in the input; "
                         f"it has {', '.join(map(str, frame.columns))}")
    frame = frame.rename(columns=rename)
    need = [c for c in ("sptype", "V", "B-V", "plx", "e_plx") if c not in frame.columns]
    if need:
        raise InputError(f"calibrate needs columns sptype, V, B-V, plx, e_plx (mas); missing "
                         f"{', '.join(need)}. Name yours with columns={{'V': 'Vmag', ...}} "
                         f"(CLI: --col V=Vmag)")
    return frame.reset_index(drop=True)


@dataclass
class Sample:
    """The calibrators as arrays over the input rows, with the reason a row is not
    used (``""`` while it is usable)."""

    frame: pd.DataFrame
    lclass: np.ndarray
    sptnum: np.ndarray
    e_sptnum: np.ndarray
    V: np.ndarray
    bv: np.ndarray
    ub: np.ndarray
    plx: np.ndarray
    e_plx: np.ndarray
    glat: np.ndarray
    reason: np.ndarray

    def exclude(self, mask, text) -> None:
        """Give ``text`` as the reason to the rows of ``mask`` that have none yet."""
        self.reason[mask & (self.reason == "")] = text

    def usable(self, lclass) -> np.ndarray:
        """Rows of luminosity class ``lclass`` not excluded."""
        return (self.reason == "") & (self.lclass == lclass)


def _check_classes(classes) -> tuple:
    want = tuple(classes) if classes else FIT_CLASSES
    bad = [c for c in want if c not in FIT_CLASSES]
    if bad:
        raise InputError(f"classes {bad} are not luminosity classes with calibration tables; "
                         f"choose from {', '.join(FIT_CLASSES)}")
    return want


def select_calibrators(frame: pd.DataFrame, classes=None, v_limit=None) -> tuple:
    """Read the stars of ``frame`` and exclude those a fit cannot use, with the reason.

    Returns ``(sample, classes)``: the :class:`Sample` and the luminosity classes
    to fit (``classes`` checked against :data:`FIT_CLASSES`; all of them if empty).
    """
    n = len(frame)
    parsed = parse_sptypes(frame["sptype"].to_numpy(object))
    labels = group_labels(frame["sptype"].to_numpy(object))
    s = Sample(frame, labels["lclass"].to_numpy(object), parsed["sptnum"].to_numpy(float),
               parsed["e_sptnum"].to_numpy(float), _num_col(frame, "V"), _num_col(frame, "B-V"),
               _num_col(frame, "U-B"), _num_col(frame, "plx"), _num_col(frame, "e_plx"),
               _num_col(frame, "glat"), np.full(n, "", dtype=object))
    s.exclude(~np.isfinite(s.sptnum), "spectral type not readable or not calibratable")
    s.exclude(s.lclass == "", "no luminosity class in the spectral type")
    s.exclude(np.char.find(s.lclass.astype(str), "-") >= 0,
              "intermediate luminosity class (fitted only as single classes)")
    s.exclude(s.e_sptnum > MAX_TYPE_ERROR, "spectral type uncertain by more than one subtype")
    s.exclude(~np.isfinite(s.V), "no V magnitude")
    s.exclude(~np.isfinite(s.bv), "no B-V colour")
    s.exclude(~np.isfinite(s.plx) | ~(s.e_plx > 0), "no parallax or no positive parallax error")
    if v_limit is not None:
        s.exclude(s.V > v_limit, f"fainter than v_limit = {v_limit:g}")
    want = _check_classes(classes)
    s.exclude(~np.isin(s.lclass, list(want)), "luminosity class not requested")
    return s, want
