"""Input integrity, output safety and hostile input (nothing lost, nothing clobbered),
catalogue column spellings and the file shapes people have.

All stars and ids here are invented. The checks are about the contract of a
batch tool (every row in comes out, in order; no input is replaced; one clear
message per user error): common practice, stated in the project rules. Where a
check rests on a published convention it is named beside it.
"""
from __future__ import annotations

import gzip
import json
import os
import stat
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from astropy.io import fits
from astropy.table import Table

from specpar import estimate
from specpar.cli.main import main
from specpar.core.flags import Flag
from specpar.io.atomic import check_output, publish, sweep_stale_temps, temp_path_for
from specpar.io.columns import resolve_columns
from specpar.io.formats import sidecar_path
from specpar.io.read import read_table
from specpar.io.write import write_table

STARS = """\
id,sptype,B,V,J
SPI-01,K0 III,11.60,10.50,8.40
SPI-02,G2 V,10.65,10.00,8.90
SPI-03,A0 V,9.10,9.05,8.95
"""


def run(capsys, *args):
    try:
        code = main([str(a) for a in args])
    except SystemExit as exc:
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def one_line_error(code, err):
    """A user error: non-zero exit, no traceback, one 'specpar: error' line."""
    assert code not in (0, None)
    assert "Traceback" not in err
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("specpar")
    return lines[0]


@pytest.fixture
def stars(tmp_path):
    p = tmp_path / "stars.csv"
    p.write_text(STARS)
    return p


# ----------------------------------------------------------------------------- reading

def test_data_row_starting_with_hash_is_kept(capsys, tmp_path):
    # issue 14.1 reproduction: the '#S2' row used to be read as a comment
    src = tmp_path / "h.csv"
    src.write_text("id,sptype,B,V\nS1,K0III,11.6,10.5\n#S2,G2V,10.6,10.0\n")
    code, out, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv", "--quiet")
    assert code == 0, err
    back = pd.read_csv(tmp_path / "o.csv")
    assert list(back["id"]) == ["S1", "#S2"]


def test_leading_hash_block_is_metadata(tmp_path):
    src = tmp_path / "m.csv"
    src.write_text("# made by hand\n#\n\nid,sptype,V\nS1,K0III,10.5\n")
    t = read_table(src)
    assert len(t) == 1 and t.colnames == ["id", "sptype", "V"]
    assert t.meta["comments"][0] == "made by hand"


def test_rows_read_must_equal_records(tmp_path):
    # a stray quote swallows lines: the count check refuses rather than losing rows
    src = tmp_path / "q.csv"
    src.write_text('id,sptype,V\nS1,"K0III,10.5\nS2,G2V,10.0\nS3,A0V,9.0\n')
    with pytest.raises(ValueError, match="rows|fields|quot"):
        read_table(src)


def test_parquet_named_index_is_a_column(tmp_path):
    # issue 14.2
    df = pd.DataFrame({"id": ["P1", "P2"], "sptype": ["K0 III", "G2 V"], "B": [11.6, 10.65],
                       "V": [10.5, 10.0]}).set_index("id")
    src = tmp_path / "i.parquet"
    df.to_parquet(src)
    t = read_table(src)
    assert list(t["id"]) == ["P1", "P2"]
    out = estimate(t)
    assert list(out["id"]) == ["P1", "P2"]


def test_duplicate_columns_refused_csv(capsys, tmp_path):
    # issue 14.3: CSV used to rename the second V and ignore it
    src = tmp_path / "d.csv"
    src.write_text("id,sptype,V,V\nS1,K0III,10.5,11.0\n")
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv")
    line = one_line_error(code, err)
    assert "duplicate" in line and "'V'" in line


