"""A smooth model of the atmosphere's extinction k(λ) (mag per airmass).

Only the wavelength dependence inside a filter matters for colour terms
and second-order extinction; the grey per-filter coefficients of the
instrument file are left untouched.  The model has two parts:

* Rayleigh scattering by the air, optical depth at sea level (p₀ = 1013.25 hPa)
  from Hansen & Travis (1974, Space Sci. Rev. 16, 527, eq. 2.32; coefficients
  from memory)::

      τ_R(λ) = 0.008569 λ⁻⁴ (1 + 0.0113 λ⁻² + 0.00013 λ⁻⁴),   λ in μm,

  scaled by the pressure at the site, p/p₀ = exp(−h / 8 km) (isothermal
  scale height, common practice);
* aerosols, Ångström's (1929, Geogr. Ann. 11, 156) power law
  k_a(λ) = k_a(0.55 μm) (λ / 0.55 μm)^(−α), by default k_a(0.55 μm) = 0.05 mag
  and α = 1.3 (typical of a clean continental site, common practice).

Molecular absorption (ozone's Chappuis band near 600 nm, O₂ and H₂O bands in
the red) is left out: it is weak or narrow across broad optical filters, but
this makes the model's R and I extinction too smooth.
k = 2.5 log10(e) τ ≈ 1.0857 τ.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import StelltempError

__all__ = ["Atmosphere", "rayleigh_optical_depth"]

MAG_PER_TAU = 2.5 / np.log(10.0)
SCALE_HEIGHT_M = 8000.0


def rayleigh_optical_depth(wave_angstrom, elevation_m=0.0):
    """Rayleigh optical depth of the whole atmosphere at the zenith (Hansen & Travis 1974).

    Examples
    --------
    >>> round(float(rayleigh_optical_depth(5500.0)), 4)
    0.0973
    """
    lam = np.asarray(wave_angstrom, float) / 1e4
    if np.any(lam <= 0):
        raise StelltempError("wavelengths must be positive")
    tau0 = 0.008569 * lam**-4 * (1 + 0.0113 * lam**-2 + 0.00013 * lam**-4)
    return tau0 * np.exp(-float(elevation_m) / SCALE_HEIGHT_M)


@dataclass(frozen=True)
class Atmosphere:
    """Extinction k(λ) = Rayleigh + aerosols (mag per airmass).

    Parameters
    ----------
    elevation_m : float
        Site height above sea level (m).
    aerosol_mag : float
        Aerosol extinction at 0.55 μm, mag per airmass.
    angstrom_exponent : float
        α of the aerosol power law.
    """

    elevation_m: float = 0.0
    aerosol_mag: float = 0.05
    angstrom_exponent: float = 1.3

    def __post_init__(self):
        if not (-500 <= self.elevation_m <= 9000):
            raise StelltempError(f"site elevation {self.elevation_m:g} m is impossible")
        if not (0 <= self.aerosol_mag < 2) or not (-1 <= self.angstrom_exponent <= 4):
            raise StelltempError("aerosol extinction must lie in 0–2 mag and the Ångström exponent in −1–4")

    def k(self, wave_angstrom):
        """Extinction in mag per airmass at ``wave_angstrom`` (Å)."""
        lam = np.asarray(wave_angstrom, float)
        ray = MAG_PER_TAU * rayleigh_optical_depth(lam, self.elevation_m)
        return ray + self.aerosol_mag * (lam / 5500.0) ** (-self.angstrom_exponent)

    def transmission(self, wave_angstrom, airmass):
        """10^(−0.4 k(λ) X); ``airmass`` broadcasts against a trailing wavelength axis."""
        x = np.asarray(airmass, float)
        return 10.0 ** (-0.4 * self.k(wave_angstrom) * x[..., None])

    def describe(self):
        return (f"Rayleigh (Hansen & Travis 1974) at {self.elevation_m:g} m + aerosols "
                f"{self.aerosol_mag:g} mag at 0.55 um, Angstrom alpha {self.angstrom_exponent:g}")
