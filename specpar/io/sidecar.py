"""The provenance sidecar of a CSV or text output (``<name>.specpar.json``):
the metadata other formats keep in the file, and whether formula cells were
escaped. Written after the table; read back by :func:`specpar.io.read.read_table`.
"""
from __future__ import annotations

import json
import os
import stat
from pathlib import Path

from astropy.table import Table

from .atomic import atomic_write
from .formats import sidecar_path
from .formulas import unescape_formulas

__all__ = ["write_sidecar", "apply_input_sidecar", "sidecar_path"]


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


def apply_input_sidecar(t: Table, path: Path) -> Table:
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
            unescape_formulas(t)
    return t