def test_duplicate_columns_refused_parquet(capsys, tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq
    arrow = pa.Table.from_arrays([pa.array(["S1"]), pa.array([10.5]), pa.array([11.0])],
                                 names=["id", "V", "V"])
    src = tmp_path / "d.parquet"
    pq.write_table(arrow, src)
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv")
    line = one_line_error(code, err)
    assert "duplicate" in line and "'V'" in line


def test_bom_gzip_and_text_separators(tmp_path):
    want = read_table(_write(tmp_path / "plain.csv", STARS))
    variants = {
        "bom.csv": ("\ufeff" + STARS).encode("utf-8"),  # spreadsheet 'CSV UTF-8' export
        "z.csv.gz": gzip.compress(STARS.encode()),
        "tabs.tsv": STARS.replace(",", "\t").encode(),
        "blanks.txt": STARS.replace("K0 III", '"K0 III"').replace("G2 V", '"G2 V"')
                           .replace("A0 V", '"A0 V"').replace(",", "   ").encode(),
        "blanks.dat": STARS.replace(" ", "").replace(",", " ").encode(),
    }
    for name, raw in variants.items():
        p = tmp_path / name
        p.write_bytes(raw)
        t = read_table(p)
        assert t.colnames == want.colnames, name
        assert len(t) == 3, name
        np.testing.assert_allclose(np.asarray(t["V"], float), np.asarray(want["V"], float))
        if name != "blanks.dat":
            assert list(t["sptype"]) == list(want["sptype"]), name


def _write(path, text):
    path.write_text(text)
    return path


def test_directory_and_device_inputs_say_what_they_are(capsys, tmp_path):
    # issue 14.15
    code, _, err = run(capsys, "estimate", tmp_path, "-o", tmp_path / "o.csv", "--in-format", "csv")
    assert "is a folder" in one_line_error(code, err)
    code, _, err = run(capsys, "estimate", "/dev/zero", "-o", tmp_path / "o.csv", "--in-format", "csv")
    assert "is a device" in one_line_error(code, err)


def test_fits_with_several_tables_needs_hdu(capsys, tmp_path):
    src = tmp_path / "two.fits"
    a = fits.BinTableHDU(Table({"id": ["F1"], "sptype": ["K0 III"], "V": [10.5], "B": [11.6]}), name="FIRST")
    b = fits.BinTableHDU(Table({"id": ["G1", "G2"], "sptype": ["G2 V", "A0 V"], "V": [10.0, 9.05],
                                "B": [10.65, 9.1]}), name="SECOND")
    fits.HDUList([fits.PrimaryHDU(), a, b]).writeto(src)
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv")
    line = one_line_error(code, err)
    assert "--hdu" in line and "FIRST" in line and "SECOND" in line
    for sel in ("2", "SECOND"):
        out = tmp_path / f"o{sel}.csv"
        code, _, err = run(capsys, "estimate", src, "-o", out, "--hdu", sel, "--quiet")
        assert code == 0, err
        assert list(pd.read_csv(out)["id"]) == ["G1", "G2"]


@pytest.mark.parametrize("value", ["-1", "nan", "0"])
def test_plot_parallax_tension_must_be_positive(capsys, tmp_path, value):
    src = _write(tmp_path / "t.csv", "id,plx\nS1,1.0\n")
    code, _, err = run(capsys, "plot-parallax", src, "-o", tmp_path / "f.png", "--tension", value)
    line = one_line_error(code, err)
    assert value in line or "nan" in line
    assert not (tmp_path / "f.png").exists()


# ----------------------------------------------------------------------------- error sentinels

SENTINEL_BASE = dict(id="SPI-09", sptype="K0 III", B=11.60, e_B=0.02, V=10.50, e_V=0.02, J=8.40, e_J=0.03)


@pytest.mark.parametrize("bad", [9.99, np.inf, 0.0, -0.1, 99.0, "n/a"])
def test_error_sentinel_drops_the_magnitude(bad):
    # issue 14.4: e_B = 9.99 used to be replaced by the 0.05 default (912 pc -> 52 pc)
    rows = pd.DataFrame([dict(SENTINEL_BASE), dict(SENTINEL_BASE, e_B=bad), dict(SENTINEL_BASE, B=np.nan)],
                        dtype=object)
    rows[["B", "V", "J", "e_V", "e_J"]] = rows[["B", "V", "J", "e_V", "e_J"]].astype(float)
    out = estimate(rows)
    dist = out["dist_pc"].to_numpy(float)
    # the sentinel row equals the row without B: B was not used
    assert dist[1] == pytest.approx(dist[2], rel=1e-12)
    assert dist[1] != pytest.approx(dist[0], rel=1e-3)
    assert out["flags"][1] & Flag.PHOT_REJECTED
    assert not out["flags"][1] & Flag.ERROR_DEFAULTED
    assert "not used" in out["note"][1] and "B" in out["note"][1]


def test_only_missing_error_gets_the_default():
    rows = pd.DataFrame([dict(SENTINEL_BASE, e_B=np.nan)])
    out = estimate(rows)
    assert out["flags"][0] & Flag.ERROR_DEFAULTED
    assert not out["flags"][0] & Flag.PHOT_REJECTED
    assert np.isfinite(out["dist_pc"][0])


def test_max_error_is_an_option():
    rows = pd.DataFrame([dict(SENTINEL_BASE, e_B=0.5)])
    assert not estimate(rows)["flags"][0] & Flag.PHOT_REJECTED  # 0.5 mag < 1 mag default limit
    assert estimate(rows, max_error=0.3)["flags"][0] & Flag.PHOT_REJECTED
    with pytest.raises(ValueError, match="max_error"):
        estimate(rows, max_error=-1)


def test_conflicting_colour_column_is_noted():
    # issue 11.12: B-V given with B and V that disagree
    rows = pd.DataFrame([dict(SENTINEL_BASE, **{"B-V": 1.10, "e_B-V": 0.02}),
                         dict(SENTINEL_BASE, **{"B-V": 1.60, "e_B-V": 0.02})])
    out = estimate(rows)
    assert "B-V given" not in out["note"][0]  # 1.10 = 11.60 - 10.50
    note = out["note"][1]
    assert "B-V given 1.600" in note and "1.100" in note and "+0.500" in note and "used" in note
    # the magnitudes were used: same distance as the consistent row
    assert out["dist_pc"][1] == pytest.approx(out["dist_pc"][0], rel=1e-12)


# ----------------------------------------------------------------------------- column mapping

@pytest.mark.parametrize("pairs,words", [
    (["V=B"], ["second 'V'"]),                       # issue 14.5 reproductions
    (["e_V=e_B"], ["second 'e_V'"]),
    (["sptype=id"], ["second 'sptype'"]),
    (["Vmag=V"], ["unknown target", "'Vmag'"]),
    (["Q=Vmag"], ["unknown target", "'Q'"]),
    (["V=nosuch"], ["not in the input", "sptype"]),   # lists the columns found
    (["H=id"], ["holds text"]),
    (["B=V", "J=V"], ["mapped to B and J"]),
])
def test_col_mistakes_are_one_line_errors(capsys, tmp_path, pairs, words):
    src = _write(tmp_path / "s.csv", "id,sptype,B,e_B,V,e_V,J,Vmag\nS1,K0III,11.6,0.02,10.5,0.02,8.4,10.5\n")
    args = [a for p in pairs for a in ("--col", p)]
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv", *args)
    line = one_line_error(code, err)
    for w in words:
        assert w in line, line


def test_sptype_mapped_to_numbers_is_refused(tmp_path):
    df = pd.DataFrame({"code": [5, 6], "V": [10.0, 11.0]})
    with pytest.raises(ValueError, match="holds numbers"):
        resolve_columns(df, {"sptype": "code"})


def test_catalogue_spellings_recognised_and_reported(capsys, tmp_path):
    # issue 11.9: names as catalogues write them
    src = _write(tmp_path / "cat.csv",
                 "Name,SpType,Vmag,e_Vmag,Bmag,e_Bmag,jmag,Plx,e_Plx\n"
                 "SPI-21,K0 III,10.50,0.02,11.60,0.02,8.40,1.1,0.05\n")
    code, out, err = run(capsys, "estimate", src, "-o", tmp_path / "o.ecsv")
    assert code == 0, err
    assert "V <- Vmag" in out and "sptype <- SpType" in out
    t = Table.read(tmp_path / "o.ecsv")
    mapping = t.meta["specpar"]["column_mapping"]
    assert mapping == {"V": "Vmag", "e_V": "e_Vmag", "B": "Bmag", "e_B": "e_Bmag", "J": "jmag",
                       "sptype": "SpType", "plx": "Plx", "e_plx": "e_Plx"}
    assert int(t["n_obs"][0]) == 3
    assert "plx_z" in t.colnames
    # the input's own column names are what the output carries
    assert "Vmag" in t.colnames and "V" not in t.colnames


def test_gaia_and_colour_spellings():
    df = pd.DataFrame({"SpT": ["G2 V"], "phot_g_mean_mag": [10.0], "BmV": [0.65], "e_BmV": [0.01],
                       "parallax": [5.0], "parallax_error": [0.05], "b": [12.3], "v": [41.0]})
    frame, mapping = resolve_columns(df)
    assert mapping == {"G": "phot_g_mean_mag", "B-V": "BmV", "e_B-V": "e_BmV", "plx": "parallax",
                       "e_plx": "parallax_error", "sptype": "SpT"}
    # bare lower-case b and v (latitude, velocity ...) are not magnitudes
    assert "B" not in frame.columns and "V" not in frame.columns


def test_ambiguous_spellings_refused(capsys, tmp_path):
    src = _write(tmp_path / "a.csv", "id,sptype,Vmag,V_mag\nS1,K0III,10.5,10.6\n")
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv")
    line = one_line_error(code, err)
    assert "'Vmag'" in line and "'V_mag'" in line and "--col V=" in line


def test_mapped_magnitude_brings_its_error(tmp_path):
    df = pd.DataFrame({"sptype": ["K0 III"], "mag_v": [10.5], "e_mag_v": [0.5], "B": [11.6], "e_B": [0.02]})
    frame, mapping = resolve_columns(df, {"V": "mag_v"})
    assert mapping == {"V": "mag_v", "e_V": "e_mag_v"}


def test_missing_sptype_lists_columns(capsys, tmp_path):
    src = _write(tmp_path / "n.csv", "ident,Vx\nS1,10.5\n")
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv")
    line = one_line_error(code, err)
    assert "ident" in line and "Vx" in line


# ----------------------------------------------------------------------------- output checks

def _no_compute(monkeypatch):
    import importlib

    def boom(*a, **k):
        raise AssertionError("computed before checking the output")
    monkeypatch.setattr(importlib.import_module("specpar.pipeline.estimate"), "estimate", boom)
    # the file runners call the per-table step directly
    for name in ("specpar.batch.stream", "specpar.batch.blocks", "specpar.batch.csvblocks"):
        monkeypatch.setattr(importlib.import_module(name), "run_estimate", boom)


def test_output_checked_before_computing(capsys, stars, tmp_path, monkeypatch):
    _no_compute(monkeypatch)
    existing = _write(tmp_path / "have.csv", "x\n1\n")
    for dst, word in ((existing, "exists"), (tmp_path / "nofolder" / "o.csv", "does not exist"),
                      (tmp_path / "o.xyz", "extension")):
        code, _, err = run(capsys, "estimate", stars, "-o", dst)
        assert word in one_line_error(code, err)


def test_never_over_calibration_file(capsys, stars, tmp_path):
    # issue 14.7 reproduction: --calibration c.ecsv -o c.ecsv --overwrite replaced the calibration
    cal = tmp_path / "c.ecsv"
    shipped = Path(__file__).resolve().parents[2] / "calibrations" / "dwarfs_V.ecsv"
    cal.write_bytes(shipped.read_bytes())
    before = cal.read_bytes()
    code, _, err = run(capsys, "estimate", stars, "--calibration", cal, "-o", cal, "--overwrite")
    assert "input file" in one_line_error(code, err)
    assert cal.read_bytes() == before


def test_symlink_fifo_device_never_replaced(capsys, stars, tmp_path):
    # issue 14.8
    target = _write(tmp_path / "target.csv", "keep\n")
    link = tmp_path / "link.csv"
    link.symlink_to(target)
    code, _, err = run(capsys, "estimate", stars, "-o", link, "--overwrite")
    assert "symbolic link" in one_line_error(code, err)
    assert link.is_symlink() and target.read_text() == "keep\n"
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    code, _, err = run(capsys, "estimate", stars, "-o", fifo, "--overwrite")
    assert "FIFO" in one_line_error(code, err)
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)
    code, _, err = run(capsys, "estimate", stars, "-o", "/dev/null", "--overwrite", "--out-format", "csv")
    assert "device" in one_line_error(code, err)


