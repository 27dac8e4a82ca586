"""Classical Cepheids as a source of absolute magnitudes (Leavitt law).

A row of the input table with a value in ``period_d`` (pulsation period in
days) is treated as a classical Cepheid: its absolute magnitudes come from
period-luminosity (PL) relations instead of a spectral type, and it then goes
through the same solver, error propagation and output columns as every other
star (:func:`specpar.estimate`). An optional column ``pmode`` gives the
pulsation mode: ``F``, ``FU`` or ``0`` for the fundamental mode (also assumed
where the column or the value is missing), ``1O``, ``FO``, ``O1`` or ``1`` for
the first overtone (case ignored). First-overtone periods are converted to
the fundamental period P0 before any relation is read.
The relations and their error model are described in
:mod:`specpar.calib.cepheid_pl`; this module finds the Cepheid rows, reads
their periods and modes, flags what cannot be used and hands the relations'
values to the estimate as a :class:`~specpar.pipeline.sources.MagnitudeSource`.

References
----------
Alcock, C. et al. 1995, AJ 109, 1653 (first-overtone to fundamental period,
from memory); the relations' references are in :mod:`specpar.calib.cepheid_pl`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..calib.cepheid_pl import (BAND_RELATIONS, RANGE_TOLERANCE, fundamental_period, load_pl_calibration,
                                pl_calibration_values)
from ..calib.tables import CalibrationValues
from ..core.flags import Flag
from ..core.solver import derivative_modes
from .frames import join_all, numeric_values
from .sources import MagnitudeSource, SourceRows

__all__ = ["PERIOD_COLUMN", "MODE_COLUMN", "MODES", "CepheidRows", "CepheidSource", "cepheid_calibration",
           "load_pl_calibration"]

PERIOD_COLUMN = "period_d"
MODE_COLUMN = "pmode"
#: Accepted spellings of the pulsation mode (upper-cased, stripped) -> 0 fundamental, 1 first overtone.
MODES = {"F": 0, "FU": 0, "0": 0, "1O": 1, "FO": 1, "O1": 1, "1": 1}
#: ``lum_class`` of the rows whose magnitudes come from the period-luminosity relations.
LABEL = "Cep"


@dataclass
class CepheidRows:
    """What :func:`cepheid_calibration` hands to the estimate pipeline.

    Attributes
    ----------
    mask : (N,) bool
        Rows handled as Cepheids (a period was given, valid or not).
    values : CalibrationValues
        For the masked rows only, in order.
    flags : (N,) int64
        PERIOD_OUT_OF_RANGE, PERIOD_INVALID, MODE_UNKNOWN bits.
    detail : (N,) object
        Readable reason per row ('' when nothing to say).
    label : str
        Goes into ``lum_class`` for these rows.
    e_mv : (n_cep,) float
        Total 1-sigma uncertainty of M_V (scatter, zero point and slope);
        ``values.var_mv`` alone is only the common part (the W_VI scatter).
    period0_d : (n_cep,) float
        Fundamental-mode period used (d), NaN where not computable.
    """

    mask: np.ndarray
    values: CalibrationValues
    flags: np.ndarray
    detail: np.ndarray
    label: str = LABEL
    e_mv: np.ndarray | None = None
    period0_d: np.ndarray | None = None



def _periods(series: pd.Series):
    """Period values, rows that carry a period, rows whose period is unusable."""
    vals, bad = numeric_values(series)
    given = np.isfinite(vals) | bad
    with np.errstate(invalid="ignore"):
        invalid = bad | (given & ~(vals > 0))
    return np.where(invalid, np.nan, vals), given, invalid


def _modes(series: pd.Series | None, n: int):
    """Mode code per row: 0 fundamental (also when not given), 1 first overtone, -1 unknown."""
    if series is None:
        return np.zeros(n, int)
    codes, uniques = pd.factorize(series.astype(object), use_na_sentinel=True)

    def code(v):
        if isinstance(v, (float, np.floating)) and float(v).is_integer():
            v = int(v)
        text = str(v).strip().upper()
        return 0 if text in ("", "NAN", "NONE", "--") else MODES.get(text, -1)

    table = np.array([code(v) for v in uniques] + [0], dtype=int)  # sentinel -1 -> last entry
    return table[np.where(codes < 0, len(uniques), codes)]



def _range_details(cal, logp0, computable):
    """Bit mask per row of bands outside their relations' period range, and the sentences."""
    bands = list(BAND_RELATIONS)
    out = np.zeros(logp0.size, np.int64)
    for k, b in enumerate(bands):
        inside = np.logical_and.reduce([cal.relations[r].inside(logp0) for r in BAND_RELATIONS[b]])
        out |= np.where(computable & ~inside, 1 << k, 0)
    text = np.full(logp0.size, "", dtype=object)
    for combo in np.unique(out[out != 0]):
        names = [b for k, b in enumerate(bands) if combo >> k & 1]
        lims = {b: (max(cal.relations[r].logp_min for r in BAND_RELATIONS[b]),
                    min(cal.relations[r].logp_max for r in BAND_RELATIONS[b])) for b in names}
        ranges = ", ".join(f"{b} {lo:.3f}-{hi:.3f} (P0 {10 ** lo:.3g}-{10 ** hi:.3g} d)"
                           for b, (lo, hi) in lims.items())
        sel = out == combo
        every = len(names) == len(bands)
        head = "no PL relation holds at log10 P0 = " if every else "log10 P0 = "
        tail = (f": not calibrated for {', '.join(names)} (valid log10 P0: {ranges}); "
                f"{'the period is' if every else 'those bands are'} not extrapolated")
        text[sel] = head + np.char.mod("%.3f", logp0[sel]).astype(object) + tail
    return out, text



