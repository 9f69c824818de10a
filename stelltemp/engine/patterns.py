"""Distinct rows of a boolean matrix, fast: the patterns of relations or notes that stars share.

``np.unique(bits, axis=0)`` sorts whole rows (a structured view: ~2 s for a
million rows).  A row of at most 62 flags is one integer; counting or
sorting those integers gives the same patterns, in the same (lexicographic)
order, for a small part of that cost.
"""

import numpy as np

#: widest row packed into one int64 code
MAX_BITS = 62
#: use a count over all 2**k codes (linear time) up to this many codes
DENSE_CODES = 1 << 16


def unique_rows(bits):
    """The distinct rows of ``bits`` and, per row, the index of its pattern.

    Parameters
    ----------
    bits : array_like of bool, shape (n, k)

    Returns
    -------
    patterns : ndarray of bool, shape (n_patterns, k)
        Sorted as ``np.unique(bits, axis=0)`` sorts them.
    inverse : ndarray of intp, shape (n,)
        ``patterns[inverse]`` equals ``bits``.

    Examples
    --------
    >>> pats, inv = unique_rows([[True, False], [False, False], [True, False]])
    >>> pats.tolist(), inv.tolist()
    ([[False, False], [True, False]], [1, 0, 1])
    """
    bits = np.asarray(bits, bool)
    n, k = bits.shape
    if k > MAX_BITS:
        pats, inv = np.unique(bits, axis=0, return_inverse=True)
        return pats, np.asarray(inv, np.intp).reshape(-1)
    weights = np.left_shift(np.int64(1), np.arange(k - 1, -1, -1, dtype=np.int64))
    codes = bits.astype(np.int64) @ weights if k else np.zeros(n, np.int64)
    if (1 << k) <= max(DENSE_CODES, n):
        present = np.flatnonzero(np.bincount(codes, minlength=1 << k))
        lookup = np.empty(1 << k, np.intp)
        lookup[present] = np.arange(present.size)
        uniq, inv = present.astype(np.int64), lookup[codes]
    else:
        uniq, inv = np.unique(codes, return_inverse=True)
    patterns = (uniq[:, None] & weights[None, :]) != 0
    return patterns, np.asarray(inv, np.intp).reshape(-1)

