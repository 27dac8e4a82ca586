"""Photometry of the input rows as observables (magnitudes and colours with
their errors, rejections and default errors), and the spectral types parsed
once per distinct value.

:func:`read_photometry` reads the photometry only (for callers without types,
such as the cluster fit); :func:`prepare_observables` adds the types, exactly
as :func:`specpar.estimate` sees them.
"""
from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..core.bands import BAND_NAMES, BANDS, band_index
from ..core.errors import InputError
from ..core.flags import Flag
from ..core.solver import Observables
from ..core.sptype import parse_sptypes
from specpar.io.columns import resolve_columns
from .frames import join_detail, numeric_values
from .options import MAX_MAG_ERROR

__all__ = ["PreparedInput", "read_photometry", "parse_types", "prepare_observables", "MAG_RANGE",
           "COLOUR_RANGE", "COLOUR_CONFLICT_SIGMA", "NOTE_ECHO_MAX"]

#: Plausible magnitudes (mag); values outside are rejected as input errors. The
#: brightest stars are near -1.5 and the deepest catalogues end near 30 (common practice,
#: with a margin for other bands).
MAG_RANGE = (-5.0, 35.0)
#: Plausible colours (mag); values outside are rejected as input errors (common practice,
#: with a wide margin: the reddest normal stars have B-V near 2, V-Ks near 10).
COLOUR_RANGE = (-3.0, 15.0)
#: A colour column that differs from the colour of its two magnitudes in the
#: same row by more than this many combined sigmas is noted (the magnitudes are used).
COLOUR_CONFLICT_SIGMA = 3.0
#: Longest reason text echoed per spectral type in ``note`` (characters); a
#: 50 KB "type" would otherwise be copied into every note that quotes it.
NOTE_ECHO_MAX = 200
_COLOUR_RE = re.compile(r"^([A-Za-z]+)-([A-Za-z]+)$")


@dataclass
class PreparedInput:
    """Input rows turned into observables, with flags and the parsed types."""

    frame: pd.DataFrame
    obs: Observables
    obs_names: list
    flags: np.ndarray
    rejected: np.ndarray  # (N,) bit mask over observables
    defaulted: np.ndarray
    parsed: pd.DataFrame = None  # distinct types parsed (None from read_photometry)
    parse_codes: np.ndarray = None  # (N,) row -> row of parsed
    bad_error: np.ndarray = None  # (N,) bit mask: magnitude not used, its error is unusable
    bad_error_large: np.ndarray = None  # (N,) the part of bad_error whose error is above max_error
    detail: np.ndarray = None  # (N,) per-row text (e.g. conflicting colour columns)
    mapping: dict = None  # our column name -> input column used


def _observable_columns(frame: pd.DataFrame):
    """(name, L row) for every magnitude and colour column present."""
    out = []
    for b in BAND_NAMES:
        if b in frame.columns:
            row = np.zeros(len(BANDS))
            row[band_index(b)] = 1.0
            out.append((b, row))
    for col in frame.columns:
        m = _COLOUR_RE.match(str(col))
        if m and m[1] in BAND_NAMES and m[2] in BAND_NAMES and m[1] != m[2]:
            row = np.zeros(len(BANDS))
            row[band_index(m[1])] += 1.0
            row[band_index(m[2])] -= 1.0
            out.append((str(col), row))
    return out


def _shorten_details(details):
    """Cut per-type reasons (which quote the type) to :data:`NOTE_ECHO_MAX` characters."""
    out = np.asarray(details, dtype=object).copy()
    for i, d in enumerate(out):  # once per distinct type, not per row
        if isinstance(d, str) and len(d) > NOTE_ECHO_MAX:
            out[i] = d[:NOTE_ECHO_MAX] + f"... [{len(d)} characters]"
    return out


def _read_column(frame, name, is_colour, opts, max_error):
    """One observable: values, errors and the masks of rejected values, unusable errors
    (and the part of them above ``max_error``) and defaulted errors."""
    N = len(frame)
    vals, bad = numeric_values(frame[name])
    lo, hi = COLOUR_RANGE if is_colour else MAG_RANGE
    with np.errstate(invalid="ignore"):
        bad |= (vals < lo) | (vals > hi)
    vals = np.where(bad, np.nan, vals)
    ecol = f"e_{name}"
    elarge = np.zeros(N, bool)
    if ecol in frame.columns:
        errs, ebad = numeric_values(frame[ecol])  # ebad: given, but not a finite number
        with np.errstate(invalid="ignore"):
            elarge = np.isfinite(errs) & (errs > max_error)
            ebad |= (errs <= 0) | elarge
        ebad &= np.isfinite(vals)  # (only matters where the magnitude is given)
        errs = np.where(ebad, np.nan, errs)
        vals = np.where(ebad, np.nan, vals)
    else:
        errs = np.full(N, np.nan)
        ebad = np.zeros(N, bool)
    with np.errstate(invalid="ignore"):
        need = np.isfinite(vals) & ~(errs > 0)
    errs = np.where(need, opts.default_error, np.where(errs > 0, errs, np.nan))
    return vals, errs, bad, ebad, elarge & ebad, need


