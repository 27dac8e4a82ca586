"""``estimate``: distances for a table of classified stars.

Every input row comes out, in order, with its input columns, the fitted
quantities, a ``flags`` bit mask (see :mod:`specpar.core.flags`) and a readable
``note``. The work per star depends only on that row and the options, so a
catalogue can be split into partitions (e.g. with Dask) without changing any
result, Monte Carlo draws included (see :mod:`specpar.core.mcdraws`).

The steps: options (:mod:`.options`), observables (:mod:`.observables`),
sources of absolute magnitudes (:mod:`.sources`, :mod:`.cepheid`), the fit
(:mod:`.fit`, :mod:`.montecarlo`), notes (:mod:`.notes`) and the parallax
cross-check (:mod:`.parallax`).
"""
from __future__ import annotations

import inspect

import numpy as np
import pandas as pd
from astropy.table import Column, Table

from ..calib.extinction import LAWS, band_coefficients, coefficients_at
from ..calib.tables import CalibrationSet, default_calibrations
from ..core.coldocs import column_docs
from ..core.about import VERSION
from ..core.bands import BAND_NAMES, BV_INDEX, V_INDEX
from ..core.distance import pc_to_plx_mas
from ..core.ebvbound import UPPER_LIMIT_LEVEL
from ..core.flags import Flag
from .cepheid import CepheidSource
from .fit import solve_rows
from .frames import combine_codes, join_detail, to_frame
from .notes import ebv_detail, fit_flags, notes
from .observables import prepare_observables
from .options import MAX_MAG_ERROR, OPTIONS, EstimateOptions, options_from
from .parallax import COLUMNS as PLX_COLUMNS, crosscheck, metadata as plx_metadata
from .sources import SpectralTypeSource, calibrate_rows

__all__ = ["estimate", "run_estimate", "attach_results", "OUTPUT_COLUMNS", "SOURCES"]

#: Sources of absolute magnitudes, in order: a later one replaces an earlier one on its rows.
SOURCES = (SpectralTypeSource(), CepheidSource())

#: Output columns with units and descriptions (written into table metadata).
OUTPUT_COLUMNS = column_docs(__package__, "estimate_columns.csv")


def _metadata(opts, cals, obs_names):
    """Settings, calibrations, conventions and assumptions of the run, for the output metadata."""
    return {
        "specpar_version": VERSION,
        "method": opts.method,
        "n_draws": int(opts.n_draws) if opts.method == "mc" else None,
        "seed": int(opts.seed) if opts.method == "mc" else None,
        "extinction_law": opts.law,
        "extinction_law_reference": LAWS[opts.law][1],
        "R_V": float(opts.rv),
        "sigma_R_V": float(opts.sigma_rv),
        "R_V_free": bool(opts.fit_rv),
        "band_coefficients_A_over_EBV": {b: round(float(c), 4) for b, c in
                                          zip(BAND_NAMES, band_coefficients(opts.law, opts.rv))},
        "calibrations": cals.describe(),
        "default_error_mag": float(opts.default_error),
        "observables_used": list(obs_names),
        "flag_bits": {f.name: int(f) for f in Flag},
        "ebv_bound": (
            "E(B-V) >= 0: where the fit gives E(B-V) < 0, E(B-V) is held at 0 and dm is the fit with "
            "E(B-V) = 0; e_ebv is the root mean square of the likelihood truncated to E(B-V) >= 0, e_dm "
            "adds the dm shift that E(B-V) within that range allows, ebv_upper is the "
            f"{100 * UPPER_LIMIT_LEVEL:g} % upper limit and ebv_unbounded the value before the bound "
            "(flag EBV_AT_BOUND; with Monte Carlo, the draws' mean and covariance are bounded the same "
            "way and the distance percentiles of those rows follow from the bounded dm and e_dm)"),
        "assumptions": (
            "Absolute magnitudes and intrinsic colours are mean relations for each spectral type and "
            "luminosity class; single stars, solar-neighbourhood metallicity and one extinction law "
            "with a single R_V along the line of sight are assumed. Systematic errors of tens of per "
            "cent in distance are typical of spectroscopic parallaxes."),
    }


