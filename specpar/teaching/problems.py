"""Problem sets for teaching labs: invented stars with realistic photometry,
a student sheet and the matching answer key.

Each star is drawn from the calibration tables themselves: a tabulated MK
type and luminosity class, a true subtype scattered about it, a true absolute
magnitude and true intrinsic colours scattered by the calibration's own
intrinsic scatter (``sig_M_V`` and ``colour_scatter``), a colour excess
(uniform) and a distance (uniform in log d over the part of the distance range
that keeps the star's V inside the stated ``v_range``; a star that cannot be
placed there is drawn again). Its apparent magnitudes are
``m = M + (m-M)_0 + R_band E(B-V)`` plus Gaussian photometric noise, rounded
to 0.001 mag. The key holds the true values, the values a correct solution
recovers (those of :func:`specpar.estimate` on the sheet) and the worked steps.
The sheet carries what a solution needs: the calibration rows of its types,
the coefficients A/E(B-V) of its bands and every error the key's uncertainty
combines.

Two levels:

``simple``
    V only, class V stars, no extinction (E(B-V) = 0); M_V from the main
    sequence. The solver flags E(B-V) as assumed 0, which is what this level
    intends.
``full``
    Several bands with error bars, reddening, classes V and III by default.

The same seed gives the same files, byte for byte. By default a fresh 128-bit
seed is drawn (:mod:`secrets`) and written into the key only. A hand-picked
seed of fewer than 64 bits gets a :class:`SmallSeedWarning`: a student with
specpar could try seeds in order until the sheet matches. The generator seed
and the set's label come from PBKDF2-HMAC-SHA256 of the seed (RFC 8018), the
label from its own bytes, so nothing printed on the sheet is a draw of the
generator, and every seed tried costs 100 000 hash rounds.

References
----------
Pogson 1856, MNRAS 17, 12 (distance modulus); the calibration and
extinction-law references are those of the tables and law used, listed in the key.
Moriarty, K., Kaliski, B. & Rusch, A. 2017, RFC 8018, PKCS #5 v2.1 (PBKDF2).
"""
from __future__ import annotations

import hashlib
import html
import re
import secrets
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from specpar.bands import BAND_NAMES, BANDS, CALIBRATION_COLOURS, band_index, chain_matrices
from specpar.calibration import default_calibrations
from specpar.extinction import DEFAULT_LAW, DEFAULT_RV, LAWS, band_coefficients, check_law
from specpar.sptype import DEFAULT_SUBTYPE_SIGMA, TEMPERATURE_CLASSES
from specpar.estimate import coefficients_at
from .worked import (_CSS, DEFAULT_DECIMALS, SummaryTable, WorkedSolution, _chain, _fmt, _html_table, _md_table,
                     _md_text, _fmt_error, _round_sig, _round_value, answer_key, render_html, render_markdown, worked_solutions, write_text)

__all__ = ["LEVELS", "ProblemSet", "make_problem_set", "write_problem_set", "problem_files", "register_cli",
           "SEED_BITS", "SMALL_SEED_BITS", "SmallSeedWarning"]

#: Defaults per level (every one can be overridden except the simple level's fixed rules).
#: ``v_range`` bounds the apparent V magnitude printed on the sheet (stated there).
LEVELS = {
    "simple": dict(types=("A", "F", "G", "K"), classes=("V",), dist_range_pc=(10.0, 300.0),
                   ebv_range=(0.0, 0.0), error_mag=0.02, bands=("V",), v_range=(3.0, 14.0)),
    "full": dict(types=("B", "A", "F", "G", "K"), classes=("V", "III"), dist_range_pc=(100.0, 2000.0),
                 ebv_range=(0.05, 1.0), error_mag=0.02, bands=("B", "V", "Ic", "J", "H", "Ks"),
                 v_range=(4.0, 16.0)),
}
MAX_STARS = 999
#: Bits of a seed drawn when none is given (``secrets.randbits``).
SEED_BITS = 128
#: Seeds shorter than this many bits get a :class:`SmallSeedWarning`.
SMALL_SEED_BITS = 64
#: PBKDF2 iterations between the seed and the generator (key stretching, RFC 8018): every seed a
#: student tries costs this much work, on top of the search over all seeds.
_KDF_ITERATIONS = 100_000
_MAX_REDRAWS = 200


