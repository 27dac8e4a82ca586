"""Problem sets: reproducibility, photometry model, round trip, levels, CLI."""
from __future__ import annotations

import re

import numpy as np
import pytest

from specpar import estimate
from specpar.bands import BAND_NAMES, band_index
from specpar.calibration import default_calibrations
from specpar.cli import main
from specpar.extinction import band_coefficients
from specpar.teaching import make_problem_set, problem_files, write_problem_set
from specpar.tableio import read_table


# the tests below pick small seeds on purpose (readable, reproducible); the warning has its own test
pytestmark = pytest.mark.filterwarnings("ignore::specpar.teaching.SmallSeedWarning")


def _files(ps, folder):
    folder.mkdir()
    files = write_problem_set(ps, folder)
    return {role: p.read_bytes() for role, p in files.items()}


def test_same_seed_same_files_different_seed_different_stars(tmp_path):
    a = _files(make_problem_set(seed=20240917, n_stars=8), tmp_path / "a")
    b = _files(make_problem_set(seed=20240917, n_stars=8), tmp_path / "b")
    assert a == b  # byte for byte, all six files
    c = make_problem_set(seed=20240918, n_stars=8)
    first = make_problem_set(seed=20240917, n_stars=8)
    assert list(c.sheet["V"]) != list(first.sheet["V"])
    assert c.label != first.label


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


def test_photometry_follows_the_magnitude_equation():
    """m = M + (m-M)_0 + A with A_V = R_V E(B-V) (R_V definition, common practice) and
    (B-V) = (B-V)_0 + E(B-V) (colour-excess definition, common practice): the residuals are
    the added noise, N(0, error_mag), up to the 0.001 mag rounding."""
    err = 0.03
    ps = make_problem_set(seed=5, n_stars=400, level="full", error_mag=err)
    t, s = ps.truth, ps.sheet
    rv = 3.1
    res_v = s["V"] - (t["true_M_V"] + t["true_dm"] + rv * t["true_ebv"])
    res_bv = (s["B"] - s["V"]) - (t["true_bv0"] + t["true_ebv"])
    assert abs(np.mean(res_v)) < 4 * err / np.sqrt(400)
    assert np.std(res_v) == pytest.approx(err, rel=0.12)
    assert np.std(res_bv) == pytest.approx(err * np.sqrt(2), rel=0.12)
    np.testing.assert_allclose(t["true_av"], rv * t["true_ebv"], rtol=1e-12)
    # distance modulus of the truth (Pogson 1856): m - M = 5 log10(d / 10 pc)
    np.testing.assert_allclose(t["true_dm"], 5 * np.log10(t["true_dist_pc"] / 10), atol=1e-12)
    lo, hi = ps.settings["dist_range_pc"]
    assert t["true_dist_pc"].min() >= lo and t["true_dist_pc"].max() <= hi
    # the Ks band carries the F99 extinction coefficient from dust_extinction
    R = band_coefficients("F99", rv)
    ks = s["Ks"] - s["V"]
    model = ks - (R[band_index("Ks")] - R[band_index("V")]) * t["true_ebv"]
    assert np.corrcoef(model, t["true_ebv"])[0, 1] ** 2 < np.corrcoef(ks, t["true_ebv"])[0, 1] ** 2


def test_true_stars_scatter_like_the_calibration():
    """True M_V scatter about the tabulated value by about sig_M_V (plus the subtype draw)."""
    ps = make_problem_set(seed=11, n_stars=500, level="simple", types=["G2"])
    cal = default_calibrations().by_class["V"]
    row = list(cal.table["sptype"]).index("G2")
    sig = float(cal.table["sig_M_V"][row])
    dev = ps.truth["true_M_V"] - float(cal.table["M_V"][row])
    slope = float(cal.evaluate(np.array([42.0])).dabsmag[0, 0])
    expected = np.hypot(sig, 0.5 * slope)
    assert abs(np.mean(dev)) < 0.1
    assert np.std(dev) == pytest.approx(expected, rel=0.15)


