"""Scattered moonlight in V: Krisciunas & Schaefer (1991, PASP 103, 1033).

The model (their eqs. 1, 3, 15–22; the paper itself was not at hand: the
constants are checked against two independent public transcriptions of it
and a documented worked value, see tests/test_observing_own_photometry.py)::

    I*(α)   = 10^(−0.4 (3.84 + 0.026 |α| + 4×10⁻⁹ α⁴))        Moon illuminance, α phase angle in deg
    f(ρ)    = 10^5.36 (1.06 + cos² ρ) + 10^(6.15 − ρ/40)     scattering, ρ Moon–target separation in deg
    X(Z)    = (1 − 0.96 sin² Z)^(−1/2)                       their airmass for scattered light
    B_moon  = f(ρ) I* 10^(−0.4 k X(Z_moon)) [1 − 10^(−0.4 k X(Z))]     nanoLamberts
    B_0(Z)  = B_zen 10^(−0.4 k (X(Z) − 1)) X(Z)              dark sky away from the zenith
    ΔV      = −2.5 log10 [(B_moon + B_0) / B_0]

and the conversion between V surface brightness and nanoLamberts
B = 34.08 exp(20.7233 − 0.92104 V) (0.92104 = 0.4 ln 10).  The Mie term
10^(6.15 − ρ/40) was fitted for ρ ≳ 10°; closer to the Moon the result is
returned as NaN.  The model is for V; applied to other bands it is only a
rough guide.
"""

from __future__ import annotations

import numpy as np

__all__ = ["nl_from_vmag", "vmag_from_nl", "moon_illuminance", "scattering_function", "ks_airmass",
           "moon_sky_brightness_nl", "moon_sky_vmag", "moonlight_vmag", "MIN_SEPARATION_DEG"]

#: below this Moon–target separation the scattering fit is not used (deg)
MIN_SEPARATION_DEG = 10.0


def nl_from_vmag(vmag_arcsec2):
    """V surface brightness (mag arcsec⁻²) → nanoLamberts (K&S 1991)."""
    return 34.08 * np.exp(20.7233 - 0.92104 * np.asarray(vmag_arcsec2, float))


def vmag_from_nl(b_nl):
    """nanoLamberts → V surface brightness (mag arcsec⁻²) (inverse of `nl_from_vmag`)."""
    return (20.7233 - np.log(np.asarray(b_nl, float) / 34.08)) / 0.92104


def moon_illuminance(phase_angle_deg):
    """I*(α), the Moon's illuminance outside the atmosphere in K&S units (α = 0 at full Moon)."""
    a = np.abs(np.asarray(phase_angle_deg, float))
    return 10.0 ** (-0.4 * (3.84 + 0.026 * a + 4e-9 * a**4))


def scattering_function(separation_deg):
    """f(ρ): Rayleigh plus Mie scattering of moonlight at separation ρ (deg)."""
    rho = np.asarray(separation_deg, float)
    return 10.0**5.36 * (1.06 + np.cos(np.radians(rho)) ** 2) + 10.0 ** (6.15 - rho / 40.0)


def ks_airmass(zenith_deg):
    """The airmass K&S use for the scattered light, (1 − 0.96 sin² Z)^(−1/2)."""
    z = np.radians(np.asarray(zenith_deg, float))
    return 1.0 / np.sqrt(1.0 - 0.96 * np.sin(z) ** 2)


def moon_sky_brightness_nl(phase_angle_deg, separation_deg, zenith_target_deg, zenith_moon_deg, k_v):
    """B_moon in nanoLamberts; 0 with the Moon below the horizon, NaN when ρ < 10°."""
    zt = np.asarray(zenith_target_deg, float)
    zm = np.asarray(zenith_moon_deg, float)
    rho = np.asarray(separation_deg, float)
    b = (scattering_function(rho) * moon_illuminance(phase_angle_deg)
         * 10.0 ** (-0.4 * k_v * ks_airmass(np.minimum(zm, 90.0)))
         * (1.0 - 10.0 ** (-0.4 * k_v * ks_airmass(np.minimum(zt, 90.0)))))
    b = np.where(zm >= 90.0, 0.0, b)
    return np.where(rho < MIN_SEPARATION_DEG, np.nan, b)


def moon_sky_vmag(dark_vmag_zenith, phase_angle_deg, separation_deg, zenith_target_deg, zenith_moon_deg, k_v):
    """V sky brightness with moonlight, and its change ΔV.

    Parameters
    ----------
    dark_vmag_zenith : float
        Moonless V sky at the zenith, mag arcsec⁻².
    phase_angle_deg, separation_deg, zenith_target_deg, zenith_moon_deg : float or array
        Lunar phase angle α (0 = full), Moon–target separation ρ, zenith
        distances of the target and of the Moon, degrees.
    k_v : float
        V extinction coefficient, mag per airmass.

    Returns
    -------
    (vmag, delta_v) : tuple of ndarray
        Sky brightness at the target with moonlight (mag arcsec⁻²) and the
        change relative to the moonless sky at the same place (≤ 0).
    """
    x = ks_airmass(np.minimum(np.asarray(zenith_target_deg, float), 90.0))
    b0 = nl_from_vmag(dark_vmag_zenith) * 10.0 ** (-0.4 * k_v * (x - 1.0)) * x
    bm = moon_sky_brightness_nl(phase_angle_deg, separation_deg, zenith_target_deg, zenith_moon_deg, k_v)
    delta = -2.5 * np.log10((bm + b0) / b0) + 0.0  # + 0.0: no moonlight is ΔV = 0, not −0
    return vmag_from_nl(bm + b0), delta


def moonlight_vmag(phase_angle_deg, separation_deg, zenith_target_deg, zenith_moon_deg, k_v):
    """V surface brightness of the scattered moonlight alone, mag arcsec⁻².

    ``inf`` with the Moon below the horizon, NaN within `MIN_SEPARATION_DEG`
    of it.  Arguments as in `moon_sky_vmag`.
    """
    bm = np.asarray(moon_sky_brightness_nl(phase_angle_deg, separation_deg, zenith_target_deg, zenith_moon_deg,
                                           k_v), float)
    with np.errstate(divide="ignore"):
        return np.where(bm > 0, vmag_from_nl(np.where(bm > 0, bm, 1.0)), np.where(np.isnan(bm), np.nan, np.inf))
