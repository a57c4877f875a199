"""What a moving target adds to the checks: its magnitude along the semester, its rate against the mount, trailing.

:func:`assess_motion` runs after the sky checks of a solar-system target (:mod:`feasibility.engine.tracks`) and
gives the ``motion`` finding, the request and instrument the exposure checks should use, and the track's series:

- magnitude: a body with a brightness law (H, G or M1, K1) or a table with magnitudes is as bright as its
  ephemeris says night by night; the S/N uses the median over the nights the target is usable, weighted by their
  usable hours (observable, then visible hours when none are usable), and the finding gives the range on those nights;
- rate: the body's geocentric motion on the sky at each local midnight (arcseconds per hour) against the
  telescope's ``max_tracking_rate_arcsec_per_hour``: the usable hours on nights above it are lost;
- trailing: a mount that follows the stars only (``sidereal_tracking_only``) lets the body trail by rate × exposure;
  single exposures are capped where the trail reaches :data:`TRAIL_FRACTION` of the seeing FWHM (common practice:
  a trail under half the image width barely lengthens it), and the exposure plan splits by that cap.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import Instrument, ObservationRequest, Observatory
from feasibility.engine import wording as w
from feasibility.engine.conditions import wavelength_for
from feasibility.engine.exposure_checks import seeing_fwhm_arcsec
from feasibility.engine.positions import radec_from_vector
from feasibility.engine.sky_findings import SUN_MARGIN_DEG, level_for_hours
from feasibility.results import Finding, Level

if TYPE_CHECKING:
    from feasibility.engine.sky_checks import SkyMeasure
    from feasibility.engine.tracks import Track

__all__ = ["NEAR_SUN_AU", "TRAIL_FRACTION", "MotionOutcome", "assess_motion", "sun_remark"]

#: A trail longer than this fraction of the seeing FWHM in one exposure lengthens the image (common practice).
TRAIL_FRACTION = 0.5
#: A body closer to the Sun than this (au) during the semester gets the plain near-Sun warning when it also stands
#: near the telescope's Sun limit in the sky (comets near perihelion).
NEAR_SUN_AU = 1.0


@dataclass
class MotionOutcome:
    """The ``motion`` finding, the request and instrument for the exposure checks, and the track per night."""

    finding: Finding
    request: ObservationRequest
    instrument: Instrument
    series: dict[str, Any] = field(default_factory=dict)


def sun_remark(track: Track, midnight_mjd: NDArray[np.float64], night_names: list[str], cos_sun: NDArray[np.float64], limit_deg: float) -> tuple[str, bool]:
    """The sun-safety finding's remark on a moving target, and whether it is a warning (a body near the Sun)."""
    text = "The body's distance from the Sun in the sky was followed night by night along its own ephemeris."
    if track.sun_distance_au is None:
        return text, False
    r = np.interp(midnight_mjd, track.mjd, track.sun_distance_au)
    closest = int(np.argmin(r))
    elongation = math.degrees(math.acos(max(-1.0, min(1.0, float(cos_sun[closest])))))
    if float(r[closest]) >= NEAR_SUN_AU:
        return text, False
    warns = elongation < limit_deg + SUN_MARGIN_DEG
    text += (
        f" {'WARNING: ' if warns else ''}it passes {float(r[closest]):.2f} au from the Sun this semester (closest at the "
        f"night of {night_names[closest]}), standing {w.degrees(elongation)} from the Sun in the sky then: a comet near "
        "perihelion brightens and changes fast, and its glare and tail reach towards the Sun: ask the observatory's "
        "staff before planning it."
    )
    return text, warns


