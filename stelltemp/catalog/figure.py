"""The colour–temperature diagram of a finished catalogue run, read back from its results file."""

from ..errors import StelltempError

__all__ = ["PLOT_ROWS", "plot_results"]

#: rows of a results file drawn (a diagram of millions of points reads no better)
PLOT_ROWS = 20_000


def plot_results(results_path, figure_path, law="G23", rv=3.1, replace=False):
    """Colour–temperature diagram of the first :data:`PLOT_ROWS` rows of a results file.

    Parameters
    ----------
    results_path : str or Path
        A table written by :func:`stelltemp.catalog.run_catalogue` (any format it writes).
    figure_path : str or Path
        PNG, PDF or SVG by extension; refused if it exists unless ``replace``.
    law, rv
        The extinction law and R_V of the run (for the reddening arrow).

    Returns
    -------
    Path of the figure.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from astropy.table import Table
    >>> from stelltemp.catalog import run_catalogue, write_table
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = write_table(Table({"B_JC": [10.65, 9.9], "V_JC": [10.0, 9.3]}), d / "in.csv")
    >>> _ = run_catalogue(d / "in.csv", d / "out.ecsv", quiet=True)
    >>> _ = plot_results(d / "out.ecsv", d / "diagram.png")
    >>> (d / "diagram.png").stat().st_size > 0
    True

    """
    from ..plots import plot_catalogue_results
    from .tableio import read_table

    table = read_table(results_path, max_rows=PLOT_ROWS)  # typed, with the units of the file or its sidecar
    if not len(table):
        raise StelltempError(f"{results_path}: no rows to plot")
    return plot_catalogue_results(table, figure_path, law=law, rv=rv, replace=replace)
