"""Worked solutions and answer keys: every step of a spectroscopic-parallax
distance, written out for an instructor.

For each star the solution shows the spectral type as read, the calibration
values looked up (and the table rows and sources they came from), the colour
excess, the extinction, the distance modulus, the distance in parsecs and
light years, and the uncertainty. Each step is a formula, the numbers put
into it and the result with its unit.

Every result is the one :func:`specpar.estimate` returns (called with
``explain=True``); this module only presents those numbers. Values are kept at
full precision and rounded only when written out. Each step also records
``arith``, what its displayed arithmetic gives at full precision, so a test
can check that the written-out sums reproduce the solver's results.

Every displayed equation reproduces from its displayed operands at the
displayed precision: where rounding the operands would change the last digit
of the result, the computed operands are shown with guard digits (one more at
a time, as many as needed; tabulated and measured values that are exact at the
display precision stay as they are). A multi-band fit, which cannot be done by
hand, is followed by a hand route (the weighted mean of the band moduli of the
fit table, with its weights) and the difference between the two.

Output formats: Markdown, a self-contained HTML page (maths as HTML
sub/superscripts, inline CSS, print styles, no scripts or external files) and
a compact answer-key table (CSV).

References
----------
Pogson, N. 1856, MNRAS 17, 12 (magnitude scale; m - M = 5 log10(d / 10 pc)).
Fritsch, F. N. & Carlson, R. E. 1980, SIAM J. Numer. Anal. 17, 238 (monotone
cubic interpolation used between calibration rows).
The calibration and extinction-law references are listed in each output.
"""
from __future__ import annotations

import ast
import html
import operator
import re
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from specpar.bands import BAND_NAMES, BANDS, CALIBRATION_COLOURS, band_index
from specpar.calibration import CalibrationSet, default_calibrations
from specpar.extinction import rv_limits
from specpar.estimate import EstimateOptions, coefficients_at, prepare_observables, to_frame, estimate
from specpar.flags import Flag, SENTENCES
from specpar.tableio import atomic_write
from specpar.sptype import TEMPERATURE_CLASSES

__all__ = ["Step", "FitRow", "WorkedStar", "WorkedSolution", "SummaryTable", "worked_solutions",
           "render_markdown", "render_html", "answer_key", "write_text", "write_worked",
           "register_cli", "FORMATS"]

#: Output formats of :func:`write_worked`, by name and file extension.
FORMATS = {"md": (".md", ".markdown"), "html": (".html", ".htm"), "csv": (".csv",)}
DEFAULT_DECIMALS = 3

_REFERENCES = (
    "Pogson, N. 1856, MNRAS 17, 12: magnitude scale, m - M = 5 log10(d / 10 pc)",
    "Fritsch, F. N. & Carlson, R. E. 1980, SIAM J. Numer. Anal. 17, 238: monotone cubic "
    "interpolation between calibration rows",
)


# ----------------------------------------------------------------------------- data

@dataclass
class Step:
    """One line of a worked solution.

    Attributes
    ----------
    key : str
        Machine name of the quantity (``"ebv"``, ``"dm"``, ``"M_B"`` ...).
    title : str
        Readable name of the step.
    lhs, formula : str
        Symbol and symbolic right-hand side, in a light markup where
        ``_{x}`` is a subscript and ``^{x}`` a superscript.
    template : str
        The formula with numbers: ``%0``, ``%1`` ... stand for ``numbers``.
    numbers : tuple of (float, str)
        Values put into the formula and their display kind (``"mag"``,
        ``"coef"``, ``"pc"``, ``"num"``).
    value, error : float
        The result (the solver's, at full precision) and its 1-sigma error.
    kind, unit : str
        Display kind and unit of the result.
    arith : float
        What the substituted arithmetic gives at full precision (NaN where the
        result comes from a fit rather than from the numbers shown).
    source, text : str
        Where looked-up values came from; any explanation.
    convert : float
        Factor from the displayed arithmetic to the result's unit (unit conversions, e.g. pc to ly).
    """

    key: str
    title: str
    lhs: str = ""
    formula: str = ""
    template: str = ""
    numbers: tuple = ()
    value: float = np.nan
    error: float = np.nan
    kind: str = "mag"
    unit: str = "mag"
    arith: float = np.nan
    source: str = ""
    text: str = ""
    convert: float = 1.0
    template_unit: str = ""


@dataclass
class FitRow:
    """One observable in a multi-band fit: value, model terms and residual (mag)."""

    name: str
    value: float
    sigma: float
    absmag: float
    coef: float
    ext: float
    dm_band: float
    residual: float
    is_magnitude: bool
    dm_fit: float = np.nan


@dataclass
class WorkedStar:
    """Worked solution of one input row."""

    row: int
    id: str
    sptype: str
    solved: bool
    steps: list
    fit: list = field(default_factory=list)
    chi2: float = np.nan
    dof: int = 0
    flags: int = 0
    flag_codes: str = ""
    note: str = ""
    calibration: str = ""

    def step(self, key: str) -> Step:
        """The step named ``key`` (KeyError if this solution has none)."""
        for s in self.steps:
            if s.key == key:
                return s
        raise KeyError(f"star {self.id}: no step {key!r}; steps are {', '.join(s.key for s in self.steps)}")


@dataclass
class SummaryTable:
    """A small table to show above the worked solutions (cells already formatted)."""

    caption: str
    header: list
    rows: list


@dataclass
class WorkedSolution:
    """Worked solutions of a whole table.

    Attributes
    ----------
    stars : list of WorkedStar
        One per input row, in order.
    result : astropy.table.Table or pandas.DataFrame
        What :func:`specpar.estimate` returned (``explain=True``), same type as the input.
    decimals : int
        Default number of decimals shown for magnitudes.
    references : list of str
        Calibration, extinction-law and method references.
    settings : list of str
        Readable assumptions (law, R_V, method, calibration tables).
    """

    stars: list
    result: Table
    decimals: int
    references: list
    settings: list


