"""The semester sky grid: everything about the sky at a site that does not depend on the target.

For a site and a run of nights the grid holds, once, at instants sampled every
``step_minutes`` while the Sun is below the horizon:

- the rotation from ICRS directions to the local horizontal frame (east, north,
  up), so that any target's altitude and azimuth are a matrix–vector product;
- the Sun's altitude, the Moon's topocentric direction and altitude, its phase
  angle and illuminated fraction;
- per night (named by the local date on which it begins; local solar midnight is
  taken from the site's longitude): the Sun's direction at midnight, the Moon's
  illuminated fraction at midnight and the night's length for each twilight.

How it is computed (plain ERFA and NumPy; astropy only converts the time scales):
the celestial-to-intermediate matrix (IAU 2006/2000A, ``erfa.c2i06a``) once per
night at local midnight, the Earth rotation angle (``erfa.era00``, from UT1 taken
from astropy's IERS table) at every instant, then the site's east-north-up
rotation. Polar motion (< 0.5″), annual and diurnal aberration (< 21″) and light
deflection are left out and refraction is not applied (astropy's ``AltAz`` with
``pressure=0``): the tests hold the grid to astropy's ``SkyCoord.transform_to(AltAz)``
within 0.05° over whole semesters (in practice about 0.006°). The Sun comes from
``erfa.epv00`` (evaluated hourly and interpolated) and the Moon from ``erfa.moon98``
(Meeus' algorithm, as astropy's built-in ephemeris), both made topocentric with
the site's position.

:meth:`SkyGrid.samples` gives the instants below one twilight's Sun altitude as
contiguous arrays (:class:`NightSamples`), the form the per-request hot path in
:mod:`feasibility.engine.sky_checks` works on.

Grids are cached in memory (least recently used, per process) and on disk as
``.npz`` under ``$FEASIBILITY_CACHE_DIR`` (default ``~/.cache/feasibility``),
written to a temporary file and renamed so concurrent workers never read half a file.
"""

from __future__ import annotations

import functools
import hashlib
import logging
import os
import tempfile
from dataclasses import dataclass, field
from datetime import date, timedelta
from importlib import metadata
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from feasibility.engine.moonsky import moon_term
from feasibility.engine.positions import enu_matrix, illuminated_fraction, phase_angle_deg, radec_from_vector, rot3
from feasibility.offline import configure_offline, log_astropy_warnings, note_beyond_iers_table
from feasibility.settings import cache_dir as settings_cache_dir

__all__ = [
    "DEFAULT_STEP_MINUTES",
    "GRID_VERSION",
    "MOON_UP_ALTITUDE_DEG",
    "NightSamples",
    "SkyGrid",
    "build_sky_grid",
    "cache_dir",
    "sky_grid",
    "sun_radec_midnight",
]

log = logging.getLogger(__name__)

#: Bumped whenever the grid's content or layout changes; part of the disk cache key.
GRID_VERSION = 1

#: Sampling interval of the grid (minutes).
DEFAULT_STEP_MINUTES = 5.0

#: The Moon counts as up when its centre is above the geometric horizon.
MOON_UP_ALTITUDE_DEG = 0.0

#: Instants are kept while the Sun's centre is below this altitude (sunset, geometric).
_KEEP_SUN_BELOW_DEG = 0.0

_MJD_J2000_JD = 2400000.5

Array = NDArray[np.float64]


