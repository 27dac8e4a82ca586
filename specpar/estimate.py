"""``estimate``: distances for a table of classified stars.

Every input row comes out, in order, with its input columns, the fitted
quantities, a ``flags`` bit mask (see :mod:`specpar.flags`) and a readable
``note``. The work per star depends only on that row and the options, so a
catalogue can be split into partitions (e.g. with Dask) without changing any
result, Monte Carlo draws included (see :mod:`specpar.mcdraws`).
"""
from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from astropy.table import Column, Table
from scipy.special import chdtrc

from . import __version__
from .bands import BANDS, BAND_NAMES, CALIBRATION_COLOURS, band_index, chain_matrices
from .calibration import CalibrationSet, CalibrationValues, default_calibrations
from .ebvbound import UPPER_LIMIT_LEVEL, bound_ebv
from .extinction import (DEFAULT_LAW, DEFAULT_RV, LAWS, band_coefficients, check_law,
                         coefficient_derivative, rv_limits)
from .flags import Flag, describe, flag_names
from .mcdraws import normal_draws, row_keys
from .solver import (Observables, derivative_modes, dm_to_pc, fit_draws_compact, observable_groups,
                     solve)
from .sptype import parse_sptypes

__all__ = ["estimate", "EstimateOptions", "OUTPUT_COLUMNS"]

#: Documented default photometric error (mag) where none is given (common practice
#: for catalogue photometry of moderate quality).
DEFAULT_MAG_ERROR = 0.05
#: Plausible ranges; values outside are rejected as input errors.
MAG_RANGE = (-5.0, 35.0)
#: Largest photometric error (mag) taken as a measurement. Catalogues write
#: sentinels such as 9.99 or 99 for "no error"; an error above 1 mag also means
#: the magnitude itself is no measurement worth weighting (a 1-mag error spans a
#: factor 2.5 in flux). A magnitude whose error is above this, zero, negative,
#: infinite or not a number is not used (flagged); only a missing error gets
#: the default. Common practice for catalogue photometry.
MAX_MAG_ERROR = 1.0
#: A colour column that differs from the colour of its two magnitudes in the
#: same row by more than this many combined sigmas is noted (the magnitudes are used).
COLOUR_CONFLICT_SIGMA = 3.0
#: Longest reason text echoed per spectral type in ``note`` (characters); a
#: 50 KB "type" would otherwise be copied into every note that quotes it.
NOTE_ECHO_MAX = 200
COLOUR_RANGE = (-3.0, 15.0)
CHUNK = 100_000
_P, _DEP = chain_matrices()
_COLOUR_RE = re.compile(r"^([A-Za-z]+)-([A-Za-z]+)$")

#: Output columns with units and descriptions (written into table metadata).
OUTPUT_COLUMNS = {
    "sptnum": ("", "numeric spectral type (O0=0, B0=10, ..., M0=60)"),
    "e_sptnum": ("", "subtype uncertainty used, in subclasses"),
    "lum_class": ("", "luminosity class(es) whose calibration was used"),
    "mv": ("mag", "absolute V magnitude from the calibration"),
    "e_mv": ("mag", "intrinsic scatter of M_V used (widened for blended classes)"),
    "bv0": ("mag", "intrinsic (B-V)_0 from the calibration"),
    "ebv": ("mag", "colour excess E(B-V) >= 0 (0 where the fit preferred a negative value, see ebv_upper)"),
    "e_ebv": ("mag", "1-sigma uncertainty of E(B-V); at the bound 0, the root mean square of the "
                     "likelihood truncated to E(B-V) >= 0"),
    "ebv_upper": ("mag", "where E(B-V) is held at 0: 95 % upper limit from the likelihood truncated to "
                         "E(B-V) >= 0; NaN elsewhere"),
    "ebv_unbounded": ("mag", "E(B-V) of the fit without the bound E(B-V) >= 0 (negative values show a "
                             "type/photometry mismatch)"),
    "rv": ("", "R_V = A_V / E(B-V) used (fitted when R_V is free)"),
    "e_rv": ("", "uncertainty of R_V used in the error budget"),
    "av": ("mag", "V-band extinction A_V = R_V E(B-V)"),
    "e_av": ("mag", "1-sigma uncertainty of A_V"),
    "dm": ("mag", "true distance modulus m - M - A = 5 log10(d / 10 pc)"),
    "e_dm": ("mag", "1-sigma uncertainty of the distance modulus"),
    "dist_pc": ("pc", "distance, median of its distribution"),
    "dist_lo_pc": ("pc", "distance, 16th percentile"),
    "dist_hi_pc": ("pc", "distance, 84th percentile"),
    "plx_phot_mas": ("mas", "photometric parallax 1000 / dist_pc"),
    "e_plx_phot_mas": ("mas", "1-sigma uncertainty of the photometric parallax (first order in e_dm)"),
    "chi2": ("", "chi-square of the fit over all bands"),
    "dof": ("", "degrees of freedom of chi2"),
    "n_obs": ("", "number of magnitudes and colours used"),
    "flags": ("", "bit mask of conditions, see metadata 'flag_bits'"),
    "flag_codes": ("", "names of the bits set in flags"),
    "note": ("", "readable reasons for the flags"),
    "period0_d": ("d", "fundamental-mode pulsation period used (first overtones converted)"),
}



@dataclass
class EstimateOptions:
    """Options of :func:`estimate` (every CLI option has its field here).

    Attributes
    ----------
    law : str
        Extinction law, one of ``specpar.extinction.LAWS``.
    rv, sigma_rv : float
        Total-to-selective extinction ratio and its uncertainty.
    fit_rv : bool
        Fit R_V per star where the bands constrain it.
    method : {"analytic", "mc"}
        First-order propagation or Monte Carlo draws.
    n_draws, seed : int
        Monte Carlo settings.
    default_error : float
        Photometric error (mag) assumed where none is given (flagged).
    calibrations : tuple of path
        User calibration files replacing the shipped table of their class.
    columns : dict
        Our column name -> the input's column name (e.g. ``{"V": "Vmag"}``).
    progress : bool
        Show a progress bar on long runs.
    explain : bool
        Add ``M_<band>`` (absolute magnitude used) and ``A_<band>`` (extinction)
        for every band the input measures, for worked solutions.
    plx_offset : float
        Parallax zero point in mas, subtracted from ``plx`` (corrected = plx - offset).
    plx_error_scale : float
        Factor applied to ``e_plx``.
    tension : float
        |z| above which photometric and trigonometric parallaxes are flagged.
    length_scale_pc : float
        Length scale of the exponentially decreasing space density prior.
    """

    law: str = DEFAULT_LAW
    rv: float = DEFAULT_RV
    sigma_rv: float = 0.2
    fit_rv: bool = False
    method: str = "analytic"
    n_draws: int = 1000
    seed: int = 0
    default_error: float = DEFAULT_MAG_ERROR
    calibrations: tuple = ()
    columns: dict = field(default_factory=dict)
    progress: bool = False
    explain: bool = False
    plx_offset: float = 0.0
    plx_error_scale: float = 1.0
    tension: float = 3.0
    length_scale_pc: float = 1350.0
    max_error: float = MAX_MAG_ERROR

    def check(self) -> None:
        check_law(self.law, self.rv)
        if self.method not in ("analytic", "mc"):
            raise ValueError(f"method must be 'analytic' or 'mc', not {self.method!r}")
        if not (np.isfinite(self.sigma_rv) and self.sigma_rv >= 0):
            raise ValueError(f"sigma_rv must be >= 0, got {self.sigma_rv}")
        if not (np.isfinite(self.default_error) and self.default_error > 0):
            raise ValueError(f"default_error must be > 0 mag, got {self.default_error}")
        if not (np.isfinite(self.max_error) and self.max_error > 0):
            raise ValueError(f"max_error must be a number of mag > 0, got {self.max_error}")
        if self.default_error > self.max_error:
            raise ValueError(f"default_error {self.default_error} mag is above max_error {self.max_error} mag; "
                             "lower the default error or raise max_error")
        if not (np.isfinite(self.plx_error_scale) and self.plx_error_scale > 0):
            raise ValueError(f"plx_error_scale must be > 0, got {self.plx_error_scale}")
        if not np.isfinite(self.plx_offset):
            raise ValueError(f"plx_offset must be a finite number of mas, got {self.plx_offset}")
        if not (np.isfinite(self.tension) and self.tension > 0):
            raise ValueError(f"tension threshold must be > 0, got {self.tension}")
        if not (np.isfinite(self.length_scale_pc) and self.length_scale_pc > 0):
            raise ValueError(f"length_scale_pc must be > 0, got {self.length_scale_pc}")
        if self.method == "mc" and not (isinstance(self.n_draws, (int, np.integer)) and self.n_draws >= 10):
            raise ValueError(f"n_draws must be an integer >= 10, got {self.n_draws}")


