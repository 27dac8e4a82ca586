"""Steps of a worked solution, one builder per kind of step: spectral type, calibration look-up,
absolute magnitudes, colour excess, extinction, the fit summary and the hand check.

References
----------
Pogson, N. 1856, MNRAS 17, 12 (magnitude scale). The period-luminosity relation of a pulsator row
is quoted with its own source.
"""
from __future__ import annotations

import numpy as np

from specpar.core.bands import BAND_NAMES, CALIBRATION_COLOURS, band_index
from specpar.calib.extinction import rv_limits

from .context import describe_rows, type_name
from .equations import band_chain, colour_symbol
from .model import Step
from .numbers import SHORT_DECIMALS, fmt

__all__ = ["calibration_steps", "absmag_step", "extinction_step", "colour_excess_step", "pm_text",
           "period_step", "type_step", "lookup_steps", "fit_step", "hand_check", "dm_direct"]


def calibration_steps(ctx, i, cls, colours_needed):
    """Steps for M_V, the intrinsic colours needed and their sources."""
    r = ctx.result
    mv, e_mv = float(r["mv"][i]), float(r["e_mv"][i])
    descs, srcs = [], []
    for lc in dict.fromkeys(cls):
        d, s = describe_rows(ctx.cals, lc, float(r["sptnum"][i]))
        descs.append(f"class {lc}: {d}")
        srcs.extend(s)
    source = "; ".join(descs) + ("" if not srcs else ". Row source: " + " | ".join(dict.fromkeys(srcs)))
    steps = []
    blended = len(cls) == 2 and cls[0] != cls[1]
    for key, sym, col in [("mv", "M_{V}", None)] + [(f"c0_{c}", colour_symbol(c), c) for c in colours_needed]:
        value = mv if col is None else ctx.colours[i, CALIBRATION_COLOURS.index(col)]
        st = Step(key, "Calibration look-up" if col is None else f"Intrinsic colour {col}", lhs=sym,
                  value=value, error=e_mv if col is None else np.nan, source=source if col is None else "")
        if blended:
            a, b = (ctx.per_class[lc][i][0 if col is None else 1 + CALIBRATION_COLOURS.index(col)] for lc in cls)
            st.formula = f"[{sym}({cls[0]}) + {sym}({cls[1]})] / 2"
            st.template, st.numbers, st.arith = "(%0 + %1) / 2", ((a, "mag"), (b, "mag")), (a + b) / 2
            if col is None:
                st.text = (f"intermediate class {cls[0]}-{cls[1]}: mean of the two tables; the scatter is "
                           "widened by half their difference")
        steps.append(st)
    return steps, source


def absmag_step(ctx, i, band):
    """M in ``band`` from M_V and the calibration colours linking the band to V."""
    chain = band_chain(band)
    mv = float(ctx.result["mv"][i])
    terms = [ctx.colours[i, CALIBRATION_COLOURS.index(c)] for _, c in chain]
    formula = "M_{V}" + "".join(f" {'+' if s > 0 else '-'} {colour_symbol(c)}" for s, c in chain)
    template = "%0" + "".join(f" {'+' if s > 0 else '-'} %{k + 1}" for k, (s, _) in enumerate(chain))
    arith = mv + sum(s * t for (s, _), t in zip(chain, terms))
    return Step(f"M_{band}", f"Absolute magnitude in {band}", lhs=f"M_{{{band}}}", formula=formula,
                template=template, numbers=((mv, "mag"),) + tuple((t, "mag") for t in terms),
                value=float(ctx.result[f"M_{band}"][i]), arith=arith)


