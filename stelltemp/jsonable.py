"""Plain Python values for JSON output: the one converter every ``--json`` uses."""

import math

import numpy as np


def json_ready(value):
    """A copy of ``value`` that json.dumps accepts.

    numpy scalars and arrays become Python numbers and lists; NaN and ±inf
    become None (JSON has no such numbers); dicts, lists and tuples are
    converted element by element.
    """
    if isinstance(value, dict):
        return {k: json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if isinstance(value, np.ndarray):
        return [json_ready(v) for v in value.tolist()]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def table_row(table, index=0):
    """One row of a table as a dict: ``{"value", "unit"}`` for Quantities, plain values otherwise.

    Examples
    --------
    >>> from astropy.table import QTable
    >>> import astropy.units as u
    >>> table_row(QTable({"t": [5000.0] * u.K, "n": [2]}))
    {'t': {'value': 5000.0, 'unit': 'K'}, 'n': 2}
    """
    row = {}
    for name in table.colnames:
        value = table[name][index]
        if hasattr(value, "unit"):
            row[name] = {"value": float(value.value), "unit": str(value.unit) or ""}
        else:
            row[name] = value.item() if hasattr(value, "item") else value
    return row


def table_ready(table):
    """A table as ``{"meta", "units", "rows"}`` (NaN → None), ready for json.dumps.

    Examples
    --------
    >>> from astropy.table import Table
    >>> table_ready(Table({"x": [1.0, float("nan")]}, meta={"a": 1}))
    {'meta': {'a': 1}, 'units': {'x': None}, 'rows': [{'x': 1.0}, {'x': None}]}
    """
    units = {c: (str(table[c].unit) if table[c].unit is not None else None) for c in table.colnames}
    rows = [{c: json_ready(row[c]) for c in table.colnames} for row in table]
    return {"meta": json_ready(dict(table.meta)), "units": units, "rows": rows}
