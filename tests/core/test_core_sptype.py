"""Spectral-type reading: the MK forms found in catalogues (Morgan, Keenan &
Kellman 1943 notation with its common extensions; forms are common practice)."""
import numpy as np
import pytest

from specpar import parse_sptypes
from specpar.core.flags import Flag


@pytest.mark.parametrize("text,sptnum,classes", [
    ("K1 III", 51.0, ("III", "III")),
    ("B2.5IV-V", 12.5, ("IV", "V")),
    ("G8III-IV", 48.0, ("III", "IV")),
    ("M2Iab", 62.0, ("Iab", "Iab")),
    ("O9.7Iab", 9.7, ("Iab", "Iab")),
    ("K3-4III", 53.5, ("III", "III")),
    ("G8-K0 III", 49.0, ("III", "III")),
    ("F0IV/V", 30.0, ("IV", "V")),
    ("B1Ib-II", 11.0, ("Ib", "II")),
    ("A1I", 21.0, ("Ia", "Ib")),
    ("k0iiib", 50.0, ("III", "III")),
    ("  g2   v ", 42.0, ("V", "V")),
    ("K0IIIb Fe-1", 50.0, ("III", "III")),
    ("G9III CN+1", 49.0, ("III", "III")),
    ("B2Ve", 12.0, ("V", "V")),
    ("F5 V(n)", 35.0, ("V", "V")),
    ("M0IIIvar", 60.0, ("III", "III")),
])
def test_forms_found_in_catalogues(text, sptnum, classes):
    row = parse_sptypes([text]).iloc[0]
    assert row["sptnum"] == pytest.approx(sptnum)
    assert (row["lc_bright"], row["lc_faint"]) == classes
    assert not row["flags"] & (Flag.TYPE_UNREADABLE | Flag.TYPE_UNSUPPORTED)


def test_subtype_uncertainty_default_range_and_colon():
    p = parse_sptypes(["G2V", "K3-4III", "G8-K0III", "G8III:"])
    assert list(p["e_sptnum"]) == [0.5, 0.5, 1.0, 1.0]
    assert p["flags"][3] & Flag.TYPE_UNCERTAIN


def test_missing_luminosity_class_assumes_dwarf_and_flags_it():
    row = parse_sptypes(["K2"]).iloc[0]
    assert row["lc_bright"] == "V" and row["flags"] & Flag.NO_LUMCLASS


def test_peculiarity_suffix_flagged_with_original_case():
    row = parse_sptypes(["A0Vn"]).iloc[0]
    assert row["flags"] & Flag.PECULIAR and "'n'" in row["detail"]


@pytest.mark.parametrize("text", ["DA2", "DB3.5", "WN7", "WC8", "C5,2", "S4/2", "L3", "T6", "Y0",
                                  "sdB5", "B0.5Ia+", "M5VI", "B1 0"])
def test_uncalibrated_families_are_flagged_not_extrapolated(text):
    row = parse_sptypes([text]).iloc[0]
    assert row["flags"] & Flag.TYPE_UNSUPPORTED and np.isnan(row["sptnum"])
    assert row["detail"]


@pytest.mark.parametrize("text", ["", "xyz", "G12V", "Gx", "K5-K2III", None, 3.5, float("nan")])
def test_unreadable_types_flagged(text):
    row = parse_sptypes([text]).iloc[0]
    assert row["flags"] & Flag.TYPE_UNREADABLE and np.isnan(row["sptnum"])


def test_each_distinct_string_parsed_once_and_order_kept():
    values = ["K1III", "G2V", "K1III", None, "G2V"] * 1000
    p = parse_sptypes(values)
    assert len(p) == len(values)
    assert list(p["sptnum"][:3]) == [51.0, 42.0, 51.0]
