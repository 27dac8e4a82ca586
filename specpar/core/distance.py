"""Distance conversions, in one place.

Pogson's distance modulus (Pogson 1856): ``m - M = 5 log10(d / 10 pc)`` for
the true (extinction-corrected) modulus, so ``d = 10**(dm/5 + 1)`` pc and the
parallax is ``1000 / d = 10**(2 - dm/5)`` mas.
"""
from __future__ import annotations

import numpy as np

__all__ = ["dm_to_pc", "dm_to_plx_mas", "pc_to_plx_mas", "plx_mas_to_dm"]


def dm_to_pc(dm):
    """Distance in pc from a distance modulus (Pogson: m - M = 5 log10(d / 10 pc))."""
    return 10.0 ** (np.asarray(dm, dtype=float) / 5.0 + 1.0)


def dm_to_plx_mas(dm):
    """Parallax in mas at distance modulus ``dm`` (Pogson 1856: dm = 5 log10(d / 10 pc))."""
    return 10.0 ** (2.0 - np.asarray(dm, float) / 5.0)


def pc_to_plx_mas(dist_pc):
    """Parallax in mas of a distance in pc (1000 / d)."""
    return 1000.0 / np.asarray(dist_pc, dtype=float)


def plx_mas_to_dm(plx_mas):
    """Distance modulus of a parallax in mas: 10 - 5 log10(plx) (inverse of :func:`dm_to_plx_mas`)."""
    return 10.0 - 5.0 * np.log10(plx_mas)