def test_round_trip_sheet_file_recovers_the_key(tmp_path):
    ps = make_problem_set(seed=42, n_stars=12, level="full")
    files = write_problem_set(ps, tmp_path)
    sheet = read_table(files["sheet_csv"])
    solved = estimate(sheet, default_error=ps.settings["error_mag"])
    key = read_table(files["key_csv"])
    np.testing.assert_allclose(np.round(np.asarray(solved["dm"], float), 3), np.asarray(key["dm"], float))
    np.testing.assert_allclose(np.round(np.asarray(solved["ebv"], float), 3), np.asarray(key["ebv"], float))
    assert list(key["id"]) == list(ps.sheet["id"])


@pytest.mark.parametrize("level", ["simple", "full"])
def test_solutions_recover_truth_within_stated_errors(level):
    """Synthetic stars drawn from the calibration: the solver's errors are honest, i.e.
    z = (dm - dm_true) / e_dm is about N(0, 1) (within 1 sigma ~68 %, 2 sigma ~95 %)."""
    ps = make_problem_set(seed=7, n_stars=400, level=level)
    r = ps.worked.result
    dm, e_dm = np.asarray(r["dm"], float), np.asarray(r["e_dm"], float)
    z = (dm - ps.truth["true_dm"]) / e_dm
    assert np.all(np.isfinite(z))
    assert 0.58 < np.mean(np.abs(z) < 1) < 0.85
    assert np.mean(np.abs(z) < 2) > 0.9
    assert np.max(np.abs(z)) < 5
    if level == "full":
        ze = (np.asarray(r["ebv"], float) - ps.truth["true_ebv"]) / np.asarray(r["e_ebv"], float)
        assert np.mean(np.abs(ze) < 2) > 0.9
        assert ps.settings["ebv_range"][0] <= ps.truth["true_ebv"].min()


def test_simple_level():
    ps = make_problem_set(seed=3, n_stars=20, level="simple")
    assert ps.sheet.colnames == ["id", "sptype", "V"]
    assert all(s.endswith(" V") for s in ps.sheet["sptype"])
    assert np.all(ps.truth["true_ebv"] == 0)
    flags = np.asarray(ps.worked.result["flag_codes"], dtype=str)
    assert all("EBV_ASSUMED_ZERO" in f for f in flags)  # intended at this level
    star = ps.worked.stars[0]
    assert star.step("dm").formula == "V - M_{V} - A_{V}" and star.step("A_V").value == 0


@pytest.mark.parametrize("kwargs, match", [
    (dict(level="simple", classes=["III"]), "simple level"),
    (dict(level="simple", bands=["B", "V"]), "simple level"),
    (dict(level="simple", ebv_range=(0.1, 0.5)), "simple level"),
    (dict(level="hard"), "level must be"),
    (dict(n_stars=0), "n_stars"),
    (dict(dist_range_pc=(500, 100)), "dist_range_pc"),
    (dict(ebv_range=(-1, 0.5)), "ebv_range"),
    (dict(bands=["V", "Q"]), "unknown band"),
    (dict(bands=["B", "Ks"]), "lack V"),
    (dict(types=["X5"]), "not temperature classes"),
    (dict(classes=["III"], types=["B"], bands=["V", "RP"]), "no tabulated type"),  # B giants: no G-RP
    (dict(classes=["VII"]), "no calibration"),
    (dict(error_mag=0), "error_mag"),
])
def test_bad_parameters_give_clear_errors(kwargs, match):
    with pytest.raises(ValueError, match=match):
        make_problem_set(seed=1, **kwargs)


def test_types_and_classes_are_respected():
    ps = make_problem_set(seed=9, n_stars=60, types=["K"], classes=["III"], bands=["B", "V", "Ks"])
    assert all(re.fullmatch(r"K[\d.]+ III", s) for s in ps.sheet["sptype"])
    assert {"B", "V", "Ks"} <= set(ps.sheet.colnames) and "J" not in ps.sheet.colnames
    assert set(BAND_NAMES) >= {c for c in ps.sheet.colnames if not c.startswith("e_")} - {"id", "sptype"}


