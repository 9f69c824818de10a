"""Interstellar extinction laws, applied to spectra wavelength by wavelength.

The laws are the R_V-dependent averages of the ``dust_extinction`` package
(Gordon 2024, JOSS 9, 7023).  A law gives k(λ) = A(λ)/A(V); with A_V =
R_V · E(B−V) the transmission is 10^(−0.4 A_V k(λ)).

E(B−V) here is the *nominal* colour excess of the law, the parameter that
sets A_V = R_V E(B−V).  It is not the band-integrated B−V excess of any
particular star, which depends on the star's spectrum: that is why
stelltemp reddens the spectrum and integrates it through the passband
instead of using a constant A_band per unit E(B−V).

Default: G23 (Gordon et al. 2023, ApJ 950, 86) with R_V = 3.1, the average
Milky Way value.  G23 is the most recent of the laws, is built on
spectroscopic extinction curves from the far-UV to the mid-IR (so one law
covers every built-in passband from U to Ks), and agrees with F19/F99 in
the optical.

Constant per-band coefficients (A_band / E(B−V) at one reference
temperature) are available only as a documented shortcut through
:func:`stelltemp.bandgrid.constant_coefficient`.
"""

from functools import lru_cache

import numpy as np

from .errors import StelltempError

#: name -> (dust_extinction class name, citation, R_V range of the class).  The
#: package is imported only when a law is evaluated (a run with cached band
#: tables never needs it); ``tests/test_extinction.py`` checks the ranges
#: against the classes.
LAWS = {
    "G23": ("G23", "Gordon et al. 2023, ApJ 950, 86", (2.3, 5.6)),
    "F99": ("F99", "Fitzpatrick 1999, PASP 111, 63", (2.0, 6.0)),
    "F19": ("F19", "Fitzpatrick et al. 2019, ApJ 886, 108", (2.0, 6.0)),
    "CCM89": ("CCM89", "Cardelli, Clayton & Mathis 1989, ApJ 345, 245", (2.0, 6.0)),
    "O94": ("O94", "O'Donnell 1994, ApJ 422, 158", (2.0, 6.0)),
}

DEFAULT_LAW = "G23"
DEFAULT_RV = 3.1


def check_law(law, rv):
    """Validate a law name and R_V; return (dust_extinction class name, citation)."""
    if law not in LAWS:
        raise StelltempError(f"unknown extinction law {law!r}; choose one of {', '.join(LAWS)}")
    name, citation, (lo, hi) = LAWS[law]
    try:
        rv = float(rv)
    except (TypeError, ValueError):
        raise StelltempError(f"R_V must be a number, got {rv!r}") from None
    if not (lo <= rv <= hi):
        raise StelltempError(f"R_V = {rv:g} is outside the range {lo}–{hi} of law {law}")
    return name, citation


def law_class(law):
    """The dust_extinction class of a law name (imports the package)."""
    from dust_extinction import parameter_averages

    return getattr(parameter_averages, LAWS[law][0])


@lru_cache(maxsize=64)
def law_model(law, rv):
    """The dust_extinction model of a law at one R_V, built once per run."""
    check_law(law, rv)
    return law_class(law)(Rv=float(rv))


def relative_extinction(wave_angstrom, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """k(λ) = A(λ)/A(V) of a law at the given wavelengths (Å).

    Raises
    ------
    StelltempError
        Unknown law, R_V outside the law's range, or wavelengths outside
        the range where the law is defined.
    """
    from astropy import units as u

    check_law(law, rv)
    model = law_model(law, float(rv))
    w = np.asarray(wave_angstrom, float)
    x = 1e4 / w  # inverse micron
    lo, hi = law_class(law).x_range
    if np.any(x < lo) or np.any(x > hi):
        raise StelltempError(
            f"law {law} is defined from {1e4 / hi:.0f} to {1e4 / lo:.0f} Å; "
            f"wavelengths {w.min():.0f}–{w.max():.0f} Å reach outside it")
    return np.asarray(model(x / u.micron), float)


def transmission(wave_angstrom, ebv, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Fraction of light transmitted, 10^(−0.4 R_V E(B−V) k(λ)); broadcasts ``ebv`` against wavelength."""
    k = relative_extinction(wave_angstrom, law, rv)
    return 10 ** (-0.4 * float(rv) * np.multiply.outer(np.asarray(ebv, float), k))
