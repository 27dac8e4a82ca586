"""Calibrations fitted to trigonometric parallaxes: :func:`calibrate` fits mean
absolute magnitude, intrinsic scatter and intrinsic colours per spectral type and
luminosity class to a sample of classified stars with parallaxes, by maximum
likelihood in parallax space (one :func:`~specpar.calfit.luminosity.fit_luminosity`
per class).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from astropy.table import Table

from .luminosity import fit_luminosity
from .options import CALIBRATE_OPTIONS
from .sample import (LOW_RED_PLX, UBV_ERRORS, count_near, default_scale_height, input_frame,
                     select_calibrators)
from .smoothing import fit_colour
from .tables import FITTED_COLOURS, IntrinsicColours, calibration_table

__all__ = ["calibrate", "CalibrationFit"]

#: Intrinsic scatter given to the trial table when measuring the spread that
#: specpar.estimate adds itself (mag; "almost none").
TRIAL_SCATTER = 0.001
#: Parallax S/N of the low-reddening stars that fit the intrinsic colours (common practice).
COLOUR_SNR = 5.0


@dataclass
class CalibrationFit:
    """Result of :func:`calibrate`.

    tables : dict
        Luminosity class -> calibration table (astropy Table in the shipped
        format, with uncertainty and star-count columns and provenance).
    stars : astropy.table.Table
        One row per input row, in order: ``lclass``, ``sptnum``, ``ebv``,
        ``av``, ``used`` (bool) and ``reason`` (why a row was not used).
    """

    tables: dict
    stars: Table


def _estimate_variance(trial: Table, rows: pd.DataFrame, rv) -> np.ndarray:
    """Variance of the distance modulus that :func:`specpar.estimate` gives these stars
    when the calibration has (almost) no intrinsic M_V scatter."""
    import os
    import tempfile
    from specpar.pipeline.estimate import estimate
    if len(trial) < 2:
        return np.zeros(len(rows))
    t = trial.copy()
    t["sig_M_V"] = TRIAL_SCATTER
    inp = pd.DataFrame({"sptype": rows["sptype"].to_numpy(object)})
    for c, e in UBV_ERRORS.items():
        if c in rows.columns:
            inp[c] = pd.to_numeric(rows[c], errors="coerce").to_numpy(float)
            ec = "e_" + c
            inp[ec] = pd.to_numeric(rows[ec], errors="coerce").to_numpy(float) if ec in rows.columns else e
    fd, path = tempfile.mkstemp(suffix=".ecsv")
    os.close(fd)
    try:
        t.write(path, format="ascii.ecsv", overwrite=True)
        out = estimate(inp, calibrations=(path,), rv=rv)
    finally:
        os.unlink(path)
    v = pd.to_numeric(out["e_dm"], errors="coerce").to_numpy(float) ** 2
    return np.where(np.isfinite(v), v, 0.0)


def _intrinsic_colours(s, sel, nodes, basecal, min_per_node) -> IntrinsicColours:
    """B-V and U-B at the nodes from the nearby (unreddened) stars of ``sel``; the base
    table where they are too few."""
    from specpar.core.bands import CALIBRATION_COLOURS
    x = s.sptnum
    low = sel & (s.plx > LOW_RED_PLX) & (s.plx > COLOUR_SNR * s.e_plx)
    out = IntrinsicColours({}, {}, {}, {}, count_near(x[low], nodes))
    for cname, y in zip(FITTED_COLOURS, (s.bv, s.ub)):
        yb = basecal.evaluate(nodes).colours[:, CALIBRATION_COLOURS.index(cname)] if basecal \
            else np.full(len(nodes), np.nan)
        ok_low = low & np.isfinite(y)
        fitted = count_near(x[ok_low], nodes) >= min_per_node
        if fitted.any():
            c, ec, rms, _ = fit_colour(x[ok_low], y[ok_low], nodes)
        else:
            c, ec, rms = np.full(len(nodes), np.nan), np.full(len(nodes), np.nan), np.nan
        out.values[cname] = np.where(fitted, c, yb)
        out.errors[cname] = np.where(fitted, ec, np.nan)
        out.fitted[cname] = fitted
        out.rms[cname] = rms
    return out


def _density(glat, xs, lc, scale_height_pc):
    """``(|sin b| / h, description)`` of the space density for the stars of one class."""
    if scale_height_pc is None or not np.isfinite(glat).all():
        return 0.0, "uniform space density"
    if scale_height_pc == "auto":
        h = default_scale_height(xs, np.full(len(xs), lc, dtype=object))
        return np.abs(np.sin(np.radians(glat))) / h, \
            "exponential disk, scale heights by type (default_scale_height; from memory)"
    return np.abs(np.sin(np.radians(glat))) / float(scale_height_pc), \
        f"exponential disk, scale height {float(scale_height_pc):g} pc"


def _nodes_and_support(xs, min_per_node):
    nodes = np.arange(np.floor(xs.min()), np.ceil(xs.max()) + 1.0)
    if len(nodes) < 2:
        nodes = np.array([nodes[0], nodes[0] + 1.0])
    near = count_near(xs, nodes)
    return nodes, near, near >= min_per_node


def _fit_class(lc, s, base, ebv, opts):
    """Fit class ``lc``: its table, or None (the reason then given to its stars)."""
    sel = s.usable(lc)
    min_stars, min_per_node, rv = opts["min_stars"], opts["min_per_node"], opts["rv"]
    if sel.sum() < min_stars:
        s.exclude(sel, f"class {lc} has {int(sel.sum())} usable stars, fewer than min_stars = {min_stars}")
        return None
    xs = s.sptnum[sel]
    nodes, near, support = _nodes_and_support(xs, min_per_node)
    if support.sum() < 2:
        s.exclude(sel, f"class {lc}: fewer than two types with min_per_node = {min_per_node} stars "
                       "within 1.5 subtypes")
        return None
    basecal = base.by_class.get(lc)
    colours = _intrinsic_colours(s, sel, nodes, basecal, min_per_node)
    bv_c = colours.values["B-V"]
    bv0 = np.interp(xs, nodes, bv_c) if np.isfinite(bv_c).all() else \
        np.interp(xs, nodes[np.isfinite(bv_c)], bv_c[np.isfinite(bv_c)])
    e_sel = np.clip(s.bv[sel] - bv0, 0.0, None)
    ebv[sel] = e_sel
    m0 = s.V[sel] - rv * e_sel
    inv_h, density = _density(s.glat[sel], xs, lc, opts["scale_height_pc"])
    smooth = dict(smooth_mv=opts["smooth_mv"], smooth_logsig=opts["smooth_logsig"])
    fit = fit_luminosity(xs, m0, s.plx[sel], s.e_plx[sel], nodes=nodes, inv_h=inv_h, **smooth)
    # second pass: the part of the spread that specpar.estimate adds itself (subtype,
    # reddening and photometric uncertainty, through its own error model) is given to the
    # fit as known per-star variance, so that sig_M_V is the remainder
    info = dict(n_fit=int(sel.sum()), rv=rv, density=density, sample=opts["sample"], v_limit=opts["v_limit"])
    trial = calibration_table(lc, fit, support, near, colours, basecal, info)
    extra = _estimate_variance(trial, s.frame.loc[sel], rv)
    fit = fit_luminosity(xs, m0, s.plx[sel], s.e_plx[sel], nodes=nodes, inv_h=inv_h, extra_var=extra,
                         theta_init=fit.theta, **smooth)
    return calibration_table(lc, fit, support, near, colours, basecal, info)


def _run_classes(fit_one, order, n_jobs) -> dict:
    """``{class: fit_one(class)}``; classes are independent, so they run in threads when
    ``n_jobs > 1`` (numpy releases the GIL in the heavy loops)."""
    if n_jobs > 1 and len(order) > 1:
        from concurrent.futures import ThreadPoolExecutor
        with ThreadPoolExecutor(max_workers=n_jobs) as pool:
            return dict(zip(order, pool.map(fit_one, order)))
    return {lc: fit_one(lc) for lc in order}


def calibrate(table, **options) -> CalibrationFit:
    """Fit calibration tables (M_V, intrinsic scatter, B-V, U-B per type and class) to parallaxes.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        One row per star: ``sptype`` (MK type with luminosity class), ``V``,
        ``B-V``, ``plx`` and ``e_plx`` (mas; negative and zero parallaxes are
        data and are used); optional ``U-B`` and ``glat`` (galactic latitude,
        deg, for the disk density). The sample's selection must depend only on
        apparent magnitude and direction (not on parallax or proper motion).
        Other column names are mapped with ``columns={"V": "Vmag", ...}``
        (ours to yours; on the command line ``--col V=Vmag``).
    {options}

    Returns
    -------
    CalibrationFit

    Notes
    -----
    Intrinsic B-V (and U-B) per type are fitted to the stars within 100 pc
    (parallax > 10 mas, S/N > 5), where reddening is negligible; every star's
    E(B-V) is its B-V minus that colour, clipped at zero, and A_V = rv E(B-V).

    References
    ----------
    Ratnatunga & Casertano 1991, AJ 101, 1075 (likelihood of the parallax given
    the apparent magnitude; from memory). See :func:`~specpar.calfit.luminosity.fit_luminosity`.
    """
    from specpar.calib.tables import CalibrationSet
    opts = CALIBRATE_OPTIONS.resolve(options, what="calibrate options")
    s, want = select_calibrators(input_frame(table, opts["columns"]), opts["classes"], opts["v_limit"])
    base = CalibrationSet(tuple(opts["base_calibrations"] or ()))
    ebv = np.full(len(s.frame), np.nan)
    order = sorted(want, key=lambda c: -int(np.sum(s.usable(c))))
    fitted = _run_classes(lambda lc: _fit_class(lc, s, base, ebv, opts), order, opts["n_jobs"])
    tables = {lc: fitted[lc] for lc in want if fitted.get(lc) is not None}
    rv = opts["rv"]
    stars = Table({"lclass": s.lclass.astype(str), "sptnum": s.sptnum, "ebv": ebv, "av": rv * ebv,
                   "used": s.reason == "", "reason": s.reason.astype(str)})
    return CalibrationFit(tables, stars)


if calibrate.__doc__:  # None under python -OO
    calibrate.__doc__ = calibrate.__doc__.replace("{options}", CALIBRATE_OPTIONS.doc().replace("\n", "\n    "))