@dataclass(frozen=True)
class NightSamples:
    """The grid's instants with the Sun below one altitude, as contiguous arrays for the hot path.

    ``up``, ``east`` and ``north`` (each ``(n, 3)``) are the rows of the
    ICRS→horizontal rotation: ``up @ v`` is the sine of a target's altitude;
    ``moon @ v`` the cosine of its distance from the Moon. The instants are in
    time order, so each night is one slice: ``night_starts[i]:night_starts[i + 1]``.
    """

    sun_limit_deg: float
    mjd: Array
    night_index: NDArray[np.int32]
    night_starts: NDArray[np.intp]
    """Position of each night's first instant, and the number of instants at the end (``n_nights + 1`` values)."""
    hours_from_midnight: Array
    east: Array
    north: Array
    up: Array
    moon: Array
    sun_alt_deg: Array
    moon_alt_deg: Array
    moon_illumination: Array
    moon_phase_angle_deg: Array
    moon_up: NDArray[np.bool_]
    _moon_terms: dict[float, Array] = field(default_factory=dict, repr=False, compare=False)
    _moon_within: dict[float, NDArray[np.bool_]] = field(default_factory=dict, repr=False, compare=False)
    _on_nights: dict[bytes, NDArray[np.bool_]] = field(default_factory=dict, repr=False, compare=False)

    @property
    def size(self) -> int:
        return int(self.mjd.size)

    def moon_term(self, extinction: float) -> Array:
        """Per instant, the target-independent part of the moonlit sky (:func:`moonsky.moon_term`), cached per extinction."""
        term = self._moon_terms.get(extinction)
        if term is None:
            term = self._moon_terms[extinction] = moon_term(self.moon_phase_angle_deg, 90.0 - self.moon_alt_deg, extinction)
        return term

    def moon_down_or_within(self, illumination: float) -> NDArray[np.bool_]:
        """Per instant, whether the Moon is down or at most ``illumination`` illuminated (cached per value)."""
        key = float(illumination)
        allowed = self._moon_within.get(key)
        if allowed is None:
            allowed = self._moon_within[key] = ~(self.moon_up & (self.moon_illumination > key))
        return allowed

    def per_night(self, chosen: NDArray[np.bool_]) -> NDArray[np.int32]:
        """How many of the ``chosen`` instants (a mask over the instants) fall in each night.

        One ``np.add.reduceat`` over the nights' slices (32-bit sums: a third faster than
        64-bit ones, and a night holds at most 2,880 instants); a night without instants
        (no true night at high latitude in summer) is left out of the slices and counts 0.
        """
        sampled = self._sampled_nights
        if sampled.size == self.night_starts.size - 1:  # the usual case: every night has instants
            return np.add.reduceat(chosen.view(np.uint8), self.night_starts[:-1], dtype=np.int32)
        counts = np.zeros(self.night_starts.size - 1, dtype=np.int32)
        if sampled.size:
            counts[sampled] = np.add.reduceat(chosen.view(np.uint8), self.night_starts[sampled], dtype=np.int32)
        return counts

    def on_nights(self, nights: NDArray[np.bool_]) -> NDArray[np.bool_]:
        """Spread a per-night mask over the instants of each night (read-only; cached per mask, as the same
        schedule's nights come back for every request on an instrument)."""
        key = np.asarray(nights, dtype=bool).tobytes()
        spread = self._on_nights.get(key)
        if spread is None:
            spread = np.repeat(nights, np.diff(self.night_starts))
            spread.setflags(write=False)
            if len(self._on_nights) >= 64:
                self._on_nights.clear()
            self._on_nights[key] = spread
        return spread

    @functools.cached_property
    def _sampled_nights(self) -> NDArray[np.intp]:
        """The nights with at least one instant."""
        return np.flatnonzero(np.diff(self.night_starts) > 0)


