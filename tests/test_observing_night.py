"""Airmass, twilight, windows, the Moon and Sun safety (coarse grids, offline)."""

import math

import numpy as np
import pytest
from astropy import units as u
from astropy.time import Time

from stelltemp.errors import StelltempError
from stelltemp.observing import airmass, moon, night, safety
from stelltemp.observing.instrument import Site

SITE = Site(latitude_deg=37.5, longitude_deg=-3.2, elevation_m=850.0, seeing_fwhm_arcsec=2.5, name="invented")


def test_airmass_at_30_degrees():
    # plane-parallel: sec z = 2 at altitude 30 deg (geometry)
    assert airmass.airmass_secz(30.0) == pytest.approx(2.0, rel=1e-12)
    # Kasten & Young 1989 (Applied Optics 28, 4735) formula: 1/(cos 60 + 0.50572 (96.07995 - 60)^-1.6364),
    # evaluated by hand = 1.99429; their tabulated ISO-atmosphere value is 1.994 (from memory)
    assert airmass.airmass_kasten_young(30.0) == pytest.approx(1.99429, abs=2e-5)
    # at the horizon the formula stays finite, close to K&Y's tabulated 38.09 (from memory)
    assert airmass.airmass_kasten_young(0.0) == pytest.approx(38.09, rel=0.01)
    # near the zenith both agree (the K&Y fit gives 0.9997 at the zenith)
    assert airmass.airmass_kasten_young(90.0) == pytest.approx(1.0, abs=5e-4)
    assert np.isnan(airmass.airmass_secz(-5.0)) and np.isnan(airmass.airmass_kasten_young(-5.0))
    with pytest.raises(StelltempError):
        airmass.airmass(30.0, model="flat")


@pytest.fixture(scope="module")
def twilights():
    return night.twilight_times("2025-03-10", SITE, step_min=20.0)


def test_twilight_times_match_sun_altitude(twilights):
    loc = SITE.location()
    # the solved times put the Sun at the requested altitudes (astropy's own Sun position), within 0.1 deg
    for name, level in (("nautical", -12.0), ("astronomical", -18.0), ("civil", -6.0), ("sun", -0.833)):
        for when in ("evening", "morning"):
            t = twilights[f"{name}_{when}"]
            assert t is not None
            assert float(night.sun_altitude(t, loc)) == pytest.approx(level, abs=0.1)
    order = [twilights[k] for k in ("sun_evening", "civil_evening", "nautical_evening", "astronomical_evening",
                                    "astronomical_morning", "nautical_morning", "civil_morning", "sun_morning")]
    assert all(a < b for a, b in zip(order, order[1:]))
    # March at 37.5 N: astronomical twilight lasts roughly 1.5 h after sunset (common practice)
    dur = (twilights["astronomical_evening"] - twilights["sun_evening"]).to_value("hour")
    assert 1.2 < dur < 1.8


def test_no_astronomical_darkness_at_high_latitude_in_june():
    # at 60 N on the June solstice the Sun only sinks to about -6.6 deg (90 - 60 - 23.44; geometry)
    north = Site(60.0, 10.0, 0.0, 2.0)
    tw = night.twilight_times("2025-06-21", north, step_min=20.0)
    assert tw["astronomical_evening"] is None and tw["nautical_evening"] is None
    assert tw["civil_evening"] is not None
    assert night.dark_interval(tw) is None
    assert night.dark_interval(tw, "civil") is not None


def test_best_window_synthetic():
    times = Time(60676.0 + np.arange(7) / 24.0, format="mjd")
    alt = np.array([[10.0, 20.0, 40.0, 60.0, 40.0, 20.0, 10.0]])
    dark = np.ones(7, bool)
    (w,) = night.best_windows(alt, times, dark, min_alt_deg=30.0)
    # crossings of 30 deg interpolated linearly: half-way between hours 1 and 2, and 4 and 5
    assert w.start.mjd == pytest.approx(60676.0 + 1.5 / 24)
    assert w.end.mjd == pytest.approx(60676.0 + 4.5 / 24)
    assert w.max_alt_deg == 60.0 and w.best.mjd == pytest.approx(60676.0 + 3 / 24)
    assert w.min_airmass == pytest.approx(float(airmass.airmass_kasten_young(60.0)))
    # window clipped by dark time; and no window at all
    dark2 = np.array([False, False, False, True, True, True, True])
    (w2,) = night.best_windows(alt, times, dark2, 30.0)
    assert w2.start.mjd == pytest.approx(60676.0 + 3 / 24)
    (w3,) = night.best_windows(alt, times, dark, 70.0)
    assert not w3.usable and w3.max_alt_deg == 60.0