class SmallSeedWarning(UserWarning):
    """A hand-picked seed short enough for a student with specpar to find by trying seeds."""
_TYPE_RE = re.compile(r"^[OBAFGKM](\d+(\.\d+)?)?$")
_P, _ = chain_matrices()


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


# ----------------------------------------------------------------------------- checks

def _check_range(name, rng, lo_ok, hi_ok, unit, flag):
    try:
        lo, hi = (float(v) for v in rng)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be two numbers (low, high), got {rng!r}") from None
    if not (np.isfinite(lo) and np.isfinite(hi) and lo_ok <= lo <= hi <= hi_ok):
        raise ValueError(f"{name} = ({lo:g}, {hi:g}) {unit} is not a range within [{lo_ok:g}, {hi_ok:g}] "
                         f"with low <= high; give e.g. {flag}")
    return lo, hi


def _settings(level, seed, n_stars, types, classes, dist_range_pc, ebv_range, error_mag, bands, law, rv,
              v_range=None):
    if level not in LEVELS:
        raise ValueError(f"level must be one of {', '.join(LEVELS)}, got {level!r}")
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer (or None for a fresh {SEED_BITS}-bit seed), "
                         f"got {seed!r}")
    if not isinstance(n_stars, (int, np.integer)) or not 1 <= n_stars <= MAX_STARS:
        raise ValueError(f"n_stars must be an integer from 1 to {MAX_STARS}, got {n_stars!r}")
    d = LEVELS[level]
    s = dict(level=level, seed=int(seed), n_stars=int(n_stars), law=law, rv=float(rv),
             types=tuple(types or d["types"]), classes=tuple(classes or d["classes"]),
             bands=tuple(bands or d["bands"]),
             dist_range_pc=_check_range("dist_range_pc", dist_range_pc or d["dist_range_pc"], 1.0, 1e6, "pc",
                                        "(50, 2000)"),
             ebv_range=_check_range("ebv_range", d["ebv_range"] if ebv_range is None else ebv_range,
                                    0.0, 5.0, "mag", "(0.1, 1.0)"),
             error_mag=float(d["error_mag"] if error_mag is None else error_mag),
             v_range=_check_range("v_range", v_range or d["v_range"], -2.0, 25.0, "mag", "(4, 16)"))
    check_law(law, rv)
    if not (np.isfinite(s["error_mag"]) and 0 < s["error_mag"] <= 0.5):
        raise ValueError(f"error_mag must be in (0, 0.5] mag, got {s['error_mag']}; e.g. 0.02")
    for b in s["bands"]:
        band_index(b)  # raises with the list of known bands
    if "V" not in s["bands"]:
        raise ValueError(f"bands {', '.join(s['bands'])} lack V; every problem set gives V")
    bad = [t for t in s["types"] if not _TYPE_RE.match(str(t))]
    if bad:
        raise ValueError(f"types {', '.join(map(repr, bad))} are not temperature classes or MK types; "
                         f"give letters from {TEMPERATURE_CLASSES} or tabulated types such as 'G2'")
    cals = default_calibrations()
    unknown = [c for c in s["classes"] if c not in cals.by_class]
    if unknown:
        raise ValueError(f"luminosity class(es) {', '.join(unknown)} have no calibration; "
                         f"choose from {', '.join(cals.by_class)}")
    if level == "simple":
        rules = [("classes", s["classes"], ("V",)), ("bands", s["bands"], ("V",)),
                 ("ebv_range", s["ebv_range"], (0.0, 0.0))]
        for name, got, want in rules:
            if tuple(got) != want:
                raise ValueError(f"the simple level uses {name} = {want} (one band, class V, no extinction), "
                                 f"got {tuple(got)}; use level='full' for anything else")
    return s


# ----------------------------------------------------------------------------- drawing

