"""Parts shared by the Markdown and HTML renderings of a worked solution: the default summary
table, the fit table's header and cells, the answer line and the flag sentences."""
from __future__ import annotations

from specpar.core.flags import Flag, SENTENCES

from .equations import band_modulus
from .model import FitRow, SummaryTable, WorkedStar
from .numbers import fmt
from .solutions import answer_key

__all__ = ["default_summary", "fit_header", "fit_cells", "answer_line", "flag_lines"]


def default_summary(ws, dec) -> SummaryTable:
    """The answer-key summary table shown above the solutions (E(B-V), modulus, distance, flags)."""
    key = answer_key(ws, decimals=dec)
    rows = [[k["id"], k["sptype"], fmt(k["ebv"], "mag", dec), fmt(k["dm"], "mag", dec),
             fmt(k["dist_pc"], "pc", dec), fmt(k["dist_ly"], "ly", dec), k["flag_codes"] or "-"] for k in key]
    return SummaryTable("Answer key", ["id", "type", "E(B-V)", "(m-M)_{0}", "d (pc)", "d (ly)", "flags"], rows)


def fit_header():
    """Column heads of the fit table of a multi-band solution."""
    return ["observable", "value", "σ", "M", "R = A/E(B-V)", "A", "m - M - A", "residual"]


def fit_cells(f: FitRow, dec):
    """One fit-table row; for magnitudes, m - M - A and the residual (m - M - A) - (m-M)_0 are the
    differences of the displayed numbers, so they reproduce by hand."""
    if f.is_magnitude:
        dmb = band_modulus(f, dec)
        res = fmt(float(dmb) - round(f.dm_fit, dec), "mag", dec)
    else:
        dmb, res = "(colour)", fmt(f.residual, "mag", dec)
    return [f.name, fmt(f.value, "mag", dec), fmt(f.sigma, "mag", dec), fmt(f.absmag, "mag", dec),
            fmt(f.coef, "coef", dec), fmt(f.ext, "mag", dec), dmb, res]


def answer_line(s: WorkedStar, dec) -> str:
    """The star's answer in one line: distance with its 1-sigma range, in pc and ly."""
    if not s.solved:
        return "no distance"
    d = s.step("dist_pc")
    lo, hi = s.step("dist_lo_pc").value, s.step("dist_hi_pc").value
    return (f"d = {fmt(d.value, 'pc', dec)} pc ({fmt(lo, 'pc', dec)} to {fmt(hi, 'pc', dec)} pc) "
            f"= {fmt(s.step('dist_ly').value, 'ly', dec)} ly")


def flag_lines(s: WorkedStar):
    """One readable sentence per quality flag the star carries."""
    return [f"{f.name}: {SENTENCES[f]}" for f in Flag if s.flags & f]