def _colour_conflicts(specs, y, sig, defaulted):
    """Drop colours whose two magnitudes are both measured (in place); note the
    rows where they disagree beyond :data:`COLOUR_CONFLICT_SIGMA`."""
    N = y.shape[0]
    mag_ok = {name: np.isfinite(y[:, k]) for k, (name, row) in enumerate(specs) if row.sum() != 0}
    kof = {name: k for k, (name, _) in enumerate(specs)}
    detail = np.full(N, "", dtype=object)
    for k, (name, row) in enumerate(specs):
        m = _COLOUR_RE.match(name)
        if not (m and m[1] in mag_ok and m[2] in mag_ok):
            continue
        both = mag_ok[m[1]] & mag_ok[m[2]]
        k1, k2 = kof[m[1]], kof[m[2]]
        diff = y[:, k] - (y[:, k1] - y[:, k2])
        with np.errstate(invalid="ignore"):
            s_comb = np.sqrt(sig[:, k] ** 2 + sig[:, k1] ** 2 + sig[:, k2] ** 2)
            conflict = both & (np.abs(diff) > COLOUR_CONFLICT_SIGMA * s_comb)
        if conflict.any():
            idx = np.flatnonzero(conflict)
            text = pd.Series([f"{name} given {y[i, k]:.3f} differs from {m[1]} - {m[2]} = "
                              f"{y[i, k1] - y[i, k2]:.3f} by {diff[i]:+.3f} mag "
                              f"({abs(diff[i]) / s_comb[i]:.1f} sigma): {m[1]} and {m[2]} used"
                              for i in idx], dtype=object).to_numpy()
            detail[idx] = join_detail(detail[idx], text)
        y[both, k] = np.nan
        defaulted[both] &= ~np.int64(1 << k)
    return detail


def _photometry(frame, mapping, opts, input_columns) -> PreparedInput:
    """Observables of an input already in our column names."""
    N = len(frame)
    specs = _observable_columns(frame)
    if not specs:
        raise InputError("the input has no photometry columns; expected any of "
                         f"{', '.join(BAND_NAMES)} or colours such as B-V (map yours with --col); "
                         f"the input has {', '.join(map(str, input_columns))}")
    K = len(specs)
    y, sig = np.full((N, K), np.nan), np.full((N, K), np.nan)
    masks = {k: np.zeros(N, np.int64) for k in ("rejected", "defaulted", "bad_error", "bad_error_large")}
    max_error = getattr(opts, "max_error", MAX_MAG_ERROR)
    for k, (name, row) in enumerate(specs):
        y[:, k], sig[:, k], bad, ebad, elarge, need = _read_column(frame, name, row.sum() == 0, opts, max_error)
        for key, mask in (("rejected", bad), ("bad_error", ebad), ("bad_error_large", elarge),
                          ("defaulted", need)):
            masks[key] |= mask.astype(np.int64) << k
    detail = _colour_conflicts(specs, y, sig, masks["defaulted"])
    flags = np.zeros(N, np.int64)
    flags |= np.where((masks["rejected"] | masks["bad_error"]) != 0, int(Flag.PHOT_REJECTED), 0)
    flags |= np.where(masks["defaulted"] != 0, int(Flag.ERROR_DEFAULTED), 0)
    L = np.stack([row for _, row in specs])
    return PreparedInput(frame, Observables(y, sig, L), [n for n, _ in specs], flags, masks["rejected"],
                         masks["defaulted"], bad_error=masks["bad_error"],
                         bad_error_large=masks["bad_error_large"], detail=detail, mapping=mapping)


def read_photometry(frame_in: pd.DataFrame, opts) -> PreparedInput:
    """Photometry only (no spectral types): observables, rejections, default errors.

    ``opts`` needs ``columns``, ``default_error`` and ``max_error`` (an
    :class:`~specpar.pipeline.options.EstimateOptions`).
    """
    frame, mapping = resolve_columns(frame_in, opts.columns)
    return _photometry(frame, mapping, opts, frame_in.columns)


def parse_types(prep: PreparedInput) -> PreparedInput:
    """Parse the ``sptype`` column once per distinct value into ``prep.parsed``;
    ``prep.parse_codes`` maps each row to its entry (missing types: the last)."""
    codes, uniques = pd.factorize(prep.frame["sptype"], use_na_sentinel=True)
    parsed = parse_sptypes(list(uniques) + [None])
    parsed["detail"] = _shorten_details(parsed["detail"].to_numpy(object))
    prep.parsed, prep.parse_codes = parsed, np.where(codes < 0, len(uniques), codes)
    return prep


def prepare_observables(frame_in: pd.DataFrame, opts) -> PreparedInput:
    """Read photometry and spectral types exactly as :func:`specpar.estimate` does.

    Used by the worked solutions and the cluster fit so that every part of
    specpar sees the same observables, rejections and default errors. Rows of
    pulsating stars (a ``period_d`` column) need no type.
    """
    frame, mapping = resolve_columns(frame_in, opts.columns)
    if "sptype" not in frame.columns:
        if "period_d" not in frame.columns:
            raise InputError("the input has no 'sptype' column; name yours with columns={'sptype': ...} "
                             f"(CLI: --col sptype=YOURNAME); the input has {', '.join(map(str, frame_in.columns))}")
        frame["sptype"] = None  # pulsating stars only: the period replaces the type
    return parse_types(_photometry(frame, mapping, opts, frame_in.columns))
