"""A proposer's ephemeris table, interpolated: directions and magnitudes at any time inside its span.

Directions are interpolated linearly as unit vectors and renormalised (a great-circle step between rows; for rows
a day apart the error is of order the motion's curvature over a day, far under the engine's 0.05°); magnitudes
linearly. Outside the first and last rows the position is unknown: those times are flagged, never extrapolated.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from feasibility.documents.moving_targets import EphemerisTableTarget
from feasibility.engine.positions import unit_vector

__all__ = ["TableSamples", "interpolate_table", "table_times_mjd"]

_MJD_UNIX_EPOCH = 40587.0
Array = NDArray[np.float64]


class TableSamples:
    """The table at some times: unit vectors (n, 3), magnitudes (or None) and which times the table covers."""

    def __init__(self, directions: Array, magnitude: Array | None, covered: NDArray[np.bool_]) -> None:
        self.directions = directions
        self.magnitude = magnitude
        self.covered = covered


def table_times_mjd(target: EphemerisTableTarget) -> Array:
    """The rows' times as UTC modified Julian dates."""
    return np.array([row.time.timestamp() / 86400.0 + _MJD_UNIX_EPOCH for row in target.ephemeris_table])


def interpolate_table(target: EphemerisTableTarget, mjd: Array) -> TableSamples:
    """The table at UTC ``mjd``: linear in unit vectors (renormalised) and in magnitude; ``covered`` False outside it."""
    rows = target.ephemeris_table
    times = table_times_mjd(target)
    vectors = unit_vector([row.ra_deg for row in rows], [row.dec_deg for row in rows])
    mjd = np.asarray(mjd, dtype=float)
    covered = (mjd >= times[0]) & (mjd <= times[-1])
    inside = np.clip(mjd, times[0], times[-1])
    upper = np.clip(np.searchsorted(times, inside, side="right"), 1, times.size - 1)
    lower = upper - 1
    weight = ((inside - times[lower]) / (times[upper] - times[lower]))[:, None]
    mixed = vectors[lower] * (1.0 - weight) + vectors[upper] * weight
    directions = mixed / np.linalg.norm(mixed, axis=-1, keepdims=True)
    magnitude = None
    if rows[0].magnitude is not None:
        magnitude = np.interp(inside, times, np.array([float(row.magnitude or 0.0) for row in rows]))
    return TableSamples(directions, magnitude, covered)