def _class_labels(lcb, lcf) -> np.ndarray:
    """``lum_class`` per row, built once per distinct (bright, faint) pair."""
    lcode = combine_codes(lcb, lcf)
    first = np.unique(lcode, return_index=True)[1]
    lb, lf = lcb[first], lcf[first]
    return np.where(lb == lf, lb, lb.astype(str) + "-" + lf.astype(str)).astype(str)[lcode]


def _results(fit, rc) -> dict:
    """The output columns of the fit (before the parallax check and the notes)."""
    u, code = rc.ucal, rc.code  # per-row values are read through the code, not copied whole
    nodist = ~np.isfinite(fit["dm"])
    ebv, e_ebv, rv_used, e_rv, e_dm = fit["ebv"], fit["e_ebv"], fit["rv"], fit["e_rv"], fit["e_dm"]
    plx = pc_to_plx_mas(fit["d50"])
    results = {
        "sptnum": rc.sptnum, "e_sptnum": rc.e_spt, "lum_class": _class_labels(rc.lcb, rc.lcf).astype(str),
        "mv": u.absmag[code, V_INDEX], "e_mv": np.sqrt(u.var_mv[code]),
        "bv0": u.colours[code, BV_INDEX],
        "ebv": ebv, "e_ebv": e_ebv, "rv": rv_used, "e_rv": e_rv, "av": rv_used * ebv,
        "e_av": np.sqrt((rv_used * e_ebv) ** 2 + (ebv * e_rv) ** 2),
        "dm": fit["dm"], "e_dm": e_dm, "dist_pc": fit["d50"], "dist_lo_pc": fit["d16"],
        "dist_hi_pc": fit["d84"], "plx_phot_mas": plx, "e_plx_phot_mas": plx * np.log(10) / 5.0 * e_dm,
        "chi2": fit["chi2"], "dof": np.maximum(fit["dof"], 0), "n_obs": fit["n_used"],
        "ebv_upper": fit["ebv_upper"], "ebv_unbounded": fit["ebv_unbounded"],
    }
    for k in ("dm", "e_dm", "dist_pc", "dist_lo_pc", "dist_hi_pc", "plx_phot_mas", "e_plx_phot_mas"):
        results[k] = np.where(nodist, np.nan, results[k])  # colours alone still give E(B-V)
    return results


def _explain_columns(results, fit, rc, prep, opts) -> None:
    """``M_<band>`` and ``A_<band>`` for every band the input measures."""
    nodist = ~np.isfinite(fit["dm"])
    R_rows, _ = coefficients_at(opts.law, fit["rv"])
    for b in np.flatnonzero((prep.obs.L != 0).any(axis=0)):
        name = BAND_NAMES[b]
        results[f"M_{name}"] = rc.ucal.absmag[rc.code, b]
        results[f"A_{name}"] = np.where(nodist, np.nan, fit["ebv"] * R_rows[:, b])


