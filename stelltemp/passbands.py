"""Passbands: the built-in registry and user curves.

A :class:`Passband` is a tabulated response curve plus what one needs to
use it correctly: its photometric system, its magnitude system (Vega or
AB), and its *detector convention*.  The last matters: the Bessell (1990)
UBVRI curves are energy-response curves, to be integrated as ∫ F_λ R dλ,
whereas CCD-era curves (SDSS, 2MASS, Gaia, Pan-STARRS) are photon-counting
curves, integrated as ∫ F_λ λ R dλ (Bessell & Murphy 2012, PASP 124, 140,
§2).  stelltemp integrates everything in photon-counting form, using
:attr:`Passband.photon_response`, which equals the curve for photon-counting
bands and R/λ for energy bands.

Built-in curves come from the data files of the ``speclite`` package; the
registry of keys, systems and adopted Vega magnitudes with citations is the
package data file ``data/passbands.ecsv``.

Names
-----
Built-in keys are ``<band>_<SYSTEM>``: ``U_JC B_JC V_JC Rc_JC Ic_JC``
(Johnson–Cousins), ``u_SDSS … z_SDSS``, ``g_PS1 … y_PS1`` (Pan-STARRS1),
``J_2MASS H_2MASS Ks_2MASS``, ``G_GDR3 BP_GDR3 RP_GDR3`` (Gaia DR3).  Keys
are case-sensitive.  :func:`resolve_key` is the one place a name becomes a
key, used by every layer (API, column maps, command line):

* a band name alone is accepted where only one built-in band has it
  (``B V Rc Ic J H Ks G BP RP y``);
* ``g r i z`` (SDSS and Pan-STARRS1) and ``U``/``u`` (too easily confused)
  need the system; the error lists the choices;
* the keys of earlier releases (``jc.V``, ``2mass.Ks``, ``sdss.g``,
  ``gaia3.BP`` …) still work for one release, with a DeprecationWarning.
"""

from dataclasses import dataclass, field
from functools import cached_property, lru_cache
from importlib import resources
from pathlib import Path

import numpy as np
from astropy import units as u
from astropy.table import Table

from . import cache
from .errors import RenamedWarning, StelltempError, plain_reason

import warnings

__all__ = ["Passband", "get_passband", "builtin_keys", "load_passband_file", "registry_table", "resolve_key",
           "is_builtin_name"]

DETECTORS = ("energy", "photon")
MAGSYSTEMS = ("Vega", "AB", "ST")
#: wavelength step (Å) of the grid used for integrals over a band
INTEGRATION_STEP = 2.0


