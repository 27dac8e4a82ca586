"""Each estimate option is declared once: the dataclass, the Python signature
and the command line all take their defaults from the declarations; unknown
options are refused. Sources of absolute magnitudes: the Cepheid source claims
exactly the rows with a period. (Internal consistency checks of specpar's own
wiring; the science is checked in the other files.)"""
import dataclasses
import inspect

import numpy as np
import pandas as pd
import pytest

import specpar
from specpar.cli.main import build_parser
from specpar.core.errors import InputError
from specpar.pipeline import EstimateOptions, OPTIONS, prepare_observables, read_photometry
from specpar.pipeline.cepheid import CepheidSource
from specpar.pipeline.estimate import SOURCES
from specpar.pipeline.sources import SpectralTypeSource


def test_dataclass_fields_are_the_declarations_in_order():
    fields = dataclasses.fields(EstimateOptions)
    assert [f.name for f in fields] == OPTIONS.names()
    made = EstimateOptions()
    for opt in OPTIONS:
        want = {"calibrations": (), "columns": {}}.get(opt.name, opt.default)
        assert getattr(made, opt.name) == want, opt.name


def test_estimate_signature_comes_from_the_declarations():
    params = inspect.signature(specpar.estimate).parameters
    assert list(params)[1:] == OPTIONS.names()
    for opt in OPTIONS:
        assert params[opt.name].default == opt.default
        assert params[opt.name].kind is inspect.Parameter.KEYWORD_ONLY
    for name in OPTIONS.names():
        assert f"\n{name} : " in inspect.getdoc(specpar.estimate)


def test_command_line_defaults_equal_the_api_defaults(capsys):
    ns = build_parser().parse_args(["estimate", "in.csv", "-o", "out.csv"])
    for opt in OPTIONS:
        if opt.cli_flag == "" or opt.kind is list:
            continue
        assert getattr(ns, opt.name) == opt.default, opt.name
    # sigma_rv and the prior's length scale: the help shows the one declared default
    with pytest.raises(SystemExit):
        build_parser().parse_args(["estimate", "--help"])
    help_text = capsys.readouterr().out
    assert "uncertainty of R_V (default 0.2)" in help_text
    assert "default 1350 pc" in " ".join(help_text.split())


def test_unknown_option_is_refused_with_the_known_ones():
    df = pd.DataFrame({"sptype": ["K0III"], "B": [9.0], "V": [8.0]})
    with pytest.raises(InputError, match=r"unknown estimate\(\) options: sigma_r .*known: .*sigma_rv"):
        specpar.estimate(df, sigma_r=0.1)


def test_bad_values_keep_their_messages():
    df = pd.DataFrame({"sptype": ["K0III"], "B": [9.0], "V": [8.0]})
    with pytest.raises(InputError, match=r"sigma_rv must be >= 0, got -1"):
        specpar.estimate(df, sigma_rv=-1)
    with pytest.raises(InputError, match=r"n_draws must be an integer >= 10, got 5"):
        specpar.estimate(df, method="mc", n_draws=5)


def test_photometry_reader_needs_no_types_and_matches_the_full_reader():
    df = pd.DataFrame({"sptype": ["K0III", "G2V", None], "B": [9.0, 11.0, 12.5], "V": [8.0, 10.3, np.nan],
                       "e_V": [0.02, 9.99, 0.01]})
    opts = EstimateOptions()
    full = prepare_observables(df, opts)
    phot = read_photometry(df.drop(columns="sptype"), opts)
    assert phot.parsed is None and full.parsed is not None
    np.testing.assert_array_equal(phot.obs.y, full.obs.y)
    np.testing.assert_array_equal(phot.obs.sigma, full.obs.sigma)
    for k in ("flags", "rejected", "defaulted", "bad_error", "bad_error_large"):
        np.testing.assert_array_equal(getattr(phot, k), getattr(full, k))


def test_sources_in_order_and_cepheid_claims_the_rows_with_a_period():
    assert isinstance(SOURCES[0], SpectralTypeSource) and isinstance(SOURCES[1], CepheidSource)
    frame = pd.DataFrame({"sptype": ["G2V", None, None], "period_d": [np.nan, 10.0, "x"]})
    src = CepheidSource()
    assert src.active(frame) and not src.active(frame.drop(columns="period_d"))
    # a period given but unusable is still a Cepheid row (flagged there), never a typed star
    np.testing.assert_array_equal(src.claims(frame), [False, True, True])
    assert SpectralTypeSource().claims(frame).all()
