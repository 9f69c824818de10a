"""Synthetic photometry of arbitrary spectra through a passband.

All integrals are photon-counting integrals ∫ F_λ λ S(λ) dλ with the
passband's :attr:`~stelltemp.passbands.Passband.photon_response` S, so
energy-response curves are handled correctly (Bessell & Murphy 2012, PASP
124, 140).  The integration grid is the union of the passband's 2 Å integration grid
and the spectrum's own wavelengths inside the passband, with both curves
interpolated linearly (an energy curve is interpolated before it is divided
by λ).

Magnitudes:

* AB: m = −2.5 log10(∫F_λ λ S dλ / ∫F_λ^AB λ S dλ), F_ν^AB = 3631 Jy;
* ST: same with F_λ^ST = 3.63×10⁻⁹ erg s⁻¹ cm⁻² Å⁻¹;
* Vega: m = −2.5 log10(∫F_λ λ S dλ / ∫F_λ^Vega λ S dλ) + m_Vega.
"""

from functools import lru_cache

import numpy as np

from .errors import StelltempError
from .passbands import get_passband
from .planck import C_CGS, H_CGS
from .reference import ab_flam, st_flam, vega_spectrum

__all__ = ["band_integral", "synthetic_mag", "synthetic_colour", "photon_flux", "zero_point_integral"]


def _merged_grid(band, wave):
    lo, hi = band.wave[0], band.wave[-1]
    inside = wave[(wave > lo) & (wave < hi)]
    return np.union1d(band.integration_grid, inside)


def band_integral(wave, flam, passband):
    """∫ F_λ λ S dλ for one spectrum or a stack of spectra.

    Parameters
    ----------
    wave : ndarray, shape (n,)
        Wavelength in Å, increasing.
    flam : ndarray, shape (n,) or (m, n)
        F_λ in erg s⁻¹ cm⁻² Å⁻¹.
    passband : Passband or str

    Returns
    -------
    float or ndarray, shape (m,)
        The integral in erg s⁻¹ cm⁻² (times Å, since λ is in Å).
    """
    band = get_passband(passband)
    wave = np.asarray(wave, float)
    flam = np.asarray(flam, float)
    if wave.ndim != 1 or np.any(np.diff(wave) <= 0):
        raise StelltempError("spectrum wavelengths must be one-dimensional and increase strictly")
    lo, hi = band.wave_range
    if wave[0] > lo or wave[-1] < hi:
        raise StelltempError(
            f"spectrum ({wave[0]:.0f}–{wave[-1]:.0f} Å) does not cover passband {band.key} "
            f"({lo:.0f}–{hi:.0f} Å); stelltemp does not extrapolate spectra")
    grid = _merged_grid(band, wave)
    s = band.photon_response_at(grid)
    if flam.ndim == 1:
        f = np.interp(grid, wave, flam)
    else:
        f = np.stack([np.interp(grid, wave, row) for row in flam])
    return np.trapezoid(f * grid * s, grid, axis=-1)


def _reference_integral(band, magsys):
    if magsys == "Vega":
        w, f = vega_spectrum()
        return float(band_integral(w, f, band))
    grid = band.integration_grid
    ref = ab_flam(grid) if magsys == "AB" else st_flam(grid)
    return float(np.trapezoid(ref * grid * band.photon_response_at(grid), grid))


@lru_cache(maxsize=None)
def _builtin_reference_integral(key, magsys):
    return _reference_integral(get_passband(key), magsys)


def zero_point_integral(passband, magsys=None):
    """∫ F_λ^ref λ S dλ of the zero-magnitude reference of ``magsys`` (default: the band's)."""
    band = get_passband(passband)
    magsys = magsys or band.magsys
    if magsys not in ("Vega", "AB", "ST"):
        raise StelltempError(f"unknown magnitude system {magsys!r} (Vega, AB or ST)")
    if band.system == "user":  # user curves are not cached: two files may share a key
        return _reference_integral(band, magsys)
    return _builtin_reference_integral(band.key, magsys)


def mag_offset(passband, magsys=None):
    """Additive constant c with m = −2.5 log10(∫F_λ λ S dλ) + c."""
    band = get_passband(passband)
    magsys = magsys or band.magsys
    zp = 2.5 * np.log10(zero_point_integral(band, magsys))
    if magsys != "Vega":
        return zp
    if np.isnan(band.vega_mag):
        raise StelltempError(f"{band.key} has no adopted Vega magnitude (it is an {band.magsys} band)")
    return zp + band.vega_mag


def synthetic_mag(wave, flam, passband, magsys=None):
    """Synthetic magnitude of a spectrum through a passband.

    Parameters
    ----------
    wave : ndarray
        Wavelength in Å.
    flam : ndarray, shape (n,) or (m, n)
        F_λ in erg s⁻¹ cm⁻² Å⁻¹.
    passband : Passband or str
    magsys : {'Vega', 'AB', 'ST'}, optional
        Defaults to the passband's own system.
    """
    band = get_passband(passband)
    integral = band_integral(wave, flam, band)
    with np.errstate(divide="ignore", invalid="ignore"):  # zero or negative flux: inf or NaN
        return -2.5 * np.log10(integral) + mag_offset(band, magsys)


def synthetic_colour(wave, flam, blue, red):
    """Colour index m_blue − m_red of a spectrum, each band in its own system."""
    return synthetic_mag(wave, flam, blue) - synthetic_mag(wave, flam, red)


def photon_flux(wave, flam, passband):
    """Photon flux through the passband's photon response (peak 1), photons s⁻¹ cm⁻².

    This is ∫ F_λ λ/(hc) S dλ: the rate per unit collecting area of a
    system whose peak throughput is 1.
    """
    return band_integral(wave, flam, passband) * 1e-8 / (H_CGS * C_CGS)
