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
"""
