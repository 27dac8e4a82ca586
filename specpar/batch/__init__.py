"""Running the estimate over files and Parquet datasets in blocks of rows
(:mod:`.stream`, :mod:`.csvblocks`), on a Dask cluster (:mod:`.daskrun`), and
the benchmark (:mod:`.bench`); :mod:`.blocks` and :mod:`.parquet` hold the
pieces they share."""
