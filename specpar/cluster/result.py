"""What a cluster fit returns: :class:`ClusterResult` (fitted values, error
budget, goodness of fit, parallax comparison, per-star table) with its readable
summary, the per-star output columns, and the warning category of fits that ran
but need care."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .likelihood import FIELD_FRACTION_BOUNDS
from specpar.core.coldocs import column_docs

__all__ = ["GOF_LIMIT", "MEMBER_COLUMNS", "ClusterResult", "ClusterFitWarning"]

#: Reduced colour chi-square of the likely single members above which the sequence does not fit.
GOF_LIMIT = 2.0
#: Uncertainties at least this large show two significant digits with three decimals.
THREE_DECIMALS_FROM = 0.0095
#: Systematic terms smaller than this (mag) round to 0.000 and are left out of the summary.
SHOWN_TERM = 5e-4
#: Per-star output columns: unit and description.
MEMBER_COLUMNS = column_docs(__package__, "member_columns.csv")


@dataclass
class ClusterResult:
    """Outcome of :func:`fit_cluster`.

    Attributes
    ----------
    dm, e_dm : float
        True distance modulus and its 1-sigma uncertainty (mag).
    ebv, e_ebv : float
        Colour excess E(B-V) and its uncertainty (mag).
    corr : float
        Correlation coefficient of (dm, E(B-V)).
    dist_pc, dist_lo_pc, dist_hi_pc : float
        Distance: median, 16th and 84th percentiles (pc).
    binary_fraction, e_binary_fraction, field_fraction, e_field_fraction : float
        Fitted fractions (binary among members; field among stars used).
        With a membership column the field fraction is the mean prior, not fitted.
    n_input, n_used : int
        Rows given and stars used.
    law, rv : str, float
        Extinction law and fixed R_V.
    magnitude : str
        Ordinate band; ``observables`` the magnitudes/colours fitted.
    method : str
        ``"profile"`` or ``"bootstrap"`` (``n_boot`` resamples, ``seed``).
    ebv_twocolour, e_ebv_twocolour : float
        E(B-V) from the (U-B, B-V) diagram alone (NaN without U, B, V).
    ebv_q, e_ebv_q, n_q : float, float, int
        Mean E(B-V) of early-type members from the Q method.
    log_likelihood : float
    locus : str
        Description of the locus used.
    members : astropy.table.Table or pandas.DataFrame
        Every input row with the per-star columns of :data:`MEMBER_COLUMNS`.
    """

    dm: float
    e_dm: float
    ebv: float
    e_ebv: float
    corr: float
    dist_pc: float
    dist_lo_pc: float
    dist_hi_pc: float
    binary_fraction: float
    e_binary_fraction: float
    field_fraction: float
    e_field_fraction: float
    n_input: int
    n_used: int
    law: str
    rv: float
    magnitude: str
    observables: tuple
    method: str
    n_boot: int
    seed: int
    ebv_twocolour: float
    e_ebv_twocolour: float
    ebv_q: float
    e_ebv_q: float
    n_q: int
    log_likelihood: float
    locus: str
    members: object = field(repr=False, default=None)
    plot_data: dict = field(repr=False, default_factory=dict)
    e_dm_stat: float = np.nan
    e_ebv_stat: float = np.nan
    budget: dict = field(default_factory=dict)
    ebv_upper: float = np.nan
    locus_name: str = ""
    feh: float = 0.0
    e_feh: float = 0.0
    sigma_rv: float = 0.0
    ebv_prior: tuple = ()
    gof_chi2_red: float = np.nan
    n_gof: int = 0
    n_evolved: int = 0
    plx_mean: float = np.nan
    e_plx_mean: float = np.nan
    n_plx: int = 0
    plx_zero_point: float = np.nan
    dm_plx: float = np.nan
    e_dm_plx: float = np.nan
    plx_tension: float = np.nan
    dm_combined: float = np.nan
    e_dm_combined: float = np.nan
    gaia_bprp0: float = np.nan
    gaia_coefficients: dict = field(default_factory=dict)
    age_myr: float = np.nan
    age_mass_limit: float = np.nan
    n_age_limit: int = 0
    warnings: tuple = ()

    def summary(self) -> str:
        """A few readable lines."""
        if np.isfinite(self.ebv_upper):
            ebv_text = (f"E(B-V) at its lower bound {self.ebv:.3f}: E(B-V) < {self.ebv_upper:.3f} mag "
                        "(95%, total)")
        else:
            ebv_text = (f"E(B-V) {self.ebv:.3f} +- {_err(self.e_ebv)} mag (total; statistical "
                        f"{_err(self.e_ebv_stat)})")
        sys_terms = ", ".join(f"{k} {_err(v[0])}" for k, v in self.budget.items() if v[0] >= SHOWN_TERM)
        lines = [
            f"stars used {self.n_used} of {self.n_input}; ordinate {self.magnitude}; "
            f"observables {', '.join(self.observables)}"
            + (f"; {self.n_evolved} evolved stars set aside" if self.n_evolved else "")
            + (f"; age {self.age_myr:g} Myr: {self.n_age_limit} stars above the unevolved mass limit "
               f"{self.age_mass_limit:.2f} Msun set aside" if np.isfinite(self.age_myr) else ""),
            f"locus {self.locus_name}, [Fe/H] {self.feh:+.2f} +- {self.e_feh:.2f}"
            + (f"; E(B-V) prior {self.ebv_prior[0]:.3f} +- {self.ebv_prior[1]:.3f}"
               if self.ebv_prior else ""),
            f"distance modulus {self.dm:.3f} +- {_err(self.e_dm)} mag (total; statistical "
            f"{_err(self.e_dm_stat)}; systematic terms: {sys_terms or 'none'})",
            f"{ebv_text}; correlation "
            + (f"{self.corr:+.2f}" if np.isfinite(self.corr) else "not determined"),
            f"distance {self.dist_pc:.0f} pc (16-84%: "
            + (f"{self.dist_lo_pc:.0f}-{self.dist_hi_pc:.0f} pc" if np.isfinite(self.dist_lo_pc * self.dist_hi_pc)
               else "not determined") + "); "
            f"{self.law}, R_V = {self.rv:g} +- {self.sigma_rv:g}",
            f"binary fraction {_frac(self.binary_fraction, self.e_binary_fraction)}; "
            f"field fraction {_frac(self.field_fraction, self.e_field_fraction)}",
        ]
        if np.isfinite(self.gof_chi2_red):
            lines.append(f"goodness of fit: reduced colour chi-square {self.gof_chi2_red:.2f} over "
                         f"{self.n_gof} likely single members (expected ~1; above {GOF_LIMIT:g} the "
                         "sequence does not fit)")
        if self.n_plx:
            if np.isfinite(self.dm_plx):
                lines.append(
                    f"parallax: {self.n_plx} likely members, mean {self.plx_mean:.4f} +- "
                    f"{_err(self.e_plx_mean)} mas (zero point {self.plx_zero_point:+.3f} mas removed) "
                    f"-> distance modulus {self.dm_plx:.3f} +- {_err(self.e_dm_plx)}; tension with the "
                    f"main-sequence fit {self.plx_tension:+.1f} sigma; combined {self.dm_combined:.3f} "
                    f"+- {_err(self.e_dm_combined)}")
            else:
                lines.append(f"parallax: {self.n_plx} likely members, mean {self.plx_mean:.4f} +- "
                             f"{_err(self.e_plx_mean)} mas: too uncertain for a distance")
        if np.isfinite(self.gaia_bprp0):
            c = self.gaia_coefficients
            lines.append(f"Gaia-band extinction for the members' median (BP-RP)_0 = {self.gaia_bprp0:.2f} "
                         f"(Riello et al. 2021): A_G/E(B-V) {c['G']:.2f}, E(BP-RP)/E(B-V) "
                         f"{c['BP'] - c['RP']:.2f}")
        if np.isfinite(self.ebv_twocolour):
            lines.append(f"two-colour diagram alone: E(B-V) {self.ebv_twocolour:.3f} +- "
                         f"{_err(self.e_ebv_twocolour)} (statistical)")
        if self.n_q:
            lines.append(f"Q method, {self.n_q} early-type members: E(B-V) {self.ebv_q:.3f} +- "
                         f"{_err(self.e_ebv_q)}")
        lines.append(f"uncertainties: {self.method}" +
                     (f" ({self.n_boot} resamples, seed {self.seed})" if self.method == "bootstrap" else ""))
        lines += [f"WARNING: {w}" for w in self.warnings]
        return "\n".join(lines)

    def as_dict(self) -> dict:  # noqa: D102
        """Scalar results as plain Python values (for metadata and JSON)."""
        skip = ("members", "plot_data")
        out = {}
        for k, v in self.__dict__.items():
            if k in skip:
                continue
            if isinstance(v, dict):
                v = {kk: list(vv) if isinstance(vv, tuple) else vv for kk, vv in v.items()}
            out[k] = list(v) if isinstance(v, tuple) else (v.item() if hasattr(v, "item") else v)
        return out


def _err(e):
    """An uncertainty with at least two significant digits (never '0.000' or 'nan')."""
    if not np.isfinite(e):
        return "(not determined)"
    if e >= THREE_DECIMALS_FROM:
        return f"{e:.3f}"
    return f"{e:.2g}"


def _frac(v, e):
    """A fraction with its error, or as a limit when it sits on a bound."""
    if np.isfinite(e):
        return f"{v:.2f} +- {e:.2f}"
    if v <= FIELD_FRACTION_BOUNDS[0]:
        return "0 (at its lower bound; not constrained)"
    if v >= FIELD_FRACTION_BOUNDS[1]:
        return f"{v:.2f} (at its upper bound; not constrained)"
    return f"{v:.2f} (fixed)"


class ClusterFitWarning(UserWarning):
    """A cluster fit that ran but whose answer needs care (poor fit, degeneracy, tension)."""
