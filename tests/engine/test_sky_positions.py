"""Spherical astronomy against Meeus' worked examples (Astronomical Algorithms, 2nd ed.).

Each expected value is quoted from shared/REFERENCES.md with its example number.
"""

from __future__ import annotations

import numpy as np
import pytest

from feasibility.engine.positions import (
    altaz_from_enu,
    enu_matrix,
    illuminated_fraction,
    phase_angle_deg,
    radec_from_vector,
    rot3,
    separation_deg,
    target_vector,
    unit_vector,
)

KM_PER_AU = 149597870.7


def _hms(h: float, m: float, s: float) -> float:
    return 15.0 * (h + m / 60.0 + s / 3600.0)


def _dms(d: float, m: float, s: float, sign: int = 1) -> float:
    return sign * (d + m / 60.0 + s / 3600.0)


def test_separation_meeus_17a() -> None:
    a = unit_vector(_hms(14, 15, 39.7), _dms(19, 10, 57))
    b = unit_vector(_hms(13, 25, 11.6), _dms(11, 9, 41, -1))
    # Meeus example 17.a: 32°47′35″.
    assert separation_deg(a, b) == pytest.approx(_dms(32, 47, 35), abs=1.0 / 3600.0)


def test_separation_is_accurate_near_zero_and_180() -> None:
    a = unit_vector(10.0, 20.0)
    b = unit_vector(10.0, 20.0 + 1e-7)
    # Reference: the separation of two points on one meridian is their difference in declination.
    assert separation_deg(a, b) == pytest.approx(1e-7, rel=1e-3)
    assert separation_deg(a, -a) == pytest.approx(180.0)


def test_horizontal_coordinates_meeus_13b() -> None:
    latitude = _dms(38, 55, 17)
    longitude = -_dms(77, 3, 56)
    apparent = unit_vector(_hms(23, 9, 16.641), _dms(6, 43, 11.61, -1))
    sidereal = np.radians(_hms(8, 34, 56.853))
    # The grid's own path: equatorial -> terrestrial by a z rotation of the sidereal angle, then east-north-up.
    local = enu_matrix(latitude, longitude) @ rot3(sidereal) @ apparent
    alt, az = altaz_from_enu(local)
    # Meeus example 13.b: altitude 15.1249°, azimuth 68.0337° from the south = 248.0337° from the north.
    assert alt == pytest.approx(15.1249, abs=2e-4)
    assert az == pytest.approx(248.0337, abs=2e-4)


def test_sidereal_time_meeus_12a_12b() -> None:
    from astropy.time import Time

    # Sanity check of the library the grid relies on for time scales (UT taken as UT1, as Meeus does).
    midnight = Time(2446895.5, format="jd", scale="ut1")
    # Meeus example 12.a: mean 13h10m46.3668s, apparent 13h10m46.1351s (IAU 1982 / 1994 models).
    assert midnight.sidereal_time("mean", "greenwich", model="IAU1982").hour == pytest.approx(13 + 10 / 60 + 46.3668 / 3600, abs=0.001 / 3600)
    assert midnight.sidereal_time("apparent", "greenwich", model="IAU1994").hour == pytest.approx(13 + 10 / 60 + 46.1351 / 3600, abs=0.002 / 3600)
    evening = Time(2446896.30625, format="jd", scale="ut1")
    # Meeus example 12.b: 128.7378734°.
    assert evening.sidereal_time("mean", "greenwich", model="IAU1982").degree == pytest.approx(128.7378734, abs=1e-5)


def test_moon_position_meeus_47a() -> None:
    import erfa

    jd_tt = 2448724.5  # 1992 April 12.0 TD
    moon = erfa.moon98(jd_tt, 0.0)["p"]  # the grid's Moon (GCRS axes)
    ra, dec = radec_from_vector(erfa.pnm06a(jd_tt, 0.0) @ moon)  # to the true equator and equinox of date
    # Meeus example 47.a: apparent α 134.688470°, δ +13.768368°, distance 368409.7 km.
    assert ra == pytest.approx(134.688470, abs=0.001)
    assert dec == pytest.approx(13.768368, abs=0.001)
    assert np.linalg.norm(moon) * KM_PER_AU == pytest.approx(368409.7, abs=1.0)


