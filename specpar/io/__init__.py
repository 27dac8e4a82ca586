"""I/O layer: reading and writing tables (CSV, text, ECSV, FITS, VOTable,
Parquet), column mapping, sidecars, atomic output and figures."""