def extinction_step(ctx, i, band, ebv_symbol="E(B-V)"):
    """A in ``band`` = R_band E(B-V), with the law, R_V and whether R_V is a limit."""
    r = ctx.result
    ebv = float(r["ebv"][i])
    R = float(ctx.coef[i, band_index(band)])
    rsym = "R_{V}" if band == "V" else f"R_{{{band}}}"
    rv = float(r["rv"][i])
    src = f"{ctx.law} extinction law ({ctx.law_ref}) at R_V = {fmt(rv, 'num', 0)}"
    lo, hi = rv_limits(ctx.law)
    if np.isclose(rv, lo) or np.isclose(rv, hi) or not np.isfinite(float(r["e_rv"][i])):
        if ctx.result.meta.get("R_V_free"):
            src += (f" (R_V {'≤' if np.isclose(rv, lo) else '≥' if np.isclose(rv, hi) else '='} {rv:g}: the fit "
                    f"stopped at the law's limit {lo:g}-{hi:g} or could not constrain R_V, so this is a limit, "
                    "not a measurement)")
    if band == "B":
        src += "; R_B = R_V + 1 by the definition of E(B-V)"
    return Step(f"A_{band}", f"Extinction in {band}", lhs=f"A_{{{band}}}", formula=f"{rsym} × {ebv_symbol}",
                template="%0 × %1", numbers=((R, "coef"), (ebv, "mag")),
                value=float(r["av"][i] if band == "V" else r[f"A_{band}"][i]),
                error=float(r["e_av"][i]) if band == "V" else np.nan,
                arith=R * ebv, source=src)


def colour_excess_step(ctx, i, used):
    """E(B-V) written out where two observables fix it exactly; None otherwise."""
    r = ctx.result
    names = {ctx.obs_names[k]: k for k in used}
    ebv, e_ebv = float(r["ebv"][i]), float(r["e_ebv"][i])
    bv0 = float(r["bv0"][i])
    y = lambda n: float(ctx.obs.y[i, names[n]])  # noqa: E731
    base = dict(key="ebv", title="Colour excess", lhs="E(B-V)", value=ebv, error=e_ebv)
    if set(names) == {"B", "V"}:
        return Step(**base, formula="(B - V) - (B-V)_{0}", template="(%0 - %1) - %2",
                    numbers=((y("B"), "mag"), (y("V"), "mag"), (bv0, "mag")), arith=(y("B") - y("V")) - bv0)
    if set(names) == {"V", "B-V"}:
        return Step(**base, formula="(B-V) - (B-V)_{0}", template="%0 - %1",
                    numbers=((y("B-V"), "mag"), (bv0, "mag")), arith=y("B-V") - bv0)
    mags = [n for n in names if n in BAND_NAMES]
    if len(names) == 2 and len(mags) == 2:
        a, b = sorted(mags, key=lambda n: (n != "V", BAND_NAMES.index(n)))
        Ma, Mb = float(r[f"M_{a}"][i]), float(r[f"M_{b}"][i])
        Ra, Rb = float(ctx.coef[i, band_index(a)]), float(ctx.coef[i, band_index(b)])
        return Step(**base, formula=f"[({a} - {b}) - (M_{{{a}}} - M_{{{b}}})] / (R_{{{a}}} - R_{{{b}}})",
                    template="[(%0 - %1) - (%2 - %3)] / (%4 - %5)",
                    numbers=((y(a), "mag"), (y(b), "mag"), (Ma, "mag"), (Mb, "mag"), (Ra, "coef"), (Rb, "coef")),
                    arith=((y(a) - y(b)) - (Ma - Mb)) / (Ra - Rb))
    return None


def pm_text(err: float, unit: str) -> str:
    """" (±x unit)" for a finite positive error shown to 3 significant figures; "" otherwise."""
    return f" (±{err:.3g}{unit})" if np.isfinite(err) and err > 0 else ""


def period_step(r, i, lum):
    """Period-luminosity rows: the period used and the M_V relation, with its source."""
    text = f"from the '{lum}' period-luminosity relations, not from a spectral type"
    if "period0_d" not in r.colnames or not np.isfinite(float(r["period0_d"][i])):
        return Step("sptnum", "Absolute magnitudes", text=text)
    from specpar.calib.cepheid_pl import load_pl_calibration
    rel = load_pl_calibration().relations["V"]
    p0 = float(r["period0_d"][i])
    p_in = float(r["period_d"][i]) if "period_d" in r.colnames else p0
    x = np.log10(p0)
    mode = "" if np.isclose(p_in, p0) else f" (first overtone {p_in:g} d converted to fundamental)"
    text += (f": P_0 = {p0:.4g} d{mode}, log P_0 = {x:.4f}; M_V = {rel.zp:g} + ({rel.slope:g}) "
             f"(log P_0 - {rel.pivot:g}) = {rel.zp + rel.slope * (x - rel.pivot):.3f} mag; "
             f"source: {rel.source}")
    return Step("sptnum", "Absolute magnitudes", text=text)


