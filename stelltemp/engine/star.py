"""One star from magnitudes typed one band at a time.

A convenience over :func:`stelltemp.engine.estimate` for a single star:
magnitudes arrive as ``(band, mag, err)`` triples (as
:func:`stelltemp.parsing.parse_magnitude` reads them), passband names are
resolved once, and the one result row is returned both as a table and as a
plain dict with units (for printing or JSON).
"""

from ..errors import StelltempError
from ..jsonable import table_row

__all__ = ["estimate_star"]


def estimate_star(magnitudes, **options):
    """Temperature and derived quantities of one star.

    Parameters
    ----------
    magnitudes : iterable of (str, float, float or None)
        ``(band, mag, err)``: a passband key (or a plain band name, or a curve
        file), the magnitude (mag) and its 1σ error (mag; None for the
        engine's default).
    **options
        Passed to :func:`stelltemp.engine.estimate` (``ebv``, ``ebv_err``,
        ``law``, ``rv``, ``parallax``, ``feh``, ``logg``, ``method`` …).

    Returns
    -------
    row : dict
        Column name → ``{"value", "unit"}`` for Quantities, a plain value otherwise.
    meta : dict
        The table metadata (method, passbands, extinction law, note …).
    table : QTable
        The one-row result table.

    Raises
    ------
    StelltempError
        For an unknown passband, a band given twice, or a bad option.

    Examples
    --------
    >>> row, meta, table = estimate_star([("B_JC", 10.65, 0.01), ("V_JC", 10.0, 0.01)])
    >>> row["t_bb"]["unit"], 5000 < row["t_bb"]["value"] < 7000
    ('K', True)
    """
    from ..passbands import get_passband
    from . import estimate

    mags, errs = {}, {}
    for band, mag, err in magnitudes:
        key = get_passband(band).key
        if key in mags:
            raise StelltempError(f"passband {key} given twice")
        mags[key] = [mag]
        if err is not None:
            errs[key] = [err]
    table = estimate(mags, errs, **options)
    return table_row(table, 0), dict(table.meta), table
