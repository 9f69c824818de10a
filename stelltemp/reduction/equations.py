"""The transformation equations between a natural and a standard system.

For each filter f of the instrument, the instrumental magnitude m of a star
observed at airmass X is written as a function of its standard magnitude M
in the band the filter is transformed to and of its standard colour C
(a difference of two standard magnitudes)::

    m = M + z_f + k'_f X + c_f C + k''_f X C

with z the zero point (mag), k' the first-order extinction (mag per
airmass), c the colour term (mag per mag of colour) and k'' the optional
second-order (colour-dependent) extinction (mag per airmass per mag).  This
is the form of Harris, FitzGerald & Reed (1981, PASP 93, 507): the
instrumental magnitude is the dependent variable, modelled from the
standard values, so that the noisy quantity stands alone on the left and the
fit is linear in the coefficients.  The signs follow the usual convention
(common practice): k' > 0 (fainter at higher airmass); k'' < 0 for a blue
band, where a redder star suffers less extinction.

Without the k'' term, c is the colour term at the airmasses of the night (the
colour-dependent extinction is absorbed at their mean); with it, c is the
colour term above the atmosphere.  Predicted and fitted terms are compared
in the same form (:mod:`stelltemp.reduction.predict` uses the setup's).

Applying the fit to a target turns the equations round: its measurements in
all filters give a linear system for the standard magnitudes (see
:mod:`stelltemp.reduction.apply`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import StelltempError

__all__ = ["PARAMETERS", "BandSetup", "parameter_names", "design_matrix", "default_setups"]

#: coefficient names in the order of the design-matrix columns
PARAMETERS = ("zero_point", "extinction", "colour_term", "colour_extinction")
#: units of the coefficients, same order
PARAMETER_UNITS = ("mag", "mag / airmass", "mag / mag", "mag / (airmass mag)")


@dataclass(frozen=True)
class BandSetup:
    """How one filter is transformed.

    Attributes
    ----------
    filter : str
        Filter name as it appears in the observations (and the instrument file).
    band : str
        Passband key of the standard band the filter is transformed to.
    colour : tuple of str
        (blue, red) passband keys of the standard colour used in the colour term.
    second_order : bool
        Fit the colour-dependent extinction k'' as well.

    Examples
    --------
    >>> v = BandSetup("V", "V_JC", ("B_JC", "V_JC"))
    >>> v.colour_name, v.n_parameters
    ('B_JC-V_JC', 3)
    >>> BandSetup("V", "V_JC", ("V_JC", "V_JC"))
    Traceback (most recent call last):
    ...
    stelltemp.errors.StelltempError: filter V: the colour needs two different bands, got ('V_JC', 'V_JC')
    """

    filter: str
    band: str
    colour: tuple
    second_order: bool = False

    def __post_init__(self):
        if len(self.colour) != 2 or self.colour[0] == self.colour[1]:
            raise StelltempError(f"filter {self.filter}: the colour needs two different bands, got {self.colour}")

    @property
    def colour_name(self) -> str:
        """The colour written as ``blue-red``."""
        return f"{self.colour[0]}-{self.colour[1]}"

    @property
    def n_parameters(self) -> int:
        """3 (z, k', c) or 4 with the second-order term."""
        return 4 if self.second_order else 3


def parameter_names(setup: BandSetup):
    """Names of the coefficients fitted for ``setup``, in design-matrix order."""
    return PARAMETERS[: setup.n_parameters]


def design_matrix(airmass, colour, second_order=False):
    """Columns [1, X, C, X·C] of the transformation equation (last one optional).

    Parameters
    ----------
    airmass, colour : array_like
        X and the standard colour C (mag), broadcast together.
    second_order : bool
        Include the X·C column.

    Returns
    -------
    ndarray, shape (..., 3) or (..., 4)

    Examples
    --------
    >>> design_matrix([1.0, 2.0], [0.5, 0.0], second_order=True).tolist()
    [[1.0, 1.0, 0.5, 0.5], [1.0, 2.0, 0.0, 0.0]]
    """
    x, c = np.broadcast_arrays(np.asarray(airmass, float), np.asarray(colour, float))
    cols = [np.ones_like(x), x, c] + ([x * c] if second_order else [])
    return np.stack(cols, axis=-1)


def default_setups(filters, second_order=False):
    """Standard band and colour for each filter, from the filters' own passbands.

    Each filter is transformed to the standard band of its passband; the
    colour is that of the filter and its neighbour in wavelength (the
    bluest filter pairs with the next, every other one with the one before:
    B and V use B−V, R uses V−R, I uses R−I), common practice.

    Parameters
    ----------
    filters : dict
        Filter name → standard passband key (for an instrument file:
        ``{name: spec.passband.key for name, spec in instrument.filters.items()}``).
    second_order : bool or collection of str
        True for all filters, or the names of the filters that get k''.

    Returns
    -------
    list of BandSetup, ordered by wavelength

    Examples
    --------
    >>> for s in default_setups({"V": "V_JC", "B": "B_JC", "I": "Ic_JC", "R": "Rc_JC"}, second_order={"B"}):
    ...     print(s.filter, s.band, s.colour_name, s.n_parameters)
    B B_JC B_JC-V_JC 4
    V V_JC B_JC-V_JC 3
    R Rc_JC V_JC-Rc_JC 3
    I Ic_JC Rc_JC-Ic_JC 3
    """
    from ..passbands import get_passband

    if len(filters) < 2:
        raise StelltempError("a colour term needs at least two filters")
    items = sorted(filters.items(), key=lambda kv: get_passband(kv[1]).pivot_wavelength.value)
    keys = [get_passband(k).key for _, k in items]
    if len(set(keys)) < len(keys):
        raise StelltempError(f"two filters are transformed to the same standard band ({', '.join(keys)})")
    out = []
    for i, (name, _) in enumerate(items):
        pair = (keys[0], keys[1]) if i == 0 else (keys[i - 1], keys[i])
        so = second_order if isinstance(second_order, bool) else name in second_order
        out.append(BandSetup(name, keys[i], pair, so))
    return out
