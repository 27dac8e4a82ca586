"""Problem sets for teaching labs: invented stars with realistic photometry,
a student sheet and the matching answer key.

Each star is drawn from the calibration tables themselves: a tabulated MK
type and luminosity class, a true subtype scattered about it, a true absolute
magnitude and true intrinsic colours scattered by the calibration's own
intrinsic scatter (``sig_M_V`` and ``colour_scatter``), a distance (uniform in
log d) and a colour excess (uniform). Its apparent magnitudes are
``m = M + (m-M)_0 + R_band E(B-V)`` plus Gaussian photometric noise, rounded
to 0.001 mag. The key holds the true values, the values a correct solution
recovers (those of :func:`specpar.estimate` on the sheet) and the worked steps.

Two levels:

``simple``
    V only, class V stars, no extinction (E(B-V) = 0); M_V from the main
    sequence. The solver flags E(B-V) as assumed 0, which is what this level
    intends.
``full``
    Several bands with error bars, reddening, classes V and III by default.

The same seed gives the same files, byte for byte. The seed is written into
the key but not into the sheet; choose one students cannot guess.

References
----------
Pogson 1856, MNRAS 17, 12 (distance modulus); the calibration and
extinction-law references are those of the tables and law used, listed in the key.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from .bands import BAND_NAMES, BANDS, CALIBRATION_COLOURS, band_index, chain_matrices
from .calibration import default_calibrations
from .extinction import DEFAULT_LAW, DEFAULT_RV, LAWS, band_coefficients, check_law
from .sptype import DEFAULT_SUBTYPE_SIGMA, TEMPERATURE_CLASSES
from .worked import (DEFAULT_DECIMALS, SummaryTable, WorkedSolution, _fmt, _round_value, answer_key,
                     render_html, render_markdown, worked_solutions, write_text)

__all__ = ["LEVELS", "ProblemSet", "make_problem_set", "write_problem_set", "problem_files", "register_cli"]

#: Defaults per level (every one can be overridden except the simple level's fixed rules).
LEVELS = {
    "simple": dict(types=("A", "F", "G", "K"), classes=("V",), dist_range_pc=(10.0, 300.0),
                   ebv_range=(0.0, 0.0), error_mag=0.02, bands=("V",)),
    "full": dict(types=("B", "A", "F", "G", "K"), classes=("V", "III"), dist_range_pc=(100.0, 2000.0),
                 ebv_range=(0.05, 1.0), error_mag=0.02, bands=("B", "V", "Ic", "J", "H", "Ks")),
}
MAX_STARS = 999
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


def _settings(level, seed, n_stars, types, classes, dist_range_pc, ebv_range, error_mag, bands, law, rv):
    if level not in LEVELS:
        raise ValueError(f"level must be one of {', '.join(LEVELS)}, got {level!r}")
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed!r}")
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
             error_mag=float(d["error_mag"] if error_mag is None else error_mag))
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


def _draw(s):
    """True parameters and noisy photometry, vectorised over stars."""
    rng = np.random.default_rng(s["seed"])
    n, nb, nc = s["n_stars"], len(BAND_NAMES), len(CALIBRATION_COLOURS)
    tag = "".join(chr(65 + k) for k in rng.integers(0, 26, 4))
    entries, ranges = _pool(s)
    classes = [e[0] for e in entries]
    per_class = {lc: classes.count(lc) for lc in set(classes)}
    weights = np.array([1.0 / (len(per_class) * per_class[lc]) for lc in classes])
    pick = rng.choice(len(entries), size=n, p=weights / weights.sum())
    z_spt, z_mv = rng.standard_normal(n), rng.standard_normal(n)
    z_col = rng.standard_normal((n, nc))
    logd = rng.uniform(*np.log10(s["dist_range_pc"]), size=n)
    ebv = rng.uniform(*s["ebv_range"], size=n)
    z_phot = rng.standard_normal((n, nb))

    lc = np.array([entries[k][0] for k in pick], dtype=object)
    nominal = np.array([entries[k][2] for k in pick])
    true_spt = nominal.copy()
    absmag = np.full((n, nb), np.nan)
    bv0 = np.full(n, np.nan)
    cals = default_calibrations()
    idx = [band_index(b) for b in s["bands"]]
    for c in per_class:  # a loop over luminosity classes, each vectorised over its stars
        sel = lc == c
        cal = cals.by_class[c]
        spt = np.clip(nominal[sel] + DEFAULT_SUBTYPE_SIGMA * z_spt[sel], *ranges[c])
        v = cal.evaluate(spt)
        hole = ~np.isfinite(v.absmag[:, idx]).all(axis=1)  # masked cells inside the range: keep the row's type
        if hole.any():
            spt[hole] = nominal[sel][hole]
            v = cal.evaluate(spt)
        true_spt[sel] = spt
        mv = v.absmag[:, 0] + np.sqrt(v.var_mv) * z_mv[sel]
        colours = np.nan_to_num(v.colours) + cal.colour_scatter * z_col[sel]
        absmag[sel] = mv[:, None] + colours @ _P.T
        bv0[sel] = colours[:, CALIBRATION_COLOURS.index("B-V")]
    dm = 5.0 * logd - 5.0
    R = band_coefficients(s["law"], s["rv"])
    mags = absmag + dm[:, None] + ebv[:, None] * R[None] + s["error_mag"] * z_phot
    return dict(tag=tag, lc=lc, sptype=[f"{entries[k][1]} {entries[k][0]}" for k in pick], nominal=nominal,
                true_spt=true_spt, absmag=absmag, bv0=bv0, dist=10.0 ** logd, dm=dm, ebv=ebv,
                av=ebv * R[band_index("V")], mags=np.round(mags, 3))


def _tables(s, draw):
    label = f"LAB-{draw['tag']}"
    n = s["n_stars"]
    ids = [f"{label}-{i + 1:0{max(2, len(str(n)))}d}" for i in range(n)]
    sheet = Table()
    sheet["id"] = ids
    sheet["sptype"] = draw["sptype"]
    for b in sorted(s["bands"], key=lambda name: BANDS[band_index(name)].wavelength_um):  # blue to red
        sheet[b] = draw["mags"][:, band_index(b)]
        sheet[b].unit = "mag"
        if s["level"] == "full":
            sheet[f"e_{b}"] = np.full(n, round(s["error_mag"], 3))
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


def make_problem_set(*, seed: int, n_stars: int = 10, types=None, classes=None, dist_range_pc=None,
                     ebv_range=None, error_mag=None, bands=None, level: str = "full", law: str = DEFAULT_LAW,
                     rv: float = DEFAULT_RV, decimals: int = DEFAULT_DECIMALS) -> ProblemSet:
    """Invent a problem set: stars drawn from the calibrations, with noisy photometry.

    Parameters
    ----------
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same set.
    n_stars : int
        Number of stars (1-999).
    types : sequence of str, optional
        Temperature classes (``"G"``) and/or tabulated types (``"G2"``) to draw from.
    classes : sequence of str, optional
        Luminosity classes to draw from (calibration names: ``V``, ``IV``, ``III`` ...).
    dist_range_pc : (float, float), optional
        Range of true distances (pc); drawn uniform in log d.
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

    Returns
    -------
    ProblemSet

    References
    ----------
    The absolute magnitudes, colours and their scatter come from the
    calibration tables (see their ``references``); extinction from the law's
    paper (``specpar.extinction.LAWS``).
    """
    s = _settings(level, seed, n_stars, types, classes, dist_range_pc, ebv_range, error_mag, bands, law, rv)
    draw = _draw(s)
    label, sheet, truth = _tables(s, draw)
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
                "1. Read the spectral type and look up the absolute magnitude M_V of a main-sequence (class V) "
                "star of that type.",
                "2. Compute the distance modulus m - M = V - M_V (neglect extinction).",
                "3. Compute the distance in parsecs and in light years."]
    return ["For each star:",
            "1. Read the spectral type and luminosity class; look up M_V and the intrinsic colours.",
            "2. Compute the colour excess E(B-V) = (B-V) - (B-V)_0.",
            f"3. Compute the extinction A_V = R_V E(B-V) with R_V = {s['rv']:g} (and A in the other bands "
            f"from the {s['law']} law).",
            "4. Compute the distance modulus corrected for extinction from each band and combine them.",
            "5. Give the distance in parsecs and in light years, with its uncertainty from the photometric "
            "errors and the scatter of the calibration."]


def _sheet_markdown(ps) -> str:
    s = ps.settings
    cols = ps.sheet.colnames
    lines = [f"# Problem sheet {ps.label}", ""] + _tasks(ps) + [""]
    if ps.level == "full":
        lines += [f"Magnitudes are given with their 1-sigma errors (e_ columns). Extinction law: {s['law']} "
                  f"({LAWS[s['law']][1]}), R_V = {s['rv']:g}.", ""]
    lines += ["| " + " | ".join(cols) + " |", "|" + "|".join(" --- " for _ in cols) + "|"]
    for row in ps.sheet:
        lines.append("| " + " | ".join(f"{row[c]:.3f}" if c not in ("id", "sptype") else str(row[c])
                                       for c in cols) + " |")
    return "\n".join(lines + [""])


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
          "ERROR_DEFAULTED (the sheet gives no errors; the key uses the stated noise level)."]
         if ps.level == "simple" else [])


def problem_files(ps, out_dir) -> dict:
    """Paths of the files :func:`write_problem_set` writes, by role."""
    stem = Path(out_dir) / ps.label.lower()
    return {"sheet_csv": Path(f"{stem}-sheet.csv"), "sheet_md": Path(f"{stem}-sheet.md"),
            "key_csv": Path(f"{stem}-key.csv"), "key_md": Path(f"{stem}-key.md"),
            "key_html": Path(f"{stem}-key.html")}


def write_problem_set(ps: ProblemSet, out_dir, *, overwrite: bool = False, decimals: int | None = None) -> dict:
    """Write the sheet (CSV, Markdown) and the key (CSV, Markdown, HTML) into ``out_dir``.

    Nothing is written if any target exists and ``overwrite`` is false.
    Returns the paths written, by role.
    """
    from .tableio import write_table
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
    write_table(ps.key, files["key_csv"], "csv", overwrite=overwrite)
    title = f"Answer key {ps.label}"
    common = dict(title=title, decimals=dec, preface=_key_preface(ps), summaries=[_key_summary(ps, dec)])
    write_text(render_markdown(ps.worked, **common), files["key_md"], overwrite=overwrite)
    write_text(render_html(ps.worked, **common), files["key_html"], overwrite=overwrite)
    return files


# ----------------------------------------------------------------------------- CLI

def _cmd_problems(args) -> int:
    ps = make_problem_set(seed=args.seed, n_stars=args.n, types=args.types, classes=args.classes,
                          dist_range_pc=args.dist_range, ebv_range=args.ebv_range, error_mag=args.error,
                          bands=args.bands, level=args.level, law=args.law, rv=args.rv, decimals=args.decimals)
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
                                   "photometry) and write a student sheet (CSV, Markdown) and the key with "
                                   "true values, solved values and worked steps (CSV, Markdown, HTML). "
                                   "The same seed gives the same files.")
    p.add_argument("--seed", type=int, required=True, help="random seed (not shown on the sheet)")
    p.add_argument("--n", type=int, default=10, help="number of stars (default 10)")
    p.add_argument("--level", choices=list(LEVELS), default="full",
                   help="simple: V only, class V, no extinction; full: several bands, reddening, errors "
                        "(default full)")
    p.add_argument("--out-dir", required=True, help="folder for the five files")
    p.add_argument("--types", nargs="+", metavar="T", help="temperature classes (e.g. G K) or types (e.g. G2)")
    p.add_argument("--classes", nargs="+", metavar="LC", help="luminosity classes (e.g. V III)")
    p.add_argument("--bands", nargs="+", metavar="BAND", help=f"bands on the sheet, among {' '.join(BAND_NAMES)}")
    p.add_argument("--dist-range", nargs=2, type=float, metavar=("LO", "HI"), help="true distances in pc")
    p.add_argument("--ebv-range", nargs=2, type=float, metavar=("LO", "HI"), help="true E(B-V) in mag")
    p.add_argument("--error", type=float, metavar="MAG", help="photometric noise, 1 sigma (default 0.02)")
    p.add_argument("--law", default=DEFAULT_LAW, choices=list(LAWS), help=f"extinction law (default {DEFAULT_LAW})")
    p.add_argument("--rv", type=float, default=DEFAULT_RV, help=f"R_V (default {DEFAULT_RV})")
    p.add_argument("--decimals", type=int, default=DEFAULT_DECIMALS,
                   help=f"decimals shown in the key (default {DEFAULT_DECIMALS})")
    p.add_argument("--overwrite", action="store_true", help="replace existing files")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=_cmd_problems)
