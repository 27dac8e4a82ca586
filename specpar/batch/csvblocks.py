"""A CSV or text file estimated block by block into a CSV or text file, byte
for byte what the whole-table path writes (file and sidecar), or into a
Parquet file holding the same columns, values and metadata as the whole-table
path's (in row groups of one block each).

Blocks are read with the whole-file reader's rules and column types
(:func:`specpar.io.blocks.delimited_plan`), solved row by row, and written with
its writer (header once, CRLF, formula escaping), the sidecar last; for
Parquet, the metadata that depends on every block (cells cut to
``max_field_length``, the longest text for astropy's reader) goes into the
file's footer when the last block is written.

References
----------
RFC 4180 (CSV records and CRLF line ends); OWASP "CSV Injection" guidance
(formula escaping, common practice).
"""
from __future__ import annotations

import base64
import gzip
import json
from dataclasses import replace

from specpar.pipeline.estimate import run_estimate

from ..core.errors import InputError
from ..io.atomic import atomic_write, check_output
from ..io.blocks import delimited_blocks, delimited_plan
from ..io.cells import check_columns_writable, check_max_field_length, columns_frame, prepared_columns
from ..io.formats import gzipped
from ..io.sidecar import write_sidecar
from ..io.write import astropy_parquet_header, parquet_meta, write_delimited
from .blocks import add_counts, new_summary, progress_bar
from .parquet import fit_to_schema, output_schema, parquet_writer

__all__ = ["estimate_delimited"]


class _NotUniform(Exception):
    """A block's output differs in columns, types or metadata from the first block's."""


class _ParquetBlocks:
    """Appends solved blocks to one Parquet file; the metadata goes in at :meth:`close`."""

    def __init__(self, path):
        self.path, self.writer, self.schema = path, None, None
        self.first_rows, self.lens, self.astropy_ok = None, {}, True

    def write(self, frame) -> None:
        import pyarrow as pa
        arrow = pa.Table.from_pandas(frame, preserve_index=False)
        if self.writer is None:
            self.schema = output_schema(arrow.schema, {})
            self.writer = parquet_writer(self.path, self.schema)
            self.first_rows = frame.iloc[:0]
        self.writer.write_table(fit_to_schema(arrow, self.schema))
        header = astropy_parquet_header(frame, {})
        self.astropy_ok &= bool(header)
        for key, value in header.items():
            if key.startswith(b"table::len::"):
                self.lens[key] = max(self.lens.get(key, 0), int(value))

    def abort(self) -> None:
        """Close the file of a run that failed (the caller removes it)."""
        if self.writer is not None:
            self.writer.close()

    def close(self, meta) -> None:
        """Write the metadata of the whole run (specpar's, and astropy's header
        with each text column's longest cell over all blocks) and finish the file."""
        if self.writer is None:
            return
        extra = parquet_meta(meta)
        header = astropy_parquet_header(self.first_rows, meta) if self.astropy_ok else {}
        if header:
            extra[b"table_meta_yaml"] = header[b"table_meta_yaml"]
            extra.update({k: str(v).encode() for k, v in self.lens.items()})
        # Readers take the Arrow schema (and its metadata) from the footer key
        # ARROW:schema, a base64 IPC schema written when the file was opened (Apache
        # Arrow, "Reading and writing Parquet files": storing the Arrow schema); it
        # is replaced by the final schema, so they see the whole run's metadata.
        final = self.schema.with_metadata({**(self.schema.metadata or {}), **extra})
        extra[b"ARROW:schema"] = base64.b64encode(final.serialize().to_pybytes())
        self.writer.add_key_value_metadata(extra)
        self.writer.close()


class _DelimitedRun:
    """The state of one block-by-block run: the first block's signature and
    metadata, cut cells, whether formulas were escaped, the counts."""

    def __init__(self, dst, fmt_out, max_field_length):
        self.dst, self.fmt_out, self.max_field_length = dst, fmt_out, max_field_length
        self.first, self.meta, self.escaped, self.cut = None, None, False, {}
        self.summary = new_summary()

    def write_block(self, out, fh) -> None:
        """Append one solved block to ``fh`` (header with the first block)."""
        check_columns_writable(out, self.fmt_out, self.max_field_length)
        meta = dict(out.meta.get("specpar", {}))
        source, cut = prepared_columns(out, self.max_field_length)
        frame = columns_frame(source)
        sig = (list(frame.columns), [str(frame[c].dtype) for c in frame.columns],
               json.dumps(meta, sort_keys=True, default=str))
        if self.first is None:
            self.first, self.meta = sig, meta
            self.summary["column_mapping"] = dict(meta.get("column_mapping") or {})
        elif sig != self.first:
            raise _NotUniform()
        for k, n in cut.items():
            self.cut[k] = self.cut.get(k, 0) + n
        try:
            if self.fmt_out == "parquet":
                fh.write(frame)
            else:
                self.escaped |= write_delimited(frame, fh, self.fmt_out, True, header=self.summary["rows"] == 0)
        except (ValueError, TypeError, OSError, UnicodeError) as exc:
            raise InputError(f"cannot write {self.dst} as {self.fmt_out}: {exc}") from None
        add_counts(self.summary, out["flags"])

    def final_meta(self) -> dict:
        """The first block's metadata, with the cut cells of all blocks."""
        meta = self.meta
        if self.cut:
            meta["text_cut_to_max_field_length"] = {"max_field_length": int(self.max_field_length),
                                                    "cells": self.cut}
        return meta


def estimate_delimited(src, fmt_in, dst, fmt_out, opts, chunk_rows, overwrite=False, progress=False,
                       max_field_length=None):
    """CSV/text in, CSV/text or Parquet out, block by block; the counts, or None
    when the file must go through the whole-table path instead.

    When a block's result columns, their types or the metadata differ from the
    first block's (e.g. a Cepheid column only some blocks have), the partial
    output is discarded (nothing is left behind) and None returned, so the caller
    falls back to the whole table. None too when the file cannot be read in
    blocks (text in runs of blanks, an input the whole-file reader refuses).
    """
    plan = delimited_plan(src, fmt_in, chunk_rows)
    if plan is None:
        return None
    inputs = [src, *(opts.calibrations or ())]
    check_output(dst, fmt_out, inputs=inputs, overwrite=overwrite)
    check_max_field_length(max_field_length)
    bar = None  # started once the first block is solved: an error in the options or columns comes alone
    run = _DelimitedRun(dst, fmt_out, max_field_length)
    block_opts = replace(opts, progress=False)

    def solve_into(fh):
        nonlocal bar
        for table in delimited_blocks(plan):
            check_columns_writable(table, fmt_out, max_field_length)
            out = run_estimate(table, block_opts)
            if bar is None and progress:
                bar = progress_bar(plan["rows"], True)
            run.write_block(out, fh)
            if bar is not None:
                bar.update(len(out))

    def writer(tmp):
        if fmt_out == "parquet":
            sink = _ParquetBlocks(tmp)
            try:
                solve_into(sink)
            except BaseException:
                sink.abort()
                raise
            sink.close(run.final_meta())
            return
        opener = gzip.open if gzipped(dst) else open
        with opener(tmp, "wt", encoding="utf-8", newline="") as fh:
            solve_into(fh)
    try:
        atomic_write(dst, writer, inputs=inputs, overwrite=overwrite)
    except _NotUniform:
        return None
    finally:
        if bar is not None:
            bar.close()
    if fmt_out != "parquet":
        write_sidecar(dst, run.final_meta(), run.escaped, inputs=inputs, overwrite=overwrite)
    return run.summary

