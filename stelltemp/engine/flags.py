"""Quality flags of a temperature result, as bits of one integer per star.

Each bit says one thing; a star may carry several.  ``describe(mask)`` turns
a mask into the comma-separated names used in tables and reports.
"""

import numpy as np

#: a value was missing, non-numeric or infinite and was set aside (a catalogue run's
#: ``input_notes`` say which); with fewer usable bands than the method needs there is no result
BAD_INPUT = 1 << 0
#: the colour is bluer than a blackbody of any finite temperature (no solution)
NO_SOLUTION = 1 << 1
#: solution at the edge of the temperature grid (only a limit is meaningful)
AT_GRID_EDGE = 1 << 2
#: near the Rayleigh–Jeans limit the colour barely changes: the upper error is a lower limit
RJ_LIMIT = 1 << 3
#: a calibrated relation was used outside its published validity range (not applied)
OUTSIDE_CALIBRATION = 1 << 4
#: multi-band fit: reduced chi-squared p-value below 0.001
POOR_FIT = 1 << 5
#: the reddening error contributes more to the temperature error than the photometry
REDDENING_DOMINATES = 1 << 6
#: value outside physically plausible limits (e.g. |mag| > 40, negative error)
ABSURD_VALUE = 1 << 7
#: no calibrated effective temperature could be computed
NO_CALIBRATION = 1 << 8

NAMES = {
    BAD_INPUT: "bad_input",
    NO_SOLUTION: "no_solution",
    AT_GRID_EDGE: "grid_edge",
    RJ_LIMIT: "rayleigh_jeans",
    OUTSIDE_CALIBRATION: "outside_calibration",
    POOR_FIT: "poor_fit",
    REDDENING_DOMINATES: "reddening_dominates",
    ABSURD_VALUE: "absurd_value",
    NO_CALIBRATION: "no_calibration",
}


def describe(mask):
    """Comma-separated flag names for one integer mask ('' when clean)."""
    mask = int(mask)
    return ",".join(name for bit, name in NAMES.items() if mask & bit)


_NAME_CACHE = {}


def encode(masks):
    """Dictionary encoding of the names of many masks: (codes, names) with names[codes] per row.

    ``codes`` is an int32 array like ``masks``; ``names`` holds the
    `describe` text of each distinct mask once (an object array of str).
    O(n) for the usual small masks, built once per distinct mask per run.
    """
    masks = np.asarray(masks, dtype=np.int64)
    flat = masks.ravel()
    if flat.size and 0 <= flat.min() and flat.max() < 1 << 16:
        present = np.flatnonzero(np.bincount(flat))
        lookup = np.zeros(present[-1] + 1, np.int32)
        lookup[present] = np.arange(present.size, dtype=np.int32)
        codes = lookup[flat]
    else:
        present, codes = np.unique(flat, return_inverse=True)
        codes = codes.astype(np.int32)
    names = np.empty(present.size, dtype=object)
    for i, m in enumerate(present.tolist()):
        text = _NAME_CACHE.get(m)
        if text is None:
            text = _NAME_CACHE[m] = describe(m)
        names[i] = text
    return codes.reshape(masks.shape), names


def describe_all(masks):
    """`describe` over an integer array: one str per row (an object array sharing one str per mask)."""
    codes, names = encode(masks)
    return names[codes.ravel()]
