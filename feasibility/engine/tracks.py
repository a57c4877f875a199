"""A moving target's track over a semester: computed once on a coarse grid of times, interpolated to any instant.

The ephemeris (:mod:`~feasibility.engine.solar_system` for the planets and the Moon,
:mod:`~feasibility.engine.orbits` for a body given by its elements, :mod:`~feasibility.engine.ephemeris_table`
for a proposer's table) is evaluated at nodes every :data:`NODE_DAYS`
from a day before the semester's first night to a day after its last, once per target and semester (kept, least
recently used, per process). The sky checks then interpolate the geocentric position to the grid's instants by
cubic (four-node Lagrange) interpolation: for a path turning at angular rate ω the error is about
(ωh)⁴/40 radians, 2×10⁻⁶ rad (0.4″) for the Moon (ω ≈ 0.23 rad/day) at h = 0.5 day, and subtract the
site's position at each instant, from the grid's own rotation rows, for the topocentric direction: the Moon's
parallax reaches about 1°, a near-Earth asteroid's can be larger. A table's positions are used as given.

Instants outside an ephemeris table's span get the direction straight down (altitude −90°), so no stage counts them.
"""

from __future__ import annotations

import functools
import math
import threading
from collections import OrderedDict
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from feasibility.documents.moving_targets import EphemerisTableTarget, MajorBodyTarget, OrbitalElementsTarget
from feasibility.engine import orbits
from feasibility.engine.ephemeris_table import interpolate_table, table_times_mjd
from feasibility.engine.positions import enu_matrix, radec_from_vector, separation_deg
from feasibility.engine.skygrid import NightSamples, SkyGrid
from feasibility.engine.small_body_brightness import comet_total_magnitude, hg_magnitude
from feasibility.engine.solar_system import major_body_geocentric

__all__ = ["NODE_DAYS", "Track", "cubic_at", "cubic_coefficients", "forget_tracks", "geocentric_ra_deg", "track_for"]

Array = NDArray[np.float64]

#: Spacing of the track's nodes (days).
NODE_DAYS = 0.5
#: The last directions worked out, by (track, view, slice): identity-checked, a few megabytes at most.
_DIRECTIONS: OrderedDict[tuple[int, int, int, int], tuple[Track, NightSamples, Array]] = OrderedDict()
_DIRECTIONS_SIZE = 8
_DIRECTIONS_LOCK = threading.Lock()
#: The tracks computed, by (target's JSON, kind, first and last midnight, latitude, longitude, elevation).
_TRACKS: OrderedDict[tuple[object, ...], Track] = OrderedDict()
_TRACKS_SIZE = 512
#: Where the last few views' instants fall among the nodes (:func:`_placement`), by (view, nodes, site).
_PLACEMENTS: OrderedDict[tuple[object, ...], tuple[NightSamples, _Placement]] = OrderedDict()
_MJD_TO_JD = 2400000.5


