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
- :mod:`stelltemp.catalog.cli_hooks` — the ``catalogue`` subcommand.
"""

from stelltemp.catalog.batch import RunOptions, RunSummary, estimate_table, run_catalogue
from stelltemp.catalog.mapping import ColumnMap, default_mapping, load_mapping

__all__ = [
    "ColumnMap",
    "RunOptions",
    "RunSummary",
    "default_mapping",
    "estimate_table",
    "load_mapping",
    "run_catalogue",
]
