"""Airmass from altitude: plane-parallel sec z and Kasten & Young (1989).

* plane-parallel: X = sec z, z = 90° − altitude; fine above ~30° altitude,
  diverges at the horizon.
* Kasten & Young (1989, Applied Optics 28, 4735), fitted to the relative
  optical air mass of the ISO standard atmosphere::

      X = 1 / [cos z + 0.50572 (96.07995° − z)^(−1.6364)]   (z in degrees)

  finite at the horizon (≈ 38).

Both take the altitude in degrees (plain floats or arrays); below the
horizon the result is NaN.
"""

from __future__ import annotations

import numpy as np

__all__ = ["airmass_secz", "airmass_kasten_young", "airmass"]

_KY_A, _KY_B, _KY_C = 0.50572, 96.07995, 1.6364  # Kasten & Young 1989, eq. 3


def _zenith_deg(altitude_deg):
    alt = np.asarray(altitude_deg, dtype=float)
    return alt, 90.0 - alt


def airmass_secz(altitude_deg):
    """Plane-parallel airmass sec z (NaN at or below the horizon)."""
    alt, z = _zenith_deg(altitude_deg)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = 1.0 / np.cos(np.radians(z))
    return np.where(alt > 0, x, np.nan)


def airmass_kasten_young(altitude_deg):
    """Kasten & Young (1989) airmass (NaN below the horizon).

    Examples
    --------
    >>> round(float(airmass_kasten_young(30.0)), 3), round(float(airmass_kasten_young(90.0)), 3)
    (1.994, 1.0)

    """
    alt, z = _zenith_deg(altitude_deg)
    zc = np.clip(z, 0.0, 90.0)
    x = 1.0 / (np.cos(np.radians(zc)) + _KY_A * (_KY_B - zc) ** (-_KY_C))
    return np.where(alt >= 0, x, np.nan)


def airmass(altitude_deg, model="kasten_young"):
    """Airmass by name: ``"kasten_young"`` (default) or ``"secz"``."""
    if model == "kasten_young":
        return airmass_kasten_young(altitude_deg)
    if model == "secz":
        return airmass_secz(altitude_deg)
    from ..errors import StelltempError

    raise StelltempError(f"unknown airmass model '{model}' (use 'kasten_young' or 'secz')")
