"""The options of calibrate are declared once: the command line's defaults are the
Python API's (a fact of this code base, checked on the parsed arguments)."""
import pytest

from specpar.calfit.options import CALIBRATE_OPTIONS, api_options
from specpar.cli.main import build_parser
from specpar.core.errors import InputError


def parsed(*extra):
    ns = build_parser().parse_args(["calibrate", "stars.csv", "-o", "out", *extra])
    from specpar.calfit.options import CLI_OPTIONS
    return api_options(CLI_OPTIONS.from_namespace(ns))


def test_cli_defaults_are_the_api_defaults():
    got = parsed()
    want = CALIBRATE_OPTIONS.defaults()
    for name in ("rv", "v_limit", "min_stars", "min_per_node", "sample", "scale_height_pc"):
        assert got[name] == want[name], name
    assert got["columns"] == {} and not got["classes"]


def test_cli_density_and_repeatable_options():
    assert parsed("--uniform-density")["scale_height_pc"] is None
    assert parsed("--scale-height", "80")["scale_height_pc"] == 80.0
    got = parsed("--class", "III", "--class", "IV", "--col", "V=Vmag", "--rv", "3.3", "--min-stars", "12")
    assert got["classes"] == ["III", "IV"] and got["columns"] == {"V": "Vmag"}
    assert got["rv"] == 3.3 and got["min_stars"] == 12


def test_unknown_api_option_names_the_known_ones():
    with pytest.raises(InputError, match="unknown calibrate options: r_v .*known: .*rv"):
        CALIBRATE_OPTIONS.resolve({"r_v": 3.1}, what="calibrate options")


def test_bad_class_is_refused_with_the_valid_set():
    import pandas as pd
    from specpar.calfit import calibrate
    df = pd.DataFrame({"sptype": ["K0 III"], "V": [5.0], "B-V": [1.0], "plx": [5.0], "e_plx": [1.0]})
    with pytest.raises(InputError, match="not luminosity classes with calibration tables; choose from V, IV"):
        calibrate(df, classes=["VII"])