def run_estimate(table, opts: EstimateOptions):
    """:func:`estimate` with an :class:`~specpar.pipeline.options.EstimateOptions`."""
    opts.check()
    cals = CalibrationSet(opts.calibrations) if opts.calibrations else default_calibrations()
    frame = to_frame(table)
    prep = prepare_observables(frame, opts)
    rc = calibrate_rows(prep, cals, opts, SOURCES)
    fit = solve_rows(frame, prep, rc, cals, opts)
    flags = rc.flags | fit_flags(fit, np.isfinite(rc.ucal.absmag[rc.code, V_INDEX]), opts)
    detail = join_detail(rc.detail, ebv_detail(fit, flags))
    results = _results(fit, rc)
    info = dict(OUTPUT_COLUMNS)
    meta_extra = {}
    for source, part in rc.parts:
        source.output_columns(results, part, len(frame))
        meta_extra.update(source.metadata())
    if "plx" in prep.frame.columns:
        # trigonometric parallaxes: tension, diagnosis and combined distance
        info.update(PLX_COLUMNS)
        extra, pflags, pdetail = crosscheck(prep.frame, results, cals=cals, sptnum=rc.sptnum,
                                            lc_bright=rc.lcb, lc_faint=rc.lcf, opts=opts)
        results.update(extra)
        flags |= pflags
        detail = join_detail(detail, pdetail)
        meta_extra["parallax"] = plx_metadata(opts)
    if prep.detail is not None:
        detail = join_detail(detail, prep.detail)
    note, codes = notes(flags, detail, prep.rejected, prep.defaulted, prep.obs_names, prep.bad_error,
                        prep.bad_error_large, getattr(opts, "max_error", MAX_MAG_ERROR))
    results.update(flags=flags, flag_codes=codes, note=note)
    if opts.explain:
        _explain_columns(results, fit, rc, prep, opts)
    meta = _metadata(opts, cals, prep.obs_names)
    meta["column_mapping"] = dict(prep.mapping or {})
    meta["max_error_mag"] = float(opts.max_error)
    meta["columns"] = {k: info[k][1] for k in results if k in info}
    meta.update(meta_extra)
    return attach_results(table, frame, results, meta, info)


def estimate(table, **options):  # signature and docstring: below, from the declarations
    return run_estimate(table, options_from(options))


estimate.__signature__ = inspect.Signature(
    [inspect.Parameter("table", inspect.Parameter.POSITIONAL_OR_KEYWORD)]
    + [inspect.Parameter(o.name, inspect.Parameter.KEYWORD_ONLY, default=o.default) for o in OPTIONS])
estimate.__doc__ = """Spectroscopic-parallax distances for every row of a table.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        Columns: ``sptype`` (MK type), any of the magnitudes
        ``U B V Rc Ic J H Ks G BP RP`` with errors ``e_<band>``, and/or colours
        such as ``B-V`` with ``e_B-V``. Other columns are carried through.
        Optional: ``plx``, ``e_plx`` (mas) add the parallax cross-check;
        ``period_d`` (days) and ``pmode`` (``F`` or ``1O``) make a row a
        classical Cepheid whose absolute magnitudes come from period-luminosity
        relations instead of the spectral type (see :mod:`specpar.pipeline.cepheid`).
""" + "\n".join("    " + line for line in OPTIONS.doc().splitlines()) + """

    Returns
    -------
    astropy.table.Table or pandas.DataFrame
        Same type as ``table``: the input columns then the results
        (see :data:`OUTPUT_COLUMNS`); assumptions in ``meta`` (``attrs`` for pandas).

    Raises
    ------
    specpar.core.errors.InputError
        An unknown option, a value outside its range, or an input without
        the columns needed.

    References
    ----------
    Pogson 1856, MNRAS 17, 12 (magnitude scale); the calibration and extinction
    references are listed in the output metadata.
    """


def attach_results(table, frame, results, meta, info=None):
    """The input table (same type) with ``results`` appended as columns.

    Input columns whose names clash with a result are kept as ``input_<name>``;
    units and descriptions come from ``info`` (default :data:`OUTPUT_COLUMNS`);
    ``meta`` goes to ``meta['specpar']`` (``attrs`` for pandas).
    """
    info = OUTPUT_COLUMNS if info is None else info
    clash = [k for k in results if k in frame.columns]
    if isinstance(table, pd.DataFrame):
        out = table.reset_index(drop=True).rename(columns={k: f"input_{k}" for k in clash})
        for k, v in results.items():
            out[k] = v
        out.attrs["specpar"] = meta
        return out
    out = Table(table, copy=True)
    for k in clash:
        out.rename_column(k, f"input_{k}")
    for k, v in results.items():
        unit, desc = info.get(k) or ("mag", f"{'absolute magnitude' if k[0] == 'M' else 'extinction'} in {k[2:]}")
        out[k] = Column(v, dtype=object) if np.asarray(v).dtype.kind == "O" else v
        out[k].description = desc
        if unit:
            out[k].unit = unit
    out.meta["specpar"] = meta
    return out
