"""Independent references shared by the physics and photometry tests.

Everything here is computed without stelltemp's own integration code: the
passband curves are read straight from the speclite data files, Vega straight
from the CALSPEC FITS file shipped with astro-sedpy, the Planck function is a
one-line numpy formula, and integrals are plain fine-grid trapezoids.  Only
the registry table (which file, which convention, which adopted Vega
magnitude) is read from stelltemp's package data, because that is what is
being checked against.
"""

from functools import lru_cache
from importlib import resources
from types import SimpleNamespace

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from astropy.io import fits
from astropy.table import Table

_H = const.h.cgs.value
_C = const.c.cgs.value
_K = const.k_B.cgs.value
#: AB zero-magnitude flux density, 3631 Jy (Oke & Gunn 1983, ApJ 266, 713)
AB_FNU = 3631e-23


def planck_lambda(temperature_k, wave_aa):
    """B_λ in erg s⁻¹ cm⁻² Å⁻¹ sr⁻¹, straight from Planck's formula (Planck 1901)."""
    lam = np.asarray(wave_aa, float) * 1e-8
    return 2 * _H * _C**2 / lam**5 / np.expm1(_H * _C / (lam * _K * temperature_k)) * 1e-8


@lru_cache(maxsize=1)
def registry():
    path = resources.files("stelltemp") / "data" / "passbands.ecsv"
    with resources.as_file(path) as p:
        return Table.read(p, format="ascii.ecsv")


@lru_cache(maxsize=None)
def raw_curve(key):
    """(wave Å, response as tabulated with peak 1, registry row) read from the speclite file."""
    reg = registry()
    row = reg[reg["key"] == key][0]
    path = resources.files("speclite") / "data" / "filters" / f"{row['curve_file']}.ecsv"
    with resources.as_file(path) as p:
        tab = Table.read(p, format="ascii.ecsv")
    col = tab["wavelength"]
    wave = (np.asarray(col, float) * (col.unit or u.AA)).to_value(u.AA)
    resp = np.asarray(tab["response"], float)
    return wave, resp / resp.max(), row


def photon_response(key, grid):
    """Photon-counting response S on ``grid`` (Å), peak 1 at the tabulated nodes.

    The tabulated curve is interpolated linearly as tabulated; an energy-response
    curve (Bessell 1990 UBVRI) then becomes a photon response by dividing by λ,
    since ∫ F_λ R dλ = ∫ F_λ λ (R/λ) dλ (Bessell & Murphy 2012, PASP 124, 140, §2).
    """
    wave, resp, row = raw_curve(key)
    if key == "u_SDSS":
        # The airmass-1.3 SDSS u table omits its zero rows between 4160 and 7620 Å; the
        # same Doi et al. 2010 (AJ 139, 1628, Table 4) data without the atmosphere
        # (speclite sdss2010noatm-u) has zero nodes at 4180 and 7600 Å.
        wave = np.concatenate([wave, [4180.0, 7600.0]])
        resp = np.concatenate([resp, [0.0, 0.0]])
        order = np.argsort(wave)
        wave, resp = wave[order], resp[order]
    s = np.interp(grid, wave, resp, left=0.0, right=0.0)
    if row["detector"] == "energy":
        return s / grid / (resp / wave).max()
    return s


@lru_cache(maxsize=1)
def raw_vega():
    """CALSPEC alpha_lyr_stis_011 (Bohlin 2014, AJ 147, 127): wave Å, F_λ cgs."""
    path = resources.files("sedpy") / "data" / "alpha_lyr_stis_011.fits"
    with resources.as_file(path) as p, fits.open(p) as hdul:
        wave = np.array(hdul[1].data["WAVELENGTH"], float)
        flux = np.array(hdul[1].data["FLUX"], float)
    keep = np.concatenate([[True], np.diff(wave) > 0])
    return wave[keep], flux[keep]


@lru_cache(maxsize=None)
def fine_grid(key, step=0.5):
    """Curve nodes plus a uniform ``step`` Å grid over the tabulated range."""
    wave, _, _ = raw_curve(key)
    return np.union1d(wave, np.arange(wave[0], wave[-1], step))


def reference_mag(key, flam_on_grid, grid):
    """Magnitude of F_λ (given on ``grid`` = fine_grid(key)) in the band's own system.

    Photon-counting integral ∫ F_λ λ S dλ by trapezoid on the fine grid; the
    zero point is Vega (plus the adopted Vega magnitude) or 3631 Jy.
    """
    row = raw_curve(key)[2]
    s = photon_response(key, grid)
    num = np.trapezoid(flam_on_grid * grid * s, grid, axis=-1)
    if row["magsys"] == "Vega":
        vw, vf = raw_vega()
        ref = np.trapezoid(np.interp(grid, vw, vf) * grid * s, grid)
        offset = float(row["vega_mag"])
    else:
        ref = np.trapezoid(AB_FNU * _C * 1e8 / grid**2 * grid * s, grid)
        offset = 0.0
    return -2.5 * np.log10(num / ref) + offset


@pytest.fixture(scope="session")
def independent():
    """Namespace of the independent reference functions above."""
    return SimpleNamespace(
        planck_lambda=planck_lambda,
        registry=registry,
        raw_curve=raw_curve,
        photon_response=photon_response,
        raw_vega=raw_vega,
        fine_grid=fine_grid,
        reference_mag=reference_mag,
        AB_FNU=AB_FNU,
        C_CGS=_C,
        H_CGS=_H,
    )