@dataclass
class Track:
    """A moving target's positions (and magnitudes) at the nodes, and what the checks need from them."""

    kind: str
    """``major_body``, ``orbital_elements`` or ``ephemeris_table``."""
    mjd: Array
    """The nodes' UTC modified Julian dates."""
    position: Array
    """(m, 3): geocentric positions in au (unit vectors for a table), ICRS/GCRS axes."""
    known_span: tuple[float, float] | None
    """The UTC MJDs between which the position is known (an ephemeris table's first and last rows); None: always."""
    magnitude: Array | None
    """Per node, the predicted magnitude, or None when the request's brightness holds all semester."""
    magnitude_band: str | None
    """The band of :attr:`magnitude` (V for the H, G and comet laws; None: the request's brightness band)."""
    method: str
    """How the positions and magnitudes were computed (for the findings)."""
    sun_distance_au: Array | None = None
    earth_distance_au: Array | None = None
    site_offset: Array = field(default_factory=lambda: np.zeros(3))
    """The site's position in its own (east, north, up) frame (au): subtracted for the topocentric direction."""
    parallax: bool = True
    _coefficients: Array | None = field(default=None, repr=False, compare=False)
    _geocentric_last: tuple[Array, Array] | None = field(default=None, repr=False, compare=False)

    def geocentric_directions(self, mjd: Array) -> Array:
        """Geocentric unit vectors at UTC ``mjd`` (interpolated); the last call's kept, read-only, for the same
        array (a grid's midnights: the sun-safety check, the motion finding and the track's series ask for them)."""
        last = self._geocentric_last
        if last is not None and last[0] is mjd:
            return last[1]
        position = self._position_at(np.asarray(mjd, dtype=float))
        unit = position / np.linalg.norm(position, axis=-1, keepdims=True)
        unit.setflags(write=False)
        self._geocentric_last = (mjd, unit)
        return unit

    def directions(self, view: NightSamples, start: int = 0, stop: int | None = None) -> Array:
        """Topocentric unit vectors at ``view``'s instants ``start:stop``; straight down where the position is unknown.

        The same arithmetic as :meth:`geocentric_directions` minus the site's position, laid out by component
        (three contiguous rows, returned transposed as an ``(n, 3)`` view): every operation then runs along
        whole rows instead of three numbers at a time, several times faster over a semester's instants. Where
        the instants fall among the nodes, and the site's position at each, are shared by every track of the
        semester (:func:`_placement`). The last few results are kept (:data:`_DIRECTIONS`), as the same target
        comes back for the night plot and the what-if suggestions; each takes about 0.5 MB for a semester.
        """
        stop = view.size if stop is None else stop
        key = (id(self), id(view), start, stop)
        with _DIRECTIONS_LOCK:
            cached = _DIRECTIONS.get(key)
        if cached is not None and cached[0] is self and cached[1] is view:
            return cached[2]
        placement = _placement(view, start, stop, self.mjd, self.site_offset if self.parallax else None)
        position = placement.evaluate(_by_component(self._coefficients_now()))  # a 35 kB copy: not kept per track
        if placement.site is not None:
            position -= placement.site
        x, y, z = position
        position /= np.sqrt(x * x + y * y + z * z)  # np.linalg.norm's sum, in its order
        unit = position.T
        if self.known_span is not None:
            known = self._covered_at(view.mjd[start:stop])
            unit[~known] = -view.up[start:stop][~known]
        unit.setflags(write=False)
        with _DIRECTIONS_LOCK:
            _DIRECTIONS[key] = (self, view, unit)
            while len(_DIRECTIONS) > _DIRECTIONS_SIZE:
                _DIRECTIONS.popitem(last=False)
        return unit

    def known_at(self, mjd: Array) -> NDArray[np.bool_]:
        """Whether the position is known at UTC ``mjd`` (always, but outside an ephemeris table)."""
        return self._covered_at(np.asarray(mjd, dtype=float))

    def magnitude_at(self, mjd: Array) -> Array | None:
        """The predicted magnitude at UTC ``mjd`` (interpolated), or None."""
        if self.magnitude is None:
            return None
        return np.interp(np.asarray(mjd, dtype=float), self.mjd, self.magnitude)

    def rate_arcsec_per_hour(self, mjd: Array) -> Array:
        """The geocentric motion on the sky at UTC ``mjd`` (arcseconds per hour), from the nodes on either side."""
        middle, step = self._node_rates
        return np.interp(np.asarray(mjd, dtype=float), middle, step)

    @functools.cached_property
    def _node_rates(self) -> tuple[Array, Array]:
        """Between each two nodes: the middle time and the motion (arcseconds per hour), worked out once."""
        unit = self.position / np.linalg.norm(self.position, axis=-1, keepdims=True)
        step = separation_deg(unit[:-1], unit[1:]) * 3600.0 / (np.diff(self.mjd) * 24.0)
        return (self.mjd[:-1] + self.mjd[1:]) / 2.0, step

    def _position_at(self, mjd: Array) -> Array:
        return cubic_at(self.mjd, self.position, mjd, self._coefficients_now())

    def _coefficients_now(self) -> Array:
        if self._coefficients is None:
            self._coefficients = cubic_coefficients(self.position)
        return self._coefficients

    def _covered_at(self, mjd: Array) -> NDArray[np.bool_]:
        if self.known_span is None:
            return np.ones(mjd.shape, dtype=bool)
        first, last = self.known_span
        return (mjd >= first) & (mjd <= last)


