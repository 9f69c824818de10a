"""Planck's law, Wien's displacement law and the Stefan–Boltzmann law.

Two layers:

* plain-array kernels (``*_cgs``) for hot loops: temperature in K,
  wavelength in Å, frequency in Hz, results in cgs units;
* Quantity functions for the public edge, which accept temperatures in K,
  °C or °F (via astropy's temperature equivalency) and return Quantities.
  Plain numbers there are K for temperatures, nm for wavelengths and Hz
  for frequencies; results are per nm (B_λ, photon radiance) and per Hz
  (B_ν), so a plain wavelength is read in the unit the result is given in.

Everything broadcasts temperature against wavelength or frequency.  The
exponential is evaluated with ``expm1`` for small ``x = hc/λkT`` (the
Rayleigh–Jeans side, where ``exp(x) - 1`` loses precision) and as
``exp(-x)`` for large ``x`` (the Wien side, where ``exp(x)`` would
overflow), so no floating-point warnings arise from 1 K to 10⁶ K and from
10 nm to 10 cm.

References
----------
Planck, M. 1901, Annalen der Physik 309, 553.
Rybicki, G. B. & Lightman, A. P. 1979, *Radiative Processes in
Astrophysics*, Wiley, §1.5 (the Wien peaks of B_λ and B_ν differ).
CODATA 2018 (Tiesinga et al. 2021, Rev. Mod. Phys. 93, 025010) through
``astropy.constants``.
"""

import math
from functools import lru_cache

import numpy as np
from astropy import constants as const
from astropy import units as u

from .errors import StelltempError

H_CGS = const.h.cgs.value  # erg s
C_CGS = const.c.cgs.value  # cm s^-1
K_CGS = const.k_B.cgs.value  # erg K^-1
#: second radiation constant hc/k in Å K
C2_ANGSTROM_K = H_CGS * C_CGS / K_CGS * 1e8

#: Stefan–Boltzmann constant from its definition 2π⁵k⁴ / (15 c² h³), erg s⁻¹ cm⁻² K⁻⁴
SIGMA_CGS = 2 * np.pi**5 * K_CGS**4 / (15 * C_CGS**2 * H_CGS**3)

# Beyond this x = hc/λkT, exp(x) is replaced by its reciprocal form.
_X_SWITCH = 50.0


def _inverse_expm1(x):
    """1 / (exp(x) - 1) without overflow: exp(-x) / (1 - exp(-x)) for large x."""
    x = np.asarray(x, dtype=float)
    small = x < _X_SWITCH
    out = np.empty_like(x)
    out[small] = 1.0 / np.expm1(x[small])
    e = np.exp(-x[~small])
    out[~small] = e / (1.0 - e)
    return out


def planck_lambda_cgs(temperature_k, wave_angstrom):
    """Spectral radiance per unit wavelength, B_λ(T).

    Parameters
    ----------
    temperature_k : array_like
        Temperature in K (positive, finite).
    wave_angstrom : array_like
        Wavelength in Å; broadcast against ``temperature_k``.

    Returns
    -------
    ndarray
        B_λ in erg s⁻¹ cm⁻² Å⁻¹ sr⁻¹.
    """
    t, w = np.broadcast_arrays(np.asarray(temperature_k, float), np.asarray(wave_angstrom, float))
    x = C2_ANGSTROM_K / (w * t)
    w_cm = w * 1e-8
    return 2 * H_CGS * C_CGS**2 / w_cm**5 * _inverse_expm1(x) * 1e-8


def planck_nu_cgs(temperature_k, freq_hz):
    """Spectral radiance per unit frequency, B_ν(T), in erg s⁻¹ cm⁻² Hz⁻¹ sr⁻¹."""
    t, nu = np.broadcast_arrays(np.asarray(temperature_k, float), np.asarray(freq_hz, float))
    x = H_CGS * nu / (K_CGS * t)
    return 2 * H_CGS * nu**3 / C_CGS**2 * _inverse_expm1(x)


def photon_radiance_lambda_cgs(temperature_k, wave_angstrom):
    """Photon radiance per unit wavelength, B_λ / (hc/λ), in photons s⁻¹ cm⁻² Å⁻¹ sr⁻¹."""
    w = np.asarray(wave_angstrom, float)
    return planck_lambda_cgs(temperature_k, w) * (w * 1e-8) / (H_CGS * C_CGS)


