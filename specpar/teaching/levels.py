"""Problem-set levels and the checked settings of one set.

Two levels:

``simple``
    V only, class V stars, no extinction (E(B-V) = 0); M_V from the main sequence. The solver
    flags E(B-V) as assumed 0, which is what this level intends.
``full``
    Several bands with error bars, reddening, classes V and III by default.
"""
from __future__ import annotations

import re

import numpy as np

from specpar.core.bands import band_index
from specpar.calib.tables import default_calibrations
from specpar.core.errors import InputError
from specpar.calib.extinction import check_law
from specpar.core.sptype import TEMPERATURE_CLASSES

from .seeds import SEED_BITS

__all__ = ["LEVELS", "MAX_STARS", "DIST_LIMITS_PC", "EBV_LIMITS", "V_LIMITS", "MAX_ERROR_MAG",
           "check_range", "problem_settings"]

#: Defaults per level (every one can be overridden except the simple level's fixed rules).
#: ``v_range`` bounds the apparent V magnitude printed on the sheet (stated there).
LEVELS = {
    "simple": dict(types=("A", "F", "G", "K"), classes=("V",), dist_range_pc=(10.0, 300.0),
                   ebv_range=(0.0, 0.0), error_mag=0.02, bands=("V",), v_range=(3.0, 14.0)),
    "full": dict(types=("B", "A", "F", "G", "K"), classes=("V", "III"), dist_range_pc=(100.0, 2000.0),
                 ebv_range=(0.05, 1.0), error_mag=0.02, bands=("B", "V", "Ic", "J", "H", "Ks"),
                 v_range=(4.0, 16.0)),
}
#: Most stars in one set (star IDs get at most three digits).
MAX_STARS = 999
#: Allowed true distances, pc (1 pc to 1 Mpc: any star a spectroscopic parallax reaches; common practice).
DIST_LIMITS_PC = (1.0, 1e6)
#: Allowed true E(B-V), mag (0 to 5: beyond that no optical photometry; common practice).
EBV_LIMITS = (0.0, 5.0)
#: Allowed apparent V on a sheet, mag (brighter than the brightest stars to fainter than most
#: teaching telescopes reach; common practice).
V_LIMITS = (-2.0, 25.0)
#: Largest photometric noise, mag (common practice: beyond 0.5 mag no photometry is usable).
MAX_ERROR_MAG = 0.5
_TYPE_RE = re.compile(r"^[OBAFGKM](\d+(\.\d+)?)?$")


def check_range(name, rng, lo_ok, hi_ok, unit, flag):
    """(low, high) from ``rng`` if it is two finite numbers with ``lo_ok <= low <= high <= hi_ok``;
    otherwise :class:`InputError` naming ``name``, the valid range and an example ``flag`` value."""
    try:
        lo, hi = (float(v) for v in rng)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be two numbers (low, high), got {rng!r}") from None
    if not (np.isfinite(lo) and np.isfinite(hi) and lo_ok <= lo <= hi <= hi_ok):
        raise InputError(f"{name} = ({lo:g}, {hi:g}) {unit} is not a range within [{lo_ok:g}, {hi_ok:g}] "
                         f"with low <= high; give e.g. {flag}")
    return lo, hi


def _check_counts(level, seed, n_stars):
    if level not in LEVELS:
        raise InputError(f"level must be one of {', '.join(LEVELS)}, got {level!r}")
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise InputError(f"seed must be a non-negative integer (or None for a fresh {SEED_BITS}-bit seed), "
                         f"got {seed!r}")
    if not isinstance(n_stars, (int, np.integer)) or not 1 <= n_stars <= MAX_STARS:
        raise InputError(f"n_stars must be an integer from 1 to {MAX_STARS}, got {n_stars!r}")


def _check_choices(s):
    """Bands, types, classes and the simple level's rules of the settings ``s``."""
    if not (np.isfinite(s["error_mag"]) and 0 < s["error_mag"] <= MAX_ERROR_MAG):
        raise InputError(f"error_mag must be in (0, {MAX_ERROR_MAG:g}] mag, got {s['error_mag']}; e.g. 0.02")
    for b in s["bands"]:
        band_index(b)  # raises with the list of known bands
    if "V" not in s["bands"]:
        raise InputError(f"bands {', '.join(s['bands'])} lack V; every problem set gives V")
    bad = [t for t in s["types"] if not _TYPE_RE.match(str(t))]
    if bad:
        raise InputError(f"types {', '.join(map(repr, bad))} are not temperature classes or MK types; "
                         f"give letters from {TEMPERATURE_CLASSES} or tabulated types such as 'G2'")
    cals = default_calibrations()
    unknown = [c for c in s["classes"] if c not in cals.by_class]
    if unknown:
        raise InputError(f"luminosity class(es) {', '.join(unknown)} have no calibration; "
                         f"choose from {', '.join(cals.by_class)}")
    if s["level"] == "simple":
        rules = [("classes", s["classes"], ("V",)), ("bands", s["bands"], ("V",)),
                 ("ebv_range", s["ebv_range"], (0.0, 0.0))]
        for name, got, want in rules:
            if tuple(got) != want:
                raise InputError(f"the simple level uses {name} = {want} (one band, class V, no extinction), "
                                 f"got {tuple(got)}; use level='full' for anything else")


def problem_settings(level, seed, n_stars, types, classes, dist_range_pc, ebv_range, error_mag, bands, law, rv,
                     v_range=None) -> dict:
    """The settings of one problem set: the level's defaults where a value is not given, every
    value checked (:class:`InputError` with the bad value and the valid choices)."""
    _check_counts(level, seed, n_stars)
    d = LEVELS[level]
    s = dict(level=level, seed=int(seed), n_stars=int(n_stars), law=law, rv=float(rv),
             types=tuple(types or d["types"]), classes=tuple(classes or d["classes"]),
             bands=tuple(bands or d["bands"]),
             dist_range_pc=check_range("dist_range_pc", dist_range_pc or d["dist_range_pc"], *DIST_LIMITS_PC,
                                       "pc", "(50, 2000)"),
             ebv_range=check_range("ebv_range", d["ebv_range"] if ebv_range is None else ebv_range,
                                   *EBV_LIMITS, "mag", "(0.1, 1.0)"),
             error_mag=float(d["error_mag"] if error_mag is None else error_mag),
             v_range=check_range("v_range", v_range or d["v_range"], *V_LIMITS, "mag", "(4, 16)"))
    check_law(law, rv)
    _check_choices(s)
    return s
