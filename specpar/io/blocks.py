"""Reading a CSV or text file block by block with the very rules of the
whole-file reader (:func:`specpar.io.delimited.read_delimited`): a first pass
(:func:`delimited_plan`) checks the file and decides each column's type for the
whole file; :func:`delimited_blocks` then yields the blocks as tables.

References
----------
RFC 4180 (CSV records, quoted line breaks).
"""
from __future__ import annotations

import csv
import gzip
from pathlib import Path

import numpy as np
import pandas as pd

from ..core.errors import InputError
from .delimited import READ_OPTIONS, count_records, sniff_separator, strict_parse
from .formats import check_input_path
from .frames import clean_frame, duplicates, frame_to_table, parse_numbers
from .sidecar import apply_input_sidecar

__all__ = ["delimited_plan", "delimited_blocks"]


class _Body:
    """The text of a CSV/text file after its leading ``#``/blank block, read lazily
    (gzip and a byte-order mark handled as the whole-file reader does; lines end at
    ``\\n`` only, as in the whole-file reader). ``meta`` holds the comment lines,
    ``header`` the first line of the body ('' when there is none)."""

    def __init__(self, path: Path):
        with open(path, "rb") as raw:
            gz = raw.read(2) == b"\x1f\x8b"
        opener = gzip.open if gz else open
        self.fh = opener(path, "rt", encoding="utf-8-sig", newline="\n")
        self.meta, self.pending = [], ""
        for line in self.fh:
            stripped = line.strip()
            if stripped.startswith("#"):
                self.meta.append(stripped[1:].strip())
            elif stripped:
                self.pending = line
                break
        self.header = self.pending

    def read(self, n=-1):
        if self.pending:
            out, self.pending = self.pending, ""
            return out + (self.fh.read() if n is None or n < 0 else "")
        return self.fh.read() if n is None or n < 0 else self.fh.read(n)

    def __iter__(self):
        if self.pending:
            out, self.pending = self.pending, ""
            yield out
        yield from self.fh

    def close(self):
        self.fh.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _chunks(body: _Body, sep: str, chunk_rows: int):
    """Blocks of rows as text, with the whole-file reader's options (its parser
    warning of a lost field is an error here too)."""
    reader = strict_parse(lambda: pd.read_csv(body, sep=sep, chunksize=chunk_rows, **READ_OPTIONS))
    with reader:
        while True:
            block = strict_parse(lambda: next(reader, None))
            if block is None:
                return
            yield block


def _block_kinds(frame: pd.DataFrame) -> dict:
    """Per column of one block: (kind, any missing) with kind one of 'empty',
    'int', 'float', 'text', by the rules of :func:`specpar.io.frames.type_columns`."""
    out = {}
    for c in frame.columns:
        s = frame[c]
        given = s.dropna()
        missing = len(given) != len(s)
        if given.empty:
            out[c] = ("empty", missing)
            continue
        num = parse_numbers(given)
        out[c] = ("text" if num is None else "int" if num.dtype.kind in "iu" else "float", missing)
    return out


_KIND_RANK = {"empty": 0, "int": 1, "float": 2, "text": 3}


def _first_pass(path: Path, fmt: str):
    """(leading comments, separator, data records) of a file, or None when the
    file must be read whole (runs of blanks, no header, duplicate names)."""
    with _Body(path) as body:
        meta, header = body.meta, body.header
        if not header.strip():
            return None
        sep = sniff_separator(header, fmt)
        if sep is None:  # runs of blanks or fixed-width: whole-file reader
            return None
        quoted, lines = False, 0

        def counted():
            nonlocal quoted, lines
            for ln in body:
                if not quoted and '"' in ln:
                    quoted = True
                if ln.strip():
                    lines += 1
                yield ln
        rows = csv.reader(counted(), delimiter=sep)
        if duplicates(next(rows)):
            return None
        records = count_records(rows)
    return meta, sep, (records if quoted else lines - 1)


def _column_kinds(path: Path, sep: str, chunk_rows: int):
    """(kinds, columns, rows) from tokenising the whole file block by block."""
    kinds, missing, total, columns = {}, {}, 0, None
    with _Body(path) as body:
        for block in _chunks(body, sep, chunk_rows):
            if columns is None:
                columns = list(block.columns)
            total += len(block)
            for c, (k, miss) in _block_kinds(block).items():
                if _KIND_RANK[k] > _KIND_RANK[kinds.get(c, "empty")]:
                    kinds[c] = k
                missing[c] = missing.get(c, False) or miss
    if columns is None:
        return None, None, total
    kinds = {c: ("float" if kinds.get(c, "empty") == "int" and missing[c] else kinds.get(c, "empty"))
             for c in columns}
    return kinds, columns, total


def delimited_plan(path, fmt: str, chunk_rows: int):
    """First pass over a CSV/text file for block reading, or None when the file
    must be read whole (:func:`specpar.io.read.read_table`), which then gives its
    own result or error.

    The pass tokenises the whole file block by block, keeping no rows: it checks
    what the whole-file reader checks (duplicate names, fields per row, the number
    of data records) and decides each column's type for the whole file, so that
    a column's type never depends on the block (a column that is numbers in early
    rows and text later is text in every block).

    Returns
    -------
    dict or None
        ``path``, ``fmt``, ``sep``, ``meta`` (leading comments), ``kinds``
        (column -> 'empty', 'int', 'float' or 'text'), ``columns``, ``rows``,
        ``chunk_rows``; None to read the file whole.

    References
    ----------
    RFC 4180 (CSV records, quoted line breaks).
    """
    path = Path(path)
    try:
        check_input_path(path)
        first = _first_pass(path, fmt)
        if first is None:
            return None
        meta, sep, records = first
        kinds, columns, total = _column_kinds(path, sep, chunk_rows)
        if total == 0 or total != records or columns is None:
            return None
    except Exception:  # the whole-file reader gives the one clear message
        return None
    return {"path": path, "fmt": fmt, "sep": sep, "meta": meta, "kinds": kinds, "columns": columns,
            "rows": total, "chunk_rows": chunk_rows}


def _apply_kinds(frame: pd.DataFrame, kinds: dict) -> pd.DataFrame:
    """One block typed as :func:`specpar.io.frames.type_columns` types the whole file (``kinds`` from
    :func:`delimited_plan`)."""
    for c in frame.columns:
        s, k = frame[c], kinds[c]
        if k == "empty":
            frame[c] = np.full(len(s), np.nan)
        elif k == "text":
            frame[c] = pd.Series(s.to_numpy(dtype=object), index=s.index, dtype=object)
        elif k == "int":
            frame[c] = pd.to_numeric(s).to_numpy()
        else:
            out = np.full(len(s), np.nan)
            given = s.dropna()
            if not given.empty:
                out[s.notna().to_numpy()] = pd.to_numeric(given).to_numpy(dtype=float)
            frame[c] = out
    return frame


def delimited_blocks(plan):
    """Tables of ``plan['chunk_rows']`` rows of a CSV/text file, each exactly the
    rows :func:`read_table` gives for that part of the file (same types, comments,
    sidecar metadata and formula unescaping)."""
    path = plan["path"]
    with _Body(path) as body:
        for block in _chunks(body, plan["sep"], plan["chunk_rows"]):
            if list(block.columns) != plan["columns"]:
                raise InputError(f"{path} changed while it was being read; run again")
            frame = clean_frame(_apply_kinds(block, plan["kinds"]), str(path))
            yield apply_input_sidecar(frame_to_table(frame, plan["meta"]), path)
