"""Worked solutions as one self-contained HTML page: maths as HTML sub/superscripts, inline CSS
with print styles, no scripts, fonts or other files. The page frame and the CSS are shared with
the problem sheets."""
from __future__ import annotations

import html
import re

from .equations import equation
from .keytext import answer_line, default_summary, fit_cells, fit_header, flag_lines
from .model import WorkedSolution
from .numbers import markup
from .solutions import check_decimals

__all__ = ["CSS", "html_table", "html_page", "render_html"]

CSS = """
body { font-family: 'DejaVu Serif', Georgia, 'Times New Roman', serif; color: #111; background: #fff;
       max-width: 62em; margin: 1.5em auto; padding: 0 1em; line-height: 1.45; }
h1 { font-size: 1.6em; border-bottom: 2px solid #333; padding-bottom: .2em; }
h2 { font-size: 1.25em; margin-top: 1.6em; }
table { border-collapse: collapse; margin: .6em 0; font-size: .92em; }
th, td { border: 1px solid #888; padding: .15em .5em; text-align: right; }
th { background: #eee; } td.l, th.l { text-align: left; }
section.star { border-top: 1px solid #999; margin-top: 1.2em; break-inside: avoid; page-break-inside: avoid; }
ol.steps > li { margin: .35em 0; }
.eq { font-family: 'DejaVu Serif', 'Cambria Math', serif; font-size: 1.05em; white-space: nowrap; }
.src { font-size: .82em; color: #444; }
.answer { font-weight: bold; margin: .6em 0; }
.flags { font-size: .9em; color: #7a3a00; }
@media print {
  body { max-width: none; margin: 0; font-size: 10.5pt; }
  h1 { font-size: 15pt; } h2 { font-size: 12pt; }
  section.star { page-break-inside: avoid; }
  .eq { white-space: normal; }
  th { background: none; }
}
"""


_NUMBER = re.compile(r"^(?:n/a|[-+]?[\d.]+(?: (?:to|±) [-+]?[\d.]+)?)$")


def html_table(header, rows, caption=None) -> str:
    """HTML table; text cells left-aligned, numbers right-aligned; header cells take markup."""
    cap = f"<caption>{html.escape(caption)}</caption>" if caption else ""
    text_col = [j == 0 or any(not _NUMBER.match(str(r[j])) for r in rows) for j in range(len(header))]
    head = "".join(f'<th{" class=l" if text_col[j] else ""}>{markup(str(h), True)}</th>'
                   for j, h in enumerate(header))
    body = "".join("<tr>" + "".join(f'<td{" class=l" if text_col[j] else ""}>{html.escape(str(c))}</td>'
                                    for j, c in enumerate(row)) + "</tr>" for row in rows)
    return f"<table>{cap}<thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def html_page(title: str, body) -> str:
    """A whole self-contained page: head with ``title`` and :data:`CSS`, an ``<h1>`` title, then
    the ``body`` lines."""
    e = html.escape
    head = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            f"<title>{e(title)}</title>", f"<style>{CSS}</style>", "</head>", "<body>", f"<h1>{e(title)}</h1>"]
    return "\n".join(head + list(body) + ["</body>", "</html>", ""])


def render_html(ws: WorkedSolution, *, title: str = "Worked solutions", decimals: int | None = None,
                preface=(), summaries=()) -> str:
    """Worked solutions as one self-contained HTML page (no scripts, fonts or
    other files; maths as HTML sub/superscripts; print styles included).

    Parameters are those of :func:`render_markdown`; preface paragraphs are plain text.
    """
    dec = ws.decimals if decimals is None else decimals
    check_decimals(dec)
    e = html.escape
    out = [f"<p>{e(p)}</p>" for p in preface]
    out.append("<p>Assumptions:</p><ul>" + "".join(f"<li>{e(s)}</li>" for s in ws.settings) + "</ul>")
    for t in list(summaries) or [default_summary(ws, dec)]:
        out += [f"<h2>{e(t.caption)}</h2>", html_table(t.header, t.rows)]
    for s in ws.stars:
        out.append(f'<section class="star" id="star-{s.row + 1}"><h2>{e(s.id)}: {e(s.sptype)}</h2><ol class="steps">')
        for st in s.steps:
            item = f"<b>{e(st.title)}</b>"
            eq = equation(st, dec)
            if eq:
                item += f': <span class="eq">{markup(eq, True)}</span>'
            if st.text:
                item += f"{'; ' if eq else ': '}{markup(st.text, True)}"
            if st.source:
                item += f'<div class="src">source: {e(st.source)}</div>'
            if st.key == "fit" and s.fit:
                item += html_table(fit_header(), [fit_cells(f, dec) for f in s.fit])
            out.append(f"<li>{item}</li>")
        out.append(f'</ol><p class="answer">Answer: {e(answer_line(s, dec))}</p>')
        flags = flag_lines(s)
        if flags:
            out.append('<ul class="flags">' + "".join(f"<li>{e(f)}</li>" for f in flags) + "</ul>")
        out.append("</section>")
    out.append("<h2>References</h2><ul>" + "".join(f"<li>{e(r)}</li>" for r in ws.references) + "</ul>")
    return html_page(title, out)
