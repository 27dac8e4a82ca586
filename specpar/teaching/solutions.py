"""Worked solutions of a table: every star's steps from the spectral type to the distance,
with the numbers :func:`specpar.estimate` returns (called with ``explain=True``), and the compact
answer key.

Values are kept at full precision and rounded only when written out. Each step also records
``arith``, what its displayed arithmetic gives at full precision, so a test can check that the
written-out sums reproduce the solver's results.

References
----------
Pogson, N. 1856, MNRAS 17, 12 (magnitude scale; m - M = 5 log10(d / 10 pc)).
Fritsch, F. N. & Carlson, R. E. 1980, SIAM J. Numer. Anal. 17, 238 (monotone cubic
interpolation used between calibration rows).
The calibration and extinction-law references are listed in each output.
"""
from __future__ import annotations

import astropy.units as u
import numpy as np
from astropy.table import Table

from specpar.core.errors import InputError
from specpar.pipeline.estimate import estimate
from specpar.core.flags import Flag

from .context import ResultColumns, build_context, fit_rows, used_observables
from .model import Step, WorkedSolution, WorkedStar
from .modulus import distance_steps, reddening_steps
from .numbers import fmt_error, round_value
from .options import DEFAULT_DECIMALS, MAX_DECIMALS
from .steps import lookup_steps, type_step

__all__ = ["worked_solutions", "answer_key", "check_decimals", "KEY_COLUMNS", "METHOD_REFERENCES"]

#: References of the method, listed in every worked solution.
METHOD_REFERENCES = (
    "Pogson, N. 1856, MNRAS 17, 12: magnitude scale, m - M = 5 log10(d / 10 pc)",
    "Fritsch, F. N. & Carlson, R. E. 1980, SIAM J. Numer. Anal. 17, 238: monotone cubic "
    "interpolation between calibration rows",
)


def _star(ctx, i) -> WorkedStar:
    r = ctx.result
    named = ctx.frame.columns  # id and type under our names, whatever the input calls them
    raw_id = ctx.frame["id"].iloc[i] if "id" in named else None
    sid = f"row {i + 1}" if raw_id is None or (isinstance(raw_id, float) and np.isnan(raw_id)) else str(raw_id)
    raw = ctx.frame["sptype"].iloc[i] if "sptype" in named else ""
    sptype = raw if isinstance(raw, str) else ""  # masked or a column read as numbers: no type
    flags = int(r["flags"][i])
    star = WorkedStar(i, sid, sptype, bool(np.isfinite(float(r["dm"][i]))), [], flags=flags,
                      flag_codes=str(r["flag_codes"][i]), note=str(r["note"][i]))
    period_row = "period0_d" in r.colnames and np.isfinite(float(r["period0_d"][i]))
    if not np.isfinite(float(r["sptnum"][i])) and not period_row:
        star.steps.append(Step("sptnum", "Spectral type", text=f"'{sptype}' could not be used: {star.note}"))
        return star
    lum = str(r["lum_class"][i])
    parts = tuple(lum.split("-"))
    cls = parts if len(parts) == 2 and all(c in ctx.per_class for c in parts) else (lum, lum)
    star.steps.append(type_step(ctx, i, star, cls, lum))
    if not star.solved or not np.isfinite(float(r["mv"][i])):
        star.steps.append(Step("none", "No solution", text=star.note))
        return star
    used = used_observables(ctx, i)
    fit = fit_rows(ctx, i, used)
    mags = [f.name for f in fit if f.is_magnitude]
    colour_known = not flags & Flag.EBV_ASSUMED_ZERO
    steps, touched = lookup_steps(ctx, i, star, cls, fit, colour_known)
    star.steps.extend(steps)
    ref_band = "V" if "V" in mags else (mags[0] if mags else "V")
    steps, dm_step = reddening_steps(ctx, i, star, used, fit, touched, colour_known, ref_band)
    star.steps.extend(steps)
    star.steps.extend(distance_steps(ctx, i, dm_step))
    return star


def worked_solutions(table, *, decimals: int = DEFAULT_DECIMALS, **estimate_options) -> WorkedSolution:
    """Worked solution for every row of a table that :func:`specpar.estimate` accepts.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        The stars, as for :func:`specpar.estimate`.
    decimals : int
        Decimals shown for magnitudes (distances get ``decimals + 1``
        significant figures). Values are kept at full precision.
    **estimate_options
        Passed to :func:`specpar.estimate` (``law``, ``rv``, ``calibrations``,
        ``columns``, ``default_error`` ...); ``explain`` is always on.

    Returns
    -------
    WorkedSolution

    References
    ----------
    Pogson 1856, MNRAS 17, 12 (distance modulus); the calibration and
    extinction-law references are listed in ``WorkedSolution.references``.
    """
    check_decimals(decimals)
    estimate_options.pop("explain", None)
    result = estimate(table, explain=True, **estimate_options)
    cols = ResultColumns(result)
    ctx = build_context(table, cols, estimate_options)
    ctx.decimals = int(decimals)
    stars = [_star(ctx, i) for i in range(len(cols))]  # text per star; the numbers are all vectorised
    refs, settings = _references_and_settings(ctx, cols)
    return WorkedSolution(stars, result, int(decimals), refs, settings)


