"""Spectral types as catalogues write them.

Conventions, with where they are defined:
* MK classes and ranges: Morgan, Keenan & Kellman 1943, "An Atlas of Stellar
  Spectra" (ranges such as K3-4 III are common practice);
* prefixes d (dwarf), g (giant), c (supergiant) of the Mount Wilson
  spectroscopic parallaxes, Adams et al. 1935, ApJ 81, 187 (from memory), and
  sg (supergiant), their MK equivalents V, III, I (from memory);
* Am notation k<Ca II K type> h<hydrogen type> m<metallic type>; the hydrogen
  type follows the temperature: Gray & Corbally 2009, "Stellar Spectral
  Classification", Princeton University Press (from memory);
* Unicode normalisation NFKC: Unicode Standard Annex #15.
"""
import numpy as np
import pandas as pd
import pytest

import specpar
from specpar import parse_sptypes
from specpar.core.flags import Flag
from specpar.core.sptype import normalise

BAD = Flag.TYPE_UNREADABLE | Flag.TYPE_UNSUPPORTED


def _row(text):
    return parse_sptypes([text]).iloc[0]


@pytest.mark.parametrize("text", ["K3\u20134III", "K3\u20144III", "K3\u22124III", "K3\u20104III",
                                  "K3\uff0d4III"])
def test_dash_characters_in_ranges(text):
    # en dash, em dash, minus sign, hyphen, full-width hyphen-minus: all the ASCII range K3-4 III
    row = _row(text)
    assert row["sptnum"] == pytest.approx(53.5) and (row["lc_bright"], row["lc_faint"]) == ("III", "III")
    assert not row["flags"] & (BAD | Flag.NO_LUMCLASS | Flag.PECULIAR)


def test_dash_in_class_range():
    row = _row("F5 IV\u2013V")
    assert (row["lc_bright"], row["lc_faint"]) == ("IV", "V") and not row["flags"] & Flag.PECULIAR


@pytest.mark.parametrize("text,sptnum,classes", [
    ("K0 \u2162", 50.0, ("III", "III")),          # ROMAN NUMERAL THREE
    ("G2 \u2164", 42.0, ("V", "V")),              # ROMAN NUMERAL FIVE
    ("B5 \u2163-\u2164", 15.0, ("IV", "V")),      # IV-V as Roman-numeral characters
    ("\uff2b\uff10\uff29\uff29\uff29", 50.0, ("III", "III")),  # full-width K0III
    ("\uff27\uff18 \uff36", 48.0, ("V", "V")),    # full-width G8 V
    ("K0\u00a0III", 50.0, ("III", "III")),        # no-break space
])
def test_unicode_normalised_before_parsing(text, sptnum, classes):
    row = _row(text)
    assert row["sptnum"] == pytest.approx(sptnum)
    assert (row["lc_bright"], row["lc_faint"]) == classes
    assert not row["flags"] & (BAD | Flag.NO_LUMCLASS | Flag.PECULIAR)


def test_normalise():
    assert normalise("  K0 \u2162 ") == "K0 III"
    assert normalise("K3\u20134  III") == "K3-4 III"


@pytest.mark.parametrize("text,sptnum,classes", [
    ("dK5", 55.0, ("V", "V")),
    ("dM2", 62.0, ("V", "V")),
    ("gG8", 48.0, ("III", "III")),
    ("gK2", 52.0, ("III", "III")),
    ("sgG2", 42.0, ("Ia", "Ib")),
    ("cF5", 35.0, ("Ia", "Ib")),
    ("cB8", 18.0, ("Ia", "Ib")),
])
def test_mount_wilson_prefixes(text, sptnum, classes):
    row = _row(text)
    assert row["sptnum"] == pytest.approx(sptnum)
    assert (row["lc_bright"], row["lc_faint"]) == classes
    assert not row["flags"] & (BAD | Flag.NO_LUMCLASS)
    assert "prefix" in row["detail"]


def test_subdwarf_prefix_and_white_dwarfs_stay_uncalibrated():
    for text in ("sdK5", "sdB5", "DA2", "dA5"):
        assert _row(text)["flags"] & Flag.TYPE_UNSUPPORTED, text