def test_replaced_file_keeps_its_permissions(capsys, stars, tmp_path):
    dst = _write(tmp_path / "o.csv", "old\n")
    os.chmod(dst, 0o600)
    code, _, err = run(capsys, "estimate", stars, "-o", dst, "--overwrite", "--quiet")
    assert code == 0, err
    assert stat.S_IMODE(os.stat(dst).st_mode) == 0o600
    assert len(pd.read_csv(dst)) == 3


def test_publish_is_exclusive_for_new_names(tmp_path):
    # issue 14.9: of two runs that computed the same new name, the second gets an error
    dst = tmp_path / "new.csv"
    t1, t2 = temp_path_for(dst), temp_path_for(dst)
    t1.write_text("first\n")
    t2.write_text("second\n")
    publish(t1, dst)
    with pytest.raises(ValueError, match="another process"):
        publish(t2, dst)
    assert dst.read_text() == "first\n"
    assert not t1.exists() and not t2.exists()


def test_stale_temp_files_are_swept(capsys, stars, tmp_path):
    dst = tmp_path / "o.csv"
    dead = tmp_path / ".o.csv.specpar-999999999-0.tmp"  # no such process
    alive = tmp_path / f".o.csv.specpar-{os.getppid()}-0.tmp"  # a running process: left alone
    other = tmp_path / ".o.csv.other-1-0.tmp"  # not our naming: left alone
    for p in (dead, alive, other):
        p.write_text("x")
    code, _, err = run(capsys, "estimate", stars, "-o", dst, "--quiet")
    assert code == 0, err
    assert not dead.exists() and alive.exists() and other.exists()
    assert sweep_stale_temps(dst) == []


