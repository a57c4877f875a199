"""The moving targets' ephemerides against outside references.

- two-body motion: Meeus, *Astronomical Algorithms*, 2nd ed. (1998), Example 33.a (comet Encke, elliptic, geocentric
  position with light-time) and Example 34.a (parabolic motion), values from memory; each also against a direct
  numerical integration of the two-body problem (fourth-order Runge-Kutta, written here), which shares no code
  with the engine's Kepler solvers;
- planets and the Moon: astropy's ``get_body`` with the built-in ephemeris, topocentric, through ``AltAz``;
- H, G magnitudes: Bowell et al. (1989)'s formula evaluated by hand for a stated case;
- an ephemeris table: Mars sampled from astropy once a day, interpolated, compared with astropy between the rows.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime

import numpy as np
import pytest

from feasibility.documents.moving_targets import EphemerisTableTarget, MajorBodyTarget, OrbitalElementsTarget
from feasibility.engine import orbits
from feasibility.engine.ephemeris_table import interpolate_table
from feasibility.engine.positions import radec_from_vector, separation_deg, unit_vector
from feasibility.engine.small_body_brightness import comet_total_magnitude, hg_magnitude
from feasibility.engine.tracks import cubic_at, track_for

ARCSEC = 1.0 / 3600.0


def _encke() -> orbits.Orbit:
    """Comet Encke's elements of Meeus' Example 33.a (from memory): a = 2.2091404 au, e = 0.8502196, i = 11.94524°,
    Ω = 334.75006°, ω = 186.23352°, T = 1990 October 28.54502 TT (JDE 2448193.04502), ecliptic and equinox J2000.0."""
    e = 0.8502196
    return orbits.Orbit(
        perihelion_au=2.2091404 * (1.0 - e),
        eccentricity=e,
        inclination=math.radians(11.94524),
        node=math.radians(334.75006),
        perihelion_argument=math.radians(186.23352),
        perihelion_jd=2448193.04502,
    )


def _integrate(position: np.ndarray, velocity: np.ndarray, days: float, steps: int) -> np.ndarray:
    """The two-body problem r'' = −k² r / |r|³ integrated by classical fourth-order Runge-Kutta (independent check)."""
    mu = orbits.GAUSSIAN_K**2
    h = days / steps
    state = np.concatenate([position, velocity])

    def derivative(s: np.ndarray) -> np.ndarray:
        r = s[:3]
        return np.concatenate([s[3:], -mu * r / np.linalg.norm(r) ** 3])

    for _ in range(steps):
        k1 = derivative(state)
        k2 = derivative(state + h / 2 * k1)
        k3 = derivative(state + h / 2 * k2)
        k4 = derivative(state + h * k3)
        state = state + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
    return state[:3]


def _perihelion_state(orbit: orbits.Orbit) -> tuple[np.ndarray, np.ndarray]:
    """Position and velocity at perihelion (equatorial): the engine's orientation of the orbit, the vis-viva speed."""
    behind, at, ahead = orbits.heliocentric_equatorial(orbit, orbit.perihelion_jd + np.array([-1e-3, 0.0, 1e-3]))
    direction = (ahead - behind) / np.linalg.norm(ahead - behind)  # central difference: along the velocity
    q, e = orbit.perihelion_au, orbit.eccentricity
    speed = orbits.GAUSSIAN_K * math.sqrt((1.0 + e) / q)  # vis-viva at perihelion
    return at, speed * direction


def test_encke_geocentric_position_meeus_33a() -> None:
    # Meeus Example 33.a (from memory): 1990 October 6.0 TT (JDE 2448170.5), geometric position corrected for
    # light-time, J2000.0: α = 158.558965°, δ = +19.158496° (10h34m14.2s, +19°09′31″).
    seen = orbits.geocentric(_encke(), np.array([2448170.5]))
    ra, dec = radec_from_vector(seen.geocentric)
    assert abs(float(ra[0]) - 158.558965) < 2 * ARCSEC
    assert abs(float(dec[0]) - 19.158496) < 2 * ARCSEC
    assert 0.82 < float(seen.earth_distance_au[0]) < 0.83  # Δ ≈ 0.824 au (from memory)


def test_elliptic_orbit_against_numerical_integration() -> None:
    orbit = _encke()
    position, velocity = _perihelion_state(orbit)
    for days in (-22.54502, 300.0, -700.0):
        integrated = _integrate(position, velocity, days, steps=4000)
        kepler = orbits.heliocentric_equatorial(orbit, np.array([orbit.perihelion_jd + days]))[0]
        assert np.linalg.norm(integrated - kepler) < 1e-7  # au, about 15 km


