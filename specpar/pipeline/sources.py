"""Sources of absolute magnitudes: the spectral type (calibration tables) and,
for pulsating stars, a period-luminosity relation (:mod:`.cepheid`).

A source says which rows it claims (:meth:`MagnitudeSource.claims`) and gives,
for those rows, calibration values and their variances, the subtype (or strip)
modes of the error model, flags and readable notes
(:meth:`MagnitudeSource.calibrate`, a :class:`SourceRows`). :func:`calibrate_rows`
asks every active source in turn; a later source replaces an earlier one on the
rows it claims. The spectral-type source claims every row, so it is the
fallback.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..calib.tables import CalibrationValues
from ..core.bands import V_INDEX
from ..core.flags import Flag

__all__ = ["MagnitudeSource", "SourceRows", "RowCalibration", "SpectralTypeSource", "calibrate_rows",
           "subtype_modes"]


@dataclass
class SourceRows:
    """What a source hands over for the rows it claims.

    Attributes
    ----------
    rows : (n,) int
        The claimed rows of the input.
    values : CalibrationValues
        Calibration values per entry (a distinct type, or one per row).
    code : (n,) int
        Entry of ``values`` for each claimed row.
    modes : (entries, Q, n_bands)
        Modes of the calibration's uncertainty (subtype, instability strip).
    sptnum, e_spt : (n,) float
        Numeric type and its spread in the units of the modes.
    lc_bright, lc_faint : (n,) object
        Luminosity classes (a label of the source for period-luminosity rows).
    flags : (n,) int64
        The source's flag bits (the photometric ones are added by :func:`calibrate_rows`).
    detail : (n,) object
        Readable reasons ('' when nothing to say).
    extra : object
        Anything the source needs back in :meth:`MagnitudeSource.output_columns`.
    """

    rows: np.ndarray
    values: CalibrationValues
    code: np.ndarray
    modes: np.ndarray
    sptnum: np.ndarray
    e_spt: np.ndarray
    lc_bright: np.ndarray
    lc_faint: np.ndarray
    flags: np.ndarray
    detail: np.ndarray
    extra: object = None


class MagnitudeSource:
    """Interface of a source of absolute magnitudes (see the module docstring)."""

    #: Short name, used in metadata.
    name = "source"

    def active(self, frame) -> bool:
        """Whether the input has what this source reads (e.g. its column)."""
        raise NotImplementedError

    def claims(self, frame) -> np.ndarray:
        """(N,) bool: the rows whose absolute magnitudes come from this source."""
        raise NotImplementedError

    def calibrate(self, prep, cals, opts) -> SourceRows:
        """Calibration values, modes, flags and notes for the claimed rows."""
        raise NotImplementedError

    def output_columns(self, results: dict, part: SourceRows, n_rows: int) -> None:
        """Change or add output columns for the claimed rows (default: nothing)."""

    def metadata(self) -> dict:
        """Entries for the output metadata (default: none)."""
        return {}


@dataclass
class RowCalibration:
    """Calibration values per entry (``ucal``, ``modes``) and, per row, the entry
    (``code``) with the type, class, flags and details of the row; ``parts``: the
    :class:`SourceRows` of every active source, by source."""

    ucal: CalibrationValues
    modes: np.ndarray
    code: np.ndarray
    sptnum: np.ndarray
    e_spt: np.ndarray
    lcb: np.ndarray
    lcf: np.ndarray
    flags: np.ndarray
    detail: np.ndarray
    parts: list

    def rows(self, sl):
        """Calibration values and subtype modes for the rows in slice ``sl``."""
        idx = self.code[sl]
        return CalibrationValues(*(getattr(self.ucal, f)[idx] for f in CalibrationValues.FIELDS)), self.modes[idx]

    def take(self, part: SourceRows, photometry_flags) -> None:
        """Let ``part`` replace what earlier sources gave for its rows."""
        rows = part.rows
        n_u = len(self.ucal.var_mv)
        self.ucal = CalibrationValues(*(np.concatenate([getattr(self.ucal, f), getattr(part.values, f)])
                                        for f in CalibrationValues.FIELDS))
        modes = np.zeros((part.modes.shape[0],) + self.modes.shape[1:])
        modes[:, :part.modes.shape[1]] = part.modes
        self.modes = np.concatenate([self.modes, modes])
        self.code[rows] = n_u + part.code
        self.sptnum[rows], self.e_spt[rows] = part.sptnum, part.e_spt
        self.lcb[rows], self.lcf[rows] = part.lc_bright, part.lc_faint
        self.flags[rows] = photometry_flags[rows] | part.flags
        self.detail[rows] = part.detail


#: Gauss-Hermite nodes and weights for averaging over the subtype uncertainty
_GH_X, _GH_W = np.polynomial.hermite_e.hermegauss(9)
_GH_W = _GH_W / _GH_W.sum()


def subtype_modes(cals, parsed, nominal):
    """Subtype-uncertainty modes per distinct type, (U, Q, n_bands).

    The calibration is read at the Gauss-Hermite nodes ``s + e_s x_q`` of the
    subtype's normal distribution; mode q is ``sqrt(w_q) (M(s + e_s x_q) - M(s))``,
    so ``sum_q m_q m_q^T`` is the mean squared deviation of the absolute
    magnitudes from the values at the stated type. Unlike a first-order
    derivative this follows the curvature and kinks of the tables (e.g. the
    Balmer maximum near A0). Nodes beyond a table's end fall back to the
    local derivative.

    References
    ----------
    Gauss-Hermite quadrature of a normal distribution (common practice).
    """
    s = parsed["sptnum"].to_numpy(float)
    e = np.nan_to_num(parsed["e_sptnum"].to_numpy(float))
    lb, lf = parsed["lc_bright"].to_numpy(object), parsed["lc_faint"].to_numpy(object)
    U, Q = len(s), len(_GH_X)
    vals = cals.evaluate((s[:, None] + e[:, None] * _GH_X[None]).ravel(), np.repeat(lb, Q), np.repeat(lf, Q))
    dev = vals.absmag.reshape(U, Q, -1) - nominal.absmag[:, None, :]
    linear = nominal.dabsmag[:, None, :] * (e[:, None] * _GH_X[None])[:, :, None]
    dev = np.where(np.isfinite(dev), dev, linear)
    return np.sqrt(_GH_W)[None, :, None] * np.nan_to_num(dev)


class SpectralTypeSource(MagnitudeSource):
    """Absolute magnitudes from the MK type and luminosity class (calibration
    tables), read once per distinct type; claims every row."""

    name = "spectral type"

    def active(self, frame) -> bool:
        return True

    def claims(self, frame) -> np.ndarray:
        return np.ones(len(frame), bool)

    def calibrate(self, prep, cals, opts) -> SourceRows:
        p, c = prep.parsed, prep.parse_codes
        ucal = cals.evaluate(p["sptnum"].to_numpy(float), p["lc_bright"].to_numpy(object),
                             p["lc_faint"].to_numpy(object))
        outside = np.isfinite(p["sptnum"].to_numpy(float)) & ~np.isfinite(ucal.absmag[:, V_INDEX])
        flags = p["flags"].to_numpy(np.int64)[c] | np.where(outside[c], int(Flag.TYPE_OUTSIDE_CALIBRATION), 0)
        return SourceRows(
            np.arange(len(c)), ucal, c.copy(), subtype_modes(cals, p, ucal), p["sptnum"].to_numpy(float)[c],
            p["e_sptnum"].to_numpy(float)[c], p["lc_bright"].to_numpy(object)[c],
            p["lc_faint"].to_numpy(object)[c], flags, p["detail"].to_numpy(object)[c])


def calibrate_rows(prep, cals, opts, sources) -> RowCalibration:
    """Calibration of every row from ``sources`` (the first must claim every row).

    Each active source calibrates the rows it claims, replacing what earlier
    sources gave for them; a source without any claimed row still contributes
    its (empty) part, so its metadata is written.
    """
    first, *others = [s for s in sources if s.active(prep.frame)]
    base = first.calibrate(prep, cals, opts)
    rc = RowCalibration(base.values, base.modes, base.code, base.sptnum, base.e_spt, base.lc_bright,
                        base.lc_faint, prep.flags | base.flags, base.detail, [(first, base)])
    for source in others:
        part = source.calibrate(prep, cals, opts)
        if part.rows.size:
            rc.take(part, prep.flags)
        rc.parts.append((source, part))
    return rc