def test_stale_folder_of_pieces_is_swept(tmp_path):
    """A killed Dask run leaves its folder of pieces under our temporary naming;
    the next run for the same output removes it (a live run's is left alone)."""
    dst = tmp_path / "o.parquet"
    dead = tmp_path / ".o.parquet.specpar-999999999-3.tmp"
    alive = tmp_path / f".o.parquet.specpar-{os.getppid()}-3.tmp"
    for folder in (dead, alive):
        folder.mkdir()
        (folder / "part-000000.parquet").write_bytes(b"x")
    assert sweep_stale_temps(dst) == [dead]
    assert not dead.exists() and alive.exists()


def test_nested_columns_checked_up_front(capsys, tmp_path, monkeypatch):
    # issue 14.13
    df = pd.DataFrame({"id": ["N1", "N2"], "sptype": ["K0 III", "G2 V"], "V": [10.5, 10.0],
                       "B": [11.6, 10.65], "tags": [[1, 2], [3]], "age": pd.to_timedelta([1, 2], unit="D")})
    src = tmp_path / "n.parquet"
    df.to_parquet(src)
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv", "--quiet")
    line = one_line_error(code, err)
    assert "'tags'" in line and "'age'" in line and "Parquet" in line
    # Parquet holds them: carried through
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.parquet", "--quiet")
    assert code == 0, err
    back = pd.read_parquet(tmp_path / "o.parquet")
    assert [list(x) for x in back["tags"]] == [[1, 2], [3]]
    assert list(back["age"]) == list(df["age"])


