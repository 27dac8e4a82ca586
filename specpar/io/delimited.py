"""Reading a CSV or whitespace/tab-separated text file whole: gzip and the
byte-order mark of spreadsheet exports, ``#`` lines as metadata only in the
leading block, the separator sniffed from the header line, fixed-width text,
and the number of rows read checked against the data records.

References
----------
RFC 4180 (CSV records, quoted line breaks).
"""
from __future__ import annotations

import csv
import gzip
import io
import re
import warnings
from pathlib import Path

import pandas as pd

from ..core.errors import InputError
from .frames import refuse_duplicates, type_columns

__all__ = ["read_delimited", "sniff_separator", "count_records", "strict_parse", "READ_OPTIONS"]

#: pandas options for delimited text: every cell read as text (typed afterwards by
#: :func:`specpar.io.frames.type_columns`, so ids such as 007 stay text), only empty
#: cells missing. ``index_col=False``: a trailing separator on every row (a common
#: export habit) is an empty last field, never a reason to shift the columns onto a
#: row index; a non-empty extra field is refused (pandas warns of the data loss; the
#: warning is made an error, :func:`strict_parse`).
READ_OPTIONS = dict(keep_default_na=False, na_values=[""], skip_blank_lines=True, comment=None,
                    dtype=object, index_col=False)


def strict_parse(call):
    """``call()`` with pandas' warning of a lost field made an error."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", pd.errors.ParserWarning)
        return call()


def count_records(rows) -> int:
    """Data records among ``csv.reader`` rows (blank lines are no records; quoted
    cells may hold line breaks)."""
    return sum(1 for r in rows if len(r) > 1 or (r and r[0].strip()))


def _decode_text(raw: bytes, path) -> str:
    if raw[:2] == b"\x1f\x8b":
        try:
            raw = gzip.decompress(raw)
        except (OSError, EOFError) as exc:
            raise InputError(f"cannot read {path}: damaged gzip data ({exc})") from None
    try:
        return raw.decode("utf-8-sig")  # drops the byte-order mark of spreadsheet exports
    except UnicodeDecodeError as exc:
        raise InputError(f"cannot read {path}: byte {exc.start} is not UTF-8 text; save the file as "
                         "UTF-8 (spreadsheets: 'CSV UTF-8')") from None


def _split_leading_comments(text: str):
    """(metadata lines, rest): '#' lines and blank lines before the header only."""
    meta, pos = [], 0
    while pos < len(text):
        end = text.find("\n", pos)
        end = len(text) if end < 0 else end + 1
        line = text[pos:end]
        stripped = line.strip()
        if stripped.startswith("#"):
            meta.append(stripped[1:].strip())
        elif stripped:
            break
        pos = end
    return meta, text[pos:]


def sniff_separator(header: str, fmt: str) -> str | None:
    """The separator of a header line: "," for CSV, else a tab, a comma, or None (runs of blanks)."""
    if fmt == "csv":
        return ","
    if "\t" in header:
        return "\t"
    if "," in header:
        return ","
    return None  # runs of blanks


def _blank_separated(body: str, header: str, path: Path):
    """(frame or None, reader) for text in runs of blanks: a frame at once when the
    lines are fixed-width columns (not one field per header name)."""
    names = header.split()
    refuse_duplicates(names, str(path))
    if '"' not in body:
        lines = [ln.rstrip("\r") for ln in body.split("\n")[1:] if ln.strip()]
        if any(len(ln.split()) != len(names) for ln in lines):
            # not one field per header name: read as fixed-width columns under the names
            return type_columns(_read_fixed_width(header.rstrip("\r"), lines, path)), None
    return None, lambda: pd.read_csv(io.StringIO(body), sep=r"\s+", **READ_OPTIONS)


def read_delimited(path: Path, fmt: str) -> tuple[pd.DataFrame, list]:
    """A CSV/text file as a typed frame and its leading comment lines.

    Raises
    ------
    InputError
        Undecodable text, duplicate names, rows with more fields than the header,
        a row count that does not match the data records.
    """
    text = _decode_text(path.read_bytes(), path)
    meta, body = _split_leading_comments(text)
    if not body.strip():
        raise InputError(f"{path} holds no columns")
    header = body.split("\n", 1)[0]
    sep = sniff_separator(header, fmt)
    if sep is None:
        frame, reader = _blank_separated(body, header, path)
        if frame is not None:
            return frame, meta
        records = None  # not counted: quoted blanks make the line count ambiguous
    else:
        rows = csv.reader(io.StringIO(body), delimiter=sep)
        refuse_duplicates(next(rows), str(path))
        if '"' in body:  # quoted cells may hold line breaks: count records properly
            records = count_records(rows)
        else:  # one record per line that is not blank (pandas skips blank lines)
            records = sum(1 for ln in body.split("\n") if ln.strip()) - 1
        reader = lambda: pd.read_csv(io.StringIO(body), sep=sep, **READ_OPTIONS)  # noqa: E731
    try:
        frame = strict_parse(reader)
    except (pd.errors.ParserError, pd.errors.ParserWarning) as exc:
        raise InputError(f"cannot read {path} as {fmt}: {exc}; every row must have as many fields as "
                         "the header (quote text that holds the separator)") from None
    except Exception as exc:
        raise InputError(f"cannot read {path} as {fmt}: {exc}") from None
    frame = type_columns(frame)
    if records is not None and records != len(frame):
        raise InputError(f"{path}: read {len(frame)} rows but the file has {records} data records; "
                         "check the quoting of text cells")
    return frame, meta


def _read_fixed_width(header: str, lines, path) -> pd.DataFrame:
    """Fixed-width text: each column starts where its name starts in the header
    line and ends where the next name starts. Every data line must have a blank
    just before each of those positions (or end there); otherwise one clear error."""
    starts = [m.start() for m in re.finditer(r"\S+", header)]
    names = header.split()
    for i, ln in enumerate(lines, start=1):
        for name, b in zip(names[1:], starts[1:]):
            if b - 1 < len(ln) and not ln[b - 1].isspace():
                raise InputError(
                    f"{path}: data line {i} has not one field per header name, and is not aligned in fixed-"
                    f"width columns either (column {name!r} starts at character {b + 1} of the header); "
                    "separate columns with tabs or commas, quote text that holds blanks, or align the "
                    "columns under their names")
    edges = [0] + starts[1:] + [None]
    rows = [[(ln[a:b].strip() or None) for a, b in zip(edges[:-1], edges[1:])] for ln in lines]
    return pd.DataFrame(rows, columns=names, dtype=object)