# ----------------------------------------------------------------------------- formatting

def _round_sig(x: float, sig: int) -> float:
    if not np.isfinite(x) or x == 0:
        return float(x)
    return float(round(x, sig - 1 - int(np.floor(np.log10(abs(x)))))) + 0.0


def _fmt(x, kind: str, decimals: int) -> str:
    """Display one number: magnitudes with ``decimals`` decimals, distances with
    ``decimals + 1`` significant figures, plain numbers as short as exact."""
    x = float(x)
    if not np.isfinite(x):
        return "n/a"
    if kind in ("pc", "ly", "mas"):
        sig = max(decimals + 1, 2)
        v = _round_sig(x, sig)
        if abs(v) >= 10 ** sig:  # no trailing zeros of unknown meaning: all integer digits
            return f"{round(x) + 0:d}"
        d = max(0, sig - 1 - int(np.floor(np.log10(abs(v))))) if v else decimals
        return f"{v:.{d}f}"
    if kind == "num":
        return f"{x:g}"
    v = round(x, decimals) + 0.0
    return f"{v:.{decimals}f}"


def _round_value(x, kind: str, decimals: int) -> float:
    """The number :func:`_fmt` shows, as a float (for CSV keys)."""
    x = float(x)
    if not np.isfinite(x):
        return np.nan
    if kind in ("pc", "ly", "mas"):
        sig = max(decimals + 1, 2)
        return float(round(x)) if abs(_round_sig(x, sig)) >= 10 ** sig else _round_sig(x, sig)
    return round(x, decimals) + 0.0


def _markup(s: str, as_html: bool) -> str:
    """Light markup (``_{x}`` subscript, ``^{x}`` superscript) to HTML or plain text."""

    def run(i, depth=0):
        buf = []
        while i < len(s):
            c = s[i]
            if c in "_^" and s[i + 1:i + 2] == "{":
                inner, i = run(i + 2, depth + 1)
                if as_html:
                    buf.append(f"<sub>{inner}</sub>" if c == "_" else f"<sup>{inner}</sup>")
                else:
                    simple = re.fullmatch(r"[A-Za-z0-9]+", inner) is not None
                    buf.append(c + (inner if simple else f"({inner})"))
                continue
            if c == "}" and depth:
                return "".join(buf), i + 1
            buf.append(html.escape(c) if as_html else c)
            i += 1
        return "".join(buf), i

    return run(0)[0]


def _fmt_error(x, kind: str, decimals: int) -> str:
    """A 1-sigma error for display: as :func:`_fmt`, but an error that would round to zero
    gets two significant figures instead (never "± 0.000"); empty if not finite or not positive."""
    x = float(x)
    if not (np.isfinite(x) and x > 0):
        return ""
    text = _fmt(x, kind, decimals)
    if float(text) == 0.0:
        d = 1 - int(np.floor(np.log10(x)))
        text = f"{round(x, d):.{d}f}"
    return text


def _fmt_operand(value, kind: str, decimals: int, extra: int) -> str:
    """An operand shown with ``extra`` guard digits, unless it is exact at the base precision."""
    base = _fmt(value, kind, decimals)
    if extra == 0 or kind == "num" or not np.isfinite(value):
        return base
    if abs(float(base) - value) <= 1e-9 * max(1.0, abs(value)):
        return base  # e.g. a tabulated 4.800 or a measured 9.412: no guard digits needed
    return _fmt(value, kind, decimals + extra)


def _substitute(step: Step, decimals: int, extra: int = 0) -> str:
    def repl(m):
        k = int(m[1])
        value, kind = step.numbers[k]
        text = _fmt_operand(value, kind, decimals, extra)
        first = m.start() == 0 or step.template[:m.start()].rstrip().endswith(("(", "["))
        return f"({text})" if value < 0 and not first else text

    return re.sub(r"%(\d+)", repl, step.template)


_OPS = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul, ast.Div: operator.truediv,
        ast.Pow: operator.pow}


def evaluate_display(text: str) -> float:
    """Value of a displayed arithmetic expression (plain markup: ``×``, ``/``, ``+``, ``-``,
    ``^``, round and square brackets); NaN if it is not plain arithmetic."""
    expr = (text.replace("×", "*").replace("^", "**").replace("[", "(").replace("]", ")")
            .replace("{", "(").replace("}", ")"))

    def ev(node):
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)):
            return float(node.value)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
            v = ev(node.operand)
            return -v if isinstance(node.op, ast.USub) else v
        if isinstance(node, ast.BinOp) and type(node.op) in _OPS:
            return _OPS[type(node.op)](ev(node.left), ev(node.right))
        raise ValueError("not plain arithmetic")

    try:
        return float(ev(ast.parse(expr, mode="eval")))
    except (SyntaxError, ValueError, ZeroDivisionError, OverflowError):
        return np.nan


def _display(step: Step, decimals: int):
    """(substituted numbers, result text) such that the numbers shown give the result shown.

    Operands are first shown at the display precision; where their rounding would change the
    last digit of the result, computed operands get guard digits (one more at a time) until
    the displayed arithmetic reproduces the displayed result (common practice in hand
    calculation: carry extra digits in intermediate values, round the result)."""
    result = _fmt(step.value, step.kind, decimals) if np.isfinite(step.value) else ""
    if not step.template:
        return "", result
    if not (np.isfinite(step.arith) and result):
        return _substitute(step, decimals), result
    for extra in range(0, 9):
        sub = _substitute(step, decimals, extra)
        got = evaluate_display(_markup(sub, False)) * step.convert
        if np.isfinite(got) and _fmt(got, step.kind, decimals) == result:
            return sub, result
    if not np.isfinite(got):  # not plain arithmetic (no template of this module): show it as it is
        return _substitute(step, decimals), result
    # not reachable in practice (an exact tie at full precision): show what the numbers give
    return sub, _fmt(got, step.kind, decimals)