@pytest.mark.parametrize("text,sptnum,classes,no_class", [
    ("kA2hF0mF2", 30.0, ("V", "V"), True),
    ("kA2hF0mF2 V", 30.0, ("V", "V"), False),
    ("kA3hA8mF1 IV", 28.0, ("IV", "IV"), False),
    ("kA5hF1mF3 III", 31.0, ("III", "III"), False),
])
def test_am_notation_uses_hydrogen_type(text, sptnum, classes, no_class):
    row = _row(text)
    assert row["sptnum"] == pytest.approx(sptnum)
    assert (row["lc_bright"], row["lc_faint"]) == classes
    assert not row["flags"] & BAD
    assert bool(row["flags"] & Flag.NO_LUMCLASS) == no_class
    assert row["flags"] & Flag.PECULIAR and "Am type" in row["detail"] and "hydrogen" in row["detail"]


@pytest.mark.parametrize("text,sptnum,classes", [
    ("K0IIIab", 50.0, ("III", "III")),
    ("M1.5 IIIab", 61.5, ("III", "III")),
    ("G8IIab", 48.0, ("II", "II")),
    ("B1Iab-Ib", 11.0, ("Iab", "Ib")),
    ("F8 Iab-Ib", 38.0, ("Iab", "Ib")),
])
def test_class_subdivisions(text, sptnum, classes):
    row = _row(text)
    assert row["sptnum"] == pytest.approx(sptnum)
    assert (row["lc_bright"], row["lc_faint"]) == classes
    assert not row["flags"] & (BAD | Flag.PECULIAR)


@pytest.mark.parametrize("text", ["B1Ia-0", "B1 0-Ia", "A2 Ia-0"])
def test_ia_0_read_as_ia_and_flagged(text):
    row = _row(text)
    assert (row["lc_bright"], row["lc_faint"]) == ("Ia", "Ia")
    assert row["flags"] & Flag.LUMCLASS_NEAREST and not row["flags"] & BAD
    assert "class 0" in row["detail"]


def test_pure_hypergiant_still_unsupported():
    assert _row("B0.5Ia+")["flags"] & Flag.TYPE_UNSUPPORTED
    assert _row("B2 0")["flags"] & Flag.TYPE_UNSUPPORTED


@pytest.mark.parametrize("text,primary", [
    ("K0III+A2V", (50.0, "III")),
    ("K0 III + A2 V", (50.0, "III")),
    ("G8III+DA", (48.0, "III")),
    ("F5V+dK5", (35.0, "V")),
])
def test_composite_reads_primary_and_flags(text, primary):
    row = _row(text)
    assert (row["sptnum"], row["lc_bright"]) == primary
    assert row["flags"] & Flag.TYPE_COMPOSITE and not row["flags"] & BAD
    assert "composite" in row["detail"] and "companion" in row["detail"]


def test_plus_in_suffixes_is_not_a_composite():
    for text in ("G9III CN+1", "B0.5Ia+", "K0IIIb Fe+0.5"):
        assert not _row(text)["flags"] & Flag.TYPE_COMPOSITE, text


def test_notes_name_the_real_problem():
    assert "neither a luminosity class" in _row("A0 Q")["detail"]
    assert "temperature class" in _row("xyz")["detail"]
    # a class that cannot be placed is not silently read as a dwarf
    row = _row("K3*4III")
    assert row["flags"] & Flag.TYPE_UNREADABLE and "luminosity class" in row["detail"]


def test_distances_do_not_depend_on_how_the_type_is_written():
    # a reddened K3.5 III and K0 III: each spelling must give the same distance as the ASCII MK form
    base = {"B": 11.2, "e_B": 0.02, "V": 9.7, "e_V": 0.02, "Ks": 6.2, "e_Ks": 0.03}
    spellings = [("K3-4III", "K3\u20134III"), ("K3-4III", "K3\u22124 III"), ("K0 III", "K0 \u2162"),
                 ("K0 III", "\uff2b\uff10\uff29\uff29\uff29"), ("K5 V", "dK5"), ("G8 III", "gG8")]
    df = pd.DataFrame([dict(base, sptype=t) for pair in spellings for t in pair])
    out = specpar.estimate(df)
    d = out["dist_pc"].to_numpy(float)
    assert np.isfinite(d).all()
    np.testing.assert_allclose(d[1::2], d[0::2], rtol=1e-12)
    # and a giant is much farther than a dwarf of the same type and photometry
    dwarf = specpar.estimate(pd.DataFrame([dict(base, sptype="K3.5 V")]))["dist_pc"][0]
    assert d[1] > 10 * dwarf
