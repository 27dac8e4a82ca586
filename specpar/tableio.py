"""Reading and writing tables by file extension (CSV, ECSV, FITS, VOTable,
Parquet) through astropy's unified I/O, with atomic writes."""
from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import numpy as np
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


def read_table(path, fmt=None) -> Table:
    """Read a table; one clear ValueError for a missing or unreadable file."""
    path = Path(path)
    fmt = guess_format(path, fmt)
    if not path.is_file():
        raise ValueError(f"input file {path} does not exist")
    try:
        if fmt == "csv":
            t = Table.read(path, format="ascii.csv")
        else:
            t = Table.read(path, format=FORMATS[fmt][0])
    except Exception as exc:  # astropy and pyarrow raise many kinds
        raise ValueError(f"cannot read {path} as {fmt}: {exc}") from None
    if len(t.colnames) == 0:
        raise ValueError(f"{path} holds no columns")
    return t


def _flat_meta(meta: dict) -> dict:
    return {"SPECPAR": json.dumps(meta.get("specpar", {}), sort_keys=True)}


def write_table(table: Table, path, fmt=None, *, inputs=(), overwrite=False) -> None:
    """Write ``table`` atomically (temporary file then rename).

    Refuses to write over any of ``inputs`` and, unless ``overwrite``, over an
    existing file.
    """
    path = Path(path)
    fmt = guess_format(path, fmt)
    for inp in inputs:
        if Path(inp).exists() and path.exists() and os.path.samefile(inp, path):
            raise ValueError(f"refusing to write the output over the input file {path}")
    if path.exists() and not overwrite:
        raise ValueError(f"output {path} exists; choose another name or allow overwriting")
    if not path.parent.exists():
        raise ValueError(f"output folder {path.parent} does not exist")
    out = table.copy(copy_data=False)
    meta = out.meta.get("specpar", {})
    if fmt == "csv":
        out.meta = {"comments": [f"specpar {k}: {json.dumps(v)}" for k, v in meta.items()]}
    elif fmt == "fits":
        out.meta = _flat_meta(out.meta)
        for name in out.colnames:  # FITS has no object columns
            if out[name].dtype.kind == "O":
                out[name] = np.asarray(out[name], dtype=str)
    elif fmt == "votable":
        out.meta = {"description": "specpar " + json.dumps(meta, sort_keys=True)}
    elif fmt == "parquet":
        out.meta = _flat_meta(out.meta)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        kwargs = {"overwrite": True}
        if fmt == "csv":
            kwargs["comment"] = "# "
        out.write(tmp, format=FORMATS[fmt][0], **kwargs)
        os.replace(tmp, path)
    except Exception as exc:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise ValueError(f"cannot write {path} as {fmt}: {exc}") from None
