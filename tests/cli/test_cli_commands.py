"""The ``specpar`` command line, called in-process as ``main([...])`` (the astropy
style of testing CLIs): output formats, column mapping, and that every user
error gives one line on stderr and a non-zero exit status, never a traceback.
"""
from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from astropy.table import Table

from specpar import __version__
from specpar.cli.main import main
from specpar.io.read import read_table
from specpar.io.write import write_table

SAMPLE = Path(__file__).resolve().parents[2] / "samples" / "survey.csv"

# Invented stars; Vmag and Jmag use the catalogue's own names (mapped with --col).
SMALL_CSV = """\
id,sptype,Vmag,e_Vmag,B,e_B,Jmag
SPX-0001,G2 V,8.10,0.01,8.80,0.02,6.90
SPX-0002,K1 III,9.30,0.01,10.50,0.03,7.00
SPX-0003,B3 V,10.20,0.02,10.25,0.02,
SPX-0004,not a type,11.0,0.02,12.0,0.02,10.0
SPX-0001,A0 V,12.00,,12.20,0.05,
"""
MAPPING = ["--col", "V=Vmag", "--col", "e_V=e_Vmag", "--col", "J=Jmag"]


@pytest.fixture
def small_csv(tmp_path):
    path = tmp_path / "stars.csv"
    path.write_text(SMALL_CSV)
    return path


def run(capsys, *args):
    """main(args) -> (exit status, stdout, stderr)."""
    try:
        code = main([str(a) for a in args])
    except SystemExit as exc:  # argparse exits on --help, --version and usage errors
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def assert_clean_error(code, err):
    assert code not in (0, None)
    assert "Traceback" not in err
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert lines and lines[-1].startswith("specpar")  # last line names the program
    return lines[-1]


def _read_back(path, fmt):
    """Read an output with astropy; returns (table, specpar metadata dict or None)."""
    if fmt == "csv":
        # a plain pandas.read_csv opens it; the provenance is in the sidecar <name>.specpar.json
        t = Table.from_pandas(pd.read_csv(path))
        side = Path(str(path) + ".specpar.json")
        return t, json.loads(side.read_text())["specpar"] if side.exists() else None
    if fmt == "ecsv":
        t = Table.read(path, format="ascii.ecsv")
        return t, t.meta.get("specpar")
    if fmt == "fits":
        t = Table.read(path, format="fits")
        return t, json.loads(t.meta["SPECPAR"]) if "SPECPAR" in t.meta else None
    if fmt == "votable":
        t = Table.read(path, format="votable")
        desc = t.meta.get("description", "")
        # the VOTable writer re-wraps long descriptions (newlines inside JSON strings)
        return t, json.loads(desc.split(" ", 1)[1], strict=False) if desc.startswith("specpar ") else None
    import pyarrow.parquet as pq
    t = Table.read(path, format="parquet")
    schema_meta = pq.read_schema(path).metadata or {}
    return t, json.loads(schema_meta[b"specpar"]) if b"specpar" in schema_meta else None


@pytest.mark.filterwarnings("ignore:No table::len:")  # astropy reading a pyarrow-written Parquet
@pytest.mark.parametrize("ext,fmt", [("csv", "csv"), ("ecsv", "ecsv"), ("fits", "fits"),
                                     ("vot", "votable"), ("parquet", "parquet")])
def test_estimate_writes_every_format(capsys, small_csv, ext, fmt):
    out_path = small_csv.with_name(f"result.{ext}")
    code, out, err = run(capsys, "estimate", small_csv, "-o", out_path, *MAPPING,
                         "--law", "CCM89", "--rv", "3.4", "--quiet")
    assert code == 0, err
    assert "Traceback" not in err
    t, meta = _read_back(out_path, fmt)
    assert len(t) == 5
    assert [str(x).strip() for x in t["id"]] == ["SPX-0001", "SPX-0002", "SPX-0003", "SPX-0004",
                                                 "SPX-0001"]
    for col in ("dist_pc", "dist_lo_pc", "dist_hi_pc", "ebv", "flags", "note"):
        assert col in t.colnames
    dist = np.asarray(t["dist_pc"], float)
    assert np.isfinite(dist[[0, 1, 2, 4]]).all() and not np.isfinite(dist[3])
    assert meta is not None, f"{fmt}: specpar metadata not found"
    assert meta["extinction_law"] == "CCM89"
    assert meta["R_V"] == pytest.approx(3.4)
    # the mapped V/J columns were used: three observables for the first star
    assert int(t["n_obs"][0]) == 3
    # nothing but the output is left in the folder (no temporary files)
    # (a CSV output has its provenance sidecar beside it)
    extra = [out_path.name + ".specpar.json"] if fmt == "csv" else []
    assert sorted(p.name for p in small_csv.parent.iterdir()) == sorted([small_csv.name, out_path.name,
                                                                         *extra])


