"""Reading a table, losing no row and no column: CSV (also gzipped and with a
byte-order mark), whitespace/tab-separated text, ECSV, FITS, VOTable and Parquet.

``#`` lines count as metadata only in the leading block of a delimited text
file, the number of rows read is checked against the data records, a named
pandas index in Parquet comes back as a column, and duplicate column names are
refused. :func:`read_table` always returns an astropy Table;
:func:`read_parquet_frame` gives a Parquet file as the pandas frame it holds
(the fast path for large catalogues).

References
----------
ECSV: Aldcroft et al., "Enhanced Character Separated Values table format",
astropy APE 6 (2013). VOTable 1.4, IVOA Recommendation (2019). FITS Standard
4.0 (IAU FITS Working Group 2016). Apache Parquet format specification.
"""
from __future__ import annotations

from pathlib import Path

import pandas as pd
from astropy.table import Table

from ..core.errors import InputError
from .delimited import read_delimited
from .formats import DELIMITED_FORMATS, FORMATS, check_input_path, guess_format
from .frames import clean_frame, frame_to_table, refuse_duplicates
from .sidecar import apply_input_sidecar

__all__ = ["read_table", "read_parquet_frame"]


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
            raise InputError(f"{path} holds no table HDU")
        if hdu is None and len(tables) > 1:
            listing = ", ".join(f"{i} ({n})" for i, n in tables)
            raise InputError(f"{path} holds {len(tables)} tables, in HDUs {listing}; choose one with "
                             "--hdu N or --hdu NAME (Python: hdu=...)")
        if hdu is not None:
            key = int(hdu) if str(hdu).isdigit() else str(hdu)
            valid = [i for i, _ in tables] + [n for _, n in tables]
            if key not in valid and (not isinstance(key, str) or key.upper() not in valid):
                raise InputError(f"{path} has no table HDU {hdu!r}; its tables are in HDUs "
                                 f"{', '.join(f'{i} ({n})' for i, n in tables)}")
            kwargs["hdu"] = key
    elif fmt == "votable" and hdu is not None:
        kwargs["table_id"] = int(hdu) if str(hdu).isdigit() else str(hdu)
    elif hdu is not None:
        raise InputError(f"--hdu (hdu=) applies to FITS and VOTable inputs, not {fmt}; leave it out")
    if fmt == "fits":
        from astropy.io import fits
        with fits.open(path) as hdul:
            h = hdul[kwargs.get("hdu", tables[0][0])]
            refuse_duplicates([c.name for c in h.columns], str(path))
    return Table.read(path, format=FORMATS[fmt][0], **kwargs)


def read_parquet_frame(path) -> pd.DataFrame:
    """A Parquet file as a pandas frame, checked and repaired as
    :func:`specpar.io.frames.clean_frame` does (index as columns, no duplicate
    names, astropy's masks honoured); ``attrs['specpar']`` holds specpar's metadata.

    Raises
    ------
    InputError
        A missing, special or unreadable file, or duplicate column names.
    """
    import pyarrow.parquet as pq
    path = Path(path)
    check_input_path(path)
    try:
        names = pq.read_schema(path).names
    except Exception as exc:
        raise InputError(f"cannot read {path} as parquet: {exc}") from None
    refuse_duplicates([n for n in names if not n.startswith("__index_level_")], str(path))
    try:
        frame = pd.read_parquet(path)
    except Exception as exc:
        raise InputError(f"cannot read {path} as parquet: {exc}") from None
    return clean_frame(frame, str(path))


def _read_other(path: Path, fmt: str, hdu) -> Table:
    """ECSV, FITS or VOTable through astropy, with one clear message on failure."""
    try:
        t = _read_astropy(path, fmt, hdu)
    except ValueError as exc:
        if str(exc).startswith(str(path)) or "--hdu" in str(exc):
            raise
        raise InputError(f"cannot read {path} as {fmt}: {exc}") from None
    except Exception as exc:  # astropy raises many kinds
        raise InputError(f"cannot read {path} as {fmt}: {exc}") from None
    if len(t.colnames) == 0:
        raise InputError(f"{path} holds no columns")
    return t


def read_table(path, fmt=None, *, hdu=None) -> Table:
    """Read a table, losing no row and no column.

    Parameters
    ----------
    path : str or path-like
    fmt : str, optional
        One of :data:`specpar.io.formats.FORMATS`; by default from the extension.
    hdu : int or str, optional
        FITS: the table HDU (number or name) when the file holds several.
        VOTable: the table (index or ID).

    Returns
    -------
    astropy.table.Table
        For every format (Parquet too: its metadata in ``meta``; see
        :func:`read_parquet_frame` for the pandas frame); text columns hold
        Python strings, missing cells are masked. :func:`specpar.estimate` takes it.

    Raises
    ------
    InputError
        One clear message for a missing, special or unreadable file, duplicate
        column names, or a row count that does not match the data records.
    """
    path = Path(path)
    fmt = guess_format(path, fmt)
    if hdu is not None and fmt not in ("fits", "votable"):
        raise InputError(f"--hdu (hdu=) picks a table in a FITS or VOTable file; {path} is read as {fmt}, "
                         "which holds one table: leave it out")
    check_input_path(path)
    if fmt == "parquet":
        frame = read_parquet_frame(path)
        t = frame_to_table(frame)
        t.meta.update(frame.attrs)
        return t
    if fmt in DELIMITED_FORMATS:
        frame, meta = read_delimited(path, fmt)
        frame = clean_frame(frame, str(path))
        return apply_input_sidecar(frame_to_table(frame, meta), path)
    return _read_other(path, fmt, hdu)
