"""Run the temperature engine over target lists of any size.

Modules, one idea each:

- :mod:`stelltemp.catalog.tableio` — read and write tables by file extension
  (CSV, ECSV, FITS, VOTable, Parquet), streaming readers, atomic output.
- :mod:`stelltemp.catalog.mapping` — which catalogue column holds which
  passband, error, reddening, parallax, [Fe/H] and log g.
- :mod:`stelltemp.catalog.hygiene` — turn raw column values into clean
  float64 inputs, flagging text, infinities and absurd values per row.
- :mod:`stelltemp.catalog.batch` — chunked runs with bounded memory, progress
  and a closing summary.
- :mod:`stelltemp.catalog.scale` — the same per-chunk work on Dask.
- :mod:`stelltemp.catalog.figure` — the colour–temperature diagram of a results file
  (the ``catalogue`` subcommand lives in :mod:`stelltemp.cli.catalogue`).
"""

from ..lazy import lazy_exports

# names load their module on first use, so registering the CLI stays cheap
_HOME = {
    "ColumnMap": "mapping",
    "default_mapping": "mapping",
    "load_mapping": "mapping",
    "RunOptions": "batch",
    "RunSummary": "batch",
    "estimate_table": "batch",
    "run_catalogue": "batch",
    "read_table": "tableio",
    "write_table": "tableio",
    "plot_results": "figure",
}

__getattr__, __dir__ = lazy_exports(__name__, _HOME)

__all__ = sorted(_HOME)
