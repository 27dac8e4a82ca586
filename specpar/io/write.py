"""Writing a table: CSV and text (plain header, CRLF, formula escaping, a
provenance sidecar), ECSV, FITS, VOTable and Parquet, with specpar's metadata
where each format keeps metadata; always through :func:`specpar.io.atomic.atomic_write`.

References
----------
ECSV: Aldcroft et al., "Enhanced Character Separated Values table format",
astropy APE 6 (2013). VOTable 1.4, IVOA Recommendation (2019), BINARY2
serialisation. FITS Standard 4.0 (IAU FITS Working Group 2016). Apache Parquet
format specification (key-value metadata). RFC 4180 (CSV). Neutralising
spreadsheet formulas in CSV cells: OWASP "CSV Injection" guidance (common practice).
"""
from __future__ import annotations

import csv
import gzip
import json
import sys

import numpy as np
import pandas as pd
from astropy.table import Column, MaskedColumn, Table

from ..core.errors import InputError
from .atomic import atomic_write, check_output
from .cells import check_columns_writable, check_max_field_length, columns_frame, prepared_columns
from .formats import DELIMITED_FORMATS, FORMATS, gzipped, is_stdout
from .formulas import escape_formulas
from .sidecar import write_sidecar

__all__ = ["write_table", "write_delimited", "parquet_meta", "astropy_parquet_header"]

#: Text longer than this in an ECSV column is written as JSON-encoded objects
#: rather than fixed-width strings (memory grows with the longest cell otherwise).
_ECSV_FIXED_WIDTH_MAX = 256  # (our choice, common practice: a round power of two)


def _units(table) -> dict:
    if isinstance(table, Table):
        return {c: (table[c].unit, table[c].description) for c in table.colnames}
    return {}


def write_delimited(frame, out, fmt, escape, header=True) -> bool:
    """CSV (or tab-separated text) with CRLF line ends as RFC 4180 has them, so that
    a cell holding a bare carriage return is quoted too. ``header=False`` appends
    a further block of rows (streaming)."""
    sep = "," if fmt == "csv" else "\t"
    escaped = escape_formulas(frame) if escape else False
    frame.to_csv(out, sep=sep, index=False, na_rep="", lineterminator="\r\n", quoting=csv.QUOTE_MINIMAL,
                 float_format=None, header=header)
    return escaped


def parquet_meta(meta) -> dict:
    """The Parquet key-value metadata holding specpar's metadata: ``specpar``, and
    ``PANDAS_ATTRS`` (pandas >= 2.1 restores ``DataFrame.attrs`` from this key)."""
    return {b"specpar": json.dumps(meta, sort_keys=True, default=str).encode(),
            b"PANDAS_ATTRS": json.dumps({"specpar": meta}, default=str).encode()}


def _write_parquet(frame, tmp, meta) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq
    arrow = pa.Table.from_pandas(frame, preserve_index=False)
    extra = parquet_meta(meta)
    extra.update(astropy_parquet_header(frame, meta))
    arrow = arrow.replace_schema_metadata({**(arrow.schema.metadata or {}), **extra})
    pq.write_table(arrow, tmp)


def astropy_parquet_header(frame, meta) -> dict:
    """The key-value metadata astropy's Parquet reader looks for (``table_meta_yaml``
    and ``table::len::<name>``), so ``Table.read(path).meta['specpar']`` works.
    Left out when a column is not a plain number or text column."""
    from astropy.table import meta as table_meta
    cols, lens = {}, {}
    for name in frame.columns:
        s = frame[name]
        if s.dtype.kind == "O":
            if pd.api.types.infer_dtype(s, skipna=True) not in ("string", "empty"):
                return {}
            cols[name] = Column(np.array([], dtype="U1"))
            longest = s.str.len().max()
            lens[name] = int(longest) if pd.notna(longest) and longest > 0 else 1
        elif s.dtype.kind in "fiub":
            cols[name] = Column(np.array([], dtype=s.dtype))
        else:
            return {}
    empty = Table(cols)
    empty.meta["specpar"] = json.loads(json.dumps(meta, default=str))
    try:
        header = "\n".join(table_meta.get_yaml_from_table(empty))
    except Exception:  # metadata astropy cannot represent: leave its header out
        return {}
    out = {b"table_meta_yaml": header.encode()}
    out.update({f"table::len::{k}".encode(): str(v).encode() for k, v in lens.items()})
    return out


