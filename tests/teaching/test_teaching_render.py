"""Rendering and writing worked solutions (Markdown, HTML, CSV key), the `worked` command, column mapping,
and the HTML page in a headless browser."""
from __future__ import annotations

import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from specpar import estimate
from specpar.cli.main import main
from specpar.io.read import read_table
from specpar.teaching import render_html, render_markdown, worked_solutions

from teaching_cases import ROWS, SAMPLE, invented_table


class _TagCheck(HTMLParser):
    VOID = {"meta", "br", "hr", "img", "link", "input", "col", "wbr"}

    def __init__(self):
        super().__init__()
        self.stack, self.errors, self.tags = [], [], set()

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack.pop() != tag:
            self.errors.append(tag)


def test_html_is_self_contained_and_well_formed():
    ws = worked_solutions(invented_table())
    page = render_html(ws, title="Lab key")
    checker = _TagCheck()
    checker.feed(page)
    assert checker.errors == [] and checker.stack == []
    assert {"table", "sub", "sup", "section", "style"} <= checker.tags
    assert "<script" not in page and "http" not in page and "src=" not in page  # no network, no scripts
    assert "@media print" in page
    for star in ws.stars:
        assert star.id in page
    assert "M<sub>V</sub>" in page and "10<sup>" in page


def test_markdown_and_csv_answer_key(tmp_path):
    ws = worked_solutions(invented_table())
    md = render_markdown(ws)
    assert md.count("\n## SPX-") == len(ROWS)
    assert "| V | 11.000 | 0.020 |" in md  # fit table of the multi-band star
    path = tmp_path / "key.csv"
    from specpar.teaching import write_worked
    write_worked(ws, path)
    key = read_table(path)
    assert list(key["id"]) == [r[0] for r in ROWS]
    ref = estimate(invented_table())
    ok = np.isfinite(np.asarray(ref["dist_pc"], float))
    np.testing.assert_allclose(np.asarray(key["dm"], float)[ok], np.round(np.asarray(ref["dm"])[ok], 3))
    assert "calibration" in key.colnames and "dwarfs_V.ecsv" in key["calibration"][0]


def test_cli_worked(tmp_path, capsys):
    src = tmp_path / "stars.csv"
    Table.from_pandas(invented_table()).write(src, format="ascii.csv")
    for ext in ("md", "html", "csv"):
        out = tmp_path / f"solutions.{ext}"
        assert main(["worked", str(src), "-o", str(out), "--decimals", "2"]) == 0
        assert out.stat().st_size > 500
    assert "M_V = 4.80 ± 0.35 mag" in (tmp_path / "solutions.md").read_text()
    # existing output, input as output, bad decimals, unknown format: one line on stderr, exit 1
    capsys.readouterr()
    for args in (["-o", str(tmp_path / "solutions.md")], ["-o", str(src), "--overwrite"],
                 ["-o", str(tmp_path / "x.md"), "--decimals", "-3"], ["-o", str(tmp_path / "x.txt")]):
        assert main(["worked", str(src)] + args) == 1
        err = capsys.readouterr().err
        assert err.startswith("specpar: error:") and err.count("\n") == 1 and "Traceback" not in err
    assert main(["worked", str(src), "-o", str(tmp_path / "solutions.md"), "--overwrite"]) == 0
    assert not list(tmp_path.glob(".*.tmp"))  # atomic writes leave no temporary files


# ----------------------------------------------------------------------------- column mapping, input text

def test_worked_honours_the_column_mapping(tmp_path):
    """With --col the key names each star by its mapped id and reads its mapped type (no 'row 171',
    no "'' read as")."""
    df = read_table(SAMPLE).to_pandas().rename(columns={"id": "Name", "sptype": "SpT", "V": "Vmag", "e_V": "e_Vmag"})
    cols = {"id": "Name", "sptype": "SpT", "V": "Vmag", "e_V": "e_Vmag"}
    ws = worked_solutions(df, columns=cols)
    plain = worked_solutions(read_table(SAMPLE))
    assert [s.id for s in ws.stars] == [s.id for s in plain.stars]
    assert [s.sptype for s in ws.stars] == [s.sptype for s in plain.stars]
    assert render_markdown(ws) == render_markdown(plain)
    src = tmp_path / "renamed.csv"
    df.to_csv(src, index=False)
    out = tmp_path / "key.md"
    args = ["worked", str(src), "-o", str(out)] + sum((["--col", f"{k}={v}"] for k, v in cols.items()), [])
    assert main(args) == 0
    md = out.read_text()
    assert "## row " not in md and "'' read as" not in md
    assert f"## {df['Name'][0]}: {df['SpT'][0]}" in md


def test_no_nan_or_zero_errors_in_keys_of_the_samples():
    for name, opts in (("survey.csv", {}), ("survey.csv", dict(fit_rv=True, sigma_rv=0.0)),
                       ("pulsators.csv", {})):
        path = SAMPLE.parent / name
        if not path.exists():
            continue
        ws = worked_solutions(read_table(path), **opts)
        for text in (render_markdown(ws), render_html(ws)):
            assert not re.search(r"±\s*(nan|inf|n/a|0\.0+(?![0-9]))", text), name
            assert "± nan" not in text and "±nan" not in text


# ----------------------------------------------------------------------------- browser

def _chromium_shot(page: Path, out: Path, workdir: Path):
    exe = shutil.which("chromium")
    args = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            f"--user-data-dir={workdir / 'profile'}"]
    shot = subprocess.run(args + [f"--screenshot={out}", "--window-size=1200,1600", page.as_uri()],
                          capture_output=True, text=True, timeout=120)
    dom = subprocess.run(args + ["--dump-dom", page.as_uri()], capture_output=True, text=True, timeout=120)
    return shot, dom


@pytest.mark.browser
@pytest.mark.skipif(shutil.which("chromium") is None, reason="no chromium on PATH")
def test_html_page_renders_in_headless_chromium(tmp_path):
    import matplotlib.image as mpimg
    ws = worked_solutions(invented_table())
    page = tmp_path / "key.html"
    page.write_text(render_html(ws, title="Answer key"), encoding="utf-8")
    png = tmp_path / "key.png"
    shot, dom = _chromium_shot(page, png, tmp_path)
    assert shot.returncode == 0, shot.stderr[-2000:]
    assert dom.returncode == 0, dom.stderr[-2000:]
    # the browser parsed the page: the rendered DOM holds every star and the maths markup
    assert all(s.id in dom.stdout for s in ws.stars)
    assert re.search(r"M<sub>V</sub>", dom.stdout)
    img = mpimg.imread(png)
    assert img.shape[0] >= 1500 and img.shape[1] >= 1100
    grey = img[..., :3].mean(axis=-1)
    dark = (grey < 0.5).mean()
    assert 0.005 < dark < 0.5  # text on a light page: neither blank nor a single colour
    assert len(np.unique(np.round(grey, 2))) > 20  # anti-aliased text, not a flat fill
