"""Benchmark: ``estimate`` on synthetic rows, Parquet in and out, beside a
plain per-row Python version of the same two-band computation."""
from __future__ import annotations

import math
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from .calibration import default_calibrations
from .extinction import DEFAULT_LAW, DEFAULT_RV, band_coefficients
from .estimate import estimate
from .sptype import parse_one
from .tableio import read_table, write_table

__all__ = ["synthetic_catalogue", "synthetic_mixed", "per_row_two_band", "run_benchmark"]

_TYPES = [f"{c}{s}{sep}{lc}" for c in "BAFGKM" for s in (0, 2, 5, 7) for lc in ("V", "IV", "III")
          for sep in ("", " ")]


def synthetic_catalogue(n: int, seed: int = 1) -> pd.DataFrame:
    """``n`` invented stars with a type, B and V (errors included)."""
    rng = np.random.default_rng(seed)
    v = rng.uniform(6, 16, n)
    return pd.DataFrame({
        "id": np.char.add("BENCH-", np.arange(n).astype(str)),
        "sptype": np.asarray(_TYPES, dtype=object)[rng.integers(0, len(_TYPES), n)],
        "B": v + rng.uniform(-0.2, 1.8, n), "e_B": np.full(n, 0.02),
        "V": v, "e_V": np.full(n, 0.02),
    })


#: Chance that an invented star has each band (they sum to 3.1 bands per star on average,
#: the mix described in issue 13: Gaia-like bands common, Johnson U, Rc rare).
MIXED_BAND_CHANCE = {"V": 0.5, "B": 0.4, "G": 0.6, "BP": 0.3, "RP": 0.3, "J": 0.3, "H": 0.2,
                     "Ks": 0.3, "U": 0.05, "Rc": 0.05, "Ic": 0.1}


def synthetic_mixed(n: int, seed: int = 1) -> pd.DataFrame:
    """``n`` invented stars of mixed types with a random subset of the 11 bands.

    Each band is present independently with the chance in
    :data:`MIXED_BAND_CHANCE` (3.1 bands per star on average), so the file
    holds many different sets of observables. Magnitudes are the shipped
    calibration's absolute magnitudes plus a distance modulus (5-12 mag),
    reddening E(B-V) 0-1 (F99, R_V = 3.1) and 0.02-0.05 mag noise; bands the
    calibration lacks for a type get an arbitrary value (and are flagged).
    Invented stars: they exercise the pipeline, they prove no science.
    """
    from .bands import BAND_NAMES
    rng = np.random.default_rng(seed)
    types = np.asarray(_TYPES, dtype=object)[rng.integers(0, len(_TYPES), n)]
    uniq, inv = np.unique(types, return_inverse=True)
    parsed = [parse_one(t) for t in uniq]
    cal = default_calibrations().evaluate(np.array([p["sptnum"] for p in parsed], float),
                                          np.array([p["lc_bright"] for p in parsed], object),
                                          np.array([p["lc_faint"] for p in parsed], object))
    absmag = cal.absmag[inv]
    dm = rng.uniform(5, 12, n)
    ebv = rng.uniform(0, 1, n)
    R = band_coefficients(DEFAULT_LAW, DEFAULT_RV)
    cols = {"id": np.char.add("MIX-", np.arange(n).astype(str)), "sptype": types}
    for b, name in enumerate(BAND_NAMES):
        err = rng.uniform(0.02, 0.05, n)
        mag = np.where(np.isfinite(absmag[:, b]), absmag[:, b], 0.0) + dm + ebv * R[b] + err * rng.standard_normal(n)
        have = rng.random(n) < MIXED_BAND_CHANCE[name]
        cols[name] = np.where(have, mag, np.nan)
        cols[f"e_{name}"] = np.where(have, err, np.nan)
    return pd.DataFrame(cols)


def per_row_two_band(frame: pd.DataFrame, sigma_rv: float = 0.2) -> list:
    """Reference loop: one star at a time, E(B-V) then distance modulus."""
    cals = default_calibrations()
    rv = DEFAULT_RV
    out = []
    for sptype, b, v, eb, ev in zip(frame["sptype"], frame["B"], frame["V"], frame["e_B"], frame["e_V"]):
        p = parse_one(sptype)
        cal = cals.by_class.get(p["lc_bright"])
        if cal is None or not math.isfinite(p["sptnum"]):
            out.append(float("nan"))
            continue
        vals = cal.evaluate(np.array([p["sptnum"]]))
        mv = float(vals.absmag[0, 0])
        bv0 = float(vals.colours[0, 0])
        ebv = (b - v) - bv0
        av = rv * ebv
        dm = v - mv - av
        e_ebv = math.sqrt(eb ** 2 + ev ** 2 + cal.colour_scatter ** 2)
        e_dm = math.sqrt(ev ** 2 + float(vals.var_mv[0]) + (rv * e_ebv) ** 2 + (ebv * sigma_rv) ** 2)
        out.append((dm, e_dm, 10 ** (dm / 5 + 1)))
    return out


def run_benchmark(n_rows: int = 1_000_000, n_loop: int = 20_000, workdir=None, seed: int = 1) -> dict:
    """Time the vectorised pipeline and the per-row loop; print and return the figures."""
    band_coefficients(DEFAULT_LAW, DEFAULT_RV)  # warm caches outside the timing
    default_calibrations()
    with tempfile.TemporaryDirectory(dir=workdir) as tmp:
        src, dst = Path(tmp) / "bench_in.parquet", Path(tmp) / "bench_out.parquet"
        synthetic_catalogue(n_rows, seed).to_parquet(src)
        t0 = time.perf_counter()
        table = read_table(src)
        out = estimate(table)
        write_table(out, dst)
        t_vec = time.perf_counter() - t0
        n_ok = int(np.isfinite(np.asarray(out["dm"])).sum())
    sub = synthetic_catalogue(n_loop, seed + 1)
    t0 = time.perf_counter()
    per_row_two_band(sub)
    t_loop = time.perf_counter() - t0
    rate_vec, rate_loop = n_rows / t_vec, n_loop / t_loop
    figures = {"rows": n_rows, "seconds": t_vec, "rows_per_s": rate_vec, "rows_with_distance": n_ok,
               "loop_rows": n_loop, "loop_seconds": t_loop, "loop_rows_per_s": rate_loop,
               "speedup": rate_vec / rate_loop}
    print(f"vectorised estimate, Parquet in and out: {n_rows:,} rows in {t_vec:.2f} s "
          f"= {rate_vec:,.0f} rows/s ({n_ok:,} with a distance)")
    print(f"plain per-row Python (two bands): {n_loop:,} rows in {t_loop:.2f} s = {rate_loop:,.0f} rows/s")
    print(f"ratio: vectorised is {rate_vec / rate_loop:,.0f} x faster per row")
    return figures
