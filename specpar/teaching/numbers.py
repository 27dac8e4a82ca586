"""Numbers and text for display: rounding to the shown precision, errors that never show as
zero, the light maths markup (``_{x}`` subscript, ``^{x}`` superscript) and the evaluation of a
displayed arithmetic expression.

References
----------
Rounding to the displayed precision and carrying guard digits in intermediate values is common
practice in hand calculation.
"""
from __future__ import annotations

import ast
import html
import operator
import re

import numpy as np

__all__ = ["round_sig", "fmt", "round_value", "fmt_error", "fmt_operand", "markup", "md_text",
           "evaluate_display", "DISTANCE_KINDS", "EXACT_RTOL", "ERROR_SIG",
           "PHOT_ERROR_DECIMALS", "SHORT_DECIMALS"]

#: Display kinds shown to significant figures rather than to a number of decimals.
DISTANCE_KINDS = ("pc", "ly", "mas")
#: Relative tolerance within which an operand counts as exact at the displayed precision
#: (far below any displayed digit; common practice for float comparison).
EXACT_RTOL = 1e-9
#: Decimals of a photometric error quoted in an error budget (0.001 mag; common practice).
PHOT_ERROR_DECIMALS = 3
#: Decimals of a calibration scatter and of a chi-square in the text (common practice).
SHORT_DECIMALS = 2
#: Significant figures of an error that would round to zero at the displayed decimals
#: (common practice: quote an uncertainty to one or two significant figures).
ERROR_SIG = 2


def round_sig(x: float, sig: int) -> float:
    """``x`` rounded to ``sig`` significant figures (non-finite values and 0 unchanged)."""
    if not np.isfinite(x) or x == 0:
        return float(x)
    return float(round(x, sig - 1 - int(np.floor(np.log10(abs(x)))))) + 0.0


def fmt(x, kind: str, decimals: int) -> str:
    """Display one number: magnitudes with ``decimals`` decimals, distances with
    ``decimals + 1`` significant figures, plain numbers as short as exact."""
    x = float(x)
    if not np.isfinite(x):
        return "n/a"
    if kind in DISTANCE_KINDS:
        sig = max(decimals + 1, 2)
        v = round_sig(x, sig)
        if abs(v) >= 10 ** sig:  # no trailing zeros of unknown meaning: all integer digits
            return f"{round(x) + 0:d}"
        d = max(0, sig - 1 - int(np.floor(np.log10(abs(v))))) if v else decimals
        return f"{v:.{d}f}"
    if kind == "num":
        return f"{x:g}"
    v = round(x, decimals) + 0.0
    return f"{v:.{decimals}f}"


def round_value(x, kind: str, decimals: int) -> float:
    """The number :func:`fmt` shows, as a float (for CSV keys)."""
    x = float(x)
    if not np.isfinite(x):
        return np.nan
    if kind in DISTANCE_KINDS:
        sig = max(decimals + 1, 2)
        return float(round(x)) if abs(round_sig(x, sig)) >= 10 ** sig else round_sig(x, sig)
    return round(x, decimals) + 0.0


def fmt_error(x, kind: str, decimals: int) -> str:
    """A 1-sigma error for display: as :func:`fmt`, but an error that would round to zero
    gets two significant figures instead (never "± 0.000"); empty if not finite or not positive."""
    x = float(x)
    if not (np.isfinite(x) and x > 0):
        return ""
    text = fmt(x, kind, decimals)
    if float(text) == 0.0:
        d = ERROR_SIG - 1 - int(np.floor(np.log10(x)))
        text = f"{round(x, d):.{d}f}"
    return text


def fmt_operand(value, kind: str, decimals: int, extra: int) -> str:
    """An operand shown with ``extra`` guard digits, unless it is exact at the base precision."""
    base = fmt(value, kind, decimals)
    if extra == 0 or kind == "num" or not np.isfinite(value):
        return base
    if abs(float(base) - value) <= EXACT_RTOL * max(1.0, abs(value)):
        return base  # e.g. a tabulated 4.800 or a measured 9.412: no guard digits needed
    return fmt(value, kind, decimals + extra)


def markup(s: str, as_html: bool) -> str:
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


_MD_SPECIAL = re.compile(r"([\\`*\[\]<>])")


def md_text(text) -> str:
    """Text for Markdown outside code spans: characters that could open HTML, links or code
    (``< > [ ] ` * \\``) are backslash-escaped, so input text such as ``<img onerror=...>``
    shows as text instead of becoming markup."""
    return _MD_SPECIAL.sub(r"\\\1", str(text))


_OPS = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul, ast.Div: operator.truediv,
        ast.Pow: operator.pow}


def _evaluate_node(node) -> float:
    if isinstance(node, ast.Expression):
        return _evaluate_node(node.body)
    if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)):
        return float(node.value)
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        v = _evaluate_node(node.operand)
        return -v if isinstance(node.op, ast.USub) else v
    if isinstance(node, ast.BinOp) and type(node.op) in _OPS:
        return _OPS[type(node.op)](_evaluate_node(node.left), _evaluate_node(node.right))
    raise ValueError("not plain arithmetic")


def evaluate_display(text: str) -> float:
    """Value of a displayed arithmetic expression (plain markup: ``×``, ``/``, ``+``, ``-``,
    ``^``, round and square brackets); NaN if it is not plain arithmetic."""
    expr = (text.replace("×", "*").replace("^", "**").replace("[", "(").replace("]", ")")
            .replace("{", "(").replace("}", ")"))
    try:
        return float(_evaluate_node(ast.parse(expr, mode="eval")))
    except (SyntaxError, ValueError, ZeroDivisionError, OverflowError):
        return np.nan
