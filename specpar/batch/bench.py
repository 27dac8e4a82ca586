"""Benchmarks: ``estimate`` on synthetic rows, Parquet in and out, beside a
plain per-row Python version of the same two-band computation, and a
large-dataset run measuring throughput and peak memory."""
from __future__ import annotations

import math
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from specpar.calib.tables import default_calibrations
from specpar.calib.extinction import DEFAULT_LAW, DEFAULT_RV, band_coefficients
from specpar.core.sptype import parse_one
from specpar.core.bands import BAND_NAMES

__all__ = ["synthetic_catalogue", "synthetic_mixed", "per_row_two_band", "run_benchmark",
           "write_synthetic_dataset", "run_dataset_benchmark"]

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
    """Reference loop: one star at a time, E(B-V) then distance modulus.

    A fair loop: the calibration's interpolating functions are built once
    (as the vectorised pipeline builds them), and only the per-star work
    (parsing the type, reading the calibration at it, the arithmetic) runs
    per row.
    """
    cals = default_calibrations()
    rv = DEFAULT_RV
    funcs = {lc: (cal._interp["M_V"][0], cal._interp["B-V"][0], cal._interp["sig_M_V"][0], cal.colour_scatter)
             for lc, cal in cals.by_class.items()
             if all(c in cal._interp for c in ("M_V", "B-V", "sig_M_V"))}
    out = []
    for sptype, b, v, eb, ev in zip(frame["sptype"], frame["B"], frame["V"], frame["e_B"], frame["e_V"]):
        p = parse_one(sptype)
        f = funcs.get(p["lc_bright"])
        x = p["sptnum"]
        if f is None or not math.isfinite(x):
            out.append(float("nan"))
            continue
        mv, bv0, sig = float(f[0](x)), float(f[1](x)), float(f[2](x))
        if not (math.isfinite(mv) and math.isfinite(bv0)):
            out.append(float("nan"))
            continue
        ebv = (b - v) - bv0
        av = rv * ebv
        dm = v - mv - av
        e_ebv = math.sqrt(eb ** 2 + ev ** 2 + f[3] ** 2)
        e_dm = math.sqrt(ev ** 2 + sig ** 2 + (rv * e_ebv) ** 2 + (ebv * sigma_rv) ** 2)
        out.append((dm, e_dm, 10 ** (dm / 5 + 1)))
    return out


def _pyarrow_floor(src, dst) -> float:
    """Seconds pyarrow alone needs to read ``src`` and write it to ``dst``."""
    import pyarrow.parquet as pq
    t0 = time.perf_counter()
    pq.write_table(pq.read_table(src), dst)
    return time.perf_counter() - t0


def run_benchmark(n_rows: int = 1_000_000, n_loop: int = 20_000, workdir=None, seed: int = 1,
                  mixed: bool = False, threads=None, chunk_rows: int = 100_000) -> dict:
    """Time the streamed pipeline (Parquet in and out) and the per-row loop; print and return the figures.

    ``mixed`` uses :func:`synthetic_mixed` (11 bands, 3.1 per star) instead of
    the two-band catalogue. The pyarrow read+write of the same file is timed
    as the floor. The per-row loop always runs the two-band computation.
    """
    from .stream import estimate_file
    band_coefficients(DEFAULT_LAW, DEFAULT_RV)  # warm caches outside the timing
    default_calibrations()
    make = synthetic_mixed if mixed else synthetic_catalogue
    with tempfile.TemporaryDirectory(dir=workdir) as tmp:
        src, dst = Path(tmp) / "bench_in.parquet", Path(tmp) / "bench_out.parquet"
        cat = make(n_rows, seed)
        bands = cat[[c for c in cat.columns if c in BAND_NAMES]].notna().sum(axis=1).mean()
        cat.to_parquet(src)
        del cat
        t_floor = _pyarrow_floor(src, Path(tmp) / "floor.parquet")
        t0 = time.perf_counter()
        summary = estimate_file(src, dst, chunk_rows=chunk_rows, threads=threads)
        t_vec = time.perf_counter() - t0
        n_ok = summary["with_distance"]
    sub = synthetic_catalogue(n_loop, seed + 1)
    t0 = time.perf_counter()
    per_row_two_band(sub)
    t_loop = time.perf_counter() - t0
    rate_vec, rate_loop = n_rows / t_vec, n_loop / t_loop
    figures = {"rows": n_rows, "seconds": t_vec, "rows_per_s": rate_vec, "rows_with_distance": n_ok,
               "bands_per_star": float(bands), "pyarrow_seconds": t_floor, "over_floor": t_vec / t_floor,
               "loop_rows": n_loop, "loop_seconds": t_loop, "loop_rows_per_s": rate_loop,
               "speedup": rate_vec / rate_loop}
    kind = f"mixed bands ({bands:.1f} per star)" if mixed else "two bands"
    print(f"vectorised estimate, Parquet in and out, {kind}: {n_rows:,} rows in {t_vec:.2f} s "
          f"= {rate_vec:,.0f} rows/s ({n_ok:,} with a distance)")
    print(f"pyarrow read+write of the same file: {t_floor:.2f} s (estimate takes {t_vec / t_floor:.1f} x that)")
    print(f"plain per-row Python (two bands): {n_loop:,} rows in {t_loop:.2f} s = {rate_loop:,.0f} rows/s")
    print(f"ratio: vectorised is {rate_vec / rate_loop:,.0f} x faster per row")
    return figures