@dataclass(frozen=True, eq=False)
class Passband:
    """A passband response curve with its conventions.

    Parameters
    ----------
    key : str
        Unique key, ``<band>_<SYSTEM>`` for built-ins (e.g. ``V_JC``).
    system, band : str
        Photometric system and the band's usual name.
    magsys : {'Vega', 'AB', 'ST'}
        Magnitude system in which magnitudes through this band are quoted.
    detector : {'energy', 'photon'}
        Convention of the tabulated curve (see module docstring).
    wave : ndarray
        Wavelengths in Å, strictly increasing.
    response : ndarray
        Response as tabulated, normalised to a peak of 1.
    vega_mag : float
        Adopted magnitude of Vega in this band (Vega systems only).
    citation : str
        Source of the curve (and of the adopted Vega magnitude).
    """

    key: str
    system: str
    band: str
    magsys: str
    detector: str
    wave: np.ndarray = field(repr=False)
    response: np.ndarray = field(repr=False)
    vega_mag: float = float("nan")
    citation: str = ""

    @cached_property
    def _photon_norm(self):
        s = self.response if self.detector == "photon" else self.response / self.wave
        return 1.0 / s.max()

    @property
    def photon_response(self):
        """Photon-counting response S at the tabulated wavelengths, peak 1."""
        return self.photon_response_at(self.wave)

    def photon_response_at(self, wave):
        """Photon-counting response S(λ) for the integral ∫ F_λ λ S dλ, at any wavelengths (Å).

        The tabulated curve is interpolated linearly *as tabulated* and only
        then divided by λ for energy curves, so an energy curve is used
        exactly as its authors defined it (∫ F_λ R dλ with R linear between
        the tabulated points).
        """
        wave = np.asarray(wave, float)
        r = np.interp(wave, self.wave, self.response, left=0.0, right=0.0)
        if self.detector == "energy":
            r = r / wave
        return r * self._photon_norm

    @cached_property
    def integration_grid(self):
        """Wavelengths (Å) for integrals over the band: its nodes plus a 2 Å grid."""
        lo, hi = self.wave[0], self.wave[-1]
        n = int(np.ceil((hi - lo) / INTEGRATION_STEP)) + 1
        grid = np.union1d(self.wave, np.linspace(lo, hi, n))
        grid.flags.writeable = False
        return grid

    def _moment(self, power):
        grid = self.integration_grid
        return np.trapezoid(self.photon_response_at(grid) * grid**power, grid)

    @property
    def pivot_wavelength(self):
        """Pivot wavelength √(∫S λ dλ / ∫S/λ dλ) (Tokunaga & Vacca 2005, PASP 117, 421)."""
        return np.sqrt(self._moment(1) / self._moment(-1)) * u.AA

    @property
    def mean_wavelength(self):
        """Photon-weighted mean wavelength ∫S λ dλ / ∫S dλ."""
        return self._moment(1) / self._moment(0) * u.AA

    @property
    def equivalent_width(self):
        """∫S dλ with S normalised to a peak of 1."""
        return self._moment(0) * u.AA

    @property
    def fwhm(self):
        """Full width at half maximum of the photon response (outermost half-maximum crossings)."""
        w = self.integration_grid
        s = self.photon_response_at(w)
        above = np.nonzero(s >= 0.5)[0]
        i, j = above[0], above[-1]
        lo = w[i] if i == 0 else np.interp(0.5, [s[i - 1], s[i]], [w[i - 1], w[i]])
        hi = w[j] if j == len(w) - 1 else np.interp(0.5, [s[j + 1], s[j]], [w[j + 1], w[j]])
        return (hi - lo) * u.AA

    @property
    def wave_range(self):
        """(first, last) wavelength where the response is non-zero, in Å."""
        nz = np.nonzero(self.response > 0)[0]
        return self.wave[max(nz[0] - 1, 0)], self.wave[min(nz[-1] + 1, len(self.wave) - 1)]

    def summary(self):
        """Plain dict of the passband's properties (units in the key names)."""
        return {
            "key": self.key,
            "system": self.system,
            "band": self.band,
            "magsys": self.magsys,
            "detector": self.detector,
            "vega_mag": None if np.isnan(self.vega_mag) else float(self.vega_mag),
            "pivot_wavelength_nm": round(float(self.pivot_wavelength.to_value(u.nm)), 2),
            "mean_wavelength_nm": round(float(self.mean_wavelength.to_value(u.nm)), 2),
            "equivalent_width_nm": round(float(self.equivalent_width.to_value(u.nm)), 2),
            "fwhm_nm": round(float(self.fwhm.to_value(u.nm)), 2),
            "source": self.citation,
        }


def _checked_curve(wave, response, origin):
    """Validate a curve; return (wave Å, response peak-normalised) as float arrays."""
    wave = np.asarray(wave, dtype=float)
    response = np.asarray(response, dtype=float)
    if wave.ndim != 1 or wave.shape != response.shape or wave.size < 3:
        raise StelltempError(f"{origin}: need at least 3 rows of wavelength and response")
    if not (np.all(np.isfinite(wave)) and np.all(np.isfinite(response))):
        raise StelltempError(f"{origin}: wavelength and response must be finite numbers")
    if np.any(np.diff(wave) <= 0):
        i = int(np.nonzero(np.diff(wave) <= 0)[0][0]) + 1
        raise StelltempError(f"{origin}: wavelengths must increase strictly (row {i + 1}: {wave[i]})")
    if np.any(wave <= 0):
        raise StelltempError(f"{origin}: wavelengths must be positive")
    if np.any(response < 0):
        raise StelltempError(f"{origin}: response must not be negative (min {response.min()})")
    if not np.any(response > 0):
        raise StelltempError(f"{origin}: response is zero everywhere")
    return wave, response / response.max()


