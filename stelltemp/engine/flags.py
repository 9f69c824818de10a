"""Quality flags of a temperature result, as bits of one integer per star.

Each bit says one thing; a star may carry several.  ``describe(mask)`` turns
a mask into the comma-separated names used in tables and reports.

Every flag has a severity (`SEVERITY`):

* ``info`` — worth knowing, the numbers stand as they are;
* ``warning`` — a number is a limit, a value was set aside, or the star's
  colours contradict each other: read the row before quoting it;
* ``unusable`` — no result can be quoted.

A row's severity is that of its worst flag, and ``unusable`` whenever it
has neither a colour temperature nor a calibrated one (`row_severity`).
`RULES` states the rule and threshold behind each flag; this module and the
flags table of DEVELOPERS.md are the one place they are written down.
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
#: a measured colour went unused although its relations cover the star's T_eff (its value
#: lies outside their published ranges)
OUTSIDE_CALIBRATION = 1 << 4
#: multi-band fit: the magnitudes are not those of one reddened blackbody, p(χ²) below
#: `POOR_FIT_P` (expected for real stars measured to ~0.01 mag: information only)
POOR_FIT = 1 << 5
BLACKBODY_MISFIT = POOR_FIT
#: the E(B−V) error makes up more than `REDDENING_SHARE` of the variance of teff_cal
#: (of T_bb where there is no calibrated temperature)
REDDENING_DOMINATES = 1 << 6
#: value outside physically plausible limits (e.g. |mag| > 40, negative error)
ABSURD_VALUE = 1 << 7
#: no calibrated effective temperature could be computed
NO_CALIBRATION = 1 << 8
#: the calibrated temperatures of one star's colours disagree beyond their combined
#: errors: p(χ²) of the combination below `DISAGREE_P`
COLOURS_DISAGREE = 1 << 9

#: p-value below which a multi-band blackbody fit is called a misfit
POOR_FIT_P = 1e-3
#: share of the T_bb variance from the E(B−V) error above which REDDENING_DOMINATES is set
REDDENING_SHARE = 0.9
#: p-value of the calibrated combination's χ² below which COLOURS_DISAGREE is set
DISAGREE_P = 1e-3

NAMES = {
    BAD_INPUT: "bad_input",
    NO_SOLUTION: "no_solution",
    AT_GRID_EDGE: "grid_edge",
    RJ_LIMIT: "rayleigh_jeans",
    OUTSIDE_CALIBRATION: "outside_calibration",
    POOR_FIT: "not_blackbody",
    REDDENING_DOMINATES: "reddening_dominates",
    ABSURD_VALUE: "absurd_value",
    NO_CALIBRATION: "no_calibration",
    COLOURS_DISAGREE: "colours_disagree",
}

#: severity levels, in increasing order
LEVELS = ("", "info", "warning", "unusable")
INFO, WARNING, UNUSABLE = 1, 2, 3

#: severity of each flag
SEVERITY = {
    BAD_INPUT: WARNING,
    NO_SOLUTION: UNUSABLE,
    AT_GRID_EDGE: WARNING,
    RJ_LIMIT: WARNING,
    OUTSIDE_CALIBRATION: INFO,
    POOR_FIT: INFO,
    REDDENING_DOMINATES: INFO,
    ABSURD_VALUE: WARNING,
    NO_CALIBRATION: WARNING,
    COLOURS_DISAGREE: WARNING,
}

#: the rule behind each flag, with its threshold (shown by documentation and reports)
RULES = {
    BAD_INPUT: "a magnitude, error, E(B-V), [Fe/H], log g or parallax was missing, "
               "non-numeric or infinite and was set aside; too few usable bands leave no result",
    NO_SOLUTION: "the colour is bluer than a blackbody of any temperature (Rayleigh-Jeans limit)",
    AT_GRID_EDGE: "T_bb at the grid edge (1,000 or 100,000 K): only a limit is meaningful",
    RJ_LIMIT: "the upper 68 % bound of T_bb is unbounded: T_bb is a lower limit",
    OUTSIDE_CALIBRATION: "a measured colour was not used although its relations cover the star's "
                         "calibrated T_eff: its dereddened value lies outside their published colour "
                         "or [Fe/H] range (check that band or the reddening)",
    POOR_FIT: f"the magnitudes are not those of one reddened blackbody: p(chi2) < {POOR_FIT_P:g} "
              "(normal for real stars measured to ~0.01 mag; T_bb is the best-matching blackbody)",
    REDDENING_DOMINATES: f"the E(B-V) error makes up more than {REDDENING_SHARE:.0%} of the "
                         "variance of teff_cal (of T_bb where there is no teff_cal)",
    ABSURD_VALUE: "a value outside plausible limits (|mag| > 40, error < 0 or > 5 mag) was "
                  "dropped with its band",
    NO_CALIBRATION: "no calibrated T_eff (no relation for these colours, luminosity class or range)",
    COLOURS_DISAGREE: f"the calibrated temperatures of the star's colours disagree beyond their "
                      f"combined errors: p(chi2) < {DISAGREE_P:g} (bad photometry, a binary, wrong "
                      "reddening)",
}


def describe(mask):
    """Comma-separated flag names for one integer mask ('' when clean)."""
    mask = int(mask)
    return ",".join(name for bit, name in NAMES.items() if mask & bit)


_NAME_CACHE = {}


def encode(masks):
    """Dictionary encoding of the names of many masks: (codes, names) with names[codes] per row.

    ``codes`` is an int32 array like ``masks``; ``names`` holds the
    `describe` text of each distinct mask once (a str array).
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
    names = []
    for m in present.tolist():
        text = _NAME_CACHE.get(m)
        if text is None:
            text = _NAME_CACHE[m] = describe(m)
        names.append(text)
    return codes.reshape(masks.shape), np.array(names, dtype=str)


