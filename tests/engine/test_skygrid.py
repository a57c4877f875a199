"""The semester sky grid against astropy, the reference library, over a whole semester.

Tolerance: 0.05° for every altitude (the engine's stated accuracy); in practice the
grid leaves out only aberration, polar motion and light deflection (< 25″).
"""

from __future__ import annotations

from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pytest

from feasibility.engine import skygrid
from feasibility.engine.airmass import altitude_for_airmass
from feasibility.engine.positions import altaz_from_enu, separation_deg, target_vector, unit_vector
from feasibility.offline import log_astropy_warnings

TOLERANCE_DEG = 0.05

TARGETS = [
    # name, ra, dec, pm_ra_cosdec (mas/yr), pm_dec (mas/yr)
    ("equatorial", 83.82, -5.39, 0.0, 0.0),
    ("south polar", 15.0, -85.0, 0.0, 0.0),
    ("northern", 250.4, 36.46, 0.0, 0.0),
    ("southern bulge", 266.4, -29.0, 0.0, 0.0),
    ("Barnard's star (high proper motion)", 269.452075, 4.693391, -798.58, 10328.12),
]


@pytest.fixture(scope="module")
def sampled(grid_2027a: skygrid.SkyGrid):
    """Every 6th grid instant over the whole semester, as astropy times and an AltAz frame."""
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation
    from astropy.time import Time

    index = np.arange(0, grid_2027a.mjd.size, 6)
    times = Time(grid_2027a.mjd[index], format="mjd", scale="utc")
    site = EarthLocation.from_geodetic(grid_2027a.longitude_deg * u.deg, grid_2027a.latitude_deg * u.deg, grid_2027a.elevation_m * u.m)
    return index, times, site, AltAz(obstime=times, location=site, pressure=0)


