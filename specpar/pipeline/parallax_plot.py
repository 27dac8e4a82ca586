"""Figure of the parallax cross-check: photometric against trigonometric
parallax (1:1 line, stars in tension marked) and a histogram of z."""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..core.errors import InputError
from ..core.flags import Flag
from ..io.figures import figure_format, save_figure
from .frames import numeric_values, to_frame
from .options import OPTIONS

__all__ = ["plot_parallax", "parallax_figure"]

#: z drawn in the histogram from -Z_SPAN to +Z_SPAN; stars beyond fall in the end bins.
Z_SPAN = 6
#: Histogram bins over [-Z_SPAN, Z_SPAN] (a quarter sigma wide).
Z_BINS = 48
#: Resolution of the saved figure (dots per inch).
FIGURE_DPI = 120

_PLOT_COLUMNS = (("plx_corr_mas", "plx"), ("e_plx_corr_mas", "e_plx"), ("plx_phot_mas",),
                 ("e_plx_phot_mas",), ("plx_z",), ("flags",))


def _plot_frame(table) -> pd.DataFrame:
    frame = to_frame(table)
    found = {options[-1]: next((c for c in options if c in frame.columns), None) for options in _PLOT_COLUMNS}
    missing = [" or ".join(options) for options in _PLOT_COLUMNS if found[options[-1]] is None]
    if missing:
        raise InputError(f"the table lacks {', '.join(missing)}; plot-parallax needs the output of "
                         "'specpar estimate' run on an input with plx and e_plx")
    return pd.DataFrame({name: numeric_values(frame[col])[0] for name, col in found.items()})


def _scatter(ax, data: pd.DataFrame, threshold: float) -> None:
    """Left panel: trigonometric against photometric parallax."""
    flags = np.nan_to_num(data["flags"].to_numpy(), nan=0).astype(np.int64)
    tense = (flags & int(Flag.PLX_TENSION)) != 0
    ok = (np.isfinite(data["plx"]) & np.isfinite(data["plx_phot_mas"])).to_numpy()
    for sel, style in ((ok & ~tense, dict(color="0.35", label="consistent")),
                       (ok & tense, dict(color="tab:red", label=f"|z| > {threshold:g}"))):
        ax.errorbar(data["plx_phot_mas"][sel], data["plx"][sel], xerr=data["e_plx_phot_mas"][sel],
                    yerr=data["e_plx"][sel], fmt="o", ms=3, elinewidth=0.6, alpha=0.8, **style)
    if ok.any():
        _scatter_scales(ax, data, ok)
    ax.set_xlabel("photometric parallax (mas)")
    ax.set_ylabel("trigonometric parallax (mas)")
    ax.legend(loc="upper left", fontsize=8)


def _scatter_scales(ax, data: pd.DataFrame, ok) -> None:
    """1:1 line and logarithmic (or, with parallaxes <= 0, symmetric logarithmic) axes."""
    from matplotlib.ticker import FuncFormatter
    span = np.concatenate([data["plx"][ok], data["plx_phot_mas"][ok]])
    lim = (span.min(), span.max())
    positive = span[span > 0]
    if positive.size:  # equality is only possible for positive parallaxes: no line below zero
        ax.plot((positive.min(), lim[1]), (positive.min(), lim[1]), color="k", lw=1,
                label="1:1 (equal parallaxes)")
    if lim[0] > 0:
        ax.set_xscale("log"), ax.set_yscale("log")
    else:  # zero or negative parallaxes: logarithmic only beyond the typical error
        lin = float(np.nanmedian(data["e_plx"][ok]))
        ax.set_xscale("symlog", linthresh=lin), ax.set_yscale("symlog", linthresh=lin)
    plain = FuncFormatter(lambda v, _pos: f"{v:g}")  # 0.1, 1, -1, 10 rather than 10^-1 or -10^0
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_formatter(plain)


def _histogram(hx, data: pd.DataFrame, threshold: float) -> None:
    """Right panel: histogram of z against the unit normal it should follow."""
    z = data["plx_z"].to_numpy()
    z = z[np.isfinite(z)]
    bins = np.linspace(-Z_SPAN, Z_SPAN, Z_BINS + 1)
    outside = int((np.abs(z) >= Z_SPAN).sum())
    hx.hist(np.clip(z, -Z_SPAN, Z_SPAN), bins=bins, color="0.6",
            label=f"{z.size} stars" + (f" ({outside} with |z| > {Z_SPAN} in the end bins)" if outside else ""))
    x = np.linspace(-Z_SPAN, Z_SPAN, 300)
    inside = z.size - outside
    hx.plot(x, inside * (bins[1] - bins[0]) * np.exp(-0.5 * x ** 2) / np.sqrt(2 * np.pi), "k-",
            label=f"expected if both distances are right:\nN(0, 1) scaled to the {inside} stars with "
                  f"|z| < {Z_SPAN}")
    for sign in (-1, 1):
        hx.axvline(sign * threshold, color="tab:red", ls="--", lw=1)
    hx.set_xlabel("z: trigonometric minus photometric parallax, in sigma")
    hx.set_ylabel("stars")
    hx.legend(loc="upper left", fontsize=8)


def parallax_figure(table, threshold: float):
    """The figure of :func:`plot_parallax` (a :class:`matplotlib.figure.Figure`), not saved.

    ``table`` is an output of :func:`specpar.estimate` for an input with
    parallaxes; ``threshold`` the |z| drawn.
    """
    from matplotlib.figure import Figure
    data = _plot_frame(table)
    fig = Figure(figsize=(10, 4.5), layout="constrained")
    ax, hx = fig.subplots(1, 2)
    _scatter(ax, data, threshold)
    _histogram(hx, data, threshold)
    return fig


def plot_parallax(table, path, *, threshold=None, overwrite=False, inputs=()):
    """Photometric versus trigonometric parallax, and a histogram of z.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        Output of :func:`specpar.estimate` for an input with parallaxes.
    path : str or Path
        Figure file, ``.png`` or ``.pdf``; written atomically.
    threshold : float, optional
        |z| threshold drawn; default from the table's metadata, else the
        default of :func:`specpar.estimate`'s ``tension``.
    overwrite : bool
        Replace an existing file.
    inputs : sequence of path
        Files that must never be written over.

    References
    ----------
    The unit normal drawn is what z follows when both distances are right
    (probability integral transform; common practice).
    """
    figure_format(path)  # a bad file name is refused before any work
    if threshold is None:
        meta = (table.attrs if isinstance(table, pd.DataFrame) else table.meta).get("specpar", {})
        threshold = float((meta or {}).get("parallax", {}).get("plx_tension_threshold",
                                                               OPTIONS["tension"].default))
    if threshold is not None and not (np.isfinite(threshold) and threshold > 0):
        raise InputError(f"tension threshold must be a finite number > 0 (in sigma, e.g. 3), got {threshold}")
    fig = parallax_figure(table, threshold)
    save_figure(fig, path, dpi=FIGURE_DPI, inputs=inputs, overwrite=overwrite, what="figure")
