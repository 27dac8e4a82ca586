"""One way to save a figure: the format from the extension (PNG or PDF),
written atomically (never over an input, never half-written), the figure
closed afterwards."""
from __future__ import annotations

from pathlib import Path

from ..core.errors import InputError
from .atomic import atomic_write

__all__ = ["FIGURE_FORMATS", "figure_format", "new_figure", "save_figure"]

FIGURE_FORMATS = ("png", "pdf")


def figure_format(path) -> str:
    """``"png"`` or ``"pdf"`` from the file name, else :class:`InputError`."""
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".")
    if fmt not in FIGURE_FORMATS:
        raise InputError(f"figure file {path} must end in .png or .pdf, not {path.suffix or 'nothing'!r}")
    return fmt


def new_figure(*args, **kwargs):
    """``matplotlib.pyplot.subplots`` on the non-interactive Agg backend."""
    import matplotlib
    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    return plt.subplots(*args, **kwargs)


def save_figure(fig, path, *, dpi: int, inputs=(), overwrite=False, what="figure") -> None:
    """Write ``fig`` to ``path`` (format from the extension) atomically, then close it."""
    import matplotlib.pyplot as plt
    try:
        fmt = figure_format(path)
        atomic_write(path, lambda tmp: fig.savefig(tmp, format=fmt, dpi=dpi), inputs=inputs,
                     overwrite=overwrite, what=what)
    finally:
        plt.close(fig)
