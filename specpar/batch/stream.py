"""Streaming :func:`specpar.estimate` over large files and Parquet datasets.

A Parquet file is read in blocks of rows (record batches), each
block is solved on its own and written out before the next ones are read, so
memory is bounded by the block size, not by the file. Row order is kept. The
output appears under its final name only when complete: a file is written
through :func:`specpar.io.atomic.atomic_write` (a temporary name renamed at the
end); a dataset directory is built in a hidden temporary folder beside it and
renamed into place.

A Parquet dataset (a folder of Parquet files, possibly hive-partitioned as
``key=value/`` folders) is processed file by file; the output folder mirrors
the input's layout, so it carries the same partitioning.

A CSV or text file written to CSV, text or Parquet is streamed too, with the very rules
of the whole-table reader and writer of :mod:`specpar.io` (leading-comment
block, row-count check, column types decided for the whole file on a first pass
that keeps no rows, formula escaping, sidecar metadata): the CSV output bytes
are those of ``chunk_rows=0``, and a Parquet output has its columns, values
and metadata (:mod:`specpar.batch.csvblocks`). Where that cannot be promised
(text in runs of blanks, an input the reader refuses, blocks whose result
columns differ), the file goes through the whole-table path. Other
combinations (ECSV, FITS, VOTable) are read and written whole by :mod:`specpar.io`.

Because every row's result depends only on that row and the options (see
:mod:`specpar.estimate`), the output is the same whatever the block size,
thread count or engine (see :mod:`specpar.batch.daskrun`).
"""
from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path

import numpy as np

from specpar.pipeline.estimate import run_estimate

from ..core.errors import InputError
from ..io.atomic import atomic_write
from ..io.cells import check_columns_writable
from ..io.formats import DELIMITED_FORMATS, guess_format, is_stdout
from ..io.read import read_parquet_frame, read_table
from ..io.write import write_table
from .blocks import (DEFAULT_CHUNK_ROWS, add_counts, combine_counts, default_threads, make_options, new_summary,
                     progress_bar)
from .csvblocks import estimate_delimited
from .parquet import dataset_files, is_dataset, publish_folder, run_parquet_file

__all__ = ["estimate_file", "DEFAULT_CHUNK_ROWS", "STREAM_FORMATS"]

#: Formats read and written block by block through record batches; others are
#: read or written whole, except CSV/text to CSV/text
#: (:data:`specpar.io.formats.DELIMITED_FORMATS`, :mod:`specpar.batch.csvblocks`);
#: text in runs of blanks or fixed-width columns is read whole.
STREAM_FORMATS = ("parquet",)


def _check_run(chunk_rows, threads, engine) -> int:
    """The thread count (default :func:`default_threads`), after checking the run's options."""
    if not (isinstance(chunk_rows, (int, np.integer)) and chunk_rows >= 0):
        raise InputError(f"chunk_rows must be an integer >= 0 (0 = whole table), got {chunk_rows!r}")
    threads = default_threads() if threads is None else threads
    if not (isinstance(threads, (int, np.integer)) and threads >= 1):
        raise InputError(f"threads must be an integer >= 1, got {threads!r}")
    if engine not in ("local", "dask"):
        raise InputError(f"engine must be 'local' or 'dask', not {engine!r}")
    return threads


def _estimate_dataset(src: Path, dst: Path, out_format, opts, chunk_rows, threads, overwrite, progress):
    """A Parquet dataset folder into a dataset folder mirroring its files and partitions."""
    files = dataset_files(src)
    if dst.suffix and guess_format(dst, out_format) != "parquet":
        raise InputError(f"a dataset input {src} writes a dataset folder of Parquet files; "
                         f"give a folder name for the output, not {dst.name}")
    bar = progress_bar(None, progress)

    def build(tmp):
        import pyarrow.parquet as pq
        if bar is not None:
            bar.total = sum(pq.ParquetFile(f).metadata.num_rows for f in files)
        total = {}
        for f in files:
            rel = Path(os.path.relpath(f, src))
            (tmp / rel).parent.mkdir(parents=True, exist_ok=True)
            total = combine_counts(total, run_parquet_file(f, tmp / rel, opts, chunk_rows, threads, bar))
        return total
    try:
        return publish_folder(build, dst, overwrite=overwrite, inputs=[src])
    finally:
        if bar is not None:
            bar.close()


def _estimate_whole(src: Path, dst, fmt_in, fmt_out, in_format, out_format, opts, overwrite, progress, hdu,
                    max_field_length) -> dict:
    """Read the table whole, solve it, write it whole; the counts."""
    inputs = [src, *(opts.calibrations or ())]
    if fmt_in == "parquet" and hdu is None:
        table = read_parquet_frame(src)  # a DataFrame in, a DataFrame out (fast for catalogues)
    else:
        table = read_table(src, in_format, hdu=hdu)
    check_columns_writable(table, fmt_out, max_field_length)
    out = run_estimate(table, replace(opts, progress=progress))
    write_table(out, str(dst) if is_stdout(dst) else dst, out_format, inputs=inputs, overwrite=overwrite,
                max_field_length=max_field_length)
    meta = (out.meta if hasattr(out, "colnames") else out.attrs).get("specpar", {})
    summary = new_summary()
    add_counts(summary, out["flags"])
    summary["column_mapping"] = dict(meta.get("column_mapping") or {})
    return summary