def _equation(step: Step, decimals: int) -> str:
    """The step as one line of markup: lhs = formula = numbers = result unit."""
    if not step.lhs:
        return ""
    sub, res = _display(step, decimals)
    parts = [p for p in (step.lhs, step.formula, f"{sub} {step.template_unit}".strip()) if p]
    if res:
        err = _fmt_error(step.error, step.kind, decimals)
        if err:
            res += f" ± {err}"
        parts.append(f"{res} {step.unit}".strip())
    return " = ".join(parts)


_MD_SPECIAL = re.compile(r"([\\`*\[\]<>])")


def _md_text(text) -> str:
    """Text for Markdown outside code spans: characters that could open HTML, links or code
    (``< > [ ] ` * \\``) are backslash-escaped, so input text such as ``<img onerror=...>``
    shows as text instead of becoming markup."""
    return _MD_SPECIAL.sub(r"\\\1", str(text))


# ----------------------------------------------------------------------------- building

def _type_name(sptnum: float) -> str:
    k = int(np.clip(sptnum // 10, 0, len(TEMPERATURE_CLASSES) - 1))
    return f"{TEMPERATURE_CLASSES[k]}{sptnum - 10 * k:g}"


def _chain(band: str):
    """[(sign, colour)] such that M_band = M_V + sum(sign * colour)."""
    out = []
    b = BANDS[band_index(band)]
    while b.parent is not None:
        out.append((b.sign, b.colour))
        b = BANDS[band_index(b.parent)]
    return out[::-1]


def _colour_symbol(colour: str) -> str:
    return f"({colour})_{{0}}"


def _lookup(cals: CalibrationSet, lc: str, sptnum: float):
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


def _calibration_steps(ctx, i, cls, colours_needed):
    """Steps for M_V, the intrinsic colours needed and their sources."""
    r = ctx.result
    mv, e_mv = float(r["mv"][i]), float(r["e_mv"][i])
    descs, srcs = [], []
    for lc in dict.fromkeys(cls):
        d, s = _lookup(ctx.cals, lc, float(r["sptnum"][i]))
        descs.append(f"class {lc}: {d}")
        srcs.extend(s)
    source = "; ".join(descs) + ("" if not srcs else ". Row source: " + " | ".join(dict.fromkeys(srcs)))
    steps = []
    blended = len(cls) == 2 and cls[0] != cls[1]
    for key, sym, col in [("mv", "M_{V}", None)] + [(f"c0_{c}", _colour_symbol(c), c) for c in colours_needed]:
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


def _absmag_step(ctx, i, band):
    chain = _chain(band)
    mv = float(ctx.result["mv"][i])
    terms = [ctx.colours[i, CALIBRATION_COLOURS.index(c)] for _, c in chain]
    formula = "M_{V}" + "".join(f" {'+' if s > 0 else '-'} {_colour_symbol(c)}" for s, c in chain)
    template = "%0" + "".join(f" {'+' if s > 0 else '-'} %{k + 1}" for k, (s, _) in enumerate(chain))
    arith = mv + sum(s * t for (s, _), t in zip(chain, terms))
    return Step(f"M_{band}", f"Absolute magnitude in {band}", lhs=f"M_{{{band}}}", formula=formula,
                template=template, numbers=((mv, "mag"),) + tuple((t, "mag") for t in terms),
                value=float(ctx.result[f"M_{band}"][i]), arith=arith)


def _observations(table, opts: EstimateOptions):
    """The observables as the solver saw them (values, errors, band combinations) and the
    input frame under our column names (the column mapping applied exactly as estimate applies it)."""
    prep = prepare_observables(to_frame(table), opts)
    return prep.obs, prep.obs_names, prep.frame


class _Columns:
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
class _Context:
    result: _Columns
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


def _used(ctx, i):
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


def _fit_rows(ctx, i, used):
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


def _extinction_step(ctx, i, band, ebv_symbol="E(B-V)"):
    r = ctx.result
    ebv = float(r["ebv"][i])
    R = float(ctx.coef[i, band_index(band)])
    rsym = "R_{V}" if band == "V" else f"R_{{{band}}}"
    rv = float(r["rv"][i])
    src = f"{ctx.law} extinction law ({ctx.law_ref}) at R_V = {_fmt(rv, 'num', 0)}"
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


def _colour_excess_step(ctx, i, used):
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


def _distance_steps(ctx, i, dm_step):
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
                      text=_budget_text(ctx, i)))
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


def _budget_text(ctx, i):
    r = ctx.result
    used = _used(ctx, i)
    phot = ", ".join(f"σ({ctx.obs_names[k]}) = {_fmt(ctx.obs.sigma[i, k], 'mag', 3)}" for k in used)
    parts = [f"photometric errors ({phot} mag)",
             f"intrinsic scatter of M_V ({_fmt(float(r['e_mv'][i]), 'mag', 2)} mag)"]
    if any(ctx.obs.L[k, band_index("V")] != 1 or np.count_nonzero(ctx.obs.L[k]) > 1 for k in used):
        parts.append("intrinsic-colour scatter of the calibration")
    if str(r["lum_class"][i]).split("-")[0] in ctx.per_class:  # not for period-luminosity rows
        parts.append(f"subtype uncertainty{_pm_text(float(r['e_sptnum'][i]), ' subclass')}")
    e_rv, rv = float(r["e_rv"][i]), float(r["rv"][i])
    at_limit = ctx.result.meta.get("R_V_free") and any(np.isclose(rv, x) for x in rv_limits(ctx.law))
    if float(r["ebv"][i]) > 0 and e_rv > 0:
        parts.append(f"R_V uncertainty{_pm_text(e_rv, '')}" if np.isfinite(e_rv) and not at_limit else
                     "R_V at the limit of the law or unconstrained by these bands (a limit, see the "
                     "extinction step)")
    return "from the fit's covariance, which includes " + ", ".join(parts)