def test_formula_cells_neutralised_in_csv(tmp_path):
    # issue 14.14 (OWASP CSV-injection guidance)
    df = pd.DataFrame({"id": ["=1+1", "+A1", "-B2", "@SUM(A1)", "'quoted", "-1.2", "plain"],
                       "sptype": ["K0 III"] * 7, "V": [10.0, 10.1, 10.2, 10.3, 10.4, 10.5, 10.6],
                       "x": [-1.2, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0]})
    dst = tmp_path / "f.csv"
    write_table(df, dst)
    raw = dst.read_text().splitlines()
    cells = [ln.split(",")[0] for ln in raw[1:]]
    assert cells == ["'=1+1", "'+A1", "'-B2", "'@SUM(A1)", "''quoted", "-1.2", "plain"]
    assert raw[1].split(",")[3] == "-1.2"  # numbers stay numbers
    assert list(read_table(dst)["id"]) == list(df["id"])  # our reader undoes the escape


def test_csv_opens_plainly_and_parquet_metadata_is_visible(capsys, stars, tmp_path):
    # issue 11.11
    code, _, err = run(capsys, "estimate", stars, "-o", tmp_path / "o.csv", "--quiet")
    assert code == 0, err
    plain = pd.read_csv(tmp_path / "o.csv")
    assert list(plain["id"]) == ["SPI-01", "SPI-02", "SPI-03"]
    assert not (tmp_path / "o.csv").read_text().startswith("#")
    side = json.loads(sidecar_path(tmp_path / "o.csv").read_text())
    assert side["specpar"]["extinction_law"]
    code, _, err = run(capsys, "estimate", stars, "-o", tmp_path / "o.parquet", "--quiet")
    assert code == 0, err
    assert pd.read_parquet(tmp_path / "o.parquet").attrs["specpar"]["extinction_law"]
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert Table.read(tmp_path / "o.parquet").meta["specpar"]["extinction_law"]