def _estimate_parquet(src: Path, dst: Path, opts, chunk_rows, threads, overwrite, progress) -> dict:
    """A Parquet file into a Parquet file, block by block."""
    if not src.is_file():
        raise InputError(f"input file {src} does not exist")
    bar = progress_bar(None, progress)
    result = {}

    def writer(tmp):
        result.update(run_parquet_file(src, tmp, opts, chunk_rows, threads, bar))
    try:
        atomic_write(dst, writer, inputs=[src], overwrite=overwrite)
    finally:
        if bar is not None:
            bar.close()
    return result


def _estimate_table_file(src: Path, dst: Path, in_format, out_format, opts, chunk_rows, threads, overwrite,
                         progress, hdu, max_field_length) -> dict:
    """A table file (not a dataset): streamed where the formats allow, else whole."""
    fmt_in = guess_format(src, in_format)
    fmt_out = guess_format(str(dst), out_format) if not is_stdout(dst) else (out_format or "csv")
    if chunk_rows and hdu is None and fmt_in in DELIMITED_FORMATS and fmt_out in (*DELIMITED_FORMATS, "parquet"):
        done = estimate_delimited(src, fmt_in, dst, fmt_out, opts, chunk_rows, overwrite, progress,
                                  max_field_length)
        if done is not None:
            return done
        chunk_rows = 0  # read whole: its reader gives the result or the one clear error
    if chunk_rows == 0 or fmt_in not in STREAM_FORMATS or fmt_out not in STREAM_FORMATS or hdu is not None:
        return _estimate_whole(src, dst, fmt_in, fmt_out, in_format, out_format, opts, overwrite, progress, hdu,
                               max_field_length)
    return _estimate_parquet(src, dst, opts, chunk_rows, threads, overwrite, progress)


def _estimate_local(src, dst, in_format, out_format, opts, chunk_rows, threads, overwrite, progress, hdu,
                    max_field_length) -> dict:
    """:func:`estimate_file` in this process: a dataset folder or a table file."""
    if is_stdout(dst):  # standard output: the whole-table writer
        chunk_rows = 0
    src, dst = Path(src), Path(dst)
    if is_dataset(src):
        return _estimate_dataset(src, dst, out_format, opts, chunk_rows or DEFAULT_CHUNK_ROWS, threads, overwrite,
                                 progress)
    return _estimate_table_file(src, dst, in_format, out_format, opts, chunk_rows, threads, overwrite, progress,
                                hdu, max_field_length)


def estimate_file(src, dst, *, in_format=None, out_format=None, chunk_rows=DEFAULT_CHUNK_ROWS, threads=None,
                  engine="local", workers=None, scheduler=None, overwrite=False, progress=False, hdu=None,
                  max_field_length=None, time_limit=None, **options):
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
        Format names of :data:`specpar.io.formats.FORMATS` when the extension does not tell.
    chunk_rows : int
        Rows per block (default 100,000); 0 reads and writes the table whole.
        Parquet to Parquet and CSV/text to CSV/text/Parquet are streamed (the CSV bytes
        equal those of ``chunk_rows=0``); other formats are read or written whole.
    threads : int, optional
        Blocks solved at once in threads of this process (default: 2 where
        there are 2 cores or more, else 1); the results do not depend on it.
    engine : {"local", "dask"}
        ``"dask"`` runs the blocks on a Dask cluster (see :func:`specpar.batch.daskrun.estimate_file_dask`).
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
        :func:`specpar.io.write.write_table`).
    time_limit : float, optional
        Dask: seconds after which an unfinished run stops with an error and no
        output (default: no limit; a lost scheduler or a cluster without workers
        stops the run anyway, see :mod:`specpar.batch.daskwatch`).
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
    threads = _check_run(chunk_rows, threads, engine)
    if engine == "dask":
        from .daskrun import estimate_file_dask
        return estimate_file_dask(src, dst, in_format=in_format, out_format=out_format,
                                  chunk_rows=chunk_rows or DEFAULT_CHUNK_ROWS, workers=workers,
                                  scheduler=scheduler, overwrite=overwrite, progress=progress, opts=opts,
                                  time_limit=time_limit)
    if workers is not None or scheduler is not None or time_limit is not None:
        raise InputError("workers, scheduler and time_limit apply to the dask engine only "
                         "(engine='dask', --engine dask)")
    return _estimate_local(src, dst, in_format, out_format, opts, chunk_rows, threads, overwrite, progress, hdu,
                           max_field_length)