def _pm_text(err: float, unit: str) -> str:
    """" (±x unit)" for a finite positive error shown to 3 significant figures; "" otherwise."""
    return f" (±{err:.3g}{unit})" if np.isfinite(err) and err > 0 else ""


def _period_step(r, i, lum):
    """Period-luminosity rows: the period used and the M_V relation, with its source."""
    text = f"from the '{lum}' period-luminosity relations, not from a spectral type"
    if "period0_d" not in r.colnames or not np.isfinite(float(r["period0_d"][i])):
        return Step("sptnum", "Absolute magnitudes", text=text)
    from specpar.cepheid import load_pl_calibration
    rel = load_pl_calibration().relations["V"]
    p0 = float(r["period0_d"][i])
    p_in = float(r["period_d"][i]) if "period_d" in r.colnames else p0
    x = np.log10(p0)
    mode = "" if np.isclose(p_in, p0) else f" (first overtone {p_in:g} d converted to fundamental)"
    text += (f": P_0 = {p0:.4g} d{mode}, log P_0 = {x:.4f}; M_V = {rel.zp:g} + ({rel.slope:g}) "
             f"(log P_0 - {rel.pivot:g}) = {rel.zp + rel.slope * (x - rel.pivot):.3f} mag; "
             f"source: {rel.source}")
    return Step("sptnum", "Absolute magnitudes", text=text)


def _type_step(ctx, i, star, cls, lum):
    r = ctx.result
    sptnum = float(r["sptnum"][i])
    if lum not in ctx.per_class and cls[0] == cls[1]:  # e.g. a period-luminosity row
        return _period_step(r, i, lum)
    lum_txt = f"class {lum}" if cls[0] == cls[1] else f"classes {cls[0]} and {cls[1]} (intermediate)"
    return Step("sptnum", "Spectral type", value=sptnum, kind="num", unit="",
                text=f"'{star.sptype}' read as {_type_name(sptnum)}, {lum_txt}; numeric type "
                     f"{sptnum:g} (O0 = 0, B0 = 10, ..., M0 = 60), subtype uncertainty"
                     f"{_pm_text(float(r['e_sptnum'][i]), ' subclass') or ' not stated'}")


def _lookup_steps(ctx, i, star, cls, fit, colour_known):
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
    need = [c for b in touched for _, c in _chain(b)] + (["B-V"] if colour_known else [])
    steps, star.calibration = _calibration_steps(ctx, i, cls, list(dict.fromkeys(need)))
    steps += [_absmag_step(ctx, i, b) for b in touched if b != "V"]
    return steps, touched


def _reddening_steps(ctx, i, star, used, fit, touched, colour_known, ref_band):
    """Colour excess and extinction; returns (steps, distance-modulus step)."""
    r = ctx.result
    if not colour_known:
        return [Step("ebv", "Colour excess", lhs="E(B-V)", value=0.0,
                     text="one band only: the colour excess cannot be measured and is taken as 0 "
                          "(no extinction correction)"),
                Step(f"A_{ref_band}", "Extinction", lhs=f"A_{{{ref_band}}}", value=0.0)], _dm_direct(ctx, i, ref_band)
    # a row whose fitted E(B-V) fell below 0 is held at 0: not the exact two-observable
    # solution, so it is shown as a fit (table, hand route) and the bound is said in words
    at_bound = bool(int(r["flags"][i]) & int(Flag.EBV_AT_BOUND))
    ebv_step = None if at_bound else _colour_excess_step(ctx, i, used)
    if ebv_step is not None:  # two observables: exact, written out
        ext = [_extinction_step(ctx, i, b) for b in dict.fromkeys(["V", ref_band])]
        return [ebv_step] + ext, _dm_direct(ctx, i, ref_band)
    star.fit, star.chi2, star.dof = fit, float(r["chi2"][i]), int(r["dof"][i])
    ebv_text = "from the least-squares fit over all bands (table)"
    dm_text = ("least-squares fit over all bands (table): each band gives m - M - A; the fit weights "
               "them with the photometric errors and the calibration's scatter (correlations between "
               "bands included)")
    if at_bound:
        raw, upper = float(r["ebv_unbounded"][i]), float(r["ebv_upper"][i])
        ebv_text = (f"the fit puts E(B-V) at {_fmt(raw, 'mag', ctx.decimals)} mag, below 0, which no dust can "
                    f"give: E(B-V) is held at 0 (95 % upper limit {_fmt(upper, 'mag', ctx.decimals)} mag); the "
                    "colours are bluer than the type's, so the type or the photometry may be off")
        dm_text += ("; with E(B-V) held at 0 the colour that is too blue is read as an earlier subtype within "
                    "the calibration's scatter, which moves the distance modulus away from the hand value")
    ebv_step = Step("ebv", "Colour excess", lhs="E(B-V)", value=float(r["ebv"][i]),
                    error=float(r["e_ebv"][i]), text=ebv_text)
    dm_step = Step("dm", "Distance modulus", lhs="(m-M)_{0}", value=float(r["dm"][i]), error=float(r["e_dm"][i]),
                   text=dm_text)
    ext = [_extinction_step(ctx, i, b) for b in dict.fromkeys(["V"] + touched)]
    for st in ext[1:]:  # the law is named once
        st.source = "R_B = R_V + 1 by the definition of E(B-V)" if st.key == "A_B" else ""
    hand = _hand_mean_step(ctx, i, cls_of(ctx, i), fit, ctx.decimals)
    return [_fit_step(star), ebv_step] + ext + _hand_check(ctx, i, used), [dm_step] + ([hand] if hand else [])


