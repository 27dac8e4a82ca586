"""Writing worked solutions: Markdown, HTML or the CSV answer key, atomically."""
from __future__ import annotations

from specpar.core.errors import InputError
from specpar.io.atomic import atomic_write
from specpar.io.write import write_table

from .model import WorkedSolution
from .options import DOCUMENT_FORMATS
from .render_html import render_html
from .render_md import render_markdown
from .solutions import answer_key

__all__ = ["write_text", "format_of", "write_worked"]


def write_text(text: str, path, *, inputs=(), overwrite: bool = False) -> None:
    """Write a text file atomically; refuses to write over ``inputs`` or, unless
    ``overwrite``, over an existing file (see :func:`specpar.io.atomic.atomic_write`)."""
    def writer(tmp):
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
    atomic_write(path, writer, inputs=inputs, overwrite=overwrite)


def format_of(path, fmt=None) -> str:
    """The document format (a key of :data:`~specpar.teaching.options.DOCUMENT_FORMATS`) named by
    ``fmt`` or told by the extension of ``path``; :class:`InputError` if neither tells."""
    if fmt:
        if fmt not in DOCUMENT_FORMATS:
            raise InputError(f"unknown format {fmt!r}; choose one of {', '.join(DOCUMENT_FORMATS)}")
        return fmt
    name = str(path).lower()
    for key, exts in DOCUMENT_FORMATS.items():
        if name.endswith(exts):
            return key
    raise InputError(f"cannot tell the format of {path} from its extension; use .md, .html or .csv "
                     f"or give the format ({', '.join(DOCUMENT_FORMATS)})")


def write_worked(ws: WorkedSolution, path, fmt=None, *, inputs=(), overwrite=False, title="Worked solutions",
                 decimals=None, preface=(), summaries=()) -> None:
    """Write worked solutions as Markdown, HTML or a CSV answer key (atomically)."""
    fmt = format_of(path, fmt)
    if fmt == "csv":
        write_table(answer_key(ws, decimals=decimals), path, "csv", inputs=inputs, overwrite=overwrite)
        return
    render = render_markdown if fmt == "md" else render_html
    write_text(render(ws, title=title, decimals=decimals, preface=preface, summaries=summaries), path,
               inputs=inputs, overwrite=overwrite)
