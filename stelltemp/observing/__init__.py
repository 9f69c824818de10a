"""Before the night: instrument and site, count rates, the CCD equation,
peak pixel and saturation, airmass, twilight and the night plan.

Modules (one idea each):

* ``instrument`` – the instrument + site description file (TOML) and its objects
* ``counts``     – electrons per second from a star, the sky and dark current
* ``ccd``        – the CCD equation, scintillation, exposure time for a target S/N
* ``psf``        – seeing profiles integrated over pixels, peak pixel, saturation advice
* ``airmass``    – plane-parallel and Kasten & Young (1989) airmass
* ``moon``       – Krisciunas & Schaefer (1991) scattered-moonlight sky brightness
* ``night``      – twilight, altitude through the night, best windows
* ``safety``     – Sun proximity and daylight warnings
* ``plan``       – per-target, per-filter planning tables
* ``exposure``   – one star at an airmass or a time and place in the sky, with the Sun checks

The ``exposure`` and ``nightplan`` subcommands live in :mod:`stelltemp.cli`.
The names below load their module on first use (start-up time of the CLI).
"""

from ..lazy import lazy_exports

_HOME = {
    "Instrument": "instrument",
    "load_instrument": "instrument",
    "parse_instrument": "instrument",
    "plan_exposure": "exposure",
    "plan_target": "plan",
    "plan_night": "plan",
    "night_summary": "plan",
    "read_targets": "plan",
    "twilight_times": "night",
    "best_windows": "night",
    "airmass_kasten_young": "airmass",
    "snr": "ccd",
    "exposure_for_snr": "ccd",
    "saturation_advice": "psf",
    "sun_warnings": "safety",
    "SUN_CAUTION": "safety",
}

__getattr__, __dir__ = lazy_exports(__name__, _HOME)

__all__ = sorted(_HOME)