def test_output_matches_library_and_reads_back(capsys, small_csv, tmp_path):
    """The CLI writes what estimate() returns, and specpar reads its own output back."""
    from specpar import estimate
    out_path = tmp_path / "r.ecsv"
    assert run(capsys, "estimate", small_csv, "-o", out_path, *MAPPING, "--quiet")[0] == 0
    lib = estimate(read_table(small_csv), columns={"V": "Vmag", "e_V": "e_Vmag", "J": "Jmag"})
    back = read_table(out_path)
    np.testing.assert_array_equal(np.asarray(back["dm"]), np.asarray(lib["dm"]))
    csv_path = tmp_path / "r.csv"
    assert run(capsys, "estimate", small_csv, "-o", csv_path, *MAPPING, "--quiet")[0] == 0
    again = read_table(csv_path)
    assert len(again) == 5
    np.testing.assert_allclose(np.asarray(again["dm"], float), np.asarray(lib["dm"], float),
                               rtol=1e-12, equal_nan=True)


def test_summary_line_and_mc(capsys, small_csv, tmp_path):
    out_path = tmp_path / "mc.ecsv"
    code, out, err = run(capsys, "estimate", small_csv, "-o", out_path, *MAPPING,
                         "--mc", "50", "--seed", "7")
    assert code == 0, err
    assert "5 rows" in out
    meta = Table.read(out_path).meta["specpar"]
    assert meta["method"] == "mc" and meta["seed"] == 7 and meta["n_draws"] == 50


def test_refuses_to_overwrite_input(capsys, small_csv):
    before = small_csv.read_bytes()
    code, out, err = run(capsys, "estimate", small_csv, "-o", small_csv, "--quiet")
    line = assert_clean_error(code, err)
    assert "input" in line
    assert small_csv.read_bytes() == before
    # even with --overwrite the input is protected
    code, out, err = run(capsys, "estimate", small_csv, "-o", small_csv, "--overwrite", "--quiet")
    assert_clean_error(code, err)
    assert small_csv.read_bytes() == before


def test_existing_output_needs_overwrite(capsys, small_csv, tmp_path):
    out_path = tmp_path / "o.ecsv"
    out_path.write_text("keep me")
    code, out, err = run(capsys, "estimate", small_csv, "-o", out_path, *MAPPING, "--quiet")
    assert_clean_error(code, err)
    assert out_path.read_text() == "keep me"
    code, out, err = run(capsys, "estimate", small_csv, "-o", out_path, *MAPPING, "--quiet",
                         "--overwrite")
    assert code == 0, err
    assert len(Table.read(out_path)) == 5


def test_missing_input_file(capsys, tmp_path):
    missing = tmp_path / "nowhere.csv"
    code, out, err = run(capsys, "estimate", missing, "-o", tmp_path / "x.ecsv")
    line = assert_clean_error(code, err)
    assert "nowhere.csv" in line
    assert not (tmp_path / "x.ecsv").exists()


@pytest.mark.parametrize("which", ["input", "output"])
def test_unknown_extension(capsys, small_csv, tmp_path, which):
    src = small_csv
    dst = tmp_path / "out.ecsv"
    if which == "input":
        src = tmp_path / "stars.xls"  # (.dat is read now: whitespace/tab-separated text)
        src.write_text(SMALL_CSV)
    else:
        dst = tmp_path / "out.xyz"
    code, out, err = run(capsys, "estimate", src, "-o", dst, *MAPPING, "--quiet")
    line = assert_clean_error(code, err)
    assert ".xls" in line or ".xyz" in line
    assert not dst.exists()


@pytest.mark.parametrize("args", [["--law", "XYZ99"], ["--rv", "9.5"], ["--rv", "nan"],
                                  ["--rv", "abc"], ["--mc", "3"], ["--default-error", "-1"],
                                  ["--col", "V"], ["--col", "V=NoSuchColumn"]])
def test_bad_options(capsys, small_csv, tmp_path, args):
    dst = tmp_path / "o.ecsv"
    code, out, err = run(capsys, "estimate", small_csv, "-o", dst, "--quiet", *args)
    assert_clean_error(code, err)
    assert not dst.exists()


