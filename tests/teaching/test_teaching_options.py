"""Option declarations of `worked` and `problems` (specpar.teaching.options): the Python API and the
command line take the same defaults from them, and the command line passes every declared option on."""
from __future__ import annotations

import inspect

from specpar.cli.main import build_parser
from specpar.pipeline.options import EstimateOptions
from specpar.teaching import DEFAULT_DECIMALS, make_problem_set, worked_solutions
from specpar.teaching.options import PROBLEM_OPTIONS, WORKED_OPTIONS


def test_problem_defaults_are_the_same_in_python_and_on_the_command_line():
    python = {name: p.default for name, p in inspect.signature(make_problem_set).parameters.items()}
    assert python == PROBLEM_OPTIONS.defaults()
    ns = build_parser().parse_args(["problems", "--out-dir", "somewhere"])
    assert PROBLEM_OPTIONS.from_namespace(ns) == PROBLEM_OPTIONS.defaults()


def test_problem_flags_reach_their_python_names():
    ns = build_parser().parse_args(["problems", "--out-dir", "d", "--n", "4", "--dist-range", "50", "900",
                                    "--error", "0.03", "--types", "G", "K", "--v-range", "5", "12"])
    got = PROBLEM_OPTIONS.from_namespace(ns)
    assert got["n_stars"] == 4 and got["dist_range_pc"] == (50.0, 900.0) and got["error_mag"] == 0.03
    assert got["types"] == ["G", "K"] and got["v_range"] == (5.0, 12.0)


def test_worked_defaults_are_those_of_estimate_and_of_the_python_function():
    ns = build_parser().parse_args(["worked", "stars.csv", "-o", "key.md"])
    got = WORKED_OPTIONS.from_namespace(ns)
    est = EstimateOptions()
    assert got["decimals"] == DEFAULT_DECIMALS == inspect.signature(worked_solutions).parameters["decimals"].default
    assert (got["law"], got["rv"], got["sigma_rv"], got["fit_rv"], got["default_error"]) == \
        (est.law, est.rv, est.sigma_rv, est.fit_rv, est.default_error)
    assert got["columns"] == [] and got["calibrations"] == [] and got["format"] is None