def test_output_to_stdout(capsys, stars):
    code, out, err = run(capsys, "estimate", stars, "-o", "-")
    assert code == 0, err
    lines = out.splitlines()
    assert lines[0].startswith("id,sptype") and len(lines) == 4
    assert "3 rows" in err  # the summary goes to stderr when the table goes to stdout
    code, out, err = run(capsys, "estimate", stars, "-o", "-", "--out-format", "fits")
    assert "standard output" in one_line_error(code, err)


def test_long_strings_are_cut_in_note_and_on_request(capsys, tmp_path):
    # issue 14.11: a 50 KB type used to be echoed in the note of every row
    n = 1000
    df = pd.DataFrame({"id": [f"L{i:04d}" for i in range(n)], "sptype": ["K0 III"] * n,
                       "V": np.linspace(9, 12, n), "B": np.linspace(10, 13, n)})
    df.loc[0, "sptype"] = "Q" * 50_000
    src = tmp_path / "long.parquet"
    df.to_parquet(src)
    out = estimate(read_table(src))
    assert max(len(s) for s in out["note"]) < 1000
    dst = tmp_path / "long.fits"
    code, _, err = run(capsys, "estimate", src, "-o", dst, "--max-field-length", "64", "--quiet")
    assert code == 0, err
    assert dst.stat().st_size < 2_000_000  # 1000 rows x 50 KB would be 50 MB
    t = Table.read(dst)
    cells = json.loads(t.meta["SPECPAR"])["text_cut_to_max_field_length"]["cells"]
    assert cells["sptype"] == 1 and len(t) == n


def test_long_text_output_without_fixed_width_copies(tmp_path):
    import tracemalloc
    n = 2000
    df = pd.DataFrame({"id": [f"L{i}" for i in range(n)], "sptype": ["K0 III"] * n, "V": np.full(n, 10.0)})
    df.loc[7, "sptype"] = "K" * 100_000  # as fixed-width unicode: 2000 x 400 KB = 800 MB
    out = estimate(df)
    tracemalloc.start()
    write_table(out, tmp_path / "w.csv")
    write_table(out, tmp_path / "w.ecsv")
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 100_000_000
    assert read_table(tmp_path / "w.ecsv")["sptype"][7] == "K" * 100_000


def test_ecsv_newline_hash_round_trip(tmp_path):
    # issue 14.12 reproduction
    df = pd.DataFrame({"id": ["A\n# not a comment", "B"], "sptype": ["K0 III", "G2 V"], "V": [10.5, 10.0]})
    out = estimate(df)
    for ext in ("ecsv", "csv", "fits", "vot", "parquet"):
        p = tmp_path / f"r.{ext}"
        write_table(out, p)
        back = read_table(p)
        ids = [x.decode() if isinstance(x, bytes) else x for x in back["id"]]
        assert ids == ["A\n# not a comment", "B"], ext


def test_check_output_api():
    with pytest.raises(ValueError, match="standard output"):
        check_output("-", "parquet")
    assert check_output("-") == "csv"


def test_identifiers_with_leading_zeros_stay_text(capsys, tmp_path):
    # "nothing lost": 007 and a 19-digit id are not numbers to be rewritten as 7 or 1.23e18
    src = _write(tmp_path / "z.csv", "id,sptype,B,V,n\n007,K0III,11.6,10.5,1\n"
                                     "1234567890123456789,G2V,10.6, 10.0 ,2\n")
    t = read_table(src)
    assert list(t["id"]) == ["007", "1234567890123456789"]
    assert t["V"].dtype.kind == "f" and t["n"].dtype.kind == "i"
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "o.csv", "--quiet")
    assert code == 0, err
    assert [ln.split(",")[0] for ln in (tmp_path / "o.csv").read_text().splitlines()[1:]] == \
        ["007", "1234567890123456789"]