def test_rv_message_names_range(capsys, small_csv, tmp_path):
    code, out, err = run(capsys, "estimate", small_csv, "-o", tmp_path / "o.ecsv", "--rv", "9.5")
    line = assert_clean_error(code, err)
    assert "9.5" in line and "R_V" in line  # the bad value and what it is


def test_table_without_sptype(capsys, tmp_path):
    src = tmp_path / "nosp.csv"
    src.write_text("id,V,B\nSPX-1,8.0,8.5\n")
    code, out, err = run(capsys, "estimate", src, "-o", tmp_path / "o.ecsv")
    line = assert_clean_error(code, err)
    assert "sptype" in line


def test_version_and_help(capsys):
    code, out, err = run(capsys, "--version")
    assert code == 0 and __version__ in out + err
    code, out, err = run(capsys, "--help")
    assert code == 0 and "estimate" in out
    code, out, err = run(capsys, "estimate", "--help")
    assert code == 0 and "--col" in out and "--law" in out


def test_no_command_prints_help(capsys):
    code, out, err = run(capsys)
    assert code != 0 and "estimate" in out + err


def test_failed_write_leaves_nothing(small_csv, tmp_path, monkeypatch):
    """write_table goes through a temporary file: a failing writer leaves no partial output."""
    t = read_table(small_csv)
    dst = tmp_path / "never.ecsv"

    def boom(*args, **kwargs):
        Path(args[1] if len(args) > 1 else kwargs["output"]).write_text("half a tab")
        raise OSError("disk full")

    monkeypatch.setattr(Table, "write", boom)
    with pytest.raises(ValueError, match="cannot write"):
        write_table(t, dst)
    assert not dst.exists()
    assert [p.name for p in tmp_path.iterdir()] == [small_csv.name]


def test_output_permissions_follow_umask(capsys, small_csv, tmp_path):
    """An output file is created like any other file (umask), not private to the owner."""
    dst = tmp_path / "perm.ecsv"
    old = os.umask(0o022)
    try:
        assert run(capsys, "estimate", small_csv, "-o", dst, *MAPPING, "--quiet")[0] == 0
    finally:
        os.umask(old)
    assert dst.stat().st_mode & 0o777 == 0o644


@pytest.mark.skipif(not SAMPLE.is_file(), reason="samples/survey.csv is not in this checkout")
def test_sample_survey_every_row_in_order(capsys, tmp_path):
    src = Table.read(SAMPLE, format="ascii.csv")
    dst = tmp_path / "survey_out.ecsv"
    code, out, err = run(capsys, "estimate", SAMPLE, "-o", dst, "--quiet")
    assert code == 0, err
    res = Table.read(dst)
    assert len(res) == len(src)
    assert list(res["id"]) == list(src["id"])
    for col in src.colnames:
        a, b = src[col], res[col]
        if a.dtype.kind in "fi":
            np.testing.assert_array_equal(np.ma.filled(a.astype(float), np.nan),
                                          np.ma.filled(b.astype(float), np.nan))
        else:
            assert [str(x) for x in a] == [str(x) for x in b], col
    flags = np.asarray(res["flags"])
    assert all(str(n).strip() for n, f in zip(res["note"], flags) if f)


@pytest.mark.skipif(not SAMPLE.exists(), reason="samples/survey.csv not written yet")
@pytest.mark.parametrize("ext", ["fits", "vot", "parquet"])
def test_binary_inputs_give_the_same_answers_as_csv(tmp_path, ext):
    # regression: FITS text columns arrive as bytes and astropy's Parquet stores masks as
    # separate 'X.mask' columns; both once turned good magnitudes into rejected values
    t = Table.read(SAMPLE, format="ascii.csv")
    src = tmp_path / f"survey.{ext}"
    t.write(src, format={"vot": "votable"}.get(ext, None) or ext, overwrite=True)
    for inp, out in ((SAMPLE, tmp_path / "a.ecsv"), (src, tmp_path / "b.ecsv")):
        assert main(["estimate", str(inp), "-o", str(out), "--quiet"]) == 0
    a, b = Table.read(tmp_path / "a.ecsv"), Table.read(tmp_path / "b.ecsv")
    dm = [np.ma.filled(np.ma.asarray(x["dm"], dtype=float), np.nan) for x in (a, b)]
    np.testing.assert_allclose(*dm, equal_nan=True)
    assert list(a["note"]) == list(b["note"])
    assert list(a["flags"]) == list(b["flags"])
