"""Per-row notes of what was assumed where an input was missing.

Every default that changes a number (a magnitude error of 0.03 mag, E(B−V)
= 0, solar [Fe/H], a dwarf's relations, a parallax without error) is
written into the row it affected, counted in the table metadata and shown
on screen.  `RowNotes` collects them vectorised: one boolean mask per
statement, joined into one text per row only at the end.

Examples
--------
>>> import numpy as np
>>> notes = RowNotes(3)
>>> notes.add(np.array([True, False, True]), "E(B-V) = 0 assumed")
>>> notes.add(np.array([True, False, False]), "[Fe/H] = 0 assumed")
>>> [str(t) for t in notes.texts()]
['E(B-V) = 0 assumed; [Fe/H] = 0 assumed', '', 'E(B-V) = 0 assumed']
>>> notes.counts()
{'E(B-V) = 0 assumed': 2, '[Fe/H] = 0 assumed': 1}
"""

import numpy as np

from ..patterns import unique_rows

SEPARATOR = "; "


class RowNotes:
    """Statements, each true for some rows of a table of ``n`` rows."""

    def __init__(self, n):
        self.n = int(n)
        self._items = []  # (text, mask)

    def add(self, mask, text):
        """Attach ``text`` to the rows where ``mask`` is True (a scalar applies to all)."""
        mask = np.broadcast_to(np.asarray(mask, bool), (self.n,))
        if mask.any():
            self._items.append((str(text), mask.copy()))

    def texts(self):
        """One str per row (dtype object): its statements joined by '; ' ('' for none)."""
        if not self._items or self.n == 0:
            return np.full(self.n, "", dtype=object)
        bits = np.stack([mask for _, mask in self._items], axis=1)
        codes, inverse = unique_rows(bits)
        labels = [SEPARATOR.join(text for (text, _), on in zip(self._items, row) if on)
                  for row in codes]
        # str objects, one shared per distinct text (fixed width would copy the longest text to every row)
        return np.array(labels, dtype=object)[inverse]

    def counts(self):
        """Statement → number of rows it applies to (for table metadata)."""
        out = {}
        for text, mask in self._items:
            out[text] = out.get(text, 0) + int(mask.sum())
        return out
