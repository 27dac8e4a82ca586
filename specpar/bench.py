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

__all__ = ["synthetic_catalogue", "per_row_two_band", "run_benchmark"]

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