def cubic_at(nodes: Array, values: Array, mjd: Array, coefficients: Array | None = None) -> Array:
    """``values`` (m, 3) at evenly spaced ``nodes`` interpolated to ``mjd`` by four-node Lagrange polynomials
    (clamped to the nodes' span); ``coefficients`` (:func:`cubic_coefficients`) when already worked out."""
    if coefficients is None:
        coefficients = cubic_coefficients(values)
    segment, fraction = _segments(nodes, np.asarray(mjd, dtype=float))
    s = fraction[:, None]
    c = coefficients[segment]  # one gather: (n, 4, 3)
    return c[:, 0] + s * (c[:, 1] + s * (c[:, 2] + s * c[:, 3]))


def cubic_coefficients(values: Array) -> Array:
    """Per segment [node i, node i+1] (i from 1), the cubic through nodes i−1 … i+2 as powers of the fraction s:
    (m − 3, 4, 3), Horner order (the Lagrange weights of :func:`cubic_at` expanded)."""
    before, at, after, later = values[:-3], values[1:-2], values[2:-1], values[3:]
    return np.ascontiguousarray(
        np.stack(
            [
                at,
                -before / 3.0 - at / 2.0 + after - later / 6.0,
                before / 2.0 - at + after / 2.0,
                -before / 6.0 + at / 2.0 - after / 2.0 + later / 6.0,
            ],
            axis=1,
        )
    )


def _segments(nodes: Array, mjd: Array) -> tuple[NDArray[np.intp], Array]:
    """Per time, the segment (the row of :func:`cubic_coefficients`) and the fraction s within it (clamped)."""
    step = float(nodes[1] - nodes[0])
    u = np.clip((mjd - nodes[0]) / step, 0.0, nodes.size - 1.0)
    i = np.clip(np.floor(u).astype(np.intp), 1, nodes.size - 3)
    return i - 1, u - i


def _by_component(coefficients: Array) -> Array:
    """:func:`cubic_coefficients` as (3 · 4, m − 3): one contiguous row per component and power."""
    return np.ascontiguousarray(coefficients.transpose(2, 1, 0)).reshape(12, -1)


@dataclass(frozen=True)
class _Placement:
    """Where a view's instants (in time order) fall among a semester's nodes, and the site's position at each
    (ICRS axes, by component): the same for every track of the semester."""

    segment: NDArray[np.intp]
    """Per instant, its segment (the row of :func:`cubic_coefficients`)."""
    per_segment: NDArray[np.intp]
    """How many instants fall in each segment: the segments' coefficients repeated that often, in order, are the
    coefficients at the instants (as a gather by :attr:`segment`, for a tenth of the cost)."""
    fraction: Array
    site: Array | None
    """(3, n): the site's position, subtracted from the geocentric one (None: no parallax)."""

    def evaluate(self, columns: Array) -> Array:
        """The cubic at the instants, (3, n): Horner's rule as :func:`cubic_at` computes it, row by row."""
        c = columns.repeat(self.per_segment, axis=1).reshape(3, 4, -1)
        s = self.fraction
        position = c[:, 3] * s
        position += c[:, 2]
        position *= s
        position += c[:, 1]
        position *= s
        position += c[:, 0]
        return position

    def part(self, start: int, stop: int) -> _Placement:
        """The instants ``start:stop`` only (one night, for the night plot)."""
        segment = self.segment[start:stop]
        return _Placement(
            segment,
            np.bincount(segment, minlength=self.per_segment.size),
            self.fraction[start:stop],
            None if self.site is None else self.site[:, start:stop],
        )


