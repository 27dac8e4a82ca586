"""A CSV or text file estimated block by block into a CSV or text file, byte
for byte what the whole-table path writes (file and sidecar).

Blocks are read with the whole-file reader's rules and column types
(:func:`specpar.io.blocks.delimited_plan`), solved row by row, and written with
its writer (header once, CRLF, formula escaping), the sidecar last.

References
----------
RFC 4180 (CSV records and CRLF line ends); OWASP "CSV Injection" guidance
(formula escaping, common practice).
"""
from __future__ import annotations

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
from ..io.write import write_delimited
from .blocks import add_counts, new_summary, progress_bar

__all__ = ["estimate_delimited"]


class _NotUniform(Exception):
    """A block's output differs in columns, types or metadata from the first block's."""


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
    """CSV/text in, CSV/text out, block by block; the counts, or None when the file
    must go through the whole-table path instead.

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

    def writer(tmp):
        nonlocal bar
        opener = gzip.open if gzipped(dst) else open
        with opener(tmp, "wt", encoding="utf-8", newline="") as fh:
            for table in delimited_blocks(plan):
                check_columns_writable(table, fmt_out, max_field_length)
                out = run_estimate(table, block_opts)
                if bar is None and progress:
                    bar = progress_bar(plan["rows"], True)
                run.write_block(out, fh)
                if bar is not None:
                    bar.update(len(out))
    try:
        atomic_write(dst, writer, inputs=inputs, overwrite=overwrite)
    except _NotUniform:
        return None
    finally:
        if bar is not None:
            bar.close()
    write_sidecar(dst, run.final_meta(), run.escaped, inputs=inputs, overwrite=overwrite)
    return run.summary

