"""Streaming :func:`specpar.estimate` over large files and Parquet datasets.

A Parquet file is read in blocks of rows (record batches), each
block is solved on its own and written out before the next ones are read, so
memory is bounded by the block size, not by the file. Row order is kept. The
output appears under its final name only when complete: a file is written
through :func:`specpar.tableio.atomic_write` (a temporary name renamed at the
end); a dataset directory is built in a hidden temporary folder beside it and
renamed into place.

A Parquet dataset (a folder of Parquet files, possibly hive-partitioned as
``key=value/`` folders) is processed file by file; the output folder mirrors
the input's layout, so it carries the same partitioning.

A CSV or text file written to CSV or text is streamed too, with the very rules
of the whole-table reader and writer of :mod:`specpar.tableio` (leading-comment
block, row-count check, column types decided for the whole file on a first pass
that keeps no rows, formula escaping, sidecar metadata): the output bytes are
those of ``chunk_rows=0``. Where that cannot be promised (text in runs of
blanks, an input the reader refuses, blocks whose result columns differ), the
file goes through the whole-table path. Other combinations (ECSV, FITS,
VOTable, and CSV to Parquet) are read and written whole by :mod:`specpar.tableio`.

Because every row's result depends only on that row and the options (see
:mod:`specpar.estimate`), the output is the same whatever the block size,
thread count or engine (see :mod:`specpar.daskrun`).
"""
from __future__ import annotations

import json
import os
import shutil
import uuid
from concurrent.futures import ThreadPoolExecutor
from dataclasses import fields, replace
from pathlib import Path

import numpy as np
import pandas as pd

from .estimate import EstimateOptions, run_estimate
from .flags import Flag
from .tableio import (_prepared_columns, _to_frame, _write_delimited, atomic_write, check_columns_writable,
                      check_output, clean_frame, delimited_blocks, delimited_plan, guess_format, read_table,
                      write_sidecar, write_table)

__all__ = ["estimate_file", "estimate_frame", "DEFAULT_CHUNK_ROWS", "STREAM_FORMATS", "make_options"]

#: Rows per block when streaming (memory grows with it, about 0.5 kB per row).
DEFAULT_CHUNK_ROWS = 100_000
#: Formats read and written block by block through record batches; others are
#: read or written whole, except CSV/text to CSV/text (:data:`DELIMITED_FORMATS`).
STREAM_FORMATS = ("parquet",)
#: CSV and text (comma- or tab-separated) are streamed from and to each other
#: with the whole-table reader's and writer's rules (see :func:`_estimate_delimited`);
#: text in runs of blanks or fixed-width columns is read whole.
DELIMITED_FORMATS = ("csv", "text")
_OPTION_NAMES = {f.name for f in fields(EstimateOptions)}


def make_options(**kwargs) -> EstimateOptions:
    """:class:`EstimateOptions` from :func:`specpar.estimate` keywords, checked."""
    unknown = sorted(set(kwargs) - _OPTION_NAMES)
    if unknown:
        raise TypeError(f"unknown option(s) {', '.join(unknown)}; valid: {', '.join(sorted(_OPTION_NAMES))}")
    if "calibrations" in kwargs:
        kwargs["calibrations"] = tuple(kwargs["calibrations"] or ())
    if "columns" in kwargs:
        kwargs["columns"] = dict(kwargs["columns"] or {})
    opts = EstimateOptions(**kwargs)
    opts.check()
    return opts


def estimate_frame(frame: pd.DataFrame, opts: EstimateOptions) -> pd.DataFrame:
    """:func:`specpar.estimate` on one block of rows (no progress bar): the
    per-block function of streaming and of every cluster partition."""
    return run_estimate(clean_frame(frame), replace(opts, progress=False))


# ----------------------------------------------------------------------------- reading

def is_dataset(path) -> bool:
    """True for a folder (read as a Parquet dataset)."""
    return Path(path).is_dir()


def dataset_files(path) -> list:
    """Parquet files of a dataset folder, in a fixed (sorted) order, read with
    pyarrow datasets (hidden and ``_``-prefixed files are skipped, as pyarrow does)."""
    import pyarrow.dataset as pads
    try:
        ds = pads.dataset(str(path), format="parquet", partitioning="hive")
    except Exception as exc:  # pyarrow raises several kinds
        raise ValueError(f"cannot read {path} as a Parquet dataset: {exc}") from None
    files = sorted(ds.files)
    if not files:
        raise ValueError(f"input {path} is a folder that holds no Parquet files "
                         "(give a table file, or a folder of Parquet files as a dataset)")
    return files


