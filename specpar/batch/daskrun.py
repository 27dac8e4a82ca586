"""Running :func:`specpar.estimate` on a Dask cluster.

Two entry points:

- :func:`estimate_dask` takes a ``dask.dataframe.DataFrame`` and returns one
  (lazy) with the results appended, computed partition by partition;
- :func:`estimate_file_dask` (``specpar estimate --engine dask``) reads a
  Parquet file or dataset in pieces of row groups, lets every worker solve
  and write its own piece, and publishes the output atomically.

Every worker runs the same per-block function as a single process
(:func:`specpar.batch.blocks.estimate_frame`) with the same options, and every
row's result depends only on that row and the options (Monte Carlo draws are
keyed on the row's content, :mod:`specpar.core.mcdraws`), so the results equal the
single-process run bit for bit. A failed piece is retried once; if it fails
again the run stops with the piece's name and leaves no output under the
final name. The file runs end in bounded time whatever happens to the
scheduler or the workers (:mod:`specpar.batch.daskwatch`: a lost scheduler, a
cluster without workers, or the run's ``time_limit``), again with one clear
error and no output.
"""
from __future__ import annotations

import contextlib
import os
import shutil
from pathlib import Path

import pandas as pd

from ..core.errors import InputError
from ..io.atomic import atomic_write, make_folder, temp_path_for
from ..io.formats import guess_format
from .blocks import DEFAULT_CHUNK_ROWS, combine_counts, estimate_frame, make_options
from .daskwatch import RunStopped, Watchdog
from .options import RUN_OPTIONS
from .parquet import dataset_files, fit_to_schema, is_dataset, parquet_writer, publish_folder, run_parquet_file

__all__ = ["estimate_dask", "estimate_file_dask", "connect"]

#: How many times a failed piece is tried again before the run stops.
RETRIES = 1
#: How long to wait for a running scheduler to answer (our choice, common practice:
#: long enough for a scheduler on another machine of the network).
SCHEDULER_TIMEOUT = "20s"
#: Pieces of one file submitted per worker at a time: one solving, one waiting, so
#: workers never idle while memory stays bounded (common practice).
PIECES_PER_WORKER = 2
#: Seconds the client and a cluster started for the run get to close (our choice).
CLOSE_TIMEOUT_S = 10


def _require_dask():
    try:
        import dask  # noqa: F401
        import distributed  # noqa: F401
    except ModuleNotFoundError:
        raise InputError("the dask engine needs dask and distributed: pip install 'dask[distributed]' "
                         "(or use the default engine, --engine local)") from None


def connect(workers=None, scheduler=None):
    """A ``distributed.Client``: to ``scheduler`` if given, else a new local
    cluster of ``workers`` single-threaded worker processes (default: one per core).

    Returns (client, cluster); cluster is None for an existing scheduler.
    """
    _require_dask()
    from distributed import Client, LocalCluster
    if scheduler is not None:
        if workers is not None:
            raise InputError("give either a scheduler address or a number of local workers, not both")
        try:
            return Client(scheduler, timeout=SCHEDULER_TIMEOUT), None
        except Exception as exc:
            raise InputError(f"cannot reach the Dask scheduler at {scheduler!r}: {exc}; start one with "
                             f"'dask scheduler' and workers with 'dask worker {scheduler}'") from None
    n = os.cpu_count() or 1 if workers is None else workers
    if not (isinstance(n, int) and n >= 1):
        raise InputError(f"workers must be an integer >= 1, got {workers!r}")
    import dask
    # Dask sets MALLOC_TRIM_THRESHOLD_ in its workers by default; with it set, glibc
    # stops adapting its mmap threshold, every large numpy temporary becomes a fresh
    # mapping, and the page faults made the workers spend as much time in the kernel as
    # in the solver (measured: 19 s system time against 3.8 s in one process, 4M rows).
    # The workers of a local cluster keep the allocator's defaults, as a single process does.
    with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}):
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None)
    return Client(cluster), cluster


def _conform_partition(frame, opts, columns):
    out = estimate_frame(frame, opts)
    for c in columns:
        if c not in out.columns:
            out[c] = float("nan")  # e.g. period0_d in a partition without Cepheids
    return out[columns]


