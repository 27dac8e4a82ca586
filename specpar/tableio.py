"""Reading and writing tables by file extension (CSV, ECSV, FITS, VOTable,
Parquet) through astropy's unified I/O, with atomic writes."""
from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from astropy.table import Table

__all__ = ["FORMATS", "read_table", "write_table", "guess_format"]

#: our format name -> (astropy format, extensions)
FORMATS = {
    "csv": ("ascii.csv", (".csv", ".txt")),
    "ecsv": ("ascii.ecsv", (".ecsv",)),
    "fits": ("fits", (".fits", ".fit", ".fts", ".fits.gz")),
    "votable": ("votable", (".vot", ".votable", ".xml")),
    "parquet": ("parquet", (".parquet", ".pq")),
}


def guess_format(path, fmt=None) -> str:
    """Format name from ``fmt`` or the file extension; ValueError if unknown."""
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


def _apply_mask_columns(frame: pd.DataFrame) -> pd.DataFrame:
    """Honour astropy's way of storing masked columns in Parquet (``X`` plus ``X.mask``)."""
    for name in [c for c in frame.columns if str(c).endswith(".mask") and str(c)[:-5] in frame.columns]:
        base, mask = name[:-5], frame[name].to_numpy(bool)
        col = frame[base].astype(float) if frame[base].dtype.kind in "iub" else frame[base]
        frame[base] = col.where(~mask, np.nan if col.dtype.kind == "f" else None)
        frame = frame.drop(columns=name)
    return frame


def read_table(path, fmt=None):
    """Read a table; one clear ValueError for a missing or unreadable file.

    Returns an astropy Table, or a pandas DataFrame for Parquet (faster for
    large catalogues; :func:`specpar.estimate` takes either).
    """
    path = Path(path)
    fmt = guess_format(path, fmt)
    if not path.is_file():
        raise ValueError(f"input file {path} does not exist")
    try:
        if fmt == "parquet":
            # pandas reads Parquet directly (fast, keeps strings as objects)
            return _apply_mask_columns(pd.read_parquet(path))
        if fmt == "csv":
            t = Table.read(path, format="ascii.csv", comment="#")
        else:
            t = Table.read(path, format=FORMATS[fmt][0])
    except Exception as exc:  # astropy and pyarrow raise many kinds
        raise ValueError(f"cannot read {path} as {fmt}: {exc}") from None
    if len(t.colnames) == 0:
        raise ValueError(f"{path} holds no columns")
    return t


def _flat_meta(meta: dict) -> dict:
    return {"SPECPAR": json.dumps(meta.get("specpar", {}), sort_keys=True)}


def _write_parquet(table, tmp, meta) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq
    frame = table if isinstance(table, pd.DataFrame) else table.to_pandas(index=False)
    frame = frame.copy(deep=False)
    frame.attrs = {}
    arrow = pa.Table.from_pandas(frame, preserve_index=False)
    extra = {b"specpar": json.dumps(meta, sort_keys=True).encode()}
    arrow = arrow.replace_schema_metadata({**(arrow.schema.metadata or {}), **extra})
    pq.write_table(arrow, tmp)


def _for_astropy(table, fmt, meta) -> Table:
    out = Table.from_pandas(table) if isinstance(table, pd.DataFrame) else table.copy(copy_data=False)
    for name in out.colnames:  # object columns (notes) become plain strings
        if out[name].dtype.kind == "O":
            out[name] = np.asarray(out[name], dtype=str)
    if fmt == "csv":
        out.meta = {"comments": [f"specpar {k}: {json.dumps(v)}" for k, v in meta.items()]}
    elif fmt == "fits":
        out.meta = _flat_meta({"specpar": meta})
    elif fmt == "votable":
        out.meta = {"description": "specpar " + json.dumps(meta, sort_keys=True)}
    else:
        out.meta = {"specpar": meta}
    return out


def atomic_write(path, writer, *, inputs=(), overwrite=False, what="output") -> None:
    """Create ``path`` through ``writer(temporary_path)`` and rename it into place.

    Refuses to write over any of ``inputs`` and, unless ``overwrite``, over an
    existing file; nothing is left behind if ``writer`` fails. The file gets
    the permissions of a plain new file (mkstemp's are 0600).
    """
    path = Path(path)
    for inp in inputs:
        if Path(inp).exists() and path.exists() and os.path.samefile(inp, path):
            raise ValueError(f"refusing to write the {what} over the input file {path}")
    if path.exists() and not overwrite:
        raise ValueError(f"{what} {path} exists; choose another name or allow overwriting (--overwrite)")
    if not path.parent.exists():
        raise ValueError(f"output folder {path.parent} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        writer(tmp)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)


def write_table(table, path, fmt=None, *, inputs=(), overwrite=False) -> None:
    """Write an astropy Table or pandas DataFrame atomically (see :func:`atomic_write`).

    specpar's metadata (``meta['specpar']`` or ``attrs['specpar']``) goes where
    the format keeps metadata: the ECSV header, CSV comment lines, a FITS header
    keyword, the VOTable description, the Parquet schema.
    """
    fmt = guess_format(path, fmt)
    meta = (table.attrs if isinstance(table, pd.DataFrame) else table.meta).get("specpar", {})

    def writer(tmp):
        try:
            if fmt == "parquet":
                _write_parquet(table, tmp, meta)
            else:
                kwargs = {"comment": "# "} if fmt == "csv" else {}
                _for_astropy(table, fmt, meta).write(tmp, format=FORMATS[fmt][0], overwrite=True, **kwargs)
        except Exception as exc:
            raise ValueError(f"cannot write {path} as {fmt}: {exc}") from None

    atomic_write(path, writer, inputs=inputs, overwrite=overwrite)
