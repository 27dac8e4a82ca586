"""Units and descriptions of output columns, kept as data: one CSV file
(``column,unit,description``) beside the code that writes the columns, read
with :mod:`importlib.resources` from the installed package."""
from __future__ import annotations

import csv
import io
from importlib import resources

__all__ = ["column_docs"]

HEADER = ["column", "unit", "description"]


def column_docs(package: str, name: str) -> dict[str, tuple[str, str]]:
    """``{column: (unit, description)}`` from the CSV file ``name`` of ``package``, in file order."""
    text = resources.files(package).joinpath(name).read_text(encoding="utf-8")
    rows = csv.reader(io.StringIO(text))
    header = next(rows)
    if header != HEADER:
        raise RuntimeError(f"{package}/{name}: header must be {HEADER}, got {header}")
    return {row[0]: (row[1], row[2]) for row in rows if row}