def estimate_dask(ddf, **options):
    """Distances for every row of a ``dask.dataframe.DataFrame``.

    Parameters
    ----------
    ddf : dask.dataframe.DataFrame
        Same columns as for :func:`specpar.estimate`.
    **options
        The keywords of :func:`specpar.estimate` (``law``, ``rv``, ``method``, ``seed`` ...).

    Returns
    -------
    dask.dataframe.DataFrame
        Lazy; each partition is ``estimate`` of the input partition. The
        metadata (``attrs['specpar']`` of each computed partition) states the
        assumptions. Partitions keep their rows and order.
    """
    _require_dask()
    opts = make_options(**{k: v for k, v in options.items() if k != "progress"})
    meta = estimate_frame(ddf._meta.copy(), opts)
    columns = list(meta.columns)
    if "period_d" in ddf.columns and "period0_d" not in columns:
        columns.insert(columns.index("n_obs") + 1, "period0_d")
        meta["period0_d"] = pd.Series(dtype=float)
    meta = meta[columns]
    meta.attrs = {}
    return ddf.map_partitions(_conform_partition, opts, columns, meta=meta, align_dataframes=False)


def _pieces(src, chunk_rows):
    """(name, file, row groups or None, relative output path) for every piece of work."""
    import pyarrow.parquet as pq
    src = Path(src)
    if is_dataset(src):
        return [(os.path.relpath(f, src), f, None, Path(os.path.relpath(f, src))) for f in dataset_files(src)]
    try:
        md = pq.ParquetFile(str(src)).metadata
    except Exception as exc:
        raise InputError(f"cannot read {src} as parquet: {exc}") from None
    pieces, group, rows = [], [], 0
    for i in range(md.num_row_groups):
        group.append(i)
        rows += md.row_group(i).num_rows
        if rows >= chunk_rows:
            pieces.append(group)
            group, rows = [], 0
    if group or not pieces:
        pieces.append(group)
    return [(f"{src.name}[row groups {g[0]}-{g[-1]}]" if g else src.name, str(src), g,
             Path(f"part-{k:06d}.parquet")) for k, g in enumerate(pieces)]


def _rows(pieces) -> int:
    """Rows of all pieces, from the Parquet footers."""
    import pyarrow.parquet as pq
    n = 0
    for _, path, groups, _ in pieces:
        md = pq.ParquetFile(path).metadata
        n += md.num_rows if groups is None else sum(md.row_group(i).num_rows for i in groups)
    return n


def _solve_piece(path, row_groups, root, rel, opts, chunk_rows):
    """Worker task: solve one piece and write it to ``root / rel``; the row counts.

    ``root`` is the run's temporary folder, made by the client: a worker never
    makes it, so a piece still running after the run stopped (and removed the
    folder) fails instead of leaving files behind."""
    root = Path(root)
    out = root / rel
    if not root.is_dir():
        raise InputError(f"the run's temporary folder {root} is gone (the run was stopped)")
    for folder in reversed(out.parents[:len(Path(rel).parents) - 1]):
        folder.mkdir(exist_ok=True)  # hive partition folders below the root, never the root
    return run_parquet_file(path, out, opts, chunk_rows, 1, None, row_groups)


def estimate_file_dask(src, dst, *, opts, in_format=None, out_format=None, chunk_rows=DEFAULT_CHUNK_ROWS,
                       workers=None, scheduler=None, overwrite=False, progress=False, time_limit=None):
    """:func:`specpar.batch.stream.estimate_file` with ``engine="dask"`` (Parquet input only).

    The pieces are a dataset's files or groups of a file's row groups; each
    worker writes its piece into a hidden temporary folder beside the output
    (so the output folder must be visible to every worker: a shared file
    system on a real cluster). A dataset gives a dataset folder mirroring the
    input; a single file gives a single file, joined from the pieces in order.
    ``time_limit`` (seconds, None for none) bounds the whole run; a lost
    scheduler or a cluster without workers stops it too
    (:class:`specpar.batch.daskwatch.Watchdog`).
    """
    src, dst = Path(src), Path(dst)
    RUN_OPTIONS["time_limit"].validate(time_limit)
    _check_paths(src, dst, in_format, out_format)
    pieces = _pieces(src, chunk_rows)
    client, cluster = connect(workers, scheduler)
    try:
        watch = Watchdog(client, time_limit, len(pieces))
        if is_dataset(src):
            return publish_folder(lambda tmp: _solve_into_folder(client, pieces, tmp, opts, chunk_rows, progress,
                                                                 watch), dst, overwrite=overwrite, inputs=[src])
        result = {}

        def writer(tmp_file):
            result.update(_ordered_into_file(client, pieces, tmp_file, temp_path_for(dst), opts, chunk_rows,
                                             progress, watch))
        atomic_write(dst, writer, inputs=[src], overwrite=overwrite)
        return result
    finally:
        _close(client, cluster)


def _close(client, cluster) -> None:
    """Close the client and a cluster started for the run, in bounded time; a
    failure to close (the scheduler already gone) does not hide the run's result."""
    with contextlib.suppress(Exception):
        client.close(timeout=CLOSE_TIMEOUT_S)
    if cluster is not None:
        with contextlib.suppress(Exception):
            cluster.close(timeout=CLOSE_TIMEOUT_S)


