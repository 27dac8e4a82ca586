"""Calibration tables built from a fit, in the shipped format (with uncertainty
and star-count columns and provenance per row), and their atomic writing.
"""
from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from astropy.table import Table

from specpar.core.errors import InputError
from specpar.core.sptype import TEMPERATURE_CLASSES
from specpar.io.atomic import make_folder

__all__ = ["IntrinsicColours", "calibration_table", "write_calibrations", "type_name", "FITTED_COLOURS"]

#: Colours fitted to the nearby calibrators (the others come from the base tables).
FITTED_COLOURS = ("B-V", "U-B")

#: Colour scatter written when no colour could be fitted (mag; common practice for UBV).
DEFAULT_COLOUR_SCATTER = 0.03

#: Rounding of the written values (mag): a thousandth, as in the shipped tables.
DECIMALS = 3

_REFERENCES = [
    "Ratnatunga, K. U. & Casertano, S. 1991, AJ 101, 1075 (likelihood of the parallax given "
    "the apparent magnitude; from memory)",
    "Whittaker 1923, Proc. Edinburgh Math. Soc. 41, 63; Eilers & Marx 1996, Stat. Sci. 11, 89 "
    "(second-difference smoothing penalty; from memory)",
]


@dataclass
class IntrinsicColours:
    """Intrinsic colours at the nodes of one class, by colour name: ``values``,
    ``errors`` (NaN where not fitted), ``fitted`` (bool per node: fitted here, else
    from the base table), ``rms`` (residual scatter); ``n_near``: low-reddening stars
    near each node."""

    values: dict
    errors: dict
    fitted: dict
    rms: dict
    n_near: np.ndarray