def cls_of(ctx, i):
    """Luminosity class whose calibration gives the colour scatter of row i (None if none)."""
    lc = str(ctx.result["lum_class"][i]).split("-")[0]
    return lc if lc in ctx.per_class else None


def _hand_mean_step(ctx, i, lc, fit, dec):
    """Hand route beside a multi-band fit: the weighted mean of the band moduli of the fit table.

    Weights w = 1 / (σ^2 + n s_c^2): σ the photometric error, s_c the calibration's colour scatter,
    n the number of calibration colours linking the band to V (its M = M_V + n colours). The
    numbers are the table's displayed ones, so the arithmetic is exactly what a student gets.
    """
    mags = [f for f in fit if f.is_magnitude and np.isfinite(f.dm_band)]
    if len(mags) < 2:
        return None
    sc = ctx.cals.by_class[lc].colour_scatter if lc else 0.0
    w = [_round_sig(1.0 / (f.sigma ** 2 + len(_chain(f.name)) * sc ** 2), 3) for f in mags]
    dmb = [float(_band_modulus(f, dec)) for f in mags]
    numbers, top, bottom = [], [], []
    for k, (wk, dk) in enumerate(zip(w, dmb)):
        numbers += [(wk, "num"), (dk, "mag")]
        top.append(f"%{2 * k} × %{2 * k + 1}")
        bottom.append(f"%{2 * k}")
    step = Step("dm_hand", "Hand route: weighted mean of the band moduli (not the fitted answer)",
                lhs="(m-M)_{0}", formula="Σ w (m - M - A) / Σ w",
                template=f"({' + '.join(top)}) / ({' + '.join(bottom)})", numbers=tuple(numbers))
    hand = evaluate_display(_markup(_substitute(step, dec), False))
    fitted = float(ctx.result["dm"][i])
    diff = fitted - hand
    step.value = step.arith = hand
    step.text = (f"weights w = 1/(σ^{{2}} + n s_{{c}}^{{2}}) with σ the photometric error, s_{{c}} = {sc:g} mag "
                 "the calibration's colour scatter and n the number of colours linking the band to V; m - M - A "
                 f"from the table (A at the fitted E(B-V)). The fit gives {_fmt(fitted, 'mag', dec)} mag, "
                 f"{_fmt(diff, 'mag', dec)} mag from this mean ({100 * (10 ** (diff / 5) - 1):+.1f} % in distance): "
                 "it solves E(B-V) and (m-M)_{0} together and weighs the bands with the full covariance, in which "
                 "the scatter of M_V, of the colours and of the subtype moves the bands together")
    return step


def _band_modulus(f: FitRow, dec) -> str:
    """m - M - A of a fit-table row from the displayed m, M and A (exact at ``dec`` decimals)."""
    return _fmt(round(f.value, dec) - round(f.absmag, dec) - round(f.ext, dec), "mag", dec)


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
    star.steps.append(_type_step(ctx, i, star, cls, lum))
    if not star.solved or not np.isfinite(float(r["mv"][i])):
        star.steps.append(Step("none", "No solution", text=star.note))
        return star
    used = _used(ctx, i)
    fit = _fit_rows(ctx, i, used)
    mags = [f.name for f in fit if f.is_magnitude]
    colour_known = not flags & Flag.EBV_ASSUMED_ZERO
    steps, touched = _lookup_steps(ctx, i, star, cls, fit, colour_known)
    star.steps.extend(steps)
    ref_band = "V" if "V" in mags else (mags[0] if mags else "V")
    steps, dm_step = _reddening_steps(ctx, i, star, used, fit, touched, colour_known, ref_band)
    star.steps.extend(steps)
    star.steps.extend(_distance_steps(ctx, i, dm_step))
    return star


def _fit_step(star):
    text = (f"model per band: m = M + A + (m-M)_{{0}} with A = R E(B-V); colours: c = c_{{0}} + E(c). "
            f"χ^{{2}} = {_fmt(star.chi2, 'mag', 2)} for {star.dof} degree(s) of freedom")
    return Step("fit", "Least-squares fit of the distance modulus and E(B-V)", value=star.chi2, kind="mag", unit="",
                text=text)


def _hand_check(ctx, i, used):
    """B and V alone, as a hand check beside a multi-band fit (not the reported answer)."""
    names = {ctx.obs_names[k]: k for k in used}
    if not {"B", "V"} <= set(names):
        return []
    B, V = (float(ctx.obs.y[i, names[n]]) for n in ("B", "V"))
    bv0 = float(ctx.result["bv0"][i])
    return [Step("check_ebv_bv", "Hand check from B and V only (not the fitted answer)", lhs="E(B-V)",
                 formula="(B - V) - (B-V)_{0}", template="(%0 - %1) - %2",
                 numbers=((B, "mag"), (V, "mag"), (bv0, "mag")), value=(B - V) - bv0, arith=(B - V) - bv0)]


def _dm_direct(ctx, i, band):
    r = ctx.result
    k = ctx.obs_names.index(band)
    m = float(ctx.obs.y[i, k])
    M, A = float(r[f"M_{band}"][i]), float(r[f"A_{band}"][i])
    return Step("dm", "Distance modulus", lhs="(m-M)_{0}", formula=f"{band} - M_{{{band}}} - A_{{{band}}}",
                template="%0 - %1 - %2", numbers=((m, "mag"), (M, "mag"), (A, "mag")),
                value=float(r["dm"][i]), error=float(r["e_dm"][i]), arith=m - M - A)