def _placement(view: NightSamples, start: int, stop: int, nodes: Array, site_offset: Array | None) -> _Placement:
    """:class:`_Placement` of ``view``'s instants ``start:stop``, cut from the whole view's (the last few views'
    kept, identity-checked)."""
    offset = None if site_offset is None else site_offset.tobytes()
    key = (id(view), float(nodes[0]), float(nodes[1]), nodes.size, offset)
    with _DIRECTIONS_LOCK:
        cached = _PLACEMENTS.get(key)
        if cached is not None:
            _PLACEMENTS.move_to_end(key)
    if cached is not None and cached[0] is view:
        placement = cached[1]
    else:
        segment, fraction = _segments(nodes, view.mjd)
        site = None
        if site_offset is not None:
            site = np.ascontiguousarray((site_offset[0] * view.east + site_offset[1] * view.north + site_offset[2] * view.up).T)
        placement = _Placement(segment, np.bincount(segment, minlength=nodes.size - 3), fraction, site)
        with _DIRECTIONS_LOCK:
            _PLACEMENTS[key] = (view, placement)
            while len(_PLACEMENTS) > _DIRECTIONS_SIZE:
                _PLACEMENTS.popitem(last=False)
    return placement if (start, stop) == (0, view.size) else placement.part(start, stop)


def track_for(target: MajorBodyTarget | OrbitalElementsTarget | EphemerisTableTarget, grid: SkyGrid) -> Track:
    """The track of a moving ``target`` over ``grid``'s semester (computed once per target and semester: kept by the
    target's JSON and the grid's site and nights, least recently used, :data:`_TRACKS_SIZE` of them, about 50 kB each).

    A track first seen is computed from ``target`` itself (not parsed back from its JSON, which costs more than the
    track for an ephemeris table's rows)."""
    semester = (float(grid.midnight_mjd[0]), float(grid.midnight_mjd[-1]), grid.latitude_deg, grid.longitude_deg, grid.elevation_m)
    key = (target.model_dump_json(), target.kind, *semester)
    with _DIRECTIONS_LOCK:
        track = _TRACKS.get(key)
        if track is not None:
            _TRACKS.move_to_end(key)
    if track is None:
        track = _new_track(target, *semester)
        with _DIRECTIONS_LOCK:
            _TRACKS[key] = track
            while len(_TRACKS) > _TRACKS_SIZE:
                _TRACKS.popitem(last=False)
    return track


def geocentric_ra_deg(target: MajorBodyTarget | OrbitalElementsTarget | EphemerisTableTarget, utc_mjd: float) -> float | None:
    """A moving ``target``'s geocentric right ascension (degrees) at one UTC instant, from the same ephemeris as its
    track (no grid needed: the semester overview places a body's demand by it); None outside an ephemeris table."""
    at: Array = np.array([utc_mjd], dtype=np.float64)
    if isinstance(target, MajorBodyTarget):
        vector = major_body_geocentric(target.body, at)[0]
    elif isinstance(target, OrbitalElementsTarget):
        tt = at + _MJD_TO_JD + _tt_minus_utc_days(utc_mjd)
        vector = orbits.geocentric(orbits.orbit_from_target(target), tt, _earth(tt.tobytes())).geocentric[0]
    else:
        table = interpolate_table(target, at)
        if not bool(table.covered[0]):
            return None
        vector = table.directions[0]
    return float(radec_from_vector(vector)[0])


def forget_tracks() -> None:
    """Empty this process's cache of tracks and their directions (the benchmark's first-sight figure; tests)."""
    with _DIRECTIONS_LOCK:
        _TRACKS.clear()
        _DIRECTIONS.clear()
        _PLACEMENTS.clear()


