"""Seeing profiles on pixels: peak-pixel fraction, apertures, saturation advice.

Two circular profiles, both normalised to a total flux of 1:

* Gaussian, σ = FWHM / (2 √(2 ln 2));
* Moffat (1969, A&A 3, 455), I(r) = (β − 1)/(π α²) [1 + (r/α)²]^(−β),
  FWHM = 2 α √(2^(1/β) − 1); default β = 4.765, the value Trujillo et al.
  (2001, MNRAS 328, 977) find from turbulence theory for a seeing-limited
  profile.

The fraction of the flux in one square pixel is exact for the Gaussian (a
product of error functions).  For the Moffat the integral across y is done
in closed form, ∫₀^u (1 + s²)^(−β) ds = u ₂F₁(½, β; 3/2; −u²), and the
remaining 1-D integral across x numerically (scipy quad).

The star is centred on a pixel by default: the worst case for saturation.

Saturation: a pixel passes its limit when the source peak + sky + dark
electrons exceed the full well of a physical pixel, or when
(electrons of the read-out pixel)/gain + bias exceeds the ADC's largest
value.  Linearity usually ends before the hard limit, so a headroom
(default 80 %, common practice) is applied to both.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import integrate, special

from ..errors import StelltempError
from . import ccd

__all__ = [
    "MOFFAT_BETA_TURBULENCE",
    "SaturationWarning",
    "SaturationAdvice",
    "gaussian_sigma",
    "moffat_alpha",
    "pixel_fraction",
    "peak_fraction",
    "enclosed_fraction",
    "aperture_pixels",
    "aperture_radius",
    "time_to_limit",
    "saturation_advice",
]

#: Moffat β for atmospheric turbulence, Trujillo et al. 2001, MNRAS 328, 977
MOFFAT_BETA_TURBULENCE = 4.765

#: fraction of the hard limit treated as the usable (linear) ceiling — common practice
DEFAULT_HEADROOM = 0.8

_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))


class SaturationWarning(UserWarning):
    """A planned exposure would saturate or pass the linear headroom."""


def _positive(name, v):
    v = float(v)
    if not (math.isfinite(v) and v > 0):
        raise StelltempError(f"{name} must be positive and finite, got {v!r}")
    return v


def _profile(profile, beta):
    if profile not in ("gaussian", "moffat"):
        raise StelltempError(f"unknown seeing profile '{profile}' (use 'gaussian' or 'moffat')")
    if profile == "moffat":
        beta = float(beta)
        if not (math.isfinite(beta) and beta > 1):
            raise StelltempError(f"Moffat beta must be > 1, got {beta!r}")
    return profile, beta


def gaussian_sigma(fwhm):
    """Gaussian σ from the FWHM (same unit)."""
    return _positive("FWHM", fwhm) / _FWHM_PER_SIGMA


def moffat_alpha(fwhm, beta=MOFFAT_BETA_TURBULENCE):
    """Moffat core width α from the FWHM: α = FWHM / (2 √(2^(1/β) − 1))."""
    return _positive("FWHM", fwhm) / (2.0 * math.sqrt(2.0 ** (1.0 / beta) - 1.0))


def _moffat_strip(x, y0, y1, alpha, beta):
    # ∫_{y0}^{y1} (β−1)/(π α²) (c + y²/α²)^(−β) dy with c = 1 + x²/α², via
    # y = α √c s and ∫₀^u (1+s²)^(−β) ds = u ₂F₁(½, β; 3/2; −u²).
    c = 1.0 + (x / alpha) ** 2
    scale = alpha * math.sqrt(c)

    def prim(y):
        uu = y / scale
        return uu * special.hyp2f1(0.5, beta, 1.5, -uu * uu)

    return (beta - 1.0) / (math.pi * alpha**2) * scale * c ** (-beta) * (prim(y1) - prim(y0))


@lru_cache(maxsize=4096)
def _moffat_box(x0, x1, y0, y1, alpha, beta):
    val, _ = integrate.quad(_moffat_strip, x0, x1, args=(y0, y1, alpha, beta), epsabs=1e-12, epsrel=1e-10,
                            limit=200, points=[0.0] if x0 < 0 < x1 else None)
    return val


def pixel_fraction(fwhm, pixel, dx=0.0, dy=0.0, profile="moffat", beta=MOFFAT_BETA_TURBULENCE):
    """Fraction of a star's flux falling in one square pixel.

    Parameters
    ----------
    fwhm : float
        Seeing FWHM, arcsec (or any unit shared with ``pixel``).
    pixel : float
        Side of the pixel, same unit.
    dx, dy : float
        Offset of the pixel centre from the star, same unit (0, 0: centred).
    profile : {"moffat", "gaussian"}
    beta : float
        Moffat β (ignored for the Gaussian).

    Returns
    -------
    float
        Fraction between 0 and 1.
    """
    fwhm, pixel = _positive("FWHM", fwhm), _positive("pixel size", pixel)
    profile, beta = _profile(profile, beta)
    x0, x1 = dx - pixel / 2.0, dx + pixel / 2.0
    y0, y1 = dy - pixel / 2.0, dy + pixel / 2.0
    if profile == "gaussian":
        k = 1.0 / (math.sqrt(2.0) * gaussian_sigma(fwhm))
        fx = 0.5 * (math.erf(x1 * k) - math.erf(x0 * k))
        fy = 0.5 * (math.erf(y1 * k) - math.erf(y0 * k))
        return fx * fy
    alpha = moffat_alpha(fwhm, beta)
    return _moffat_box(x0, x1, y0, y1, alpha, beta)


def peak_fraction(fwhm, pixel, profile="moffat", beta=MOFFAT_BETA_TURBULENCE):
    """Fraction of the flux in the brightest pixel, star centred on it (worst case)."""
    return pixel_fraction(fwhm, pixel, 0.0, 0.0, profile, beta)


def enclosed_fraction(radius, fwhm, profile="moffat", beta=MOFFAT_BETA_TURBULENCE):
    """Fraction of the flux inside a circle of ``radius`` centred on the star.

    Gaussian: 1 − exp(−r²/2σ²); Moffat: 1 − [1 + (r/α)²]^(1−β).
    """
    fwhm = _positive("FWHM", fwhm)
    profile, beta = _profile(profile, beta)
    r = np.asarray(radius, float)
    if np.any(~np.isfinite(r) | (r < 0)):
        raise StelltempError("aperture radius must be non-negative and finite")
    if profile == "gaussian":
        return -np.expm1(-(r**2) / (2.0 * gaussian_sigma(fwhm) ** 2))
    alpha = moffat_alpha(fwhm, beta)
    return 1.0 - (1.0 + (r / alpha) ** 2) ** (1.0 - beta)


def aperture_pixels(radius_arcsec, pixel_arcsec):
    """Pixels in a circular aperture: n_pix = π r² / p²."""
    return math.pi * _positive("aperture radius", radius_arcsec) ** 2 / _positive("pixel size", pixel_arcsec) ** 2


def aperture_radius(n_pix, pixel_arcsec):
    """Radius (arcsec) of a circular aperture holding ``n_pix`` pixels."""
    return math.sqrt(_positive("n_pix", n_pix) / math.pi) * _positive("pixel size", pixel_arcsec)


@dataclass(frozen=True)
class SaturationAdvice:
    """Outcome of the saturation check for one exposure plan.

    Attributes
    ----------
    status : str
        ``"ok"``, ``"nonlinear"`` (above the headroom, below the hard limit)
        or ``"saturated"``.
    peak_e : float
        Electrons in the brightest physical pixel (source + sky + dark),
        clipped at the full well as the detector would hold them.
    peak_adu : float
        ADU of the brightest read-out (binned) pixel, bias included, clipped
        at the ADC's largest value as the converter would report it.
    limit_s : float
        Longest exposure that stays within the headroom, s.
    n_exposures : int
        Suggested number of exposures (1 when no split is needed).
    exposure_s : float
        Suggested time of each exposure, s.
    total_s : float
        n_exposures × exposure_s.
    message : str
        One-line advice ('' when all is well).
    peak_excess : float
        Unclipped peak over the hard limit (the larger of e⁻/full well and
        ADU/ADC maximum); above 1 the pixel is clipped by that factor.
    light_factor : float
        Factor by which the peak light must be cut (ND filter, aperture stop
        or defocus) because even the shortest allowed exposure passes the
        headroom; 1 when no cut is needed.
    """

    status: str
    peak_e: float
    peak_adu: float
    limit_s: float
    n_exposures: int
    exposure_s: float
    total_s: float
    message: str
    peak_excess: float = 0.0
    light_factor: float = 1.0


def _pixel_rates(source_rate, fwhm, pixel_arcsec, binning, sky_rate_binned, dark_rate_binned, profile, beta):
    """Electron rates of the brightest physical pixel and read-out pixel."""
    f_phys = peak_fraction(fwhm, pixel_arcsec, profile, beta)
    f_read = f_phys if binning == 1 else peak_fraction(fwhm, pixel_arcsec * binning, profile, beta)
    nb2 = binning * binning
    phys = source_rate * f_phys + (sky_rate_binned + dark_rate_binned) / nb2
    read = source_rate * f_read + sky_rate_binned + dark_rate_binned
    return phys, read


def _limits(source_rate, fwhm, pixel_arcsec, sky_rate_binned, dark_rate_binned, full_well_e, gain_e_per_adu,
            saturation_adu, bias_adu, binning, headroom, profile, beta):
    """(time to headroom × full well, time to headroom × ADC range), s."""
    if not (0 < headroom <= 1):
        raise StelltempError(f"headroom must be in (0, 1], got {headroom!r}")
    phys, read = _pixel_rates(source_rate, fwhm, pixel_arcsec, binning, sky_rate_binned, dark_rate_binned,
                              profile, beta)
    room_adu = headroom * saturation_adu - bias_adu
    t_fw = headroom * full_well_e / phys if phys > 0 else math.inf
    if room_adu <= 0:
        t_adc = 0.0
    else:
        t_adc = room_adu * gain_e_per_adu / read if read > 0 else math.inf
    return t_fw, t_adc


def time_to_limit(source_rate, fwhm, pixel_arcsec, sky_rate_binned, dark_rate_binned, full_well_e, gain_e_per_adu,
                  saturation_adu, bias_adu=0.0, binning=1, headroom=DEFAULT_HEADROOM, profile="moffat",
                  beta=MOFFAT_BETA_TURBULENCE):
    """Longest exposure (s) before the brightest pixel reaches ``headroom`` × its limit.

    Parameters
    ----------
    source_rate : float
        Total source electrons per second (whole profile), e⁻ s⁻¹.
    fwhm, pixel_arcsec : float
        Seeing FWHM and unbinned pixel scale, arcsec.
    sky_rate_binned, dark_rate_binned : float
        Sky and dark electrons per read-out (binned) pixel per second.
    full_well_e : float
        Full well of a physical pixel, e⁻.
    gain_e_per_adu, saturation_adu, bias_adu : float
        Gain, largest ADC value and bias level.
    binning : int
        On-chip binning factor.
    headroom : float
        Fraction of the limits considered usable (0 < h ≤ 1).

    Returns
    -------
    float
        Time limit in s (``inf`` if nothing ever fills).
    """
    return min(_limits(source_rate, fwhm, pixel_arcsec, sky_rate_binned, dark_rate_binned, full_well_e,
                       gain_e_per_adu, saturation_adu, bias_adu, binning, headroom, profile, beta))


def _frames_for(goal, each_s, args):
    """Smallest number of ``each_s`` frames whose stack reaches S/N ``goal`` (0 if it never does)."""
    one = float(ccd.snr(each_s, *args))
    if not (one > 0):
        return 0
    n = max(1, math.ceil((goal / one) ** 2) - 1)
    while float(ccd.snr(each_s, *args, n_exposures=n)) < goal * (1 - 1e-12):
        n += 1
        if n > 10**7:
            return 0
    return n


def saturation_advice(exposure_s, target_snr, source_rate, aperture_rate, sky_rate_binned, dark_rate_binned,
                      read_noise_e, n_pix, n_background, fwhm, pixel_arcsec, full_well_e, gain_e_per_adu,
                      saturation_adu, bias_adu=0.0, binning=1, scint_coeff=0.0, headroom=DEFAULT_HEADROOM,
                      profile="moffat", beta=MOFFAT_BETA_TURBULENCE, warn=True, min_exposure_s=0.0,
                      aperture_m=None, obstruction_m=0.0):
    """Check one planned exposure for saturation and suggest a split if needed.

    When the exposure passes the headroom, the advice is the smallest number
    n of shorter exposures, each within the limit, whose co-added S/N equals
    the S/N of the planned exposure (or ``target_snr`` if given): read noise
    then enters n times, so the total time grows.

    Parameters
    ----------
    exposure_s : float
        Planned single exposure, s.
    target_snr : float or None
        S/N the split should reach; None: the S/N of ``exposure_s``.
    source_rate : float
        Total source electrons per second (for the peak pixel), e⁻ s⁻¹.
    aperture_rate : float
        Source electrons per second inside the measuring aperture (for S/N).
    sky_rate_binned, dark_rate_binned, read_noise_e, n_pix, n_background :
        As in `stelltemp.observing.ccd.snr` (per read-out pixel).
    fwhm, pixel_arcsec, full_well_e, gain_e_per_adu, saturation_adu, bias_adu, binning, headroom :
        As in `time_to_limit`.
    scint_coeff : float
        Relative scintillation for 1 s (`ccd.scintillation_coefficient`).
    warn : bool
        Also issue a :class:`SaturationWarning` when the plan needs changing.
    min_exposure_s : float
        Shortest exposure that may be advised (the camera's
        ``min_exposure_s``).  When the split frames would have to be
        shorter, the advice is to cut the light by the factor needed —
        a neutral-density filter, a smaller aperture stop (``aperture_m``
        gives the stopped-down diameter) or defocusing — and to take frames
        of ``min_exposure_s``.
    aperture_m, obstruction_m : float, optional
        Telescope aperture and central obstruction diameters, m (for the
        aperture-stop advice: a concentric stop of diameter d passes
        (d² − o²)/(D² − o²) of the light).

    Returns
    -------
    SaturationAdvice

    Examples
    --------
    A bright invented star, 2e5 e⁻/s in a 2.5″ seeing disc on 0.6″ pixels,
    planned as one 60 s frame on a camera of 80,000 e⁻ full well:

    >>> advice = saturation_advice(60.0, None, source_rate=2.0e5, aperture_rate=1.8e5,
    ...                            sky_rate_binned=20.0, dark_rate_binned=0.1, read_noise_e=8.0, n_pix=50,
    ...                            n_background=500, fwhm=2.5, pixel_arcsec=0.6, full_well_e=80000,
    ...                            gain_e_per_adu=1.5, saturation_adu=65535, warn=False)
    >>> advice.status, advice.n_exposures, round(advice.exposure_s, 2), round(advice.limit_s, 2)
    ('saturated', 8, 7.52, 7.6)
    """
    t = _positive("exposure time", exposure_s)
    phys, read = _pixel_rates(source_rate, fwhm, pixel_arcsec, binning, sky_rate_binned, dark_rate_binned,
                              profile, beta)
    raw_e = phys * t
    raw_adu = read * t / gain_e_per_adu + bias_adu
    excess = max(raw_e / full_well_e, raw_adu / saturation_adu)
    peak_e, peak_adu = min(raw_e, full_well_e), min(raw_adu, saturation_adu)
    t_fw, t_adc = _limits(source_rate, fwhm, pixel_arcsec, sky_rate_binned, dark_rate_binned, full_well_e,
                          gain_e_per_adu, saturation_adu, bias_adu, binning, headroom, profile, beta)
    limit = min(t_fw, t_adc)
    hard = excess >= 1.0
    if t <= limit:
        return SaturationAdvice("ok", peak_e, peak_adu, limit, 1, t, t, "", excess)
    status = "saturated" if hard else "nonlinear"
    clip = f" (clipped: the unclipped peak is {excess:.3g} x the limit)" if hard else ""
    args = (aperture_rate, sky_rate_binned, dark_rate_binned, read_noise_e, n_pix, n_background, gain_e_per_adu,
            ccd.SIGMA_F_ADU, scint_coeff)
    goal = float(target_snr) if target_snr is not None else float(ccd.snr(t, *args))
    where = "the full well" if t_fw <= t_adc else "the ADC range"
    t_min = float(min_exposure_s)
    if limit <= 0:
        msg = (f"{status}: the bias level alone is above {headroom:.0%} of the ADC range; "
               "no exposure time avoids it")
        advice = SaturationAdvice(status, peak_e, peak_adu, 0.0, 0, math.nan, math.nan, msg, excess, math.inf)
    elif limit < t_min:
        factor = t_min / limit
        cut = [f"a neutral-density filter of density {math.log10(factor):.2g} or more"]
        if aperture_m:
            o2 = float(obstruction_m) ** 2
            stop = math.sqrt((aperture_m**2 - o2) / factor + o2)
            cut.append(f"an aperture stop of {stop:.3g} m or less "
                       f"(the full {aperture_m:.3g} m passes {factor:.3g} x too much light)")
        cut.append(f"defocusing until the peak pixel is {factor:.3g} x fainter")
        dimmed = (aperture_rate / factor, sky_rate_binned / factor) + args[2:]
        n = _frames_for(goal, t_min, dimmed)
        frames = (f"; through the filter or stop take {n} x {t_min:.3g} s (total {n * t_min:.3g} s) "
                  f"for S/N {goal:.3g}" if n else "")
        msg = (f"{status}: a {t:.3g} s exposure passes {headroom:.0%} of {where} after {limit:.3g} s, "
               f"shorter than the {t_min:.3g} s minimum exposure{clip}; cut the light by {factor:.3g} x: "
               + ", or ".join(cut) + frames)
        advice = SaturationAdvice(status, peak_e, peak_adu, limit, n, t_min, n * t_min if n else math.nan, msg,
                                  excess, factor)
    else:
        def per_exposure(n):
            return float(ccd.stack_exposure_for_snr(goal, n, *args))

        lo, hi = 1, 2
        while per_exposure(hi) > limit:  # per-exposure time falls monotonically with n
            lo, hi = hi, hi * 2
            if hi > 10**7:
                raise StelltempError("cannot split the exposure: more than 10^7 frames needed")
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if per_exposure(mid) > limit:
                lo = mid
            else:
                hi = mid
        n = hi
        each = per_exposure(n)
        if each < t_min:  # frames at the minimum, as many as the S/N needs (never shorter than allowed)
            each = t_min
            n = _frames_for(goal, t_min, args)
        msg = (f"{status}: a {t:.3g} s exposure passes {headroom:.0%} of {where} after {limit:.3g} s"
               f"{clip}; take {n} x {each:.3g} s (total {n * each:.3g} s) for the same S/N {goal:.3g}")
        advice = SaturationAdvice(status, peak_e, peak_adu, limit, n, each, n * each, msg, excess)
    if warn:
        warnings.warn(advice.message, SaturationWarning, stacklevel=2)
    return advice