# ----------------------------------------------------------------------------- input

@dataclass
class PreparedInput:
    """Input rows turned into observables, with flags and the parsed types."""

    frame: pd.DataFrame
    obs: Observables
    obs_names: list
    flags: np.ndarray
    rejected: np.ndarray  # (N,) bit mask over observables
    defaulted: np.ndarray
    parsed: pd.DataFrame
    parse_codes: np.ndarray
    bad_error: np.ndarray = None  # (N,) bit mask: magnitude not used, its error is unusable
    bad_error_large: np.ndarray = None  # (N,) the part of bad_error whose error is above max_error
    detail: np.ndarray = None  # (N,) per-row text (e.g. conflicting colour columns)
    mapping: dict = None  # our column name -> input column used


def to_frame(table) -> pd.DataFrame:
    """The input as a pandas DataFrame in our conventions: masked cells become NaN
    (numbers) or None (anything else), byte strings become text."""
    if isinstance(table, pd.DataFrame):
        return table.reset_index(drop=True)
    if isinstance(table, Table):
        cols = {}
        for name in table.colnames:
            col = table[name]
            if getattr(col, "ndim", 1) != 1:
                continue  # multidimensional columns are carried through untouched
            data = np.ma.asarray(col)
            if data.dtype.kind == "S":  # FITS text arrives as bytes
                data = np.ma.array(np.char.decode(data.filled(b""), "utf-8", errors="replace"),
                                   mask=np.ma.getmaskarray(data))
            if data.dtype.kind in "fc":
                cols[name] = np.ma.filled(data.astype(float), np.nan)
            else:
                vals = np.ma.getdata(data).astype(object)
                vals[np.ma.getmaskarray(data)] = None  # (np.ma.filled(x, None) would use x's fill value)
                cols[name] = vals
        return pd.DataFrame(cols)
    raise TypeError(f"estimate() takes an astropy Table or a pandas DataFrame, not {type(table).__name__}")


def numeric_values(series: pd.Series):
    """Float values and a mask of entries that were given but not usable numbers."""
    if series.dtype.kind in "fiub":
        vals = series.to_numpy(dtype=float)
        given = ~np.isnan(vals)  # NaN means not measured; inf is a bad value
    else:
        s = series.astype(object).map(lambda v: v.decode("utf-8", "replace") if isinstance(v, bytes) else v)
        given = s.map(lambda v: v is not None and not (isinstance(v, float) and np.isnan(v))
                      and str(v).strip() not in ("", "--", "nan", "NaN")).to_numpy(bool)
        vals = pd.to_numeric(s.map(lambda v: v.strip() if isinstance(v, str) else v),
                             errors="coerce").to_numpy(dtype=float)
    bad = given & ~np.isfinite(vals)
    vals = np.where(np.isfinite(vals), vals, np.nan)
    return vals, bad


def _observable_columns(frame: pd.DataFrame):
    """(name, L row) for every magnitude and colour column present."""
    out = []
    for b in BAND_NAMES:
        if b in frame.columns:
            row = np.zeros(len(BANDS))
            row[band_index(b)] = 1.0
            out.append((b, row))
    for col in frame.columns:
        m = _COLOUR_RE.match(str(col))
        if m and m[1] in BAND_NAMES and m[2] in BAND_NAMES and m[1] != m[2]:
            row = np.zeros(len(BANDS))
            row[band_index(m[1])] += 1.0
            row[band_index(m[2])] -= 1.0
            out.append((str(col), row))
    return out


def _shorten_details(details):
    """Cut per-type reasons (which quote the type) to :data:`NOTE_ECHO_MAX` characters."""
    out = np.asarray(details, dtype=object).copy()
    for i, d in enumerate(out):  # once per distinct type, not per row
        if isinstance(d, str) and len(d) > NOTE_ECHO_MAX:
            out[i] = d[:NOTE_ECHO_MAX] + f"... [{len(d)} characters]"
    return out