@dataclass
class SkyGrid:
    """The sky at one site over a run of nights (see the module docstring)."""

    latitude_deg: float
    longitude_deg: float
    elevation_m: float
    first_night: date
    last_night: date
    step_minutes: float
    midnight_mjd: Array
    """UTC MJD of local mean solar midnight of each night."""
    mjd: Array
    night_index: NDArray[np.int32]
    basis: Array
    """``(n, 4, 3)``: the east, north and up rows of the ICRS→horizontal rotation, and the Moon's unit vector."""
    sun_alt_deg: Array
    moon_alt_deg: Array
    moon_illumination: Array
    moon_phase_angle_deg: Array
    sun_vector_midnight: Array
    """Geocentric unit vector of the Sun at each night's local midnight (ICRS axes)."""
    moon_illumination_midnight: Array
    beyond_iers_table: bool = False
    _views: dict[float, NightSamples] = field(default_factory=dict, repr=False, compare=False)
    _night_hours: dict[float, Array] = field(default_factory=dict, repr=False, compare=False)
    _curves: dict[int, dict[str, object]] = field(default_factory=dict, repr=False, compare=False)

    @property
    def step_hours(self) -> np.float64:
        """Hours per sample, a NumPy float so that counts x step_hours is typed float64."""
        return np.float64(self.step_minutes / 60.0)

    @property
    def n_nights(self) -> int:
        return int(self.midnight_mjd.size)

    @functools.cached_property
    def nights(self) -> list[date]:
        """Each night's name: the local date on which it begins."""
        return [self.first_night + timedelta(days=i) for i in range(self.n_nights)]

    @functools.cached_property
    def night_names(self) -> list[str]:
        """Each night's name as an ISO date."""
        return [night.isoformat() for night in self.nights]

    @functools.cached_property
    def moon_illumination_series(self) -> list[float]:
        """The Moon's illuminated fraction at each night's midnight, rounded to 0.001, as a list for results."""
        return np.round(self.moon_illumination_midnight, 3).tolist()

    @functools.cached_property
    def night_months(self) -> NDArray[np.int64]:
        """Calendar month (1–12) of each night's starting date."""
        return np.array([night.month for night in self.nights])

    def samples(self, sun_limit_deg: float) -> NightSamples:
        """The instants with the Sun's centre below ``sun_limit_deg`` (e.g. −18 for astronomical night)."""
        key = float(sun_limit_deg)
        view = self._views.get(key)
        if view is None:
            keep = self.sun_alt_deg < key
            mjd = np.ascontiguousarray(self.mjd[keep])
            nights = np.ascontiguousarray(self.night_index[keep])
            view = NightSamples(
                sun_limit_deg=key,
                mjd=mjd,
                night_index=nights,
                night_starts=np.searchsorted(nights, np.arange(self.n_nights + 1)),
                hours_from_midnight=(mjd - self.midnight_mjd[nights]) * 24.0,
                east=np.ascontiguousarray(self.basis[keep, 0, :]),
                north=np.ascontiguousarray(self.basis[keep, 1, :]),
                up=np.ascontiguousarray(self.basis[keep, 2, :]),
                moon=np.ascontiguousarray(self.basis[keep, 3, :]),
                sun_alt_deg=np.ascontiguousarray(self.sun_alt_deg[keep]),
                moon_alt_deg=np.ascontiguousarray(self.moon_alt_deg[keep]),
                moon_illumination=np.ascontiguousarray(self.moon_illumination[keep]),
                moon_phase_angle_deg=np.ascontiguousarray(self.moon_phase_angle_deg[keep]),
                moon_up=np.ascontiguousarray(self.moon_alt_deg[keep] > MOON_UP_ALTITUDE_DEG),
            )
            self._views[key] = view
        return view

    def night_hours(self, sun_limit_deg: float) -> Array:
        """Hours per night with the Sun's centre below ``sun_limit_deg`` (computed once per limit)."""
        key = float(sun_limit_deg)
        hours = self._night_hours.get(key)
        if hours is None:
            view = self.samples(key)
            hours = self._night_hours[key] = np.bincount(view.night_index, minlength=self.n_nights) * self.step_hours
        return hours

    def night_sky_curve(self, night: int) -> dict[str, object]:
        """One night's instants with the Sun down: night name, hours from midnight, Moon and Sun altitudes (for plots)."""
        curve = self._curves.get(night)
        if curve is None:
            view = self.samples(0.0)
            lo, hi = view.night_starts[night], view.night_starts[night + 1]
            curve = self._curves[night] = {
                "night": self.night_names[night],
                "hours_from_midnight": np.round(view.hours_from_midnight[lo:hi], 3).tolist(),
                "moon_alt_deg": np.round(view.moon_alt_deg[lo:hi], 2).tolist(),
                "sun_alt_deg": np.round(view.sun_alt_deg[lo:hi], 2).tolist(),
            }
        return curve


def sky_grid(
    latitude_deg: float,
    longitude_deg: float,
    elevation_m: float,
    first_night: date,
    last_night: date,
    step_minutes: float = DEFAULT_STEP_MINUTES,
) -> SkyGrid:
    """The sky grid for a site and nights: from this process's memory, else from disk, else computed.

    The in-process cache is keyed by the site, the nights, the step and the value of
    ``FEASIBILITY_CACHE_DIR``; the disk cache directory (:func:`cache_dir`) is
    resolved only on a miss, which keeps a hit to a dictionary look-up.
    """
    return _memory_cached(
        round(float(latitude_deg), 6),
        round(float(longitude_deg), 6),
        round(float(elevation_m), 1),
        first_night,
        last_night,
        float(step_minutes),
        str(cache_dir()),
    )


def cache_dir() -> Path:
    """Where grids are cached on disk: the settings' ``cache_dir`` (``$FEASIBILITY_CACHE_DIR``) or ``~/.cache/feasibility``."""
    return settings_cache_dir()


