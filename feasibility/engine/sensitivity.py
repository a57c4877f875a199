"""Signal-to-noise, exposure plan and hours needed for one observation request.

:func:`assess_exposure` is what the orchestrator calls once the sky checks have
reduced the semester to :class:`~feasibility.engine.conditions.Conditions`. It
returns the findings of the checks ``sensitivity``, ``instrument``,
``atmosphere`` and ``image-quality``, the figures behind them, and an S/N
curve for plotting. This module measures (:func:`measure_exposure` returns an
:class:`ExposureMeasure` of numbers and flags);
:mod:`feasibility.engine.sensitivity_findings` words the findings from it.

Methods
-------
- Signal-to-noise: the CCD equation (Merline & Howell 1995) with the sky
  estimated from many pixels (n_B → ∞) and the digitisation noise neglected.
- Point sources in an imager: a circular aperture of radius 0.673 FWHM, the
  S/N-optimal radius for a Gaussian profile in the background-limited regime; a
  Gaussian profile of the delivered FWHM gives the encircled fraction (a Moffat
  profile's wings would lose a few per cent more).
- Extended sources (``kind: surface``): S/N per square arcsecond in an imager,
  per resolution element and arcsecond along the slit in a spectrograph.
- Slit spectra: per resolution element, whose width is the projected slit or
  the seeing-limited image, whichever is narrower, in pixels, never below the
  grating's sampling (a uniformly filled slit for surface brightness); the
  resolving power follows as R × (grating's pixels per element) / (element's
  pixels). Slit transmission of the Gaussian profile through the slit width;
  extraction over 1.346 FWHM along the slit.
- Conditions (see :mod:`feasibility.engine.conditions`): every figure is
  computed at the *typical* point (median airmass, sky and seeing over the
  usable instants) and at the *design* point (the observatory's design
  percentile, default 80, of each; the sky is the moonlit sky the request's
  Moon constraints allow). Seeing: the site's median or its percentile of a
  log-normal distribution (X^0.6, λ^-0.2, common practice) with the Airy FWHM
  in quadrature, or the request's image-quality limit when that is finer.
- Saturation at the worst case: the peak pixel (source in a Gaussian profile,
  plus sky and dark) at the 10th-percentile (best) seeing and airmass 1, with
  the design sky, stays under the detector's saturation level, the smaller of
  its linear range (``linearity_fraction`` × full well, default 0.8, common
  practice) and the converter's largest count ((2^bits − 1) × gain). Exposures
  are split by the instrument's longest exposure and by that safe length;
  overheads add readout per exposure and acquisition per visit.
- Levels (worded in :mod:`feasibility.engine.sensitivity_findings`): feasible
  when the design point meets the goal in the hours requested (marginal if it
  does so only at the bright end of the magnitude error); marginal when only
  the typical point does; infeasible when neither does.

References
----------
Merline, W. J. & Howell, S. B. 1995, Experimental Astronomy 6, 163.
Howell, S. B., *Handbook of CCD Astronomy*, Cambridge University Press.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from feasibility.documents import Detector, Instrument, ObservationRequest, Observatory
from feasibility.engine import photometry, spectral_curves
from feasibility.engine.airmass import altitude_for_airmass
from feasibility.engine.conditions import Conditions, wavelength_for
from feasibility.engine.exposure_checks import diffraction_fwhm_arcsec, seeing_fwhm_arcsec, seeing_percentile_arcsec
from feasibility.engine.moonsky import dark_sky_nl, mag_from_nanolamberts
from feasibility.engine.sensitivity_findings import exposure_findings, unchecked_finding
from feasibility.results import Finding

__all__ = [
    "APERTURE_RADIUS_FWHM",
    "BEST_SEEING_PERCENT",
    "SATURATION_FRACTION",
    "Alternatives",
    "ExposureAssessment",
    "ExposureMeasure",
    "ExposurePlan",
    "ObservingPoint",
    "PricedChange",
    "Signal",
    "assess_exposure",
    "ccd_snr",
    "central_pixel_fraction",
    "encircled_fraction_gaussian",
    "exposures_for_snr",
    "measure_exposure",
    "resolution_element_pixels",
    "saturation_level_e",
    "setup_gap",
    "slit_transmission_gaussian",
]

#: Aperture radius in FWHM: the S/N optimum for a Gaussian in the background-limited regime (1.585 σ).
APERTURE_RADIUS_FWHM = 0.673
#: Default fraction of full well the peak pixel may reach (common practice: stay in the linear range); the
#: detector's ``linearity_fraction`` overrides it.
SATURATION_FRACTION = 0.8
#: Seeing percentile of the saturation check's worst case (the best tenth of the site's seeing).
BEST_SEEING_PERCENT = 10.0
#: A moonlit design sky this much brighter than the Moon-free sky earns a dark-time suggestion (mag/arcsec²).
_MOON_SUGGESTION_MAG = 0.1
#: Points of the S/N curve.
CURVE_POINTS = 40

_CURVE_STEPS = np.linspace(0.0, 1.0, CURVE_POINTS)
_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))


@dataclass
class ExposureAssessment:
    """What :func:`assess_exposure` returns: findings, the figures behind them and series for plots."""

    findings: list[Finding]
    figures: dict[str, Any]
    series: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class Signal:
    """Electron rates of one request in its aperture (imaging) or resolution element (spectra)."""

    source_e_s: float
    sky_e_s_pix: float
    dark_e_s_pix: float
    read_noise_e: float
    n_pix: float
    peak_e_s_pix: float
    """Brightest pixel: source peak plus sky plus dark, for saturation."""
    fwhm_arcsec: float
    aperture_radius_arcsec: float | None
    enclosed_fraction: float
    slit_transmission: float | None
    element_pixels: float | None = None
    """Spectra: pixels across one resolution element (slit or seeing, never below the grating's sampling)."""
    resolving_power: float | None = None
    """Spectra: λ/Δλ of that resolution element."""

    def snr(self, total_s: np.ndarray | float, exposures: np.ndarray | float) -> np.ndarray | float:
        """S/N after ``exposures`` exposures summing to ``total_s`` seconds."""
        return ccd_snr(self.source_e_s, self.n_pix, self.sky_e_s_pix, self.dark_e_s_pix, self.read_noise_e, total_s, exposures)


@dataclass(frozen=True)
class ObservingPoint:
    """The conditions one S/N estimate is made at: typical, design or the saturation check's best case."""

    name: str
    percent: float
    """The percentile it stands for (50 for the typical point)."""
    airmass: float
    sky_mag_arcsec2: float
    zenith_seeing_arcsec: float
    """The site's seeing at this percentile, at the zenith and 500 nm."""


@dataclass(frozen=True)
class ExposurePlan:
    """Exposures, their length and the hours they take with overheads."""

    exposures: int
    exposure_time_s: float
    hours: float
    visits: int
    snr: float


@dataclass(frozen=True)
class PricedChange:
    """One change to a request that misses its goal, priced at the design point."""

    value: float
    """The changed setting: an airmass limit, or the Moon-free sky in mag/arcsec²."""
    hours: float
    """Hours the goal needs with the change."""
    snr: float
    """S/N in the hours requested with the change."""


@dataclass(frozen=True)
class Alternatives:
    """The changes priced for an S/N goal the design point misses (None where one does not apply)."""

    airmass_limit: PricedChange | None
    """A tighter airmass limit: the typical airmass rounded up to 0.1 (an upper bound on the hours)."""
    moon_free_sky: PricedChange | None
    """Dark time with the Moon down, when moonlight brightens the design sky noticeably."""


@dataclass(frozen=True)
class ExposureMeasure:
    """What :func:`measure_exposure` finds for one request: the points, signals, plans and saturation figures."""

    wavelength: float
    observed_band: str
    sky_band: str
    hours_usable: float
    typical: ObservingPoint
    design: ObservingPoint
    best: ObservingPoint
    """The saturation check's worst case: the best seeing at airmass 1 under the design sky."""
    signal: Signal
    """At the design point."""
    typical_signal: Signal
    peak_signal: Signal
    """At the best point, for saturation."""
    plan: ExposurePlan
    """Exposures reaching the goal at the design point."""
    typical_plan: ExposurePlan
    budget: ExposurePlan
    """What the hours requested give at the design point."""
    typical_budget: ExposurePlan
    level_e: float
    """The detector's saturation level (:func:`saturation_level_e`)."""
    safe: float
    """Seconds until the peak pixel reaches the saturation level at the best point."""
    longest: float
    """The longest single exposure the plans use."""
    saturated: bool
    """Even the instrument's shortest exposure saturates (the plans then use it anyway)."""
    dimming_mag: float | None
    """When saturated: the magnitudes of light to lose for the shortest exposure to be safe."""
    usable_budget: ExposurePlan | None
    """What the semester's usable hours give at the typical point, when even it needs more (else None)."""
    faint_hours: float | None
    """Hours needed at the design point at the faint end of the magnitude error (None without an error)."""
    alternatives: Alternatives | None
    """Changes priced when the design point misses the goal in the hours requested (else None)."""

    @functools.cached_property
    def point_figures(self) -> dict[str, Any]:
        """The conditions each point was computed at (worked out once: the result's figures and the sensitivity
        finding's both carry them; each spreads them into its own dict)."""
        figures: dict[str, Any] = {"design_percentile": self.design.percent}
        for suffix, point, signal in (("design", self.design, self.signal), ("typical", self.typical, self.typical_signal)):
            figures[f"airmass_{suffix}"] = _round(point.airmass, 4)
            figures[f"sky_mag_arcsec2_{suffix}"] = _round(point.sky_mag_arcsec2, 4)
            figures[f"seeing_{suffix}_arcsec"] = _round(signal.fwhm_arcsec, 3)
        return figures

    def figures(self, request: ObservationRequest) -> dict[str, Any]:
        """The exposure figures of the request's result (the keys without a suffix are the design point's)."""
        signal, plan = self.signal, self.plan
        return {
            "hours_needed": _round(plan.hours, 4),
            "snr_expected": _round(self.budget.snr, 3),
            "hours_needed_typical": _round(self.typical_plan.hours, 4),
            "snr_expected_typical": _round(self.typical_budget.snr, 3),
            "snr_goal": request.goal.snr,
            **self.point_figures,
            "source_rate_e_s": _round(signal.source_e_s, 5),
            "sky_rate_e_s_pix": _round(signal.sky_e_s_pix, 5),
            "dark_e_s_pix": signal.dark_e_s_pix,
            "read_noise_e": signal.read_noise_e,
            "pixels": _round(signal.n_pix, 3),
            "exposure_time_s": _round(plan.exposure_time_s, 3),
            "exposures": plan.exposures,
            "visits": plan.visits,
            "exposure_time_s_max": _round(self.longest, 3),
            "exposure_time_s_safe": _round(self.safe, 4),
            "seeing_arcsec": _round(signal.fwhm_arcsec, 3),
            "airmass": _round(self.design.airmass, 3),
            "wavelength_nm": self.wavelength,
            "aperture_radius_arcsec": _round(signal.aperture_radius_arcsec, 3),
            "enclosed_fraction": _round(signal.enclosed_fraction, 4),
            "slit_loss": None if signal.slit_transmission is None else _round(1.0 - signal.slit_transmission, 4),
            "resolution_element_pixels": _round(signal.element_pixels, 4),
            "resolving_power": _round(signal.resolving_power, 4),
            "resolving_power_typical": _round(self.typical_signal.resolving_power, 4),
        }

    def instrument_figures(self, detector: Detector) -> dict[str, Any]:
        """The instrument finding's figures: saturation and, for spectra, the resolution element."""
        return {
            "saturation_time_s": _round(self.safe, 4),
            "peak_e_s_pix": _round(self.peak_signal.peak_e_s_pix, 4),
            "saturation_seeing_arcsec": _round(self.peak_signal.fwhm_arcsec, 3),
            "saturation_level_e": _round(self.level_e, 6),
            "full_well_e": detector.full_well_e,
            "adc_max_adu": 2**detector.adc_bits - 1,
            "linearity_fraction": detector.linearity_fraction,
            "exposure_time_s_max": _round(self.longest, 3),
            "resolution_element_pixels": _round(self.signal.element_pixels, 4),
            "resolving_power": _round(self.signal.resolving_power, 4),
            "resolving_power_typical": _round(self.typical_signal.resolving_power, 4),
        }

    def sensitivity_figures(self, request: ObservationRequest) -> dict[str, Any]:
        """The sensitivity finding's figures: hours and S/N at both points."""
        faint = self.faint_hours
        return {
            "hours_needed": _round(self.plan.hours, 4),
            "hours_needed_typical": _round(self.typical_plan.hours, 4),
            "hours_requested": request.hours_requested,
            "snr_expected": _round(self.budget.snr, 3),
            "snr_expected_typical": _round(self.typical_budget.snr, 3),
            "snr_goal": request.goal.snr,
            "exposures": self.plan.exposures,
            "exposure_time_s": _round(self.plan.exposure_time_s, 3),
            "exposures_in_hours_requested": self.budget.exposures,
            "exposure_time_s_in_hours_requested": _round(self.budget.exposure_time_s, 6),
            "hours_needed_faint": _round(faint, 4) if faint is not None else None,
            **self.point_figures,
        }


def assess_exposure(
    request: ObservationRequest, observatory: Observatory, instrument: Instrument, conditions: Conditions, *, series: bool = True
) -> ExposureAssessment:
    """Findings, figures and S/N curve of ``request`` observed with ``instrument`` under ``conditions``
    (without the curve, a plot series, when ``series`` is False).

    Measures (:func:`measure_exposure`), then words the findings
    (:mod:`feasibility.engine.sensitivity_findings`). Never raises for a setup
    the instrument lacks: that gives an ``unchecked`` instrument finding.
    """
    wavelength = wavelength_for(request, instrument)
    gap = setup_gap(request, instrument)
    if wavelength is None or gap:
        return ExposureAssessment([unchecked_finding(request, instrument, gap)], {"hours_needed": None, "snr_expected": None})
    measure = measure_exposure(request, observatory, instrument, conditions, wavelength)
    return ExposureAssessment(
        exposure_findings(request, observatory, instrument, measure),
        measure.figures(request),
        {"snr_curve": _snr_curve(request, measure.signal, measure.plan, measure.budget, measure.longest)} if series else {},
    )


def setup_gap(request: ObservationRequest, instrument: Instrument) -> str | None:
    """What the setup lacks for the instrument: ``filter``, ``grating`` or ``slit``; None when it can be evaluated."""
    setup = request.setup
    if instrument.kind == "imager":
        return "filter" if instrument.filter_named(setup.filter or "") is None else None
    if instrument.grating_named(setup.grating or "") is None:
        return "grating"
    if setup.slit_arcsec is None:
        return "slit"
    return None


def measure_exposure(
    request: ObservationRequest, observatory: Observatory, instrument: Instrument, conditions: Conditions, wavelength: float
) -> ExposureMeasure:
    """Signals, exposure plans and saturation of ``request`` at the typical, design and best points.

    Every S/N figure is computed at the typical and at the design conditions
    (module docstring). The setup must be one the instrument has (:func:`setup_gap`).
    """
    climate = observatory.climate
    typical, design = _points(observatory, conditions)
    magnitude = request.brightness.magnitude
    optics = _optics(request, observatory, instrument, conditions, wavelength)  # shared by every point below
    signal = _signal(request, observatory, instrument, wavelength, design, magnitude, optics)
    typical_signal = _signal(request, observatory, instrument, wavelength, typical, magnitude, optics)

    # Saturation at the worst case: the best tenth of the seeing at the zenith, over the design sky.
    best = ObservingPoint(
        "best",
        BEST_SEEING_PERCENT,
        1.0,
        design.sky_mag_arcsec2,
        seeing_percentile_arcsec(climate.median_seeing_arcsec, BEST_SEEING_PERCENT),
    )
    peak_signal = _signal(request, observatory, instrument, wavelength, best, magnitude, optics)
    level_e = saturation_level_e(instrument.detector)
    safe = level_e / peak_signal.peak_e_s_pix
    longest = min(instrument.max_exposure_s, safe)
    saturated = longest < instrument.min_exposure_s
    dimming = None
    if saturated:
        dimming = 2.5 * math.log10(instrument.min_exposure_s / safe)
        longest = instrument.min_exposure_s

    plan = _plan_for_goal(request, instrument, signal, longest)
    typical_plan = _plan_for_goal(request, instrument, typical_signal, longest)
    usable_budget = None
    if conditions.hours_usable > 0 and typical_plan.hours > conditions.hours_usable:
        usable_budget = _plan_for_hours(conditions.hours_usable, instrument, typical_signal, longest)
    faint_hours = None
    if request.brightness.error:
        faint_signal = _signal(request, observatory, instrument, wavelength, design, magnitude + request.brightness.error, optics)
        faint_hours = _plan_for_goal(request, instrument, faint_signal, longest).hours
    alternatives = None
    if plan.hours > request.hours_requested:
        alternatives = _price_alternatives(request, observatory, instrument, conditions, wavelength, longest, optics, typical, design)
    return ExposureMeasure(
        wavelength=wavelength,
        observed_band=optics.observed_band,
        sky_band=conditions.sky_band,
        hours_usable=conditions.hours_usable,
        typical=typical,
        design=design,
        best=best,
        signal=signal,
        typical_signal=typical_signal,
        peak_signal=peak_signal,
        plan=plan,
        typical_plan=typical_plan,
        budget=_plan_for_hours(request.hours_requested, instrument, signal, longest),
        typical_budget=_plan_for_hours(request.hours_requested, instrument, typical_signal, longest),
        level_e=level_e,
        safe=safe,
        longest=longest,
        saturated=saturated,
        dimming_mag=dimming,
        usable_budget=usable_budget,
        faint_hours=faint_hours,
        alternatives=alternatives,
    )


def saturation_level_e(detector: Detector) -> float:
    """Electrons at which a pixel stops being usable: the linear range or the converter's largest count, the smaller."""
    return min(detector.linearity_fraction * detector.full_well_e, (2**detector.adc_bits - 1) * detector.gain_e_adu)


def resolution_element_pixels(slit_arcsec: float, fwhm_arcsec: float, pixel_arcsec: float, grating_pixels: float, filled: bool = False) -> float:
    """Pixels across one spectral resolution element.

    The projected slit width, or the seeing-limited image when it is narrower
    than the slit (not for a uniformly ``filled`` slit, i.e. surface brightness),
    never below the grating's own sampling ``grating_pixels``. The spatial and
    spectral scales are taken as equal (no anamorphic magnification).
    """
    width = slit_arcsec if filled else min(slit_arcsec, fwhm_arcsec)
    return max(grating_pixels, width / pixel_arcsec)


def ccd_snr(
    source_e_s: float,
    n_pix: float,
    sky_e_s_pix: float,
    dark_e_s_pix: float,
    read_noise_e: float,
    total_s: np.ndarray | float,
    exposures: np.ndarray | float = 1,
    n_background: float | None = None,
) -> np.ndarray | float:
    """The CCD equation for ``exposures`` exposures summing to ``total_s`` seconds.

    S/N = N* / sqrt(N* + n_pix (1 + n_pix/n_B) (N_S + N_D + N_exp N_R²)), with N* = R* t,
    N_S = sky per pixel, N_D = dark per pixel; digitisation noise neglected.

    References
    ----------
    Merline, W. J. & Howell, S. B. 1995, Experimental Astronomy 6, 163.
    """
    background_factor = 1.0 if n_background is None else 1.0 + n_pix / n_background
    if isinstance(total_s, (int, float)) and isinstance(exposures, (int, float)):  # one value: plain floats, faster
        source_e = source_e_s * total_s
        noise_e = math.sqrt(source_e + n_pix * background_factor * ((sky_e_s_pix + dark_e_s_pix) * total_s + exposures * read_noise_e**2))
        return float(source_e / noise_e) if noise_e > 0 else 0.0
    total = np.asarray(total_s, dtype=float)
    signal = source_e_s * total
    noise = np.sqrt(signal + n_pix * background_factor * ((sky_e_s_pix + dark_e_s_pix) * total + exposures * read_noise_e**2))
    # Zero where there is no noise at all; the plain division when every instant has some (a masked one costs more).
    snr = signal / noise if noise.size and noise.min() > 0 else np.divide(signal, noise, out=np.zeros_like(noise), where=noise > 0)
    return float(snr) if snr.ndim == 0 else snr


def exposures_for_snr(signal: Signal, goal_snr: float, longest_s: float) -> tuple[int, float]:
    """Fewest exposures no longer than ``longest_s`` reaching ``goal_snr``, and their (equal) length.

    With N exposures of t seconds the CCD equation gives
    N R² t² − S² (R + n (S_pix + D)) t − S² n σ_R² = 0; N is the smallest
    integer for which the root t does not exceed ``longest_s``.
    """
    rate, n = signal.source_e_s, signal.n_pix
    linear = rate + n * (signal.sky_e_s_pix + signal.dark_e_s_pix)
    read = n * signal.read_noise_e**2
    s2 = goal_snr**2
    needed = s2 * (linear * longest_s + read) / (rate**2 * longest_s**2)
    count = max(1, math.ceil(needed - 1e-9))
    t = (s2 * linear + math.sqrt((s2 * linear) ** 2 + 4.0 * count * rate**2 * s2 * read)) / (2.0 * count * rate**2)
    return count, min(t, longest_s)


def encircled_fraction_gaussian(radius: float, fwhm: float) -> float:
    """Fraction of a circular Gaussian's light within ``radius``: 1 − exp(−r²/2σ²)."""
    sigma = fwhm / _FWHM_PER_SIGMA
    return 1.0 - math.exp(-(radius**2) / (2.0 * sigma**2))


def slit_transmission_gaussian(width: float, fwhm: float) -> float:
    """Fraction of a centred circular Gaussian passing a slit (or band) of full ``width``: erf(w / (2√2 σ))."""
    sigma = fwhm / _FWHM_PER_SIGMA
    return math.erf(width / (2.0 * math.sqrt(2.0) * sigma))


def central_pixel_fraction(pixel: float, fwhm: float) -> float:
    """Fraction of a centred circular Gaussian falling in the square pixel under its peak."""
    return slit_transmission_gaussian(pixel, fwhm) ** 2


# --- helpers -------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Optics:
    """What every observing point of one request shares: the band or spectrum's zero point, width, throughput
    and extinction, and the sky's zero point (worked out once per request)."""

    observed_band: str
    zero_point: float
    bandwidth: float
    throughput: float
    extinction: float
    sky_zero_point: float
    sky_offset: float | None
    """Spectra: the sky carried from the conditions' band to the wavelength (added to each point's sky)."""
    area: float


def _optics(request: ObservationRequest, observatory: Observatory, instrument: Instrument, conditions: Conditions, wavelength: float) -> _Optics:
    """The point-independent part of :func:`_signal`."""
    climate = observatory.climate
    telescope = observatory.telescope
    area = photometry.collecting_area_m2(telescope.aperture_m, telescope.central_obstruction)
    sky_band = climate.bands.get(conditions.sky_band)
    sky_offset = None
    if instrument.kind == "imager":
        item = instrument.filter_named(request.setup.filter or "")
        assert item is not None  # setup_gap ruled this out
        observed_band, zero_point = item.band, item.zero_point_jy
        bandwidth = item.width_nm / item.wavelength_nm
        throughput = item.throughput or instrument.throughput
        extinction = climate.bands[item.band].extinction_mag_per_airmass
        sky_zero_point = zero_point if sky_band is None or item.band == conditions.sky_band else sky_band.zero_point_jy
    else:
        grating = instrument.grating_named(request.setup.grating or "")
        assert grating is not None
        # Zero point, extinction and sky as smooth curves at the wavelength (spectral_curves), not the nearest band's.
        spectrum = spectral_curves.spectrum_photometry(observatory, wavelength, conditions)
        observed_band, zero_point = spectrum.label, spectrum.zero_point_jy
        bandwidth = 1.0 / grating.resolving_power
        throughput = grating.throughput or instrument.throughput
        extinction = spectrum.extinction_mag_per_airmass
        # Each point's sky (typical or design) is carried to the wavelength as the conditions' sky is.
        sky_zero_point = zero_point
        sky_offset = spectrum.sky_mag_arcsec2 - conditions.sky_mag_arcsec2
    return _Optics(observed_band, zero_point, bandwidth, throughput, extinction, sky_zero_point, sky_offset, area)


def _signal(
    request: ObservationRequest,
    observatory: Observatory,
    instrument: Instrument,
    wavelength: float,
    point: ObservingPoint,
    magnitude: float,
    optics: _Optics,
) -> Signal:
    """Electron rates for ``magnitude`` at ``point``; ``optics`` (:func:`_optics`) is the part every point shares."""
    detector = instrument.detector
    airmass = point.airmass
    telescope = observatory.telescope
    zero_point, bandwidth, throughput, area = optics.zero_point, optics.bandwidth, optics.throughput, optics.area
    sky_mag = point.sky_mag_arcsec2 if optics.sky_offset is None else point.sky_mag_arcsec2 + optics.sky_offset
    brightness = request.brightness
    rate = photometry.source_rate(magnitude, brightness.system, zero_point, bandwidth, area, throughput, optics.extinction, airmass)
    sky_arcsec2 = photometry.sky_rate_per_arcsec2(sky_mag, optics.sky_zero_point, bandwidth, area, throughput)
    fwhm = _delivered_fwhm(request, point.zenith_seeing_arcsec, airmass, wavelength, telescope.aperture_m)
    pixel = detector.pixel_scale_arcsec
    common = {"dark_e_s_pix": detector.dark_current_e_s_pix, "read_noise_e": detector.read_noise_e, "fwhm_arcsec": fwhm}
    dark = detector.dark_current_e_s_pix
    extended = brightness.kind == "surface"

    if instrument.kind == "imager":
        sky_pix = sky_arcsec2 * pixel**2
        if extended:
            signal = Signal(
                source_e_s=rate,
                sky_e_s_pix=sky_pix,
                n_pix=1.0 / pixel**2,
                peak_e_s_pix=rate * pixel**2 + sky_pix + dark,
                aperture_radius_arcsec=None,
                enclosed_fraction=1.0,
                slit_transmission=None,
                **common,
            )
            return signal
        radius = APERTURE_RADIUS_FWHM * fwhm
        enclosed = encircled_fraction_gaussian(radius, fwhm)
        signal = Signal(
            source_e_s=rate * enclosed,
            sky_e_s_pix=sky_pix,
            n_pix=math.pi * radius**2 / pixel**2,
            peak_e_s_pix=rate * central_pixel_fraction(pixel, fwhm) + sky_pix + dark,
            aperture_radius_arcsec=radius,
            enclosed_fraction=enclosed,
            slit_transmission=None,
            **common,
        )
        return signal

    grating = instrument.grating_named(request.setup.grating or "")
    assert grating is not None and request.setup.slit_arcsec is not None
    slit = request.setup.slit_arcsec
    per_pixel_spectral = 1.0 / grating.pixels_per_resolution_element
    sky_pix = sky_arcsec2 * slit * pixel * per_pixel_spectral
    # The rates above are per grating element (1/R); the slit or the seeing may widen it (module docstring).
    element = resolution_element_pixels(slit, fwhm, pixel, grating.pixels_per_resolution_element, filled=extended)
    widening = element * per_pixel_spectral
    resolving = {"element_pixels": element, "resolving_power": grating.resolving_power / widening}
    if extended:
        signal = Signal(
            source_e_s=rate * slit * widening,
            sky_e_s_pix=sky_pix,
            n_pix=element / pixel,
            peak_e_s_pix=rate * slit * pixel * per_pixel_spectral + sky_pix + dark,
            aperture_radius_arcsec=None,
            enclosed_fraction=1.0,
            slit_transmission=None,
            **common,
            **resolving,
        )
        return signal
    transmission = slit_transmission_gaussian(slit, fwhm)
    height = 2.0 * APERTURE_RADIUS_FWHM * fwhm
    if detector.slit_length_arcsec is not None:
        height = min(height, detector.slit_length_arcsec)
    along = slit_transmission_gaussian(height, fwhm)
    signal = Signal(
        source_e_s=rate * transmission * along * widening,
        sky_e_s_pix=sky_pix,
        n_pix=element * max(height / pixel, 1.0),
        peak_e_s_pix=rate * transmission * per_pixel_spectral * slit_transmission_gaussian(pixel, fwhm) + sky_pix + dark,
        aperture_radius_arcsec=height / 2.0,
        enclosed_fraction=along,
        slit_transmission=transmission,
        **common,
        **resolving,
    )
    return signal


def _delivered_fwhm(request: ObservationRequest, median_seeing: float, airmass: float, wavelength: float, aperture_m: float) -> float:
    """The FWHM the S/N uses: site seeing ⊕ Airy FWHM, or the request's limit when finer (never below diffraction)."""
    diffraction = diffraction_fwhm_arcsec(wavelength, aperture_m)
    fwhm = math.hypot(seeing_fwhm_arcsec(median_seeing, airmass, wavelength), diffraction)
    limit = request.constraints.max_seeing_arcsec
    if limit is not None:
        fwhm = min(fwhm, limit)
    return max(fwhm, diffraction)


def _plan_for_goal(request: ObservationRequest, instrument: Instrument, signal: Signal, longest: float) -> ExposurePlan:
    """Exposures that reach the goal (S/N or exposure time) and the hours they take with overheads."""
    if request.goal.snr is not None:
        if signal.source_e_s <= 0:
            return ExposurePlan(0, 0.0, math.inf, 0, 0.0)
        count, length = exposures_for_snr(signal, request.goal.snr, longest)
        length = max(length, instrument.min_exposure_s)
    else:
        total = float(request.goal.exposure_time_s or 0.0)
        count = max(1, math.ceil(total / longest - 1e-9))
        length = max(total / count, instrument.min_exposure_s)
    hours, visits = _hours_with_overheads(instrument, count, length)
    return ExposurePlan(count, length, hours, visits, float(signal.snr(count * length, count)))


def _plan_for_hours(hours: float, instrument: Instrument, signal: Signal, longest: float) -> ExposurePlan:
    """The S/N reached in ``hours`` of telescope time, overheads taken off first."""
    overheads = instrument.overheads
    visits = max(1, math.ceil(hours / overheads.visit_hours - 1e-9))
    open_s = hours * 3600.0 - visits * overheads.acquisition_s
    cycle = longest + overheads.readout_s
    count = int(open_s // cycle) if open_s > 0 else 0
    length = longest
    if count == 0:
        length = open_s - overheads.readout_s
        if length < instrument.min_exposure_s:
            return ExposurePlan(0, 0.0, hours, visits, 0.0)
        count = 1
    snr = float(signal.snr(count * length, count))
    # The time left after whole exposures of the longest length may hold one more, all a little shorter.
    shorter = open_s / (count + 1) - overheads.readout_s
    if count * length < open_s - (count + 1) * overheads.readout_s and shorter >= instrument.min_exposure_s:
        more = float(signal.snr((count + 1) * shorter, count + 1))
        if more > snr:
            count, length, snr = count + 1, shorter, more
    return ExposurePlan(count, length, hours, visits, snr)


def _hours_with_overheads(instrument: Instrument, count: int, length: float) -> tuple[float, int]:
    """Hours for ``count`` exposures of ``length`` s with readout each and acquisition per visit."""
    overheads = instrument.overheads
    on_sky = count * (length + overheads.readout_s)
    visits = max(1, math.ceil(on_sky / (overheads.visit_hours * 3600.0) - 1e-9))
    return (on_sky + visits * overheads.acquisition_s) / 3600.0, visits


def _points(observatory: Observatory, conditions: Conditions) -> tuple[ObservingPoint, ObservingPoint]:
    """The typical (median) and design (percentile) conditions of a request (module docstring)."""
    climate = observatory.climate
    percent = climate.design_percentile
    typical = ObservingPoint("typical", 50.0, max(conditions.airmass_median, 1.0), conditions.sky_mag_arcsec2, climate.median_seeing_arcsec)
    design = ObservingPoint(
        "design",
        percent,
        max(conditions.airmass_at_design, typical.airmass),
        min(conditions.sky_at_design, typical.sky_mag_arcsec2),
        seeing_percentile_arcsec(climate.median_seeing_arcsec, percent),
    )
    return typical, design


def _price_alternatives(
    request: ObservationRequest,
    observatory: Observatory,
    instrument: Instrument,
    conditions: Conditions,
    wavelength: float,
    longest: float,
    optics: _Optics,
    typical: ObservingPoint,
    design: ObservingPoint,
) -> Alternatives:
    """Hours and S/N of an S/N goal with a tighter airmass limit and with the Moon down (None where they do not apply)."""
    if request.goal.snr is None:
        return Alternatives(None, None)

    def at(point: ObservingPoint) -> tuple[ExposurePlan, ExposurePlan]:
        signal = _signal(request, observatory, instrument, wavelength, point, request.brightness.magnitude, optics)
        return (
            _plan_for_goal(request, instrument, signal, longest),
            _plan_for_hours(request.hours_requested, instrument, signal, longest),
        )

    airmass_limit = None
    limit = math.ceil(typical.airmass * 10.0 - 1e-9) / 10.0
    if limit < design.airmass - 0.005:
        # The design airmass of a tighter limit is at most the limit: an upper bound on the hours.
        plan, budget = at(ObservingPoint(design.name, design.percent, limit, design.sky_mag_arcsec2, design.zenith_seeing_arcsec))
        airmass_limit = PricedChange(limit, plan.hours, budget.snr)
    moon_free_sky = None
    dark = _moon_free_sky(observatory, conditions, design)
    if dark is not None:
        plan, budget = at(ObservingPoint(design.name, design.percent, design.airmass, dark, design.zenith_seeing_arcsec))
        moon_free_sky = PricedChange(dark, plan.hours, budget.snr)
    return Alternatives(airmass_limit, moon_free_sky)


def _moon_free_sky(observatory: Observatory, conditions: Conditions, design: ObservingPoint) -> float | None:
    """The Moon-free sky at the design airmass (K&S 1991 eq. 2) when moonlight brightens the design sky noticeably."""
    band = observatory.climate.bands.get(conditions.sky_band)
    if band is None:
        return None
    zenith = 90.0 - altitude_for_airmass(design.airmass)
    dark = float(mag_from_nanolamberts(dark_sky_nl(band.sky_mag_arcsec2, band.extinction_mag_per_airmass, zenith)))
    return dark if dark - design.sky_mag_arcsec2 >= _MOON_SUGGESTION_MAG else None


def _snr_curve(request: ObservationRequest, signal: Signal, plan: ExposurePlan, budget: ExposurePlan, longest: float) -> dict[str, Any]:
    """S/N against total exposure time, exposures split at ``longest`` seconds, for plotting."""
    requested_s = budget.exposures * budget.exposure_time_s
    needed_s = plan.exposures * plan.exposure_time_s
    top = max(requested_s, needed_s if math.isfinite(needed_s) else 0.0, longest) * 2.0
    start = max(top * 1e-3, 1e-3)
    times = start * (top / start) ** _CURVE_STEPS  # evenly spaced in log time, as np.geomspace (which costs more)
    counts = np.maximum(1, np.ceil(times / longest - 1e-9))
    snr = signal.snr(times, counts)
    return {
        "exposure_s": times.round(3).tolist(),  # the arrays' own round: np.round's dispatch costs as much on 40 values
        "snr": np.atleast_1d(snr).round(4).tolist(),
        "goal_snr": request.goal.snr,
        "requested_exposure_s": round(requested_s, 3),
        "needed_exposure_s": round(needed_s, 3) if math.isfinite(needed_s) else None,
    }


def _round(value: float | None, digits: int) -> float | None:
    """Round to ``digits`` significant digits; None for missing or non-finite values (JSON has no infinity)."""
    if value is None or not math.isfinite(value):
        return None
    if value == 0:
        return 0.0
    return float(format(value, _SIGNIFICANT[digits]))  # the format spec looked up, not built: a result rounds some 40 figures


#: Format specs for 0 to 9 significant digits (".4g"...), for :func:`_round`.
_SIGNIFICANT = tuple(f".{digits}g" for digits in range(10))