def _context(table, result, options) -> _Context:
    opts = EstimateOptions(**{k: v for k, v in options.items() if k != "calibrations"},
                           calibrations=tuple(options.get("calibrations") or ()))
    cals = CalibrationSet(opts.calibrations) if opts.calibrations else default_calibrations()
    obs, names, frame = _observations(table, opts)
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
    return _Context(result, cals, obs, names, colours, per_class, coef, opts.law,
                    meta.get("extinction_law_reference", ""), opts.method, int(opts.n_draws), frame)


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
    _check_decimals(decimals)
    estimate_options.pop("explain", None)
    result = estimate(table, explain=True, **estimate_options)
    cols = _Columns(result)
    ctx = _context(table, cols, estimate_options)
    ctx.decimals = int(decimals)
    stars = [_star(ctx, i) for i in range(len(cols))]  # text per star; the numbers are all vectorised
    meta = cols.meta
    refs = []
    used_classes = {c for s in cols["lum_class"] for c in str(s).split("-")}
    for lc in ctx.cals.by_class:
        if lc in used_classes:
            refs.extend(ctx.cals.by_class[lc].references)
    refs.append(f"Extinction law {ctx.law}: {ctx.law_ref}")
    refs.extend(_REFERENCES)
    settings = [
        f"extinction law {ctx.law} ({ctx.law_ref}), R_V = {meta.get('R_V', '')}"
        + (f" ± {_fmt_error(meta.get('sigma_R_V', np.nan), 'num', 3)}" if _fmt_error(meta.get('sigma_R_V', np.nan), 'num', 3)
           else " (held fixed, no uncertainty)")
        + (" (fitted per star where possible)" if meta.get("R_V_free") else ""),
        "error propagation: " + ("first order (analytic)" if ctx.method == "analytic"
                                 else f"Monte Carlo, {ctx.n_draws} draws, seed {meta.get('seed')}"),
        f"missing photometric errors taken as {meta.get('default_error_mag', '')} mag",
        "every equation's result follows from the numbers it shows; where rounding them would change the "
        "last digit, the computed numbers carry extra (guard) digits",
    ]
    settings += [f"calibration {lc}: {ctx.cals.by_class[lc].path or ctx.cals.by_class[lc].name}"
                 for lc in ctx.cals.by_class if lc in used_classes]
    return WorkedSolution(stars, result, int(decimals), list(dict.fromkeys(refs)), settings)


def _check_decimals(decimals):
    if not isinstance(decimals, (int, np.integer)) or not 0 <= decimals <= 10:
        raise ValueError(f"decimals must be an integer from 0 to 10, got {decimals!r}")


# ----------------------------------------------------------------------------- answer key

