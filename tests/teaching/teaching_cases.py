"""Shared test material of the teaching tests: invented stars covering every presentation path,
the comparison of a worked solution with an independent :func:`specpar.estimate` call, and an
independent checker of the displayed arithmetic of a Markdown key."""
from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from specpar import estimate
from specpar.teaching import worked_solutions, write_problem_set

SAMPLE = Path(__file__).resolve().parents[2] / "samples" / "survey.csv"

# Invented stars covering the presentation paths: classic B,V; V with a B-V colour; a
# two-magnitude pair without B; a multi-band fit; an intermediate class; one band only;
# and rows that cannot be solved (bad type, no photometry, junk magnitude).
ROWS = [
    # id, sptype, U, B, V, Ic, J, H, Ks, B-V
    ("SPX-0001", "G2V", np.nan, 10.10, 9.40, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0002", "K1 III", np.nan, 9.30, 8.20, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0003", "B2.5IV-V", np.nan, 8.00, 8.10, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0004", "F5", np.nan, np.nan, 7.00, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0005", "A0V", np.nan, 11.20, 11.00, 10.80, 10.70, 10.60, 10.50, np.nan),
    ("SPX-0006", "K0 III", np.nan, np.nan, 9.10, np.nan, np.nan, np.nan, 6.30, np.nan),
    ("SPX-0007", "F8 V", np.nan, np.nan, 10.20, np.nan, np.nan, np.nan, np.nan, 0.71),
    ("SPX-0008", "M2 III", 14.0, 12.9, 11.3, 8.6, 6.4, 5.5, 5.3, np.nan),
    ("SPX-0009", "zz9", np.nan, 10.0, 9.0, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0010", "G5 V", np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0011", "K5 V", np.nan, 99.0, 12.0, np.nan, np.nan, np.nan, np.nan, np.nan),
]
COLS = ["id", "sptype", "U", "B", "V", "Ic", "J", "H", "Ks", "B-V"]


def invented_table():
    df = pd.DataFrame(ROWS, columns=COLS)
    for b in ("U", "B", "V", "Ic", "J", "H", "Ks", "B-V"):
        df[f"e_{b}"] = np.where(df[b].notna(), 0.02, np.nan)
    df.loc[4, "e_J"] = np.nan  # one missing error: the default is used and flagged
    return df


#: Steps whose value must be exactly the estimate column of the same name.
_SAME_AS_ESTIMATE = ("mv", "ebv", "dm", "e_dm", "dist_pc", "dist_lo_pc", "dist_hi_pc", "plx_phot_mas")


def compare_with_estimate(table, **opts):
    """Every number a worked solution shows as a result equals estimate's (independent call)."""
    ws = worked_solutions(table, **opts)
    ref = estimate(table, explain=True, **opts)
    assert len(ws.stars) == len(ref)  # no row lost
    checked = 0
    for i, star in enumerate(ws.stars):
        for step in star.steps:
            if step.key in _SAME_AS_ESTIMATE:
                assert step.value == pytest.approx(float(np.asarray(ref[step.key])[i]), rel=0, abs=0), \
                    (star.id, step.key)
                checked += 1
            elif step.key == "A_V":
                assert step.value == float(np.asarray(ref["av"])[i]), star.id
            elif step.key.startswith(("M_", "A_")) and step.key in getattr(ref, "colnames", ref.columns):
                assert step.value == float(np.asarray(ref[step.key])[i]), (star.id, step.key)
            elif step.key == "c0_B-V":
                assert step.value == float(np.asarray(ref["bv0"])[i]), star.id
        assert star.flags == int(np.asarray(ref["flags"])[i])
    assert checked > 0
    return ws, ref


# ----------------------------------------------------------------------------- displayed arithmetic

#: 1 pc in light years from the definitions: 1 pc = 648000/pi au (IAU 2015 B2), 1 au =
#: 149597870700 m (IAU 2012 B2), 1 ly = c x Julian year = 299792458 m/s x 365.25 x 86400 s.
PC_IN_LY = (648000 / math.pi) * 149597870700 / (299792458 * 365.25 * 86400)
_ARITH = re.compile(r"^[-+0-9.()\[\] ×/^]+$")
_RESULT = re.compile(r"^(-?\d+(?:\.(\d+))?)(?: ± \S+)?(?: (\S+))?$")


def _eval_displayed(expr: str) -> float:
    """Independent evaluator of a displayed left side: the text turned into Python arithmetic."""
    py = expr.replace("×", "*").replace("^", "**").replace("[", "(").replace("]", ")")
    assert re.fullmatch(r"[-+0-9.()* /]+", py), expr
    return float(eval(py, {"__builtins__": {}}, {}))  # digits and operators only (checked above)


def displayed_equations(text: str):
    """(operands text, result text) of every displayed equation ``... = operands = result unit``
    in a Markdown key, including the unit conversion ``X pc = Y ly``."""
    out = []
    for code in re.findall(r"`([^`]*)`", text):
        parts = code.split(" = ")
        for left, right in zip(parts[:-1], parts[1:]):
            unit_conv = re.fullmatch(r"(-?[\d.]+) pc", left)
            if (unit_conv or (_ARITH.match(left) and re.search(r"\d\s*[-+×/^]|\)\s*/", left))) \
                    and _RESULT.match(right):
                out.append((left, right))
    return out


def fit_table_sums(text: str):
    """(operands, result) of the fit tables' arithmetic columns: m - M - A = value - M - A and
    residual = (m - M - A) - (m-M)_0, with (m-M)_0 the star's displayed distance modulus."""
    out = []
    for section in text.split("\n## ")[1:]:
        dm = re.search(r"`\(m-M\)_0 = (-?[\d.]+) ± ", section)
        for ln in section.splitlines():
            cells = [c.strip() for c in ln.strip().strip("|").split("|")]
            if len(cells) != 8 or not ln.strip().startswith("| ") or cells[6] in ("m - M - A", "(colour)", "---"):
                continue
            value, M, A, dmb, res = cells[1], cells[3], cells[5], cells[6], cells[7]
            out.append((f"{value} - ({M}) - ({A})", dmb))
            out.append((f"{dmb} - ({dm[1]})", res))
    return out


def check_equations(text: str):
    """Number of displayed equations and the list of those whose displayed operands do not give the
    displayed result at its displayed precision (fit-table columns included)."""
    eqs = displayed_equations(text) + fit_table_sums(text)
    bad = []
    for left, right in eqs:
        m = _RESULT.match(right)
        shown, decimals, unit = m[1], len(m[2] or ""), m[3]
        conv = re.fullmatch(r"(-?[\d.]+) pc", left)
        value = float(conv[1]) * PC_IN_LY if conv and unit == "ly" else _eval_displayed(left)
        if float(f"{value:.{decimals}f}") != float(shown):
            bad.append(f"{left} = {right} (operands give {value:.{decimals + 2}f})")
    return len(eqs), bad


def problem_files_bytes(ps, folder):
    """Write a problem set into a new ``folder``; its files' bytes by role."""
    folder.mkdir()
    files = write_problem_set(ps, folder)
    return {role: p.read_bytes() for role, p in files.items()}