def test_parabolic_motion_meeus_34a() -> None:
    # Meeus Example 34.a (from memory): q = 0.921326 au, t − T = 138.4783 days → v = 102.74426°, r = 2.364192 au.
    orbit = orbits.Orbit(0.921326, 1.0, 0.0, 0.0, 0.0, 0.0)
    position = orbits.heliocentric_equatorial(orbit, np.array([138.4783]))[0]
    # With i = Ω = ω = 0 the ecliptic x axis points to perihelion; undo the obliquity to read the true anomaly.
    eps = math.radians(orbits.OBLIQUITY_J2000_DEG)
    x, y = position[0], position[1] * math.cos(eps) + position[2] * math.sin(eps)
    assert math.degrees(math.atan2(y, x)) == pytest.approx(102.74426, abs=2e-5)
    assert float(np.linalg.norm(position)) == pytest.approx(2.364192, abs=2e-6)


@pytest.mark.parametrize("eccentricity", [1.0, 0.99999, 1.00001, 1.3, 2.5])
def test_parabolic_near_parabolic_and_hyperbolic_orbits_against_numerical_integration(eccentricity: float) -> None:
    orbit = orbits.Orbit(0.6, eccentricity, math.radians(130.0), math.radians(40.0), math.radians(250.0), 2461600.0)
    position, velocity = _perihelion_state(orbit)
    for days in (45.0, -120.0):
        integrated = _integrate(position, velocity, days, steps=6000)
        kepler = orbits.heliocentric_equatorial(orbit, np.array([orbit.perihelion_jd + days]))[0]
        assert np.linalg.norm(integrated - kepler) < 1e-7


def test_kepler_solvers_satisfy_their_equations_over_many_anomalies() -> None:
    mean = np.linspace(-40.0, 40.0, 2001)
    for e in (0.0, 0.3, 0.9, 0.999):
        anomaly = orbits.solve_kepler_elliptic(mean, e)
        assert np.max(np.abs(anomaly - e * np.sin(anomaly) - mean)) < 1e-11
    for e in (1.0001, 1.5, 8.0):
        anomaly = orbits.solve_kepler_hyperbolic(mean, e)
        assert np.max(np.abs(e * np.sinh(anomaly) - anomaly - mean)) < 1e-9 * np.maximum(1.0, np.abs(mean)).max()
    s = orbits.solve_barker(mean)
    assert np.max(np.abs(s**3 + 3 * s - mean)) < 1e-10


def test_hg_magnitude_by_hand() -> None:
    # Bowell et al. (1989): V = H + 5 log(r Δ) − 2.5 log[(1 − G) Φ1 + G Φ2], Φi = exp(−Ai tan(α/2)^Bi),
    # A1 = 3.33, B1 = 0.63, A2 = 1.87, B2 = 1.22. By hand for H = 10, G = 0.15, r = 2 au, Δ = 1 au, α = 20°:
    # tan 10° = 0.1763270; ^0.63 = 0.3351049, ^1.22 = 0.1203674; Φ1 = exp(−1.1158995) = 0.3276205,
    # Φ2 = exp(−0.2250870) = 0.7984467; 0.85 Φ1 + 0.15 Φ2 = 0.3982444; −2.5 log of it = 0.9996258;
    # 5 log 2 = 1.5051500; V = 10 + 1.5051500 + 0.9996258 = 12.5047758.
    assert float(hg_magnitude(10.0, 0.15, 2.0, 1.0, 20.0)) == pytest.approx(12.5047758, abs=1e-6)
    # At zero phase both phase functions are 1: V = H + 5 log(r Δ).
    assert float(hg_magnitude(7.3, 0.4, 3.0, 2.0, 0.0)) == pytest.approx(7.3 + 5 * math.log10(6.0), abs=1e-12)


def test_comet_total_magnitude_by_hand() -> None:
    # m = M1 + 5 log Δ + K1 log r; M1 = 5, K1 = 10, r = 0.5 au, Δ = 1.2 au: 5 + 0.3959062 − 3.0103000 = 2.3856062.
    assert float(comet_total_magnitude(5.0, 10.0, 0.5, 1.2)) == pytest.approx(2.3856062, abs=1e-6)


