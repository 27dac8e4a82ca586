"""Table helpers shared by the pipeline modules: input tables as pandas frames,
numeric cells, per-row codes and the joining of per-row texts."""
from __future__ import annotations

import numpy as np
import pandas as pd
from astropy.table import Table


__all__ = ["to_frame", "numeric_values", "combine_codes", "join_detail", "join_all"]

#: Cell texts that mean "no value" in a numeric column (common practice of catalogue files).
_EMPTY_TEXTS = ("", "--", "nan", "NaN")


def to_frame(table) -> pd.DataFrame:
    """The input as a pandas DataFrame in our conventions: masked cells become NaN
    (numbers) or None (anything else), byte strings become text."""
    if isinstance(table, pd.DataFrame):
        return table.reset_index(drop=True)
    if isinstance(table, Table):
        cols = {}
        for name in table.colnames:
            col = table[name]
            if getattr(col, "ndim", 1) != 1:
                continue  # multidimensional columns are carried through untouched
            cols[name] = _column_values(np.ma.asarray(col))
        return pd.DataFrame(cols)
    raise TypeError(f"estimate() takes an astropy Table or a pandas DataFrame, not {type(table).__name__}")


def _column_values(data):
    """One astropy column's values: floats with NaN, or objects with None where masked."""
    if data.dtype.kind == "S":  # FITS text arrives as bytes
        data = np.ma.array(np.char.decode(data.filled(b""), "utf-8", errors="replace"),
                           mask=np.ma.getmaskarray(data))
    if data.dtype.kind in "fc":
        return np.ma.filled(data.astype(float), np.nan)
    vals = np.ma.getdata(data).astype(object)
    vals[np.ma.getmaskarray(data)] = None  # (np.ma.filled(x, None) would use x's fill value)
    return vals


def numeric_values(series: pd.Series):
    """Float values and a mask of entries that were given but not usable numbers."""
    if series.dtype.kind in "fiub":
        vals = series.to_numpy(dtype=float)
        given = ~np.isnan(vals)  # NaN means not measured; inf is a bad value
    else:
        s = series.astype(object).map(lambda v: v.decode("utf-8", "replace") if isinstance(v, bytes) else v)
        given = s.map(lambda v: v is not None and not (isinstance(v, float) and np.isnan(v))
                      and str(v).strip() not in _EMPTY_TEXTS).to_numpy(bool)
        vals = pd.to_numeric(s.map(lambda v: v.strip() if isinstance(v, str) else v),
                             errors="coerce").to_numpy(dtype=float)
    bad = given & ~np.isfinite(vals)
    vals = np.where(np.isfinite(vals), vals, np.nan)
    return vals, bad


def combine_codes(*arrays) -> np.ndarray:
    """One integer code per distinct combination of the given per-row keys."""
    code = np.zeros(len(arrays[0]), np.int64)
    for a in arrays:
        k, u = pd.factorize(a)
        code, _ = pd.factorize(code * (len(u) + 1) + k)
    return code


def join_detail(a, b):
    """Element-wise '; '-join of two object arrays of text, skipping empty ones."""
    a, b = np.asarray(a, dtype=object), np.asarray(b, dtype=object)
    return np.where(b != "", np.where(a != "", a + "; ", "") + b, a)


def join_all(*parts):
    """Element-wise '; '-join of any number of object arrays of text, skipping empty pieces."""
    out = np.full(parts[0].shape, "", dtype=object)
    for p in parts:
        out = join_detail(out, p)
    return out