def prepare_observables(frame_in: pd.DataFrame, opts: EstimateOptions) -> PreparedInput:
    """Read photometry and spectral types exactly as :func:`estimate` does.

    Used by the worked solutions and the cluster fit so that every part of
    specpar sees the same observables, rejections and default errors.
    """
    from specpar.io.columns import resolve_columns
    frame, mapping = resolve_columns(frame_in, opts.columns)
    N = len(frame)
    if "sptype" not in frame.columns:
        if "period_d" not in frame.columns:
            raise ValueError("the input has no 'sptype' column; name yours with columns={'sptype': ...} "
                             f"(CLI: --col sptype=YOURNAME); the input has {', '.join(map(str, frame_in.columns))}")
        frame["sptype"] = None  # pulsating stars only: the period replaces the type
    specs = _observable_columns(frame)
    if not specs:
        raise ValueError("the input has no photometry columns; expected any of "
                         f"{', '.join(BAND_NAMES)} or colours such as B-V (map yours with --col); "
                         f"the input has {', '.join(map(str, frame_in.columns))}")
    flags = np.zeros(N, np.int64)
    K = len(specs)
    y = np.full((N, K), np.nan)
    sig = np.full((N, K), np.nan)
    rejected = np.zeros(N, np.int64)
    defaulted = np.zeros(N, np.int64)
    bad_error = np.zeros(N, np.int64)
    bad_error_large = np.zeros(N, np.int64)
    max_error = getattr(opts, "max_error", MAX_MAG_ERROR)
    for k, (name, row) in enumerate(specs):
        vals, bad = numeric_values(frame[name])
        lo, hi = MAG_RANGE if row.sum() != 0 else COLOUR_RANGE
        with np.errstate(invalid="ignore"):
            bad |= (vals < lo) | (vals > hi)
        vals = np.where(bad, np.nan, vals)
        ecol = f"e_{name}"
        if ecol in frame.columns:
            errs, ebad = numeric_values(frame[ecol])  # ebad: given, but not a finite number
            with np.errstate(invalid="ignore"):
                elarge = np.isfinite(errs) & (errs > max_error)
                ebad |= (errs <= 0) | elarge
            ebad &= np.isfinite(vals)  # (only matters where the magnitude is given)
            bad_error_large |= (elarge & ebad).astype(np.int64) << k
            errs = np.where(ebad, np.nan, errs)
            vals = np.where(ebad, np.nan, vals)
        else:
            errs = np.full(N, np.nan)
            ebad = np.zeros(N, bool)
        with np.errstate(invalid="ignore"):
            need = np.isfinite(vals) & ~(errs > 0)
        errs = np.where(need, opts.default_error, np.where(errs > 0, errs, np.nan))
        rejected |= bad.astype(np.int64) << k
        bad_error |= ebad.astype(np.int64) << k
        defaulted |= need.astype(np.int64) << k
        y[:, k], sig[:, k] = vals, errs
    # a colour column is used only where its two magnitudes are not both measured
    mag_ok = {name: np.isfinite(y[:, k]) for k, (name, row) in enumerate(specs) if row.sum() != 0}
    kof = {name: k for k, (name, _) in enumerate(specs)}
    detail = np.full(N, "", dtype=object)
    for k, (name, row) in enumerate(specs):
        m = _COLOUR_RE.match(name)
        if m and m[1] in mag_ok and m[2] in mag_ok:
            both = mag_ok[m[1]] & mag_ok[m[2]]
            k1, k2 = kof[m[1]], kof[m[2]]
            diff = y[:, k] - (y[:, k1] - y[:, k2])
            with np.errstate(invalid="ignore"):
                s_comb = np.sqrt(sig[:, k] ** 2 + sig[:, k1] ** 2 + sig[:, k2] ** 2)
                conflict = both & (np.abs(diff) > COLOUR_CONFLICT_SIGMA * s_comb)
            if conflict.any():
                idx = np.flatnonzero(conflict)
                text = pd.Series([f"{name} given {y[i, k]:.3f} differs from {m[1]} - {m[2]} = "
                                  f"{y[i, k1] - y[i, k2]:.3f} by {diff[i]:+.3f} mag "
                                  f"({abs(diff[i]) / s_comb[i]:.1f} sigma): {m[1]} and {m[2]} used"
                                  for i in idx], dtype=object).to_numpy()
                detail[idx] = np.where(detail[idx] != "", detail[idx] + "; ", "") + text
            y[both, k] = np.nan
            defaulted[both] &= ~np.int64(1 << k)
    flags |= np.where((rejected | bad_error) != 0, int(Flag.PHOT_REJECTED), 0)
    flags |= np.where(defaulted != 0, int(Flag.ERROR_DEFAULTED), 0)
    codes, uniques = pd.factorize(frame["sptype"], use_na_sentinel=True)
    parsed = parse_sptypes(list(uniques) + [None])
    parsed["detail"] = _shorten_details(parsed["detail"].to_numpy(object))
    codes = np.where(codes < 0, len(uniques), codes)
    L = np.stack([row for _, row in specs])
    return PreparedInput(frame, Observables(y, sig, L), [n for n, _ in specs], flags, rejected,
                         defaulted, parsed, codes, bad_error=bad_error, bad_error_large=bad_error_large,
                         detail=detail, mapping=mapping)


# ----------------------------------------------------------------------------- solving

def _free_rv(obs, cal, modes, law, codes=None):
    """Per-star R_V from the chi-square profile on a grid (vectorised over stars)."""
    lo, hi = rv_limits(law)
    grid = np.round(np.arange(lo, hi + 1e-9, 0.1), 3)
    coeffs = band_coefficients(law, grid)
    chi2 = np.empty((len(grid), obs.y.shape[0]))
    for i, R in enumerate(coeffs):  # loop over the R_V grid, not over stars
        r = solve(obs, cal.absmag, modes, cal.var_mv, cal.var_colour, R, 0 * R, codes=codes)
        chi2[i] = np.nan_to_num(r.chi2, nan=np.inf)
    i0 = np.clip(np.argmin(chi2, axis=0), 1, len(grid) - 2)
    n = np.arange(chi2.shape[1])
    c_m, c_0, c_p = chi2[i0 - 1, n], chi2[i0, n], chi2[i0 + 1, n]
    with np.errstate(invalid="ignore", divide="ignore"):
        curv = (c_p - 2 * c_0 + c_m) / 0.01  # second derivative per unit R_V^2
        shift = np.where(curv > 0, -0.5 * (c_p - c_m) / 0.1 / curv, 0.0)
        e_rv = np.sqrt(2.0 / curv)
    rv = np.clip(grid[i0] + np.clip(shift, -0.1, 0.1), lo, hi)
    return rv, np.where(np.isfinite(e_rv), e_rv, np.inf)


def coefficients_at(law, rv):
    """Extinction coefficients and derivatives at per-star R_V (interpolated on a grid)."""
    lo, hi = rv_limits(law)
    grid = np.round(np.arange(lo, hi + 1e-9, 0.05), 3)
    tab = band_coefficients(law, grid)
    R = np.stack([np.interp(rv, grid, tab[:, b]) for b in range(len(BANDS))], axis=-1)
    dtab = np.gradient(tab, grid, axis=0)
    dR = np.stack([np.interp(rv, grid, dtab[:, b]) for b in range(len(BANDS))], axis=-1)
    return R, dR


#: Gauss-Hermite nodes and weights for averaging over the subtype uncertainty
_GH_X, _GH_W = np.polynomial.hermite_e.hermegauss(9)
_GH_W = _GH_W / _GH_W.sum()


def _subtype_modes(cals, parsed, nominal):
    """Subtype-uncertainty modes per distinct type, (U, Q, n_bands).

    The calibration is read at the Gauss-Hermite nodes ``s + e_s x_q`` of the
    subtype's normal distribution; mode q is ``sqrt(w_q) (M(s + e_s x_q) - M(s))``,
    so ``sum_q m_q m_q^T`` is the mean squared deviation of the absolute
    magnitudes from the values at the stated type. Unlike a first-order
    derivative this follows the curvature and kinks of the tables (e.g. the
    Balmer maximum near A0). Nodes beyond a table's end fall back to the
    local derivative.
    """
    s = parsed["sptnum"].to_numpy(float)
    e = np.nan_to_num(parsed["e_sptnum"].to_numpy(float))
    lb, lf = parsed["lc_bright"].to_numpy(object), parsed["lc_faint"].to_numpy(object)
    U, Q = len(s), len(_GH_X)
    vals = cals.evaluate((s[:, None] + e[:, None] * _GH_X[None]).ravel(), np.repeat(lb, Q), np.repeat(lf, Q))
    dev = vals.absmag.reshape(U, Q, -1) - nominal.absmag[:, None, :]
    linear = nominal.dabsmag[:, None, :] * (e[:, None] * _GH_X[None])[:, :, None]
    dev = np.where(np.isfinite(dev), dev, linear)
    return np.sqrt(_GH_W)[None, :, None] * np.nan_to_num(dev)