def _check_paths(src: Path, dst: Path, in_format, out_format) -> None:
    """Parquet in, Parquet out (a folder for a dataset), else one clear error."""
    if not is_dataset(src) and guess_format(src, in_format) != "parquet":
        raise InputError(f"the dask engine reads Parquet files and datasets, not {src.name}; "
                         f"convert it to Parquet or use the default engine (--engine local)")
    if not is_dataset(src) and not src.is_file():
        raise InputError(f"input file {src} does not exist")
    if not is_dataset(src) and guess_format(dst, out_format) != "parquet":
        raise InputError(f"the dask engine writes Parquet; give the output a .parquet name, not {dst.name}")
    if is_dataset(src) and dst.suffix and guess_format(dst, out_format) != "parquet":
        raise InputError(f"a dataset input {src} writes a dataset folder; give a folder name, not {dst.name}")


def _dask_bar(pieces, progress):
    """A progress bar over the rows of all pieces (None without ``progress``)."""
    if not progress:
        return None
    from tqdm.auto import tqdm
    return tqdm(total=_rows(pieces), unit="row", unit_scale=True, desc="specpar estimate (dask)")


def _failed(name, exc) -> InputError:
    """The error that stops the run when a piece failed on every try."""
    msg = exc.args[0] if exc.args else exc
    return InputError(f"partition {name} failed {RETRIES + 1} times; no output written: {msg}")


def _solve_into_folder(client, pieces, tmp, opts, chunk_rows, progress, watch) -> dict:
    """Every worker writes its pieces under the folder ``tmp``; the counts
    (collected in the pieces' order, each waited for through ``watch``)."""
    futures = []
    for name, path, groups, rel in pieces:
        fut = client.submit(_solve_piece, path, groups, str(tmp), rel, opts, chunk_rows,
                            retries=RETRIES, pure=False, key=f"specpar-{abs(hash((str(tmp), name)))}")
        futures.append((fut, name))
    bar = _dask_bar(pieces, progress)
    total = {}
    try:
        for fut, name in futures:
            try:
                counts = watch.result(fut)
            except RunStopped:
                raise
            except Exception as exc:
                raise _failed(name, exc) from None
            total = combine_counts(total, counts)
            if bar is not None:
                bar.update(counts["rows"])
    finally:
        for fut, _ in futures:
            fut.cancel()
        if bar is not None:
            bar.close()
    return total


def _append_piece(writer, piece_path, out_path):
    """Copy the row groups of a worker's piece file onto the output, in order; the
    writer (opened on the first piece, with its schema and metadata) is returned."""
    import pyarrow.parquet as pq
    pf = pq.ParquetFile(str(piece_path))
    if writer is None:
        writer = parquet_writer(out_path, pf.schema_arrow)
    for g in range(pf.metadata.num_row_groups):
        writer.write_table(fit_to_schema(pf.read_row_group(g), writer.schema))
    return writer


def _ordered_into_file(client, pieces, out_path, scratch, opts, chunk_rows, progress, watch):
    """Solve the pieces of one file on the cluster, each worker writing its piece
    to the hidden folder ``scratch`` beside the output, and copy the pieces into one Parquet file
    in order as they finish (no table travels through the scheduler); at most a
    few pieces are waiting at once, and the folder is removed at the end."""
    out_path = Path(out_path)
    n_workers = max(1, watch.workers() or 0)  # asked with a time bound
    window = PIECES_PER_WORKER * n_workers
    futures, names, files = [], [], []
    bar = _dask_bar(pieces, progress)
    make_folder(scratch, exist_ok=False)

    def submit(i):
        name, path, groups, rel = pieces[i]
        files.append(scratch / rel)
        futures.append(client.submit(_solve_piece, path, groups, str(scratch), rel, opts, chunk_rows,
                                     retries=RETRIES, pure=False,
                                     key=f"specpar-{abs(hash((str(out_path), name)))}"))
        names.append(name)

    writer, total = None, {}
    try:
        for i in range(min(window, len(pieces))):
            submit(i)
        for i in range(len(pieces)):
            try:
                summary = watch.result(futures[i])
            except RunStopped:
                raise
            except Exception as exc:
                raise _failed(names[i], exc) from None
            futures[i] = None  # release the piece
            if i + window < len(pieces):
                submit(i + window)
            writer = _append_piece(writer, files[i], out_path)
            files[i].unlink()
            total = combine_counts(total, summary)
            if bar is not None:
                bar.update(summary["rows"])
    finally:
        for f in futures:
            if f is not None:  # pieces not yet collected (after an error)
                f.cancel()
        if writer is not None:
            writer.close()
        if bar is not None:
            bar.close()
        shutil.rmtree(scratch, ignore_errors=True)
    return total
