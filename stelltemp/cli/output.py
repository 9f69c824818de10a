"""Everything the subcommands print: JSON, rounded numbers with units, plain tables.

* :func:`emit_json` — the one ``--json`` writer (through :func:`stelltemp.jsonable.json_ready`).
* :func:`measure` — a value and its error as a scientist writes them: the
  error to two significant figures and the value to the same decimal place
  (``5750 ± 110 K``), a reason in brackets where a value is blank.
* :func:`plural` — ``1 relation``, ``2 relations``.
* :func:`print_table` — a plain-text table with units in the header.
"""

import json
import math
import sys

import numpy as np

from ..jsonable import json_ready

__all__ = ["BLANK", "emit_json", "interval", "measure", "number", "plural", "print_table", "rounded", "sig", "significant"]

#: what a blank (NaN / missing) value prints as
BLANK = "—"
#: values whose decimal exponent lies outside this range are written with a power of ten
_PLAIN_EXPONENTS = range(-3, 6)


def emit_json(obj, out=None):
    """Print an object as indented JSON (NaN and ±inf become null)."""
    print(json.dumps(json_ready(obj), indent=2, ensure_ascii=False), file=out or sys.stdout)


def plural(n, word, words=None):
    """``"1 relation"``, ``"2 relations"`` (``words`` for an irregular plural).

    >>> plural(1, "relation"), plural(0, "degree of freedom", "degrees of freedom")
    ('1 relation', '0 degrees of freedom')
    """
    n = int(n)
    return f"{n} {word if n == 1 else (words or word + 's')}"


def _finite(x):
    return x is not None and isinstance(x, (int, float, np.integer, np.floating)) and math.isfinite(x)


def _value(x):
    """A plain float from a float, a numpy scalar, a Quantity or a ``{"value", "unit"}`` dict."""
    if isinstance(x, dict):
        x = x.get("value")
    if hasattr(x, "unit") and hasattr(x, "value"):
        x = x.value
    if x is None:
        return None
    try:
        return float(x)
    except (TypeError, ValueError):
        return None


def _with_unit(text, unit):
    return f"{text} {unit}" if unit else text


def number(value, unit="", digits=4, reason=None):
    """A value without an error: ``digits`` significant figures, or the blank with its reason.

    >>> number(3.1), number(float("nan"), "K", reason="no parallax given")
    ('3.1', '— (no parallax given)')
    """
    v = _value(value)
    if v is None or math.isnan(v):
        return BLANK + (f" ({reason})" if reason else "")
    if math.isinf(v):
        return _with_unit("∞" if v > 0 else "−∞", unit)
    return _with_unit(f"{v:.{digits}g}", unit)


def rounded(value, err, digits=2):
    """(value text, error text, power of ten or None): the error to ``digits`` significant figures.

    >>> rounded(5749.8, 112.3)
    ('5750', '110', None)
    >>> rounded(3.828e26, 1.21e25)
    ('3.83', '0.12', 26)
    """
    e = float(f"{err:.{digits - 1}e}")  # round first: 0.0996 → 0.10 sets the decimals
    e_exp = math.floor(math.log10(e))
    ref = abs(value) if value else e
    v_exp = math.floor(math.log10(ref)) if ref > 0 else e_exp
    power = None
    if max(v_exp, e_exp) not in _PLAIN_EXPONENTS:
        power = max(v_exp, e_exp)
        value, e, e_exp = value / 10**power, e / 10**power, e_exp - power
    decimals = digits - 1 - e_exp
    if decimals >= 0:
        return f"{value:.{decimals}f}", f"{e:.{decimals}f}", power
    scale = 10 ** (-decimals)
    return f"{round(value / scale) * scale:.0f}", f"{round(e / scale) * scale:.0f}", power


def measure(value, err=None, unit="", reason=None, digits=4):
    """``value ± err unit`` rounded as a scientist would.

    Parameters
    ----------
    value, err : float, Quantity or ``{"value", "unit"}`` dict
        A blank (NaN) value prints as ``—`` followed by ``reason`` in brackets.
        Without a usable error the value keeps ``digits`` significant figures.
    unit : str
        Printed after the number (empty: none).

    Examples
    --------
    >>> measure(5749.8, 112.3, "K")
    '5750 ± 110 K'
    >>> measure(0.0512, 0.0199, "mag")
    '0.051 ± 0.020 mag'
    >>> measure(3.828e26, 1.21e25, "W")
    '(3.83 ± 0.12) × 10^26 W'
    >>> measure(float("nan"), 0.1, "R_sun", reason="parallax error above 20 %")
    '— (parallax error above 20 %)'
    """
    v, e = _value(value), _value(err)
    if v is None or not math.isfinite(v) or e is None or not math.isfinite(e) or e <= 0:
        text = number(v, unit, digits, reason)
        if v is not None and math.isfinite(v) and e is not None and math.isinf(e):
            text += " (error unbounded)"
        return text
    vt, et, power = rounded(v, e)
    if power is None:
        return _with_unit(f"{vt} ± {et}", unit)
    return _with_unit(f"({vt} ± {et}) × 10^{power}", unit)


def interval(lo, hi, err, unit=""):
    """``lo – hi unit`` with the decimals the error ``err`` sets (see :func:`rounded`).

    >>> interval(5864.4, 6109.4, 122.5, "K")
    '5860 – 6110 K'
    """
    lo, hi, e = _value(lo), _value(hi), _value(err)
    if e is None or not math.isfinite(e) or e <= 0 or not all(x is not None and math.isfinite(x) for x in (lo, hi)):
        return f"{number(lo, '', 5)} – {number(hi, unit, 5)}"
    return f"{rounded(lo, e)[0]} – {_with_unit(rounded(hi, e)[0], unit)}"


def significant(value, digits=3):
    """``digits`` significant figures in plain notation (a power of ten only beyond 10^-3 … 10^6).

    >>> significant(11203.4), significant(0.1674), significant(2.5e7)
    ('11200', '0.167', '2.50 × 10^7')
    """
    v = float(value)
    if not math.isfinite(v):
        return BLANK
    if v == 0:
        return "0"
    exp = math.floor(math.log10(abs(float(f"{v:.{digits - 1}e}"))))
    if exp not in _PLAIN_EXPONENTS:
        return f"{v / 10**exp:.{digits - 1}f} × 10^{exp}"
    decimals = digits - 1 - exp
    if decimals >= 0:
        return f"{v:.{decimals}f}"
    scale = 10 ** (-decimals)
    return f"{round(v / scale) * scale:.0f}"


def sig(digits):
    """A table cell format: :func:`significant` with ``digits`` figures."""
    return lambda value: significant(value, digits)


def _cell(value, fmt):
    if isinstance(value, (float, np.floating)) and not math.isfinite(value):
        return "-"
    return fmt(value) if callable(fmt) else fmt.format(value)


def print_table(table, columns, out=None):
    """A plain-text table of ``columns`` [(name, format), …] with each unit in the header.

    A format is a ``str.format`` pattern or a function of the value (e.g. :func:`sig`).
    """
    out = out or sys.stdout
    header = [name + (f" [{table[name].unit}]" if table[name].unit not in (None, "") and str(table[name].unit)
                      else "") for name, _ in columns]
    cells = [[_cell(row[name], fmt) for name, fmt in columns] for row in table]
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(header)]
    print("  ".join(h.ljust(w) for h, w in zip(header, widths)).rstrip(), file=out)
    for r in cells:
        print("  ".join(v.ljust(w) for v, w in zip(r, widths)).rstrip(), file=out)
