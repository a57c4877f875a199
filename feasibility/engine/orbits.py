"""Two-body motion of a minor body from osculating elements, and its geocentric position with light-time.

Vectorised over times (Julian dates in TT). Elliptic (e < 1), parabolic (e = 1) and hyperbolic (e > 1) orbits:

- elliptic: Kepler's equation E − e sin E = M by Newton's method from Danby's start E₀ = M + 0.85 e sgn(sin M);
- hyperbolic: e sinh H − H = M by Newton's method from H₀ = sgn(M) ln(2|M|/e + 1.8) (Danby);
- parabolic: Barker's equation s³ + 3s = W, solved in closed form (Meeus, *Astronomical Algorithms*, ch. 34).

The orbit is oriented by the Gaussian vectors P, Q (Meeus ch. 33) in the ecliptic and equinox J2000.0, then turned
to equatorial axes by the obliquity ε₀ = 23.4392911° (IAU 1976, J2000.0); the frame bias to ICRS (23 mas) is left
out. The Earth's heliocentric position is ERFA's ``epv00`` (the ephemeris astropy's built-in one uses for the
Earth). The body is taken at the time its light left it: τ = Δ/c, iterated three times (Meeus ch. 33).
The Gaussian gravitational constant k = 0.01720209895 au^1.5/day sets the motion (the body's mass neglected).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime

import numpy as np
from numpy.typing import NDArray

from feasibility.documents.moving_targets import OrbitalElementsTarget

__all__ = [
    "GAUSSIAN_K",
    "LIGHT_DAYS_PER_AU",
    "OBLIQUITY_J2000_DEG",
    "Orbit",
    "OrbitPositions",
    "earth_heliocentric",
    "geocentric",
    "heliocentric_equatorial",
    "orbit_from_target",
    "solve_kepler_elliptic",
    "solve_kepler_hyperbolic",
    "solve_barker",
]

Array = NDArray[np.float64]

#: Gaussian gravitational constant (au^1.5 per day; IAU 1976).
GAUSSIAN_K = 0.01720209895
#: Light's travel time across one astronomical unit, in days (499.004784 s).
LIGHT_DAYS_PER_AU = 499.004783836 / 86400.0
#: Mean obliquity of the ecliptic at J2000.0 (IAU 1976, 84381.448″).
OBLIQUITY_J2000_DEG = 23.4392911
_JD_UNIX_EPOCH = 2440587.5
_ITERATIONS = 40


@dataclass(frozen=True)
class Orbit:
    """Osculating elements as numbers: q (au), e, angles (radians), and the time of perihelion (JD, TT)."""

    perihelion_au: float
    eccentricity: float
    inclination: float
    node: float
    perihelion_argument: float
    perihelion_jd: float
    """The JD of perihelion passage; for an ellipse given by its mean anomaly, one such time."""


@dataclass(frozen=True)
class OrbitPositions:
    """A body's geocentric positions (au, equatorial J2000 axes) at the observing times, and the distances behind its magnitude."""

    geocentric: Array
    """(n, 3): the body at the light's departure minus the Earth at its arrival."""
    sun_distance_au: Array
    """r: the body's distance from the Sun when the light left it."""
    earth_distance_au: Array
    """Δ: its distance from the Earth."""
    phase_angle_deg: Array
    """The angle Sun–body–Earth."""


def _jd(moment: datetime) -> float:
    """A document's date (read as TT) as a Julian date."""
    return moment.timestamp() / 86400.0 + _JD_UNIX_EPOCH


def orbit_from_target(target: OrbitalElementsTarget) -> Orbit:
    """The numbers of ``target``'s elements; an ellipse given by mean anomaly gets its time of perihelion."""
    q, e = target.perihelion_au, target.eccentricity
    if target.perihelion_time is not None:
        perihelion = _jd(target.perihelion_time)
    else:
        a = q / (1.0 - e)
        mean_motion = GAUSSIAN_K / a**1.5  # radians per day
        perihelion = _jd(target.epoch) - math.radians(float(target.mean_anomaly or 0.0)) / mean_motion
    return Orbit(
        perihelion_au=q,
        eccentricity=e,
        inclination=math.radians(target.inclination),
        node=math.radians(target.ascending_node_longitude),
        perihelion_argument=math.radians(target.perihelion_argument),
        perihelion_jd=perihelion,
    )


def solve_kepler_elliptic(mean_anomaly: Array, eccentricity: float) -> Array:
    """E with E − e sin E = M (radians), for 0 ≤ e < 1; M any real, E returned in the same turn as M."""
    m = np.asarray(mean_anomaly, dtype=float)
    turns = np.round(m / (2.0 * math.pi)) * 2.0 * math.pi
    reduced = m - turns  # in [-π, π]
    e = eccentricity
    anomaly = reduced + 0.85 * e * np.sign(np.sin(reduced))
    for _ in range(_ITERATIONS):
        step = (anomaly - e * np.sin(anomaly) - reduced) / (1.0 - e * np.cos(anomaly))
        anomaly = anomaly - step
        if float(np.max(np.abs(step), initial=0.0)) < 1e-14:
            break
    return anomaly + turns


