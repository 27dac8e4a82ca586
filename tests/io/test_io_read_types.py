"""read_table gives one type (an astropy Table) for every format; Parquet as a
pandas frame through read_parquet_frame; user errors are InputError.

References: pandas.read_parquet and astropy.table.Table.read (the reference
readers the results are compared with); masked cells for missing values are
astropy's convention (common practice).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from astropy.table import Table

from specpar.core.errors import InputError
from specpar.io.read import read_parquet_frame, read_table
from specpar.io.write import write_table

ROWS = pd.DataFrame({"id": ["RT-1", "RT-2", "RT-3"], "sptype": ["K0 III", None, "G2 V"],
                     "V": [10.5, np.nan, 10.0], "n": pd.array([1, None, 3], dtype="Int64")})


@pytest.mark.parametrize("ext", ["csv", "tsv", "ecsv", "fits", "vot", "parquet"])
def test_every_format_reads_as_a_table(tmp_path, ext):
    p = tmp_path / f"t.{ext}"
    write_table(ROWS.drop(columns="n"), p)
    t = read_table(p)
    assert isinstance(t, Table)
    assert t.colnames == ["id", "sptype", "V"]
    np.testing.assert_array_equal(np.ma.filled(np.ma.asarray(t["V"], dtype=float), np.nan),
                                  [10.5, np.nan, 10.0])


def test_parquet_table_matches_pandas_reader(tmp_path):
    # reference: pandas.read_parquet on the same file
    p = tmp_path / "r.parquet"
    ROWS.to_parquet(p)
    ref = pd.read_parquet(p)
    frame = read_parquet_frame(p)
    pd.testing.assert_frame_equal(frame, ref)
    t = read_table(p)
    assert list(t["id"]) == list(ref["id"])
    assert list(np.ma.getmaskarray(t["sptype"])) == [False, True, False]
    assert list(np.ma.getmaskarray(t["n"])) == [False, True, False]  # nullable integers: masked, not text
    assert [int(v) for v in np.ma.compressed(t["n"])] == [1, 3]


def test_parquet_metadata_reaches_table_meta(tmp_path):
    from specpar import estimate
    out = estimate(ROWS.drop(columns="n"))
    p = tmp_path / "e.parquet"
    write_table(out, p)
    assert read_table(p).meta["specpar"] == read_parquet_frame(p).attrs["specpar"]


def test_user_errors_are_input_errors(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_table(tmp_path / "missing.csv")
    with pytest.raises(InputError, match="cannot tell the format"):
        read_table(tmp_path / "x.unknown")
    (tmp_path / "d.csv").write_text("id,V,V\nA,1,2\n")
    with pytest.raises(InputError, match="duplicate column names"):
        read_table(tmp_path / "d.csv")
