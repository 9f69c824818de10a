"""Distinct rows of a boolean matrix, fast: the patterns of relations or notes that stars share.

``np.unique(bits, axis=0)`` sorts whole rows (a structured view: ~2 s for a
million rows).  A row of at most 62 flags is one integer; counting or
sorting those integers gives the same patterns, in the same (lexicographic)
order, for a small part of that cost; rows of small integers (`distinct_int_rows`)
are packed the same way whenever their ranges fit one int64.
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



def distinct_int_rows(keys):
    """First occurrence and, per row, the index of its distinct row, for an integer matrix.

    The same answer as ``np.unique(keys, axis=0, return_index=True,
    return_inverse=True)[1:]``: each column is shifted to start at 0 and the
    row packed into one int64 in mixed radix (lexicographic order kept)
    whenever the product of the columns' ranges fits 62 bits, so one sort of
    integers replaces the sort of whole rows.

    Parameters
    ----------
    keys : array_like of int, shape (n, k)

    Returns
    -------
    first : ndarray of intp
        Row index of the first occurrence of each distinct row, in sorted order.
    inverse : ndarray of intp, shape (n,)

    Examples
    --------
    >>> first, inv = distinct_int_rows([[3, 1], [-2, 7], [3, 1]])
    >>> first.tolist(), inv.tolist()
    ([1, 0], [1, 0, 1])
    """
    keys = np.asarray(keys, np.int64)
    n, k = keys.shape
    if n == 0:
        return np.zeros(0, np.intp), np.zeros(0, np.intp)
    low = keys.min(axis=0)
    span = keys.max(axis=0) - low + 1
    if np.sum(np.log2(span.astype(float))) <= MAX_BITS:
        codes = np.zeros(n, np.int64)
        for c in range(k):  # Horner in mixed radix: the first column is the most significant
            codes = codes * span[c] + (keys[:, c] - low[c])
        _, first, inv = np.unique(codes, return_index=True, return_inverse=True)
    else:
        _, first, inv = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    return np.asarray(first, np.intp), np.asarray(inv, np.intp).reshape(-1)
