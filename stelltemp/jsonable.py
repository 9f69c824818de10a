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