def test_sun_position_meeus_25a() -> None:
    import erfa

    from feasibility.engine.skygrid import _sun_geocentric

    jd_tt = 2448908.5  # 1992 October 13.0 TD
    sun = _sun_geocentric(np.array([jd_tt - 0.5, jd_tt, jd_tt + 0.5]))[1]  # the grid's Sun, interpolated
    ra, dec = radec_from_vector(erfa.pnm06a(jd_tt, 0.0) @ sun)
    # Meeus example 25.a (his low-accuracy method, good to 0.01°): α 13h13m31.4s, δ −7°47′06″,
    # distance 0.99766 AU (the method's distance is good to about 1e-4 AU).
    assert ra == pytest.approx(_hms(13, 13, 31.4), abs=0.01)
    assert dec == pytest.approx(_dms(7, 47, 6, -1), abs=0.01)
    assert np.linalg.norm(sun) == pytest.approx(0.99766, abs=1e-4)


def test_moon_phase_meeus_48a() -> None:
    moon = unit_vector(134.6885, 13.7684) * 368410.0
    sun = unit_vector(20.6579, 8.6964) * 149971520.0
    phase = phase_angle_deg(sun, moon)
    # Meeus example 48.a: phase angle 69.0756°, illuminated fraction 0.6786.
    assert phase == pytest.approx(69.0756, abs=2e-3)
    assert illuminated_fraction(phase) == pytest.approx(0.6786, abs=1e-4)


def test_illuminated_fraction_limits() -> None:
    # Reference: Meeus eq. 48.1, k = (1 + cos i)/2: full at i = 0, half at 90°, new at 180°.
    assert illuminated_fraction([0.0, 90.0, 180.0]) == pytest.approx([1.0, 0.5, 0.0])


def test_proper_motion_against_astropy_apply_space_motion() -> None:
    import astropy.units as u
    from astropy.coordinates import SkyCoord
    from astropy.time import Time

    # Barnard's star (proper motion from memory): the largest known; 27.5 years move it by 0.08°.
    ra, dec, pm_ra, pm_dec = 269.452075, 4.693391, -798.58, 10328.12
    moved = target_vector(ra, dec, pm_ra, pm_dec, 2000.0, 2027.5)
    star = SkyCoord(
        ra * u.deg,
        dec * u.deg,
        distance=1.83 * u.pc,
        pm_ra_cosdec=pm_ra * u.mas / u.yr,
        pm_dec=pm_dec * u.mas / u.yr,
        radial_velocity=0 * u.km / u.s,
        obstime=Time(2000.0, format="jyear"),
    )
    reference = star.apply_space_motion(new_obstime=Time(2027.5, format="jyear"))
    # Reference: astropy's apply_space_motion (without radial velocity); within 0.1 arcsec.
    assert separation_deg(moved, unit_vector(reference.ra.deg, reference.dec.deg)) < 0.1 / 3600.0
    assert separation_deg(moved, unit_vector(ra, dec)) > 0.05  # the motion matters at the 0.05° tolerance


def test_proper_motion_near_the_pole() -> None:
    import astropy.units as u
    from astropy.coordinates import SkyCoord
    from astropy.time import Time

    star = SkyCoord(
        37.95 * u.deg,
        89.99 * u.deg,
        distance=100 * u.pc,
        pm_ra_cosdec=5000 * u.mas / u.yr,
        pm_dec=-3000 * u.mas / u.yr,
        radial_velocity=0 * u.km / u.s,
        obstime=Time(2000.0, format="jyear"),
    )
    reference = star.apply_space_motion(new_obstime=Time(2028.0, format="jyear"))
    moved = target_vector(37.95, 89.99, 5000.0, -3000.0, 2000.0, 2028.0)
    # Reference: astropy's apply_space_motion; the linear step stays within 1 arcsec near the pole.
    assert separation_deg(moved, unit_vector(reference.ra.deg, reference.dec.deg)) < 1.0 / 3600.0