def _solve_chunk(obs, cal, modes, opts, codes=None):
    """Analytic fit of a block of rows; ``cal``/``modes`` hold one row per
    calibration code (``codes``, default one per row)."""
    N = obs.y.shape[0]
    rv = np.full(N, float(opts.rv))
    sig_rv = np.full(N, float(opts.sigma_rv))
    rv_flag = np.zeros(N, bool)
    free = None
    args = (obs, cal.absmag, modes, cal.var_mv, cal.var_colour)
    if opts.fit_rv:
        rv_fit, e_fit = _free_rv(obs, cal, modes, opts.law, codes)
        base = solve(*args, band_coefficients(opts.law, opts.rv), coefficient_derivative(opts.law, opts.rv),
                     opts.sigma_rv, opts.rv, codes=codes)
        n_mag = (np.isfinite(obs.y) & obs.is_magnitude).sum(axis=1)
        free = (e_fit < 1.0) & (n_mag >= 3) & (base.ebv > 3 * base.e_ebv)
        rv = np.where(free, rv_fit, rv)
        sig_rv = np.where(free, 0.0, sig_rv)  # a fitted parameter now, not a prior
        rv_flag = ~free
        R, dR = coefficients_at(opts.law, rv)
    else:
        R, dR = band_coefficients(opts.law, opts.rv), coefficient_derivative(opts.law, opts.rv)
    keep = opts.method == "mc"
    res = solve(*args, R, dR, sig_rv, rv, rv_free=free, keep_weights=keep, codes=codes)
    if opts.fit_rv:
        weak = free & ~(res.e_rv < 1.0)  # R_V not pinned down once dm and E(B-V) are free too
        if weak.any():
            free &= ~weak
            rv, sig_rv = np.where(weak, opts.rv, rv), np.where(weak, opts.sigma_rv, sig_rv)
            R, dR = coefficients_at(opts.law, rv)
            res = solve(*args, R, dR, sig_rv, rv, rv_free=free, keep_weights=keep, codes=codes)
            rv_flag = ~free
    return res, rv_flag


#: Monte Carlo work per batch: rows x draws held in memory at once.
MC_BATCH_DRAWS = 200_000
#: Memory one batch of Monte Carlo draws may take (bytes); a request whose single
#: star needs more is refused with a clear message instead of running out of memory.
MC_MEMORY_BUDGET = 2 * 1024 ** 3


def _mc_bytes_per_star(n_draws, k):
    """Rough peak memory of the Monte Carlo draws of one star with k observables."""
    return int(n_draws) * 8 * (6 * k + 24)


def _nan_percentiles(d, qs):
    """Per-row percentiles (linear interpolation) ignoring NaN, as ``np.nanpercentile``
    with its default method, through one sort per row."""
    s = np.sort(d, axis=1)  # NaN sort last
    c = np.isfinite(s).sum(axis=1)
    out = []
    rows = np.arange(s.shape[0])
    for q in qs:
        pos = q / 100.0 * np.maximum(c - 1, 0)
        lo = np.floor(pos).astype(np.intp)
        hi = np.minimum(lo + 1, np.maximum(c - 1, 0))
        t = pos - lo
        a, b = s[rows, lo], s[rows, hi]
        v = np.where(t >= 0.5, b - (b - a) * (1 - t), a + (b - a) * t)
        out.append(np.where(c > 0, v, np.nan))
    return out