def _references_and_settings(ctx, cols):
    """(references, readable assumptions) of a worked solution: calibrations of the classes used,
    the extinction law, the method."""
    meta = cols.meta
    refs = []
    used_classes = {c for s in cols["lum_class"] for c in str(s).split("-")}
    for lc in ctx.cals.by_class:
        if lc in used_classes:
            refs.extend(ctx.cals.by_class[lc].references)
    refs.append(f"Extinction law {ctx.law}: {ctx.law_ref}")
    refs.extend(METHOD_REFERENCES)
    sigma_rv = fmt_error(meta.get("sigma_R_V", np.nan), "num", 3)
    settings = [
        f"extinction law {ctx.law} ({ctx.law_ref}), R_V = {meta.get('R_V', '')}"
        + (f" ± {sigma_rv}" if sigma_rv else " (held fixed, no uncertainty)")
        + (" (fitted per star where possible)" if meta.get("R_V_free") else ""),
        "error propagation: " + ("first order (analytic)" if ctx.method == "analytic"
                                 else f"Monte Carlo, {ctx.n_draws} draws, seed {meta.get('seed')}"),
        f"missing photometric errors taken as {meta.get('default_error_mag', '')} mag",
        "every equation's result follows from the numbers it shows; where rounding them would change the "
        "last digit, the computed numbers carry extra (guard) digits",
    ]
    settings += [f"calibration {lc}: {ctx.cals.by_class[lc].path or ctx.cals.by_class[lc].name}"
                 for lc in ctx.cals.by_class if lc in used_classes]
    return list(dict.fromkeys(refs)), settings


def check_decimals(decimals) -> None:
    """Refuse (:class:`InputError`) a number of decimals that is not an integer from 0 to ``MAX_DECIMALS``."""
    if not isinstance(decimals, (int, np.integer)) or not 0 <= decimals <= MAX_DECIMALS:
        raise InputError(f"decimals must be an integer from 0 to {MAX_DECIMALS}, got {decimals!r}")


#: Answer-key columns: (column, kind) taken from the estimate output.
KEY_COLUMNS = (
    ("sptnum", "num"), ("lum_class", None), ("mv", "mag"), ("e_mv", "mag"), ("bv0", "mag"),
    ("ebv", "mag"), ("e_ebv", "mag"), ("av", "mag"), ("dm", "mag"), ("e_dm", "mag"),
    ("dist_pc", "pc"), ("dist_lo_pc", "pc"), ("dist_hi_pc", "pc"), ("dist_ly", "ly"),
    ("plx_phot_mas", "mas"), ("e_plx_phot_mas", "mas"), ("chi2", "mag"), ("dof", None),
    ("flag_codes", None),
)


def answer_key(ws: WorkedSolution, *, decimals: int | None = None) -> Table:
    """Compact answer key: one row per star, values rounded for display.

    Columns: ``id``, ``sptype`` and the estimate's ``sptnum, lum_class, mv,
    e_mv, bv0, ebv, e_ebv, av, dm, e_dm, dist_pc, dist_lo_pc, dist_hi_pc``,
    plus ``dist_ly``, the photometric parallax, ``chi2, dof``, ``flag_codes``
    and ``calibration`` (table and rows used).
    """
    dec = ws.decimals if decimals is None else decimals
    check_decimals(dec)
    r = ws.result
    out = Table()
    out["id"] = [s.id for s in ws.stars]
    out["sptype"] = [s.sptype for s in ws.stars]
    ly = (np.asarray(r["dist_pc"], dtype=float) * u.pc).to(u.lyr).value
    for col, kind in KEY_COLUMNS:
        data = ly if col == "dist_ly" else np.asarray(r[col])
        if kind is None:
            out[col] = data
        else:
            out[col] = [round_value(v, kind, dec) for v in np.asarray(data, dtype=float)]
        unit = {"mag": "mag", "pc": "pc", "ly": "lyr", "mas": "mas"}.get(kind or "")
        if unit and col != "chi2":
            out[col].unit = unit
    out["calibration"] = [s.calibration.split(". Row source")[0] for s in ws.stars]
    return out