def write_synthetic_dataset(folder, n_rows: int, rows_per_file: int = 500_000, seed: int = 1) -> Path:
    """A Parquet dataset of :func:`synthetic_mixed` rows, written file by file
    (``part-<k>.parquet``, memory bounded by ``rows_per_file``)."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for k, start in enumerate(range(0, n_rows, rows_per_file)):
        part = synthetic_mixed(min(rows_per_file, n_rows - start), seed + k)
        part["id"] = np.char.add(f"MIX{k}-", np.arange(len(part)).astype(str))
        part.to_parquet(folder / f"part-{k:05d}.parquet", row_group_size=100_000)
    return folder


#: Run in the child process of :func:`run_dataset_benchmark`: the command line, then
#: the child's own peak resident memory (``VmHWM`` of /proc/self/status, Linux
#: proc(5)) written to the file named by the first argument. ``ru_maxrss`` cannot be
#: used: across fork/vfork and exec it keeps the parent's high-water mark, so the
#: benchmark's own memory (writing the synthetic dataset) was counted as the child's.
_CHILD = """
import atexit, sys
def _peak(path=sys.argv[1]):
    with open("/proc/self/status") as fh:
        kb = [line.split()[1] for line in fh if line.startswith("VmHWM:")]
    with open(path, "w") as out:
        out.write(kb[0] if kb else "")
atexit.register(_peak)
from specpar.cli.main import main
sys.exit(main(sys.argv[2:]))
"""


def child_peak_mb(args) -> tuple:
    """Run ``specpar ARGS`` in a child process; (seconds, its peak resident memory in
    MB, or None where /proc does not tell)."""
    import subprocess
    import sys
    with tempfile.TemporaryDirectory() as tmp:
        peak_file = Path(tmp) / "peak_kb"
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", _CHILD, str(peak_file), *map(str, args)], check=True)
        seconds = time.perf_counter() - t0
        text = peak_file.read_text().strip() if peak_file.exists() else ""
    return seconds, (int(text) / 1024 if text else None)


def run_dataset_benchmark(n_rows: int = 10_000_000, workdir=None, rows_per_file: int = 500_000,
                          extra_args=()) -> dict:
    """Time ``specpar estimate`` on a synthetic Parquet dataset in a child process
    and report its rows/s and peak resident memory (the child's own, see :data:`_CHILD`)."""
    with tempfile.TemporaryDirectory(dir=workdir) as tmp:
        src = write_synthetic_dataset(Path(tmp) / "catalogue", n_rows, rows_per_file)
        seconds, peak_mb = child_peak_mb(["estimate", src, "-o", Path(tmp) / "distances", "--quiet", *extra_args])
    figures = {"rows": n_rows, "seconds": seconds, "rows_per_s": n_rows / seconds,
               "peak_rss_mb": peak_mb, "peak_rss_known": peak_mb is not None}
    peak = f"{peak_mb:,.0f} MB" if peak_mb is not None else "unknown (no /proc)"
    print(f"specpar estimate on a {n_rows:,}-row Parquet dataset: {seconds:.1f} s = "
          f"{n_rows / seconds:,.0f} rows/s, peak resident memory {peak}")
    return figures