def describe_all(masks):
    """`describe` over an integer array: one str per row (dtype object, one shared str per distinct mask).

    Object dtype because fixed-width text would take 4 bytes per character
    of the longest name on every row; ``.astype(str)`` gives fixed width.
    """
    codes, names = encode(masks)
    return names.astype(object)[codes.ravel()]


def reddening_dominates(red_part, phot_part):
    """True where the E(B−V) term's share of the variance exceeds `REDDENING_SHARE`."""
    red2 = np.square(red_part)
    with np.errstate(invalid="ignore"):
        return red2 > REDDENING_SHARE * (red2 + np.square(phot_part))


def mask_at_least(level):
    """OR of all flag bits whose severity is ``level`` or worse."""
    out = 0
    for bit, sev in SEVERITY.items():
        if sev >= level:
            out |= bit
    return out


def row_severity(masks, usable=None):
    """Severity level (0 clean … 3 unusable) of each row.

    Parameters
    ----------
    masks : array_like of int
        Flag masks.
    usable : array_like of bool, optional
        Whether the row has any finite temperature; False makes it unusable.
    """
    masks = np.asarray(masks, dtype=np.int64)
    level = np.zeros(masks.shape, np.int64)
    for bit, sev in SEVERITY.items():
        level = np.where(masks & bit, np.maximum(level, sev), level)
    if usable is not None:
        level = np.where(np.asarray(usable, bool), level, UNUSABLE)
    return level


def severity_names(levels):
    """'' / 'info' / 'warning' / 'unusable' for each level (str objects)."""
    return np.array(LEVELS, dtype=object)[np.asarray(levels, dtype=np.int64)]


def summary(masks, levels):
    """Counts of rows by severity and by flag, for table metadata and reports."""
    masks = np.asarray(masks, dtype=np.int64)
    levels = np.asarray(levels, dtype=np.int64)
    out = {"rows": int(masks.size), "clean": int(np.sum(levels == 0))}
    for i, name in enumerate(LEVELS[1:], start=1):
        out[name] = int(np.sum(levels == i))
    out["by_flag"] = {NAMES[bit]: int(np.count_nonzero(masks & bit)) for bit in NAMES
                      if np.any(masks & bit)}
    return out