def _close_gaps(wave, response, factor=10.0):
    """Put zero-response nodes into gaps far wider than the curve's usual step.

    Some published tables omit their rows of zero response; linear
    interpolation across such a gap invents a plateau of response (the
    speclite ``sdss2010-u`` curve jumps from 4160 to 7620 Å, where the
    same data without the atmosphere, ``sdss2010noatm-u``, has zeros at
    4180 and 7600 Å: Doi et al. 2010, AJ 139, 1628, Table 4).
    """
    step = np.median(np.diff(wave))
    gaps = np.nonzero(np.diff(wave) > factor * step)[0]
    if gaps.size == 0:
        return wave, response
    new_w = np.concatenate([wave, wave[gaps] + step, wave[gaps + 1] - step])
    new_r = np.concatenate([response, np.zeros(2 * gaps.size)])
    order = np.argsort(new_w)
    return new_w[order], new_r[order]


def registry_table():
    """The built-in registry as an astropy Table (keys, systems, citations)."""
    return _registry().copy()


@lru_cache(maxsize=1)
def _registry():
    path = resources.files("stelltemp") / "data" / "passbands.ecsv"
    with resources.as_file(path) as p:
        return cache.read_ecsv(p)


def builtin_keys():
    """Keys of all built-in passbands, in registry order."""
    return list(_key_tuple())


@lru_cache(maxsize=1)
def _key_tuple():
    # read from the table column once: name checks ask for the keys thousands of times in a run
    return tuple(_registry()["key"])


@lru_cache(maxsize=1)
def _key_set():
    return frozenset(str(k) for k in _key_tuple())


#: band names that need their system even though only one built-in band has each
#: spelling: Johnson U and SDSS u differ only in case and are easily confused
CASE_CONFUSED = ("u",)


@lru_cache(maxsize=1)
def _names():
    """(old key → key, plain band name → key, ambiguous name → keys) from the registry."""
    reg = _registry()
    old = {str(o): str(k) for o, k in zip(reg["old_key"], reg["key"])} if "old_key" in reg.colnames else {}
    by_band = {}
    for k, b in zip(reg["key"], reg["band"]):
        group = b.lower() if b.lower() in CASE_CONFUSED else b
        by_band.setdefault(group, []).append(str(k))
    plain, ambiguous = {}, {}
    for k, b in zip(reg["key"], reg["band"]):
        group = by_band[b.lower() if b.lower() in CASE_CONFUSED else b]
        if len(group) == 1:
            plain[str(b)] = str(k)
        else:
            ambiguous[str(b)] = tuple(group)
    return old, plain, ambiguous


def is_builtin_name(name):
    """True if ``name`` is a built-in key, an old key or an unambiguous band name (never raises).

    >>> is_builtin_name("Ks"), is_builtin_name("g"), is_builtin_name("obs.date")
    (True, False, False)
    """
    old, plain, _ = _names()
    text = str(name)
    return text in _key_set() or text in old or text in plain


def resolve_key(name):
    """The built-in key a name stands for.

    Parameters
    ----------
    name : str
        A key (``"V_JC"``), an unambiguous band name (``"V"``, ``"Ks"``,
        ``"BP"``) or an old key (``"jc.V"``: DeprecationWarning).

    Returns
    -------
    str
        The key, e.g. ``"V_JC"``.

    Raises
    ------
    StelltempError
        For an ambiguous band name (the message lists the choices) or an
        unknown name.

    Examples
    --------
    >>> resolve_key("Ks"), resolve_key("g_PS1"), resolve_key("y")
    ('Ks_2MASS', 'g_PS1', 'y_PS1')
    """
    text = str(name)
    if text in _key_set():
        return text
    old, plain, ambiguous = _names()
    if text in plain:
        return plain[text]
    if text in old:
        warnings.warn(f"passband key {text!r} is now {old[text]!r} (the old key goes in the next release)",
                      RenamedWarning, stacklevel=3)
        return old[text]
    if text in ambiguous:
        raise StelltempError(f"passband {text!r} is ambiguous: give its system, one of "
                             f"{', '.join(ambiguous[text])}")
    close = [k for k in builtin_keys() if k.lower() == text.lower() or k.lower().startswith(text.lower() + "_")]
    hint = f" (did you mean {', '.join(close)}?)" if close else ""
    raise StelltempError(f"unknown passband {text!r}{hint}; `stelltemp passbands` lists them")


