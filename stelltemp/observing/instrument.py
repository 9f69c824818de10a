"""Instrument + site description: a small TOML file format of our own.

One file describes one telescope, one camera, the filters in its wheel and
the site.  Units are part of every key name, so a file reads on its own::

    [telescope]
    aperture_m = 0.40            # clear aperture diameter
    obstruction_m = 0.15         # diameter of the central obstruction
    mirrors = 2                  # reflecting surfaces in the beam
    mirror_reflectivity = 0.90   # per surface (or: reflectivity_curve = "file.ecsv")
    other_throughput = 0.95      # corrector, window, ... (grey)

    [camera]
    qe_curve = "qe.ecsv"         # or: qe = { wavelength_A = [...], value = [...] }
    read_noise_e = 9.0
    gain_e_per_adu = 1.5
    dark_e_per_s = 0.02          # per unbinned pixel
    full_well_e = 90000
    adc_bits = 16                # saturation_adu defaults to 2**adc_bits - 1
    bias_adu = 1000
    pixel_scale_arcsec = 0.62    # unbinned
    binning = 1
    min_exposure_s = 1.0         # shortest exposure worth taking (default 1 s, see below)

    [[filter]]
    name = "V"
    passband = "V_JC"            # or: curve = "myfilter.ecsv"
    curve_kind = "system"        # "system" (standard response, detector included) or "filter"
    peak_transmission = 0.45     # peak of the whole filter x detector response here
    sky_mag_arcsec2 = 21.0
    extinction_mag_per_airmass = 0.20

    [site]
    latitude_deg = 10.0
    longitude_deg = -20.0        # east positive
    elevation_m = 1200
    seeing_fwhm_arcsec = 2.5
    utc_offset_hours = 1.0       # local civil time - UTC, for plans (default: nearest hour of longitude/15)

Curve files are ECSV or CSV with a ``wavelength`` column (Å unless the ECSV
column carries a unit) and a ``value`` column (a fraction 0–1).  Relative
paths are taken from the directory of the instrument file.

What a filter's curve contains, and so what multiplies it, is said by
``curve_kind`` (each optical element is counted once):

``"filter"``
    The curve is the bare transmission of the physical filter.  Its shape
    (photon-counting response, peak 1) is scaled by ``peak_transmission``
    and multiplied by the mirrors, the other optics and the camera QE.
    The default for a ``curve`` file.
``"system"``
    The curve is a standard-system response that already contains a
    detector (Bessell's UBVRI, the SDSS, PS1, 2MASS and Gaia curves all do):
    the default for every built-in ``passband`` key.  ``peak_transmission``
    is then the peak of the whole filter × detector response of *your*
    set-up, the telescope's mirrors and other optics still multiply it, and
    the camera QE is **not** applied a second time.  If the standard
    detector's QE is known, give it as ``reference_qe`` (inline) or
    ``reference_qe_curve`` (file): the camera QE then enters only as the
    ratio QE_camera(λ) / QE_reference(λ), which corrects the curve's shape
    for your detector.  ``curve_includes_detector = true`` is the older
    spelling of ``curve_kind = "system"``.

``min_exposure_s`` (camera) is the shortest single exposure the plans will
advise.  The default, 1 s, is typical of a mechanical shutter (whose opening
and closing time is then below 1–2 % of the exposure) and of the point below
which scintillation dominates small telescopes (common practice); a camera
with an electronic shutter may set it lower.  Brighter stars get advice to
cut the light (defocus, a smaller aperture stop or a neutral-density
filter) by a stated factor instead of shorter exposures.

Every problem raises :class:`stelltemp.errors.StelltempError` with one line
naming the file, the key and, where it can be found, the line number.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from astropy import units as u

from ..errors import StelltempError, shorten

__all__ = [
    "Curve",
    "Telescope",
    "Camera",
    "FilterSpec",
    "Site",
    "Instrument",
    "load_instrument",
    "parse_instrument",
]


# --------------------------------------------------------------------------
# Objects
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Curve:
    """A tabulated fraction versus wavelength (QE, reflectivity).

    Parameters
    ----------
    wave : ndarray
        Wavelength in Å, strictly increasing.
    value : ndarray
        Fraction between 0 and 1.
    outside : {"zero", "edge"}
        Value beyond the tabulated range: 0 (a detector with unknown response
        is taken as blind) or the nearest tabulated value.
    """

    wave: np.ndarray
    value: np.ndarray
    outside: str = "zero"

    def __call__(self, wave):
        """Linear interpolation onto ``wave`` (Å)."""
        w = np.asarray(wave, dtype=float)
        if self.outside == "edge":
            return np.interp(w, self.wave, self.value)
        return np.interp(w, self.wave, self.value, left=0.0, right=0.0)


@dataclass(frozen=True)
class Telescope:
    """Collecting aperture and the optics in front of the filter.

    Attributes
    ----------
    aperture_m, obstruction_m : float
        Diameters of the clear aperture and of the central obstruction (m).
    mirrors : int
        Number of reflecting surfaces.
    reflectivity : float or Curve
        Reflectivity per surface.
    other_throughput : float
        Grey transmission of everything else (corrector, window).
    """

    aperture_m: float
    obstruction_m: float = 0.0
    mirrors: int = 2
    reflectivity: float | Curve = 0.9
    other_throughput: float = 1.0
    name: str = ""

    @property
    def collecting_area_cm2(self) -> float:
        """Unobstructed collecting area, π/4 (D² − d²), in cm²."""
        return math.pi / 4.0 * (self.aperture_m**2 - self.obstruction_m**2) * 1e4

    @property
    def collecting_area(self) -> u.Quantity:
        """Collecting area as a Quantity (cm²)."""
        return self.collecting_area_cm2 * u.cm**2

    def throughput(self, wave):
        """Mirrors × other optics at ``wave`` (Å), a plain array."""
        w = np.asarray(wave, dtype=float)
        r = self.reflectivity(w) if isinstance(self.reflectivity, Curve) else np.full_like(w, self.reflectivity)
        return r**self.mirrors * self.other_throughput


@dataclass(frozen=True)
class Camera:
    """CCD/CMOS camera.

    Attributes
    ----------
    qe : Curve
        Quantum efficiency (electrons per incident photon).
    read_noise_e : float
        Read noise per (binned) pixel read, e⁻ rms.
    gain_e_per_adu : float
        Conversion gain, e⁻/ADU.
    dark_e_per_s : float
        Dark current per unbinned pixel, e⁻ s⁻¹.
    full_well_e : float
        Full-well capacity of one unbinned pixel, e⁻.
    adc_bits : int
        ADC bit depth.
    saturation_adu : float
        Largest ADU the converter reports (default 2**adc_bits − 1).
    bias_adu : float
        Bias (offset) level, ADU.
    pixel_scale_arcsec : float
        Unbinned pixel scale, arcsec per pixel.
    binning : int
        On-chip binning factor (n × n).
    min_exposure_s : float
        Shortest single exposure the plans advise, s (default 1 s, see the
        module docstring).
    """

    qe: Curve
    read_noise_e: float
    gain_e_per_adu: float
    dark_e_per_s: float
    full_well_e: float
    adc_bits: int
    saturation_adu: float
    bias_adu: float
    pixel_scale_arcsec: float
    binning: int = 1
    name: str = ""
    min_exposure_s: float = 1.0

    @property
    def binned_scale_arcsec(self) -> float:
        """Side of a binned pixel on the sky, arcsec."""
        return self.pixel_scale_arcsec * self.binning

    @property
    def binned_dark_e_per_s(self) -> float:
        """Dark current of one binned pixel (sum of binning² pixels), e⁻ s⁻¹."""
        return self.dark_e_per_s * self.binning**2


@dataclass(frozen=True)
class FilterSpec:
    """One filter of the instrument with its sky and extinction.

    Attributes
    ----------
    name : str
        Name used in plans and on the command line.
    passband_ref : str
        A passband key (``V_JC``) or an absolute path to a curve file.
    peak_transmission : float
        Peak transmission of the physical filter (fraction).
    sky_mag_arcsec2 : float
        Dark-sky surface brightness at the zenith, mag arcsec⁻², in the
        passband's own magnitude system.
    extinction_mag_per_airmass : float
        Extinction coefficient k, mag per airmass.
    curve_includes_detector : bool
        True when the curve is a standard-system response that already
        contains a detector (``curve_kind = "system"``).
    reference_qe : Curve or None
        QE of the standard detector contained in a system curve: the camera
        QE then enters as the ratio to it.  None: the camera QE is not
        applied to a system curve.
    """

    name: str
    passband_ref: str
    peak_transmission: float
    sky_mag_arcsec2: float
    extinction_mag_per_airmass: float
    curve_includes_detector: bool = False
    reference_qe: Curve | None = None
    _cache: dict = field(default_factory=dict, compare=False, repr=False)

    @property
    def passband(self):
        """The resolved :class:`stelltemp.passbands.Passband` (cached)."""
        if "pb" not in self._cache:
            from ..passbands import get_passband

            self._cache["pb"] = get_passband(self.passband_ref)
        return self._cache["pb"]

    @property
    def curve_kind(self) -> str:
        """``"system"`` (standard response with a detector) or ``"filter"`` (bare filter)."""
        return "system" if self.curve_includes_detector else "filter"

    def qe_factor(self, camera_qe: Curve, wave):
        """What the camera QE contributes at ``wave`` (Å) for this filter's curve.

        The QE itself for a bare filter; the ratio to the reference detector
        for a system curve with ``reference_qe`` (0 where the reference is
        blind); 1 for a system curve without one.
        """
        w = np.asarray(wave, dtype=float)
        if not self.curve_includes_detector:
            return camera_qe(w)
        if self.reference_qe is None:
            return np.ones_like(w)
        ref = self.reference_qe(w)
        out = np.zeros_like(w)
        np.divide(camera_qe(w), ref, out=out, where=ref > 0)
        return out


@dataclass(frozen=True)
class Site:
    """Observing site.

    Attributes
    ----------
    latitude_deg, longitude_deg : float
        Geodetic latitude and longitude (east positive), degrees.
    elevation_m : float
        Height above sea level, m.
    seeing_fwhm_arcsec : float
        Typical seeing FWHM at the zenith, arcsec.
    utc_offset_hours : float or None
        Local civil time minus UTC, hours (None: the nearest whole hour of
        longitude / 15°, see `utc_offset`).
    """

    latitude_deg: float
    longitude_deg: float
    elevation_m: float
    seeing_fwhm_arcsec: float
    name: str = ""
    utc_offset_hours: float | None = None

    @property
    def utc_offset(self) -> tuple:
        """(hours, how): local time − UTC and where it came from (the file or the longitude)."""
        if self.utc_offset_hours is not None:
            return float(self.utc_offset_hours), "utc_offset_hours in [site]"
        return float(round(self.longitude_deg / 15.0)), "nearest hour of longitude/15 (no daylight saving)"

    def location(self):
        """The site as an :class:`astropy.coordinates.EarthLocation`."""
        from astropy.coordinates import EarthLocation

        return EarthLocation.from_geodetic(
            lon=self.longitude_deg * u.deg, lat=self.latitude_deg * u.deg, height=self.elevation_m * u.m
        )


@dataclass(frozen=True)
class Instrument:
    """Telescope, camera, filters and site read from one description file."""

    telescope: Telescope
    camera: Camera
    filters: dict
    site: Site
    title: str = ""
    source: str = ""

    def filter(self, name: str) -> FilterSpec:
        """The filter called ``name``; StelltempError listing the choices otherwise."""
        try:
            return self.filters[name]
        except KeyError:
            raise StelltempError(
                f"instrument {self.source or self.title!s}: no filter '{name}' (has: {', '.join(self.filters)})"
            ) from None


# --------------------------------------------------------------------------
# Parsing
# --------------------------------------------------------------------------
_TOP = {"title", "note", "telescope", "camera", "filter", "site"}
_TELESCOPE = {"name", "aperture_m", "obstruction_m", "mirrors", "mirror_reflectivity", "reflectivity_curve",
              "other_throughput", "note"}
_CAMERA = {"name", "qe", "qe_curve", "read_noise_e", "gain_e_per_adu", "dark_e_per_s", "full_well_e", "adc_bits",
           "saturation_adu", "bias_adu", "pixel_scale_arcsec", "binning", "min_exposure_s", "note"}
_FILTER = {"name", "passband", "curve", "peak_transmission", "sky_mag_arcsec2", "extinction_mag_per_airmass",
           "curve_includes_detector", "curve_kind", "reference_qe", "reference_qe_curve", "note"}
_SITE = {"name", "latitude_deg", "longitude_deg", "elevation_m", "seeing_fwhm_arcsec", "utc_offset_hours", "note"}
#: what a filter curve may contain (see the module docstring)
CURVE_KINDS = ("filter", "system")

_HEADER = re.compile(r"^\s*(\[\[?)\s*([A-Za-z0-9_.\-\"' ]+?)\s*\]\]?\s*(#.*)?$")
_KEYLINE = re.compile(r"^\s*([A-Za-z0-9_\-]+)\s*=")


class _Ctx:
    """Where we are in the file, to build one-line messages with line numbers."""

    def __init__(self, text: str, source: str, base_dir: Path | None):
        self.lines = text.splitlines()
        self.source = source
        self.base_dir = base_dir

    def line_of(self, section: str, index: int | None, key: str | None) -> int | None:
        """1-based line of ``key`` inside ``[section]`` (or the index-th ``[[section]]``)."""
        current, count, header_line = None, -1, None
        for n, line in enumerate(self.lines, start=1):
            m = _HEADER.match(line)
            if m:
                name = m.group(2).strip()
                if name == section:
                    if m.group(1) == "[[":
                        count += 1
                        current = index is None or count == index
                    else:
                        current = True
                    if current:
                        header_line = n
                else:
                    current = False
                continue
            if current and key is not None:
                k = _KEYLINE.match(line)
                if k and k.group(1) == key:
                    return n
        return header_line  # key absent (or not asked for): point at the table header

    def top_line(self, key: str) -> int | None:
        for n, line in enumerate(self.lines, start=1):
            if _HEADER.match(line):
                if line.strip().strip("[]").strip() == key:
                    return n
                return None
            k = _KEYLINE.match(line)
            if k and k.group(1) == key:
                return n
        return None

    def fail(self, where: str, message: str, line: int | None) -> StelltempError:
        at = f" (line {line})" if line else ""
        return StelltempError(f"{self.source}: {where}: {message}{at}")


class _Table:
    """A TOML table with the checks we need, each reporting key and line."""

    def __init__(self, ctx: _Ctx, data: dict, section: str, index: int | None, allowed: set):
        self.ctx, self.data, self.section, self.index = ctx, data, section, index
        label = f"[[{section}]] #{index + 1}" if index is not None else f"[{section}]"
        self.label = label
        if not isinstance(data, dict):
            raise ctx.fail(label, "must be a table", ctx.line_of(section, index, None))
        for key in data:
            if key not in allowed:
                raise self.error(key, f"unknown key '{key}' (allowed: {', '.join(sorted(allowed))})")

    def line(self, key):
        return self.ctx.line_of(self.section, self.index, key)

    def error(self, key, message):
        return self.ctx.fail(self.label, message, self.line(key))

    def has(self, key):
        return key in self.data

    def text(self, key, default=None, required=False):
        if key not in self.data:
            if required:
                raise self.ctx.fail(self.label, f"missing required key '{key}'", self.line(None))
            return default
        value = self.data[key]
        if not isinstance(value, str) or not value.strip():
            raise self.error(key, f"'{key}' must be a non-empty string")
        return value.strip()

    def number(self, key, default=None, required=False, lo=None, hi=None, lo_open=False, hi_open=False,
               integer=False, what=""):
        if key not in self.data:
            if required:
                raise self.ctx.fail(self.label, f"missing required key '{key}'", self.line(None))
            return default
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.error(key, f"'{key}' must be a number, got {shorten(repr(value), 40)}")
        try:
            as_float = float(value)
        except OverflowError:  # an integer with hundreds of digits
            raise self.error(key, f"'{key}' is too large to be a number ({len(str(value))} digits)") from None
        if integer and not (isinstance(value, int) or as_float.is_integer()):
            raise self.error(key, f"'{key}' must be a whole number, got {value!r}")
        value = as_float
        if not math.isfinite(value):
            raise self.error(key, f"'{key}' must be finite, got {value!r}")
        low_bad = lo is not None and (value <= lo if lo_open else value < lo)
        high_bad = hi is not None and (value >= hi if hi_open else value > hi)
        if low_bad or high_bad:
            lo_s = "" if lo is None else (f"> {lo}" if lo_open else f">= {lo}")
            hi_s = "" if hi is None else (f"< {hi}" if hi_open else f"<= {hi}")
            rng = " and ".join(s for s in (lo_s, hi_s) if s)
            raise self.error(key, f"'{key}' = {value:g} is impossible{what}: must be {rng}")
        return int(value) if integer else value

    def flag(self, key, default=False):
        if key not in self.data:
            return default
        value = self.data[key]
        if not isinstance(value, bool):
            raise self.error(key, f"'{key}' must be true or false")
        return value


def _resolve_path(ctx: _Ctx, tab: _Table, key: str) -> Path:
    name = tab.text(key)
    p = Path(name).expanduser()
    if not p.is_absolute():
        p = (ctx.base_dir or Path.cwd()) / p
    if not p.is_file():
        raise tab.error(key, f"'{key}' file not found: {p}")
    return p


def _read_curve_file(tab: _Table, key: str, path: Path, outside: str) -> Curve:
    from ..catalog.tableio import read_table

    try:
        t = read_table(path)  # the one table reader (CSV '#' lines are comments)
    except Exception as exc:  # astropy raises many types for malformed tables
        raise tab.error(key, f"cannot read curve file {path.name}: {str(exc).splitlines()[0]}") from None
    if "wavelength" not in t.colnames or "value" not in t.colnames:
        raise tab.error(key, f"curve file {path.name} needs columns 'wavelength' and 'value' (has {t.colnames})")
    col = t["wavelength"]
    wave = (col.quantity.to_value(u.AA, equivalencies=u.spectral()) if col.unit is not None
            else np.asarray(col, dtype=float))
    value = np.asarray(t["value"], dtype=float)
    return _make_curve(tab, key, wave, value, outside, path.name)


def _make_curve(tab, key, wave, value, outside, what) -> Curve:
    wave = np.asarray(wave, dtype=float)
    value = np.asarray(value, dtype=float)
    if wave.ndim != 1 or wave.size < 2 or wave.shape != value.shape:
        raise tab.error(key, f"{what}: need at least two (wavelength, value) pairs of equal length")
    if not (np.all(np.isfinite(wave)) and np.all(np.isfinite(value))):
        raise tab.error(key, f"{what}: non-finite entries")
    if np.any(wave <= 0) or np.any(np.diff(wave) <= 0):
        raise tab.error(key, f"{what}: wavelengths must be positive and strictly increasing")
    from ..validation import RANGES

    extent = RANGES["curve_wavelength"]
    if not np.all(extent.holds(wave / 10.0)):  # Å -> nm
        raise tab.error(key, f"{what}: wavelengths must lie in {extent.text()}")
    if np.any(value < 0):
        raise tab.error(key, f"{what}: negative value {value.min():g}")
    if np.any(value > 1):
        raise tab.error(key, f"{what}: value {value.max():g} above 1 (give fractions, not per cent)")
    return Curve(wave, value, outside)


def _curve(ctx, tab: _Table, inline_key: str, file_key: str, outside: str, required: bool, fallback=None):
    has_inline, has_file = tab.has(inline_key), tab.has(file_key)
    if has_inline and has_file:
        raise tab.error(file_key, f"give either '{inline_key}' or '{file_key}', not both")
    if has_file:
        return _read_curve_file(tab, file_key, _resolve_path(ctx, tab, file_key), outside)
    if has_inline:
        value = tab.data[inline_key]
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            v = tab.number(inline_key, lo=0, hi=1, lo_open=True)
            return v
        if not isinstance(value, dict) or set(value) != {"wavelength_A", "value"}:
            raise tab.error(inline_key, f"'{inline_key}' must be a number or {{ wavelength_A = [...], value = [...] }}")
        try:
            w = np.asarray(value["wavelength_A"], dtype=float)
            v = np.asarray(value["value"], dtype=float)
        except (TypeError, ValueError):
            raise tab.error(inline_key, f"'{inline_key}' lists must hold numbers") from None
        return _make_curve(tab, inline_key, w, v, outside, f"'{inline_key}'")
    if required:
        raise ctx.fail(tab.label, f"missing '{inline_key}' (inline) or '{file_key}' (file)", tab.line(None))
    return fallback


def _parse_telescope(ctx, data) -> Telescope:
    t = _Table(ctx, data, "telescope", None, _TELESCOPE)
    aperture = t.number("aperture_m", required=True, lo=0, lo_open=True, hi=50, what=" (aperture diameter)")
    obstruction = t.number("obstruction_m", default=0.0, lo=0)
    if obstruction >= aperture:
        raise t.error("obstruction_m", f"'obstruction_m' = {obstruction:g} must be smaller than aperture_m = {aperture:g}")
    mirrors = t.number("mirrors", default=2, lo=0, hi=20, integer=True)
    if t.has("mirror_reflectivity") and t.has("reflectivity_curve"):
        raise t.error("reflectivity_curve", "give either 'mirror_reflectivity' or 'reflectivity_curve', not both")
    if t.has("reflectivity_curve"):
        refl = _read_curve_file(t, "reflectivity_curve", _resolve_path(ctx, t, "reflectivity_curve"), "edge")
    else:
        refl = t.number("mirror_reflectivity", default=0.9, lo=0, hi=1, lo_open=True)
    other = t.number("other_throughput", default=1.0, lo=0, hi=1, lo_open=True)
    return Telescope(aperture, obstruction, mirrors, refl, other, t.text("name", ""))


def _parse_camera(ctx, data) -> Camera:
    t = _Table(ctx, data, "camera", None, _CAMERA)
    qe = _curve(ctx, t, "qe", "qe_curve", "zero", required=True)
    if not isinstance(qe, Curve):  # a single grey number: constant over the optical range
        qe = Curve(np.array([1000.0, 30000.0]), np.array([qe, qe]), "zero")
    rn = t.number("read_noise_e", required=True, lo=0, hi=1000)
    gain = t.number("gain_e_per_adu", required=True, lo=0, lo_open=True, hi=1000)
    dark = t.number("dark_e_per_s", default=0.0, lo=0, hi=1e5)
    fw = t.number("full_well_e", required=True, lo=0, lo_open=True, hi=1e8)
    bits = t.number("adc_bits", default=16, lo=8, hi=32, integer=True)
    adc_max = 2.0**bits - 1
    sat = t.number("saturation_adu", default=adc_max, lo=0, lo_open=True)
    if sat > adc_max:
        raise t.error("saturation_adu", f"'saturation_adu' = {sat:g} exceeds a {bits}-bit ADC ({adc_max:g})")
    bias = t.number("bias_adu", default=0.0, lo=0)
    if bias >= sat:
        raise t.error("bias_adu", f"'bias_adu' = {bias:g} must be below the saturation level {sat:g} ADU")
    scale = t.number("pixel_scale_arcsec", required=True, lo=0, lo_open=True, hi=3600)
    binning = t.number("binning", default=1, lo=1, hi=64, integer=True)
    t_min = t.number("min_exposure_s", default=1.0, lo=0, lo_open=True, hi=3600)
    return Camera(qe, rn, gain, dark, fw, bits, sat, bias, scale, binning, t.text("name", ""), t_min)


def _parse_filter(ctx, data, index) -> FilterSpec:
    t = _Table(ctx, data, "filter", index, _FILTER)
    name = t.text("name", required=True)
    if t.has("passband") == t.has("curve"):
        raise ctx.fail(t.label, f"filter '{name}': give exactly one of 'passband' (a key) or 'curve' (a file)",
                       t.line("curve") or t.line("passband") or t.line(None))
    if t.has("passband"):
        ref, ref_key = t.text("passband"), "passband"
    else:
        ref, ref_key = str(_resolve_path(ctx, t, "curve")), "curve"
    peak = t.number("peak_transmission", default=1.0, lo=0, hi=1, lo_open=True)
    sky = t.number("sky_mag_arcsec2", required=True, lo=5, hi=30, what=" (sky surface brightness)")
    k = t.number("extinction_mag_per_airmass", required=True, lo=0, hi=5)
    system = _curve_kind(ctx, t, name, ref_key)
    ref_qe = _curve(ctx, t, "reference_qe", "reference_qe_curve", "zero", required=False)
    if ref_qe is not None and not system:
        raise t.error("reference_qe_curve" if t.has("reference_qe_curve") else "reference_qe",
                      f"filter '{name}': a reference detector QE only applies to curve_kind = \"system\"")
    if ref_qe is not None and not isinstance(ref_qe, Curve):  # one grey number
        ref_qe = Curve(np.array([1000.0, 30000.0]), np.array([ref_qe, ref_qe]), "zero")
    spec = FilterSpec(name, ref, peak, sky, k, system, ref_qe)
    try:  # resolve now so a bad key is reported with its line
        spec.passband
    except ImportError:
        pass
    except StelltempError as exc:
        raise t.error(ref_key, f"filter '{name}': {exc}") from None
    return spec


def _curve_kind(ctx, t: _Table, name: str, ref_key: str) -> bool:
    """True for a standard-system curve (detector included), from curve_kind / curve_includes_detector."""
    default = "system" if ref_key == "passband" else "filter"
    kind = t.text("curve_kind", None)
    if kind is not None and kind not in CURVE_KINDS:
        raise t.error("curve_kind", f"filter '{name}': curve_kind must be \"filter\" or \"system\", got {kind!r}")
    if t.has("curve_includes_detector"):
        old = "system" if t.flag("curve_includes_detector") else "filter"
        if kind is not None and kind != old:
            raise t.error("curve_includes_detector",
                          f"filter '{name}': curve_includes_detector contradicts curve_kind = \"{kind}\"")
        kind = old
    return (kind or default) == "system"


def _parse_site(ctx, data) -> Site:
    t = _Table(ctx, data, "site", None, _SITE)
    lat = t.number("latitude_deg", required=True, lo=-90, hi=90)
    lon = t.number("longitude_deg", required=True, lo=-180, hi=360)
    if lon > 180:
        lon -= 360.0
    elev = t.number("elevation_m", default=0.0, lo=-500, hi=9000)
    seeing = t.number("seeing_fwhm_arcsec", required=True, lo=0, lo_open=True, hi=30)
    offset = t.number("utc_offset_hours", default=None, lo=-14, hi=14)
    return Site(lat, lon, elev, seeing, t.text("name", ""), offset)


def parse_instrument(text: str, base_dir=None, source: str = "<instrument>") -> Instrument:
    """Build an :class:`Instrument` from the text of a description file.

    Parameters
    ----------
    text : str
        TOML text in the format described in this module's docstring.
    base_dir : path-like, optional
        Directory for relative curve-file paths (default: current directory).
    source : str
        Name used in error messages.

    Raises
    ------
    StelltempError
        One line naming the file, the key and its line for any missing,
        unknown or impossible value.

    Examples
    --------
    >>> from stelltemp.tour import find_demo_dir
    >>> path = find_demo_dir() / "instruments" / "quillmere_04m_ccd.toml"
    >>> parse_instrument(path.read_text(), base_dir=path.parent).site.elevation_m
    850.0

    """
    ctx = _Ctx(text, source, Path(base_dir) if base_dir is not None else None)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StelltempError(f"{source}: not valid TOML: {exc}") from None
    for key in data:
        if key not in _TOP:
            raise ctx.fail("top level", f"unknown key or table '{key}' (allowed: {', '.join(sorted(_TOP))})",
                           ctx.top_line(key))
    for key in ("telescope", "camera", "site"):
        if key not in data:
            raise ctx.fail("top level", f"missing [{key}] table", None)
    if "filter" not in data or data["filter"] == []:
        raise ctx.fail("top level", "no [[filter]] entries (an instrument needs at least one filter)", None)
    if not isinstance(data["filter"], list):
        raise ctx.fail("top level", "filters must be written as [[filter]] tables", ctx.top_line("filter"))
    filters = {}
    for i, fdata in enumerate(data["filter"]):
        spec = _parse_filter(ctx, fdata, i)
        if spec.name in filters:
            raise ctx.fail(f"[[filter]] #{i + 1}", f"duplicate filter name '{spec.name}'",
                           ctx.line_of("filter", i, "name"))
        filters[spec.name] = spec
    title = data.get("title", "")
    if not isinstance(title, str):
        raise ctx.fail("top level", "'title' must be a string", ctx.top_line("title"))
    return Instrument(
        telescope=_parse_telescope(ctx, data["telescope"]),
        camera=_parse_camera(ctx, data["camera"]),
        filters=filters,
        site=_parse_site(ctx, data["site"]),
        title=title,
        source=source,
    )


def load_instrument(path) -> Instrument:
    """Read an instrument + site description file (TOML).

    Parameters
    ----------
    path : path-like
        The file; curve files named inside it are found relative to it.

    Returns
    -------
    Instrument

    Raises
    ------
    StelltempError
        File missing or unreadable, or any bad value (see `parse_instrument`).

    Examples
    --------
    >>> from stelltemp.tour import find_demo_dir
    >>> inst = load_instrument(find_demo_dir() / "instruments" / "quillmere_04m_ccd.toml")
    >>> list(inst.filters), inst.site.latitude_deg
    (['B', 'V', 'R', 'I'], 37.5)

    """
    from ..safeio import read_text_file

    p = Path(path).expanduser()
    text = read_text_file(p, "instrument file")
    return parse_instrument(text, base_dir=p.parent, source=p.name)
