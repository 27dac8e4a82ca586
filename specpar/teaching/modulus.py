"""Steps from the colour excess to the distance: the reddening route (two observables written out,
or the multi-band fit with its hand route), the distance modulus, the distance in pc and ly, its
1-sigma range, the photometric parallax and the error budget.

References
----------
Pogson, N. 1856, MNRAS 17, 12: m - M = 5 log10(d / 10 pc).
"""
from __future__ import annotations

import astropy.units as u
import numpy as np

from specpar.core.bands import band_index
from specpar.calib.extinction import rv_limits
from specpar.core.flags import Flag

from .context import cls_of, used_observables
from .equations import band_chain, band_modulus, substitute
from .model import Step
from .numbers import PHOT_ERROR_DECIMALS, SHORT_DECIMALS, evaluate_display, fmt, markup, round_sig
from .steps import colour_excess_step, dm_direct, extinction_step, fit_step, hand_check, pm_text

__all__ = ["distance_steps", "budget_text", "reddening_steps", "hand_mean_step", "WEIGHT_SIG"]

#: Significant figures of the weights of the hand route (a student writes them down; common practice).
WEIGHT_SIG = 3


def distance_steps(ctx, i, dm_step):
    """Steps from the distance modulus to the distance (pc, ly), its range, the error budget and the
    photometric parallax."""
    r = ctx.result
    dm, e_dm = float(r["dm"][i]), float(r["e_dm"][i])
    d, lo, hi = (float(r[c][i]) for c in ("dist_pc", "dist_lo_pc", "dist_hi_pc"))
    ly = float((d * u.pc).to(u.lyr).value)
    steps = list(dm_step) if isinstance(dm_step, list) else [dm_step]
    if ctx.method == "mc":
        steps.append(Step("dist_pc", "Distance", lhs="d", value=d, kind="pc", unit="pc",
                          text=f"median of the distances of {ctx.n_draws} Monte Carlo draws"))
    else:
        steps.append(Step("dist_pc", "Distance", lhs="d", formula="10^{(m-M)_{0}/5 + 1} pc",
                          template="10^{%0/5 + 1}", numbers=((dm, "mag"),), value=d, kind="pc", unit="pc",
                          arith=10 ** (dm / 5 + 1), source="Pogson 1856: m - M = 5 log10(d / 10 pc)"))
    pc_ly = float((1.0 * u.pc).to(u.lyr).value)
    steps.append(Step("dist_ly", "Distance in light years", lhs="d", template="%0", numbers=((d, "pc"),),
                      template_unit="pc", value=ly, kind="ly", unit="ly", arith=d * pc_ly, convert=pc_ly,
                      source=f"unit conversion by astropy.units: 1 pc = {pc_ly:.6f} ly"))
    steps.append(Step("e_dm", "Uncertainty of the distance modulus", lhs="σ_{m-M}", value=e_dm,
                      text=budget_text(ctx, i)))
    if ctx.method == "mc":
        steps.append(Step("dist_lo_pc", "Distance, 16th percentile", lhs="d_{16}", value=lo, kind="pc",
                          unit="pc", text="16th percentile of the Monte Carlo distances"))
        steps.append(Step("dist_hi_pc", "Distance, 84th percentile", lhs="d_{84}", value=hi, kind="pc",
                          unit="pc", text="84th percentile of the Monte Carlo distances"))
    else:
        for key, sign, sym, val in (("dist_lo_pc", "-", "d_{16}", lo), ("dist_hi_pc", "+", "d_{84}", hi)):
            steps.append(Step(key, "Distance range (1 sigma)", lhs=sym,
                              formula=f"10^{{((m-M)_{{0}} {sign} σ)/5 + 1}} pc",
                              template=f"10^{{(%0 {sign} %1)/5 + 1}}", numbers=((dm, "mag"), (e_dm, "mag")),
                              value=val, kind="pc", unit="pc",
                              arith=10 ** ((dm + (e_dm if sign == "+" else -e_dm)) / 5 + 1)))
    plx = float(r["plx_phot_mas"][i])
    steps.append(Step("plx_phot_mas", "Photometric parallax", lhs="ϖ", formula="1000 / d", template="1000 / %0",
                      numbers=((d, "pc"),), value=plx, error=float(r["e_plx_phot_mas"][i]), kind="mas",
                      unit="mas", arith=1000.0 / d))
    return steps


def budget_text(ctx, i):
    """What the uncertainty of the distance modulus of row ``i`` includes, in words."""
    r = ctx.result
    used = used_observables(ctx, i)
    phot = ", ".join(f"σ({ctx.obs_names[k]}) = {fmt(ctx.obs.sigma[i, k], 'mag', PHOT_ERROR_DECIMALS)}" for k in used)
    parts = [f"photometric errors ({phot} mag)",
             f"intrinsic scatter of M_V ({fmt(float(r['e_mv'][i]), 'mag', SHORT_DECIMALS)} mag)"]
    if any(ctx.obs.L[k, band_index("V")] != 1 or np.count_nonzero(ctx.obs.L[k]) > 1 for k in used):
        parts.append("intrinsic-colour scatter of the calibration")
    if str(r["lum_class"][i]).split("-")[0] in ctx.per_class:  # not for period-luminosity rows
        parts.append(f"subtype uncertainty{pm_text(float(r['e_sptnum'][i]), ' subclass')}")
    e_rv, rv = float(r["e_rv"][i]), float(r["rv"][i])
    at_limit = ctx.result.meta.get("R_V_free") and any(np.isclose(rv, x) for x in rv_limits(ctx.law))
    if float(r["ebv"][i]) > 0 and e_rv > 0:
        parts.append(f"R_V uncertainty{pm_text(e_rv, '')}" if np.isfinite(e_rv) and not at_limit else
                     "R_V at the limit of the law or unconstrained by these bands (a limit, see the "
                     "extinction step)")
    return "from the fit's covariance, which includes " + ", ".join(parts)