@lru_cache(maxsize=None)
def _builtin(key):
    reg = _registry()
    row = reg[reg["key"] == key][0]
    curve = resources.files("speclite") / "data" / "filters" / f"{row['curve_file']}.ecsv"
    with resources.as_file(curve) as p:
        tab = cache.read_ecsv(p)
    wave = u.Quantity(tab["wavelength"], u.AA if tab["wavelength"].unit is None else None)
    wave, response = _close_gaps(*_checked_curve(wave.to_value(u.AA), tab["response"], key))
    citation = str(row["curve_source"])
    if row["magsys"] == "Vega":
        citation += f"; Vega magnitude {row['vega_mag']:g} from {row['zero_point_source']}"
    return Passband(
        key=key,
        system=str(row["system"]),
        band=str(row["band"]),
        magsys=str(row["magsys"]),
        detector=str(row["detector"]),
        wave=wave,
        response=response,
        vega_mag=float(row["vega_mag"]),
        citation=citation,
    )


def get_passband(key_or_path, **file_options):
    """A built-in passband by name, or a user passband from a file path.

    Parameters
    ----------
    key_or_path : str, Path or Passband
        A built-in key such as ``'V_JC'`` or ``'BP_GDR3'``, an unambiguous
        band name (``'V'``, ``'Ks'``), an old key (deprecated; see
        :func:`resolve_key`), the key of a user curve read earlier
        (``'file:<stem>'``), or a path to a curve file (see
        :func:`load_passband_file`).  A Passband is returned unchanged.
    **file_options
        Passed to :func:`load_passband_file` for a path.

    Examples
    --------
    >>> get_passband("V").key, get_passband("V").magsys
    ('V_JC', 'Vega')
    """
    if isinstance(key_or_path, Passband):
        return key_or_path
    text = str(key_or_path)
    if text in _USER_BANDS:
        return _USER_BANDS[text]
    if is_builtin_name(text):
        return _builtin(resolve_key(text))
    if Path(text).suffix.lower() in (".ecsv", ".csv", ".txt", ".dat") or _exists(text):
        return load_passband_file(text, **file_options)
    return _builtin(resolve_key(text))  # raises with a helpful message


def _exists(text):
    """True when `text` names an existing file (False for names no file system takes)."""
    try:
        return Path(text).exists()
    except (OSError, ValueError):  # too long, NUL byte ...
        return False


_UNIT_ALIASES = {"a": "Angstrom", "aa": "Angstrom", "angstrom": "Angstrom", "angstroms": "Angstrom",
                 "nm": "nm", "um": "micron", "micron": "micron", "microns": "micron", "µm": "micron"}


def _parse_wave_unit(text, origin):
    unit = _UNIT_ALIASES.get(str(text).strip().lower(), str(text).strip())
    try:
        unit = u.Unit(unit)
        (1 * unit).to(u.AA)
    except (ValueError, u.UnitConversionError, TypeError):
        raise StelltempError(f"{origin}: unknown wavelength unit {text!r} (use Angstrom, nm or micron)") from None
    return unit


#: user passbands read in this session: key -> Passband, so that the key
#: ("file:<stem>") can stand for the curve afterwards, as built-in keys do;
#: a later file with the same name takes the key over
_USER_BANDS = {}


