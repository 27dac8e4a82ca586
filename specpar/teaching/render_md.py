"""Worked solutions as Markdown (CommonMark; input text escaped so it cannot become markup)."""
from __future__ import annotations

from .keytext import answer_line, default_summary, fit_cells, fit_header, flag_lines
from .model import WorkedSolution
from .equations import equation
from .numbers import markup, md_text
from .solutions import check_decimals

__all__ = ["md_table", "render_markdown"]


def _md_cell(text) -> str:
    return md_text(text).replace("|", "\\|").replace("\n", " ")


def md_table(header, rows) -> list:
    """A Markdown table (header cells take the light markup; cells escaped)."""
    lines = ["| " + " | ".join(_md_cell(markup(str(h), False)) for h in header) + " |",
             "|" + "|".join(" --- " for _ in header) + "|"]
    lines += ["| " + " | ".join(_md_cell(c) for c in row) + " |" for row in rows]
    return lines


def render_markdown(ws: WorkedSolution, *, title: str = "Worked solutions", decimals: int | None = None,
                    preface=(), summaries=()) -> str:
    """Worked solutions as Markdown.

    Parameters
    ----------
    ws : WorkedSolution
    title : str
    decimals : int, optional
        Override ``ws.decimals``.
    preface : sequence of str
        Paragraphs placed under the title.
    summaries : sequence of SummaryTable
        Tables placed before the solutions.
    """
    dec = ws.decimals if decimals is None else decimals
    check_decimals(dec)
    out = [f"# {md_text(title)}", ""]
    for p in preface:
        out += [md_text(p), ""]
    out += ["Assumptions:", ""] + [f"- {md_text(s)}" for s in ws.settings] + [""]
    for t in list(summaries) or [default_summary(ws, dec)]:
        out += [f"## {md_text(t.caption)}", ""] + md_table(t.header, t.rows) + [""]
    for s in ws.stars:
        out += [f"## {md_text(s.id)}: {md_text(s.sptype)}", ""]
        for n, st in enumerate(s.steps, 1):
            line = f"{n}. **{st.title}**"
            eq = equation(st, dec)
            if eq:
                line += f": `{markup(eq, False)}`"
            if st.text:
                text = md_text(markup(st.text, False))
                line += f"; {text}" if eq else f": {text}"
            out.append(line)
            if st.source:
                out.append(f"   - source: {md_text(st.source)}")
            if st.key == "fit" and s.fit:
                out += [""] + ["   " + ln for ln in md_table(fit_header(), [fit_cells(f, dec) for f in s.fit])]
                out.append("")
        out += ["", f"**Answer:** {md_text(answer_line(s, dec))}", ""]
        flags = flag_lines(s)
        if flags:
            out += ["Flags:", ""] + [f"- {md_text(f)}" for f in flags] + [""]
    out += ["## References", ""] + [f"- {md_text(r)}" for r in ws.references] + [""]
    return "\n".join(out)
