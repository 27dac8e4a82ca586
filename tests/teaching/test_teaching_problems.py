"""Problem sets (specpar.teaching.problems, draw, levels): reproducibility, the photometry model,
round trip, levels and their checks, the `problems` command."""
from __future__ import annotations

import re

import numpy as np
import pytest

from specpar import estimate
from specpar.core.bands import BAND_NAMES, band_index
from specpar.calib.tables import default_calibrations
from specpar.cli.main import main
from specpar.calib.extinction import band_coefficients
from specpar.teaching import make_problem_set, problem_files, write_problem_set
from specpar.io.read import read_table

from teaching_cases import problem_files_bytes

# the tests below pick small seeds on purpose (readable, reproducible); the warning has its own test
pytestmark = pytest.mark.filterwarnings("ignore::specpar.teaching.SmallSeedWarning")


def test_same_seed_same_files_different_seed_different_stars(tmp_path):
    a = problem_files_bytes(make_problem_set(seed=20240917, n_stars=8), tmp_path / "a")
    b = problem_files_bytes(make_problem_set(seed=20240917, n_stars=8), tmp_path / "b")
    assert a == b  # byte for byte, all six files
    c = make_problem_set(seed=20240918, n_stars=8)
    first = make_problem_set(seed=20240917, n_stars=8)
    assert list(c.sheet["V"]) != list(first.sheet["V"])
    assert c.label != first.label


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
