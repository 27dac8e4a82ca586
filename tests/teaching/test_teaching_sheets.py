"""Problem sheets (specpar.teaching.sheets): the sheet hides the answers and carries every calibration
row, coefficient and error the key uses."""
from __future__ import annotations

import re

import numpy as np
import pytest

from specpar.teaching import make_problem_set, write_problem_set

# the tests below pick small seeds on purpose (readable, reproducible); the warning has its own test
pytestmark = pytest.mark.filterwarnings("ignore::specpar.teaching.SmallSeedWarning")


def test_sheet_hides_the_answers_and_the_seed(tmp_path):
    seed = 987654321
    ps = make_problem_set(seed=seed, n_stars=5, level="full")
    files = write_problem_set(ps, tmp_path)
    sheet_text = files["sheet_csv"].read_text() + files["sheet_md"].read_text()
    assert str(seed) not in sheet_text
    assert "true" not in sheet_text.lower() and "dist" not in files["sheet_csv"].read_text()
    assert all(re.fullmatch(r"LAB-[A-Z]{4}-\d{2}", i) for i in ps.sheet["id"])  # invented IDs
    assert str(seed) in files["key_md"].read_text()  # the instructor's key records it
    assert set(ps.sheet.colnames) == {"id", "sptype", "B", "e_B", "V", "e_V", "Ic", "e_Ic", "J", "e_J",
                                      "H", "e_H", "Ks", "e_Ks"}


# ----------------------------------------------------------------------------- the sheet carries what the key uses

def _sheet_table(md, caption_start):
    """Rows of the Markdown table under the heading that starts with ``caption_start``."""
    block = md.split(f"## {caption_start}", 1)[1].split("\n## ", 1)[0]
    lines = [ln for ln in block.splitlines() if ln.startswith("| ") and not ln.startswith("| ---")]
    header = [c.strip() for c in lines[0].strip("|").split("|")]
    return [dict(zip(header, (c.strip() for c in ln.strip("|").split("|")))) for ln in lines[1:]]


def test_sheet_gives_calibration_rows_coefficients_and_errors_the_key_uses(tmp_path):
    ps = make_problem_set(seed=2 ** 80 + 17, n_stars=12, level="full")
    md = write_problem_set(ps, tmp_path)["sheet_md"].read_text()
    rows = {(r["type"], r["class"]): r for r in _sheet_table(md, "Calibration rows")}
    coef = _sheet_table(md, "Extinction per unit colour excess")[0]
    for star in ps.worked.stars:
        name, lc = star.sptype.rsplit(" ", 1)
        row = rows[(name, lc)]
        assert float(row["M_V"]) == pytest.approx(star.step("mv").value, abs=5e-4)
        assert float(row["σ(M_V)"]) == pytest.approx(star.step("mv").error, abs=5e-3)
        for st in star.steps:
            if st.key.startswith("c0_"):
                assert float(row[f"({st.key[3:]})_0"]) == pytest.approx(st.value, abs=5e-4)
            if st.key.startswith("A_") and st.numbers:
                assert float(coef[st.key[2:]]) == pytest.approx(st.numbers[0][0], abs=5e-5)
    # every error the key's budget names is given on the sheet
    assert "±0.5 subclass" in md and "R_V = 3.1 ± 0.2" in md and "0.03 mag (class V)" in md
    assert "between 4 and 16" in md


def test_sheet_dwarf_rows_are_the_published_dwarf_sequence(tmp_path):
    """Class V rows on the sheet equal Pecaut & Mamajek 2013 Table 5 (Mamajek's table v2022.04.16,
    shipped in the meanstars package): M_V and (B-V)_0."""
    MeanStars = pytest.importorskip("MeanStars").MeanStars
    data = MeanStars().data
    spt = list(np.asarray(data["SpT"], dtype=str))
    ps = make_problem_set(seed=2 ** 90 + 3, n_stars=20, classes=["V"])
    md = write_problem_set(ps, tmp_path)["sheet_md"].read_text()
    checked = 0
    for r in _sheet_table(md, "Calibration rows"):
        j = spt.index(r["type"] + "V")
        assert float(r["M_V"]) == pytest.approx(float(data["Mv"][j]), abs=5e-4)
        assert float(r["(B-V)_0"]) == pytest.approx(float(data["B-V"][j]), abs=5e-4)
        checked += 1
    assert checked >= 5


def test_simple_sheet_states_the_error_the_key_quotes(tmp_path):
    ps = make_problem_set(seed=2 ** 70 + 5, n_stars=4, level="simple")
    files = write_problem_set(ps, tmp_path)
    md = files["sheet_md"].read_text()
    assert "0.020 mag (1 sigma) on every V" in md and "±0.5 subclass" in md
    assert set(_sheet_table(md, "Calibration rows")[0]) == {"type", "class", "M_V", "σ(M_V)"}
    assert "σ(V) = 0.020" in files["key_md"].read_text()


@pytest.mark.parametrize("kwargs", [dict(types=["O", "B"], classes=["V"], dist_range_pc=(10, 5000)),
                                    dict(types=["M"], classes=["V"], dist_range_pc=(5, 3000), level="full"),
                                    dict(level="simple", n_stars=200)])
def test_invented_stars_stay_within_the_stated_magnitudes(kwargs):
    """No O star at V = -2.8 or late M dwarf at V = 26 (the sheet states the V range)."""
    ps = make_problem_set(seed=2 ** 65 + 1, **{"n_stars": 120, **kwargs})
    lo, hi = ps.settings["v_range"]
    v = np.asarray(ps.sheet["V"], float)
    assert lo <= v.min() and v.max() <= hi
    lo_d, hi_d = ps.settings["dist_range_pc"]
    assert lo_d <= ps.truth["true_dist_pc"].min() and ps.truth["true_dist_pc"].max() <= hi_d


def test_impossible_magnitude_range_is_a_clear_error():
    with pytest.raises(ValueError, match="v_range"):
        make_problem_set(seed=2 ** 65, types=["M9"], classes=["V"], dist_range_pc=(1000, 2000))
    with pytest.raises(ValueError, match="v_range"):
        make_problem_set(seed=2 ** 65, v_range=(16, 4))


def test_html_sheet_is_self_contained_and_matches_the_markdown(tmp_path):
    from html.parser import HTMLParser
    ps = make_problem_set(seed=2 ** 66 + 9, n_stars=5)
    files = write_problem_set(ps, tmp_path)
    page = files["sheet_html"].read_text()
    tags = []

    class P(HTMLParser):
        def handle_starttag(self, tag, attrs):
            tags.append(tag)
    P().feed(page)
    assert {"table", "style", "ol"} <= set(tags) and "<script" not in page and "http" not in page
    assert all(i in page for i in ps.sheet["id"])
    assert "Calibration rows" in page and "A/E(B-V)" in page
    assert "true" not in page.lower()


@pytest.mark.parametrize("level", ["simple", "full"])
def test_no_nan_or_zero_errors_in_keys_and_sheets(tmp_path, level):
    for k, err in enumerate((0.02, 0.0002)):
        ps = make_problem_set(seed=2 ** 70 + k, n_stars=15, level=level, error_mag=err)
        files = write_problem_set(ps, tmp_path / f"{level}{k}")
        for role in ("sheet_md", "sheet_html", "key_md", "key_html"):
            text = files[role].read_text()
            assert not re.search(r"±\s*(nan|inf|n/a|0\.0+(?![0-9]))", text), (role, err)
            assert "nan" not in text.replace("nano", "")
        if err < 0.001:
            assert "0.00020" in files["sheet_md"].read_text()  # a tiny error keeps its digits