def test_real_window_reaches_transit_altitude(twilights):
    # a target on the equator culminating near local midnight reaches 90 - 37.5 = 52.5 deg (geometry)
    grid = night.night_grid("2025-03-10", SITE, 10.0)
    alt, _ = night.altaz_of(([171.0], [0.0]), grid, SITE.location())
    d0, d1 = night.dark_interval(twilights)
    (w,) = night.best_windows(alt, grid, (grid >= d0) & (grid <= d1), 30.0)
    assert w.max_alt_deg == pytest.approx(52.5, abs=0.3)
    assert d0 <= w.start < w.best < w.end <= d1


def test_moon_phase_geometry():
    loc = SITE.location()
    t = Time(["2025-03-14T07:00", "2025-03-29T11:00"])
    m = night.moon_geometry(t, loc)
    # total lunar eclipse of 2025 March 14 (full Moon) and partial solar eclipse of 2025 March 29 (new Moon),
    # from memory
    assert m["phase_angle_deg"][0] < 2.0 and m["illuminated"][0] > 0.999
    assert m["phase_angle_deg"][1] > 175.0 and m["illuminated"][1] < 0.001


def test_krisciunas_schaefer_model():
    # Krisciunas & Schaefer 1991 (PASP 103, 1033), equations transcribed from memory; checked for
    # internal consistency: nL <-> V mag/arcsec^2 conversion, I*(0), f(rho), X(Z)
    assert moon.vmag_from_nl(moon.nl_from_vmag(21.3)) == pytest.approx(21.3)
    assert 0.92104 == pytest.approx(0.4 * math.log(10), abs=1e-5)
    assert moon.moon_illuminance(0.0) == pytest.approx(10 ** (-0.4 * 3.84))
    assert moon.scattering_function(90.0) == pytest.approx(10**5.36 * 1.06 + 10 ** (6.15 - 90 / 40))
    assert moon.ks_airmass(0.0) == pytest.approx(1.0)
    assert moon.ks_airmass(90.0) == pytest.approx(5.0)  # (1 - 0.96)^-1/2
    # full Moon 60 deg away: sky a few magnitudes brighter (K&S's full-Moon skies, from memory: 2–4 mag)
    v, dv = moon.moon_sky_vmag(21.0, 0.0, 60.0, 30.0, 45.0, 0.172)
    assert -4.0 < dv < -2.0
    x = moon.ks_airmass(30.0)
    b0 = moon.nl_from_vmag(21.0) * 10 ** (-0.4 * 0.172 * (x - 1)) * x  # K&S eq. 1: dark sky away from zenith
    bm = moon.moon_sky_brightness_nl(0.0, 60.0, 30.0, 45.0, 0.172)
    assert dv == pytest.approx(-2.5 * math.log10((bm + b0) / b0))
    assert v == pytest.approx(moon.vmag_from_nl(bm + b0))
    # fainter with a thinner Moon, larger separation; nothing with the Moon down; undefined within 10 deg
    assert moon.moon_sky_vmag(21.0, 90.0, 60.0, 30.0, 45.0, 0.172)[1] > dv
    assert moon.moon_sky_vmag(21.0, 0.0, 100.0, 30.0, 45.0, 0.172)[1] > dv
    assert moon.moon_sky_brightness_nl(0.0, 60.0, 30.0, 95.0, 0.172) == 0.0
    assert np.isnan(moon.moon_sky_brightness_nl(0.0, 5.0, 30.0, 45.0, 0.172))