@functools.lru_cache(maxsize=8)  # a grid with its views takes roughly 10-20 MB
def _memory_cached(
    latitude_deg: float,
    longitude_deg: float,
    elevation_m: float,
    first_night: date,
    last_night: date,
    step_minutes: float,
    configured_dir: str,
) -> SkyGrid:
    """The grid from disk or computed, cached in ``configured_dir`` (which also keys this cache)."""
    args = (latitude_deg, longitude_deg, elevation_m, first_night, last_night, step_minutes)
    path = Path(configured_dir) / f"skygrid-v{GRID_VERSION}-{_cache_key(*args)}.npz"
    grid = _read(path, args)
    if grid is None:
        grid = build_sky_grid(*args)
        _write(path, grid)
    return grid


def build_sky_grid(
    latitude_deg: float,
    longitude_deg: float,
    elevation_m: float,
    first_night: date,
    last_night: date,
    step_minutes: float = DEFAULT_STEP_MINUTES,
) -> SkyGrid:
    """Compute the sky grid (no caching); see the module docstring for the method."""
    import erfa

    configure_offline()
    if not 0.5 <= step_minutes <= 60.0:
        raise ValueError(f"step_minutes must lie between 0.5 and 60, got {step_minutes}")
    n_nights = (last_night - first_night).days + 1
    if n_nights < 1:
        raise ValueError("last_night is before first_night")
    per_night = int(round(1440.0 / step_minutes))
    step_days = step_minutes / 1440.0

    first_mjd = _mjd(first_night)
    midnight_mjd = first_mjd + np.arange(n_nights, dtype=np.float64) + 1.0 - longitude_deg / 360.0
    offsets = -0.5 + (np.arange(per_night) + 0.5) * step_days  # bin centres, local noon to noon
    mjd = (midnight_mjd[:, None] + offsets[None, :]).ravel()
    night_index = np.repeat(np.arange(n_nights, dtype=np.int32), per_night)

    tt1, tt2, ut1, ut2, tt1_mid, tt2_mid = _time_scales(mjd, midnight_mjd)
    beyond = note_beyond_iers_table(float(mjd[-1]))

    # ICRS (GCRS axes) -> terrestrial -> local (east, north, up).
    c2i = erfa.c2i06a(tt1_mid, tt2_mid)  # per night
    celestial_to_terrestrial = np.einsum("nij,njk->nik", rot3(erfa.era00(ut1, ut2)), c2i[night_index])
    to_local = np.einsum("ij,njk->nik", enu_matrix(latitude_deg, longitude_deg), celestial_to_terrestrial)

    site_itrs = erfa.gd2gc(1, np.radians(longitude_deg), np.radians(latitude_deg), elevation_m) / erfa.DAU
    site_gcrs = np.einsum("nji,j->ni", celestial_to_terrestrial, site_itrs)  # transpose applied

    sun = _sun_geocentric(tt1 + tt2) - site_gcrs
    moon = erfa.moon98(tt1, tt2)["p"] - site_gcrs

    sun_alt = _altitude(to_local, sun)
    keep = sun_alt < _KEEP_SUN_BELOW_DEG
    moon_unit = moon / np.linalg.norm(moon, axis=-1, keepdims=True)
    basis = np.concatenate([to_local, moon_unit[:, None, :]], axis=1)[keep]
    phase = phase_angle_deg(sun[keep], moon[keep])

    mid_earth, _ = erfa.epv00(tt1_mid, tt2_mid)
    sun_mid = -mid_earth["p"]
    moon_mid = erfa.moon98(tt1_mid, tt2_mid)["p"]

    return SkyGrid(
        latitude_deg=latitude_deg,
        longitude_deg=longitude_deg,
        elevation_m=elevation_m,
        first_night=first_night,
        last_night=last_night,
        step_minutes=step_minutes,
        midnight_mjd=midnight_mjd,
        mjd=mjd[keep],
        night_index=night_index[keep],
        basis=np.ascontiguousarray(basis),
        sun_alt_deg=sun_alt[keep],
        moon_alt_deg=_altitude(to_local[keep], moon[keep]),
        moon_illumination=illuminated_fraction(phase),
        moon_phase_angle_deg=phase,
        sun_vector_midnight=sun_mid / np.linalg.norm(sun_mid, axis=-1, keepdims=True),
        moon_illumination_midnight=illuminated_fraction(phase_angle_deg(sun_mid, moon_mid)),
        beyond_iers_table=beyond,
    )