#: Answer-key columns: (column, kind) taken from the estimate output.
_KEY_COLUMNS = (
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
    _check_decimals(dec)
    r = ws.result
    out = Table()
    out["id"] = [s.id for s in ws.stars]
    out["sptype"] = [s.sptype for s in ws.stars]
    ly = (np.asarray(r["dist_pc"], dtype=float) * u.pc).to(u.lyr).value
    for col, kind in _KEY_COLUMNS:
        data = ly if col == "dist_ly" else np.asarray(r[col])
        if kind is None:
            out[col] = data
        else:
            out[col] = [_round_value(v, kind, dec) for v in np.asarray(data, dtype=float)]
        unit = {"mag": "mag", "pc": "pc", "ly": "lyr", "mas": "mas"}.get(kind or "")
        if unit and col != "chi2":
            out[col].unit = unit
    out["calibration"] = [s.calibration.split(". Row source")[0] for s in ws.stars]
    return out


# ----------------------------------------------------------------------------- Markdown

def _default_summary(ws, dec) -> SummaryTable:
    key = answer_key(ws, decimals=dec)
    rows = [[k["id"], k["sptype"], _fmt(k["ebv"], "mag", dec), _fmt(k["dm"], "mag", dec),
             _fmt(k["dist_pc"], "pc", dec), _fmt(k["dist_ly"], "ly", dec), k["flag_codes"] or "-"] for k in key]
    return SummaryTable("Answer key", ["id", "type", "E(B-V)", "(m-M)_{0}", "d (pc)", "d (ly)", "flags"], rows)


def _md_cell(text) -> str:
    return _md_text(text).replace("|", "\\|").replace("\n", " ")


def _md_table(header, rows) -> list:
    lines = ["| " + " | ".join(_md_cell(_markup(str(h), False)) for h in header) + " |",
             "|" + "|".join(" --- " for _ in header) + "|"]
    lines += ["| " + " | ".join(_md_cell(c) for c in row) + " |" for row in rows]
    return lines


def _fit_header():
    return ["observable", "value", "σ", "M", "R = A/E(B-V)", "A", "m - M - A", "residual"]


def _fit_cells(f: FitRow, dec):
    """One fit-table row; for magnitudes, m - M - A and the residual (m - M - A) - (m-M)_0 are the
    differences of the displayed numbers, so they reproduce by hand."""
    if f.is_magnitude:
        dmb = _band_modulus(f, dec)
        res = _fmt(float(dmb) - round(f.dm_fit, dec), "mag", dec)
    else:
        dmb, res = "(colour)", _fmt(f.residual, "mag", dec)
    return [f.name, _fmt(f.value, "mag", dec), _fmt(f.sigma, "mag", dec), _fmt(f.absmag, "mag", dec),
            _fmt(f.coef, "coef", dec), _fmt(f.ext, "mag", dec), dmb, res]


def _answer_line(s: WorkedStar, dec) -> str:
    if not s.solved:
        return "no distance"
    d = s.step("dist_pc")
    lo, hi = s.step("dist_lo_pc").value, s.step("dist_hi_pc").value
    return (f"d = {_fmt(d.value, 'pc', dec)} pc ({_fmt(lo, 'pc', dec)} to {_fmt(hi, 'pc', dec)} pc) "
            f"= {_fmt(s.step('dist_ly').value, 'ly', dec)} ly")


def _flag_lines(s: WorkedStar):
    return [f"{f.name}: {SENTENCES[f]}" for f in Flag if s.flags & f]


def render_markdown(ws: WorkedSolution, *, title: str = "Worked solutions", decimals: int | None = None,
                    preface=(), summaries=()) -> str:
    """Worked solutions as Markdown.

    Parameters
    ----------
    ws : WorkedSolution
    title : str
    decimals : int, optional
        Override ``ws.decimals``.
    preface : sequence of str
        Paragraphs placed under the title.
    summaries : sequence of SummaryTable
        Tables placed before the solutions.
    """
    dec = ws.decimals if decimals is None else decimals
    _check_decimals(dec)
    out = [f"# {_md_text(title)}", ""]
    for p in preface:
        out += [_md_text(p), ""]
    out += ["Assumptions:", ""] + [f"- {_md_text(s)}" for s in ws.settings] + [""]
    for t in list(summaries) or [_default_summary(ws, dec)]:
        out += [f"## {_md_text(t.caption)}", ""] + _md_table(t.header, t.rows) + [""]
    for s in ws.stars:
        out += [f"## {_md_text(s.id)}: {_md_text(s.sptype)}", ""]
        for n, st in enumerate(s.steps, 1):
            line = f"{n}. **{st.title}**"
            eq = _equation(st, dec)
            if eq:
                line += f": `{_markup(eq, False)}`"
            if st.text:
                text = _md_text(_markup(st.text, False))
                line += f"; {text}" if eq else f": {text}"
            out.append(line)
            if st.source:
                out.append(f"   - source: {_md_text(st.source)}")
            if st.key == "fit" and s.fit:
                out += [""] + ["   " + ln for ln in _md_table(_fit_header(), [_fit_cells(f, dec) for f in s.fit])]
                out.append("")
        out += ["", f"**Answer:** {_md_text(_answer_line(s, dec))}", ""]
        flags = _flag_lines(s)
        if flags:
            out += ["Flags:", ""] + [f"- {_md_text(f)}" for f in flags] + [""]
    out += ["## References", ""] + [f"- {_md_text(r)}" for r in ws.references] + [""]
    return "\n".join(out)


# ----------------------------------------------------------------------------- HTML

_CSS = """
body { font-family: 'DejaVu Serif', Georgia, 'Times New Roman', serif; color: #111; background: #fff;
       max-width: 62em; margin: 1.5em auto; padding: 0 1em; line-height: 1.45; }
h1 { font-size: 1.6em; border-bottom: 2px solid #333; padding-bottom: .2em; }
h2 { font-size: 1.25em; margin-top: 1.6em; }
table { border-collapse: collapse; margin: .6em 0; font-size: .92em; }
th, td { border: 1px solid #888; padding: .15em .5em; text-align: right; }
th { background: #eee; } td.l, th.l { text-align: left; }
section.star { border-top: 1px solid #999; margin-top: 1.2em; break-inside: avoid; page-break-inside: avoid; }
ol.steps > li { margin: .35em 0; }
.eq { font-family: 'DejaVu Serif', 'Cambria Math', serif; font-size: 1.05em; white-space: nowrap; }
.src { font-size: .82em; color: #444; }
.answer { font-weight: bold; margin: .6em 0; }
.flags { font-size: .9em; color: #7a3a00; }
@media print {
  body { max-width: none; margin: 0; font-size: 10.5pt; }
  h1 { font-size: 15pt; } h2 { font-size: 12pt; }
  section.star { page-break-inside: avoid; }
  .eq { white-space: normal; }
  th { background: none; }
}
"""


_NUMBER = re.compile(r"^(?:n/a|[-+]?[\d.]+(?: (?:to|±) [-+]?[\d.]+)?)$")


def _html_table(header, rows, caption=None) -> str:
    """HTML table; text cells left-aligned, numbers right-aligned; header cells take markup."""
    cap = f"<caption>{html.escape(caption)}</caption>" if caption else ""
    text_col = [j == 0 or any(not _NUMBER.match(str(r[j])) for r in rows) for j in range(len(header))]
    head = "".join(f'<th{" class=l" if text_col[j] else ""}>{_markup(str(h), True)}</th>'
                   for j, h in enumerate(header))
    body = "".join("<tr>" + "".join(f'<td{" class=l" if text_col[j] else ""}>{html.escape(str(c))}</td>'
                                    for j, c in enumerate(row)) + "</tr>" for row in rows)
    return f"<table>{cap}<thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def render_html(ws: WorkedSolution, *, title: str = "Worked solutions", decimals: int | None = None,
                preface=(), summaries=()) -> str:
    """Worked solutions as one self-contained HTML page (no scripts, fonts or
    other files; maths as HTML sub/superscripts; print styles included).

    Parameters are those of :func:`render_markdown`; preface paragraphs are plain text.
    """
    dec = ws.decimals if decimals is None else decimals
    _check_decimals(dec)
    e = html.escape
    out = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
           '<meta name="viewport" content="width=device-width, initial-scale=1">',
           f"<title>{e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>", f"<h1>{e(title)}</h1>"]
    out += [f"<p>{e(p)}</p>" for p in preface]
    out.append("<p>Assumptions:</p><ul>" + "".join(f"<li>{e(s)}</li>" for s in ws.settings) + "</ul>")
    for t in list(summaries) or [_default_summary(ws, dec)]:
        out += [f"<h2>{e(t.caption)}</h2>", _html_table(t.header, t.rows)]
    for s in ws.stars:
        out.append(f'<section class="star" id="star-{s.row + 1}"><h2>{e(s.id)}: {e(s.sptype)}</h2><ol class="steps">')
        for st in s.steps:
            item = f"<b>{e(st.title)}</b>"
            eq = _equation(st, dec)
            if eq:
                item += f': <span class="eq">{_markup(eq, True)}</span>'
            if st.text:
                item += f"{'; ' if eq else ': '}{_markup(st.text, True)}"
            if st.source:
                item += f'<div class="src">source: {e(st.source)}</div>'
            if st.key == "fit" and s.fit:
                item += _html_table(_fit_header(), [_fit_cells(f, dec) for f in s.fit])
            out.append(f"<li>{item}</li>")
        out.append(f'</ol><p class="answer">Answer: {e(_answer_line(s, dec))}</p>')
        flags = _flag_lines(s)
        if flags:
            out.append('<ul class="flags">' + "".join(f"<li>{e(f)}</li>" for f in flags) + "</ul>")
        out.append("</section>")
    out.append("<h2>References</h2><ul>" + "".join(f"<li>{e(r)}</li>" for r in ws.references) + "</ul>")
    out += ["</body>", "</html>", ""]
    return "\n".join(out)