def reddening_steps(ctx, i, star, used, fit, touched, colour_known, ref_band):
    """Colour excess and extinction; returns (steps, distance-modulus step)."""
    r = ctx.result
    if not colour_known:
        return [Step("ebv", "Colour excess", lhs="E(B-V)", value=0.0,
                     text="one band only: the colour excess cannot be measured and is taken as 0 "
                          "(no extinction correction)"),
                Step(f"A_{ref_band}", "Extinction", lhs=f"A_{{{ref_band}}}", value=0.0)], dm_direct(ctx, i, ref_band)
    # a row whose fitted E(B-V) fell below 0 is held at 0: not the exact two-observable
    # solution, so it is shown as a fit (table, hand route) and the bound is said in words
    at_bound = bool(int(r["flags"][i]) & int(Flag.EBV_AT_BOUND))
    ebv_step = None if at_bound else colour_excess_step(ctx, i, used)
    if ebv_step is not None:  # two observables: exact, written out
        ext = [extinction_step(ctx, i, b) for b in dict.fromkeys(["V", ref_band])]
        return [ebv_step] + ext, dm_direct(ctx, i, ref_band)
    star.fit, star.chi2, star.dof = fit, float(r["chi2"][i]), int(r["dof"][i])
    ebv_text = "from the least-squares fit over all bands (table)"
    dm_text = ("least-squares fit over all bands (table): each band gives m - M - A; the fit weights "
               "them with the photometric errors and the calibration's scatter (correlations between "
               "bands included)")
    if at_bound:
        raw, upper = float(r["ebv_unbounded"][i]), float(r["ebv_upper"][i])
        ebv_text = (f"the fit puts E(B-V) at {fmt(raw, 'mag', ctx.decimals)} mag, below 0, which no dust can "
                    f"give: E(B-V) is held at 0 (95 % upper limit {fmt(upper, 'mag', ctx.decimals)} mag); the "
                    "colours are bluer than the type's, so the type or the photometry may be off")
        dm_text += ("; with E(B-V) held at 0 the colour that is too blue is read as an earlier subtype within "
                    "the calibration's scatter, which moves the distance modulus away from the hand value")
    ebv_step = Step("ebv", "Colour excess", lhs="E(B-V)", value=float(r["ebv"][i]),
                    error=float(r["e_ebv"][i]), text=ebv_text)
    dm_step = Step("dm", "Distance modulus", lhs="(m-M)_{0}", value=float(r["dm"][i]), error=float(r["e_dm"][i]),
                   text=dm_text)
    ext = [extinction_step(ctx, i, b) for b in dict.fromkeys(["V"] + touched)]
    for st in ext[1:]:  # the law is named once
        st.source = "R_B = R_V + 1 by the definition of E(B-V)" if st.key == "A_B" else ""
    hand = hand_mean_step(ctx, i, cls_of(ctx, i), fit, ctx.decimals)
    return [fit_step(star), ebv_step] + ext + hand_check(ctx, i, used), [dm_step] + ([hand] if hand else [])


def hand_mean_step(ctx, i, lc, fit, dec):
    """Hand route beside a multi-band fit: the weighted mean of the band moduli of the fit table.

    Weights w = 1 / (σ^2 + n s_c^2): σ the photometric error, s_c the calibration's colour scatter,
    n the number of calibration colours linking the band to V (its M = M_V + n colours). The
    numbers are the table's displayed ones, so the arithmetic is exactly what a student gets.
    """
    mags = [f for f in fit if f.is_magnitude and np.isfinite(f.dm_band)]
    if len(mags) < 2:
        return None
    sc = ctx.cals.by_class[lc].colour_scatter if lc else 0.0
    w = [round_sig(1.0 / (f.sigma ** 2 + len(band_chain(f.name)) * sc ** 2), 3) for f in mags]
    dmb = [float(band_modulus(f, dec)) for f in mags]
    numbers, top, bottom = [], [], []
    for k, (wk, dk) in enumerate(zip(w, dmb)):
        numbers += [(wk, "num"), (dk, "mag")]
        top.append(f"%{2 * k} × %{2 * k + 1}")
        bottom.append(f"%{2 * k}")
    step = Step("dm_hand", "Hand route: weighted mean of the band moduli (not the fitted answer)",
                lhs="(m-M)_{0}", formula="Σ w (m - M - A) / Σ w",
                template=f"({' + '.join(top)}) / ({' + '.join(bottom)})", numbers=tuple(numbers))
    hand = evaluate_display(markup(substitute(step, dec), False))
    fitted = float(ctx.result["dm"][i])
    diff = fitted - hand
    step.value = step.arith = hand
    step.text = (f"weights w = 1/(σ^{{2}} + n s_{{c}}^{{2}}) with σ the photometric error, s_{{c}} = {sc:g} mag "
                 "the calibration's colour scatter and n the number of colours linking the band to V; m - M - A "
                 f"from the table (A at the fitted E(B-V)). The fit gives {fmt(fitted, 'mag', dec)} mag, "
                 f"{fmt(diff, 'mag', dec)} mag from this mean ({100 * (10 ** (diff / 5) - 1):+.1f} % in distance): "
                 "it solves E(B-V) and (m-M)_{0} together and weighs the bands with the full covariance, in which "
                 "the scatter of M_V, of the colours and of the subtype moves the bands together")
    return step