def solve_kepler_hyperbolic(mean_anomaly: Array, eccentricity: float) -> Array:
    """H with e sinh H − H = M, for e > 1."""
    m = np.asarray(mean_anomaly, dtype=float)
    e = eccentricity
    anomaly = np.sign(m) * np.log(2.0 * np.abs(m) / e + 1.8)
    for _ in range(_ITERATIONS):
        step = (e * np.sinh(anomaly) - anomaly - m) / (e * np.cosh(anomaly) - 1.0)
        anomaly = anomaly - step
        if float(np.max(np.abs(step), initial=0.0)) < 1e-14:
            break
    return anomaly


def solve_barker(w: Array) -> Array:
    """s = tan(v/2) with s³ + 3s = W (Barker's equation), in closed form: s = Y − 1/Y, Y = ∛(W/2 + √(W²/4 + 1))."""
    w = np.asarray(w, dtype=float)
    y = np.cbrt(w / 2.0 + np.sqrt(w * w / 4.0 + 1.0))
    return y - 1.0 / y


def _in_plane(orbit: Orbit, tt_jd: Array) -> tuple[Array, Array]:
    """Coordinates (au) in the orbit's plane, x towards perihelion, at ``tt_jd``."""
    q, e = orbit.perihelion_au, orbit.eccentricity
    days = np.asarray(tt_jd, dtype=float) - orbit.perihelion_jd
    if e < 1.0:
        a = q / (1.0 - e)
        anomaly = solve_kepler_elliptic(GAUSSIAN_K / a**1.5 * days, e)
        return a * (np.cos(anomaly) - e), a * math.sqrt(1.0 - e * e) * np.sin(anomaly)
    if e > 1.0:
        a = q / (e - 1.0)
        anomaly = solve_kepler_hyperbolic(GAUSSIAN_K / a**1.5 * days, e)
        return a * (e - np.cosh(anomaly)), a * math.sqrt(e * e - 1.0) * np.sinh(anomaly)
    s = solve_barker(3.0 * GAUSSIAN_K / (math.sqrt(2.0) * q**1.5) * days)
    return q * (1.0 - s * s), 2.0 * q * s


def heliocentric_equatorial(orbit: Orbit, tt_jd: Array) -> Array:
    """The body's heliocentric position (au), equatorial J2000 axes, at ``tt_jd``; shape (n, 3)."""
    x, y = _in_plane(orbit, tt_jd)
    w, node, inc = orbit.perihelion_argument, orbit.node, orbit.inclination
    cw, sw, cn, sn, ci, si = math.cos(w), math.sin(w), math.cos(node), math.sin(node), math.cos(inc), math.sin(inc)
    p = np.array([cw * cn - sw * sn * ci, cw * sn + sw * cn * ci, sw * si])
    qv = np.array([-sw * cn - cw * sn * ci, -sw * sn + cw * cn * ci, cw * si])
    ecliptic = x[:, None] * p + y[:, None] * qv
    eps = math.radians(OBLIQUITY_J2000_DEG)
    ce, se = math.cos(eps), math.sin(eps)
    return np.stack([ecliptic[:, 0], ce * ecliptic[:, 1] - se * ecliptic[:, 2], se * ecliptic[:, 1] + ce * ecliptic[:, 2]], axis=-1)


def earth_heliocentric(tt_jd: Array) -> Array:
    """The Earth's heliocentric position (au, ICRS axes) from ERFA's ``epv00``; shape (n, 3)."""
    import erfa

    heliocentric, _ = erfa.epv00(np.asarray(tt_jd, dtype=float), 0.0)
    return np.asarray(heliocentric["p"], dtype=float)


def geocentric(orbit: Orbit, tt_jd: Array, earth: Array | None = None) -> OrbitPositions:
    """The body seen from the Earth's centre at ``tt_jd``, light-time corrected (``earth``: the Earth's
    heliocentric positions at those times, when already known)."""
    times = np.asarray(tt_jd, dtype=float)
    earth = earth_heliocentric(times) if earth is None else earth
    delay = np.zeros_like(times)
    for _ in range(3):
        body = heliocentric_equatorial(orbit, times - delay)
        seen = body - earth
        delay = np.linalg.norm(seen, axis=-1) * LIGHT_DAYS_PER_AU
    sun_distance = np.linalg.norm(body, axis=-1)
    earth_distance = np.linalg.norm(seen, axis=-1)
    cos_phase = np.einsum("ij,ij->i", -body, -seen) / (sun_distance * earth_distance)
    return OrbitPositions(seen, sun_distance, earth_distance, np.degrees(np.arccos(np.clip(cos_phase, -1.0, 1.0))))