def test_cli_problems(tmp_path, capsys):
    seed = 2 ** 70 + 314159  # long enough: no small-seed warning on stderr
    args = ["problems", "--seed", str(seed), "--n", "4", "--level", "full", "--out-dir", str(tmp_path)]
    assert main(args) == 0
    # sheet and key: CSV, Markdown, HTML each; CSV files have their provenance sidecar <name>.specpar.json
    written = sorted(p.name for p in tmp_path.iterdir() if not p.name.endswith(".specpar.json"))
    assert len(written) == 6 and all(n.startswith("lab-") for n in written)
    assert "lab-" in capsys.readouterr().out
    assert main(args) == 1  # files exist: refuse, one line on stderr
    err = capsys.readouterr().err
    assert err.startswith("specpar: error:") and "exist" in err and err.count("\n") == 1
    assert main(args + ["--overwrite", "--quiet"]) == 0
    assert main(["problems", "--seed", "1", "--level", "simple", "--classes", "III",
                 "--out-dir", str(tmp_path)]) == 1
    assert "simple level" in capsys.readouterr().err
    with pytest.raises(SystemExit) as exc:
        main(["problems", "--seed", "1", "--level", "medium", "--out-dir", str(tmp_path)])
    assert exc.value.code == 2
    ps = make_problem_set(seed=seed, n_stars=4)
    assert problem_files(ps, tmp_path)["key_html"].exists()


# ----------------------------------------------------------------------------- the sheet must not give the key away

def _old_style_label(seed):
    """The label a student could rebuild from the generator's first draws (what the sheet must not carry)."""
    rng = np.random.default_rng(seed)
    return "LAB-" + "".join(chr(65 + k) for k in rng.integers(0, 26, 4))


def test_label_is_not_a_draw_of_the_generator():
    labels = [make_problem_set(seed=s, n_stars=1, level="simple").label for s in range(12)]
    assert all(lab != _old_style_label(s) for s, lab in enumerate(labels))
    assert len(set(labels)) >= 11  # still a per-seed name (4 letters: collisions are rare)


def test_each_seed_a_student_tries_costs_key_stretching():
    """PBKDF2 (RFC 8018) between seed and generator: trying seeds is no longer a fraction of a second
    for thousands of them (the old label fell to a search over 10^5 seeds in well under a second)."""
    import time
    from specpar.teaching import KDF_ITERATIONS, derive_seed
    assert KDF_ITERATIONS >= 100_000
    t0 = time.perf_counter()
    for s in range(5):
        derive_seed(s)
    assert (time.perf_counter() - t0) / 5 > 0.005  # seconds per seed tried; about 0.06 s here


def test_default_seed_has_enough_entropy_and_is_written_to_the_key_only(tmp_path):
    import warnings
    from specpar.teaching import SEED_BITS
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no small-seed warning for a drawn seed
        a = make_problem_set(n_stars=3)
        b = make_problem_set(n_stars=3)
    assert a.settings["seed"] != b.settings["seed"] and list(a.sheet["V"]) != list(b.sheet["V"])
    assert a.settings["seed"].bit_length() > SEED_BITS - 30  # 128 random bits (fewer with probability 2^-30)
    files = write_problem_set(a, tmp_path)
    seed = str(a.settings["seed"])
    for role in ("sheet_csv", "sheet_md", "sheet_html"):
        assert seed not in files[role].read_text()
    for role in ("key_md", "key_html"):
        assert seed in files[role].read_text()
    # the recorded seed makes the same set again, byte for byte
    again = _files(make_problem_set(seed=a.settings["seed"], n_stars=3), tmp_path / "again")
    assert again == {r: p.read_bytes() for r, p in files.items()}


def test_small_hand_picked_seed_warns(tmp_path, capsys):
    from specpar.teaching import SmallSeedWarning
    with pytest.warns(SmallSeedWarning, match=r"seed 1234 has only 11 bits"):
        make_problem_set(seed=1234, n_stars=2)
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        make_problem_set(seed=2 ** 64 + 1234, n_stars=2)
    assert main(["problems", "--seed", "1234", "--n", "2", "--out-dir", str(tmp_path / "w")]) == 0
    err = capsys.readouterr().err
    assert err.startswith("specpar: warning: seed 1234") and err.count("\n") == 1
    assert main(["problems", "--n", "2", "--out-dir", str(tmp_path / "x")]) == 0  # no --seed: drawn
    assert capsys.readouterr().err == ""


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
