"""Spreadsheet formulas in CSV cells: escaped on writing, unescaped when our
own reader reads the file back (the sidecar records that it was done).

References
----------
OWASP "CSV Injection" guidance (common practice).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from astropy.table import Column, MaskedColumn, Table

__all__ = ["FORMULA_PREFIXES", "escape_formulas", "unescape_formulas"]

#: First characters that make a spreadsheet treat a CSV cell as a formula (OWASP
#: CSV-injection guidance; tab and carriage return included there too).
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")


def escape_formulas(frame: pd.DataFrame) -> bool:
    """Prefix a quote to text cells a spreadsheet would run as formulas (and to
    cells already starting with a quote, so the escape can be undone); cells
    that are numbers (``-1.2``) stay as they are. True if any cell changed."""
    changed = False
    for c in frame.columns:
        s = frame[c]
        if s.dtype.kind != "O":
            continue
        txt = s.map(lambda v: v if isinstance(v, str) else None)
        first = txt.str[:1]
        risky = first.isin(FORMULA_PREFIXES + ("'",))
        if not risky.any():
            continue
        numeric = pd.to_numeric(txt.where(risky), errors="coerce").notna()
        hit = risky & ~numeric
        if hit.any():
            vals = s.to_numpy(dtype=object).copy()
            h = hit.to_numpy()
            vals[h] = ["'" + v for v in vals[h]]
            frame[c] = pd.Series(vals, index=frame.index, dtype=object)
            changed = True
    return changed


def unescape_formulas(t: Table) -> None:
    """Undo :func:`escape_formulas` on a table read back from our own CSV."""
    for c in t.colnames:
        if t[c].dtype.kind != "O":
            continue
        vals = np.asarray(t[c], dtype=object)
        for i, v in enumerate(vals):
            if isinstance(v, str) and len(v) > 1 and v[0] == "'" and v[1] in FORMULA_PREFIXES + ("'",):
                vals[i] = v[1:]
        t[c] = MaskedColumn(vals, mask=np.ma.getmaskarray(t[c]), dtype=object) \
            if isinstance(t[c], MaskedColumn) else Column(vals, dtype=object)
