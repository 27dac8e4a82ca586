"""Parquet files and datasets in blocks: the files of a dataset folder, a
file's record batches as frames, appending blocks to one output file with the
first block's schema, and publishing a finished output folder.

References
----------
Apache Parquet format specification (row groups, key-value metadata); Apache
Arrow datasets (hive ``key=value`` partitioning).
"""
from __future__ import annotations

import os
import shutil
import uuid
from pathlib import Path

import pandas as pd

from ..core.errors import InputError
from ..io.atomic import make_folder
from ..io.write import parquet_meta
from .blocks import solve_blocks

#: Hex digits of the random tag in a temporary folder's name: 48 random bits, so
#: concurrent runs never pick one name (common practice).
_TAG_HEX_DIGITS = 12

__all__ = ["is_dataset", "dataset_files", "parquet_blocks", "parquet_writer", "output_schema", "fit_to_schema",
           "ParquetSink",
           "run_parquet_file", "publish_folder"]


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
        raise InputError(f"cannot read {path} as a Parquet dataset: {exc}") from None
    files = sorted(ds.files)
    if not files:
        raise InputError(f"input {path} is a folder that holds no Parquet files "
                         "(give a table file, or a folder of Parquet files as a dataset)")
    return files


def parquet_blocks(path, chunk_rows, row_groups=None):
    """(rows, empty frame with the columns, generator of frames of ``chunk_rows``
    rows) of a Parquet file (or of its ``row_groups``)."""
    import pyarrow.parquet as pq
    try:
        pf = pq.ParquetFile(str(path))
    except Exception as exc:
        raise InputError(f"cannot read {path} as parquet: {exc}") from None
    total = pf.metadata.num_rows if row_groups is None else sum(
        pf.metadata.row_group(i).num_rows for i in row_groups)
    empty = pf.schema_arrow.empty_table().to_pandas()

    def gen():
        try:
            for batch in pf.iter_batches(batch_size=chunk_rows, row_groups=row_groups):
                yield batch.to_pandas()
        except Exception as exc:
            raise InputError(f"cannot read {path} as parquet: {exc}") from None
    return total, empty, gen()


def parquet_writer(path, schema):
    """A ``pyarrow.parquet.ParquetWriter``; dictionary encoding only for text columns
    (types, classes, flag names and notes repeat; numbers rarely do, and trying
    them costs a third of the writing time)."""
    import pyarrow as pa
    import pyarrow.parquet as pq
    text = [f.name for f in schema if pa.types.is_string(f.type) or pa.types.is_large_string(f.type)]
    return pq.ParquetWriter(str(path), schema, use_dictionary=text)


def output_schema(schema, extra: dict):
    """``schema`` with the key-value metadata ``extra``, a column that is all empty
    (null type) in the first block made text, so later blocks can fill it."""
    import pyarrow as pa
    schema = schema.with_metadata({**(schema.metadata or {}), **extra})
    return pa.schema([pa.field(f.name, pa.large_string()) if pa.types.is_null(f.type) else f
                      for f in schema], metadata=schema.metadata)


def fit_to_schema(arrow, schema):
    """``arrow`` (a ``pyarrow.Table``) with the columns and types of ``schema``, the
    output's first block; one clear error when a later block cannot take them."""
    try:
        return arrow.select(schema.names).cast(schema)
    except Exception as exc:  # pyarrow raises several kinds
        raise InputError(f"a block of rows does not fit the output's column types: {exc}") from None


class ParquetSink:
    """Appends blocks to one Parquet file with the first block's schema."""

    def __init__(self, path):
        self.path, self.writer, self.schema = path, None, None

    def write(self, frame: pd.DataFrame, meta: dict) -> None:
        """Append ``frame``; the first call fixes the schema and writes ``meta``."""
        import pyarrow as pa
        frame = frame.copy(deep=False)
        frame.attrs = {}
        if self.writer is None:
            arrow = pa.Table.from_pandas(frame, preserve_index=False)
            self.schema = output_schema(arrow.schema, parquet_meta(meta))
            self.writer = parquet_writer(self.path, self.schema)
        self.writer.write_table(fit_to_schema(pa.Table.from_pandas(frame, preserve_index=False), self.schema))

    def close(self):
        """Finish the file."""
        if self.writer is not None:
            self.writer.close()


def run_parquet_file(src, dst, opts, chunk_rows, threads=1, bar=None, row_groups=None) -> dict:
    """Estimate every row of the Parquet file ``src`` (or of its ``row_groups``)
    block by block into the Parquet file ``dst``; returns the counts."""
    total, empty, blocks = parquet_blocks(src, chunk_rows, row_groups)
    if bar is not None and total is not None and bar.total is None:
        bar.total = total
        bar.refresh()
    sink = ParquetSink(dst)
    try:
        return solve_blocks(blocks, sink, opts, threads, bar, empty)
    finally:
        sink.close()


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
            raise InputError(f"refusing to write the output {dst} over or inside the input {inp}")
    if dst.exists() and not overwrite:
        raise InputError(f"output {dst} exists; choose another name or allow overwriting (--overwrite)")
    if not dst.parent.exists():
        raise InputError(f"output folder {dst.parent} does not exist")
    tmp = dst.parent / f".{dst.name}.tmp-{uuid.uuid4().hex[:_TAG_HEX_DIGITS]}"
    make_folder(tmp, exist_ok=False)
    try:
        result = build(tmp)
        if dst.exists():
            old = dst.parent / f".{dst.name}.old-{uuid.uuid4().hex[:_TAG_HEX_DIGITS]}"
            os.replace(dst, old)
            os.replace(tmp, dst)
            shutil.rmtree(old) if old.is_dir() else old.unlink()
        else:
            os.replace(tmp, dst)
        return result
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)