def dlnb_dlnt(temperature_k, wave_angstrom):
    """Logarithmic temperature derivative of B_λ: d ln B_λ / d ln T = x eˣ/(eˣ − 1).

    Written as x / (1 − e⁻ˣ) so that it stays finite for any x > 0.
    """
    t, w = np.broadcast_arrays(np.asarray(temperature_k, float), np.asarray(wave_angstrom, float))
    x = C2_ANGSTROM_K / (w * t)
    return x / -np.expm1(-x)


# ----------------------------------------------------------------------------
# Wien's displacement law from the roots of the transcendental equations
# ----------------------------------------------------------------------------

@lru_cache(maxsize=None)
def wien_root(power):
    """Positive root of ``power * (1 - exp(-x)) = x``.

    The peak of a Planck-like function ∝ y^power / (exp(x) - 1) sits where
    ``x = hc/λkT`` solves this equation:

    * power 5: peak of B_λ (energy per unit wavelength), x ≈ 4.965;
    * power 4: peak of the photon rate per unit wavelength, x ≈ 3.921;
    * power 3: peak of B_ν (energy per unit frequency), x ≈ 2.821.

    These three peaks are different wavelengths for the same body: "the
    peak" depends on the variable one differentiates against and on whether
    one counts energy or photons (Rybicki & Lightman 1979, §1.5).
    """
    # Newton's method from x = power (the root lies just below it for power ≥ 2); plain floats,
    # so the derived quantities need no root finder (scipy.optimize costs ~0.4 s of start-up).
    p = float(power)
    if not p > 1.0:
        raise StelltempError(f"wien_root needs a power above 1, got {power!r}")
    x = p
    for _ in range(60):
        f = p * -math.expm1(-x) - x
        step = f / (p * math.exp(-x) - 1.0)
        x -= step
        if abs(step) <= 1e-15 * x:
            break
    return x


def wien_b_lambda():
    """Wien displacement constant for B_λ, b = hc / (k x₅), in m K."""
    return C2_ANGSTROM_K * 1e-10 / wien_root(5)


def wien_b_photon():
    """Displacement constant for the photon-count peak per unit wavelength, in m K."""
    return C2_ANGSTROM_K * 1e-10 / wien_root(4)


def wien_b_nu():
    """Displacement constant for B_ν: ν_max / T = k x₃ / h, in Hz K⁻¹."""
    return K_CGS * wien_root(3) / H_CGS


# ----------------------------------------------------------------------------
# Quantity edge
# ----------------------------------------------------------------------------

def as_kelvin(temperature):
    """Temperature as a float ndarray in K, checked.

    Parameters
    ----------
    temperature : float, array_like or Quantity
        Plain numbers are taken as K; Quantities may be in K, °C or °F.

    Raises
    ------
    StelltempError
        If a value is not a temperature, or is ≤ 0 K, NaN or infinite.
    """
    if temperature is None:
        raise StelltempError("not a temperature: None")
    if isinstance(temperature, u.Quantity):
        try:
            t = temperature.to_value(u.K, equivalencies=u.temperature())
        except u.UnitConversionError:
            raise StelltempError(f"not a temperature: {temperature!r}") from None
    else:
        try:
            t = np.asarray(temperature, dtype=float)
        except (TypeError, ValueError):
            raise StelltempError(f"not a temperature: {temperature!r}") from None
    t = np.asarray(t, dtype=float)
    bad = ~np.isfinite(t) | (t <= 0)
    if np.any(bad):
        first = float(t[bad].flat[0]) if t.ndim else float(t)
        raise StelltempError(f"temperature must be finite and above 0 K, got {first:g} K")
    return t


def _spectral_values(value, unit, what):
    """Wavelengths or frequencies as floats in ``unit`` (Quantities converted), checked positive."""
    if isinstance(value, u.Quantity):
        out = value.to_value(unit, equivalencies=u.spectral())
    else:
        out = np.asarray(value, float)
    if np.any(~np.isfinite(out) | (out <= 0)):
        raise StelltempError(f"{what} must be finite and positive")
    return out