def test_sun_safety_warnings():
    loc = SITE.location()
    noon = Time("2025-06-21T12:00")
    from astropy.coordinates import get_sun

    with night.offline_iers():
        sun = get_sun(noon)
    warns = safety.sun_warnings(noon, loc, ([sun.ra.deg + 5.0], [sun.dec.deg]), ["near-sun"])
    assert any(w.startswith("DAYLIGHT") for w in warns)
    near = [w for w in warns if w.startswith("SUN NEARBY")]
    assert len(near) == 1 and "'near-sun'" in near[0]
    for w in warns:  # every warning carries the caution
        assert "certified solar filter" in w and "local rules" in w and "never look" in w
    # midnight, target far from the Sun: nothing
    assert safety.sun_warnings(Time("2025-06-21T23:30"), loc, ([270.0], [-20.0]), ["ok"]) == []
    # civil twilight
    civil = safety.sun_warnings(Time("2025-06-21T19:50"), loc)
    assert len(civil) == 1 and civil[0].startswith("CIVIL TWILIGHT")
    with pytest.raises(StelltempError):
        safety.sun_warnings(noon, loc, min_separation_deg=200)


def test_dates_and_grid_errors():
    assert night.parse_date("2031-01-05").year == 2031
    with pytest.raises(StelltempError, match="YYYY-MM-DD"):
        night.parse_date("5 Jan")
    with pytest.raises(StelltempError):
        night.night_grid("2025-01-01", SITE, 0.0)
    # far-future dates work offline (IERS extrapolated, no download)
    assert night.night_grid("2031-01-05", SITE, 60.0).shape == (25,)


def test_twilights_solved_together_agree_with_brent_per_crossing():
    # reference: scipy's Brent root finder on astropy's Sun altitude, one crossing at a time
    from scipy.optimize import brentq

    site = Site(-30.2, -70.7, 2200.0, 1.0)
    tw = night.twilight_times("2026-12-02", site, step_min=15.0)
    loc = site.location()
    grid = night.night_grid("2026-12-02", site, 15.0)
    alt = night.sun_altitude(grid, loc)

    def f(mjd, level):
        return float(night.sun_altitude(Time(mjd, format="mjd", scale="utc"), loc)) - level

    checked = set()
    for name, level in night.SUN_ALTITUDES.items():
        for i, direction in night._crossings(grid, alt, level):
            key = f"{name}_{'evening' if direction == 'down' else 'morning'}"
            if key in checked:
                continue
            checked.add(key)
            root = brentq(f, grid[i].mjd, grid[i + 1].mjd, args=(level,), xtol=1e-7)
            assert abs(tw[key].mjd - root) * 86400 < 0.2  # seconds
    assert len(checked) == 8
    assert night.twilight_times("2026-12-02", site, step_min=15.0) == tw  # asked again: the same night


def test_cached_earth_orientation_table_gives_astropys_positions(tmp_path, monkeypatch):
    # reference: astropy's own offline table (bundled IERS-A/B files), read by astropy itself
    from astropy.coordinates import AltAz, get_body, get_sun
    from astropy.utils import iers

    from stelltemp import cache

    monkeypatch.setenv(cache.ENV_VAR, str(tmp_path))
    monkeypatch.setattr(night, "_EOP", {})
    loc = SITE.location()
    times = Time("2026-12-02T00:00:00") + np.linspace(0.0, 48.0, 40) * u.hour
    with iers.conf.set_temp("auto_download", False), iers.conf.set_temp("iers_degraded_accuracy", "ignore"):
        frame = AltAz(obstime=times, location=loc)
        sun_ref = get_sun(times).transform_to(frame).alt.deg
        moon_ref = get_body("moon", times, loc).transform_to(frame).alt.deg
    for _ in range(2):  # built, then read from the disk cache
        monkeypatch.setattr(night, "_EOP", {})
        with night.offline_iers():
            frame = AltAz(obstime=times, location=loc)
            sun = get_sun(times).transform_to(frame).alt.deg
            moon = get_body("moon", times, loc).transform_to(frame).alt.deg
        np.testing.assert_allclose(sun, sun_ref, rtol=0, atol=1e-9)
        np.testing.assert_allclose(moon, moon_ref, rtol=0, atol=1e-9)
    assert len(list(tmp_path.glob("eop-*.npz"))) == 1


def test_twilight_times_lie_on_the_dark_side_of_their_level(twilights):
    loc = SITE.location()
    for name, level in night.SUN_ALTITUDES.items():
        for when in ("evening", "morning"):
            assert float(night.sun_altitude(twilights[f"{name}_{when}"], loc)) <= level