def assess_motion(request: ObservationRequest, observatory: Observatory, instrument: Instrument, sky: SkyMeasure) -> MotionOutcome:
    """The motion finding of a moving target and what the exposure checks should use (module docstring)."""
    track = sky.track
    midnights = sky.midnight_mjd
    assert track is not None and midnights is not None
    telescope = observatory.telescope
    rate = track.rate_arcsec_per_hour(midnights)
    weights = _night_weights(sky)
    nights = weights > 0.0
    in_play = rate[nights] if nights.any() else rate
    parts: list[str] = []
    figures: dict[str, Any] = {
        "target_kind": track.kind,
        "rate_min_arcsec_per_hour": round(float(in_play.min()), 2),
        "rate_max_arcsec_per_hour": round(float(in_play.max()), 2),
        "max_tracking_rate_arcsec_per_hour": telescope.max_tracking_rate_arcsec_per_hour,
        "sidereal_tracking_only": telescope.sidereal_tracking_only,
    }
    which = "usable" if sky.total_usable > 0 else ("observable" if sky.total_observable > 0 else ("visible" if sky.total_visible > 0 else "all"))
    where = "over the semester (never visible)" if which == "all" else f"on the {which} nights"
    parts.append(f"Moves {w.rate(float(in_play.min()))} to {w.rate(float(in_play.max()))} on the sky {where}")

    # Magnitude along the semester.
    updated = request
    magnitudes = track.magnitude_at(midnights)
    if magnitudes is not None:
        band = track.magnitude_band or request.brightness.band
        chosen = magnitudes[nights] if nights.any() else magnitudes
        used = _weighted_median(magnitudes, weights) if nights.any() else float(np.median(magnitudes))
        figures.update(
            magnitude_used=round(used, 2),
            magnitude_band=band,
            magnitude_brightest=round(float(chosen.min()), 2),
            magnitude_faintest=round(float(chosen.max()), 2),
        )
        parts.append(
            f"its magnitude then runs {w.magnitude(float(chosen.min()))}-{w.magnitude(float(chosen.max()))} in {band}; "
            f"the signal-to-noise uses {w.magnitude(used)}, the median weighted by hours"
        )
        brightness = request.brightness.model_copy(update={"magnitude": used, "band": band} | ({"system": "vega"} if track.magnitude_band else {}))
        updated = request.model_copy(update={"brightness": brightness})
    else:
        parts.append(f"its brightness is the request's, {w.magnitude(request.brightness.magnitude)} in {request.brightness.band}, all semester")

    level = Level.FEASIBLE
    suggestion: str | None = None
    # The mount's tracking limit.
    limit = telescope.max_tracking_rate_arcsec_per_hour
    if limit is not None and not telescope.sidereal_tracking_only:
        beyond = rate > limit
        lost = float(sky.usable[beyond].sum())
        figures.update(nights_beyond_tracking_limit=int(np.count_nonzero(beyond & (sky.usable > 0))), hours_beyond_tracking_limit=round(lost, 2))
        if lost > 0.0:
            kept, kept_clear = sky.total_usable - lost, sky.clear_usable - sky.clear(sky.usable * beyond)
            level = level_for_hours(kept_clear, kept, request.hours_requested, sky.has_windows)
            level = Level.MARGINAL if level is Level.FEASIBLE else level
            parts.append(
                f"faster than the mount's {w.rate(limit)} limit on {figures['nights_beyond_tracking_limit']} usable nights: "
                f"{w.hours(lost)} of the {w.hours(sky.total_usable)} usable are lost ({w.hours(kept)} left)"
            )
            suggestion = "Observe on the nights the body moves slower than the mount's limit, or ask the observatory about faster tracking."
        else:
            parts.append(f"within the mount's {w.rate(limit)} tracking limit")

    # Trailing on a mount that follows the stars only.
    updated_instrument = instrument
    if telescope.sidereal_tracking_only:
        wavelength = wavelength_for(request, instrument) or 500.0
        fwhm = seeing_fwhm_arcsec(observatory.climate.median_seeing_arcsec, sky.conditions.airmass_median, wavelength)
        fastest = float(in_play.max()) / 3600.0  # arcsec per second
        cap = TRAIL_FRACTION * fwhm / fastest if fastest > 0 else math.inf
        figures.update(seeing_arcsec=round(fwhm, 3), exposure_time_s_trail_limit=round(cap, 3) if math.isfinite(cap) else None)
        if cap < instrument.min_exposure_s:
            level = Level.INFEASIBLE
            trail = fastest * instrument.min_exposure_s
            parts.append(
                f"the mount follows the stars only: even the shortest exposure, {w.seconds(instrument.min_exposure_s)}, trails "
                f"{w.arcsec(trail)} > {w.ratio(TRAIL_FRACTION)} the {w.arcsec(fwhm)} seeing ({w.arcsec(TRAIL_FRACTION * fwhm)})"
            )
            suggestion = "Use a telescope that can track the body, or accept trailed images."
        elif cap < instrument.max_exposure_s:
            updated_instrument = instrument.model_copy(update={"max_exposure_s": cap})
            parts.append(
                f"the mount follows the stars only: single exposures are kept to {w.seconds(cap)}, when the trail "
                f"({w.rate(fastest * 3600.0)}) reaches {w.ratio(TRAIL_FRACTION)} the {w.arcsec(fwhm)} seeing; "
                "the exposure plan splits by that length"
            )
        else:
            parts.append(f"the mount follows the stars only, but the trail stays under {w.ratio(TRAIL_FRACTION)} the seeing in the longest exposure")

    # A table that does not cover the semester.
    known = track.known_at(midnights)
    if not known.all():
        figures["nights_outside_table"] = int(np.count_nonzero(~known))
        parts.append(f"the ephemeris table leaves out {w.count(int(np.count_nonzero(~known)), 'night')} of the semester, which do not count")
        if sky.total_visible <= 0.0 and known.sum() == 0:
            level = Level.INFEASIBLE
    if track.sun_distance_au is not None and track.earth_distance_au is not None:
        figures.update(
            sun_distance_min_au=round(float(np.interp(midnights, track.mjd, track.sun_distance_au).min()), 4),
            earth_distance_min_au=round(float(np.interp(midnights, track.mjd, track.earth_distance_au).min()), 4),
        )

    message = "; ".join(parts) + "."
    finding = Finding(
        check="motion",
        level=level,
        message=message,
        figures=figures,
        suggestion=suggestion,
        method=(
            f"{track.method}; rate: the geocentric motion between ephemeris nodes at each local midnight; trailing: "
            f"rate × exposure under {TRAIL_FRACTION:g} × the seeing FWHM (common practice)"
        ),
    )
    return MotionOutcome(finding, updated, updated_instrument, {"track": _track_series(track, midnights, rate, magnitudes)})


