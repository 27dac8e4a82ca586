"""Reading and writing tables: CSV (also gzipped and with a byte-order mark),
whitespace/tab-separated text, ECSV, FITS, VOTable and Parquet.

Reading never loses a row or a column silently: ``#`` lines count as metadata
only in the leading block of a delimited text file, the number of rows read is
checked against the data records, a named pandas index in Parquet comes back
as a column, and duplicate column names are refused.

Writing is checked before any computing (:func:`check_output`) and publishes a
finished temporary file under the final name (:func:`publish`): never over an
input, a symlink or a special file, exclusively when the name is new (two runs
racing for one name give one success and one clear error), keeping the
permissions of a file it replaces, and removing its temporary file on errors
and SIGTERM. Temporary files left by a killed run are swept on the next run.

The reusable pieces for other readers and writers (e.g. chunked streaming) are
:func:`clean_frame` (checks and repairs a pandas frame read from any format),
:func:`check_output`, :func:`temp_path_for`, :func:`publish` and
:func:`atomic_write`.

References
----------
ECSV: Aldcroft et al., "Enhanced Character Separated Values table format",
astropy APE 6 (2013). VOTable 1.4, IVOA Recommendation (2019), BINARY2
serialisation. FITS Standard 4.0 (IAU FITS Working Group 2016). Apache Parquet
format specification (key-value metadata). Neutralising spreadsheet formulas in
CSV cells: OWASP "CSV Injection" guidance (common practice).
"""
from __future__ import annotations

import csv
import gzip
import io
import json
import os
import re
import signal
import stat
import sys
import threading
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from astropy.table import Column, MaskedColumn, Table

__all__ = ["FORMATS", "read_table", "write_table", "guess_format", "clean_frame", "check_output",
           "check_columns_writable", "temp_path_for", "publish", "atomic_write", "sweep_stale_temps",
           "sidecar_path", "FORMULA_PREFIXES", "TEMP_TAG"]

#: our format name -> (astropy format, extensions)
FORMATS = {
    "csv": ("ascii.csv", (".csv", ".csv.gz")),
    "text": (None, (".txt", ".dat", ".tsv", ".txt.gz", ".dat.gz", ".tsv.gz")),
    "ecsv": ("ascii.ecsv", (".ecsv", ".ecsv.gz")),
    "fits": ("fits", (".fits", ".fit", ".fts", ".fits.gz")),
    "votable": ("votable", (".vot", ".votable", ".xml")),
    "parquet": ("parquet", (".parquet", ".pq")),
}

#: First characters that make a spreadsheet treat a CSV cell as a formula (OWASP
#: CSV-injection guidance; tab and carriage return included there too).
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")
#: Marker in the names of our temporary files: ``.<name>.specpar-<pid>-<n>.tmp``.
TEMP_TAG = "specpar"
_TEMP_RE = re.compile(r"^\.(?P<name>.+)\." + TEMP_TAG + r"-(?P<pid>\d+)-\d+\.tmp$")
#: Text longer than this in an ECSV column is written as JSON-encoded objects
#: rather than fixed-width strings (memory grows with the longest cell otherwise).
_ECSV_FIXED_WIDTH_MAX = 256


def guess_format(path, fmt=None) -> str:
    """Format name from ``fmt`` or the file extension.

    Raises
    ------
    ValueError
        Unknown format name or extension, with the valid choices.
    """
    if fmt:
        if fmt not in FORMATS:
            raise ValueError(f"unknown format {fmt!r}; choose one of {', '.join(FORMATS)}")
        return fmt
    name = str(path).lower()
    for key, (_, exts) in FORMATS.items():
        if name.endswith(exts):
            return key
    raise ValueError(f"cannot tell the format of {path} from its extension; use one of "
                     f"{', '.join(e for _, x in FORMATS.values() for e in x)} or give the format "
                     f"explicitly ({', '.join(FORMATS)})")


def sidecar_path(path) -> Path:
    """The provenance file written beside a CSV or text output: ``<path>.specpar.json``."""
    path = Path(path)
    return path.with_name(path.name + ".specpar.json")


# ----------------------------------------------------------------------------- reading

