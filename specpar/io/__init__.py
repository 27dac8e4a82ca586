"""I/O layer: reading and writing tables (CSV, text, ECSV, FITS, VOTable,
Parquet), column mapping, sidecars, atomic output and figures.

Modules: :mod:`.formats` (format names, the format of a path), :mod:`.read`
(:func:`read_table`), :mod:`.delimited` and :mod:`.blocks` (CSV/text whole and
in blocks), :mod:`.frames` (checking and typing frames), :mod:`.write`
(:func:`write_table`), :mod:`.cells` (columns ready to write), :mod:`.formulas`,
:mod:`.sidecar`, :mod:`.atomic` (checked, atomic output), :mod:`.columns`
(catalogue spellings, ``--col``), :mod:`.figures`.
"""
