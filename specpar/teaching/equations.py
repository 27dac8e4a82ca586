"""A step written out: its numbers substituted into the formula and the result, such that the
numbers shown give the result shown (guard digits where rounding would change the last digit).

References
----------
Carrying guard digits in intermediate values and rounding only the result is common practice in
hand calculation.
"""
from __future__ import annotations

import re

import numpy as np

from specpar.core.bands import BANDS, band_index

from .model import FitRow, Step
from .numbers import evaluate_display, fmt, fmt_error, fmt_operand, markup

__all__ = ["substitute", "display", "equation", "band_chain", "colour_symbol", "band_modulus",
           "MAX_GUARD_DIGITS"]

#: Most guard digits an operand gets before the displayed arithmetic must reproduce the result
#: (double precision carries about 15-16 significant digits; 8 more than shown is far more than
#: any step needs).
MAX_GUARD_DIGITS = 8


def substitute(step: Step, decimals: int, extra: int = 0) -> str:
    """The step's template with its numbers put in (``extra`` guard digits on computed operands;
    negative operands in brackets)."""
    def repl(m):
        k = int(m[1])
        value, kind = step.numbers[k]
        text = fmt_operand(value, kind, decimals, extra)
        first = m.start() == 0 or step.template[:m.start()].rstrip().endswith(("(", "["))
        return f"({text})" if value < 0 and not first else text

    return re.sub(r"%(\d+)", repl, step.template)


def display(step: Step, decimals: int):
    """(substituted numbers, result text) such that the numbers shown give the result shown.

    Operands are first shown at the display precision; where their rounding would change the
    last digit of the result, computed operands get guard digits (one more at a time) until
    the displayed arithmetic reproduces the displayed result (common practice in hand
    calculation: carry extra digits in intermediate values, round the result)."""
    result = fmt(step.value, step.kind, decimals) if np.isfinite(step.value) else ""
    if not step.template:
        return "", result
    if not (np.isfinite(step.arith) and result):
        return substitute(step, decimals), result
    for extra in range(0, MAX_GUARD_DIGITS + 1):
        sub = substitute(step, decimals, extra)
        got = evaluate_display(markup(sub, False)) * step.convert
        if np.isfinite(got) and fmt(got, step.kind, decimals) == result:
            return sub, result
    if not np.isfinite(got):  # not plain arithmetic (no template of this module): show it as it is
        return substitute(step, decimals), result
    # not reachable in practice (an exact tie at full precision): show what the numbers give
    return sub, fmt(got, step.kind, decimals)


def equation(step: Step, decimals: int) -> str:
    """The step as one line of markup: lhs = formula = numbers = result unit."""
    if not step.lhs:
        return ""
    sub, res = display(step, decimals)
    parts = [p for p in (step.lhs, step.formula, f"{sub} {step.template_unit}".strip()) if p]
    if res:
        err = fmt_error(step.error, step.kind, decimals)
        if err:
            res += f" ± {err}"
        parts.append(f"{res} {step.unit}".strip())
    return " = ".join(parts)


def band_chain(band: str):
    """[(sign, colour)] such that M_band = M_V + sum(sign * colour)."""
    out = []
    b = BANDS[band_index(band)]
    while b.parent is not None:
        out.append((b.sign, b.colour))
        b = BANDS[band_index(b.parent)]
    return out[::-1]


def colour_symbol(colour: str) -> str:
    """Symbol of an intrinsic colour in the light markup: ``(B-V)_{0}``."""
    return f"({colour})_{{0}}"


def band_modulus(f: FitRow, dec) -> str:
    """m - M - A of a fit-table row from the displayed m, M and A (exact at ``dec`` decimals)."""
    return fmt(round(f.value, dec) - round(f.absmag, dec) - round(f.ext, dec), "mag", dec)