# ----------------------------------------------------------------------------- writing

def write_text(text: str, path, *, inputs=(), overwrite: bool = False) -> None:
    """Write a text file atomically; refuses to write over ``inputs`` or, unless
    ``overwrite``, over an existing file (see :func:`specpar.tableio.atomic_write`)."""
    def writer(tmp):
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
    atomic_write(path, writer, inputs=inputs, overwrite=overwrite)


def _format_of(path, fmt):
    if fmt:
        if fmt not in FORMATS:
            raise ValueError(f"unknown format {fmt!r}; choose one of {', '.join(FORMATS)}")
        return fmt
    name = str(path).lower()
    for key, exts in FORMATS.items():
        if name.endswith(exts):
            return key
    raise ValueError(f"cannot tell the format of {path} from its extension; use .md, .html or .csv "
                     f"or give the format ({', '.join(FORMATS)})")


def write_worked(ws: WorkedSolution, path, fmt=None, *, inputs=(), overwrite=False, title="Worked solutions",
                 decimals=None, preface=(), summaries=()) -> None:
    """Write worked solutions as Markdown, HTML or a CSV answer key (atomically)."""
    from specpar.tableio import write_table
    fmt = _format_of(path, fmt)
    if fmt == "csv":
        write_table(answer_key(ws, decimals=decimals), path, "csv", inputs=inputs, overwrite=overwrite)
        return
    render = render_markdown if fmt == "md" else render_html
    write_text(render(ws, title=title, decimals=decimals, preface=preface, summaries=summaries), path,
               inputs=inputs, overwrite=overwrite)


# ----------------------------------------------------------------------------- CLI

def _cmd_worked(args) -> int:
    from specpar.columns import column_map
    from specpar.tableio import read_table
    table = read_table(args.input, args.in_format, hdu=args.hdu)
    ws = worked_solutions(table, decimals=args.decimals, law=args.law, rv=args.rv, sigma_rv=args.sigma_rv,
                          fit_rv=args.fit_rv, default_error=args.default_error,
                          calibrations=tuple(args.calibration or ()), columns=column_map(args.col))
    write_worked(ws, args.output, args.format, inputs=[args.input], overwrite=args.overwrite,
                 title=args.title or f"Worked solutions: {Path(args.input).name}")
    n_solved = sum(st.solved for st in ws.stars)
    print(f"specpar: worked solutions for {len(ws.stars)} rows -> {args.output} ({n_solved} with a distance)")
    return 0


def register_cli(sub) -> None:
    """Add ``specpar worked``."""
    from specpar.extinction import DEFAULT_LAW, DEFAULT_RV, LAWS
    from specpar.tableio import FORMATS as TABLE_FORMATS
    p = sub.add_parser("worked", help="worked solutions / answer key for every star of a table",
                       description="Write every step of each star's distance (type read, calibration values "
                                   "and their sources, colour excess, extinction, distance modulus, distance in "
                                   "pc and ly, uncertainty) as Markdown, a standalone HTML page or a CSV "
                                   "answer key. The numbers are those of 'specpar estimate'.")
    p.add_argument("input", help="table of stars, as for 'specpar estimate'")
    p.add_argument("-o", "--output", required=True, help="output file (.md, .html or .csv)")
    p.add_argument("--format", choices=list(FORMATS), help="output format if the extension does not tell")
    p.add_argument("--decimals", type=int, default=DEFAULT_DECIMALS,
                   help=f"decimals shown for magnitudes (default {DEFAULT_DECIMALS}); distances get one more "
                        "significant figure than this")
    p.add_argument("--title", help="page title")
    p.add_argument("--in-format", choices=list(TABLE_FORMATS), help="input format if the extension does not tell")
    p.add_argument("--hdu", metavar="N|NAME", help="FITS: the table HDU to read when the file holds several (VOTable: table index or ID)")
    p.add_argument("--col", action="append", metavar="OURS=YOURS", help="map a column name (repeatable)")
    p.add_argument("--law", default=DEFAULT_LAW, choices=list(LAWS), help=f"extinction law (default {DEFAULT_LAW})")
    p.add_argument("--rv", type=float, default=DEFAULT_RV, help=f"R_V (default {DEFAULT_RV})")
    p.add_argument("--sigma-rv", type=float, default=0.2, help="uncertainty of R_V (default 0.2)")
    p.add_argument("--fit-rv", action="store_true", help="fit R_V per star where the bands allow")
    p.add_argument("--default-error", type=float, default=0.05,
                   help="error in mag assumed where a magnitude has none (default 0.05)")
    p.add_argument("--calibration", action="append", metavar="FILE",
                   help="your own calibration table (ECSV), replacing the shipped one of its class")
    p.add_argument("--overwrite", action="store_true", help="replace the output file if it exists")
    p.set_defaults(func=_cmd_worked)