def _parquet_blocks(path, chunk_rows, row_groups=None):
    import pyarrow.parquet as pq
    try:
        pf = pq.ParquetFile(str(path))
    except Exception as exc:
        raise ValueError(f"cannot read {path} as parquet: {exc}") from None
    total = pf.metadata.num_rows if row_groups is None else sum(
        pf.metadata.row_group(i).num_rows for i in row_groups)
    empty = pf.schema_arrow.empty_table().to_pandas()

    def gen():
        try:
            for batch in pf.iter_batches(batch_size=chunk_rows, row_groups=row_groups):
                yield batch.to_pandas()
        except Exception as exc:
            raise ValueError(f"cannot read {path} as parquet: {exc}") from None
    return total, empty, gen()


# ----------------------------------------------------------------------------- writing

def parquet_writer(path, schema):
    """A ``pyarrow.parquet.ParquetWriter``; dictionary encoding only for text columns
    (types, classes, flag names and notes repeat; numbers rarely do, and trying
    them costs a third of the writing time)."""
    import pyarrow as pa
    import pyarrow.parquet as pq
    text = [f.name for f in schema if pa.types.is_string(f.type) or pa.types.is_large_string(f.type)]
    return pq.ParquetWriter(str(path), schema, use_dictionary=text)


class _ParquetSink:
    """Appends blocks to one Parquet file with the first block's schema."""

    def __init__(self, path):
        self.path, self.writer, self.schema = path, None, None

    def write(self, frame: pd.DataFrame, meta: dict) -> None:
        import pyarrow as pa
        frame = frame.copy(deep=False)
        frame.attrs = {}
        if self.writer is None:
            arrow = pa.Table.from_pandas(frame, preserve_index=False)
            extra = {b"specpar": json.dumps(meta, sort_keys=True, default=str).encode(),
                     # pandas >= 2.1 restores DataFrame.attrs from this key (as tableio writes it)
                     b"PANDAS_ATTRS": json.dumps({"specpar": meta}, default=str).encode()}
            self.schema = arrow.schema.with_metadata({**(arrow.schema.metadata or {}), **extra})
            # a column that is all empty in the first block must still take text later
            self.schema = pa.schema([pa.field(f.name, pa.large_string()) if pa.types.is_null(f.type) else f
                                     for f in self.schema], metadata=self.schema.metadata)
            self.writer = parquet_writer(self.path, self.schema)
        arrow = pa.Table.from_pandas(frame, preserve_index=False)
        try:
            arrow = arrow.select(self.schema.names).cast(self.schema)
        except Exception as exc:
            raise ValueError(f"a block of rows does not fit the output's column types: {exc}") from None
        self.writer.write_table(arrow)

    def close(self):
        if self.writer is not None:
            self.writer.close()


def _conform(out: pd.DataFrame, columns: list | None) -> pd.DataFrame:
    """The same columns in every block: a Cepheid-only result column absent from a
    block without Cepheids is added empty."""
    if columns is None:
        return out
    missing = [c for c in columns if c not in out.columns]
    extra = [c for c in out.columns if c not in columns]
    if extra:
        raise ValueError(f"block of rows gave columns {extra} the first block did not; "
                         f"read the file whole (chunk_rows=0)")
    for c in missing:
        out[c] = np.nan
    return out[columns]


def _expected_columns(first: pd.DataFrame, src_columns) -> list:
    cols = list(first.columns)
    if "period_d" in src_columns and "period0_d" not in cols:
        cols.insert(cols.index("n_obs") + 1, "period0_d")
    return cols


def _stream(blocks, sink, opts, threads, bar, empty):
    """Solve blocks (``threads`` at a time, results in order) and write them; summary."""
    summary = {"rows": 0, "with_distance": 0, "flagged": 0, "column_mapping": {}}
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
        flags = out["flags"].to_numpy()
        summary["rows"] += len(out)
        summary["with_distance"] += int((flags & int(Flag.NO_DISTANCE) == 0).sum())
        summary["flagged"] += int((flags != 0).sum())
        if bar is not None:
            bar.update(len(out))

    threads = max(1, int(threads or 1))
    if threads == 1:
        for frame in blocks:
            handle(estimate_frame(frame, opts))
    else:
        pending = []
        with ThreadPoolExecutor(threads) as pool:
            for frame in blocks:
                pending.append(pool.submit(estimate_frame, frame, opts))
                while len(pending) > threads:  # bounded: at most threads + 1 blocks in memory
                    handle(pending.pop(0).result())
            while pending:
                handle(pending.pop(0).result())
    if summary["rows"] == 0:
        handle(estimate_frame(empty, opts))  # an empty input still gives a file with the columns
    return summary


