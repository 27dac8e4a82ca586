"""The per-block work shared by every runner (streaming in this process, Dask
workers): options checked once, one block solved, blocks solved in threads with
results kept in order, and the row counts of a run.

Every row's result depends only on that row and the options (see
:mod:`specpar.estimate`), so the output is the same whatever the block size,
thread count or engine.
"""
from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import replace

import numpy as np
import pandas as pd

from specpar.pipeline.estimate import run_estimate
from specpar.pipeline.options import EstimateOptions, options_from
from specpar.core.flags import Flag

from ..core.errors import InputError
from ..io.frames import clean_frame

__all__ = ["DEFAULT_CHUNK_ROWS", "make_options", "estimate_frame", "default_threads", "new_summary",
           "add_counts", "combine_counts", "solve_blocks", "progress_bar"]

#: Rows per block when streaming (memory grows with it, about 0.5 kB per row).
DEFAULT_CHUNK_ROWS = 100_000


def make_options(**kwargs) -> EstimateOptions:
    """:class:`EstimateOptions` from :func:`specpar.estimate` keywords, checked before any reading."""
    opts = options_from(kwargs)
    opts.check()
    return opts


def estimate_frame(frame: pd.DataFrame, opts: EstimateOptions) -> pd.DataFrame:
    """:func:`specpar.estimate` on one block of rows (no progress bar): the
    per-block function of streaming and of every cluster partition."""
    return run_estimate(clean_frame(frame), replace(opts, progress=False))


def default_threads() -> int:
    """Blocks solved at once by default: two where there are two cores or more
    (one block is read and written while the other is solved)."""
    return min(2, os.cpu_count() or 1)


def new_summary() -> dict:
    """The counts of a run before any row: ``rows``, ``with_distance``, ``flagged``
    and the ``column_mapping`` used."""
    return {"rows": 0, "with_distance": 0, "flagged": 0, "column_mapping": {}}


def add_counts(summary: dict, flags) -> None:
    """Add one block's rows (their ``flags``) to ``summary``."""
    flags = np.asarray(flags)
    summary["rows"] += len(flags)
    summary["with_distance"] += int((flags & int(Flag.NO_DISTANCE) == 0).sum())
    summary["flagged"] += int((flags != 0).sum())


def combine_counts(a: dict, b: dict) -> dict:
    """The row counts of two runs together."""
    return {k: a.get(k, 0) + b.get(k, 0) for k in ("rows", "with_distance", "flagged")}


def _conform(out: pd.DataFrame, columns: list | None) -> pd.DataFrame:
    """The same columns in every block: a Cepheid-only result column absent from a
    block without Cepheids is added empty."""
    if columns is None:
        return out
    missing = [c for c in columns if c not in out.columns]
    extra = [c for c in out.columns if c not in columns]
    if extra:
        raise InputError(f"block of rows gave columns {extra} the first block did not; "
                         f"read the file whole (chunk_rows=0)")
    for c in missing:
        out[c] = np.nan
    return out[columns]


def _expected_columns(first: pd.DataFrame, src_columns) -> list:
    cols = list(first.columns)
    if "period_d" in src_columns and "period0_d" not in cols:
        cols.insert(cols.index("n_obs") + 1, "period0_d")
    return cols


def _solve_in_order(blocks, opts, threads, handle) -> None:
    """``handle(estimate_frame(block))`` for every block in order, ``threads`` at a time."""
    if threads == 1:
        for frame in blocks:
            handle(estimate_frame(frame, opts))
        return
    pending = []
    with ThreadPoolExecutor(threads) as pool:
        for frame in blocks:
            pending.append(pool.submit(estimate_frame, frame, opts))
            while len(pending) > threads:  # bounded: at most threads + 1 blocks in memory
                handle(pending.pop(0).result())
        while pending:
            handle(pending.pop(0).result())


def solve_blocks(blocks, sink, opts, threads, bar, empty) -> dict:
    """Solve frames of rows (``threads`` at a time, results in order) and write
    each with ``sink.write(frame, meta)``; returns the counts (:func:`new_summary`).

    Every block gets the first block's columns (a Cepheid column a block lacks is
    added empty); ``empty`` (the input's columns, no rows) still gives an output
    with the columns when there are no rows.
    """
    summary = new_summary()
    columns, meta = None, None
    src_columns = list(empty.columns)

    def handle(out):
        nonlocal columns, meta
        if columns is None:
            columns = _expected_columns(out, src_columns)
            meta = dict(out.attrs.get("specpar", {}))
            summary["column_mapping"] = dict(meta.get("column_mapping") or {})
            if "period0_d" in columns and "period0_d" not in meta.get("columns", {}):
                meta.setdefault("columns", {})["period0_d"] = \
                    "fundamental-mode pulsation period used (first overtones converted)"
        out = _conform(out, columns)
        sink.write(out, meta)
        add_counts(summary, out["flags"].to_numpy())
        if bar is not None:
            bar.update(len(out))

    _solve_in_order(blocks, opts, max(1, int(threads or 1)), handle)
    if summary["rows"] == 0:
        handle(estimate_frame(empty, opts))  # an empty input still gives a file with the columns
    return summary


def progress_bar(total, enabled):
    """A progress bar counting rows (None when not ``enabled``)."""
    if not enabled:
        return None
    from tqdm.auto import tqdm
    return tqdm(total=total, unit="row", unit_scale=True, desc="specpar estimate")