def _as_angstrom(wavelength):
    """Wavelengths in Å for the kernels: Quantities converted, plain numbers read as nm."""
    if not isinstance(wavelength, u.Quantity):
        wavelength = np.asarray(wavelength, float) * u.nm
    return _spectral_values(wavelength, u.AA, "wavelengths")


def radiance_lambda(temperature, wavelength):
    """Spectral radiance per unit wavelength B_λ(T), in W m⁻² nm⁻¹ sr⁻¹.

    Parameters
    ----------
    temperature : float, array_like or Quantity
        Plain numbers in K; Quantities in K, °C or °F.
    wavelength : float, array_like or Quantity
        Plain numbers in nm (the unit of the result); any spectral Quantity
        (Å, µm, a frequency …) is converted.

    Returns
    -------
    Quantity
        B_λ in W m⁻² nm⁻¹ sr⁻¹, broadcast over temperature and wavelength.

    Examples
    --------
    >>> from astropy import units as u
    >>> b = radiance_lambda(5772, 500)
    >>> b.unit == u.W / u.m**2 / u.nm / u.sr, round(float(b.value), 2)
    (True, 26238.54)
    """
    b = planck_lambda_cgs(as_kelvin(temperature), _as_angstrom(wavelength))
    return (b * u.erg / u.s / u.cm**2 / u.AA / u.sr).to(u.W / u.m**2 / u.nm / u.sr)


def radiance_nu(temperature, frequency):
    """B_ν(T) as a Quantity in W m⁻² Hz⁻¹ sr⁻¹ (frequency: Quantity or plain Hz).

    Examples
    --------
    >>> from astropy import units as u
    >>> f"{radiance_nu(5772, 600 * u.THz).value:.3e}"
    '2.185e-08'
    """
    nu = _spectral_values(frequency, u.Hz, "frequencies")
    b = planck_nu_cgs(as_kelvin(temperature), nu)
    return (b * u.erg / u.s / u.cm**2 / u.Hz / u.sr).to(u.W / u.m**2 / u.Hz / u.sr)


def photon_radiance_lambda(temperature, wavelength):
    """Photon radiance per unit wavelength, photons s⁻¹ m⁻² nm⁻¹ sr⁻¹ (wavelength: Quantity or plain nm).

    Examples
    --------
    >>> f"{photon_radiance_lambda(5772, 500).value:.3e}"
    '6.604e+22'
    """
    n = photon_radiance_lambda_cgs(as_kelvin(temperature), _as_angstrom(wavelength))
    return (n / u.s / u.cm**2 / u.AA / u.sr).to(1 / u.s / u.m**2 / u.nm / u.sr)


def peak_wavelength(temperature):
    """Wavelength of the maximum of B_λ (Wien's law), λ_max = b / T."""
    return (wien_b_lambda() / as_kelvin(temperature) * u.m).to(u.nm)


def peak_wavelength_photons(temperature):
    """Wavelength of the maximum of the photon rate per unit wavelength."""
    return (wien_b_photon() / as_kelvin(temperature) * u.m).to(u.nm)


def peak_frequency(temperature):
    """Frequency of the maximum of B_ν, ν_max = (k x₃ / h) T."""
    return (wien_b_nu() * as_kelvin(temperature) * u.Hz).to(u.THz)


def surface_flux(temperature):
    """Bolometric surface flux σT⁴ (Stefan–Boltzmann law), W m⁻²."""
    return (SIGMA_CGS * as_kelvin(temperature) ** 4 * u.erg / u.s / u.cm**2).to(u.W / u.m**2)


def _quantity(value, unit, what):
    """``value`` as a Quantity in ``unit``, or one clear error naming what was expected."""
    try:
        return u.Quantity(value, unit)
    except (u.UnitConversionError, u.UnitsError, TypeError, ValueError):
        raise StelltempError(f"{what} must be a number or a Quantity convertible to {unit}, got {value!r}") from None


def luminosity(radius, temperature):
    """Luminosity 4πR²σT⁴ of a sphere of the given radius (Quantity), in W."""
    r = _quantity(radius, u.m, "radius")
    if np.any(r.value <= 0) or not np.all(np.isfinite(r.value)):
        raise StelltempError("radius must be finite and positive")
    return (4 * np.pi * r**2 * surface_flux(temperature)).to(u.W)