def _progress(total, enabled):
    if not enabled:
        return None
    from tqdm.auto import tqdm
    return tqdm(total=total, unit="row", unit_scale=True, desc="specpar estimate")


def _run_file(src, fmt_in, tmp_out, fmt_out, opts, chunk_rows, threads, bar, row_groups=None):
    total, empty, blocks = _parquet_blocks(src, chunk_rows, row_groups)
    if bar is not None and total is not None and bar.total is None:
        bar.total = total
        bar.refresh()
    sink = _ParquetSink(tmp_out)
    try:
        return _stream(blocks, sink, opts, threads, bar, empty)
    finally:
        sink.close()


class _NotUniform(Exception):
    """A block's output differs in columns, types or metadata from the first block's."""


def _estimate_delimited(src, fmt_in, dst, fmt_out, opts, chunk_rows, overwrite, progress, max_field_length):
    """CSV/text in, CSV/text out, block by block; the summary, or None when the file
    must go through the whole-table path instead.

    The output is byte for byte what the whole-table path writes (file and
    sidecar): blocks are read with the whole-file reader's rules and column types
    (:func:`specpar.tableio.delimited_plan`), solved row by row, and written with
    its writer (header once, CRLF, formula escaping), the sidecar last. When a
    block's result columns, their types or the metadata differ from the first
    block's (e.g. a Cepheid column only some blocks have), the partial output is
    discarded and None returned, so the caller falls back to the whole table.

    References
    ----------
    RFC 4180 (CSV records and CRLF line ends); OWASP "CSV Injection" guidance
    (formula escaping, common practice).
    """
    plan = delimited_plan(src, fmt_in, chunk_rows)
    if plan is None:
        return None
    inputs = [src, *(opts.calibrations or ())]
    check_output(dst, fmt_out, inputs=inputs, overwrite=overwrite)
    if max_field_length is not None and not (isinstance(max_field_length, (int, np.integer))
                                             and max_field_length >= 1):
        raise ValueError(f"max_field_length must be a whole number >= 1, got {max_field_length!r}")
    bar = None  # started once the first block is solved: an error in the options or columns comes alone
    state = {"first": None, "escaped": False, "cut": {}, "meta": None,
             "summary": {"rows": 0, "with_distance": 0, "flagged": 0, "column_mapping": {}}}
    block_opts = replace(opts, progress=False)

    def writer(tmp):
        nonlocal bar
        import gzip
        opener = gzip.open if str(dst).lower().endswith(".gz") else open
        with opener(tmp, "wt", encoding="utf-8", newline="") as fh:
            for table in delimited_blocks(plan):
                check_columns_writable(table, fmt_out, max_field_length)
                out = run_estimate(table, block_opts)
                if bar is None and progress:
                    bar = _progress(plan["rows"], True)
                check_columns_writable(out, fmt_out, max_field_length)
                meta = dict(out.meta.get("specpar", {}))
                source, cut = _prepared_columns(out, max_field_length)
                frame = _to_frame(source)
                sig = (list(frame.columns), [str(frame[c].dtype) for c in frame.columns],
                       json.dumps(meta, sort_keys=True, default=str))
                if state["first"] is None:
                    state["first"], state["meta"] = sig, meta
                    state["summary"]["column_mapping"] = dict(meta.get("column_mapping") or {})
                elif sig != state["first"]:
                    raise _NotUniform()
                for k, n in cut.items():
                    state["cut"][k] = state["cut"].get(k, 0) + n
                try:
                    state["escaped"] |= _write_delimited(frame, fh, fmt_out, True,
                                                         header=state["summary"]["rows"] == 0)
                except (ValueError, TypeError, OSError, UnicodeError) as exc:
                    raise ValueError(f"cannot write {dst} as {fmt_out}: {exc}") from None
                flags = np.asarray(out["flags"])
                summ = state["summary"]
                summ["rows"] += len(out)
                summ["with_distance"] += int((flags & int(Flag.NO_DISTANCE) == 0).sum())
                summ["flagged"] += int((flags != 0).sum())
                if bar is not None:
                    bar.update(len(out))
    try:
        atomic_write(dst, writer, inputs=inputs, overwrite=overwrite)
    except _NotUniform:
        return None
    finally:
        if bar is not None:
            bar.close()
    meta = state["meta"]
    if state["cut"]:
        meta["text_cut_to_max_field_length"] = {"max_field_length": int(max_field_length), "cells": state["cut"]}
    write_sidecar(dst, meta, state["escaped"], inputs=inputs, overwrite=overwrite)
    return state["summary"]