def test_cubic_interpolation_is_exact_for_cubics() -> None:
    nodes = 60000.0 + np.arange(40) * 0.5
    times = np.linspace(nodes[0], nodes[-1], 997)

    def curve(t: np.ndarray) -> np.ndarray:
        u = t - 60000.0
        return np.stack([u**3 - 2 * u, 0.5 * u**2, np.ones_like(u)], axis=-1)

    assert np.max(np.abs(cubic_at(nodes, curve(nodes), times) - curve(times))) < 1e-8


@pytest.mark.parametrize("body", ["jupiter", "mars", "venus", "moon"])
def test_major_body_altitudes_against_astropy_get_body(body: str, grid_2027a, demo_site_location) -> None:
    # Reference: astropy get_body (built-in ephemeris) seen from the site, transformed to AltAz without refraction.
    from astropy.coordinates import AltAz, get_body, solar_system_ephemeris
    from astropy.time import Time

    from feasibility.offline import log_astropy_warnings

    track = track_for(MajorBodyTarget(kind="major_body", name=body, body=body), grid_2027a)  # type: ignore[arg-type]
    view = grid_2027a.samples(-12.0)
    picks = np.linspace(0, view.size - 1, 60).astype(int)
    ours = np.degrees(np.arcsin(np.einsum("ij,ij->i", view.up[picks], track.directions(view)[picks])))
    times = Time(view.mjd[picks], format="mjd", scale="utc")
    with log_astropy_warnings(), solar_system_ephemeris.set("builtin"):
        reference = get_body(body, times, location=demo_site_location).transform_to(AltAz(obstime=times, location=demo_site_location, pressure=0)).alt.deg
    assert np.max(np.abs(ours - reference)) < 0.05


def test_ephemeris_table_round_trip_against_astropy(grid_2027a) -> None:
    # Mars from astropy get_body (built-in ephemeris) once a day as a table; between the rows the interpolated
    # position stays within 20″ of astropy's (Mars moves under 0.8° a day and its path bends slowly).
    from astropy.coordinates import get_body, solar_system_ephemeris
    from astropy.time import Time

    from feasibility.offline import log_astropy_warnings

    start = 61495.0  # 2027-04-01
    days = start + np.arange(0.0, 60.0)
    halves = days[:-1] + 0.5
    with log_astropy_warnings(), solar_system_ephemeris.set("builtin"):
        rows = get_body("mars", Time(days, format="mjd", scale="utc"))
        between = get_body("mars", Time(halves, format="mjd", scale="utc"))
    table = EphemerisTableTarget.model_validate(
        {
            "kind": "ephemeris_table",
            "name": "Mars (table)",
            "ephemeris_table": [
                {"time": datetime.fromtimestamp((mjd - 40587.0) * 86400.0, tz=UTC).isoformat(), "ra": float(ra), "dec": float(dec), "magnitude": 1.0 + k / 100}
                for k, (mjd, ra, dec) in enumerate(zip(days, rows.ra.deg, rows.dec.deg))
            ],
        }
    )
    samples = interpolate_table(table, halves)
    assert samples.covered.all()
    error = separation_deg(samples.directions, unit_vector(between.ra.deg, between.dec.deg))
    assert float(error.max()) < 20 * ARCSEC
    assert samples.magnitude is not None and np.allclose(samples.magnitude, 1.005 + np.arange(59) / 100)
    outside = interpolate_table(table, np.array([start - 1.0, start + 70.0]))
    assert not outside.covered.any()


def test_elements_track_matches_the_orbit_at_midnights(grid_2027a) -> None:
    # The track's cubic interpolation between its half-day nodes against the two-body position computed directly.
    target = OrbitalElementsTarget.model_validate(
        {
            "kind": "orbital_elements",
            "name": "invented",
            "epoch": "2027-06-01",
            "semi_major_axis": 1.9,
            "eccentricity": 0.4,
            "inclination": 12.0,
            "ascending_node_longitude": 100.0,
            "perihelion_argument": 30.0,
            "mean_anomaly": 350.0,
            "absolute_magnitude": 16.0,
        }
    )
    track = track_for(target, grid_2027a)
    midnights = grid_2027a.midnight_mjd + 0.23
    tt = midnights + 2400000.5 + 69.184 / 86400.0
    direct = orbits.geocentric(orbits.orbit_from_target(target), tt).geocentric
    assert float(separation_deg(track.geocentric_directions(midnights), direct).max()) < 1 * ARCSEC