def _pool(s):
    """Eligible (class, table row) pairs: the types asked for, with every band calibrated."""
    cals = default_calibrations()
    entries, ranges = [], {}
    idx = [band_index(b) for b in s["bands"]]
    for lc in s["classes"]:
        t = cals.by_class[lc].table
        x = np.asarray(t["sptnum"], dtype=float)
        ok = np.isfinite(cals.by_class[lc].evaluate(x).absmag[:, idx]).all(axis=1)
        names = np.asarray(t["sptype"], dtype=str)
        want = np.array([any(n == ty or (len(ty) == 1 and n[0] == ty) for ty in s["types"]) for n in names])
        if ok.any():
            ranges[lc] = (x[ok].min(), x[ok].max())
        entries += [(lc, names[j], x[j]) for j in np.flatnonzero(ok & want)]
    if not entries:
        raise ValueError(f"no tabulated type of {', '.join(s['types'])} in class(es) {', '.join(s['classes'])} "
                         f"has a calibration for all of {', '.join(s['bands'])}; choose other types, classes "
                         "or fewer bands")
    return entries, ranges


def _derive(seed: int):
    """(generator seed, label letters) from the user's seed through PBKDF2-HMAC-SHA256 (RFC 8018).

    The label comes from its own bytes of the derived key, not from the generator's stream, and the
    stretching makes every seed a student tries cost ``_KDF_ITERATIONS`` hash rounds.
    """
    raw = int(seed).to_bytes(max(1, (int(seed).bit_length() + 7) // 8), "big")
    key = hashlib.pbkdf2_hmac("sha256", raw, b"specpar problem set", _KDF_ITERATIONS, dklen=40)
    gen_seed = int.from_bytes(key[:32], "big")
    tag = "".join(chr(65 + b % 26) for b in key[32:36])
    return gen_seed, tag


def _candidates(rng, s, n, entries, per_class):
    """n candidate stars: everything but the distance, vectorised; the distance is fixed later."""
    nb, nc = len(BAND_NAMES), len(CALIBRATION_COLOURS)
    classes = [e[0] for e in entries]
    weights = np.array([1.0 / (len(per_class) * per_class[lc]) for lc in classes])
    pick = rng.choice(len(entries), size=n, p=weights / weights.sum())
    z_spt, z_mv = rng.standard_normal(n), rng.standard_normal(n)
    z_col = rng.standard_normal((n, nc))
    u_logd = rng.uniform(size=n)
    ebv = rng.uniform(*s["ebv_range"], size=n)
    z_phot = rng.standard_normal((n, nb))
    return dict(pick=pick, z_spt=z_spt, z_mv=z_mv, z_col=z_col, u_logd=u_logd, ebv=ebv, z_phot=z_phot)


def _stars(s, c, entries, ranges):
    """True parameters of candidate stars (absolute magnitudes, colours) and their feasible log d."""
    n, nb = len(c["pick"]), len(BAND_NAMES)
    lc = np.array([entries[k][0] for k in c["pick"]], dtype=object)
    nominal = np.array([entries[k][2] for k in c["pick"]])
    true_spt = nominal.copy()
    absmag = np.full((n, nb), np.nan)
    bv0 = np.full(n, np.nan)
    cals = default_calibrations()
    idx = [band_index(b) for b in s["bands"]]
    for cl in set(lc):  # a loop over luminosity classes, each vectorised over its stars
        sel = lc == cl
        cal = cals.by_class[cl]
        spt = np.clip(nominal[sel] + DEFAULT_SUBTYPE_SIGMA * c["z_spt"][sel], *ranges[cl])
        v = cal.evaluate(spt)
        hole = ~np.isfinite(v.absmag[:, idx]).all(axis=1)  # masked cells inside the range: keep the row's type
        if hole.any():
            spt[hole] = nominal[sel][hole]
            v = cal.evaluate(spt)
        true_spt[sel] = spt
        mv = v.absmag[:, 0] + np.sqrt(v.var_mv) * c["z_mv"][sel]
        colours = np.nan_to_num(v.colours) + cal.colour_scatter * c["z_col"][sel]
        absmag[sel] = mv[:, None] + colours @ _P.T
        bv0[sel] = colours[:, CALIBRATION_COLOURS.index("B-V")]
    R = band_coefficients(s["law"], s["rv"])
    iv = band_index("V")
    # V on the sheet = M_V + (m-M)_0 + A_V + noise, rounded to 0.001 mag: keep it inside v_range
    v_wo_dm = absmag[:, iv] + c["ebv"] * R[iv] + s["error_mag"] * c["z_phot"][:, iv]
    vlo, vhi = s["v_range"]
    dlo, dhi = np.log10(s["dist_range_pc"])
    lo = np.maximum(dlo, (vlo + 0.0005 - v_wo_dm + 5.0) / 5.0)
    hi = np.minimum(dhi, (vhi - 0.0005 - v_wo_dm + 5.0) / 5.0)
    return dict(lc=lc, nominal=nominal, true_spt=true_spt, absmag=absmag, bv0=bv0, lo=lo, hi=hi, R=R)


def _draw(s, gen_seed):
    """True parameters and noisy photometry, vectorised over stars.

    A candidate whose V cannot fall inside ``v_range`` at any distance of ``dist_range_pc`` is
    drawn again (whole star, vectorised over the rejected ones); log d is uniform over the part of
    the distance range that keeps V inside ``v_range``.
    """
    rng = np.random.default_rng(gen_seed)
    n = s["n_stars"]
    entries, ranges = _pool(s)
    classes = [e[0] for e in entries]
    per_class = {lc: classes.count(lc) for lc in dict.fromkeys(classes)}
    c = _candidates(rng, s, n, entries, per_class)
    st = _stars(s, c, entries, ranges)
    for _ in range(_MAX_REDRAWS):
        bad = np.flatnonzero(~(st["lo"] <= st["hi"]))
        if bad.size == 0:
            break
        c2 = _candidates(rng, s, bad.size, entries, per_class)
        st2 = _stars(s, c2, entries, ranges)
        for key in c:
            c[key][bad] = c2[key]
        for key in ("lc", "nominal", "true_spt", "absmag", "bv0", "lo", "hi"):
            st[key][bad] = st2[key]
    if not np.all(st["lo"] <= st["hi"]):
        raise ValueError(f"the types {', '.join(s['types'])} of class(es) {', '.join(s['classes'])} rarely or "
                         f"never reach V = {s['v_range'][0]:g}-{s['v_range'][1]:g} mag at "
                         f"{s['dist_range_pc'][0]:g}-{s['dist_range_pc'][1]:g} pc with E(B-V) "
                         f"{s['ebv_range'][0]:g}-{s['ebv_range'][1]:g}; widen v_range (--v-range) or dist_range_pc "
                         "(--dist-range), or choose other types (--types)")
    logd = st["lo"] + c["u_logd"] * (st["hi"] - st["lo"])
    dm = 5.0 * logd - 5.0
    ebv, R = c["ebv"], st["R"]
    mags = st["absmag"] + dm[:, None] + ebv[:, None] * R[None] + s["error_mag"] * c["z_phot"]
    return dict(lc=st["lc"], sptype=[f"{entries[k][1]} {entries[k][0]}" for k in c["pick"]],
                nominal=st["nominal"], true_spt=st["true_spt"], absmag=st["absmag"], bv0=st["bv0"],
                dist=10.0 ** logd, dm=dm, ebv=ebv, av=ebv * R[band_index("V")], mags=np.round(mags, 3))


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
            sheet[f"e_{b}"] = np.full(n, _round_sig(s["error_mag"], 3))
            sheet[f"e_{b}"].unit = "mag"
    truth = Table()
    truth["id"] = ids
    truth["true_sptnum"] = np.round(draw["true_spt"], 3)
    truth["true_M_V"] = draw["absmag"][:, 0]
    truth["true_bv0"] = draw["bv0"]
    truth["true_ebv"] = draw["ebv"]
    truth["true_av"] = draw["av"]
    truth["true_dm"] = draw["dm"]
    truth["true_dist_pc"] = draw["dist"]
    truth["true_dist_ly"] = (draw["dist"] * u.pc).to(u.lyr).value
    return label, sheet, truth


def make_problem_set(*, seed: int | None = None, n_stars: int = 10, types=None, classes=None, dist_range_pc=None,
                     ebv_range=None, error_mag=None, bands=None, level: str = "full", law: str = DEFAULT_LAW,
                     rv: float = DEFAULT_RV, decimals: int = DEFAULT_DECIMALS, v_range=None) -> ProblemSet:
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
    paper (``specpar.extinction.LAWS``).
    """
    drawn = seed is None
    if drawn:
        seed = secrets.randbits(SEED_BITS)
    s = _settings(level, seed, n_stars, types, classes, dist_range_pc, ebv_range, error_mag, bands, law, rv,
                  v_range)
    if not drawn and s["seed"].bit_length() < SMALL_SEED_BITS:
        warnings.warn(f"seed {s['seed']} has only {s['seed'].bit_length()} bits: a student with specpar can try "
                      f"every seed up to it, regenerate the sheet and so find the key; leave the seed out to "
                      f"draw a {SEED_BITS}-bit one (written to the key only) or give one of at least "
                      f"{SMALL_SEED_BITS} bits", SmallSeedWarning, stacklevel=2)
    gen_seed, tag = _derive(s["seed"])
    draw = _draw(s, gen_seed)
    label, sheet, truth = _tables(s, draw, tag)
    ws = worked_solutions(sheet, decimals=decimals, law=law, rv=rv, default_error=s["error_mag"])
    key = answer_key(ws)
    full = Table()
    for col in key.colnames[:2]:
        full[col] = key[col]
    for col in truth.colnames[1:]:
        kind = "pc" if col.endswith(("_pc", "_ly")) else ("num" if col == "true_sptnum" else "mag")
        full[col] = [_round_value(v, kind, decimals) for v in truth[col]]
    for col in key.colnames[2:]:
        full[col] = key[col]
    with np.errstate(invalid="ignore", divide="ignore"):
        z = (np.asarray(ws.result["dm"], float) - truth["true_dm"]) / np.asarray(ws.result["e_dm"], float)
    full["z_dm"] = np.round(z, 2)
    full.meta["specpar"] = {"problem_set": label, **{k: (list(v) if isinstance(v, tuple) else v)
                                                     for k, v in s.items()}}
    return ProblemSet(label, level, sheet, truth, full, ws, s)


# ----------------------------------------------------------------------------- writing

def _tasks(ps):
    s = ps.settings
    if ps.level == "simple":
        return ["For each star:",
                "1. Read the spectral type and take the absolute magnitude M_V of a main-sequence (class V) "
                "star of that type from the calibration rows below.",
                "2. Compute the distance modulus m - M = V - M_V (neglect extinction).",
                "3. Compute the distance in parsecs and in light years, and its uncertainty from the errors "
                "listed below."]
    return ["For each star:",
            "1. Read the spectral type and luminosity class; take M_V and the intrinsic colours from the "
            "calibration rows below.",
            "2. Compute the colour excess E(B-V) = (B-V) - (B-V)_0.",
            f"3. Compute the extinction A_V = R_V E(B-V) with R_V = {s['rv']:g}, and A in the other bands with "
            "the coefficients A/E(B-V) below.",
            "4. Compute the distance modulus corrected for extinction from each band and combine them, "
            "e.g. in a mean weighted by w = 1/(σ^2 + n s_c^2) (σ the photometric error, s_c the colour "
            "scatter below, n the number of colours linking the band to V: 0 for V, 1 for B and Ic, 1 for "
            "Ks through V-Ks, 2 for H, 3 for J).",
            "5. Give the distance in parsecs and in light years, with its uncertainty from the errors listed "
            "below."]


def _sheet_tables(ps):
    """(caption, header, rows) of the calibration rows and extinction coefficients the key uses."""
    s = ps.settings
    dec = ps.worked.decimals
    cals = default_calibrations()
    colours = ["B-V"] if ps.level == "full" else []
    for b in s["bands"]:
        colours += [c for _, c in _chain(b)]
    colours = list(dict.fromkeys(colours))
    header = ["type", "class", "M_{V}", "σ(M_{V})"] + [f"({c})_{{0}}" for c in colours]
    rows, names = [], set()
    for text in ps.sheet["sptype"]:
        name, lc = str(text).rsplit(" ", 1)
        if (name, lc) in names:
            continue
        names.add((name, lc))
        t = cals.by_class[lc].table
        r = list(np.asarray(t["sptype"], dtype=str)).index(name)
        rows.append((float(t["sptnum"][r]), lc, [name, lc, _fmt(t["M_V"][r], "mag", dec),
                                                  _fmt(t["sig_M_V"][r], "mag", 2)]
                     + [_fmt(t[c][r], "mag", dec) for c in colours]))
    order = {lc: k for k, lc in enumerate(cals.by_class)}
    rows = [r[2] for r in sorted(rows, key=lambda r: (order[r[1]], r[0]))]
    files = ", ".join(dict.fromkeys(cals.by_class[lc].path or cals.by_class[lc].name
                                    for lc in dict.fromkeys(str(t).rsplit(" ", 1)[1] for t in ps.sheet["sptype"])))
    tables = [(f"Calibration rows ({files}); σ(M_V) is the calibration's intrinsic scatter", header, rows)]
    if ps.level == "full":
        R = coefficients_at(s["law"], np.array([s["rv"]]))[0][0]
        bands = sorted(s["bands"], key=lambda b: BANDS[band_index(b)].wavelength_um)
        tables.append((f"Extinction per unit colour excess A/E(B-V), {s['law']} law ({LAWS[s['law']][1]}) at "
                       f"R_V = {s['rv']:g}", ["band"] + list(bands),
                       [["A/E(B-V)"] + [f"{R[band_index(b)]:.4f}" for b in bands]]))
    return tables


def _sheet_notes(ps):
    """Paragraphs under the tasks: what is given, the magnitude range and every error the key uses."""
    s = ps.settings
    meta = ps.worked.result.meta.get("specpar", {}) if hasattr(ps.worked.result, "meta") else {}
    sig_rv = float(meta.get("sigma_R_V", 0.2))
    cals = default_calibrations()
    used = list(dict.fromkeys(str(t).rsplit(" ", 1)[1] for t in ps.sheet["sptype"]))
    notes = [f"The stars are invented. Their apparent V magnitudes lie between {s['v_range'][0]:g} and "
             f"{s['v_range'][1]:g}."]
    errs = (["photometric errors: the e_ columns (1 sigma)"] if ps.level == "full" else
            [f"photometric errors: {_fmt_error(s['error_mag'], 'mag', 3)} mag (1 sigma) on every V"])
    errs.append("the calibration's intrinsic scatter σ(M_V) of each row")
    if ps.level == "full":
        errs.append("the scatter of the intrinsic colours, "
                    + ", ".join(f"{cals.by_class[lc].colour_scatter:g} mag (class {lc})" for lc in used)
                    + " per colour")
    errs.append(f"the spectral subtype, uncertain by ±{DEFAULT_SUBTYPE_SIGMA:g} subclass")
    if ps.level == "full" and sig_rv > 0:
        errs.append(f"R_V = {s['rv']:g} ± {sig_rv:g}")
    notes.append("The uncertainty of the key combines: " + "; ".join(errs) + ".")
    if ps.level == "simple":
        notes.append("Take E(B-V) = 0: the stars are nearby and unreddened.")
    return notes


def _sheet_rows(ps):
    """Sheet cells: magnitudes to 0.001 mag, errors as :func:`specpar.worked._fmt_error` shows them."""
    def cell(row, c):
        if c in ("id", "sptype"):
            return str(row[c])
        return _fmt_error(row[c], "mag", 3) if c.startswith("e_") else f"{row[c]:.3f}"
    return [[cell(row, c) for c in ps.sheet.colnames] for row in ps.sheet]


def _sheet_markdown(ps) -> str:
    cols = ps.sheet.colnames
    lines = [f"# Problem sheet {ps.label}", ""] + [_md_text(t) for t in _tasks(ps)] + [""]
    lines += sum(([_md_text(n), ""] for n in _sheet_notes(ps)), [])
    lines += _md_table(cols, _sheet_rows(ps)) + [""]
    for caption, header, rows in _sheet_tables(ps):
        lines += [f"## {_md_text(caption)}", ""] + _md_table(header, rows) + [""]
    return "\n".join(lines)


def _sheet_html(ps) -> str:
    """The student sheet as one self-contained HTML page (same content as the Markdown sheet)."""
    e = html.escape
    title = f"Problem sheet {ps.label}"
    cols = ps.sheet.colnames
    rows = _sheet_rows(ps)
    tasks = _tasks(ps)
    out = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
           '<meta name="viewport" content="width=device-width, initial-scale=1">',
           f"<title>{e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>", f"<h1>{e(title)}</h1>",
           f"<p>{e(tasks[0])}</p><ol>" + "".join(f"<li>{e(t.split('. ', 1)[1])}</li>" for t in tasks[1:]) + "</ol>"]
    out += [f"<p>{e(n)}</p>" for n in _sheet_notes(ps)]
    out.append(_html_table(cols, rows))
    for caption, header, trows in _sheet_tables(ps):
        out += [f"<h2>{e(caption)}</h2>", _html_table(header, trows)]
    out += ["</body>", "</html>", ""]
    return "\n".join(out)


def _key_summary(ps, dec) -> SummaryTable:
    k = ps.key
    rows = []
    for i in range(len(k)):
        rows.append([k["id"][i], k["sptype"][i], _fmt(k["true_dist_pc"][i], "pc", dec),
                     _fmt(k["true_ebv"][i], "mag", dec), _fmt(k["true_M_V"][i], "mag", dec),
                     _fmt(k["dist_pc"][i], "pc", dec),
                     f"{_fmt(k['dist_lo_pc'][i], 'pc', dec)} to {_fmt(k['dist_hi_pc'][i], 'pc', dec)}",
                     _fmt(k["ebv"][i], "mag", dec), _fmt(k["z_dm"][i], "mag", 2)])
    return SummaryTable("True values and the values a correct solution recovers",
                        ["id", "type", "true d (pc)", "true E(B-V)", "true M_{V}", "solved d (pc)", "1-sigma range",
                         "solved E(B-V)", "z"], rows)


def _key_preface(ps):
    s = ps.settings
    return [
        f"Problem set {ps.label}, level {ps.level}, seed {s['seed']}, {s['n_stars']} stars; types "
        f"{', '.join(s['types'])}; classes {', '.join(s['classes'])}; bands {', '.join(s['bands'])}; "
        f"true distances {s['dist_range_pc'][0]:g}-{s['dist_range_pc'][1]:g} pc (uniform in log d); "
        f"E(B-V) {s['ebv_range'][0]:g}-{s['ebv_range'][1]:g} mag; photometric noise {s['error_mag']:g} mag.",
        "The stars are invented: their true absolute magnitudes and colours scatter about the calibration by "
        "its intrinsic scatter and their photometry carries noise, so a correct solution recovers the "
        "'solved' values, not the true ones; z = ((m-M)_solved - (m-M)_true) / σ should mostly lie within ±2.",
    ] + (["At this level E(B-V) is 0 by construction: the flag EBV_ASSUMED_ZERO is expected, and so is "
          "ERROR_DEFAULTED (the sheet states the photometric error in words, not in a column)."]
         if ps.level == "simple" else [])


def problem_files(ps, out_dir) -> dict:
    """Paths of the files :func:`write_problem_set` writes, by role."""
    stem = Path(out_dir) / ps.label.lower()
    return {"sheet_csv": Path(f"{stem}-sheet.csv"), "sheet_md": Path(f"{stem}-sheet.md"),
            "sheet_html": Path(f"{stem}-sheet.html"),
            "key_csv": Path(f"{stem}-key.csv"), "key_md": Path(f"{stem}-key.md"),
            "key_html": Path(f"{stem}-key.html")}


def write_problem_set(ps: ProblemSet, out_dir, *, overwrite: bool = False, decimals: int | None = None) -> dict:
    """Write the sheet (CSV, Markdown, HTML) and the key (CSV, Markdown, HTML) into ``out_dir``.

    Nothing is written if any target exists and ``overwrite`` is false.
    Returns the paths written, by role.
    """
    from specpar.tableio import write_table
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise ValueError(f"{out_dir} exists and is not a folder; choose another --out-dir")
    if not out_dir.parent.is_dir():
        raise ValueError(f"folder {out_dir.parent} does not exist; create it first")
    out_dir.mkdir(exist_ok=True)
    files = problem_files(ps, out_dir)
    taken = [str(p) for p in files.values() if p.exists()]
    if taken and not overwrite:
        raise ValueError(f"output file(s) exist: {', '.join(taken)}; choose another folder or allow overwriting")
    dec = ps.worked.decimals if decimals is None else decimals
    write_table(ps.sheet, files["sheet_csv"], "csv", overwrite=overwrite)
    write_text(_sheet_markdown(ps), files["sheet_md"], overwrite=overwrite)
    write_text(_sheet_html(ps), files["sheet_html"], overwrite=overwrite)
    write_table(ps.key, files["key_csv"], "csv", overwrite=overwrite)
    title = f"Answer key {ps.label}"
    common = dict(title=title, decimals=dec, preface=_key_preface(ps), summaries=[_key_summary(ps, dec)])
    write_text(render_markdown(ps.worked, **common), files["key_md"], overwrite=overwrite)
    write_text(render_html(ps.worked, **common), files["key_html"], overwrite=overwrite)
    return files


# ----------------------------------------------------------------------------- CLI

def _cmd_problems(args) -> int:
    import sys
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", SmallSeedWarning)
        ps = make_problem_set(seed=args.seed, n_stars=args.n, types=args.types, classes=args.classes,
                              dist_range_pc=args.dist_range, ebv_range=args.ebv_range, error_mag=args.error,
                              bands=args.bands, level=args.level, law=args.law, rv=args.rv,
                              decimals=args.decimals, v_range=args.v_range)
    for w in caught:
        if issubclass(w.category, SmallSeedWarning):
            print(f"specpar: warning: {w.message}", file=sys.stderr)
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    files = write_problem_set(ps, args.out_dir, overwrite=args.overwrite)
    if not args.quiet:
        print(f"specpar: problem set {ps.label} ({ps.level}, {len(ps.sheet)} stars): "
              + ", ".join(str(p) for p in files.values()))
    return 0


def register_cli(sub) -> None:
    """Add ``specpar problems``."""
    p = sub.add_parser("problems", help="invent a problem set: student sheet and answer key",
                       description="Invent stars from the calibrations (true type, absolute magnitude and "
                                   "colours with the calibration's scatter, distance, reddening, noisy "
                                   "photometry) and write a student sheet (CSV, Markdown, HTML) and the key with "
                                   "true values, solved values and worked steps (CSV, Markdown, HTML). "
                                   "The same seed gives the same files; the seed is written to the key only.")
    p.add_argument("--seed", type=int, default=None,
                   help=f"seed, to make the same set again (default: a fresh {SEED_BITS}-bit seed, written to "
                        f"the key only); seeds under {SMALL_SEED_BITS} bits can be found by students and "
                        "get a warning")
    p.add_argument("--n", type=int, default=10, help="number of stars (default 10)")
    p.add_argument("--level", choices=list(LEVELS), default="full",
                   help="simple: V only, class V, no extinction; full: several bands, reddening, errors "
                        "(default full)")
    p.add_argument("--out-dir", required=True, help="folder for the six files")
    p.add_argument("--types", nargs="+", metavar="T", help="temperature classes (e.g. G K) or types (e.g. G2)")
    p.add_argument("--classes", nargs="+", metavar="LC", help="luminosity classes (e.g. V III)")
    p.add_argument("--bands", nargs="+", metavar="BAND", help=f"bands on the sheet, among {' '.join(BAND_NAMES)}")
    p.add_argument("--dist-range", nargs=2, type=float, metavar=("LO", "HI"), help="true distances in pc")
    p.add_argument("--ebv-range", nargs=2, type=float, metavar=("LO", "HI"), help="true E(B-V) in mag")
    p.add_argument("--error", type=float, metavar="MAG", help="photometric noise, 1 sigma (default 0.02)")
    p.add_argument("--v-range", nargs=2, type=float, metavar=("BRIGHT", "FAINT"),
                   help="apparent V magnitudes allowed on the sheet (default 3 14 simple, 4 16 full)")
    p.add_argument("--law", default=DEFAULT_LAW, choices=list(LAWS), help=f"extinction law (default {DEFAULT_LAW})")
    p.add_argument("--rv", type=float, default=DEFAULT_RV, help=f"R_V (default {DEFAULT_RV})")
    p.add_argument("--decimals", type=int, default=DEFAULT_DECIMALS,
                   help=f"decimals shown in the key (default {DEFAULT_DECIMALS})")
    p.add_argument("--overwrite", action="store_true", help="replace existing files")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=_cmd_problems)
