"""Diagrams of a cluster fit (:func:`specpar.fit_cluster`): the colour-magnitude
diagram with the fitted single-star and equal-mass binary sequences, and the
(U-B, B-V) two-colour diagram with the intrinsic and reddened loci.

Conventions of the trade: magnitudes increase downward (the ordinate axis is
inverted), colours increase to the right (redder), and in the two-colour
diagram U-B increases downward as well. Files are written atomically; the
format follows the extension (.png or .pdf).

References
----------
Johnson & Morgan 1953, ApJ 117, 313 (UBV diagrams); Hiltner & Johnson 1956,
ApJ 124, 367 (reddening line, E(U-B)/E(B-V) = 0.72 + 0.05 E(B-V)) (from memory).
"""
from __future__ import annotations

import numpy as np

from specpar.core.errors import InputError
from specpar.io.figures import new_figure, save_figure

from .reddening import ub_excess_ratio

__all__ = ["plot_cmd", "plot_two_colour", "FIGURE_SIZE", "DPI"]

#: Size (inches) and resolution (dots per inch) of the diagrams.
FIGURE_SIZE = (6.0, 7.0)
DPI = 150


def _figure():
    return new_figure(figsize=FIGURE_SIZE, constrained_layout=True)


def _save(fig, path, inputs=(), overwrite=False):
    save_figure(fig, path, dpi=DPI, inputs=inputs, overwrite=overwrite, what="plot")


def plot_cmd(result, path, *, inputs=(), overwrite=False):
    """Colour-magnitude diagram of a cluster fit.

    Stars used are shaded by membership probability; stars not used are grey
    crosses. Lines: the fitted single-star sequence and the equal-mass binary
    sequence (0.75 mag brighter).

    Parameters
    ----------
    result : ClusterResult
    path : str or Path
        ``.png`` or ``.pdf``.
    """
    pdat = result.plot_data
    if pdat.get("colour") is None:
        raise InputError("no colour index can be formed from the bands fitted; no diagram drawn")
    fig, ax = _figure()
    x, y, used = pdat["colour"], pdat["mag"], pdat["used"]
    ax.scatter(x[~used], y[~used], marker="x", s=10, c="0.6", lw=0.7, label="not used")
    sc = ax.scatter(x[used], y[used], c=pdat["p_member"][used], cmap="viridis", vmin=0, vmax=1,
                    s=12, edgecolors="none", label="stars used")
    fig.colorbar(sc, ax=ax, label="membership probability")
    seq = pdat.get("sequence")
    if seq is not None:
        lo, hi = np.nanmin(y) - 1.0, np.nanmax(y) + 1.0
        on = (seq["single"] > lo) & (seq["single"] < hi)
        ax.plot(seq["colour"][on], seq["single"][on], color="crimson", lw=1.5,
                label=f"single stars: dm = {result.dm:.2f}, E(B-V) = {result.ebv:.3f}")
        ax.plot(seq["colour"][on], seq["binary"][on], color="crimson", lw=1.0, ls="--",
                label="equal-mass binaries (0.75 mag brighter)")
    ax.set_xlabel(f"{pdat['colour_name']} (mag)")
    ax.set_ylabel(f"{pdat['magnitude']} (mag)")
    ax.invert_yaxis()
    ax.set_title(f"Main-sequence fit: d = {result.dist_pc:.0f} pc "
                 f"(+{result.dist_hi_pc - result.dist_pc:.0f} / -{result.dist_pc - result.dist_lo_pc:.0f})",
                 fontsize=10)
    ax.legend(loc="lower left", fontsize=7, framealpha=0.8)
    _save(fig, path, inputs, overwrite)


def plot_two_colour(result, path, *, inputs=(), overwrite=False):
    """(U-B, B-V) diagram: stars, intrinsic locus, locus reddened by the fitted
    E(B-V) along the curved reddening line, and a reddening vector.

    Parameters
    ----------
    result : ClusterResult
    path : str or Path
        ``.png`` or ``.pdf``.
    """
    tc = result.plot_data.get("two_colour")
    if tc is None:
        raise InputError("the two-colour diagram needs U, B and V photometry (or U-B and B-V)")
    fig, ax = _figure()
    used = result.plot_data["used"]
    pm = result.plot_data["p_member"]
    ax.scatter(tc["bv"][~used], tc["ub"][~used], marker="x", s=10, c="0.6", lw=0.7, label="not used")
    sc = ax.scatter(tc["bv"][used], tc["ub"][used], c=pm[used], cmap="viridis", vmin=0, vmax=1, s=12,
                    edgecolors="none", label="stars used")
    early = tc["early"]
    if early.any():
        ax.scatter(tc["bv"][early], tc["ub"][early], facecolors="none", edgecolors="k", s=30, lw=0.6,
                   label="early type (Q method)")
    fig.colorbar(sc, ax=ax, label="membership probability")
    ax.invert_yaxis()
    e = result.ebv
    ax.plot(tc["bv0"], tc["ub0"], color="0.2", lw=1.2, label="intrinsic locus")
    ax.plot(tc["bv0"] + e, tc["ub0"] + e * ub_excess_ratio(e), color="crimson", lw=1.5,
            label=f"reddened by E(B-V) = {e:.3f}")
    # reddening vector in the upper right, away from the sequence
    (x_lo, x_hi), (y_bottom, y_top) = ax.get_xlim(), ax.get_ylim()
    x0, y0 = x_lo + 0.62 * (x_hi - x_lo), y_top + 0.06 * (y_bottom - y_top)
    x1, y1 = x0 + 0.5, y0 + 0.5 * ub_excess_ratio(0.5)
    ax.annotate("", xy=(x1, y1), xytext=(x0, y0), arrowprops=dict(arrowstyle="->", color="navy", lw=1.3))
    ax.text(x0, y0 - 0.02 * (y_bottom - y_top), "reddening E(B-V) = 0.5\nslope 0.72 + 0.05 E(B-V)",
            color="navy", fontsize=7, va="bottom", ha="left")
    ax.set_xlabel("B-V (mag)")
    ax.set_ylabel("U-B (mag)")
    title = "Two-colour diagram"
    if np.isfinite(result.ebv_twocolour):
        title += (f": E(B-V) from this diagram alone {result.ebv_twocolour:.3f}"
                  + (f" +- {result.e_ebv_twocolour:.3f}" if np.isfinite(result.e_ebv_twocolour)
                     else " (error not determined)"))
    ax.set_title(title, fontsize=9)
    ax.legend(loc="lower left", fontsize=7, framealpha=0.8)
    _save(fig, path, inputs, overwrite)