def radius_from_luminosity(lum, temperature):
    """Radius √(L / 4πσT⁴) of a sphere of luminosity ``lum`` (Quantity), in m."""
    lum = _quantity(lum, u.W, "luminosity")
    if np.any(lum.value <= 0) or not np.all(np.isfinite(lum.value)):
        raise StelltempError("luminosity must be finite and positive")
    return np.sqrt(lum / (4 * np.pi * surface_flux(temperature))).to(u.m)


def temperature_from_flux(flux):
    """Temperature (F/σ)^(1/4) of a blackbody surface emitting ``flux`` (Quantity), in K."""
    f = _quantity(flux, u.W / u.m**2, "flux")
    if np.any(f.value <= 0) or not np.all(np.isfinite(f.value)):
        raise StelltempError("flux must be finite and positive")
    sigma = SIGMA_CGS * u.erg / u.s / u.cm**2 / u.K**4
    return ((f / sigma) ** 0.25).to(u.K)


def sigma_sb():
    """Stefan–Boltzmann constant as a Quantity (W m⁻² K⁻⁴)."""
    return (SIGMA_CGS * u.erg / u.s / u.cm**2 / u.K**4).to(u.W / u.m**2 / u.K**4)


#: nominal solar luminosity, IAU 2015 Resolution B3 (Mamajek et al. 2015, arXiv:1510.07674)
L_SUN_NOMINAL = 3.828e26 * u.W


def blackbody_report(temperature, radius=None, wavelength=None):
    """Planck, Wien and Stefan–Boltzmann quantities of one temperature, as plain numbers.

    Parameters
    ----------
    temperature : float or Quantity
        Plain numbers in K; Quantities in K, °C or °F.
    radius : float or Quantity, optional
        Radius of the sphere (plain numbers in R☉), to give its luminosity.
    wavelength : float or Quantity, optional
        Plain numbers in nm: also give B_λ, B_ν and the photon radiance there.

    Returns
    -------
    dict
        Scalars with their unit in the key (``peak_wavelength_B_lambda_nm``,
        ``surface_flux_W_m2``, ``luminosity_Lsun`` …) and a ``note``: the
        three peaks are maxima of different distributions.

    Examples
    --------
    >>> rep = blackbody_report(5772, radius=1.0)
    >>> round(rep["peak_wavelength_B_lambda_nm"], 1), round(rep["luminosity_Lsun"], 3)
    (502.0, 1.0)
    """
    from .validation import check_number

    t = check_number("temperature", float(as_kelvin(temperature))) * u.K
    if radius is not None and not isinstance(radius, u.Quantity):
        check_number("radius", radius)
    if wavelength is not None and not isinstance(wavelength, u.Quantity):
        check_number("wavelength", wavelength)
    nu_peak = peak_frequency(t)
    out = {
        "temperature_K": float(t.value),
        "peak_wavelength_B_lambda_nm": float(peak_wavelength(t).value),
        "peak_wavelength_photons_nm": float(peak_wavelength_photons(t).value),
        "peak_frequency_B_nu_THz": float(nu_peak.value),
        "wavelength_of_B_nu_peak_nm": float(nu_peak.to(u.nm, equivalencies=u.spectral()).value),
        "surface_flux_W_m2": float(surface_flux(t).value),
        "note": "the three peaks differ: B_lambda, photon rate per wavelength and B_nu peak at different wavelengths",
    }
    if radius is not None:
        r = _quantity(radius, u.R_sun, "radius")
        lum = luminosity(r, t)
        out["radius_Rsun"] = float(r.to_value(u.R_sun))
        out["luminosity_W"] = float(lum.value)
        out["luminosity_Lsun"] = float((lum / L_SUN_NOMINAL).decompose().value)
    if wavelength is not None:
        w = _quantity(wavelength, u.nm, "wavelength")
        if not (np.isfinite(w.value) and w.value > 0):
            raise StelltempError(f"wavelength must be finite and positive, got {w}")
        out["at_wavelength_nm"] = float(w.to_value(u.nm))
        out["B_lambda_W_m2_nm_sr"] = float(radiance_lambda(t, w).value)
        out["B_nu_W_m2_Hz_sr"] = float(radiance_nu(t, w.to(u.Hz, equivalencies=u.spectral())).value)
        out["photon_radiance_per_s_m2_nm_sr"] = float(photon_radiance_lambda(t, w).value)
    return out