def load_passband_file(path, wave_unit=None, detector="photon", magsys="AB", key=None, vega_mag=0.0):
    """Read a user passband curve.

    Accepted files:

    * ECSV with columns ``wavelength`` (with a unit) and ``response``;
    * CSV with a header ``wavelength,response``, where the wavelength header
      carries its unit in brackets (``wavelength[nm]``) or ``wave_unit`` is given;
    * a two-column whitespace text file (``#`` comments) with ``wave_unit``
      given, or a comment line ``# unit: nm``.

    Parameters
    ----------
    path : str or Path
    wave_unit : str, optional
        Wavelength unit when the file does not carry one.
    detector : {'photon', 'energy'}
        Convention of the curve (photon-counting for a filter × QE product).
    magsys : {'AB', 'Vega', 'ST'}
    key : str, optional
        Key for the passband; defaults to ``file:<stem>``.
    vega_mag : float
        Adopted Vega magnitude when ``magsys='Vega'``.

    Raises
    ------
    StelltempError
        Unreadable file, unknown unit, non-monotonic wavelengths, negative or
        all-zero response.
    """
    from .catalog.tableio import read_table

    path = Path(path)
    origin = str(path)
    if detector not in DETECTORS:
        raise StelltempError(f"{origin}: detector must be one of {DETECTORS}, got {detector!r}")
    if magsys not in MAGSYSTEMS:
        raise StelltempError(f"{origin}: magnitude system must be one of {MAGSYSTEMS}, got {magsys!r}")
    if not path.is_file():
        raise StelltempError(f"passband file not found: {origin}")
    suffix = path.suffix.lower()
    try:
        if suffix == ".ecsv":
            tab = read_table(path)
            wave_col, resp_col = _pick_columns(tab, origin)
            col_unit = tab[wave_col].unit
            unit = _parse_wave_unit(wave_unit or col_unit, origin) if (wave_unit or col_unit) else None
            wave, resp = np.asarray(tab[wave_col], float), np.asarray(tab[resp_col], float)
        elif suffix == ".csv":
            tab = read_table(path)  # the one table reader (CSV '#' lines are comments)
            wave_col, resp_col = _pick_columns(tab, origin)
            unit_text = wave_unit
            if unit_text is None and "[" in wave_col and wave_col.endswith("]"):
                unit_text = wave_col[wave_col.index("[") + 1:-1]
            unit = _parse_wave_unit(unit_text, origin) if unit_text else None
            wave, resp = np.asarray(tab[wave_col], float), np.asarray(tab[resp_col], float)
        else:
            unit_text = wave_unit
            lines = path.read_text().splitlines()
            for line in lines:
                low = line.strip().lower()
                if low.startswith("#") and "unit:" in low and unit_text is None:
                    unit_text = line.split(":", 1)[1].strip()
            data = np.loadtxt(path, comments="#", ndmin=2)
            if data.shape[1] < 2:
                raise StelltempError(f"{origin}: need two columns (wavelength, response)")
            wave, resp = data[:, 0], data[:, 1]
            unit = _parse_wave_unit(unit_text, origin) if unit_text else None
    except StelltempError:
        raise
    except Exception as exc:  # astropy/numpy readers raise many types
        raise StelltempError(f"{origin}: cannot read passband file ({plain_reason(exc)})") from None
    if unit is None:
        raise StelltempError(f"{origin}: wavelength unit unknown; give it in the file or as wave_unit")
    wave = (wave * unit).to_value(u.AA)
    wave, resp = _checked_curve(wave, resp, origin)
    _check_extent(wave, origin)
    band = Passband(
        key=key or f"file:{path.stem}",
        system="user",
        band=path.stem,
        magsys=magsys,
        detector=detector,
        wave=wave,
        response=resp,
        vega_mag=float(vega_mag) if magsys == "Vega" else float("nan"),
        citation=f"user file {path.name}",
    )
    _USER_BANDS[band.key] = band
    return band


def _check_extent(wave_aa, origin):
    """A user curve must lie within `validation.RANGES['curve_wavelength']` (its grid must fit in memory)."""
    from .validation import RANGES

    rng = RANGES["curve_wavelength"]
    bad = ~rng.holds(np.asarray(wave_aa, float) / 10.0)
    if np.any(bad):
        first = np.asarray(wave_aa, float)[bad][0] / 10.0
        raise StelltempError(f"{origin}: curve wavelengths must lie in {rng.text()} (got {first:g} nm); "
                             f"beyond it no reference spectrum or extinction law is defined")


def _pick_columns(tab, origin):
    names = list(tab.colnames)
    if len(names) < 2:
        raise StelltempError(f"{origin}: need two columns (wavelength, response)")
    wave_col = next((n for n in names if n.lower().startswith(("wave", "lam"))), names[0])
    resp_col = next((n for n in names if n != wave_col and n.lower().startswith(("resp", "trans", "thr"))),
                    [n for n in names if n != wave_col][0])
    return wave_col, resp_col