def _fundamental_logp(cal, period, given, invalid, mode):
    """log10 P0 per row (NaN where not computable), P0, and the masks of unknown modes,
    first overtones and overtone periods outside the conversion's range."""
    unknown = given & ~invalid & (mode < 0)
    overtone = given & (mode == 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        p0 = np.where(overtone, fundamental_period(period, cal), period)
        logp0 = np.where(unknown, np.nan, np.log10(p0))
    lo, hi = cal.overtone_range
    with np.errstate(invalid="ignore"):
        conv_out = overtone & np.isfinite(logp0) & ((logp0 < lo - RANGE_TOLERANCE) | (logp0 > hi + RANGE_TOLERANCE))
    return np.where(conv_out, np.nan, logp0), p0, unknown, overtone, conv_out


def _details(frame, mode_col, cal, period, p0, invalid, unknown, overtone, conv_out, range_text):
    """Readable reason per row ('' when nothing to say)."""
    N = len(frame)
    lo, hi = cal.overtone_range
    raw_p = frame[PERIOD_COLUMN].map(str).to_numpy(object)
    raw_m = mode_col.map(str).to_numpy(object) if mode_col is not None else np.full(N, "", object)
    empty = np.full(N, "", dtype=object)
    return join_all(
        np.where(invalid, "period_d = '" + raw_p + "' is not a usable period: give a number of days > 0",
                 empty),
        np.where(unknown, "pmode = '" + raw_m + "' not recognised: use F (fundamental) or 1O "
                 "(first overtone); no distance computed", empty),
        np.where(overtone & ~invalid, "first-overtone period " + np.char.mod("%.4g", period).astype(object)
                 + " d converted to fundamental P0 = " + np.char.mod("%.4g", p0).astype(object)
                 + " d (Alcock et al. 1995)", empty),
        np.where(conv_out, f"P0 outside the range of the overtone-to-fundamental relation "
                 f"(log10 P0 {lo:g} to {hi:g}); not extrapolated", empty),
        range_text,
    )


def cepheid_calibration(frame: pd.DataFrame, opts) -> CepheidRows:
    """Absolute magnitudes for the rows of ``frame`` that carry a pulsation period.

    Parameters
    ----------
    frame : pandas.DataFrame
        Input with specpar column names; ``period_d`` (days) and optionally
        ``pmode`` (see :data:`MODES`). Rows with an empty period are not
        Cepheids. A non-numeric, zero or negative period flags PERIOD_INVALID,
        an unrecognised mode MODE_UNKNOWN; such rows stay Cepheid rows with no
        absolute magnitude (hence no distance), so nothing is lost and the
        spectral-type path does not run for them.
    opts : EstimateOptions
        ``law`` and ``rv`` are used.

    Returns
    -------
    CepheidRows

    References
    ----------
    See the module docstring.
    """
    cal = load_pl_calibration()
    N = len(frame)
    period, given, invalid = _periods(frame[PERIOD_COLUMN])
    mode_col = frame[MODE_COLUMN] if MODE_COLUMN in frame.columns else None
    logp0, p0, unknown, overtone, conv_out = _fundamental_logp(cal, period, given, invalid, _modes(mode_col, N))
    band_out, range_text = _range_details(cal, logp0, np.isfinite(logp0))
    flags = np.zeros(N, np.int64)
    flags |= np.where(invalid, int(Flag.PERIOD_INVALID), 0)
    flags |= np.where(unknown, int(Flag.MODE_UNKNOWN), 0)
    flags |= np.where(conv_out | (band_out != 0), int(Flag.PERIOD_OUT_OF_RANGE), 0)
    detail = _details(frame, mode_col, cal, period, p0, invalid, unknown, overtone, conv_out, range_text)
    rows = np.flatnonzero(given)
    values = pl_calibration_values(logp0[rows], law=opts.law, rv=opts.rv, cal=cal)
    e_mv = np.sqrt(cal.relations["V"].variance(logp0[rows]))
    return CepheidRows(mask=given, values=values, flags=flags, detail=detail,
                       e_mv=e_mv, period0_d=np.where(np.isfinite(logp0), p0, np.nan)[rows])


class CepheidSource(MagnitudeSource):
    """Rows with a pulsation period: absolute magnitudes from period-luminosity relations.

    The spread of the relations is carried by one strip mode (unit ``e_sptnum``);
    ``sptnum`` and ``e_sptnum`` are NaN in the output, ``e_mv`` is the relation's
    full M_V error and ``period0_d`` the fundamental period used.
    """

    name = "cepheid"

    def active(self, frame) -> bool:
        return PERIOD_COLUMN in frame.columns

    def claims(self, frame) -> np.ndarray:
        return _periods(frame[PERIOD_COLUMN])[1]

    def calibrate(self, prep, cals, opts) -> SourceRows:
        cep = cepheid_calibration(prep.frame, opts)
        rows = np.flatnonzero(cep.mask)
        n = rows.size
        modes = derivative_modes(cep.values.dabsmag, np.ones(n))
        label = np.full(n, cep.label, object)
        # the modes carry the relation's spread: sptnum 0, e_sptnum 1 internally
        return SourceRows(rows, cep.values, np.arange(n), modes, np.zeros(n), np.ones(n), label, label.copy(),
                          cep.flags[rows], cep.detail[rows], extra=cep)

    def output_columns(self, results: dict, part: SourceRows, n_rows: int) -> None:
        cep = part.extra
        if not cep.mask.any():
            return
        # period-luminosity rows: full M_V error, no spectral type, the period actually used
        results["e_mv"][cep.mask] = cep.e_mv
        for k in ("sptnum", "e_sptnum"):
            results[k] = np.where(cep.mask, np.nan, results[k])
        results["period0_d"] = np.full(n_rows, np.nan)
        results["period0_d"][cep.mask] = cep.period0_d

    def metadata(self) -> dict:
        return {"cepheid_calibration": load_pl_calibration().describe()}