@pytest.mark.parametrize("ext", ["csv", "tsv", "ecsv", "fits", "vot", "parquet"])
def test_every_line_break_round_trips(tmp_path, ext):
    # found by the hypothesis test: a bare CR in CSV, and the separators str.splitlines
    # knows (VT, FF, FS, GS, RS, NEL, LS, PS) in ECSV, split rows
    texts = ["a\rb", "\r0", "x\r\n#y", "v\x0bw", "f\x0cg", "\x1c\x1d\x1e", "n\x85l", "l\u2028s\u2029p", ' "q" ']
    df = pd.DataFrame({"id": pd.Series(texts, dtype=object), "V": np.arange(len(texts), dtype=float)})
    p = tmp_path / f"t.{ext}"
    write_table(df, p)
    back = read_table(p)
    ids = [x.decode() if isinstance(x, bytes) else x for x in back["id"]]
    if ext == "fits":  # trailing blanks are not significant in FITS (FITS Standard 4.0)
        texts = [t.rstrip() for t in texts]
        ids = [t.rstrip() for t in ids]
    assert ids == texts


def test_error_column_follows_the_value_column_used():
    # V is the input's own; e_Vmag belongs to Vmag, not to V
    df = pd.DataFrame({"sptype": ["K0 III"], "V": [10.5], "Vmag": [10.6], "e_Vmag": [0.3],
                       "Bmag": [11.6], "Bmag_err": [0.02], "e_Bmag": [0.03]})
    with pytest.raises(ValueError, match="'Bmag_err', 'e_Bmag'|'e_Bmag', 'Bmag_err'"):
        resolve_columns(df)
    frame, mapping = resolve_columns(df.drop(columns="Bmag_err"))
    assert mapping == {"B": "Bmag", "e_B": "e_Bmag"}
    assert "e_V" not in frame.columns


def test_sidecar_that_is_a_symlink_is_refused_up_front(capsys, stars, tmp_path):
    target = _write(tmp_path / "elsewhere.json", "{}")
    (tmp_path / "o.csv.specpar.json").symlink_to(target)
    code, _, err = run(capsys, "estimate", stars, "-o", tmp_path / "o.csv")
    assert "symbolic link" in one_line_error(code, err)
    assert not (tmp_path / "o.csv").exists() and target.read_text() == "{}"


def test_fits_refuses_huge_fixed_width_text_before_computing(capsys, tmp_path, monkeypatch):
    # 100 KB in one cell of 10,000 rows would be 1 GB of FITS padding
    n = 10_000
    df = pd.DataFrame({"id": [f"W{i}" for i in range(n)], "sptype": ["K0 III"] * n, "V": np.full(n, 10.0)})
    df.loc[3, "sptype"] = "K" * 100_000
    src = tmp_path / "w.parquet"
    df.to_parquet(src)
    _no_compute(monkeypatch)
    code, _, err = run(capsys, "estimate", src, "-o", tmp_path / "w.fits")
    line = one_line_error(code, err)
    assert "'sptype'" in line and "--max-field-length" in line


def test_fixed_width_text_with_a_header_line(tmp_path):
    # issue 11.10: aligned columns whose cells hold blanks ('K0 III') and an empty cell
    src = _write(tmp_path / "fw.txt",
                 "id       sptype    B       V\n"
                 "FW-1     K0 III    11.60   10.50\n"
                 "FW-2     G2 V              10.00\n"
                 "FW-3     A0 V      9.10    9.05\n")
    t = read_table(src)
    assert list(t["sptype"]) == ["K0 III", "G2 V", "A0 V"]
    assert np.isnan(t["B"][1]) and list(t["V"]) == [10.5, 10.0, 9.05]
    # not aligned and not one field per name: one clear error, no guessing
    bad = _write(tmp_path / "bad.txt", "id sptype V\nFW-1 K0 III 10.5\n")
    with pytest.raises(ValueError, match="fixed-width"):
        read_table(bad)


