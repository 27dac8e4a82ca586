"""Per-star conditions of a cluster fit: one bit each, a machine name and a
sentence, as for the rows of :func:`specpar.estimate` (:mod:`specpar.core.flags`).

The cluster bits have their own values (they are written to files and kept
stable); where a condition means the same as an estimate flag, its sentence is
the estimate flag's sentence.
"""
from __future__ import annotations

import enum

import numpy as np

from specpar.core.flags import SENTENCES as ROW_SENTENCES
from specpar.core.flags import Flag

__all__ = ["ClusterFlag", "SENTENCES", "BAD_ROWS", "flag_text"]


#: Every per-star condition of a cluster fit, in bit order (bit 0 first): the bit values are
#: written to files, so a new condition goes at the end. Each comes with its sentence; the
#: conditions that mean what an estimate flag means use that flag's sentence.
_CONDITIONS = (
    ("PHOT_REJECTED", ROW_SENTENCES[Flag.PHOT_REJECTED]),
    ("ERROR_DEFAULTED", ROW_SENTENCES[Flag.ERROR_DEFAULTED]),
    ("NO_ORDINATE", "no usable magnitude in the ordinate band"),
    ("NO_COLOUR", "no usable colour (needs a second band)"),
    ("OUTSIDE_LOCUS", "colours outside the reach of the locus for any allowed E(B-V)"),
    ("MAG_LIMIT", "outside the magnitude limits of the fit (e.g. turn-off cut)"),
    ("MEMBERSHIP_INVALID", "membership probability missing or outside [0, 1]"),
    ("NOT_USED", "not used in the fit"),
    ("LIKELY_FIELD", "more likely a field star than a member (p_member < 0.5)"),
    ("LIKELY_BINARY", "member more likely an unresolved binary than single"),
    ("Q_EARLY_TYPE", "early-type member: E(B-V) from the Q method given in ebv_q"),
    ("EVOLVED", "brighter than the unresolved-binary sequence at its colour (subgiant, giant, "
                "turn-off star or blue straggler): kept out of the distance fit"),
    ("BEYOND_LOCUS_END", "fainter than the faint (red) end of the locus at the fitted distance: "
                         "outside the calibrated range, kept out of the distance fit"),
    ("AGE_LIMIT", "brighter than the most massive main-sequence star still unevolved at the given "
                  "cluster age (option age): kept out of the distance fit"),
)

ClusterFlag = enum.IntFlag("ClusterFlag", [(name, 1 << bit) for bit, (name, _) in enumerate(_CONDITIONS)],
                           module=__name__)
ClusterFlag.__doc__ = "Per-star conditions of a cluster fit (values are written to files)."

SENTENCES = {ClusterFlag[name]: text for name, text in _CONDITIONS}


#: Rows that cannot enter the fit at all.
BAD_ROWS = (ClusterFlag.NO_ORDINATE | ClusterFlag.NO_COLOUR | ClusterFlag.MAG_LIMIT
            | ClusterFlag.MEMBERSHIP_INVALID | ClusterFlag.OUTSIDE_LOCUS)


def flag_text(flags):
    """Machine names and readable sentences of the bits set, one string each per row
    (built once per distinct value)."""
    uniq, inv = np.unique(flags, return_inverse=True)
    codes = np.array([",".join(f.name for f in ClusterFlag if u & f) for u in uniq], dtype=object)
    notes = np.array(["; ".join(SENTENCES[f] for f in ClusterFlag if u & f) for u in uniq], dtype=object)
    return codes[inv.ravel()].astype(str), notes[inv.ravel()].astype(str)