def type_name(x):
    """Spectral type of a numeric type (``52.0`` -> ``"K2"``)."""
    cls = TEMPERATURE_CLASSES[int(x // 10)]
    sub = x - 10 * (x // 10)
    return f"{cls}{sub:g}"


def _round(values):
    return np.round(values, DECIMALS)


def _value_columns(t, fit, idx, colours, basecal):
    from specpar.core.bands import CALIBRATION_COLOURS
    t["sptype"] = [type_name(v) for v in fit.nodes[idx]]
    t["sptnum"] = fit.nodes[idx]
    t["M_V"] = _round(fit.M_V[idx])
    t["sig_M_V"] = _round(fit.sig_M_V[idx])
    base_cols = basecal.evaluate(fit.nodes[idx]).colours if basecal is not None else None
    for j, cname in enumerate(CALIBRATION_COLOURS):
        if cname in colours.values:
            vals = colours.values[cname][idx]
        elif base_cols is not None:
            vals = base_cols[:, j]
        else:
            vals = np.full(len(idx), np.nan)
        t[cname] = np.ma.masked_invalid(_round(vals))
    t["M_core"] = _round(fit.M_core[idx])
    t["sig_core"] = _round(fit.sig_core[idx])
    t["frac2"] = _round(np.broadcast_to(fit.frac, fit.nodes.shape)[idx])
    t["e_M_V"] = _round(fit.e_M_V[idx])
    t["e_sig_M_V"] = _round(fit.e_sig_M_V[idx])
    for cname in FITTED_COLOURS:
        t["e_" + cname] = np.ma.masked_invalid(_round(colours.errors[cname][idx]))
    units = ("M_V", "sig_M_V", "M_core", "sig_core", "e_M_V", "e_sig_M_V", "e_B-V", "e_U-B") + CALIBRATION_COLOURS
    for c in units:
        if c in t.colnames:
            t[c].unit = "mag"


def _sources(idx, near, colours, basecal, sample):
    basename = basecal.name if basecal is not None else "none"
    src = []
    for i in idx:
        parts = [f"M_V, sig_M_V: fitted here to parallaxes (maximum likelihood of the parallax given V, "
                 f"Ratnatunga & Casertano 1991; {near[i]} stars within 1.5 subtypes)"]
        fitted_c = [c for c in FITTED_COLOURS if colours.fitted[c][i]]
        if fitted_c:
            parts.append(f"{', '.join(fitted_c)}: fitted here to {colours.n_near[i]} stars within 100 pc")
        other = [c for c in FITTED_COLOURS if not colours.fitted[c][i]]
        parts.append(f"{', '.join(other + ['other colours']) if other else 'other colours'}: table {basename}")
        if sample:
            parts.append(f"sample: {sample}")
        src.append("; ".join(parts))
    return src


def _notes(fit, info):
    return (f"Fitted by specpar.calibrate to {info['n_fit']} stars ({info['sample'] or 'user sample'}); "
            f"{info['density']}; A_V = {info['rv']:g} E(B-V) with E(B-V) = B-V minus the intrinsic "
            f"colour, clipped at 0; luminosity function: core plus a second component with fraction "
            f"{fit.frac.min():.3f}-{fit.frac.max():.3f} (by type), offset {fit.shift:+.2f} mag, extra width {fit.width:.2f} mag; M_V and "
            f"sig_M_V are its median and half its 16-84% range; "
            + (f"V <= {info['v_limit']:g}; " if info.get("v_limit") is not None else "")
            + f"optimizer: {'converged' if fit.converged else 'NOT converged: ' + fit.message}. "
            "Rows are types with at least the minimum number of stars within 1.5 subtypes "
            "(n_near); n_stars counts stars within 0.5 subtype. M_core, sig_core: the core "
            "Gaussian; frac2: fraction in the second component (offset and extra width above).")


def calibration_table(lc, fit, support, near, colours: IntrinsicColours, basecal, info) -> Table:
    """The calibration table of class ``lc`` from a :class:`~specpar.calfit.luminosity.LuminosityFit`.

    Rows are the nodes from the first to the last with ``support``; ``near``
    counts the stars near each node; ``basecal`` (or None) gives the colours not
    fitted; ``info`` holds ``n_fit``, ``rv``, ``density``, ``sample``, ``v_limit``
    for the provenance.
    """
    keep = np.flatnonzero(support)
    rows = slice(keep[0], keep[-1] + 1) if keep.size else slice(0, 0)
    idx = np.arange(len(fit.nodes))[rows]
    t = Table()
    _value_columns(t, fit, idx, colours, basecal)
    t["n_stars"] = fit.n_stars[idx]
    t["n_near"] = near[idx]
    t["n_colour"] = colours.n_near[idx]
    t["source"] = _sources(idx, near, colours, basecal, info.get("sample"))
    rms = [v for v in colours.rms.values() if np.isfinite(v)]
    t.meta.update({
        "name": f"fitted_{lc}",
        "luminosity_class": lc,
        "title": f"class {lc}: M_V and intrinsic scatter fitted to trigonometric parallaxes",
        "references": _REFERENCES + ([f"intrinsic colours outside the fitted types: {basecal.describe()}"]
                                     if basecal is not None else []),
        "colour_scatter": float(round(max(rms), DECIMALS)) if rms else DEFAULT_COLOUR_SCATTER,
        "colour_scatter_source": "rms residual of the intrinsic-colour fit to stars within 100 pc",
        "sig_M_V_source": "fitted intrinsic scatter of the Gaussian luminosity function (maximum likelihood)",
        "notes": _notes(fit, info),
    })
    return t


def write_calibrations(fit, outdir, prefix="calibration", overwrite=False) -> list:
    """Write each fitted class to ``<outdir>/<prefix>_<class>.ecsv`` (atomically); returns the paths.

    ``fit`` is a :class:`~specpar.calfit.fit.CalibrationFit`. An existing file is
    refused (:class:`~specpar.core.errors.InputError`) unless ``overwrite``.
    """
    out = Path(outdir)
    make_folder(out, parents=True)
    paths = []
    for lc, t in fit.tables.items():
        p = out / f"{prefix}_{lc}.ecsv"
        if p.exists() and not overwrite:
            raise InputError(f"{p} exists; use overwrite=True (CLI: --overwrite) or another folder")
        tmp = p.with_name(p.name + ".tmp")
        t.write(tmp, format="ascii.ecsv", overwrite=True)
        os.replace(tmp, p)
        paths.append(p)
    return paths