def _monte_carlo(obs, cal, modes, cals, sptnum, e_spt, lcb, lcf, keys, res, opts, codes=None):
    """Monte Carlo: redraw photometry, subtype, M_V and colour scatter and R_V; refit.

    Each star is refitted with its nominal fit's weights held fixed, on the
    observables that fit used only (rows grouped by their number of
    observables, as in :func:`specpar.solver.solve`). Draws are made in
    batches of rows, so memory is bounded by :data:`MC_BATCH_DRAWS`, not by
    the number of rows. ``cal`` holds one row per calibration code
    (``codes``, default one per star). The draws of a star depend only on
    its row key, the seed and the component (see :mod:`specpar.mcdraws`).
    """
    N, K = obs.y.shape
    n = int(opts.n_draws)
    codes = np.arange(N) if codes is None else np.asarray(codes, np.intp)
    per_star = _mc_bytes_per_star(n, K)
    if per_star > MC_MEMORY_BUDGET:
        most = MC_MEMORY_BUDGET // _mc_bytes_per_star(1, K)
        raise ValueError(f"{n} Monte Carlo draws per star need about {per_star / 1024 ** 3:.1f} GB for "
                         f"one star with {K} observables; at most {most} draws fit in the "
                         f"{MC_MEMORY_BUDGET / 1024 ** 3:.0f} GB budget: ask for fewer draws (--mc)")
    out = {k: np.full(N, np.nan) for k in ("dm", "e_dm", "ebv", "e_ebv", "d50", "d16", "d84", "corr")}
    ncol = len(CALIBRATION_COLOURS)
    # random components, numbered as they always were: photometry 1..K, M_V, colours, subtype, R_V
    c_mv, c_col, c_spt, c_rv = K + 1, K + 2 + np.arange(ncol), K + 2 + ncol, K + 3 + ncol
    lo_rv, hi_rv = rv_limits(opts.law)
    L = obs.L
    touches = (L != 0).T.astype(float)  # (nb, K)
    l1, LP = L.sum(axis=1), L @ _P  # (K,), (K, ncol)
    # the calibration along each distinct type's subtype distribution, tabulated once
    # at z = -6..6 sigma and interpolated linearly per draw; kept in observable space
    own = ~np.isin(lcb, list(cals.by_class))  # e.g. period-luminosity rows: each row its own relation
    ucode = _combine_codes(sptnum, e_spt, lcb, lcf, np.where(own, np.arange(N), -1))
    first = np.unique(ucode, return_index=True)[1]
    ucode = np.unique(ucode, return_inverse=True)[1].ravel()
    zg = np.linspace(-6.0, 6.0, 121)
    x = sptnum[first, None] + e_spt[first, None] * zg[None]
    G = zg.size
    table = cals.evaluate(x.ravel(), np.repeat(lcb[first], G), np.repeat(lcf[first], G)).absmag
    table = table.reshape(first.size, G, len(BANDS))
    linear = own[first]
    fc = codes[first]
    table[linear] = (cal.absmag[fc][linear, None, :]
                     + cal.dabsmag[fc][linear, None, :] * (e_spt[first][linear, None] * zg[None])[:, :, None])
    # a band without calibration must not poison the others through NaN * 0
    tab_obs = np.where(np.isnan(table) @ touches > 0, np.nan, np.nan_to_num(table) @ L.T)  # (U, G, K)
    tab_flat = tab_obs.ravel()
    # extinction coefficients on the R_V grid of coefficients_at, in observable space
    rgrid = np.round(np.arange(lo_rv, hi_rv + 1e-9, 0.05), 3)
    rtab = band_coefficients(opts.law, rgrid) @ L.T  # (n_rv, K)
    rslope = (rtab[1:] - rtab[:-1]) / (rgrid[1:] - rgrid[:-1])[:, None]
    rstep = (rgrid[-1] - rgrid[0]) / (rgrid.size - 1)
    sd_mv = np.sqrt(np.nan_to_num(cal.var_mv))
    sd_col = np.sqrt(np.nan_to_num(cal.var_colour))
    n_done = 0
    bar = None
    if opts.progress and N * n > 2_000_000:
        from tqdm.auto import tqdm
        bar = tqdm(total=N, unit="row", desc="specpar Monte Carlo")
    for grows, gkidx in observable_groups(res.valid):
        k = gkidx.shape[1]
        step = max(1, MC_BATCH_DRAWS // (n * max(k, 1)))
        for s in range(0, grows.size, step):
            b, kidx = grows[s:s + step], gkidx[s:s + step]
            m = b.size
            kb = keys[b]
            # subtype draw: calibration read along the tabulated subtype distribution
            pos = (np.clip(normal_draws(kb, opts.seed, c_spt, n), zg[0], zg[-1]) - zg[0]) / (zg[1] - zg[0])
            j0 = np.minimum(pos.astype(int), G - 2)
            frac = (pos - j0)[:, :, None]
            at = ((ucode[b][:, None, None] * G + j0[:, :, None]) * K + kidx[:, None, :])  # (m, n, k)
            ta, tb = tab_flat[at], tab_flat[at + K]
            model = ta * (1.0 - frac) + tb * frac
            # M_V scatter moves every band alike; colour scatter moves the bands downstream
            c = codes[b]
            model += (sd_mv[c][:, None] * normal_draws(kb, opts.seed, c_mv, n))[:, :, None] * l1[kidx][:, None, :]
            LPg = LP[kidx]  # (m, k, ncol)
            for ci in range(ncol):
                need = np.flatnonzero((sd_col[c, ci] > 0) & (LPg[:, :, ci] != 0).any(axis=1))
                if need.size:
                    z = sd_col[c[need], ci][:, None] * normal_draws(kb[need], opts.seed, c_col[ci], n)
                    model[need] += z[:, :, None] * LPg[need, None, :, ci]
            # photometry: each observable keeps its own random component
            y = np.take_along_axis(obs.y[b], kidx, axis=1)
            sig = np.take_along_axis(obs.sigma[b], kidx, axis=1)
            ydiff = np.empty((m, n, k))
            for slot in range(k):
                ydiff[:, :, slot] = y[:, slot, None] - model[:, :, slot]
            for kk in np.unique(kidx):
                r, slot = np.nonzero(kidx == kk)
                z = normal_draws(kb[r], opts.seed, 1 + int(kk), n)
                ydiff[r, :, slot] += sig[r, slot][:, None] * z
            # R_V draw: coefficients interpolated on the grid, in observable space
            rv_d = np.clip(res.rv[b, None] + res.e_rv[b, None] * normal_draws(kb, opts.seed, c_rv, n),
                           lo_rv, hi_rv)
            j = np.clip(((rv_d - rgrid[0]) / rstep).astype(np.intp), 0, rgrid.size - 2)
            dx = (rv_d - rgrid[j])[:, :, None]
            at = j[:, :, None] * K + kidx[:, None, :]
            a1 = rslope.ravel()[at] * dx + rtab.ravel()[at]
            a0 = l1[kidx]  # (m, k)
            W = res.weights[b[:, None, None], kidx[:, :, None], kidx[:, None, :]]  # (m, k, k)
            theta = fit_draws_compact(W, res.colour_known[b], res.mag_known[b], ydiff, a0, a1)
            _mc_summary(out, b, theta)
            n_done += m
            if bar is not None:
                bar.update(m)
    nodata = ~res.valid.any(axis=1)
    # rows without data: what the padded refit always gave them (a zero solution)
    for key in ("dm", "e_dm", "ebv", "e_ebv"):
        out[key][nodata] = 0.0
    for key in ("d50", "d16", "d84"):
        out[key][nodata] = dm_to_pc(0.0)
    if bar is not None:
        bar.update(N - n_done)
        bar.close()
    return out


def _mc_summary(out, b, theta):
    """Mean, scatter and distance percentiles of the draws of rows ``b``."""
    dm, eb = theta[..., 0], theta[..., 1]
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows give NaN, as wanted
        out["dm"][b] = np.nanmean(dm, axis=1)
        out["e_dm"][b] = np.nanstd(dm, axis=1)
        out["ebv"][b] = np.nanmean(eb, axis=1)
        out["e_ebv"][b] = np.nanstd(eb, axis=1)
        d = dm_to_pc(dm)
        out["d16"][b], out["d50"][b], out["d84"][b] = _nan_percentiles(d, (16, 50, 84))
        dmc, ebc = dm - out["dm"][b, None], eb - out["ebv"][b, None]
        out["corr"][b] = np.nanmean(dmc * ebc, axis=1) / (out["e_dm"][b] * out["e_ebv"][b])


# ----------------------------------------------------------------------------- output

def _combine_codes(*arrays) -> np.ndarray:
    """One integer code per distinct combination of the given per-row keys."""
    code = np.zeros(len(arrays[0]), np.int64)
    for a in arrays:
        k, u = pd.factorize(a)
        code, _ = pd.factorize(code * (len(u) + 1) + k)
    return code


def _notes(flags, detail, rejected, defaulted, obs_names, bad_error=None, bad_error_large=None,
           max_error=MAX_MAG_ERROR):
    """Readable note and flag names per row.

    The flag sentences and band lists are built once per distinct combination
    (there are few); the per-row detail text is appended with a vectorised join.
    """
    bad_error = np.zeros_like(rejected) if bad_error is None else bad_error
    large = np.zeros_like(rejected) if bad_error_large is None else bad_error_large
    codes = _combine_codes(flags, rejected, defaulted, bad_error, large)
    first = np.unique(codes, return_index=True)[1]
    texts, names = [], []
    for i in first:
        f, r, x, be = int(flags[i]), int(rejected[i]), int(defaulted[i]), int(bad_error[i])
        big = be & int(large[i])
        parts = [describe(f)] if f else []
        if r:
            parts.append("rejected: " + ", ".join(n for k, n in enumerate(obs_names) if r >> k & 1))
        band_list = lambda m: ", ".join(n for k, n in enumerate(obs_names) if m >> k & 1)  # noqa: E731
        if big:
            parts.append(f"not used, error above max_error = {max_error:g} mag (a catalogue's 'no error' "
                         f"value or a useless measurement): {band_list(big)}")
        if be & ~big:
            parts.append(f"not used, error zero, negative or not a finite number: {band_list(be & ~big)}")
        if x:
            parts.append("default error used for: " + ", ".join(n for k, n in enumerate(obs_names) if x >> k & 1))
        texts.append("; ".join(parts))
        names.append(",".join(flag_names(f)))
    prefix = np.array(texts, dtype=object)[codes]
    detail = np.asarray(detail, dtype=object)
    has_d, has_p = detail != "", prefix != ""
    note = np.where(has_d, np.where(has_p, prefix + "; ", "") + detail, prefix)
    return note, np.array(names, dtype=object)[codes]


def _metadata(opts, cals, obs_names):
    return {
        "specpar_version": __version__,
        "method": opts.method,
        "n_draws": int(opts.n_draws) if opts.method == "mc" else None,
        "seed": int(opts.seed) if opts.method == "mc" else None,
        "extinction_law": opts.law,
        "extinction_law_reference": LAWS[opts.law][1],
        "R_V": float(opts.rv),
        "sigma_R_V": float(opts.sigma_rv),
        "R_V_free": bool(opts.fit_rv),
        "band_coefficients_A_over_EBV": {b: round(float(c), 4) for b, c in
                                          zip(BAND_NAMES, band_coefficients(opts.law, opts.rv))},
        "calibrations": cals.describe(),
        "default_error_mag": float(opts.default_error),
        "observables_used": list(obs_names),
        "flag_bits": {f.name: int(f) for f in Flag},
        "ebv_bound": (
            "E(B-V) >= 0: where the fit gives E(B-V) < 0, E(B-V) is held at 0 and dm is the fit with "
            "E(B-V) = 0; e_ebv is the root mean square of the likelihood truncated to E(B-V) >= 0, e_dm "
            "adds the dm shift that E(B-V) within that range allows, ebv_upper is the "
            f"{100 * UPPER_LIMIT_LEVEL:g} % upper limit and ebv_unbounded the value before the bound "
            "(flag EBV_AT_BOUND; with Monte Carlo, the draws' mean and covariance are bounded the same "
            "way and the distance percentiles of those rows follow from the bounded dm and e_dm)"),
        "assumptions": (
            "Absolute magnitudes and intrinsic colours are mean relations for each spectral type and "
            "luminosity class; single stars, solar-neighbourhood metallicity and one extinction law "
            "with a single R_V along the line of sight are assumed. Systematic errors of tens of per "
            "cent in distance are typical of spectroscopic parallaxes."),
    }


def estimate(table, *, law=DEFAULT_LAW, rv=DEFAULT_RV, sigma_rv=0.2, fit_rv=False,
             method="analytic", n_draws=1000, seed=0, default_error=DEFAULT_MAG_ERROR,
             calibrations=(), columns=None, progress=False, explain=False, plx_offset=0.0,
             plx_error_scale=1.0, tension=3.0, length_scale_pc=1350.0, max_error=MAX_MAG_ERROR):
    """Spectroscopic-parallax distances for every row of a table.

    Parameters
    ----------
    table : astropy.table.Table or pandas.DataFrame
        Columns: ``sptype`` (MK type), any of the magnitudes
        ``U B V Rc Ic J H Ks G BP RP`` with errors ``e_<band>``, and/or colours
        such as ``B-V`` with ``e_B-V``. Other columns are carried through.
        Optional: ``plx``, ``e_plx`` (mas) add the parallax cross-check;
        ``period_d`` (days) and ``pmode`` (``F`` or ``1O``) make a row a
        classical Cepheid whose absolute magnitudes come from period-luminosity
        relations instead of the spectral type (see :mod:`specpar.cepheid`).
    law : str
        Extinction law (``CCM89``, ``O94``, ``F99``, ``F19``, ``G23``); default F99.
    rv, sigma_rv : float
        R_V and its uncertainty (default 3.1 +- 0.2).
    fit_rv : bool
        Fit R_V where at least three magnitudes and a clear reddening constrain it.
    method : {"analytic", "mc"}
        Error propagation: first order (default) or Monte Carlo.
    n_draws, seed : int
        Monte Carlo draws per star and seed; the same seed gives the same output.
    default_error : float
        Error (mag) assumed for a magnitude given without one (flagged).
    calibrations : sequence of path
        Calibration files replacing the shipped table of their luminosity class.
    columns : dict, optional
        Our column names to yours, e.g. ``{"V": "Vmag", "sptype": "SpT"}``.
    progress : bool
        Progress bar (tqdm) on long runs.
    explain : bool
        Also return ``M_<band>`` and ``A_<band>`` for the bands measured.
    plx_offset, plx_error_scale, tension, length_scale_pc : float
        Parallax cross-check settings, used when the input has ``plx`` and
        ``e_plx`` (mas): zero point subtracted, error inflation, |z| threshold,
        length scale of the space-density prior (pc).
    max_error : float
        Largest photometric error (mag) accepted (default :data:`MAX_MAG_ERROR`,
        1 mag). A magnitude whose error is above it, zero, negative, infinite or
        not a number (catalogue sentinels such as 9.99) is not used and the row
        is flagged; only a missing error gets ``default_error``.

    Returns
    -------
    astropy.table.Table or pandas.DataFrame
        Same type as ``table``: the input columns then the results
        (see :data:`OUTPUT_COLUMNS`); assumptions in ``meta`` (``attrs`` for pandas).

    References
    ----------
    Pogson 1856, MNRAS 17, 12 (magnitude scale); the calibration and extinction
    references are listed in the output metadata.
    """
    opts = EstimateOptions(law=law, rv=rv, sigma_rv=sigma_rv, fit_rv=fit_rv, method=method,
                           n_draws=n_draws, seed=seed, default_error=default_error,
                           calibrations=tuple(calibrations or ()), columns=dict(columns or {}),
                           progress=progress, explain=explain, plx_offset=plx_offset,
                           plx_error_scale=plx_error_scale, tension=tension,
                           length_scale_pc=length_scale_pc, max_error=max_error)
    return run_estimate(table, opts)


@dataclass
class _RowCalibration:
    """Calibration values per distinct type (``ucal``, ``modes``) and, per row, the
    index into them (``code``) with the type, class, flags and details of the row."""

    ucal: CalibrationValues
    modes: np.ndarray
    code: np.ndarray
    sptnum: np.ndarray
    e_spt: np.ndarray
    lcb: np.ndarray
    lcf: np.ndarray
    flags: np.ndarray
    detail: np.ndarray
    cep: object = None

    def rows(self, sl):
        """Calibration values and subtype modes for the rows in slice ``sl``."""
        idx = self.code[sl]
        return CalibrationValues(*(getattr(self.ucal, f)[idx] for f in CalibrationValues.FIELDS)), self.modes[idx]


def _calibrate_rows(prep, cals, opts) -> _RowCalibration:
    """Read the calibration once per distinct spectral type; period-luminosity
    relations replace it for rows with a pulsation period."""
    p, c = prep.parsed, prep.parse_codes
    ucal = cals.evaluate(p["sptnum"].to_numpy(float), p["lc_bright"].to_numpy(object),
                         p["lc_faint"].to_numpy(object))
    outside = np.isfinite(p["sptnum"].to_numpy(float)) & ~np.isfinite(ucal.absmag[:, 0])
    rc = _RowCalibration(
        ucal, _subtype_modes(cals, p, ucal), c.copy(), p["sptnum"].to_numpy(float)[c],
        p["e_sptnum"].to_numpy(float)[c], p["lc_bright"].to_numpy(object)[c],
        p["lc_faint"].to_numpy(object)[c],
        prep.flags | p["flags"].to_numpy(np.int64)[c] | np.where(outside[c], int(Flag.TYPE_OUTSIDE_CALIBRATION), 0),
        p["detail"].to_numpy(object)[c])
    if "period_d" not in prep.frame.columns:
        return rc
    from .cepheid import cepheid_calibration
    cep = rc.cep = cepheid_calibration(prep.frame, opts)
    rows = np.flatnonzero(cep.mask)
    if rows.size:
        n_u = len(rc.ucal.var_mv)
        rc.ucal = CalibrationValues(*(np.concatenate([getattr(rc.ucal, f), getattr(cep.values, f)])
                                      for f in CalibrationValues.FIELDS))
        cmodes = np.zeros((rows.size,) + rc.modes.shape[1:])
        cmodes[:, :1] = derivative_modes(cep.values.dabsmag, np.ones(rows.size))
        rc.modes = np.concatenate([rc.modes, cmodes])
        rc.code[rows] = n_u + np.arange(rows.size)
        rc.sptnum[rows], rc.e_spt[rows] = 0.0, 1.0  # the modes carry the relation's spread
        rc.lcb[rows] = rc.lcf[rows] = cep.label
        rc.flags[rows] = prep.flags[rows]  # the spectral type is not used for these rows
        rc.detail[rows] = ""
    rc.flags |= cep.flags
    rc.detail = np.where(cep.detail != "", cep.detail, rc.detail)
    return rc


def _solve_rows(frame, prep, rc, cals, opts) -> dict:
    """Solve every row in chunks (progress bar on long runs); arrays over all rows."""
    N = len(frame)
    parts = []
    chunks = range(0, max(N, 1), CHUNK)
    if opts.progress and N > CHUNK:
        from tqdm.auto import tqdm
        chunks = tqdm(chunks, total=len(chunks), unit="chunk", desc="specpar estimate")
    for s in chunks:
        sl = slice(s, min(N, s + CHUNK))
        codes = rc.code[sl]
        obs = Observables(prep.obs.y[sl], prep.obs.sigma[sl], prep.obs.L)
        r, rv_flag = _solve_chunk(obs, rc.ucal, rc.modes, opts, codes)
        part = {k: getattr(r, k) for k in ("dm", "e_dm", "ebv", "e_ebv", "corr", "rv", "e_rv", "n_used",
                                            "colour_known", "chi2", "dof", "uncalibrated")}
        part.update(rv_flag=rv_flag)
        if opts.method == "mc":
            mc = _monte_carlo(obs, rc.ucal, rc.modes, cals, rc.sptnum[sl], rc.e_spt[sl], rc.lcb[sl],
                              rc.lcf[sl], row_keys(frame.iloc[sl]), r, opts, codes)
            part.update(_merge_monte_carlo(mc, r))
        else:
            part.update(d50=dm_to_pc(r.dm), d16=dm_to_pc(r.dm - r.e_dm), d84=dm_to_pc(r.dm + r.e_dm))
        part.update(_apply_ebv_bound(part))
        parts.append(part)
    return {k: np.concatenate([part[k] for part in parts])[:N] for k in parts[0]}


def _chi2_sf(x, dof):
    """Chi-square survival function, value for value what ``scipy.stats.chi2.sf`` returns.

    1 at x <= 0, 0 at x = inf, NaN at NaN, ``chdtrc`` in between (the function
    ``scipy.stats.chi2.sf`` calls); calling it directly skips the import of
    ``scipy.stats`` and the argument checks of the generic distribution class.
    ``dof`` must be >= 1.
    """
    x = np.asarray(x, dtype=float)
    inside = (x > 0) & (x < np.inf)
    out = np.where(x <= 0, 1.0, 0.0)
    out[np.isnan(x)] = np.nan
    out[inside] = chdtrc(np.broadcast_to(dof, x.shape)[inside], x[inside])
    return out


def _apply_ebv_bound(part) -> dict:
    """E(B-V) >= 0 (see :mod:`specpar.ebvbound`): rows fitted below 0 are held at 0, with
    the distance modulus of that fit, errors widened by what the bound allows, and the
    distance percentiles of the bounded distance modulus (Monte Carlo rows too)."""
    b = bound_ebv(part["dm"], part["e_dm"], part["ebv"], part["e_ebv"], part["corr"], part["chi2"],
                  part["dof"], part["colour_known"])
    at = b.at_bound
    with np.errstate(invalid="ignore"):
        p_value = np.where(b.dof > 0, _chi2_sf(b.chi2, np.maximum(b.dof, 1)), np.nan)
    return dict(
        dm=b.dm, e_dm=b.e_dm, ebv=b.ebv, e_ebv=b.e_ebv, chi2=b.chi2, dof=b.dof, p_value=p_value,
        at_bound=at, ebv_upper=b.ebv_upper, ebv_unbounded=b.ebv_unbounded, e_ebv_unbounded=b.e_ebv_unbounded,
        d50=np.where(at, dm_to_pc(b.dm), part["d50"]), d16=np.where(at, dm_to_pc(b.dm - b.e_dm), part["d16"]),
        d84=np.where(at, dm_to_pc(b.dm + b.e_dm), part["d84"]))


def _merge_monte_carlo(mc, r) -> dict:
    """Monte Carlo summaries where the analytic fit has an answer, the analytic fit's
    (missing or pinned) values where it has none.

    A row without a magnitude (or without any usable observable) has no distance
    modulus, and a row without colour information has E(B-V) pinned at 0; the draws
    of such rows are refits of nothing and must not turn into numbers (they would
    all give dm = 0, i.e. 10 pc). So the rows come out exactly as in analytic mode:
    same missing values, hence the same flags and notes.
    """
    has_dm = np.isfinite(r.dm)
    has_ebv = np.isfinite(r.ebv) & r.colour_known
    nan = np.full(has_dm.shape, np.nan)
    return dict(
        dm=np.where(has_dm, mc["dm"], nan), e_dm=np.where(has_dm, mc["e_dm"], r.e_dm),
        ebv=np.where(has_ebv, mc["ebv"], r.ebv), e_ebv=np.where(has_ebv, mc["e_ebv"], r.e_ebv),
        corr=np.where(has_dm & has_ebv, mc["corr"], r.corr),
        d50=np.where(has_dm, mc["d50"], nan), d16=np.where(has_dm, mc["d16"], nan),
        d84=np.where(has_dm, mc["d84"], nan))


def _fit_flags(fit, typed, opts) -> np.ndarray:
    """Flag bits that follow from the fit itself."""
    nodist = ~np.isfinite(fit["dm"])
    flags = np.where(nodist, int(Flag.NO_DISTANCE), 0)
    flags |= np.where(~nodist & ~fit["colour_known"], int(Flag.EBV_ASSUMED_ZERO), 0)
    flags |= np.where(fit["uncalibrated"] & typed, int(Flag.BAND_UNCALIBRATED), 0)
    with np.errstate(invalid="ignore"):
        raw, e_raw = fit["ebv_unbounded"], fit["e_ebv_unbounded"]
        flags |= np.where(fit["colour_known"] & (raw + 3 * e_raw < 0), int(Flag.EBV_NEGATIVE), 0)
        flags |= np.where(fit["at_bound"], int(Flag.EBV_AT_BOUND), 0)
        flags |= np.where(fit["p_value"] < 1e-3, int(Flag.BANDS_DISAGREE), 0)
    if opts.fit_rv:
        flags |= np.where(fit["rv_flag"] & ~nodist, int(Flag.RV_UNCONSTRAINED), 0)
    return flags


def _join_detail(a, b):
    """Element-wise '; '-join of two object arrays of text, skipping empty ones."""
    a, b = np.asarray(a, dtype=object), np.asarray(b, dtype=object)
    return np.where(b != "", np.where(a != "", a + "; ", "") + b, a)


def _ebv_detail(fit, flags) -> np.ndarray:
    """The numbers behind EBV_NEGATIVE, per row ('' elsewhere); vectorised.

    Only the significantly negative rows get numbers in the note (the type/photometry
    inconsistency); any other row at the bound has them in ``ebv_unbounded`` and
    ``ebv_upper`` and shares the flag's sentence.
    """
    from .numfmt import decimals_for, format_each, format_pm_array
    out = np.full(len(flags), "", dtype=object)
    rows = np.flatnonzero(fit["at_bound"] & ((flags & int(Flag.EBV_NEGATIVE)) != 0))
    if rows.size == 0:
        return out
    raw, e_raw, upper = fit["ebv_unbounded"][rows], fit["e_ebv_unbounded"][rows], fit["ebv_upper"][rows]
    sigma = format_each("%.1f", -raw / e_raw)
    text = "unbounded fit E(B-V) = " + format_pm_array(raw, e_raw) + " (" + sigma + " sigma below 0)"
    lim = np.full(rows.size, "", dtype=object)
    dec = decimals_for(upper)
    for d in np.unique(dec):
        lim[dec == d] = format_each(f"%.{d}f", upper[dec == d])
    out[rows] = text + f"; E(B-V) held at 0, {100 * UPPER_LIMIT_LEVEL:g} % upper limit " + lim
    return out


def run_estimate(table, opts: EstimateOptions):
    """:func:`estimate` with an :class:`EstimateOptions`."""
    opts.check()
    cals = CalibrationSet(opts.calibrations) if opts.calibrations else default_calibrations()
    frame = to_frame(table)
    prep = prepare_observables(frame, opts)
    N = len(frame)
    rc = _calibrate_rows(prep, cals, opts)
    fit = _solve_rows(frame, prep, rc, cals, opts)
    u, code = rc.ucal, rc.code  # per-row values are read through the code, not copied whole
    flags = rc.flags | _fit_flags(fit, np.isfinite(u.absmag[code, band_index("V")]), opts)
    detail = _join_detail(rc.detail, _ebv_detail(fit, flags))
    nodist = ~np.isfinite(fit["dm"])
    ebv, e_ebv, rv_used, e_rv, e_dm = fit["ebv"], fit["e_ebv"], fit["rv"], fit["e_rv"], fit["e_dm"]
    plx = 1000.0 / fit["d50"]
    # class label built once per distinct (bright, faint) pair, then spread to the rows
    lcode = _combine_codes(rc.lcb, rc.lcf)
    first = np.unique(lcode, return_index=True)[1]
    lb, lf = rc.lcb[first], rc.lcf[first]
    lum = np.where(lb == lf, lb, lb.astype(str) + "-" + lf.astype(str)).astype(str)[lcode]
    results = {
        "sptnum": rc.sptnum, "e_sptnum": rc.e_spt, "lum_class": lum.astype(str),
        "mv": u.absmag[code, band_index("V")], "e_mv": np.sqrt(u.var_mv[code]),
        "bv0": u.colours[code, CALIBRATION_COLOURS.index("B-V")],
        "ebv": ebv, "e_ebv": e_ebv, "rv": rv_used, "e_rv": e_rv, "av": rv_used * ebv,
        "e_av": np.sqrt((rv_used * e_ebv) ** 2 + (ebv * e_rv) ** 2),
        "dm": fit["dm"], "e_dm": e_dm, "dist_pc": fit["d50"], "dist_lo_pc": fit["d16"],
        "dist_hi_pc": fit["d84"], "plx_phot_mas": plx, "e_plx_phot_mas": plx * np.log(10) / 5.0 * e_dm,
        "chi2": fit["chi2"], "dof": np.maximum(fit["dof"], 0), "n_obs": fit["n_used"],
        "ebv_upper": fit["ebv_upper"], "ebv_unbounded": fit["ebv_unbounded"],
    }
    for k in ("dm", "e_dm", "dist_pc", "dist_lo_pc", "dist_hi_pc", "plx_phot_mas", "e_plx_phot_mas"):
        results[k] = np.where(nodist, np.nan, results[k])  # colours alone still give E(B-V)
    info = dict(OUTPUT_COLUMNS)
    cep = rc.cep
    if cep is not None and cep.mask.any():
        # period-luminosity rows: full M_V error, no spectral type, the period actually used
        results["e_mv"][cep.mask] = cep.e_mv
        for k in ("sptnum", "e_sptnum"):
            results[k] = np.where(cep.mask, np.nan, results[k])
        results["period0_d"] = np.full(N, np.nan)
        results["period0_d"][cep.mask] = cep.period0_d
    if "plx" in prep.frame.columns:
        # trigonometric parallaxes: tension, diagnosis and combined distance
        from .parallax import COLUMNS as plx_columns, crosscheck
        info.update(plx_columns)
        extra, pflags, pdetail = crosscheck(prep.frame, results, cals=cals, sptnum=rc.sptnum,
                                            lc_bright=rc.lcb, lc_faint=rc.lcf, opts=opts)
        results.update(extra)
        flags |= pflags
        detail = np.where(pdetail != "", np.where(detail != "", detail + "; ", "") + pdetail, detail)
    if prep.detail is not None:
        detail = np.where(prep.detail != "", np.where(detail != "", detail + "; ", "") + prep.detail, detail)
    note, codes = _notes(flags, detail, prep.rejected, prep.defaulted, prep.obs_names, prep.bad_error,
                         prep.bad_error_large, getattr(opts, "max_error", MAX_MAG_ERROR))
    results.update(flags=flags, flag_codes=codes, note=note)
    if opts.explain:
        R_rows, _ = coefficients_at(opts.law, rv_used)
        for b in np.flatnonzero((prep.obs.L != 0).any(axis=0)):
            name = BAND_NAMES[b]
            results[f"M_{name}"] = u.absmag[code, b]
            results[f"A_{name}"] = np.where(nodist, np.nan, ebv * R_rows[:, b])
    meta = _metadata(opts, cals, prep.obs_names)
    meta["column_mapping"] = dict(prep.mapping or {})
    meta["max_error_mag"] = float(opts.max_error)
    meta["columns"] = {k: info[k][1] for k in results if k in info}
    if cep is not None:
        from .cepheid import load_pl_calibration
        meta["cepheid_calibration"] = load_pl_calibration().describe()
    if "plx" in prep.frame.columns:
        from .parallax import metadata as plx_metadata
        meta["parallax"] = plx_metadata(opts)
    return attach_results(table, frame, results, meta, info)


def attach_results(table, frame, results, meta, info=None):
    """The input table (same type) with ``results`` appended as columns.

    Input columns whose names clash with a result are kept as ``input_<name>``;
    units and descriptions come from ``info`` (default :data:`OUTPUT_COLUMNS`);
    ``meta`` goes to ``meta['specpar']`` (``attrs`` for pandas).
    """
    info = OUTPUT_COLUMNS if info is None else info
    clash = [k for k in results if k in frame.columns]
    if isinstance(table, pd.DataFrame):
        out = table.reset_index(drop=True).rename(columns={k: f"input_{k}" for k in clash})
        for k, v in results.items():
            out[k] = v
        out.attrs["specpar"] = meta
        return out
    out = Table(table, copy=True)
    for k in clash:
        out.rename_column(k, f"input_{k}")
    for k, v in results.items():
        unit, desc = info.get(k) or ("mag", f"{'absolute magnitude' if k[0] == 'M' else 'extinction'} in {k[2:]}")
        out[k] = Column(v, dtype=object) if np.asarray(v).dtype.kind == "O" else v
        out[k].description = desc
        if unit:
            out[k].unit = unit
    out.meta["specpar"] = meta
    return out
