"""Checking, typing and converting the pandas frames any reader produces:
duplicate names refused, a named index kept as columns, astropy's Parquet
masks honoured, text columns typed as numbers only when nothing is lost, and
the conversion to an astropy Table.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from astropy.table import Column, MaskedColumn, Table

from ..core.errors import InputError

__all__ = ["clean_frame", "duplicates", "refuse_duplicates", "type_columns", "parse_numbers", "frame_to_table",
           "IDENTIFIER_LIKE"]


def duplicates(names) -> list:
    """Names that occur more than once, in order of their second occurrence."""
    seen, dup = set(), []
    for n in names:
        if n in seen and n not in dup:
            dup.append(n)
        seen.add(n)
    return dup


def refuse_duplicates(names, source) -> None:
    """One clear error naming the duplicate column names of ``source``, if any."""
    dup = duplicates([str(n) for n in names])
    if dup:
        raise InputError(f"{source} has duplicate column names: {', '.join(map(repr, dup))}; "
                         "rename them so that every column name is unique")


def clean_frame(frame: pd.DataFrame, source="the input") -> pd.DataFrame:
    """Check and repair a pandas frame read from any format, losing nothing.

    * a named or non-default index (e.g. a Parquet file written from a frame
      indexed by ``id``) becomes ordinary leading columns;
    * column names become text; duplicate names raise one clear error;
    * astropy's Parquet mask columns (``X`` plus ``X.mask``) become missing values.

    Parameters
    ----------
    frame : pandas.DataFrame
    source : str
        How to name the data in error messages (e.g. the file name).

    Returns
    -------
    pandas.DataFrame
        A frame with a default RangeIndex.
    """
    idx = frame.index
    if any(n is not None for n in idx.names) or not isinstance(idx, pd.RangeIndex) \
            or idx.start != 0 or idx.step != 1:
        if all(n is None for n in idx.names) and isinstance(idx, pd.RangeIndex):
            frame = frame.reset_index(drop=True)
        else:
            names = [n if n is not None else ("index" if idx.nlevels == 1 else f"level_{i}")
                     for i, n in enumerate(idx.names)]
            clash = [n for n in names if n in frame.columns]
            if clash:
                raise InputError(f"{source}: its index {', '.join(map(repr, clash))} has the name of a "
                                 "column too; rename one of them")
            frame = frame.reset_index(names=names) if idx.nlevels > 1 else frame.reset_index(names=names[0])
    if not all(isinstance(c, str) for c in frame.columns):
        frame = frame.set_axis([str(c) for c in frame.columns], axis=1)
    refuse_duplicates(frame.columns, source)
    return _apply_mask_columns(frame)


def _apply_mask_columns(frame: pd.DataFrame) -> pd.DataFrame:
    """Honour astropy's way of storing masked columns in Parquet (``X`` plus ``X.mask``)."""
    for name in [c for c in frame.columns if str(c).endswith(".mask") and str(c)[:-5] in frame.columns]:
        if frame[name].dtype.kind != "b":
            continue  # not a mask: a user column that happens to end in '.mask'
        base, mask = name[:-5], frame[name].to_numpy(bool)
        col = frame[base].astype(float) if frame[base].dtype.kind in "iub" else frame[base]
        frame[base] = col.where(~mask, np.nan if col.dtype.kind == "f" else None)
        frame = frame.drop(columns=name)
    return frame


#: Cells that look like identifiers, not numbers: leading zeros (007, 0042) or more
#: digits than a double keeps (16 or more).
IDENTIFIER_LIKE = r"^\s*[+-]?(0\d|\d{16,}\s*$)"


def parse_numbers(given: pd.Series):
    """The numbers of a column's given (non-missing) text cells, or None when the
    column must stay text: a cell is not a number, has leading zeros (``007``)
    or more digits than a double keeps (:data:`IDENTIFIER_LIKE`)."""
    import pyarrow as pa
    import pyarrow.compute as pc
    try:
        num = pd.to_numeric(given)  # (surrounding blanks allowed; fails fast on text)
    except (ValueError, TypeError):
        return None
    arr = pa.array(given.to_numpy(dtype=object), type=pa.string())
    if pc.any(pc.match_substring_regex(arr, IDENTIFIER_LIKE)).as_py():
        return None
    return num


def type_columns(frame: pd.DataFrame) -> pd.DataFrame:
    """Turn text columns whose every cell is a number into numbers, losslessly.

    A column stays text if any cell is not a number, has leading zeros (``007``)
    or more digits than a double keeps. Integers stay integers unless a cell is
    missing. Text cells are kept exactly (blanks included).
    """
    for c in frame.columns:
        s = frame[c]
        given = s.dropna()
        if given.empty:
            frame[c] = np.full(len(s), np.nan)
            continue
        num = parse_numbers(given)
        if num is None:
            frame[c] = pd.Series(s.to_numpy(dtype=object), index=s.index, dtype=object)
        elif num.dtype.kind in "iu" and len(given) == len(s):
            frame[c] = num.to_numpy()
        else:
            out = np.full(len(s), np.nan)
            out[s.notna().to_numpy()] = num.to_numpy(dtype=float)
            frame[c] = out
    return frame


def frame_to_table(frame: pd.DataFrame, meta=None) -> Table:
    """An astropy Table holding the frame's columns; text stays Python objects
    (no fixed-width string arrays), missing text is masked, nullable numbers
    (pandas extension types) become masked numbers. ``meta``: comment lines."""
    cols = {}
    for name in frame.columns:
        s = frame[name]
        if s.dtype.kind == "O":
            vals = s.to_numpy(dtype=object, copy=True)
            miss = pd.isna(s).to_numpy()
            vals[miss] = None
            cols[name] = MaskedColumn(vals, mask=miss, dtype=object) if miss.any() else Column(vals, dtype=object)
        elif isinstance(s.dtype, pd.api.extensions.ExtensionDtype) and s.dtype.kind in "fiub":
            miss = s.isna().to_numpy()
            vals = s.to_numpy(dtype=s.dtype.numpy_dtype, na_value=s.dtype.numpy_dtype.type(0))
            cols[name] = MaskedColumn(vals, mask=miss) if miss.any() else Column(vals)
        else:
            cols[name] = s.to_numpy()
    t = Table(cols, copy=False)
    if meta:
        t.meta["comments"] = list(meta)
    return t