def _mid_jyear(grid: skygrid.SkyGrid) -> float:
    return 2000.0 + (float(grid.midnight_mjd[grid.n_nights // 2]) - 51544.5) / 365.25


@pytest.mark.parametrize("name, ra, dec, pm_ra, pm_dec", TARGETS, ids=[t[0] for t in TARGETS])
def test_target_altaz_matches_astropy_over_the_semester(grid_2027a, sampled, name, ra, dec, pm_ra, pm_dec) -> None:
    import astropy.units as u
    from astropy.coordinates import SkyCoord
    from astropy.time import Time

    index, times, site, frame = sampled
    mid = _mid_jyear(grid_2027a)
    vector = target_vector(ra, dec, pm_ra, pm_dec, 2000.0, mid)
    alt, az = altaz_from_enu(grid_2027a.basis[index, :3, :] @ vector)

    star = SkyCoord(
        ra * u.deg,
        dec * u.deg,
        distance=1 * u.kpc,
        pm_ra_cosdec=pm_ra * u.mas / u.yr,
        pm_dec=pm_dec * u.mas / u.yr,
        radial_velocity=0 * u.km / u.s,
        obstime=Time(2000.0, format="jyear"),
    )
    with log_astropy_warnings():
        star = star.apply_space_motion(new_obstime=Time(mid, format="jyear"))
        reference = SkyCoord(star.ra, star.dec).transform_to(frame)
    # Reference: astropy SkyCoord.transform_to(AltAz(pressure=0)), every 6th instant of semester 2027A.
    assert np.max(np.abs(alt - reference.alt.deg)) < TOLERANCE_DEG
    # Azimuth compared as an angle on the sky (cos alt scaling) so the zenith does not dominate.
    daz = (az - reference.az.deg + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(daz * np.cos(np.radians(alt)))) < TOLERANCE_DEG


@pytest.fixture(scope="module")
def bodies(grid_2027a, sampled):
    """astropy's Sun and Moon (topocentric) at every 24th grid instant."""
    from astropy.coordinates import AltAz, get_body

    index, times, site, frame = sampled
    few = slice(None, None, 4)
    small = AltAz(obstime=times[few], location=site, pressure=0)
    with log_astropy_warnings():
        sun = get_body("sun", times[few], site)
        moon = get_body("moon", times[few], site)
        sun_altaz, moon_altaz = sun.transform_to(small), moon.transform_to(small)
    return index[few], sun, moon, sun_altaz, moon_altaz


def test_sun_and_moon_altitudes_match_astropy(grid_2027a, bodies) -> None:
    index, _, _, sun_altaz, moon_altaz = bodies
    # Reference: astropy get_body(...).transform_to(AltAz(pressure=0)) over semester 2027A.
    assert np.max(np.abs(grid_2027a.sun_alt_deg[index] - sun_altaz.alt.deg)) < TOLERANCE_DEG
    assert np.max(np.abs(grid_2027a.moon_alt_deg[index] - moon_altaz.alt.deg)) < TOLERANCE_DEG


def test_moon_direction_and_illumination_match_astropy(grid_2027a, bodies) -> None:
    index, sun, moon, _, _ = bodies
    moon_vector = unit_vector(moon.ra.deg, moon.dec.deg)
    # Reference: astropy's topocentric GCRS Moon; the grid's Moon direction within 0.01°.
    assert np.max(separation_deg(grid_2027a.basis[index, 3, :], moon_vector)) < 0.01
    # Reference: Meeus eq. 48.1-48.3 applied to astropy's Sun and Moon positions.
    elongation = np.radians(sun.separation(moon).deg)
    r_sun, r_moon = sun.distance.au, moon.distance.au
    phase = np.arctan2(r_sun * np.sin(elongation), r_moon - r_sun * np.cos(elongation))
    fraction = (1.0 + np.cos(phase)) / 2.0
    assert np.max(np.abs(grid_2027a.moon_illumination[index] - fraction)) < 0.002


def test_hours_per_night_match_brute_force_astropy(grid_2027a) -> None:
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord, get_body
    from astropy.time import Time

    site = EarthLocation.from_geodetic(grid_2027a.longitude_deg * u.deg, grid_2027a.latitude_deg * u.deg, grid_2027a.elevation_m * u.m)
    limit = altitude_for_airmass(2.0)
    vector = target_vector(266.4, -29.0)
    view = grid_2027a.samples(-18.0)
    for night in (date(2027, 4, 20), date(2027, 7, 15)):
        n = (night - grid_2027a.first_night).days
        up = view.up[view.night_index == n] @ vector
        grid_hours = np.count_nonzero(up >= np.sin(np.radians(limit))) * grid_2027a.step_hours

        noon = Time(grid_2027a.midnight_mjd[n] - 0.5, format="mjd", scale="utc")
        minutes = noon + np.arange(0.5, 1440.0) * u.min
        frame = AltAz(obstime=minutes, location=site, pressure=0)
        with log_astropy_warnings():
            sun_alt = get_body("sun", minutes, site).transform_to(frame).alt.deg
            target_alt = SkyCoord(266.4 * u.deg, -29.0 * u.deg).transform_to(frame).alt.deg
        brute_hours = np.count_nonzero((sun_alt < -18.0) & (target_alt >= limit)) / 60.0
        # Reference: astropy, every minute, for one night; at most one 5-minute step per crossing apart.
        assert brute_hours > 1.0
        assert grid_hours == pytest.approx(brute_hours, abs=2 * grid_2027a.step_hours)


def test_twilight_definitions(grid_2027a) -> None:
    from feasibility.documents.observatory import TWILIGHT_SUN_ALTITUDE_DEG

    # Reference: U.S. Naval Observatory: civil, nautical, astronomical twilight end at -6°, -12°, -18°.
    assert TWILIGHT_SUN_ALTITUDE_DEG == {"civil": -6.0, "nautical": -12.0, "astronomical": -18.0}
    civil, nautical, astronomical = (grid_2027a.night_hours(x) for x in (-6.0, -12.0, -18.0))
    assert np.all(civil > nautical) and np.all(nautical > astronomical) and np.all(astronomical > 0)
    for limit in (-6.0, -12.0, -18.0):
        assert np.all(grid_2027a.samples(limit).sun_alt_deg < limit)
    # Reference (from memory): the Sun takes roughly 25-30 min per 6° of depression near latitude 26°,
    # so each twilight band adds roughly 0.8-1.2 h per night (two crossings).
    assert 0.6 < np.median(civil - nautical) < 1.4
    assert 0.6 < np.median(nautical - astronomical) < 1.4


def test_nights_are_named_by_their_local_starting_date(grid_2027a) -> None:
    assert grid_2027a.nights[0] == date(2027, 4, 1)
    assert grid_2027a.nights[-1] == date(2027, 9, 30)
    # Local mean solar midnight from the longitude: 0h local = 24h - longitude/15 UTC of the starting date.
    first_midnight = 61496.0 + 1.0 - grid_2027a.longitude_deg / 360.0  # MJD 61496 = 2027-04-01
    assert grid_2027a.midnight_mjd[0] == pytest.approx(first_midnight)
    view = grid_2027a.samples(-18.0)
    # Astronomical night lies on both sides of local midnight, within 7 h of it.
    assert np.all(np.abs(view.hours_from_midnight) < 7.0)


def test_disk_and_memory_caches(grid_cache_dir: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    first, last = date(2027, 6, 1), date(2027, 6, 3)
    grid = skygrid.sky_grid(-30.0, -70.0, 2000.0, first, last, step_minutes=20.0)
    assert skygrid.sky_grid(-30.0, -70.0, 2000.0, first, last, step_minutes=20.0) is grid
    files = [p for p in grid_cache_dir.iterdir() if p.suffix == ".npz"]
    assert any(p.name.startswith(f"skygrid-v{skygrid.GRID_VERSION}-") for p in files)
    assert not [p for p in grid_cache_dir.iterdir() if p.suffix == ".tmp"]

    skygrid._memory_cached.cache_clear()
    monkeypatch.setattr(skygrid, "build_sky_grid", _refuse_to_build)
    again = skygrid.sky_grid(-30.0, -70.0, 2000.0, first, last, step_minutes=20.0)
    assert again is not grid
    assert np.array_equal(again.basis, grid.basis) and again.nights == grid.nights


def test_unreadable_cache_file_is_rebuilt(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("FEASIBILITY_CACHE_DIR", str(tmp_path))
    args = (-30.0, -70.0, 2000.0, date(2027, 6, 1), date(2027, 6, 2), 30.0)
    path = tmp_path / f"skygrid-v{skygrid.GRID_VERSION}-{skygrid._cache_key(*args)}.npz"
    path.write_bytes(b"not a numpy file")
    grid = skygrid.sky_grid(*args)
    assert grid.n_nights == 2
    assert path.stat().st_size > 1000


def _refuse_to_build(*args: object, **kwargs: object) -> None:
    raise AssertionError("the grid should have come from the disk cache")


def test_step_is_validated() -> None:
    with pytest.raises(ValueError, match="step_minutes"):
        skygrid.build_sky_grid(0.0, 0.0, 0.0, date(2027, 1, 1), date(2027, 1, 1) + timedelta(days=1), step_minutes=0.1)
