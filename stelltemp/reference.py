"""Reference spectra and the flux-density definitions of magnitude systems.

* Vega: the CALSPEC STIS spectrum ``alpha_lyr_stis_011`` (Bohlin 2014,
  AJ 147, 127; Bohlin, Gordon & Tremblay 2014, PASP 126, 711), read from the
  data files of the ``astro-sedpy`` package.  It covers 900 Å to 300 µm, so
  no passband of the registry needs extrapolation.
* Sun: the Kurucz (1993) solar model distributed with ``astro-sedpy``
  (``sun_kurucz93``, Teff = 5777 K, log g = 4.44), 925 Å to 160 µm (the
  file's rows below 925 Å have no flux and are dropped).  It is a
  model of the Sun, not the Sun: synthetic solar colours from it differ from
  the observed solar colours by a few hundredths of a magnitude.
* AB: F_ν = 3631 Jy (Oke & Gunn 1983, ApJ 266, 713).
* ST: F_λ = 10^(−0.4·21.10) erg s⁻¹ cm⁻² Å⁻¹ (STMAG definition, common practice).

No extrapolation is done anywhere: a spectrum that does not cover a passband
raises an error in :mod:`stelltemp.photometry`.
"""

from functools import lru_cache
from importlib import resources

import numpy as np

from .planck import C_CGS

AB_FNU_CGS = 3631e-23  # erg s^-1 cm^-2 Hz^-1
ST_FLAM_CGS = 10 ** (-0.4 * 21.10)  # erg s^-1 cm^-2 Å^-1


def sedpy_data_file(name):
    """Path of a data file of the astro-sedpy package, found without importing the package.

    (Importing sedpy loads its compiler-backed filter code; the spectra are plain files.)
    """
    from importlib.util import find_spec
    from pathlib import Path

    spec = find_spec("sedpy")
    if spec is not None and spec.submodule_search_locations:
        path = Path(next(iter(spec.submodule_search_locations))) / "data" / name
        if path.is_file():
            return path
    return resources.files("sedpy") / "data" / name


def _read_sedpy_spectrum(name):
    from astropy.io import fits

    path = sedpy_data_file(name)
    with resources.as_file(path) as p, fits.open(p) as hdul:
        data = hdul[1].data
        wave = np.array(data["WAVELENGTH"], dtype=float)
        flux = np.array(data["FLUX"], dtype=float)
    # drop repeated wavelengths and rows without a flux (the solar model has NaN below 925 Å)
    keep = np.concatenate([[True], np.diff(wave) > 0]) & np.isfinite(flux)
    return wave[keep], flux[keep]


def _frozen(name):
    w, f = _read_sedpy_spectrum(name)
    w.flags.writeable = False  # cached and shared: nobody may change them
    f.flags.writeable = False
    return w, f


VEGA_FILE = "alpha_lyr_stis_011.fits"


@lru_cache(maxsize=1)
def vega_spectrum():
    """CALSPEC Vega spectrum: (wavelength Å, F_λ erg s⁻¹ cm⁻² Å⁻¹), read-only arrays."""
    return _frozen(VEGA_FILE)


@lru_cache(maxsize=1)
def sun_spectrum():
    """Kurucz (1993) solar model at 1 AU: (wavelength Å, F_λ erg s⁻¹ cm⁻² Å⁻¹), read-only arrays."""
    return _frozen("sun_kurucz93.fits")


def ab_flam(wave_angstrom):
    """F_λ of the AB zero-magnitude source (3631 Jy) at ``wave_angstrom``."""
    w = np.asarray(wave_angstrom, float)
    return AB_FNU_CGS * C_CGS * 1e8 / w**2


def st_flam(wave_angstrom):
    """F_λ of the ST zero-magnitude source (constant)."""
    return np.full_like(np.asarray(wave_angstrom, float), ST_FLAM_CGS)
