"""Table formats: our format names, their astropy names and file extensions,
the format of a path (told from its extension once, for the whole package),
and the names of the files we write beside an output.

References
----------
ECSV: Aldcroft et al., "Enhanced Character Separated Values table format",
astropy APE 6 (2013). VOTable 1.4, IVOA Recommendation (2019). FITS Standard
4.0 (IAU FITS Working Group 2016). Apache Parquet format specification.
"""
from __future__ import annotations

import os
import stat
from pathlib import Path

from ..core.errors import InputError

__all__ = ["FORMATS", "DELIMITED_FORMATS", "STDOUT_FORMATS", "guess_format", "sidecar_path", "is_stdout", "gzipped",
           "check_input_path",
           "file_kind"]

#: our format name -> (astropy format, extensions)
FORMATS = {
    "csv": ("ascii.csv", (".csv", ".csv.gz")),
    "text": (None, (".txt", ".dat", ".tsv", ".txt.gz", ".dat.gz", ".tsv.gz")),
    "ecsv": ("ascii.ecsv", (".ecsv", ".ecsv.gz")),
    "fits": ("fits", (".fits", ".fit", ".fts", ".fits.gz")),
    "votable": ("votable", (".vot", ".votable", ".xml")),
    "parquet": ("parquet", (".parquet", ".pq")),
}

#: Formats read and written as delimited text (a CSV/text output has a sidecar).
DELIMITED_FORMATS = ("csv", "text")
#: Formats that can be written to standard output (``-o -``).
STDOUT_FORMATS = ("csv", "text", "ecsv")


def guess_format(path, fmt=None) -> str:
    """Format name from ``fmt`` or the file extension.

    Raises
    ------
    InputError
        Unknown format name or extension, with the valid choices.
    """
    if fmt:
        if fmt not in FORMATS:
            raise InputError(f"unknown format {fmt!r}; choose one of {', '.join(FORMATS)}")
        return fmt
    name = str(path).lower()
    for key, (_, exts) in FORMATS.items():
        if name.endswith(exts):
            return key
    raise InputError(f"cannot tell the format of {path} from its extension; use one of "
                     f"{', '.join(e for _, x in FORMATS.values() for e in x)} or give the format "
                     f"explicitly ({', '.join(FORMATS)})")


def sidecar_path(path) -> Path:
    """The provenance file written beside a CSV or text output: ``<path>.specpar.json``."""
    path = Path(path)
    return path.with_name(path.name + ".specpar.json")


def is_stdout(path) -> bool:
    """True for ``"-"``, the name of standard output."""
    return str(path) == "-"


def file_kind(st_mode) -> str:
    """What a path that is not a regular file is, for messages ("a folder", ...)."""
    if stat.S_ISDIR(st_mode):
        return "a folder"
    if stat.S_ISFIFO(st_mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(st_mode) or stat.S_ISBLK(st_mode):
        return "a device"
    if stat.S_ISSOCK(st_mode):
        return "a socket"
    return "not a regular file"


def gzipped(path) -> bool:
    """True when the output name asks for gzip compression (``.gz``)."""
    return str(path).lower().endswith(".gz")


def check_input_path(path: Path, what="input file") -> None:
    """One clear error unless ``path`` is a readable regular file."""
    try:
        st = path.stat()
    except FileNotFoundError:
        raise InputError(f"{what} {path} does not exist") from None
    except OSError as exc:
        raise InputError(f"cannot open {what} {path}: {exc.strerror}") from None
    if not stat.S_ISREG(st.st_mode):
        raise InputError(f"{what} {path} is {file_kind(st.st_mode)}; give the path of a table file")
    if not os.access(path, os.R_OK):
        raise InputError(f"{what} {path} is not readable (permissions); check its mode or owner")
