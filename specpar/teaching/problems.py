"""Problem sets for teaching labs: invented stars with realistic photometry, a student sheet and
the matching answer key.

The stars are drawn by :mod:`specpar.teaching.draw`; the key holds the true values, the values a
correct solution recovers (those of :func:`specpar.estimate` on the sheet) and the worked steps.
The sheet (:mod:`specpar.teaching.sheets`) carries what a solution needs: the calibration rows of
its types, the coefficients A/E(B-V) of its bands and every error the key's uncertainty combines.

The same seed gives the same files, byte for byte. By default a fresh 128-bit seed is drawn and
written into the key only; a hand-picked seed of fewer than 64 bits gets a
:class:`~specpar.teaching.seeds.SmallSeedWarning` (:mod:`specpar.teaching.seeds`).

References
----------
Pogson 1856, MNRAS 17, 12 (distance modulus); the calibration and extinction-law references are
those of the tables and law used, listed in the key.
Moriarty, K., Kaliski, B. & Rusch, A. 2017, RFC 8018, PKCS #5 v2.1 (PBKDF2).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import astropy.units as u
import numpy as np
from astropy.table import Table

from specpar.core.bands import BANDS, band_index

from .draw import draw_stars
from .levels import problem_settings
from .model import WorkedSolution
from .numbers import round_sig, round_value
from .options import PROBLEM_OPTIONS
from .seeds import derive_seed, fresh_seed, warn_if_small
from .solutions import answer_key, worked_solutions

__all__ = ["ProblemSet", "make_problem_set", "ERROR_SIG_FIGURES", "SPTNUM_DECIMALS", "Z_DECIMALS"]

#: Significant figures of the photometric error printed in the sheet's e_ columns (common practice).
ERROR_SIG_FIGURES = 3
#: Decimals of the true numeric type in the truth table (a thousandth of a subclass; common practice).
SPTNUM_DECIMALS = 3
#: Decimals of z = ((m-M)_solved - (m-M)_true) / sigma in the key (common practice).
Z_DECIMALS = 2
_D = PROBLEM_OPTIONS.defaults()


@dataclass
class ProblemSet:
    """A generated problem set.

    Attributes
    ----------
    label : str
        Invented name of the set (e.g. ``"LAB-QTRM"``); star IDs are ``<label>-01`` ...
    level : str
    sheet : astropy.table.Table
        What students get: ``id``, ``sptype`` and the photometry.
    truth : astropy.table.Table
        True parameters of every star.
    key : astropy.table.Table
        Truth beside the answer key (rounded for display).
    worked : WorkedSolution
        Worked steps of the solution of the sheet.
    settings : dict
        Parameters that made the set (seed included).
    """

    label: str
    level: str
    sheet: Table
    truth: Table
    key: Table
    worked: WorkedSolution
    settings: dict = field(default_factory=dict)


def _tables(s, draw, tag):
    label = f"LAB-{tag}"
    n = s["n_stars"]
    ids = [f"{label}-{i + 1:0{max(2, len(str(n)))}d}" for i in range(n)]
    sheet = Table()
    sheet["id"] = ids
    sheet["sptype"] = draw["sptype"]
    for b in sorted(s["bands"], key=lambda name: BANDS[band_index(name)].wavelength_um):  # blue to red
        sheet[b] = draw["mags"][:, band_index(b)]
        sheet[b].unit = "mag"
        if s["level"] == "full":
            sheet[f"e_{b}"] = np.full(n, round_sig(s["error_mag"], ERROR_SIG_FIGURES))
            sheet[f"e_{b}"].unit = "mag"
    truth = Table()
    truth["id"] = ids
    truth["true_sptnum"] = np.round(draw["true_spt"], SPTNUM_DECIMALS)
    truth["true_M_V"] = draw["absmag"][:, 0]
    truth["true_bv0"] = draw["bv0"]
    truth["true_ebv"] = draw["ebv"]
    truth["true_av"] = draw["av"]
    truth["true_dm"] = draw["dm"]
    truth["true_dist_pc"] = draw["dist"]
    truth["true_dist_ly"] = (draw["dist"] * u.pc).to(u.lyr).value
    return label, sheet, truth


def make_problem_set(*, seed: int | None = _D["seed"], n_stars: int = _D["n_stars"], types=_D["types"],
                     classes=_D["classes"], dist_range_pc=_D["dist_range_pc"], ebv_range=_D["ebv_range"],
                     error_mag=_D["error_mag"], bands=_D["bands"], level: str = _D["level"], law: str = _D["law"],
                     rv: float = _D["rv"], decimals: int = _D["decimals"], v_range=_D["v_range"]) -> ProblemSet:
    """Invent a problem set: stars drawn from the calibrations, with noisy photometry.

    Parameters
    ----------
    seed : int, optional
        The same seed gives the same set, byte for byte. Default: a fresh ``SEED_BITS``-bit seed
        from :mod:`secrets`, recorded in the key (``settings["seed"]``) and nowhere on the sheet. A
        hand-picked seed of fewer than ``SMALL_SEED_BITS`` bits gives a :class:`SmallSeedWarning`.
        The generator and the set's label are derived from the seed by PBKDF2 (RFC 8018), the label
        from its own bytes, so nothing on the sheet is a direct draw of the generator.
    n_stars : int
        Number of stars (1-999).
    types : sequence of str, optional
        Temperature classes (``"G"``) and/or tabulated types (``"G2"``) to draw from.
    classes : sequence of str, optional
        Luminosity classes to draw from (calibration names: ``V``, ``IV``, ``III`` ...).
    dist_range_pc : (float, float), optional
        Range of true distances (pc); drawn uniform in log d over the part of the range that keeps
        the star's V inside ``v_range``.
    ebv_range : (float, float), optional
        Range of true E(B-V) (mag); drawn uniform.
    error_mag : float, optional
        1-sigma photometric noise added to every magnitude (and the error quoted).
    bands : sequence of str, optional
        Bands given on the sheet (must include V).
    level : {"simple", "full"}
        Defaults and rules, see :data:`LEVELS`.
    law, rv : str, float
        Extinction law and R_V used to redden the stars and to solve them.
    decimals : int
        Decimals shown in the key.
    v_range : (float, float), optional
        Range of the apparent V magnitudes on the sheet (noise included; stated on the sheet).
        Candidate stars that cannot fall inside it at any allowed distance are drawn again.

    Returns
    -------
    ProblemSet

    References
    ----------
    The absolute magnitudes, colours and their scatter come from the
    calibration tables (see their ``references``); extinction from the law's
    paper (``specpar.calib.extinction.LAWS``).
    """
    drawn = seed is None
    if drawn:
        seed = fresh_seed()
    s = problem_settings(level, seed, n_stars, types, classes, dist_range_pc, ebv_range, error_mag, bands, law,
                         rv, v_range)
    if not drawn:
        warn_if_small(s["seed"])
    gen_seed, tag = derive_seed(s["seed"])
    label, sheet, truth = _tables(s, draw_stars(s, gen_seed), tag)
    ws = worked_solutions(sheet, decimals=decimals, law=law, rv=rv, default_error=s["error_mag"])
    return ProblemSet(label, level, sheet, truth, _key_table(ws, truth, label, s, decimals), ws, s)


def _key_table(ws, truth, label, s, decimals) -> Table:
    """Truth beside the answer key (both rounded for display) and z of the distance modulus."""
    key = answer_key(ws)
    full = Table()
    for col in key.colnames[:2]:
        full[col] = key[col]
    for col in truth.colnames[1:]:
        kind = "pc" if col.endswith(("_pc", "_ly")) else ("num" if col == "true_sptnum" else "mag")
        full[col] = [round_value(v, kind, decimals) for v in truth[col]]
    for col in key.colnames[2:]:
        full[col] = key[col]
    with np.errstate(invalid="ignore", divide="ignore"):
        z = (np.asarray(ws.result["dm"], float) - truth["true_dm"]) / np.asarray(ws.result["e_dm"], float)
    full["z_dm"] = np.round(z, Z_DECIMALS)
    full.meta["specpar"] = {"problem_set": label, **{k: (list(v) if isinstance(v, tuple) else v)
                                                     for k, v in s.items()}}
    return full