def _new_track(
    target: MajorBodyTarget | OrbitalElementsTarget | EphemerisTableTarget,
    first_midnight: float,
    last_midnight: float,
    latitude: float,
    longitude: float,
    elevation: float,
) -> Track:
    step = NODE_DAYS
    count = int(math.ceil((last_midnight - first_midnight + 2.0) / step)) + 1
    mjd: Array = first_midnight - 1.0 + np.arange(count, dtype=np.float64) * step
    site = _site_position(latitude, longitude, elevation)
    if isinstance(target, MajorBodyTarget):
        return Track(
            kind=target.kind,
            mjd=mjd,
            position=major_body_geocentric(target.body, mjd),
            known_span=None,
            magnitude=None,
            magnitude_band=None,
            site_offset=site,
            method=f"{target.body.capitalize()} from astropy get_body with the built-in ephemeris (ERFA epv00, plan94, "
            f"moon98; light-time corrected), every {step * 24:g} h, interpolated; topocentric with the site's position",
        )
    if isinstance(target, OrbitalElementsTarget):
        return _elements_track(target, mjd, site, step)
    table = interpolate_table(target, mjd)
    times = table_times_mjd(target)
    return Track(
        kind=target.kind,
        mjd=mjd,
        position=table.directions,
        known_span=(float(times[0]), float(times[-1])),
        magnitude=table.magnitude,
        magnitude_band=None,
        parallax=False,
        method=f"the proposer's ephemeris table ({len(target.ephemeris_table)} rows), interpolated linearly as unit "
        "vectors and used as given (no parallax); outside its span the position is unknown and those instants do not count",
    )


def _elements_track(target: OrbitalElementsTarget, mjd: Array, site: Array, step: float) -> Track:
    tt = mjd + _MJD_TO_JD + _tt_minus_utc_days(float(mjd[0]))
    orbit = orbits.orbit_from_target(target)
    seen = orbits.geocentric(orbit, tt, _earth(tt.tobytes()))
    magnitude: Array | None = None
    law = "no brightness law given: the request's brightness is used all semester"
    if target.absolute_magnitude is not None:
        magnitude = hg_magnitude(target.absolute_magnitude, target.slope, seen.sun_distance_au, seen.earth_distance_au, seen.phase_angle_deg)
        law = f"V from the IAU H, G system (Bowell et al. 1989), H = {target.absolute_magnitude:g}, G = {target.slope:g}"
    elif target.total_absolute_magnitude is not None and target.total_magnitude_slope is not None:
        magnitude = comet_total_magnitude(target.total_absolute_magnitude, target.total_magnitude_slope, seen.sun_distance_au, seen.earth_distance_au)
        law = (
            f"V from the comet total-magnitude law m = M1 + 5 log Δ + K1 log r, M1 = {target.total_absolute_magnitude:g}, K1 = {target.total_magnitude_slope:g}"
        )
    kind = "ellipse" if orbit.eccentricity < 1.0 else ("hyperbola" if orbit.eccentricity > 1.0 else "parabola")
    return Track(
        kind=target.kind,
        mjd=mjd,
        position=seen.geocentric,
        known_span=None,
        magnitude=magnitude,
        magnitude_band="V" if magnitude is not None else None,
        sun_distance_au=seen.sun_distance_au,
        earth_distance_au=seen.earth_distance_au,
        site_offset=site,
        method=f"two-body {kind} from the osculating elements (ecliptic J2000.0; Kepler's equation, Meeus ch. 33-34), "
        f"the Earth from ERFA epv00, light-time corrected, every {step * 24:g} h, interpolated; topocentric with the "
        f"site's position; {law}",
    )


@functools.lru_cache(maxsize=8)
def _site_position(latitude: float, longitude: float, elevation: float) -> Array:
    """The site's position (au) in its own (east, north, up) frame: the same for every track at the site (read-only)."""
    import erfa

    site = enu_matrix(latitude, longitude) @ (erfa.gd2gc(1, math.radians(longitude), math.radians(latitude), elevation) / erfa.DAU)
    site.setflags(write=False)
    return site


@functools.lru_cache(maxsize=8)
def _earth(tt: bytes) -> Array:
    """The Earth's heliocentric positions at the nodes (shared by every body given by elements in a semester)."""
    return orbits.earth_heliocentric(np.frombuffer(tt, dtype=float))


def _tt_minus_utc_days(mjd: float) -> float:
    """TT − UTC (days) at UTC ``mjd``: leap seconds (ERFA ``dat``) + 32.184 s; one value serves a semester."""
    import erfa

    year, month, day, fraction = erfa.jd2cal(_MJD_TO_JD, mjd)
    return (float(erfa.dat(int(year), int(month), int(day), float(fraction))) + 32.184) / 86400.0