def publish_folder(build, dst, *, overwrite=False, inputs=()):
    """Build a folder through ``build(temporary_folder)`` and rename it to ``dst``.

    The folder appears under its final name only when complete; nothing is left
    behind if ``build`` fails. An existing ``dst`` is replaced only with
    ``overwrite`` and never when it is (or holds) one of ``inputs``.
    """
    dst = Path(dst)
    for inp in inputs:
        inp = Path(inp).resolve()
        if dst.resolve() == inp or inp in dst.resolve().parents or dst.resolve() in inp.parents:
            raise ValueError(f"refusing to write the output {dst} over or inside the input {inp}")
    if dst.exists() and not overwrite:
        raise ValueError(f"output {dst} exists; choose another name or allow overwriting (--overwrite)")
    if not dst.parent.exists():
        raise ValueError(f"output folder {dst.parent} does not exist")
    tmp = dst.parent / f".{dst.name}.tmp-{uuid.uuid4().hex[:12]}"
    tmp.mkdir()
    try:
        result = build(tmp)
        if dst.exists():
            old = dst.parent / f".{dst.name}.old-{uuid.uuid4().hex[:12]}"
            os.replace(dst, old)
            os.replace(tmp, dst)
            shutil.rmtree(old) if old.is_dir() else old.unlink()
        else:
            os.replace(tmp, dst)
        return result
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)


def _combine(a, b):
    return {k: a.get(k, 0) + b.get(k, 0) for k in ("rows", "with_distance", "flagged")}


def default_threads() -> int:
    """Blocks solved at once by default: two where there are two cores or more
    (one block is read and written while the other is solved)."""
    return min(2, os.cpu_count() or 1)