def sun_radec_midnight(grid: SkyGrid) -> tuple[Array, Array]:
    """The Sun's right ascension and declination (degrees) at each night's local midnight."""
    return radec_from_vector(grid.sun_vector_midnight)


def _sun_geocentric(tt_jd: Array) -> Array:
    """The Sun's geocentric position (au, GCRS axes) from ``erfa.epv00``, evaluated hourly and interpolated.

    The Earth's orbit bends by 6e-8 rad in an hour, so linear interpolation between
    hourly positions costs nothing in accuracy and saves most of the time.
    """
    import erfa

    start, stop = float(tt_jd.min()), float(tt_jd.max())
    knots = np.arange(start, stop + 1.0 / 24.0, 1.0 / 24.0)
    earth, _ = erfa.epv00(knots, 0.0)
    position = -earth["p"]
    return np.stack([np.interp(tt_jd, knots, position[:, axis]) for axis in range(3)], axis=-1)


def _altitude(to_local: Array, position: Array) -> Array:
    up = np.einsum("nj,nj->n", to_local[:, 2, :], position)
    return np.degrees(np.arcsin(np.clip(up / np.linalg.norm(position, axis=-1), -1.0, 1.0)))


def _mjd(day: date) -> float:
    return float(day.toordinal() - date(1858, 11, 17).toordinal())


def _time_scales(mjd: Array, midnight_mjd: Array) -> tuple[Array, ...]:
    """TT and UT1 two-part Julian dates of UTC ``mjd`` (and TT of the midnights), through astropy's IERS table."""
    from astropy.time import Time

    with log_astropy_warnings():
        times = Time(np.full_like(mjd, _MJD_J2000_JD), mjd, format="jd", scale="utc")
        tt, ut1 = times.tt, times.ut1
        midnights = Time(np.full_like(midnight_mjd, _MJD_J2000_JD), midnight_mjd, format="jd", scale="utc").tt
    return tt.jd1, tt.jd2, ut1.jd1, ut1.jd2, midnights.jd1, midnights.jd2


_ARRAYS = (
    "midnight_mjd",
    "mjd",
    "night_index",
    "basis",
    "sun_alt_deg",
    "moon_alt_deg",
    "moon_illumination",
    "moon_phase_angle_deg",
    "sun_vector_midnight",
    "moon_illumination_midnight",
)


def _cache_key(*args: object) -> str:
    try:
        iers_data = metadata.version("astropy-iers-data")
    except metadata.PackageNotFoundError:  # pragma: no cover - always installed with astropy
        iers_data = "unknown"
    text = repr((GRID_VERSION, iers_data, *args))
    return hashlib.sha256(text.encode()).hexdigest()[:20]


def _read(path: Path, args: tuple[object, ...]) -> SkyGrid | None:
    if not path.is_file():
        return None
    try:
        with np.load(path, allow_pickle=False) as data:
            if str(data["key"]) != repr(args):
                return None
            arrays = {name: data[name] for name in _ARRAYS}
            beyond = bool(data["beyond_iers_table"])
    except (OSError, KeyError, ValueError) as exc:
        log.warning("ignoring unreadable sky grid cache %s: %s", path, exc)
        return None
    lat, lon, elev, first, last, step = args
    return SkyGrid(
        latitude_deg=float(lat),  # type: ignore[arg-type]
        longitude_deg=float(lon),  # type: ignore[arg-type]
        elevation_m=float(elev),  # type: ignore[arg-type]
        first_night=first,  # type: ignore[arg-type]
        last_night=last,  # type: ignore[arg-type]
        step_minutes=float(step),  # type: ignore[arg-type]
        beyond_iers_table=beyond,
        **arrays,
    )


def _write(path: Path, grid: SkyGrid) -> None:
    args = (grid.latitude_deg, grid.longitude_deg, grid.elevation_m, grid.first_night, grid.last_night, grid.step_minutes)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=path.stem, suffix=".tmp")
        try:
            with os.fdopen(handle, "wb") as stream:
                np.savez(
                    stream,
                    key=np.array(repr(args)),
                    beyond_iers_table=np.array(grid.beyond_iers_table),
                    **{name: getattr(grid, name) for name in _ARRAYS},
                )
            os.replace(temporary, path)
        except BaseException:
            Path(temporary).unlink(missing_ok=True)
            raise
    except OSError as exc:
        log.warning("could not cache the sky grid at %s: %s", path, exc)
