"""Worked solutions: same numbers as estimate, hand-computed example, formats, CLI, browser."""
from __future__ import annotations

import math
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from astropy.table import Table

from specpar import estimate
from specpar.cli import main
from specpar.tableio import read_table
from specpar.teaching import answer_key, render_html, render_markdown, worked_solutions

SAMPLE = Path(__file__).resolve().parents[2] / "samples" / "survey.csv"

# Invented stars covering the presentation paths: classic B,V; V with a B-V colour; a
# two-magnitude pair without B; a multi-band fit; an intermediate class; one band only;
# and rows that cannot be solved (bad type, no photometry, junk magnitude).
ROWS = [
    # id, sptype, U, B, V, Ic, J, H, Ks, B-V
    ("SPX-0001", "G2V", np.nan, 10.10, 9.40, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0002", "K1 III", np.nan, 9.30, 8.20, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0003", "B2.5IV-V", np.nan, 8.00, 8.10, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0004", "F5", np.nan, np.nan, 7.00, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0005", "A0V", np.nan, 11.20, 11.00, 10.80, 10.70, 10.60, 10.50, np.nan),
    ("SPX-0006", "K0 III", np.nan, np.nan, 9.10, np.nan, np.nan, np.nan, 6.30, np.nan),
    ("SPX-0007", "F8 V", np.nan, np.nan, 10.20, np.nan, np.nan, np.nan, np.nan, 0.71),
    ("SPX-0008", "M2 III", 14.0, 12.9, 11.3, 8.6, 6.4, 5.5, 5.3, np.nan),
    ("SPX-0009", "zz9", np.nan, 10.0, 9.0, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0010", "G5 V", np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan),
    ("SPX-0011", "K5 V", np.nan, 99.0, 12.0, np.nan, np.nan, np.nan, np.nan, np.nan),
]
COLS = ["id", "sptype", "U", "B", "V", "Ic", "J", "H", "Ks", "B-V"]


def _table():
    df = pd.DataFrame(ROWS, columns=COLS)
    for b in ("U", "B", "V", "Ic", "J", "H", "Ks", "B-V"):
        df[f"e_{b}"] = np.where(df[b].notna(), 0.02, np.nan)
    df.loc[4, "e_J"] = np.nan  # one missing error: the default is used and flagged
    return df


#: Steps whose value must be exactly the estimate column of the same name.
_SAME_AS_ESTIMATE = ("mv", "ebv", "dm", "e_dm", "dist_pc", "dist_lo_pc", "dist_hi_pc", "plx_phot_mas")


def _compare_with_estimate(table, **opts):
    """Every number a worked solution shows as a result equals estimate's (independent call)."""
    ws = worked_solutions(table, **opts)
    ref = estimate(table, explain=True, **opts)
    assert len(ws.stars) == len(ref)  # no row lost
    checked = 0
    for i, star in enumerate(ws.stars):
        for step in star.steps:
            if step.key in _SAME_AS_ESTIMATE:
                assert step.value == pytest.approx(float(np.asarray(ref[step.key])[i]), rel=0, abs=0), \
                    (star.id, step.key)
                checked += 1
            elif step.key == "A_V":
                assert step.value == float(np.asarray(ref["av"])[i]), star.id
            elif step.key.startswith(("M_", "A_")) and step.key in getattr(ref, "colnames", ref.columns):
                assert step.value == float(np.asarray(ref[step.key])[i]), (star.id, step.key)
            elif step.key == "c0_B-V":
                assert step.value == float(np.asarray(ref["bv0"])[i]), star.id
        assert star.flags == int(np.asarray(ref["flags"])[i])
    assert checked > 0
    return ws, ref


def test_numbers_equal_estimate_for_every_invented_star():
    ws, ref = _compare_with_estimate(_table())
    solved = [s.solved for s in ws.stars]
    assert solved == list(np.isfinite(np.asarray(ref["dm"], float)))
    assert solved.count(False) >= 2  # the bad rows are there, unsolved, with their flags
    bad = ws.stars[8]
    assert not bad.solved and "TYPE_UNREADABLE" in bad.flag_codes


def test_numbers_equal_estimate_astropy_input_and_options():
    _compare_with_estimate(Table.from_pandas(_table()), law="CCM89", rv=3.4, sigma_rv=0.1)


@pytest.mark.skipif(not SAMPLE.exists(), reason="samples/survey.csv not written yet")
def test_numbers_equal_estimate_for_sample_survey():
    _compare_with_estimate(read_table(SAMPLE))


def test_period_luminosity_rows_are_presented_without_a_type_chain():
    pytest.importorskip("specpar.cepheid")
    t = _table().iloc[:2].copy()
    t["period_d"] = [10.0, np.nan]  # first row: absolute magnitudes from the period instead of the type
    ws, ref = _compare_with_estimate(t)
    cep = ws.stars[0]
    assert cep.solved and "spectral type" in cep.steps[0].text
    assert "subtype" not in cep.step("e_dm").text


def test_displayed_arithmetic_reproduces_solver():
    """Where a step shows its arithmetic (look-up chains, E(B-V) from two bands, A = R E,
    V - M_V - A_V, 10^(dm/5+1), 1000/d ...), doing that arithmetic at full precision gives the
    solver's result. In the classic two-band case E(B-V) = (B-V) - (B-V)_0 exactly
    (common practice: the colour excess definition) and dm = V - M_V - A_V."""
    ws = worked_solutions(_table())
    n_checked = 0
    for star in ws.stars:
        for step in star.steps:
            if np.isfinite(step.arith):
                assert step.arith == pytest.approx(step.value, rel=1e-12, abs=1e-12), (star.id, step.key)
                n_checked += 1
    assert n_checked > 40
    classic = ws.stars[0]  # G2V with B and V only
    df = _table()
    ebv = classic.step("ebv")
    assert ebv.formula.startswith("(B - V)")
    assert ebv.value == pytest.approx((df.B[0] - df.V[0]) - classic.step("c0_B-V").value, rel=0, abs=1e-12)
    assert classic.step("dm").value == pytest.approx(
        df.V[0] - classic.step("mv").value - classic.step("A_V").value, rel=0, abs=1e-12)
    # V with a B-V colour column: the same classic formula on the colour
    colour = ws.stars[6].step("ebv")
    assert colour.template == "%0 - %1" and colour.arith == pytest.approx(colour.value, abs=1e-12)
    # a multi-band star is a fit, shown with a residual table
    assert ws.stars[4].fit and not np.isfinite(ws.stars[4].step("dm").arith)


def test_hand_computed_g2v_example():
    """Distance of an invented G2V star written out by hand.

    Calibration values read from the mean dwarf table shipped in the meanstars package
    (Mamajek, 'A Modern Mean Dwarf Stellar Color and Effective Temperature Sequence',
    v2022.04.16 = Pecaut & Mamajek 2013, ApJS 208, 9, Table 5): G2V M_V = 4.80,
    (B-V)_0 = 0.65.
    """
    MeanStars = pytest.importorskip("MeanStars").MeanStars
    data = MeanStars().data
    row = list(np.asarray(data["SpT"], dtype=str)).index("G2V")
    mv_pub = float(data["Mv"][row])
    bv0_pub = float(data["B-V"][row])
    assert mv_pub == 4.80 and bv0_pub == 0.65  # Pecaut & Mamajek 2013 Table 5 (via meanstars)

    V, B = 9.412, 10.274
    # Step 1: colour excess, E(B-V) = (B - V) - (B-V)_0 (definition; common practice)
    ebv = (B - V) - bv0_pub                      # = 0.862 - 0.650 = 0.212
    # Step 2: extinction, A_V = R_V E(B-V) with R_V = 3.1 (Cardelli et al. 1989 mean Galactic value)
    av = 3.1 * ebv                               # = 0.6572
    # Step 3: distance modulus, (m - M)_0 = V - M_V - A_V (Pogson 1856 magnitude scale)
    dm = V - mv_pub - av                         # = 3.9548
    # Step 4: d = 10^((m - M)_0 / 5 + 1) pc
    d_pc = 10 ** (dm / 5 + 1)                    # = 61.80 pc
    # Step 5: light years from the definitions: 1 pc = 648000/pi au (IAU 2015 B2), 1 au =
    # 149597870700 m (IAU 2012 B2), 1 ly = c x Julian year = 299792458 m/s x 365.25 x 86400 s
    d_ly = d_pc * (648000 / math.pi) * 149597870700 / (299792458 * 365.25 * 86400)
    assert (round(ebv, 3), round(av, 4), round(dm, 4), round(d_pc, 2)) == (0.212, 0.6572, 3.9548, 61.80)

    star_table = pd.DataFrame({"id": ["SPX-0100"], "sptype": ["G2V"], "B": [B], "e_B": [0.01],
                               "V": [V], "e_V": [0.01]})
    ws = worked_solutions(star_table, decimals=3)
    s = ws.stars[0]
    assert s.step("mv").value == mv_pub
    assert s.step("c0_B-V").value == bv0_pub
    assert s.step("ebv").value == pytest.approx(ebv, abs=1e-12)
    assert s.step("A_V").value == pytest.approx(av, abs=1e-12)
    assert s.step("dm").value == pytest.approx(dm, abs=1e-12)
    assert s.step("dist_pc").value == pytest.approx(d_pc, rel=1e-12)
    assert s.step("dist_ly").value == pytest.approx(d_ly, rel=1e-9)
    assert "dwarfs_V.ecsv, row G2" in s.step("mv").source
    md = render_markdown(ws)
    assert "E(B-V) = (B - V) - (B-V)_0 = (10.274 - 9.412) - 0.650 = 0.212" in md
    assert "A_V = R_V × E(B-V) = 3.100 × 0.212 = 0.657" in md
    assert "(m-M)_0 = V - M_V - A_V = 9.412 - 4.800 - 0.657 = 3.955" in md
    assert "10^(3.955/5 + 1) = 61.80 pc" in md
    assert f"= {d_ly:.1f} ly" in md


def test_decimals_change_display_not_values():
    t = _table().iloc[:2]
    ws2, ws5 = worked_solutions(t, decimals=2), worked_solutions(t, decimals=5)
    assert [st.value for st in ws2.stars[0].steps] == [st.value for st in ws5.stars[0].steps]
    assert "M_V = 4.80 ± 0.35 mag" in render_markdown(ws2)
    assert "M_V = 4.80000 ± 0.35000 mag" in render_markdown(ws5)
    assert render_markdown(ws2, decimals=1) != render_markdown(ws2)
    key = answer_key(ws2, decimals=1)
    assert key["dm"][0] == round(float(ws2.stars[0].step("dm").value), 1)
    with pytest.raises(ValueError, match="decimals"):
        worked_solutions(t, decimals=-1)


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
    ws = worked_solutions(_table())
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
    ws = worked_solutions(_table())
    md = render_markdown(ws)
    assert md.count("\n## SPX-") == len(ROWS)
    assert "| V | 11.000 | 0.020 |" in md  # fit table of the multi-band star
    path = tmp_path / "key.csv"
    from specpar.teaching import write_worked
    write_worked(ws, path)
    key = read_table(path)
    assert list(key["id"]) == [r[0] for r in ROWS]
    ref = estimate(_table())
    ok = np.isfinite(np.asarray(ref["dist_pc"], float))
    np.testing.assert_allclose(np.asarray(key["dm"], float)[ok], np.round(np.asarray(ref["dm"])[ok], 3))
    assert "calibration" in key.colnames and "dwarfs_V.ecsv" in key["calibration"][0]


def test_monte_carlo_distances_are_estimate_percentiles():
    t = _table().iloc[:3]
    ws = worked_solutions(t, method="mc", n_draws=200, seed=3)
    ref = estimate(t, method="mc", n_draws=200, seed=3)
    for i, s in enumerate(ws.stars):
        assert s.step("dist_pc").value == float(ref["dist_pc"][i])
        assert "Monte Carlo" in s.step("dist_pc").text


def test_cli_worked(tmp_path, capsys):
    src = tmp_path / "stars.csv"
    Table.from_pandas(_table()).write(src, format="ascii.csv")
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
    ws = worked_solutions(_table())
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


# ----------------------------------------------------------------------------- displayed arithmetic

#: 1 pc in light years from the definitions: 1 pc = 648000/pi au (IAU 2015 B2), 1 au =
#: 149597870700 m (IAU 2012 B2), 1 ly = c x Julian year = 299792458 m/s x 365.25 x 86400 s.
PC_IN_LY = (648000 / math.pi) * 149597870700 / (299792458 * 365.25 * 86400)
_ARITH = re.compile(r"^[-+0-9.()\[\] ×/^]+$")
_RESULT = re.compile(r"^(-?\d+(?:\.(\d+))?)(?: ± \S+)?(?: (\S+))?$")


def _eval_displayed(expr: str) -> float:
    """Independent evaluator of a displayed left side: the text turned into Python arithmetic."""
    py = expr.replace("×", "*").replace("^", "**").replace("[", "(").replace("]", ")")
    assert re.fullmatch(r"[-+0-9.()* /]+", py), expr
    return float(eval(py, {"__builtins__": {}}, {}))  # digits and operators only (checked above)


def displayed_equations(text: str):
    """(operands text, result text) of every displayed equation ``... = operands = result unit``
    in a Markdown key, including the unit conversion ``X pc = Y ly``."""
    out = []
    for code in re.findall(r"`([^`]*)`", text):
        parts = code.split(" = ")
        for left, right in zip(parts[:-1], parts[1:]):
            unit_conv = re.fullmatch(r"(-?[\d.]+) pc", left)
            if (unit_conv or (_ARITH.match(left) and re.search(r"\d\s*[-+×/^]|\)\s*/", left))) \
                    and _RESULT.match(right):
                out.append((left, right))
    return out


def fit_table_sums(text: str):
    """(operands, result) of the fit tables' arithmetic columns: m - M - A = value - M - A and
    residual = (m - M - A) - (m-M)_0, with (m-M)_0 the star's displayed distance modulus."""
    out = []
    for section in text.split("\n## ")[1:]:
        dm = re.search(r"`\(m-M\)_0 = (-?[\d.]+) ± ", section)
        for ln in section.splitlines():
            cells = [c.strip() for c in ln.strip().strip("|").split("|")]
            if len(cells) != 8 or not ln.strip().startswith("| ") or cells[6] in ("m - M - A", "(colour)", "---"):
                continue
            value, M, A, dmb, res = cells[1], cells[3], cells[5], cells[6], cells[7]
            out.append((f"{value} - ({M}) - ({A})", dmb))
            out.append((f"{dmb} - ({dm[1]})", res))
    return out


def check_equations(text: str):
    """Number of displayed equations and the list of those whose displayed operands do not give the
    displayed result at its displayed precision (fit-table columns included)."""
    eqs = displayed_equations(text) + fit_table_sums(text)
    bad = []
    for left, right in eqs:
        m = _RESULT.match(right)
        shown, decimals, unit = m[1], len(m[2] or ""), m[3]
        conv = re.fullmatch(r"(-?[\d.]+) pc", left)
        value = float(conv[1]) * PC_IN_LY if conv and unit == "ly" else _eval_displayed(left)
        if float(f"{value:.{decimals}f}") != float(shown):
            bad.append(f"{left} = {right} (operands give {value:.{decimals + 2}f})")
    return len(eqs), bad


def test_displayed_equations_reproduce_on_the_sample_survey_and_invented_stars():
    """Each displayed equation's operands, evaluated as shown, give the displayed result at the
    displayed precision (common practice: an answer key is checkable by hand)."""
    for table, opts in ((read_table(SAMPLE), {}), (_table(), {}), (_table(), dict(law="CCM89", rv=3.4))):
        md = render_markdown(worked_solutions(table, **opts))
        n, bad = check_equations(md)
        assert n > 90 and bad == [], bad[:5]
    # the parser sees every arithmetic step of the classic B, V star (so a wrong display would be caught)
    eqs = [left for left, _ in displayed_equations(render_markdown(worked_solutions(_table().iloc[:1])))]
    assert eqs[:6] == ["4.800 + 0.650", "(10.100 - 9.400) - 0.650", "3.100 × 0.050", "9.400 - 4.800 - 0.155",
                       "10^(4.445/5 + 1)", "77.45 pc"] and len(eqs) == 9


def test_equation_parser_catches_a_last_digit_error():
    n, bad = check_equations("`A_V = R_V × E(B-V) = 3.100 × 0.492 = 1.524 mag` and `x = 1000 / 100.9 = 9.913 mas`")
    assert n == 2 and len(bad) == 2
    n, bad = check_equations("`d = 1040.2 pc = 3393 ly` `d = 10^(10.086/5 + 1) = 1040 pc`")
    assert n == 2 and bad == []


def test_multiband_fit_shows_the_weighted_mean_hand_route():
    ws = worked_solutions(_table())
    star = ws.stars[4]  # A0V with six bands: a fit
    hand = star.step("dm_hand")
    md = render_markdown(ws)
    line = next(ln for ln in md.splitlines() if "Hand route" in ln and "SPX" not in ln)
    # the hand route is the mean of the table's m - M - A weighted by 1/(σ^2 + n s_c^2)
    weights = [float(x) for x in re.findall(r"([\d.]+) × ", line.split(" / (")[0])]
    moduli = [float(x) for x in re.findall(r"× (-?[\d.]+)", line)]
    assert len(weights) == len(moduli) == 6
    assert hand.value == pytest.approx(np.dot(weights, moduli) / sum(weights), abs=1e-9)
    assert "The fit gives" in hand.text and "% in distance" in hand.text
    assert hand.value != star.step("dm").value


@pytest.mark.filterwarnings("ignore::specpar.teaching.SmallSeedWarning")
@pytest.mark.parametrize("level", ["full", "simple"])
def test_displayed_equations_reproduce_in_problem_set_keys(level):
    """Full keys (several bands, reddening, fits) and simple keys from several seeds."""
    from specpar.teaching import make_problem_set
    total = 0
    for seed in (1, 2, 3, 20240917, 2 ** 100 + 7):
        ps = make_problem_set(seed=seed, n_stars=10, level=level)
        n, bad = check_equations(render_markdown(ps.worked))
        assert bad == [], (seed, bad[:5])
        total += n
    assert total >= (1400 if level == "full" else 250)  # 300 and 60 per 10-star key


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


def test_markdown_key_neutralises_markup_from_input_text():
    """A CommonMark renderer (markdown-it-py, the reference Python port) makes no element out of
    input ids or types: they show as text."""
    MarkdownIt = pytest.importorskip("markdown_it").MarkdownIt
    t = _table().iloc[:2].copy()
    t.loc[0, "id"] = "<img src=x onerror=alert(1)>"
    t.loc[1, "id"] = "[click](javascript:alert(2))"
    t.loc[1, "sptype"] = "K1 III <script>alert(3)</script>"
    ws = worked_solutions(t)
    md = render_markdown(ws)
    page = MarkdownIt("commonmark").render(md)
    assert "<img" not in page and "<script" not in page and 'href="javascript' not in page
    assert "&lt;img src=x onerror=alert(1)&gt;" in page  # shown as text
    assert "[click](javascript:alert(2))" in page
    assert "<img" not in render_html(ws) and "<script>" not in render_html(ws)


def test_tiny_errors_keep_significant_digits():
    from specpar.teaching import Step, equation, fmt_error
    assert fmt_error(0.00031, "mag", 3) == "0.00031" and fmt_error(0.0123, "mag", 3) == "0.012"
    assert fmt_error(np.nan, "mag", 3) == "" and fmt_error(0.0, "mag", 3) == ""
    st = Step("x", "x", lhs="x", value=1.0, error=0.0002)
    assert equation(st, 3) == "x = 1.000 ± 0.00020 mag"
    assert equation(Step("x", "x", lhs="x", value=1.0, error=np.nan), 3) == "x = 1.000 mag"


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


def test_fitted_rv_at_the_law_limit_is_written_as_a_limit():
    """R_V fitted per star stops at the law's range (F99 in dust_extinction: 2-6); such a value is a
    bound, so the key says so instead of quoting R_V ± error as a measurement."""
    rows = [dict(id=f"SPX-09{k}", sptype="B2V", B=11.0, V=10.0, Ic=8.5, J=7.4, H=6.9, Ks=ks)
            for k, ks in enumerate((5.0, 7.5))]  # invented: far too faint in the infrared, then plausible
    df = pd.DataFrame(rows)
    for b in ("B", "V", "Ic", "J", "H", "Ks"):
        df[f"e_{b}"] = 0.02
    ws = worked_solutions(df, fit_rv=True)
    rv = np.asarray(ws.result["rv"], float)
    assert rv[0] == pytest.approx(6.0) and 2.0 < rv[1] < 6.0
    limit, free = ws.stars
    assert "this is a limit, not a measurement" in limit.step("A_V").source
    assert "R_V at the limit" in limit.step("e_dm").text and "R_V uncertainty (±" not in limit.step("e_dm").text
    assert "limit" not in free.step("A_V").source and "R_V uncertainty (±" in free.step("e_dm").text


def test_key_of_a_row_held_at_the_reddening_bound_is_one_chain():
    """Regression: a star bluer than its type (E(B-V) held at 0) showed the exact two-band
    E(B-V) = -0.48 and V - M_V = 8.150 while the distance step used the bounded fit's
    modulus: the steps contradicted each other. Now the key shows the fit, the bound in
    words, and the distance from the modulus it shows."""
    t = pd.DataFrame({"id": ["BLUE-1"], "sptype": ["B9V"], "B": [8.10], "e_B": [0.01],
                      "V": [8.65], "e_V": [0.01]})  # invented
    md = render_markdown(worked_solutions(t))
    assert "held at 0" in md and "E(B-V) = 0.000" in md
    dm_shown = re.search(r"\(m-M\)_0 = (\d+\.\d+) ± ", md).group(1)
    assert f"10^({dm_shown[:4]}" in md  # the distance step starts from the modulus shown
    check_equations(md)