def test_trailing_separator_on_every_row_keeps_the_columns(tmp_path):
    # regression: a trailing comma on every row (a spreadsheet export habit) made pandas use the
    # first column as a row index, shifting every column by one (id read as the type ...)
    p = tmp_path / "trail.csv"
    p.write_text("id,sptype,B,e_B,V,e_V\nRV-1,K1III,11.2,0.02,10.1,0.02,\nRV-2,G2V,10.6,0.02,10.0,0.02,\n")
    t = read_table(p)
    assert list(t.colnames) == ["id", "sptype", "B", "e_B", "V", "e_V"]
    assert list(t["id"]) == ["RV-1", "RV-2"] and list(t["sptype"]) == ["K1III", "G2V"]


def test_extra_field_with_data_is_refused(tmp_path, capsys):
    p = tmp_path / "extra.csv"
    p.write_text("id,sptype,B,e_B,V,e_V\nRV-1,K1III,11.2,0.02,10.1,0.02,7\n")
    code, _, err = run(capsys, "estimate", p, "-o", tmp_path / "o.csv")
    assert "as many fields as the header" in one_line_error(code, err)


def test_csv_sidecar_is_not_replaced_without_overwrite_and_keeps_the_table_mode(tmp_path, capsys):
    # regression: an existing <name>.specpar.json was replaced without --overwrite, and the sidecar
    # of a 0600 output was created 0644
    src = tmp_path / "in.csv"
    src.write_text("id,sptype,B,V\nS1,K0III,11.6,10.5\n")
    out = tmp_path / "o.csv"
    side = tmp_path / "o.csv.specpar.json"
    side.write_text("old")
    code, _, err = run(capsys, "estimate", src, "-o", out)
    assert "exists" in one_line_error(code, err) and side.read_text() == "old" and not out.exists()
    side.unlink()
    out.write_text("x")
    out.chmod(0o600)
    code, _, _ = run(capsys, "estimate", src, "-o", out, "--overwrite")
    assert code == 0
    assert stat.S_IMODE(out.stat().st_mode) == 0o600 and stat.S_IMODE(side.stat().st_mode) == 0o600


@pytest.mark.parametrize("bad, reason", [(9.99, "above max_error = 1 mag"), (99.0, "above max_error = 1 mag"),
                                         (0.0, "zero, negative or not a finite number"),
                                         (-0.1, "zero, negative or not a finite number"),
                                         (np.inf, "zero, negative or not a finite number")])
def test_rejected_error_note_gives_the_actual_reason(bad, reason):
    # regression (user trial): the note listed every possible reason instead of the one that applies
    rows = pd.DataFrame([dict(SENTINEL_BASE, e_B=bad)])
    rows[["B", "V", "J", "e_V", "e_J", "e_B"]] = rows[["B", "V", "J", "e_V", "e_J", "e_B"]].astype(float)
    note = estimate(rows)["note"][0]
    assert reason in note and note.count("not used") == 1


def test_hdu_on_a_single_table_format_is_an_error(tmp_path, capsys):
    # regression (user trial): --hdu 3 on a CSV input was silently ignored
    p = tmp_path / "one.csv"
    p.write_text("id,sptype,B,V\nS1,K0III,11.6,10.5\n")
    code, _, err = run(capsys, "estimate", p, "-o", tmp_path / "o.csv", "--hdu", "3")
    assert "FITS or VOTable" in one_line_error(code, err)


def test_two_calibration_files_for_one_class_are_refused(tmp_path, capsys):
    # regression (user trial): two --calibration files of class III were accepted silently,
    # the second one winning
    import shutil

    from specpar.calib.resources import calibration_dir
    a, b = tmp_path / "a.ecsv", tmp_path / "b.ecsv"
    shutil.copy(calibration_dir() / "giants_III.ecsv", a)
    shutil.copy(calibration_dir() / "giants_III.ecsv", b)
    p = tmp_path / "one.csv"
    p.write_text("id,sptype,B,V\nS1,K0III,11.6,10.5\n")
    code, _, err = run(capsys, "estimate", p, "-o", tmp_path / "o.csv", "--calibration", a, "--calibration", b)
    assert "two calibration files for luminosity class III" in one_line_error(code, err)