def _night_weights(sky: SkyMeasure) -> NDArray[np.float64]:
    """Per night, the hours that count: usable, else observable, else visible, else none."""
    for hours in (sky.usable, sky.observable, sky.visible):
        if hours.any():
            return np.asarray(hours, dtype=float)
    return np.zeros_like(sky.usable, dtype=float)


def _weighted_median(values: NDArray[np.float64], weights: NDArray[np.float64]) -> float:
    """The value below which half the weight lies."""
    order = np.argsort(values)
    cumulative = np.cumsum(weights[order])
    return float(values[order][np.searchsorted(cumulative, cumulative[-1] / 2.0)])


def _track_series(track: Track, midnights: NDArray[np.float64], rate: NDArray[np.float64], magnitudes: NDArray[np.float64] | None) -> dict[str, Any]:
    """Per night at local midnight: right ascension, declination (geocentric), rate and magnitude, for the page's plots."""
    ra, dec = radec_from_vector(track.geocentric_directions(midnights))
    known = track.known_at(midnights)
    return {
        "ra_deg": _rounded_where(ra, 3, known),
        "dec_deg": _rounded_where(dec, 3, known),
        "rate_arcsec_per_hour": np.round(rate, 2).tolist(),
        "magnitude": None if magnitudes is None else np.round(magnitudes, 2).tolist(),
        "magnitude_band": track.magnitude_band,
    }


def _rounded_where(values: NDArray[np.float64], digits: int, keep: NDArray[np.bool_]) -> list[float | None]:
    """``round(x, digits)`` of each value (None where ``keep`` is False), the same numbers as Python's ``round``.

    Scaled, rounded to an integer and scaled back as NumPy does, which is Python's answer (the decimal nearest the
    exact binary value) unless the scaled value lies within a hair of a half: those few go through ``round`` itself.
    A tenth of the cost of ``round`` over a semester's nights.
    """
    scale = 10.0**digits
    scaled = values * scale
    rounded = np.rint(scaled) / scale
    with np.errstate(invalid="ignore"):
        plain = np.abs(scaled - np.floor(scaled) - 0.5) > 1e-6
    for i in np.flatnonzero(~plain):  # near a half, or not finite
        rounded[i] = round(float(values[i]), digits)
    out: list[float | None] = rounded.tolist()
    for i in np.flatnonzero(~keep):
        out[i] = None
    return out
