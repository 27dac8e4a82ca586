"""The files of a problem set: the student sheet (tasks, what is given, the photometry, the
calibration rows and extinction coefficients the key uses) and the answer key (true values beside
the solved ones, then the worked steps), each as CSV, Markdown and HTML."""
from __future__ import annotations

import html
from pathlib import Path

import numpy as np

from specpar.calib.extinction import LAWS, coefficients_at
from specpar.calib.tables import default_calibrations
from specpar.core.bands import BANDS, band_index
from specpar.core.errors import InputError
from specpar.core.sptype import DEFAULT_SUBTYPE_SIGMA
from specpar.io.atomic import make_folder
from specpar.io.write import write_table

from .draw import SHEET_DECIMALS
from .equations import band_chain
from .model import SummaryTable
from .numbers import SHORT_DECIMALS, fmt, fmt_error, md_text
from .output import write_text
from .problems import Z_DECIMALS, ProblemSet
from .render_html import html_page, html_table, render_html
from .render_md import md_table, render_markdown

__all__ = ["problem_files", "write_problem_set", "COEF_DECIMALS"]

#: Decimals of the coefficients A/E(B-V) on the sheet (common practice).
COEF_DECIMALS = 4


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
        colours += [c for _, c in band_chain(b)]
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
        rows.append((float(t["sptnum"][r]), lc, [name, lc, fmt(t["M_V"][r], "mag", dec),
                                                  fmt(t["sig_M_V"][r], "mag", SHORT_DECIMALS)]
                     + [fmt(t[c][r], "mag", dec) for c in colours]))
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
                       [["A/E(B-V)"] + [f"{R[band_index(b)]:.{COEF_DECIMALS}f}" for b in bands]]))
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
            [f"photometric errors: {fmt_error(s['error_mag'], 'mag', SHEET_DECIMALS)} mag (1 sigma) on every V"])
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
    """Sheet cells: magnitudes to 0.001 mag, errors as :func:`specpar.teaching.numbers.fmt_error` shows them."""
    def cell(row, c):
        if c in ("id", "sptype"):
            return str(row[c])
        return (fmt_error(row[c], "mag", SHEET_DECIMALS) if c.startswith("e_")
                else f"{row[c]:.{SHEET_DECIMALS}f}")
    return [[cell(row, c) for c in ps.sheet.colnames] for row in ps.sheet]


def _sheet_markdown(ps) -> str:
    cols = ps.sheet.colnames
    lines = [f"# Problem sheet {ps.label}", ""] + [md_text(t) for t in _tasks(ps)] + [""]
    lines += sum(([md_text(n), ""] for n in _sheet_notes(ps)), [])
    lines += md_table(cols, _sheet_rows(ps)) + [""]
    for caption, header, rows in _sheet_tables(ps):
        lines += [f"## {md_text(caption)}", ""] + md_table(header, rows) + [""]
    return "\n".join(lines)


def _sheet_html(ps) -> str:
    """The student sheet as one self-contained HTML page (same content as the Markdown sheet)."""
    e = html.escape
    tasks = _tasks(ps)
    out = [f"<p>{e(tasks[0])}</p><ol>" + "".join(f"<li>{e(t.split('. ', 1)[1])}</li>" for t in tasks[1:]) + "</ol>"]
    out += [f"<p>{e(n)}</p>" for n in _sheet_notes(ps)]
    out.append(html_table(ps.sheet.colnames, _sheet_rows(ps)))
    for caption, header, trows in _sheet_tables(ps):
        out += [f"<h2>{e(caption)}</h2>", html_table(header, trows)]
    return html_page(f"Problem sheet {ps.label}", out)


def _key_summary(ps, dec) -> SummaryTable:
    k = ps.key
    rows = []
    for i in range(len(k)):
        rows.append([k["id"][i], k["sptype"][i], fmt(k["true_dist_pc"][i], "pc", dec),
                     fmt(k["true_ebv"][i], "mag", dec), fmt(k["true_M_V"][i], "mag", dec),
                     fmt(k["dist_pc"][i], "pc", dec),
                     f"{fmt(k['dist_lo_pc'][i], 'pc', dec)} to {fmt(k['dist_hi_pc'][i], 'pc', dec)}",
                     fmt(k["ebv"][i], "mag", dec), fmt(k["z_dm"][i], "mag", Z_DECIMALS)])
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
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{out_dir} exists and is not a folder; choose another --out-dir")
    if not out_dir.parent.is_dir():
        raise InputError(f"folder {out_dir.parent} does not exist; create it first")
    make_folder(out_dir)
    files = problem_files(ps, out_dir)
    taken = [str(p) for p in files.values() if p.exists()]
    if taken and not overwrite:
        raise InputError(f"output file(s) exist: {', '.join(taken)}; choose another folder or allow overwriting")
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


