"""A text cell starting with '#' in the first column of an ECSV output: the ECSV
reader takes a line starting with '#' for a comment (ECSV, astropy APE 6), and
astropy's writer leaves a cell without blanks unquoted, so the row used to vanish.
Found by tests/io/test_io_hostile.py (hypothesis example id='#')."""
from __future__ import annotations

import pandas as pd
from astropy.table import Table

from specpar.cli.main import main
from specpar.io.read import read_table
from specpar.io.write import write_table


def test_hash_first_cell_keeps_its_row(tmp_path):
    df = pd.DataFrame({"id": pd.Series(["#", "#x", "ok"], dtype=object), "V": [1.0, 2.0, 3.0]})
    p = tmp_path / "h.ecsv"
    write_table(df, p)
    assert list(read_table(p)["id"]) == ["#", "#x", "ok"]
    # reference reader: astropy's own ECSV reader
    assert list(Table.read(p, format="ascii.ecsv")["id"]) == ["#", "#x", "ok"]


def test_hash_first_cell_through_estimate(tmp_path, capsys):
    df = pd.DataFrame({"id": pd.Series(["#"], dtype=object), "sptype": ["K0 III"], "B": [11.6], "V": [10.5]})
    src, dst = tmp_path / "in.ecsv", tmp_path / "out.ecsv"
    write_table(df, src)
    assert main(["estimate", str(src), "-o", str(dst), "--quiet"]) == 0
    assert list(read_table(dst)["id"]) == ["#"]