def _for_astropy(source, fmt, meta, units) -> Table:
    cols = {}
    first = next(iter(source), None)
    for name, vals in source.items():
        if vals.dtype.kind == "O" and vals.ndim == 1:
            miss = np.array([v is None for v in vals], bool)
            if fmt == "fits":  # FITS holds bytes: UTF-8, fixed width
                data = np.array([b"" if v is None else v.encode("utf-8") for v in vals], dtype=bytes)
                cols[name] = MaskedColumn(data, mask=miss) if miss.any() else Column(data)
            elif fmt == "ecsv":
                longest = max((len(v) for v in vals if v is not None), default=0)
                # the plain form loses line breaks (any that str.splitlines knows) and
                # blanks at either end, and a row whose first cell starts with '#' (a
                # comment line to ECSV readers: APE 6; astropy leaves such a cell unquoted)
                lead = name == first
                plain = longest <= _ECSV_FIXED_WIDTH_MAX and not any(
                    v is not None and (v != v.strip() or len(v.splitlines()) > 1 or (lead and v.startswith("#")))
                    for v in pd.unique(vals))
                if plain:
                    data = np.array(["" if v is None else v for v in vals], dtype=str)
                    cols[name] = MaskedColumn(data, mask=miss) if miss.any() else Column(data)
                else:  # multi-line or long text: JSON-encoded cells read back exactly
                    cols[name] = Column(vals, dtype=object)
            else:  # VOTable BINARY2: variable-length unicode
                cols[name] = Column(np.where(miss, "", vals).astype(object), dtype=object)
        else:
            cols[name] = vals
    out = Table(cols, copy=False)
    for name, (unit, desc) in units.items():
        if name in out.colnames:
            if unit is not None:
                out[name].unit = unit
            if desc:
                out[name].description = desc
    if fmt == "fits":
        out.meta = {"SPECPAR": json.dumps(meta, sort_keys=True, default=str)}
    elif fmt == "votable":
        out.meta = {"description": "specpar " + json.dumps(meta, sort_keys=True, default=str)}
    else:
        out.meta = {"specpar": json.loads(json.dumps(meta, default=str))}
    return out


def _write_stdout(source, fmt, meta, units, escape) -> None:
    """CSV, text or ECSV on standard output (no sidecar)."""
    if fmt in DELIMITED_FORMATS:
        write_delimited(columns_frame(source), sys.stdout, fmt, escape)
        sys.stdout.flush()
        return
    if fmt == "ecsv":
        _for_astropy(source, fmt, meta, units).write(sys.stdout, format="ascii.ecsv")
        return
    raise InputError(f"{fmt} cannot be written to standard output; use csv, text or ecsv with -o -")


def _write_file(tmp, path, fmt, source, meta, units, escape) -> bool:
    """Write the prepared columns to ``tmp`` in ``fmt``; True if formula cells were escaped."""
    try:
        if fmt == "parquet":
            _write_parquet(columns_frame(source), tmp, meta)
        elif fmt in DELIMITED_FORMATS:
            opener = gzip.open if gzipped(path) else open
            with opener(tmp, "wt", encoding="utf-8", newline="") as fh:
                return write_delimited(columns_frame(source), fh, fmt, escape)
        else:
            kwargs = {"tabledata_format": "binary2"} if fmt == "votable" else {}
            _for_astropy(source, fmt, meta, units).write(tmp, format=FORMATS[fmt][0], overwrite=True,
                                                        **kwargs)
    except (ValueError, TypeError, OSError, UnicodeError) as exc:
        raise InputError(f"cannot write {path} as {fmt}: {exc}") from None
    return False


def write_table(table, path, fmt=None, *, inputs=(), overwrite=False, max_field_length=None,
                escape_formulas=True) -> None:
    """Write an astropy Table or pandas DataFrame safely (see :func:`atomic_write`).

    specpar's metadata (``meta['specpar']`` or ``attrs['specpar']``) goes where
    the format keeps metadata: the ECSV header, a FITS header keyword
    (``SPECPAR``), the VOTable description, the Parquet key-value metadata
    (``specpar``; also ``PANDAS_ATTRS`` so that ``pandas.read_parquet`` puts it
    in ``DataFrame.attrs``), and for CSV/text a sidecar ``<name>.specpar.json``
    (the CSV itself has a plain header line and opens in any reader).

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
    path : str or path-like
        Output file, or ``"-"`` for standard output (CSV unless ``fmt``).
    fmt : str, optional
        One of :data:`FORMATS`; by default from the extension.
    inputs : sequence of path
        Files the output must not replace.
    overwrite : bool
        Replace an existing regular file (keeping its permissions).
    max_field_length : int, optional
        Cut text cells to at most this many characters (counted in the metadata).
    escape_formulas : bool
        CSV/text: prefix ``'`` to text cells starting with ``= + - @`` (OWASP
        CSV-injection guidance); undone by :func:`specpar.io.read.read_table`.
    """
    fmt = check_output(path, fmt, inputs=inputs, overwrite=overwrite)
    check_max_field_length(max_field_length)
    check_columns_writable(table, fmt, max_field_length)
    meta = dict((table.attrs if isinstance(table, pd.DataFrame) else table.meta).get("specpar", {}))
    units = _units(table)
    source, cut = prepared_columns(table, max_field_length)
    if cut:
        meta["text_cut_to_max_field_length"] = {"max_field_length": int(max_field_length), "cells": cut}
    if is_stdout(path):
        _write_stdout(source, fmt, meta, units, escape_formulas)
        return
    state = {}

    def writer(tmp):
        state["escaped"] = _write_file(tmp, path, fmt, source, meta, units, escape_formulas)
    atomic_write(path, writer, inputs=inputs, overwrite=overwrite)
    if fmt in DELIMITED_FORMATS:
        write_sidecar(path, meta, bool(state.get("escaped")), inputs=inputs, overwrite=overwrite)
