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

import importlib

# names load their module on first use, so registering the CLI stays cheap
_HOME = {
    "ColumnMap": "mapping",
    "default_mapping": "mapping",
    "load_mapping": "mapping",
    "RunOptions": "batch",
    "RunSummary": "batch",
    "estimate_table": "batch",
    "run_catalogue": "batch",
}


def __getattr__(name):
    if name in _HOME:
        return getattr(importlib.import_module(f"stelltemp.catalog.{_HOME[name]}"), name)
    raise AttributeError(f"module 'stelltemp.catalog' has no attribute '{name}'")


__all__ = [
    "ColumnMap",
    "RunOptions",
    "RunSummary",
    "default_mapping",
    "estimate_table",
    "load_mapping",
    "run_catalogue",
]
