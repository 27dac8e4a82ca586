"""What the step builders read: the estimate result by column, the observables as the solver saw
them, the calibration values per class, the extinction coefficients, and which calibration rows
a type was read from.

References
----------
Fritsch, F. N. & Carlson, R. E. 1980, SIAM J. Numer. Anal. 17, 238 (monotone cubic interpolation
between calibration rows).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from astropy.table import Table

from specpar.core.bands import BAND_NAMES
from specpar.calib.tables import CalibrationSet, default_calibrations
from specpar.calib.extinction import coefficients_at
from specpar.pipeline.frames import to_frame
from specpar.pipeline.observables import prepare_observables
from specpar.pipeline.options import EstimateOptions
from specpar.core.sptype import TEMPERATURE_CLASSES

from .model import FitRow
from .options import DEFAULT_DECIMALS

__all__ = ["ResultColumns", "Context", "build_context", "type_name", "describe_rows", "observations",
           "used_observables", "fit_rows", "cls_of"]


def type_name(sptnum: float) -> str:
    """The MK temperature type of a numeric type (``25.0`` -> ``"A5"``)."""
    k = int(np.clip(sptnum // 10, 0, len(TEMPERATURE_CLASSES) - 1))
    return f"{TEMPERATURE_CLASSES[k]}{sptnum - 10 * k:g}"


def describe_rows(cals: CalibrationSet, lc: str, sptnum: float):
    """(readable description of the rows used, list of row sources) for one class."""
    cal = cals.by_class.get(lc)
    if cal is None:
        return f"calibration '{lc}' (see the output metadata)", []
    t = cal.table
    x = np.asarray(t["sptnum"], dtype=float)
    mv = np.ma.filled(np.ma.asarray(t["M_V"], dtype=float), np.nan)
    ok = np.flatnonzero(np.isfinite(mv))
    where = cal.path or cal.name
    exact = ok[np.isclose(x[ok], sptnum, rtol=0, atol=1e-9)]
    if exact.size:
        rows = exact[:1]
        desc = f"{where}, row {t['sptype'][rows[0]]}"
    else:
        hi = np.searchsorted(x[ok], sptnum)
        if hi == 0 or hi == ok.size:
            return f"{where}: type outside the table", []
        rows = ok[[hi - 1, hi]]
        desc = (f"{where}, interpolated between rows {t['sptype'][rows[0]]} and {t['sptype'][rows[1]]} "
                "(monotone cubic, Fritsch & Carlson 1980)")
    srcs = list(dict.fromkeys(str(t["source"][r]) for r in rows)) if "source" in t.colnames else []
    return desc, srcs


def observations(table, opts: EstimateOptions):
    """The observables as the solver saw them (values, errors, band combinations) and the
    input frame under our column names (the column mapping applied exactly as estimate applies it)."""
    prep = prepare_observables(to_frame(table), opts)
    return prep.obs, prep.obs_names, prep.frame


class ResultColumns:
    """Column access by name for an estimate result (astropy Table or pandas DataFrame)."""

    def __init__(self, result):
        names = result.colnames if isinstance(result, Table) else list(result.columns)
        self._cols = {n: np.asarray(result[n]) for n in names}
        self.colnames = names
        self.meta = (result.meta if isinstance(result, Table) else result.attrs).get("specpar", {})

    def __getitem__(self, name):
        return self._cols[name]

    def __len__(self):
        return len(self._cols[self.colnames[0]]) if self.colnames else 0


@dataclass
class Context:
    """Everything the step builders read for a table: the result, calibrations, observables, colours per
    class, extinction coefficients, method."""
    result: ResultColumns
    cals: CalibrationSet
    obs: object
    obs_names: list
    colours: np.ndarray
    per_class: dict
    coef: np.ndarray
    law: str
    law_ref: str
    method: str
    n_draws: int
    frame: object = None  # input rows under our column names (id, sptype ...)
    decimals: int = DEFAULT_DECIMALS


def used_observables(ctx, i):
    """Indexes of the observables the fit used for row i."""
    L = ctx.obs.L
    out = []
    for k, name in enumerate(ctx.obs_names):
        if not np.isfinite(ctx.obs.y[i, k]):
            continue
        bands = [BAND_NAMES[b] for b in np.flatnonzero(L[k])]
        if all(np.isfinite(float(ctx.result[f"M_{b}"][i])) for b in bands):
            out.append(k)
    return out


def fit_rows(ctx, i, used):
    """One :class:`FitRow` per observable the fit of row ``i`` used: value, model terms and residual."""
    r = ctx.result
    M = np.array([float(r[f"M_{b}"][i]) if f"M_{b}" in r.colnames else np.nan for b in BAND_NAMES])
    A = np.array([float(r[f"A_{b}"][i]) if f"A_{b}" in r.colnames else np.nan for b in BAND_NAMES])
    dm = float(r["dm"][i])
    rows = []
    for k in used:
        Lk = ctx.obs.L[k]
        nz = Lk != 0
        absmag = float(Lk[nz] @ M[nz])
        ext = float(Lk[nz] @ A[nz])
        coef = float(Lk @ ctx.coef[i])
        is_mag = Lk.sum() != 0
        y = float(ctx.obs.y[i, k])
        dmb = y - absmag - ext if is_mag else np.nan
        rows.append(FitRow(ctx.obs_names[k], y, float(ctx.obs.sigma[i, k]), absmag, coef, ext, dmb,
                           y - absmag - ext - dm * Lk.sum(), bool(is_mag), dm))
    return rows


def cls_of(ctx, i):
    """Luminosity class whose calibration gives the colour scatter of row i (None if none)."""
    lc = str(ctx.result["lum_class"][i]).split("-")[0]
    return lc if lc in ctx.per_class else None


def build_context(table, result, options) -> Context:
    """The :class:`Context` of an estimate ``result`` of ``table`` under the estimate ``options``."""
    opts = EstimateOptions(**{k: v for k, v in options.items() if k != "calibrations"},
                           calibrations=tuple(options.get("calibrations") or ()))
    cals = CalibrationSet(opts.calibrations) if opts.calibrations else default_calibrations()
    obs, names, frame = observations(table, opts)
    sptnum = np.asarray(result["sptnum"], dtype=float)
    lum = np.asarray(result["lum_class"], dtype=str)
    lcb = np.array([s.split("-")[0] for s in lum], dtype=object)
    lcf = np.array([s.split("-")[-1] for s in lum], dtype=object)
    colours = cals.evaluate(sptnum, lcb, lcf).colours
    per_class = {}
    for lc in cals.by_class:  # small loop over classes; each evaluated for all stars at once
        v = cals.by_class[lc].evaluate(sptnum)
        per_class[lc] = np.column_stack([v.absmag[:, 0], v.colours])
    meta = result.meta
    rv = np.nan_to_num(np.asarray(result["rv"], dtype=float), nan=opts.rv)
    coef, _ = coefficients_at(opts.law, rv)
    return Context(result, cals, obs, names, colours, per_class, coef, opts.law,
                    meta.get("extinction_law_reference", ""), opts.method, int(opts.n_draws), frame)