def estimate_file(src, dst, *, in_format=None, out_format=None, chunk_rows=DEFAULT_CHUNK_ROWS, threads=None,
                  engine="local", workers=None, scheduler=None, overwrite=False, progress=False, hdu=None,
                  max_field_length=None, **options):
    """Spectroscopic-parallax distances for every row of a file or Parquet dataset.

    Parameters
    ----------
    src : path
        Input table (CSV, ECSV, FITS, VOTable, Parquet) or a folder holding a
        Parquet dataset (hive ``key=value`` folders allowed).
    dst : path
        Output file (format from its extension or ``out_format``) or, for a
        dataset input, an output folder mirroring the input's files and partitions.
    in_format, out_format : str, optional
        Format names of :data:`specpar.tableio.FORMATS` when the extension does not tell.
    chunk_rows : int
        Rows per block (default 100,000); 0 reads and writes the table whole.
        Parquet to Parquet and CSV/text to CSV/text are streamed (the CSV bytes
        equal those of ``chunk_rows=0``); other formats are read or written whole.
    threads : int, optional
        Blocks solved at once in threads of this process (default: 2 where
        there are 2 cores or more, else 1); the results do not depend on it.
    engine : {"local", "dask"}
        ``"dask"`` runs the blocks on a Dask cluster (see :func:`specpar.daskrun.estimate_file_dask`).
    workers : int, optional
        Dask: size of the local cluster started when no ``scheduler`` is given.
    scheduler : str, optional
        Dask: address of a running scheduler, e.g. ``tcp://127.0.0.1:8786``.
    overwrite : bool
        Replace an existing output.
    progress : bool
        Progress bar counting rows.
    hdu : int or str, optional
        FITS input: the table extension to read (whole-table path).
    max_field_length : int, optional
        Cut text cells longer than this in the output (whole-table path; see
        :func:`specpar.tableio.write_table`).
    **options
        The keywords of :func:`specpar.estimate` (``law``, ``rv``, ``method``, ...).

    Returns
    -------
    dict
        ``rows``, ``with_distance`` and ``flagged`` counts.

    References
    ----------
    Pogson 1856, MNRAS 17, 12 (distance modulus); the calibration and
    extinction references are written into the output's metadata.
    """
    opts = make_options(**{k: v for k, v in options.items() if k != "progress"})
    if not (isinstance(chunk_rows, (int, np.integer)) and chunk_rows >= 0):
        raise ValueError(f"chunk_rows must be an integer >= 0 (0 = whole table), got {chunk_rows!r}")
    threads = default_threads() if threads is None else threads
    if not (isinstance(threads, (int, np.integer)) and threads >= 1):
        raise ValueError(f"threads must be an integer >= 1, got {threads!r}")
    if engine not in ("local", "dask"):
        raise ValueError(f"engine must be 'local' or 'dask', not {engine!r}")
    if engine == "dask":
        from .daskrun import estimate_file_dask
        return estimate_file_dask(src, dst, in_format=in_format, out_format=out_format,
                                  chunk_rows=chunk_rows or DEFAULT_CHUNK_ROWS, workers=workers,
                                  scheduler=scheduler, overwrite=overwrite, progress=progress, opts=opts)
    if workers is not None or scheduler is not None:
        raise ValueError("workers and scheduler apply to the dask engine only (engine='dask', --engine dask)")
    if str(dst) == "-":  # standard output: the whole-table writer
        chunk_rows = 0
    src, dst = Path(src), Path(dst)
    if is_dataset(src):
        files = dataset_files(src)
        if dst.suffix and guess_format(dst, out_format) != "parquet":
            raise ValueError(f"a dataset input {src} writes a dataset folder of Parquet files; "
                             f"give a folder name for the output, not {dst.name}")
        bar = _progress(None, progress)

        def build(tmp):
            import pyarrow.parquet as pq
            if bar is not None:
                bar.total = sum(pq.ParquetFile(f).metadata.num_rows for f in files)
            total = {}
            for f in files:
                rel = Path(os.path.relpath(f, src))
                (tmp / rel).parent.mkdir(parents=True, exist_ok=True)
                total = _combine(total, _run_file(f, "parquet", tmp / rel, "parquet", opts,
                                                  chunk_rows or DEFAULT_CHUNK_ROWS, threads, bar))
            return total
        try:
            return publish_folder(build, dst, overwrite=overwrite, inputs=[src])
        finally:
            if bar is not None:
                bar.close()
    fmt_in = guess_format(src, in_format)
    fmt_out = guess_format(str(dst), out_format) if str(dst) != "-" else (out_format or "csv")
    if chunk_rows and hdu is None and fmt_in in DELIMITED_FORMATS and fmt_out in DELIMITED_FORMATS:
        done = _estimate_delimited(src, fmt_in, dst, fmt_out, opts, chunk_rows, overwrite, progress,
                                   max_field_length)
        if done is not None:
            return done
        chunk_rows = 0  # read whole: its reader gives the result or the one clear error
    if chunk_rows == 0 or fmt_in not in STREAM_FORMATS or fmt_out not in STREAM_FORMATS or hdu is not None:
        inputs = [src, *(opts.calibrations or ())]
        table = read_table(src, in_format, hdu=hdu)
        check_columns_writable(table, fmt_out, max_field_length)
        out = run_estimate(table, replace(opts, progress=progress))
        write_table(out, str(dst) if str(dst) == "-" else dst, out_format, inputs=inputs, overwrite=overwrite,
                    max_field_length=max_field_length)
        flags = np.asarray(out["flags"])
        meta = (out.meta if hasattr(out, "colnames") else out.attrs).get("specpar", {})
        return {"rows": len(out), "with_distance": int((flags & int(Flag.NO_DISTANCE) == 0).sum()),
                "flagged": int((flags != 0).sum()), "column_mapping": dict(meta.get("column_mapping") or {})}
    if not src.is_file():
        raise ValueError(f"input file {src} does not exist")
    bar = _progress(None, progress)
    result = {}

    def writer(tmp):
        result.update(_run_file(src, fmt_in, tmp, fmt_out, opts, chunk_rows, threads, bar))
    try:
        atomic_write(dst, writer, inputs=[src], overwrite=overwrite)
    finally:
        if bar is not None:
            bar.close()
    return result