def type_step(ctx, i, star, cls, lum):
    """The spectral type as read (or the period-luminosity relation of a pulsator row)."""
    r = ctx.result
    sptnum = float(r["sptnum"][i])
    if lum not in ctx.per_class and cls[0] == cls[1]:  # e.g. a period-luminosity row
        return period_step(r, i, lum)
    lum_txt = f"class {lum}" if cls[0] == cls[1] else f"classes {cls[0]} and {cls[1]} (intermediate)"
    return Step("sptnum", "Spectral type", value=sptnum, kind="num", unit="",
                text=f"'{star.sptype}' read as {type_name(sptnum)}, {lum_txt}; numeric type "
                     f"{sptnum:g} (O0 = 0, B0 = 10, ..., M0 = 60), subtype uncertainty"
                     f"{pm_text(float(r['e_sptnum'][i]), ' subclass') or ' not stated'}")


def lookup_steps(ctx, i, star, cls, fit, colour_known):
    """Calibration values and the absolute magnitude of every band used."""
    touched = [BAND_NAMES[b] for b in range(len(BAND_NAMES))
               if any(ctx.obs.L[ctx.obs_names.index(f.name), b] != 0 for f in fit)]
    if cls[0] not in ctx.per_class:  # no colour chain: show the absolute magnitudes as given
        src = f"'{cls[0]}' relations (see the output metadata)"
        star.calibration = src
        steps = [Step("mv", "Calibration look-up", lhs="M_{V}", value=float(ctx.result["mv"][i]),
                      error=float(ctx.result["e_mv"][i]), source=src)]
        steps += [Step(f"M_{b}", f"Absolute magnitude in {b}", lhs=f"M_{{{b}}}",
                       value=float(ctx.result[f"M_{b}"][i])) for b in touched if b != "V"]
        return steps, touched
    need = [c for b in touched for _, c in band_chain(b)] + (["B-V"] if colour_known else [])
    steps, star.calibration = calibration_steps(ctx, i, cls, list(dict.fromkeys(need)))
    steps += [absmag_step(ctx, i, b) for b in touched if b != "V"]
    return steps, touched


def fit_step(star):
    """The least-squares fit's model and its chi-square."""
    text = (f"model per band: m = M + A + (m-M)_{{0}} with A = R E(B-V); colours: c = c_{{0}} + E(c). "
            f"χ^{{2}} = {fmt(star.chi2, 'mag', SHORT_DECIMALS)} for {star.dof} degree(s) of freedom")
    return Step("fit", "Least-squares fit of the distance modulus and E(B-V)", value=star.chi2, kind="mag", unit="",
                text=text)


def hand_check(ctx, i, used):
    """B and V alone, as a hand check beside a multi-band fit (not the reported answer)."""
    names = {ctx.obs_names[k]: k for k in used}
    if not {"B", "V"} <= set(names):
        return []
    B, V = (float(ctx.obs.y[i, names[n]]) for n in ("B", "V"))
    bv0 = float(ctx.result["bv0"][i])
    return [Step("check_ebv_bv", "Hand check from B and V only (not the fitted answer)", lhs="E(B-V)",
                 formula="(B - V) - (B-V)_{0}", template="(%0 - %1) - %2",
                 numbers=((B, "mag"), (V, "mag"), (bv0, "mag")), value=(B - V) - bv0, arith=(B - V) - bv0)]


def dm_direct(ctx, i, band):
    """Distance modulus from one band: m - M - A."""
    r = ctx.result
    k = ctx.obs_names.index(band)
    m = float(ctx.obs.y[i, k])
    M, A = float(r[f"M_{band}"][i]), float(r[f"A_{band}"][i])
    return Step("dm", "Distance modulus", lhs="(m-M)_{0}", formula=f"{band} - M_{{{band}}} - A_{{{band}}}",
                template="%0 - %1 - %2", numbers=((m, "mag"), (M, "mag"), (A, "mag")),
                value=float(r["dm"][i]), error=float(r["e_dm"][i]), arith=m - M - A)
