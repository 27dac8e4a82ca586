"""Columns ready to write: numbers as arrays, text as Python objects with None
for missing cells (long cells cut on request), and the check, before any
computing, that the output format can hold every column.

References
----------
FITS Standard 4.0 (IAU FITS Working Group 2016): text columns have a fixed width.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..core.errors import InputError
from .formats import DELIMITED_FORMATS

__all__ = ["prepared_columns", "columns_frame", "check_columns_writable", "check_max_field_length",
           "FITS_TEXT_BYTES_MAX"]


def check_max_field_length(max_field_length) -> None:
    """``max_field_length`` is None or a whole number >= 1, else one clear error."""
    if max_field_length is not None and not (isinstance(max_field_length, (int, np.integer))
                                             and max_field_length >= 1):
        raise InputError(f"max_field_length must be a whole number >= 1, got {max_field_length!r}")


def _text_cells(values: np.ndarray, max_len):
    """Object array of text: missing -> None, bytes decoded, long cells cut."""
    values = np.asarray(values, dtype=object)
    if pd.api.types.infer_dtype(values, skipna=True) in ("string", "empty"):
        # fast path (vectorised): only text and missing cells
        ser = pd.Series(values, dtype=object)
        miss = ser.isna().to_numpy()
        out = values.copy()
        out[miss] = None
        cut = 0
        if max_len is not None:
            lengths = ser.str.len().to_numpy(dtype=float)
            long = ~miss & (lengths > max_len)
            cut = int(long.sum())
            if cut:
                out[long] = ser[long].str[:max_len].to_numpy(dtype=object)
        return out, cut
    out = np.empty(len(values), dtype=object)
    cut = 0
    for i, v in enumerate(values):
        if v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NA or v is np.ma.masked:
            out[i] = None
            continue
        if isinstance(v, (bytes, np.bytes_)):
            v = bytes(v).decode("utf-8", "replace")
        elif isinstance(v, (list, tuple, dict, set, np.ndarray)):
            out[i] = v  # nested values: kept for formats that hold them (Parquet)
            continue
        elif not isinstance(v, str):
            v = str(v)
        if max_len is not None and len(v) > max_len:
            v = v[:max_len]
            cut += 1
        out[i] = v
    return out, cut


def _source_columns(table):
    """(name, values) in order: numbers as arrays (masked numbers as NaN, masked
    integers as float), text and other objects as object arrays with None for
    missing cells, multidimensional columns as they are."""
    if isinstance(table, pd.DataFrame):
        for name in table.columns:
            s = table[name]
            if s.dtype.kind in "fiub" and isinstance(s.dtype, pd.api.extensions.ExtensionDtype):
                # nullable numbers: missing -> NaN
                yield str(name), s.astype("Float64").to_numpy(dtype=float, na_value=np.nan)
            elif s.dtype.kind in "fiubmMc" and not isinstance(s.dtype, pd.CategoricalDtype):
                yield str(name), s.to_numpy()
            else:
                vals = s.to_numpy(dtype=object, copy=True)
                miss = pd.isna(s).to_numpy()
                if miss.ndim == 1:
                    vals[miss] = None
                yield str(name), vals
        return
    for name in table.colnames:
        col = table[name]
        data = np.ma.asarray(col) if not hasattr(col, "mask") or col.ndim == 1 else col
        if getattr(col, "ndim", 1) != 1:
            yield name, np.asarray(col)
            continue
        mask = np.ma.getmaskarray(data)
        kind = data.dtype.kind
        if kind in "fc":
            yield name, np.ma.filled(data, np.nan)
        elif kind in "iub":
            yield name, (np.ma.getdata(data) if not mask.any() else np.ma.filled(data.astype(float), np.nan))
        else:
            vals = np.ma.getdata(data).astype(object)
            vals[mask] = None
            yield name, vals


def prepared_columns(table, max_field_length):
    """Columns ready to write, with every text column as objects (long cells cut),
    and the number of cut cells per column."""
    cols, cut = {}, {}
    for name, vals in _source_columns(table):
        if vals.dtype.kind in "OSU" and vals.ndim == 1:
            vals, n = _text_cells(vals, max_field_length)
            if n:
                cut[name] = n
        cols[name] = vals
    return cols, cut


def columns_frame(cols) -> pd.DataFrame:
    """A pandas frame of :func:`prepared_columns` (text as objects, arrays as lists)."""
    return pd.DataFrame({k: (pd.Series(v, dtype=object) if v.dtype.kind == "O" else
                             pd.Series(list(v)) if v.ndim > 1 else v) for k, v in cols.items()})


def _unwritable_kind(series) -> str | None:
    """What makes a column unfit for a flat text/FITS/VOTable cell, or None."""
    kind = getattr(series, "dtype", np.dtype(object)).kind
    if kind == "m":
        return "a time difference (timedelta)"
    if kind == "M":
        return None
    if kind != "O":
        return None
    if pd.api.types.infer_dtype(series, skipna=True) in ("string", "empty"):
        return None  # (fast path: plain text)
    for v in series:
        if isinstance(v, (list, tuple, dict, set, np.ndarray)):
            return f"nested values ({type(v).__name__})"
        if isinstance(v, (bytes, bytearray)):
            try:
                bytes(v).decode("utf-8")
            except UnicodeDecodeError:
                return "binary values (not UTF-8 text)"
    return None


#: Largest fixed-width text column written to FITS (bytes = rows x longest cell);
#: beyond it the write would need that much memory and disk for mostly padding
#: (our limit, a round 512 MiB; common practice for refusing a write up front).
FITS_TEXT_BYTES_MAX = 512 * 1024 ** 2


def check_columns_writable(table, fmt, max_field_length=None) -> None:
    """Refuse, before computing, columns the output format cannot hold.

    Nested (list/struct), timedelta and binary columns are carried through to
    Parquet, which holds them; the flat formats cannot. FITS stores text at
    fixed width: a column needing more than :data:`FITS_TEXT_BYTES_MAX` is
    refused with the advice to cut it (``max_field_length``) or use another format.
    """
    if fmt == "parquet":
        return
    if isinstance(table, pd.DataFrame):
        items = [(c, table[c]) for c in table.columns]
    else:
        items = []
        for c in table.colnames:
            col = table[c]
            if getattr(col, "ndim", 1) > 1 and fmt in DELIMITED_FORMATS:
                raise InputError(f"column {c!r} holds arrays, which {fmt} cannot hold; write ECSV, FITS, "
                                 "VOTable or Parquet, or drop the column")
            if getattr(col, "ndim", 1) == 1:
                items.append((c, pd.Series(np.asarray(col, dtype=object) if col.dtype.kind == "O"
                                           else np.asarray(col))))
    bad = [(c, k) for c, s in items if (k := _unwritable_kind(s))]
    if bad:
        listing = "; ".join(f"{c!r} holds {k}" for c, k in bad)
        raise InputError(f"cannot write these columns as {fmt}: {listing}; write Parquet "
                         "(.parquet) instead, or drop or convert them")
    if fmt == "fits":
        for c, ser in items:
            if ser.dtype.kind == "O":
                longest = ser.map(lambda v: len(v) if isinstance(v, (str, bytes)) else 0).max()
            elif ser.dtype.kind in "SU":
                longest = ser.dtype.itemsize // (4 if ser.dtype.kind == "U" else 1)
            else:
                continue
            longest = min(int(longest or 0), max_field_length or np.inf)
            if longest * len(ser) > FITS_TEXT_BYTES_MAX:
                raise InputError(
                    f"column {c!r} would take {longest * len(ser) / 1024 ** 2:.0f} MiB as fixed-width FITS text "
                    f"({len(ser)} rows x {longest} characters, the longest cell); cut text with "
                    "--max-field-length N (Python: max_field_length=N), or write ECSV, VOTable or Parquet")
