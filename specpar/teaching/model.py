"""The objects of a worked solution: one :class:`Step` per line (formula, numbers put in,
result), a :class:`FitRow` per observable of a multi-band fit, a :class:`WorkedStar` per input
row and the :class:`WorkedSolution` of a whole table.

Every value is kept at full precision; rounding happens only when a step is displayed
(:mod:`specpar.teaching.equations`).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from astropy.table import Table

__all__ = ["Step", "FitRow", "WorkedStar", "SummaryTable", "WorkedSolution"]


@dataclass
class Step:
    """One line of a worked solution.

    Attributes
    ----------
    key : str
        Machine name of the quantity (``"ebv"``, ``"dm"``, ``"M_B"`` ...).
    title : str
        Readable name of the step.
    lhs, formula : str
        Symbol and symbolic right-hand side, in a light markup where
        ``_{x}`` is a subscript and ``^{x}`` a superscript.
    template : str
        The formula with numbers: ``%0``, ``%1`` ... stand for ``numbers``.
    numbers : tuple of (float, str)
        Values put into the formula and their display kind (``"mag"``,
        ``"coef"``, ``"pc"``, ``"num"``).
    value, error : float
        The result (the solver's, at full precision) and its 1-sigma error.
    kind, unit : str
        Display kind and unit of the result.
    arith : float
        What the substituted arithmetic gives at full precision (NaN where the
        result comes from a fit rather than from the numbers shown).
    source, text : str
        Where looked-up values came from; any explanation.
    convert : float
        Factor from the displayed arithmetic to the result's unit (unit conversions, e.g. pc to ly).
    """

    key: str
    title: str
    lhs: str = ""
    formula: str = ""
    template: str = ""
    numbers: tuple = ()
    value: float = np.nan
    error: float = np.nan
    kind: str = "mag"
    unit: str = "mag"
    arith: float = np.nan
    source: str = ""
    text: str = ""
    convert: float = 1.0
    template_unit: str = ""


@dataclass
class FitRow:
    """One observable in a multi-band fit: value, model terms and residual (mag)."""

    name: str
    value: float
    sigma: float
    absmag: float
    coef: float
    ext: float
    dm_band: float
    residual: float
    is_magnitude: bool
    dm_fit: float = np.nan


@dataclass
class WorkedStar:
    """Worked solution of one input row."""

    row: int
    id: str
    sptype: str
    solved: bool
    steps: list
    fit: list = field(default_factory=list)
    chi2: float = np.nan
    dof: int = 0
    flags: int = 0
    flag_codes: str = ""
    note: str = ""
    calibration: str = ""

    def step(self, key: str) -> Step:
        """The step named ``key`` (KeyError if this solution has none)."""
        for s in self.steps:
            if s.key == key:
                return s
        raise KeyError(f"star {self.id}: no step {key!r}; steps are {', '.join(s.key for s in self.steps)}")


@dataclass
class SummaryTable:
    """A small table to show above the worked solutions (cells already formatted)."""

    caption: str
    header: list
    rows: list


@dataclass
class WorkedSolution:
    """Worked solutions of a whole table.

    Attributes
    ----------
    stars : list of WorkedStar
        One per input row, in order.
    result : astropy.table.Table or pandas.DataFrame
        What :func:`specpar.estimate` returned (``explain=True``), same type as the input.
    decimals : int
        Default number of decimals shown for magnitudes.
    references : list of str
        Calibration, extinction-law and method references.
    settings : list of str
        Readable assumptions (law, R_V, method, calibration tables).
    """

    stars: list
    result: Table
    decimals: int
    references: list
    settings: list