def _kind_of(st_mode) -> str:
    if stat.S_ISDIR(st_mode):
        return "a folder"
    if stat.S_ISFIFO(st_mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(st_mode) or stat.S_ISBLK(st_mode):
        return "a device"
    if stat.S_ISSOCK(st_mode):
        return "a socket"
    return "not a regular file"


def _apply_input_sidecar(t: Table, path: Path) -> Table:
    """Metadata and formula escaping from the sidecar of a CSV/text file we wrote."""
    side = sidecar_path(path)
    if side.is_file():
        try:
            info = json.loads(side.read_text("utf-8"))
        except (OSError, ValueError):
            info = {}
        if isinstance(info, dict) and info.get("specpar"):
            t.meta["specpar"] = info["specpar"]
        if isinstance(info, dict) and info.get("formula_cells_escaped"):
            _unescape_formulas(t)
    return t


def _check_input_path(path: Path, what="input file") -> None:
    try:
        st = path.stat()
    except FileNotFoundError:
        raise ValueError(f"{what} {path} does not exist") from None
    except OSError as exc:
        raise ValueError(f"cannot open {what} {path}: {exc.strerror}") from None
    if not stat.S_ISREG(st.st_mode):
        raise ValueError(f"{what} {path} is {_kind_of(st.st_mode)}; give the path of a table file")
    if not os.access(path, os.R_OK):
        raise ValueError(f"{what} {path} is not readable (permissions); check its mode or owner")


def _duplicates(names) -> list:
    seen, dup = set(), []
    for n in names:
        if n in seen and n not in dup:
            dup.append(n)
        seen.add(n)
    return dup


def _refuse_duplicates(names, source) -> None:
    dup = _duplicates([str(n) for n in names])
    if dup:
        raise ValueError(f"{source} has duplicate column names: {', '.join(map(repr, dup))}; "
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
                raise ValueError(f"{source}: its index {', '.join(map(repr, clash))} has the name of a "
                                 "column too; rename one of them")
            frame = frame.reset_index(names=names) if idx.nlevels > 1 else frame.reset_index(names=names[0])
    if not all(isinstance(c, str) for c in frame.columns):
        frame = frame.set_axis([str(c) for c in frame.columns], axis=1)
    _refuse_duplicates(frame.columns, source)
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


def _decode_text(raw: bytes, path) -> str:
    if raw[:2] == b"\x1f\x8b":
        try:
            raw = gzip.decompress(raw)
        except (OSError, EOFError) as exc:
            raise ValueError(f"cannot read {path}: damaged gzip data ({exc})") from None
    try:
        return raw.decode("utf-8-sig")  # drops the byte-order mark of spreadsheet exports
    except UnicodeDecodeError as exc:
        raise ValueError(f"cannot read {path}: byte {exc.start} is not UTF-8 text; save the file as "
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


def _sniff_separator(header: str, fmt: str) -> str | None:
    if fmt == "csv":
        return ","
    if "\t" in header:
        return "\t"
    if "," in header:
        return ","
    return None  # runs of blanks


def _read_delimited(path: Path, fmt: str) -> tuple[pd.DataFrame, list]:
    text = _decode_text(path.read_bytes(), path)
    meta, body = _split_leading_comments(text)
    if not body.strip():
        raise ValueError(f"{path} holds no columns")
    header = body.split("\n", 1)[0]
    sep = _sniff_separator(header, fmt)
    # read as text, then type the columns (see _type_columns): ids such as 007 stay text
    # index_col=False: a trailing separator on every row (a common export habit) is an empty
    # last field, never a reason to shift the columns onto a row index; a non-empty extra
    # field is refused below (pandas warns of the data loss; the warning is made an error)
    options = dict(keep_default_na=False, na_values=[""], skip_blank_lines=True, comment=None,
                   dtype=object, index_col=False)
    if sep is None:
        names = header.split()
        _refuse_duplicates(names, str(path))
        if '"' not in body:
            lines = [ln.rstrip("\r") for ln in body.split("\n")[1:] if ln.strip()]
            if any(len(ln.split()) != len(names) for ln in lines):
                # not one field per header name: read as fixed-width columns under the names
                return _type_columns(_read_fixed_width(header.rstrip("\r"), lines, path)), meta
        reader = lambda: pd.read_csv(io.StringIO(body), sep=r"\s+", **options)  # noqa: E731
        records = None  # not counted: quoted blanks make the line count ambiguous
    else:
        rows = csv.reader(io.StringIO(body), delimiter=sep)
        names = next(rows)
        if '"' in body:  # quoted cells may hold line breaks: count records properly
            records = sum(1 for r in rows if len(r) > 1 or (r and r[0].strip()))
        else:  # one record per line that is not blank (pandas skips blank lines)
            records = sum(1 for ln in body.split("\n") if ln.strip()) - 1
        reader = lambda: pd.read_csv(io.StringIO(body), sep=sep, **options)  # noqa: E731
    _refuse_duplicates(names, str(path))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", pd.errors.ParserWarning)
            frame = reader()
    except (pd.errors.ParserError, pd.errors.ParserWarning) as exc:
        raise ValueError(f"cannot read {path} as {fmt}: {exc}; every row must have as many fields as "
                         "the header (quote text that holds the separator)") from None
    except Exception as exc:
        raise ValueError(f"cannot read {path} as {fmt}: {exc}") from None
    frame = _type_columns(frame)
    if records is not None and records != len(frame):
        raise ValueError(f"{path}: read {len(frame)} rows but the file has {records} data records; "
                         "check the quoting of text cells")
    return frame, meta


class _Body:
    """The text of a CSV/text file after its leading ``#``/blank block, read lazily
    (gzip and a byte-order mark handled as :func:`_decode_text` does; lines end at
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


_READ_OPTIONS = dict(keep_default_na=False, na_values=[""], skip_blank_lines=True, comment=None,
                     dtype=object, index_col=False)


def _chunks(body: _Body, sep: str, chunk_rows: int):
    """Blocks of rows as text, with the whole-file reader's options (its parser
    warning of a lost field is an error here too)."""
    def strict(call):
        with warnings.catch_warnings():
            warnings.simplefilter("error", pd.errors.ParserWarning)
            return call()
    reader = strict(lambda: pd.read_csv(body, sep=sep, chunksize=chunk_rows, **_READ_OPTIONS))
    with reader:
        while True:
            block = strict(lambda: next(reader, None))
            if block is None:
                return
            yield block


def _block_kinds(frame: pd.DataFrame) -> dict:
    """Per column of one block: (kind, any missing) with kind one of 'empty',
    'int', 'float', 'text', by the rules of :func:`_type_columns`."""
    import pyarrow as pa
    import pyarrow.compute as pc
    out = {}
    for c in frame.columns:
        s = frame[c]
        given = s.dropna()
        missing = len(given) != len(s)
        if given.empty:
            out[c] = ("empty", missing)
            continue
        try:
            num = pd.to_numeric(given)
        except (ValueError, TypeError):
            out[c] = ("text", missing)
            continue
        arr = pa.array(given.to_numpy(dtype=object), type=pa.string())
        if pc.any(pc.match_substring_regex(arr, _IDENTIFIER_LIKE)).as_py():
            out[c] = ("text", missing)
        else:
            out[c] = ("int" if num.dtype.kind in "iu" else "float", missing)
    return out


_KIND_RANK = {"empty": 0, "int": 1, "float": 2, "text": 3}


def delimited_plan(path, fmt: str, chunk_rows: int):
    """First pass over a CSV/text file for block reading, or None when the file
    must be read whole (:func:`read_table`), which then gives its own result or error.

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
        _check_input_path(path)
        with _Body(path) as body:
            meta, header = body.meta, body.header
            if not header.strip():
                return None
            sep = _sniff_separator(header, fmt)
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
            names = next(rows)
            if _duplicates(names):
                return None
            records = sum(1 for r in rows if len(r) > 1 or (r and r[0].strip()))
        records = records if quoted else lines - 1
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
        if total == 0 or total != records or columns is None:
            return None
        kinds = {c: ("float" if kinds.get(c, "empty") == "int" and missing[c] else kinds.get(c, "empty"))
                 for c in columns}
    except Exception:  # the whole-file reader gives the one clear message
        return None
    return {"path": path, "fmt": fmt, "sep": sep, "meta": meta, "kinds": kinds, "columns": columns,
            "rows": total, "chunk_rows": chunk_rows}


def _apply_kinds(frame: pd.DataFrame, kinds: dict) -> pd.DataFrame:
    """One block typed as :func:`_type_columns` types the whole file (``kinds`` from
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
                raise ValueError(f"{path} changed while it was being read; run again")
            frame = clean_frame(_apply_kinds(block, plan["kinds"]), str(path))
            yield _apply_input_sidecar(_frame_to_table(frame, plan["meta"]), path)


#: Cells that look like identifiers, not numbers: leading zeros (007, 0042) or more
#: digits than a double keeps (16 or more).
_IDENTIFIER_LIKE = r"^\s*[+-]?(0\d|\d{16,}\s*$)"


def _type_columns(frame: pd.DataFrame) -> pd.DataFrame:
    """Turn text columns whose every cell is a number into numbers, losslessly.

    A column stays text if any cell is not a number, has leading zeros (``007``)
    or more digits than a double keeps. Integers stay integers unless a cell is
    missing. Text cells are kept exactly (blanks included).
    """
    import pyarrow as pa
    import pyarrow.compute as pc
    for c in frame.columns:
        s = frame[c]
        given = s.dropna()
        if given.empty:
            frame[c] = np.full(len(s), np.nan)
            continue
        text = pd.Series(s.to_numpy(dtype=object), index=s.index, dtype=object)
        try:
            num = pd.to_numeric(given)  # (surrounding blanks allowed; fails fast on text)
        except (ValueError, TypeError):
            frame[c] = text
            continue
        arr = pa.array(given.to_numpy(dtype=object), type=pa.string())
        if pc.any(pc.match_substring_regex(arr, _IDENTIFIER_LIKE)).as_py():
            frame[c] = text
            continue
        if num.dtype.kind in "iu" and len(given) == len(s):
            frame[c] = num.to_numpy()
        else:
            out = np.full(len(s), np.nan)
            out[s.notna().to_numpy()] = num.to_numpy(dtype=float)
            frame[c] = out
    return frame


def _read_fixed_width(header: str, lines, path) -> pd.DataFrame:
    """Fixed-width text: each column starts where its name starts in the header
    line and ends where the next name starts. Every data line must have a blank
    just before each of those positions (or end there); otherwise one clear error."""
    starts = [m.start() for m in re.finditer(r"\S+", header)]
    names = header.split()
    for i, ln in enumerate(lines, start=1):
        for name, b in zip(names[1:], starts[1:]):
            if b - 1 < len(ln) and not ln[b - 1].isspace():
                raise ValueError(
                    f"{path}: data line {i} has not one field per header name, and is not aligned in fixed-"
                    f"width columns either (column {name!r} starts at character {b + 1} of the header); "
                    "separate columns with tabs or commas, quote text that holds blanks, or align the "
                    "columns under their names")
    edges = [0] + starts[1:] + [None]
    rows = [[(ln[a:b].strip() or None) for a, b in zip(edges[:-1], edges[1:])] for ln in lines]
    return pd.DataFrame(rows, columns=names, dtype=object)


def _frame_to_table(frame: pd.DataFrame, meta=None) -> Table:
    """An astropy Table holding the frame's columns; text stays Python objects
    (no fixed-width string arrays), missing text is masked."""
    cols = {}
    for name in frame.columns:
        s = frame[name]
        if s.dtype.kind == "O":
            vals = s.to_numpy(dtype=object, copy=True)
            miss = pd.isna(s).to_numpy()
            vals[miss] = None
            cols[name] = MaskedColumn(vals, mask=miss, dtype=object) if miss.any() else Column(vals, dtype=object)
        else:
            cols[name] = s.to_numpy()
    t = Table(cols, copy=False)
    if meta:
        t.meta["comments"] = list(meta)
    return t


def _fits_tables(path: Path):
    from astropy.io import fits
    with fits.open(path, memmap=True) as hdul:
        return [(i, h.name) for i, h in enumerate(hdul)
                if isinstance(h, (fits.BinTableHDU, fits.TableHDU))]


def _read_astropy(path: Path, fmt: str, hdu) -> Table:
    kwargs = {}
    if fmt == "fits":
        tables = _fits_tables(path)
        if not tables:
            raise ValueError(f"{path} holds no table HDU")
        if hdu is None and len(tables) > 1:
            listing = ", ".join(f"{i} ({n})" for i, n in tables)
            raise ValueError(f"{path} holds {len(tables)} tables, in HDUs {listing}; choose one with "
                             "--hdu N or --hdu NAME (Python: hdu=...)")
        if hdu is not None:
            key = int(hdu) if str(hdu).isdigit() else str(hdu)
            valid = [i for i, _ in tables] + [n for _, n in tables]
            if key not in valid and (not isinstance(key, str) or key.upper() not in valid):
                raise ValueError(f"{path} has no table HDU {hdu!r}; its tables are in HDUs "
                                 f"{', '.join(f'{i} ({n})' for i, n in tables)}")
            kwargs["hdu"] = key
    elif fmt == "votable" and hdu is not None:
        kwargs["table_id"] = int(hdu) if str(hdu).isdigit() else str(hdu)
    elif hdu is not None:
        raise ValueError(f"--hdu (hdu=) applies to FITS and VOTable inputs, not {fmt}; leave it out")
    if fmt == "fits":
        from astropy.io import fits
        with fits.open(path) as hdul:
            h = hdul[kwargs.get("hdu", tables[0][0])]
            _refuse_duplicates([c.name for c in h.columns], str(path))
    return Table.read(path, format=FORMATS[fmt][0], **kwargs)


def read_table(path, fmt=None, *, hdu=None):
    """Read a table, losing no row and no column.

    Parameters
    ----------
    path : str or path-like
    fmt : str, optional
        One of :data:`FORMATS`; by default from the extension.
    hdu : int or str, optional
        FITS: the table HDU (number or name) when the file holds several.
        VOTable: the table (index or ID).

    Returns
    -------
    astropy.table.Table or pandas.DataFrame
        A DataFrame for Parquet (fast for large catalogues), a Table otherwise;
        :func:`specpar.estimate` takes either.

    Raises
    ------
    ValueError
        One clear message for a missing, special or unreadable file, duplicate
        column names, or a row count that does not match the data records.
    """
    path = Path(path)
    fmt = guess_format(path, fmt)
    if hdu is not None and fmt not in ("fits", "votable"):
        raise ValueError(f"--hdu (hdu=) picks a table in a FITS or VOTable file; {path} is read as {fmt}, "
                         "which holds one table: leave it out")
    _check_input_path(path)
    if fmt == "parquet":
        import pyarrow.parquet as pq
        try:
            names = pq.read_schema(path).names
        except Exception as exc:
            raise ValueError(f"cannot read {path} as parquet: {exc}") from None
        _refuse_duplicates([n for n in names if not n.startswith("__index_level_")], str(path))
        try:
            frame = pd.read_parquet(path)
        except Exception as exc:
            raise ValueError(f"cannot read {path} as parquet: {exc}") from None
        return clean_frame(frame, str(path))
    if fmt in ("csv", "text"):
        frame, meta = _read_delimited(path, fmt)
        frame = clean_frame(frame, str(path))
        return _apply_input_sidecar(_frame_to_table(frame, meta), path)
    try:
        t = _read_astropy(path, fmt, hdu)
    except ValueError as exc:
        if str(exc).startswith(str(path)) or "--hdu" in str(exc):
            raise
        raise ValueError(f"cannot read {path} as {fmt}: {exc}") from None
    except Exception as exc:  # astropy raises many kinds
        raise ValueError(f"cannot read {path} as {fmt}: {exc}") from None
    if len(t.colnames) == 0:
        raise ValueError(f"{path} holds no columns")
    return t


# ----------------------------------------------------------------------------- output checks

def _is_stdout(path) -> bool:
    return str(path) == "-"


def _check_replaceable(path, st, overwrite, what) -> None:
    """An existing output may be replaced only when it is a regular file and overwriting is allowed."""
    if stat.S_ISLNK(st.st_mode):
        raise ValueError(f"{what} {path} is a symbolic link; refusing to replace it (its target would "
                         "be left untouched); give the target's path or another name")
    if not stat.S_ISREG(st.st_mode):
        raise ValueError(f"{what} {path} exists and is {_kind_of(st.st_mode)}; refusing to replace it; "
                         "choose another name")
    if not overwrite:
        raise ValueError(f"{what} {path} exists; choose another name or allow overwriting (--overwrite)")


def check_output(path, fmt=None, *, inputs=(), overwrite=False, what="output") -> str:
    """Check an output path before any computing; returns the format name.

    Checks the format, that the folder exists and is writable, that the path is
    none of ``inputs`` (the table, calibration or locus files), and that an
    existing path is a regular file (not a symlink, FIFO, device or folder)
    that may be replaced (``overwrite``). ``"-"`` means standard output.

    Raises
    ------
    ValueError
        One message naming the problem and how to fix it.
    """
    if _is_stdout(path):
        fmt = guess_format("", fmt or "csv")
        if fmt not in ("csv", "text", "ecsv"):
            raise ValueError(f"{fmt} cannot be written to standard output; use csv, text or ecsv with -o -")
        return fmt
    path = Path(path)
    fmt = guess_format(path, fmt)
    folder = path.parent
    if not folder.is_dir():
        raise ValueError(f"output folder {folder} does not exist" if not folder.exists()
                         else f"output folder {folder} is not a folder")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise ValueError(f"output folder {folder} is not writable; choose another folder")
    for inp in inputs:
        if inp is None or _is_stdout(inp):
            continue
        try:
            same = os.path.samefile(inp, path)
        except OSError:
            same = False
        if same or Path(os.path.abspath(inp)) == Path(os.path.abspath(path)):
            raise ValueError(f"refusing to write the {what} over the input file {inp}; choose another "
                             "output name")
    if fmt in ("csv", "text"):  # the provenance sidecar is replaced too: only a regular file
        try:
            side = os.lstat(sidecar_path(path))
        except FileNotFoundError:
            side = None
        if side is not None and not stat.S_ISREG(side.st_mode):
            raise ValueError(f"{sidecar_path(path)} (the metadata file written beside a {fmt} output) is "
                             f"{'a symbolic link' if stat.S_ISLNK(side.st_mode) else _kind_of(side.st_mode)}; "
                             "refusing to replace it; choose another output name")
        if side is not None and not overwrite:
            raise ValueError(f"{sidecar_path(path)} (the metadata file written beside a {fmt} output) "
                             "exists; use --overwrite (Python: overwrite=True) to replace it with the output")
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return fmt
    _check_replaceable(path, st, overwrite, what)
    if not os.access(path, os.W_OK):
        raise ValueError(f"{what} {path} exists and is read-only; refusing to replace it")
    return fmt


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
#: beyond it the write would need that much memory and disk for mostly padding.
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
            if getattr(col, "ndim", 1) > 1 and fmt in ("csv", "text"):
                raise ValueError(f"column {c!r} holds arrays, which {fmt} cannot hold; write ECSV, FITS, "
                                 "VOTable or Parquet, or drop the column")
            if getattr(col, "ndim", 1) == 1:
                items.append((c, pd.Series(np.asarray(col, dtype=object) if col.dtype.kind == "O"
                                           else np.asarray(col))))
    bad = [(c, k) for c, s in items if (k := _unwritable_kind(s))]
    if bad:
        listing = "; ".join(f"{c!r} holds {k}" for c, k in bad)
        raise ValueError(f"cannot write these columns as {fmt}: {listing}; write Parquet "
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
                raise ValueError(
                    f"column {c!r} would take {longest * len(ser) / 1024 ** 2:.0f} MiB as fixed-width FITS text "
                    f"({len(ser)} rows x {longest} characters, the longest cell); cut text with "
                    "--max-field-length N (Python: max_field_length=N), or write ECSV, VOTable or Parquet")


# ----------------------------------------------------------------------------- publishing

_counter = iter(range(1 << 62))


def temp_path_for(path) -> Path:
    """A fresh temporary name beside ``path`` (same folder, so renames are atomic)."""
    path = Path(path)
    return path.with_name(f".{path.name}.{TEMP_TAG}-{os.getpid()}-{next(_counter)}.tmp")


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def sweep_stale_temps(path) -> list:
    """Remove our temporary files for ``path`` left by runs that no longer exist.

    Only names of our own pattern (``.<name>.specpar-<pid>-<n>.tmp``) whose
    process is gone are removed; returns the paths removed.
    """
    path = Path(path)
    removed = []
    try:
        entries = list(os.scandir(path.parent))
    except OSError:
        return removed
    for e in entries:
        m = _TEMP_RE.match(e.name)
        if not m or m["name"] != path.name or int(m["pid"]) == os.getpid() or _pid_alive(int(m["pid"])):
            continue
        try:
            if e.is_file(follow_symlinks=False):
                os.remove(e.path)
                removed.append(Path(e.path))
        except OSError:
            pass
    return removed


def _new_file_mode() -> int:
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


def publish(tmp, path, *, overwrite=False, what="output") -> None:
    """Put the finished file ``tmp`` under the name ``path``.

    A new name is created exclusively (hard link, else ``O_EXCL``), so of two
    runs racing for it one wins and the other gets a clear error. An existing
    regular file is replaced atomically only with ``overwrite`` and keeps its
    permission bits; symlinks and special files are never replaced. ``tmp`` is
    gone afterwards in every case.
    """
    tmp, path = Path(tmp), Path(path)
    try:
        try:
            st = os.lstat(path)
        except FileNotFoundError:
            st = None
        if st is None:
            os.chmod(tmp, _new_file_mode())
            try:
                os.link(tmp, path)
            except FileExistsError:
                raise ValueError(_raced(what, path)) from None
            except OSError:  # file systems without hard links
                try:
                    fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, _new_file_mode())
                except FileExistsError:
                    raise ValueError(_raced(what, path)) from None
                os.close(fd)
                os.replace(tmp, path)
            return
        if stat.S_ISLNK(st.st_mode) or not stat.S_ISREG(st.st_mode):
            raise ValueError(f"{what} {path} is {'a symbolic link' if stat.S_ISLNK(st.st_mode) else _kind_of(st.st_mode)}; "
                             "refusing to replace it; choose another name")
        if not overwrite:
            raise ValueError(_raced(what, path))
        os.chmod(tmp, stat.S_IMODE(st.st_mode))
        os.replace(tmp, path)
    finally:
        if os.path.lexists(tmp):
            os.remove(tmp)


def _raced(what, path) -> str:
    return (f"{what} {path} was created by another process while this one was computing; nothing "
            "was written; choose another name or use --overwrite")


class Terminated(BaseException):
    """Raised inside a write when SIGTERM arrives, so temporary files are removed."""


def _raise_terminated(signum, frame):
    raise Terminated(signum)


def atomic_write(path, writer, *, inputs=(), overwrite=False, what="output") -> None:
    """Create ``path`` through ``writer(temporary_path)`` and :func:`publish` it.

    The output is checked first (:func:`check_output`); stale temporary files
    of earlier killed runs are swept; the temporary file is removed if
    ``writer`` fails or SIGTERM arrives (the exit then reports termination).
    """
    path = Path(path)
    _check_path_only(path, inputs, overwrite, what)
    sweep_stale_temps(path)
    tmp = temp_path_for(path)
    old = None
    main = threading.current_thread() is threading.main_thread()
    if main:
        old = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        fd = os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o600)
        os.close(fd)
        writer(str(tmp))
        publish(tmp, path, overwrite=overwrite, what=what)
    finally:
        try:
            if os.path.lexists(tmp):
                os.remove(tmp)
        finally:
            if main:
                signal.signal(signal.SIGTERM, old if old is not None else signal.SIG_DFL)


def _check_path_only(path, inputs, overwrite, what):
    """:func:`check_output` without the format test (plots and other non-table files)."""
    folder = path.parent
    if not folder.is_dir():
        raise ValueError(f"output folder {folder} does not exist" if not folder.exists()
                         else f"output folder {folder} is not a folder")
    for inp in inputs:
        if inp is None:
            continue
        try:
            same = os.path.samefile(inp, path)
        except OSError:
            same = False
        if same:
            raise ValueError(f"refusing to write the {what} over the input file {path}")
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return
    _check_replaceable(path, st, overwrite, what)


# ----------------------------------------------------------------------------- writing

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


def _prepared_columns(table, max_field_length):
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


def _to_frame(cols) -> pd.DataFrame:
    return pd.DataFrame({k: (pd.Series(v, dtype=object) if v.dtype.kind == "O" else
                             pd.Series(list(v)) if v.ndim > 1 else v) for k, v in cols.items()})


def _escape_formulas(frame: pd.DataFrame) -> bool:
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


def _unescape_formulas(t: Table) -> None:
    """Undo :func:`_escape_formulas` on a table read back from our own CSV."""
    for c in t.colnames:
        if t[c].dtype.kind != "O":
            continue
        vals = np.asarray(t[c], dtype=object)
        for i, v in enumerate(vals):
            if isinstance(v, str) and len(v) > 1 and v[0] == "'" and v[1] in FORMULA_PREFIXES + ("'",):
                vals[i] = v[1:]
        t[c] = MaskedColumn(vals, mask=np.ma.getmaskarray(t[c]), dtype=object) \
            if isinstance(t[c], MaskedColumn) else Column(vals, dtype=object)


def _units(table) -> dict:
    if isinstance(table, Table):
        return {c: (table[c].unit, table[c].description) for c in table.colnames}
    return {}


def _write_delimited(frame, out, fmt, escape, header=True) -> bool:
    """CSV (or tab-separated text) with CRLF line ends as RFC 4180 has them, so that
    a cell holding a bare carriage return is quoted too. ``header=False`` appends
    a further block of rows (streaming)."""
    sep = "," if fmt == "csv" else "\t"
    escaped = _escape_formulas(frame) if escape else False
    frame.to_csv(out, sep=sep, index=False, na_rep="", lineterminator="\r\n", quoting=csv.QUOTE_MINIMAL,
                 float_format=None, header=header)
    return escaped


def _write_parquet(frame, tmp, meta) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq
    arrow = pa.Table.from_pandas(frame, preserve_index=False)
    text = json.dumps(meta, sort_keys=True, default=str)
    extra = {b"specpar": text.encode(),
             # pandas >= 2.1 restores DataFrame.attrs from this key
             b"PANDAS_ATTRS": json.dumps({"specpar": meta}, default=str).encode()}
    extra.update(_astropy_parquet_header(frame, meta))
    arrow = arrow.replace_schema_metadata({**(arrow.schema.metadata or {}), **extra})
    pq.write_table(arrow, tmp)


def _astropy_parquet_header(frame, meta) -> dict:
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
    for name, vals in source.items():
        if vals.dtype.kind == "O" and vals.ndim == 1:
            miss = np.array([v is None for v in vals], bool)
            if fmt == "fits":  # FITS holds bytes: UTF-8, fixed width
                data = np.array([b"" if v is None else v.encode("utf-8") for v in vals], dtype=bytes)
                cols[name] = MaskedColumn(data, mask=miss) if miss.any() else Column(data)
            elif fmt == "ecsv":
                longest = max((len(v) for v in vals if v is not None), default=0)
                # the plain form loses line breaks (any that str.splitlines knows) and
                # blanks at either end
                plain = longest <= _ECSV_FIXED_WIDTH_MAX and not any(
                    v is not None and (v != v.strip() or len(v.splitlines()) > 1) for v in pd.unique(vals))
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
        CSV-injection guidance); undone by :func:`read_table`.
    """
    fmt = check_output(path, fmt, inputs=inputs, overwrite=overwrite)
    if max_field_length is not None and not (isinstance(max_field_length, (int, np.integer))
                                             and max_field_length >= 1):
        raise ValueError(f"max_field_length must be a whole number >= 1, got {max_field_length!r}")
    check_columns_writable(table, fmt, max_field_length)
    meta = dict((table.attrs if isinstance(table, pd.DataFrame) else table.meta).get("specpar", {}))
    units = _units(table)
    source, cut = _prepared_columns(table, max_field_length)
    if cut:
        meta["text_cut_to_max_field_length"] = {"max_field_length": int(max_field_length), "cells": cut}

    if _is_stdout(path):
        if fmt in ("csv", "text"):
            _write_delimited(_to_frame(source), sys.stdout, fmt, escape_formulas)
            sys.stdout.flush()
            return
        if fmt == "ecsv":
            _for_astropy(source, fmt, meta, units).write(sys.stdout, format="ascii.ecsv")
            return
        raise ValueError(f"{fmt} cannot be written to standard output; use csv, text or ecsv with -o -")

    state = {}

    def writer(tmp):
        try:
            if fmt == "parquet":
                _write_parquet(_to_frame(source), tmp, meta)
            elif fmt in ("csv", "text"):
                opener = gzip.open if str(path).lower().endswith(".gz") else open
                with opener(tmp, "wt", encoding="utf-8", newline="") as fh:
                    state["escaped"] = _write_delimited(_to_frame(source), fh, fmt, escape_formulas)
            else:
                kwargs = {"tabledata_format": "binary2"} if fmt == "votable" else {}
                _for_astropy(source, fmt, meta, units).write(tmp, format=FORMATS[fmt][0], overwrite=True,
                                                            **kwargs)
        except (ValueError, TypeError, OSError, UnicodeError) as exc:
            raise ValueError(f"cannot write {path} as {fmt}: {exc}") from None

    atomic_write(path, writer, inputs=inputs, overwrite=overwrite)
    if fmt in ("csv", "text"):
        write_sidecar(path, meta, bool(state.get("escaped")), inputs=inputs, overwrite=overwrite)


def write_sidecar(path, meta, escaped, *, inputs=(), overwrite=False) -> None:
    """Write the provenance sidecar ``<path>.specpar.json`` of a CSV/text output
    (after the table itself; with the table's permission bits)."""
    side = sidecar_path(path)
    info = {"about": f"provenance of {Path(path).name}, written by specpar", "specpar": meta,
            "formula_cells_escaped": bool(escaped)}
    text = json.dumps(info, indent=1, sort_keys=True, default=str)

    def side_writer(tmp):
        Path(tmp).write_text(text, encoding="utf-8")
    atomic_write(side, side_writer, inputs=inputs, overwrite=overwrite, what="metadata sidecar")
    os.chmod(side, stat.S_IMODE(os.stat(path).st_mode))  # as private as the table it describes
