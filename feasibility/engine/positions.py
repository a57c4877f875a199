"""Spherical astronomy in plain NumPy: unit vectors, rotations, separations, the Moon's phase.

These are the small pieces the sky grid is built from and the hot path runs on.
Directions are unit 3-vectors in an equatorial frame (x towards RA 0, z towards
the pole); the local horizontal frame is (east, north, up).

References
----------
Meeus, J. 1998, *Astronomical Algorithms*, 2nd ed., chapters 13 (horizontal
coordinates), 17 (angular separation) and 48 (illuminated fraction of the Moon).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "MAS_PER_DEG",
    "altaz_from_enu",
    "along",
    "enu_matrix",
    "illuminated_fraction",
    "phase_angle_deg",
    "radec_from_vector",
    "rot3",
    "separation_deg",
    "target_vector",
    "unit_vector",
]

MAS_PER_DEG = 3.6e6

Array = NDArray[np.float64]


def unit_vector(ra_deg: ArrayLike, dec_deg: ArrayLike) -> Array:
    """Unit vector(s) towards (``ra_deg``, ``dec_deg``); shape ``(..., 3)``."""
    ra = np.radians(np.asarray(ra_deg, dtype=float))
    dec = np.radians(np.asarray(dec_deg, dtype=float))
    cos_dec = np.cos(dec)
    return np.stack([cos_dec * np.cos(ra), cos_dec * np.sin(ra), np.sin(dec)], axis=-1)


def along(rows: Array, direction: Array, index: NDArray[np.intp] | None = None) -> Array:
    """Per row, ``rows · direction``: ``direction`` is one unit vector (a fixed target, ``rows @ direction``) or one
    per instant (a moving target, ``(n, 3)``, of which ``index`` picks the rows' instants)."""
    if direction.ndim == 1:
        return rows @ direction
    chosen = direction if index is None else direction[index]
    return np.einsum("ij,ij->i", rows, chosen)


def radec_from_vector(vector: ArrayLike) -> tuple[Array, Array]:
    """Right ascension in [0, 360) and declination (degrees) of vector(s) of any length."""
    v = np.asarray(vector, dtype=float)
    ra = np.degrees(np.arctan2(v[..., 1], v[..., 0])) % 360.0
    dec = np.degrees(np.arctan2(v[..., 2], np.hypot(v[..., 0], v[..., 1])))
    return ra, dec


def separation_deg(a: ArrayLike, b: ArrayLike) -> Array:
    """Angle (degrees) between direction vectors ``a`` and ``b`` (any lengths, broadcast).

    Uses atan2(|a×b|, a·b), accurate at all separations (Meeus ch. 17 warns that
    the plain arccos of the dot product loses precision near 0° and 180°).
    """
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    cross = np.linalg.norm(np.cross(a, b), axis=-1)
    dot = np.sum(a * b, axis=-1)
    return np.degrees(np.arctan2(cross, dot))


def rot3(angle_rad: ArrayLike) -> Array:
    """Rotation matrices about the z axis by ``angle_rad`` (frame rotation, as ERFA's ``rz``); shape ``(..., 3, 3)``.

    Applied to an equatorial vector with the sidereal angle (Earth rotation angle or
    Greenwich sidereal time) it gives the terrestrial vector.
    """
    angle = np.asarray(angle_rad, dtype=float)
    c, s = np.cos(angle), np.sin(angle)
    zero, one = np.zeros_like(angle), np.ones_like(angle)
    return np.stack([np.stack([c, s, zero], -1), np.stack([-s, c, zero], -1), np.stack([zero, zero, one], -1)], -2)


def enu_matrix(latitude_deg: float, longitude_deg: float) -> Array:
    """Rotation from terrestrial (x to Greenwich meridian, z to the pole) to local (east, north, up).

    Uses the geodetic latitude, as the astronomical vertical is taken to be the
    ellipsoid normal (deflection of the vertical ignored, as astropy does).
    """
    lat, lon = np.radians(latitude_deg), np.radians(longitude_deg)
    sin_lat, cos_lat, sin_lon, cos_lon = np.sin(lat), np.cos(lat), np.sin(lon), np.cos(lon)
    return np.array(
        [
            [-sin_lon, cos_lon, 0.0],
            [-sin_lat * cos_lon, -sin_lat * sin_lon, cos_lat],
            [cos_lat * cos_lon, cos_lat * sin_lon, sin_lat],
        ]
    )


def altaz_from_enu(enu: ArrayLike) -> tuple[Array, Array]:
    """Altitude and azimuth (degrees; azimuth from north through east) of local (east, north, up) vectors."""
    v = np.asarray(enu, dtype=float)
    east, north, up = v[..., 0], v[..., 1], v[..., 2]
    alt = np.degrees(np.arctan2(up, np.hypot(east, north)))
    az = np.degrees(np.arctan2(east, north)) % 360.0
    return alt, az


def target_vector(
    ra_deg: float,
    dec_deg: float,
    pm_ra_cosdec_mas_yr: float = 0.0,
    pm_dec_mas_yr: float = 0.0,
    epoch_jyear: float = 2000.0,
    at_jyear: float = 2000.0,
) -> Array:
    """Unit vector of a star at Julian epoch ``at_jyear``, moved linearly by its proper motion.

    The motion is applied along the local east and north directions of the sky at
    the catalogue position, then renormalised, which is exact to first order and
    well defined near the poles. Radial velocity and parallax are ignored: over a
    few decades the neglected terms stay far below the engine's 0.05° tolerance
    (checked against astropy's ``apply_space_motion`` in the tests).
    """
    ra, dec = math.radians(ra_deg), math.radians(dec_deg)
    sin_ra, cos_ra, sin_dec, cos_dec = math.sin(ra), math.cos(ra), math.sin(dec), math.cos(dec)
    x, y, z = cos_dec * cos_ra, cos_dec * sin_ra, sin_dec
    years = at_jyear - epoch_jyear
    if years != 0.0 and (pm_ra_cosdec_mas_yr != 0.0 or pm_dec_mas_yr != 0.0):
        scale = math.radians(years / MAS_PER_DEG)
        east, north = pm_ra_cosdec_mas_yr * scale, pm_dec_mas_yr * scale
        # Step along the local east (-sin α, cos α, 0) and north (-sin δ cos α, -sin δ sin α, cos δ) directions.
        x += -east * sin_ra - north * sin_dec * cos_ra
        y += east * cos_ra - north * sin_dec * sin_ra
        z += north * cos_dec
        norm = math.sqrt(x * x + y * y + z * z)
        x, y, z = x / norm, y / norm, z / norm
    return np.array([x, y, z])


def phase_angle_deg(sun: ArrayLike, moon: ArrayLike) -> Array:
    """The Moon's phase angle (degrees): the angle Sun–Moon–observer.

    ``sun`` and ``moon`` are the positions (same length unit, not unit vectors) of
    the Sun and the Moon relative to the observer. This is Meeus' eq. 48.3,
    tan i = R sin ψ / (Δ − R cos ψ), written with vectors.
    """
    sun = np.asarray(sun, dtype=float)
    moon = np.asarray(moon, dtype=float)
    return separation_deg(sun - moon, -moon)


def illuminated_fraction(phase_angle: ArrayLike) -> Array:
    """Illuminated fraction of the Moon's disc, k = (1 + cos i) / 2 (Meeus eq. 48.1)."""
    return (1.0 + np.cos(np.radians(np.asarray(phase_angle, dtype=float)))) / 2.0
