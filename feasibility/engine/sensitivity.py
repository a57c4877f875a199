"""Signal-to-noise, exposure plan and hours needed for one observation request.

:func:`assess_exposure` is what the orchestrator calls once the sky checks have
reduced the semester to :class:`~feasibility.engine.conditions.Conditions`. It
returns the findings of the checks ``sensitivity``, ``instrument``,
``atmosphere`` and ``image-quality``, the figures behind them, and an S/N
curve for plotting.

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
- Levels: feasible when the design point meets the goal in the hours
  requested (marginal if it does so only at the bright end of the magnitude
  error); marginal when only the typical point does; infeasible when neither does.

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
from feasibility.engine import photometry, spectral_curves, wording
from feasibility.engine.airmass import altitude_for_airmass
from feasibility.engine.conditions import Conditions, wavelength_for
from feasibility.engine.exposure_checks import (
    InstrumentProblem,
    atmosphere_finding,
    diffraction_fwhm_arcsec,
    image_quality_finding,
    instrument_setup_problems,
    seeing_fwhm_arcsec,
    seeing_percentile_arcsec,
)
from feasibility.engine.moonsky import dark_sky_nl, mag_from_nanolamberts
from feasibility.results import Finding, Level, worst

__all__ = [
    "APERTURE_RADIUS_FWHM",
    "BEST_SEEING_PERCENT",
    "SATURATION_FRACTION",
    "ExposureAssessment",
    "ExposurePlan",
    "ObservingPoint",
    "Signal",
    "assess_exposure",
    "ccd_snr",
    "central_pixel_fraction",
    "encircled_fraction_gaussian",
    "exposures_for_snr",
    "resolution_element_pixels",
    "saturation_level_e",
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
_SYSTEM_NAMES = {"vega": "Vega", "ab": "AB"}
_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
_CCD_METHOD = "CCD equation (Merline & Howell 1995; Howell, Handbook of CCD Astronomy), sky from many pixels"


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
    unit: str
    """What the S/N refers to, e.g. 'in a 0.57" radius aperture'."""
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


def assess_exposure(
    request: ObservationRequest, observatory: Observatory, instrument: Instrument, conditions: Conditions
) -> ExposureAssessment:
    """Findings, figures and S/N curve of ``request`` observed with ``instrument`` under ``conditions``.

    Every S/N figure is computed at the typical and at the design conditions
    (module docstring); the keys without a suffix are the design point's.
    Never raises for a setup the instrument lacks: that gives an ``unchecked``
    instrument finding.
    """
    wavelength = wavelength_for(request, instrument)
    missing = _missing_setup(request, instrument)
    if wavelength is None or missing:
        finding = Finding(
            check="instrument",
            level=Level.UNCHECKED,
            message=missing or "No wavelength: give the setup's central wavelength or the goal's wavelength.",
            suggestion="Name a filter, grating and slit that the instrument has.",
            method="the instrument's filters, gratings and slits in the observatory description",
        )
        return ExposureAssessment([finding], {"hours_needed": None, "snr_expected": None})

    climate = observatory.climate
    typical, design = _points(observatory, conditions)
    findings = [atmosphere_finding(wavelength)]
    findings.append(
        image_quality_finding(
            request, climate.median_seeing_arcsec, typical.airmass, wavelength, observatory.telescope.aperture_m,
            conditions.hours_usable,
        )
    )
    magnitude = request.brightness.magnitude
    optics = _optics(request, observatory, instrument, conditions, wavelength)  # shared by every point below
    signal, note = _signal(request, observatory, instrument, conditions, wavelength, design, magnitude, optics)
    typical_signal, _ = _signal(request, observatory, instrument, conditions, wavelength, typical, magnitude, optics)
    problems = instrument_setup_problems(request, instrument, wavelength)

    # Saturation at the worst case: the best tenth of the seeing at the zenith, over the design sky.
    best = ObservingPoint(
        "best", BEST_SEEING_PERCENT, 1.0, design.sky_mag_arcsec2,
        seeing_percentile_arcsec(climate.median_seeing_arcsec, BEST_SEEING_PERCENT),
    )
    peak_signal, _ = _signal(request, observatory, instrument, conditions, wavelength, best, magnitude, optics)
    level_e = saturation_level_e(instrument.detector)
    safe = level_e / peak_signal.peak_e_s_pix
    longest = min(instrument.max_exposure_s, safe)
    saturated = longest < instrument.min_exposure_s
    if saturated:
        dimming = 2.5 * math.log10(instrument.min_exposure_s / safe)
        problems.append(
            InstrumentProblem(
                Level.INFEASIBLE,
                f"the brightest pixel reaches the saturation level, {wording.count(level_e)} e "
                f"({_saturation_reason(instrument.detector)}), in {wording.seconds(safe)} at the best seeing "
                f"({wording.arcsec(peak_signal.fwhm_arcsec)}, {wording.percentile(BEST_SEEING_PERCENT)}) and airmass "
                f"{wording.airmass(1.0)}: shorter than the shortest exposure {wording.seconds(instrument.min_exposure_s)}",
                f"The target saturates: {wording.magnitude(dimming)} mag less light (a neutral-density filter of at least "
                f"that density, a narrower band or higher resolution) would make {wording.seconds(instrument.min_exposure_s)} "
                "exposures safe; or defocus, or use a smaller telescope.",
            )
        )
        longest = instrument.min_exposure_s

    plan = _plan_for_goal(request, instrument, signal, longest)
    budget = _plan_for_hours(request.hours_requested, instrument, signal, longest)
    typical_plan = _plan_for_goal(request, instrument, typical_signal, longest)
    typical_budget = _plan_for_hours(request.hours_requested, instrument, typical_signal, longest)
    if conditions.hours_usable > 0 and typical_plan.hours > conditions.hours_usable:
        problems.append(
            InstrumentProblem(
                Level.INFEASIBLE,
                f"the goal needs {wording.hours(typical_plan.hours)} even at the typical conditions, but only "
                f"{wording.hours(conditions.hours_usable)} are usable this semester: too faint for this telescope and instrument",
                f"Lower the S/N goal (the usable time gives {wording.snr(_plan_for_hours(conditions.hours_usable, instrument, typical_signal, longest).snr)} "
                "at the typical conditions), bin or use a lower-resolution setup, or choose a larger telescope."
                if request.goal.snr is not None
                else "Shorten the exposure time asked for, or choose a larger telescope.",
            )
        )
    findings.append(_instrument_finding(problems, instrument, signal, typical_signal, peak_signal, safe, longest))

    faint_hours = None
    if request.brightness.error:
        faint_signal, _ = _signal(
            request, observatory, instrument, conditions, wavelength, design, magnitude + request.brightness.error, optics
        )
        faint_hours = _plan_for_goal(request, instrument, faint_signal, longest).hours
    if saturated:
        note = "; ".join(filter(None, [note, "these figures assume shortest exposures, which saturate"]))
    outcome = _Outcome(typical, design, signal, typical_signal, plan, typical_plan, budget, typical_budget, conditions.sky_band)
    alternatives = _Alternatives(request, observatory, instrument, conditions, wavelength, longest, optics)
    findings.append(_sensitivity_finding(request, outcome, faint_hours, note, alternatives))

    figures: dict[str, Any] = {
        "hours_needed": _round(plan.hours, 4),
        "snr_expected": _round(budget.snr, 3),
        "hours_needed_typical": _round(typical_plan.hours, 4),
        "snr_expected_typical": _round(typical_budget.snr, 3),
        "snr_goal": request.goal.snr,
        **_point_figures(outcome),
        "source_rate_e_s": _round(signal.source_e_s, 5),
        "sky_rate_e_s_pix": _round(signal.sky_e_s_pix, 5),
        "dark_e_s_pix": signal.dark_e_s_pix,
        "read_noise_e": signal.read_noise_e,
        "pixels": _round(signal.n_pix, 3),
        "exposure_time_s": _round(plan.exposure_time_s, 3),
        "exposures": plan.exposures,
        "visits": plan.visits,
        "exposure_time_s_max": _round(longest, 3),
        "exposure_time_s_safe": _round(safe, 4),
        "seeing_arcsec": _round(signal.fwhm_arcsec, 3),
        "airmass": _round(design.airmass, 3),
        "wavelength_nm": wavelength,
        "aperture_radius_arcsec": _round(signal.aperture_radius_arcsec, 3),
        "enclosed_fraction": _round(signal.enclosed_fraction, 4),
        "slit_loss": None if signal.slit_transmission is None else _round(1.0 - signal.slit_transmission, 4),
        "resolution_element_pixels": _round(signal.element_pixels, 4),
        "resolving_power": _round(signal.resolving_power, 4),
        "resolving_power_typical": _round(typical_signal.resolving_power, 4),
    }
    return ExposureAssessment(findings, figures, {"snr_curve": _snr_curve(request, signal, plan, budget, longest)})


def saturation_level_e(detector: Detector) -> float:
    """Electrons at which a pixel stops being usable: the linear range or the converter's largest count, the smaller."""
    return min(detector.linearity_fraction * detector.full_well_e, (2**detector.adc_bits - 1) * detector.gain_e_adu)


def resolution_element_pixels(
    slit_arcsec: float, fwhm_arcsec: float, pixel_arcsec: float, grating_pixels: float, filled: bool = False
) -> float:
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
    snr = np.divide(signal, noise, out=np.zeros_like(noise), where=noise > 0)
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


def _missing_setup(request: ObservationRequest, instrument: Instrument) -> str | None:
    """Why the setup cannot be evaluated, or None."""
    setup = request.setup
    if instrument.kind == "imager":
        if instrument.filter_named(setup.filter or "") is None:
            return f"{instrument.name} has no filter {setup.filter!r}."
        return None
    if instrument.grating_named(setup.grating or "") is None:
        return f"{instrument.name} has no grating {setup.grating!r}."
    if setup.slit_arcsec is None:
        return f"No slit width given for {instrument.name}."
    return None


@dataclass(frozen=True)
class _Optics:
    """What every observing point of one request shares: the band or spectrum's zero point, width, throughput
    and extinction, the sky's zero point, and the note on the brightness band (worked out once per request)."""

    observed_band: str
    zero_point: float
    bandwidth: float
    throughput: float
    extinction: float
    sky_zero_point: float
    sky_offset: float | None
    """Spectra: the sky carried from the conditions' band to the wavelength (added to each point's sky)."""
    area: float
    note: str | None


def _optics(
    request: ObservationRequest, observatory: Observatory, instrument: Instrument, conditions: Conditions, wavelength: float
) -> _Optics:
    """The point-independent part of :func:`_signal`."""
    climate = observatory.climate
    telescope = observatory.telescope
    area = photometry.collecting_area_m2(telescope.aperture_m, telescope.central_obstruction)
    sky_band = climate.bands.get(conditions.sky_band)
    sky_offset = None
    if instrument.kind == "imager":
        item = instrument.filter_named(request.setup.filter or "")
        assert item is not None  # _missing_setup ruled this out
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
    brightness = request.brightness
    note = None
    if instrument.kind != "imager":
        note = spectral_curves.flux_note(brightness.band, brightness.system, wavelength)
    elif brightness.band != observed_band:
        note = (
            f"brightness is given in {brightness.band}, not the observed band {observed_band}: "
            f"zero {brightness.band}-{observed_band} colour assumed ({_SYSTEM_NAMES[brightness.system]} system)"
        )
    return _Optics(observed_band, zero_point, bandwidth, throughput, extinction, sky_zero_point, sky_offset, area, note)


def _signal(
    request: ObservationRequest,
    observatory: Observatory,
    instrument: Instrument,
    conditions: Conditions,
    wavelength: float,
    point: ObservingPoint,
    magnitude: float,
    optics: _Optics | None = None,
) -> tuple[Signal, str | None]:
    """Electron rates for ``magnitude`` at ``point``, and a note when the brightness band is not the observed band.

    ``optics`` (:func:`_optics`) is the part every point of the request shares; worked out here when not given.
    """
    if optics is None:
        optics = _optics(request, observatory, instrument, conditions, wavelength)
    detector = instrument.detector
    airmass = point.airmass
    telescope = observatory.telescope
    zero_point, bandwidth, throughput, area = optics.zero_point, optics.bandwidth, optics.throughput, optics.area
    sky_mag = point.sky_mag_arcsec2 if optics.sky_offset is None else point.sky_mag_arcsec2 + optics.sky_offset
    brightness = request.brightness
    note = optics.note
    rate = photometry.source_rate(
        magnitude, brightness.system, zero_point, bandwidth, area, throughput, optics.extinction, airmass
    )
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
                source_e_s=rate, sky_e_s_pix=sky_pix, n_pix=1.0 / pixel**2, peak_e_s_pix=rate * pixel**2 + sky_pix + dark,
                aperture_radius_arcsec=None, enclosed_fraction=1.0, slit_transmission=None,
                unit="per square arcsecond", **common,
            )
            return signal, note
        radius = APERTURE_RADIUS_FWHM * fwhm
        enclosed = encircled_fraction_gaussian(radius, fwhm)
        signal = Signal(
            source_e_s=rate * enclosed, sky_e_s_pix=sky_pix, n_pix=math.pi * radius**2 / pixel**2,
            peak_e_s_pix=rate * central_pixel_fraction(pixel, fwhm) + sky_pix + dark,
            aperture_radius_arcsec=radius, enclosed_fraction=enclosed, slit_transmission=None,
            unit=f"in a {wording.arcsec(radius)} radius aperture", **common,
        )
        return signal, note

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
            source_e_s=rate * slit * widening, sky_e_s_pix=sky_pix, n_pix=element / pixel,
            peak_e_s_pix=rate * slit * pixel * per_pixel_spectral + sky_pix + dark,
            aperture_radius_arcsec=None, enclosed_fraction=1.0, slit_transmission=None,
            unit="per resolution element per arcsecond along the slit", **common, **resolving,
        )
        return signal, note
    transmission = slit_transmission_gaussian(slit, fwhm)
    height = 2.0 * APERTURE_RADIUS_FWHM * fwhm
    if detector.slit_length_arcsec is not None:
        height = min(height, detector.slit_length_arcsec)
    along = slit_transmission_gaussian(height, fwhm)
    delta = float(f"{wavelength / resolving['resolving_power']:.3g}")
    signal = Signal(
        source_e_s=rate * transmission * along * widening, sky_e_s_pix=sky_pix,
        n_pix=element * max(height / pixel, 1.0),
        peak_e_s_pix=rate * transmission * per_pixel_spectral * slit_transmission_gaussian(pixel, fwhm) + sky_pix + dark,
        aperture_radius_arcsec=height / 2.0, enclosed_fraction=along, slit_transmission=transmission,
        unit=f"per resolution element ({wording.nanometres(delta)}), {wording.arcsec(height)} extraction", **common, **resolving,
    )
    return signal, note


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
    typical = ObservingPoint(
        "typical", 50.0, max(conditions.airmass_median, 1.0), conditions.sky_mag_arcsec2, climate.median_seeing_arcsec
    )
    design = ObservingPoint(
        "design", percent, max(conditions.airmass_at_design, typical.airmass), min(conditions.sky_at_design, typical.sky_mag_arcsec2),
        seeing_percentile_arcsec(climate.median_seeing_arcsec, percent),
    )
    return typical, design


@dataclass(frozen=True)
class _Outcome:
    """Both points' signals and plans, for the sensitivity finding."""

    typical: ObservingPoint
    design: ObservingPoint
    signal: Signal
    typical_signal: Signal
    plan: ExposurePlan
    typical_plan: ExposurePlan
    budget: ExposurePlan
    typical_budget: ExposurePlan
    sky_band: str


def _point_figures(outcome: _Outcome) -> dict[str, Any]:
    """The conditions each point was computed at."""
    figures: dict[str, Any] = {"design_percentile": outcome.design.percent}
    for suffix, point, signal in (("design", outcome.design, outcome.signal), ("typical", outcome.typical, outcome.typical_signal)):
        figures[f"airmass_{suffix}"] = _round(point.airmass, 4)
        figures[f"sky_mag_arcsec2_{suffix}"] = _round(point.sky_mag_arcsec2, 4)
        figures[f"seeing_{suffix}_arcsec"] = _round(signal.fwhm_arcsec, 3)
    return figures


def _conditions_text(point: ObservingPoint, signal: Signal, band: str) -> str:
    """E.g. 'design conditions (80th percentile: airmass 1.45, sky 21.20 mag/arcsec² in V, seeing 1.02")'."""
    which = "median" if point.name == "typical" else wording.percentile(point.percent)
    return (
        f"{point.name} conditions ({which}: airmass {wording.airmass(point.airmass)}, "
        f"sky {wording.magnitude(point.sky_mag_arcsec2)} mag/arcsec² in {band}, seeing {wording.arcsec(signal.fwhm_arcsec)})"
    )


def _saturation_reason(detector: Detector) -> str:
    """Which limit sets the saturation level, with its numbers."""
    adc = 2**detector.adc_bits - 1
    linear = detector.linearity_fraction * detector.full_well_e
    if adc * detector.gain_e_adu <= linear:
        return (
            f"the {detector.adc_bits}-bit converter's {wording.count(adc)} ADU × {detector.gain_e_adu:g} e/ADU, "
            f"below {detector.linearity_fraction:.0%} of the {wording.count(detector.full_well_e)} e full well"
        )
    return f"{detector.linearity_fraction:.0%} of the {wording.count(detector.full_well_e)} e full well, the linear range"


def _instrument_finding(
    problems: list[InstrumentProblem],
    instrument: Instrument,
    signal: Signal,
    typical_signal: Signal,
    peak_signal: Signal,
    safe: float,
    longest: float,
) -> Finding:
    detector = instrument.detector
    level_e = saturation_level_e(detector)
    figures = {
        "saturation_time_s": _round(safe, 4),
        "peak_e_s_pix": _round(peak_signal.peak_e_s_pix, 4),
        "saturation_seeing_arcsec": _round(peak_signal.fwhm_arcsec, 3),
        "saturation_level_e": _round(level_e, 6),
        "full_well_e": detector.full_well_e,
        "adc_max_adu": 2**detector.adc_bits - 1,
        "linearity_fraction": detector.linearity_fraction,
        "exposure_time_s_max": _round(longest, 3),
        "resolution_element_pixels": _round(signal.element_pixels, 4),
        "resolving_power": _round(signal.resolving_power, 4),
        "resolving_power_typical": _round(typical_signal.resolving_power, 4),
    }
    method = (
        "instrument and grating wavelength ranges; saturation when the peak pixel (Gaussian profile, source + sky + dark) "
        f"at the {wording.percentile(BEST_SEEING_PERCENT)} seeing and airmass 1 reaches the smaller of the detector's "
        "linear range (a fraction of full well, common practice) and the converter's largest count × gain; spectra: "
        "resolution element = projected slit or seeing FWHM, whichever is narrower, never below the grating's sampling"
    )
    resolution = _resolution_text(instrument, signal, typical_signal)
    if not problems:
        message = f"{instrument.name} covers the setup; "
        suggestion = None
        if safe < instrument.max_exposure_s:
            message += (
                f"single exposures stay below saturation ({wording.count(level_e)} e, {_saturation_reason(detector)}) up to "
                f"{wording.seconds(safe)} even at the best seeing ({wording.arcsec(peak_signal.fwhm_arcsec)}, "
                f"{wording.percentile(BEST_SEEING_PERCENT)}) and airmass {wording.airmass(1.0)}, shorter than the "
                f"instrument's longest {wording.seconds(instrument.max_exposure_s)}"
            )
            suggestion = f"Keep single exposures at or below {wording.seconds(safe)}; the plan here does."
        else:
            message += f"exposures up to the longest, {wording.seconds(instrument.max_exposure_s)}, stay below saturation"
        return Finding(
            check="instrument",
            level=Level.FEASIBLE,
            message=message + (f"; {resolution}" if resolution else "") + ".",
            figures=figures,
            suggestion=suggestion,
            method=method,
        )
    level = worst([p.level for p in problems])
    message = "; ".join(p.message for p in problems)
    if resolution:
        message += f"; {resolution}"
    return Finding(
        check="instrument",
        level=level,
        message=message[0].upper() + message[1:] + ".",
        figures=figures,
        suggestion=next((p.suggestion for p in problems if p.level is level and p.suggestion), None),
        method=method,
    )


def _resolution_text(instrument: Instrument, signal: Signal, typical_signal: Signal) -> str | None:
    """For spectra: what sets the resolution element, and the resolving power at both points."""
    if signal.element_pixels is None or signal.resolving_power is None or typical_signal.resolving_power is None:
        return None
    return (
        f"resolution element {wording.pixels(typical_signal.element_pixels or 0.0)} at the typical seeing, "
        f"{wording.pixels(signal.element_pixels)} at the design seeing (the narrower of the projected slit and the "
        f"seeing image, at least the grating's sampling): resolving power {wording.count(typical_signal.resolving_power)} "
        f"and {wording.count(signal.resolving_power)}"
    )


class _Alternatives:
    """Concrete changes the engine can price for a request that misses its goal (each a short text with its figure)."""

    def __init__(
        self,
        request: ObservationRequest,
        observatory: Observatory,
        instrument: Instrument,
        conditions: Conditions,
        wavelength: float,
        longest: float,
        optics: _Optics,
    ) -> None:
        self.request, self.observatory, self.instrument = request, observatory, instrument
        self.conditions, self.wavelength, self.longest, self.optics = conditions, wavelength, longest, optics

    def _at(self, point: ObservingPoint) -> tuple[ExposurePlan, ExposurePlan]:
        signal, _ = _signal(
            self.request, self.observatory, self.instrument, self.conditions, self.wavelength, point,
            self.request.brightness.magnitude, self.optics,
        )
        return (
            _plan_for_goal(self.request, self.instrument, signal, self.longest),
            _plan_for_hours(self.request.hours_requested, self.instrument, signal, self.longest),
        )

    def texts(self, outcome: _Outcome) -> list[str]:
        """'request 2.5 h', 'accept S/N 22 in 2.0 h', 'airmass limit 1.30: at most 1.8 h', 'dark time ...: S/N 24 in 2.0 h'."""
        request, design = self.request, outcome.design
        requested = request.hours_requested
        texts = [f"request {wording.hours(outcome.plan.hours)}"]
        if request.goal.snr is not None:
            texts.append(f"accept {wording.snr(outcome.budget.snr)} in {wording.hours(requested)}")
        limit = math.ceil(outcome.typical.airmass * 10.0 - 1e-9) / 10.0
        if request.goal.snr is not None and limit < design.airmass - 0.005:
            # The design airmass of a tighter limit is at most the limit: an upper bound on the hours.
            plan, _ = self._at(ObservingPoint(design.name, design.percent, limit, design.sky_mag_arcsec2, design.zenith_seeing_arcsec))
            texts.append(
                f"airmass limit {wording.airmass(limit)}: at most {wording.hours(plan.hours)} (fewer hours observable)"
            )
        dark = self._moon_free_sky(design)
        if request.goal.snr is not None and dark is not None:
            plan, budget = self._at(ObservingPoint(design.name, design.percent, design.airmass, dark, design.zenith_seeing_arcsec))
            texts.append(
                f"dark time with the Moon down (sky {wording.magnitude(dark)} mag/arcsec²): {wording.snr(budget.snr)} "
                f"in {wording.hours(requested)}, {wording.hours(plan.hours)} for the goal"
            )
        return texts

    def _moon_free_sky(self, design: ObservingPoint) -> float | None:
        """The Moon-free sky at the design airmass (K&S 1991 eq. 2) when moonlight brightens the design sky noticeably."""
        band = self.observatory.climate.bands.get(self.conditions.sky_band)
        if band is None:
            return None
        zenith = 90.0 - altitude_for_airmass(design.airmass)
        dark = float(mag_from_nanolamberts(dark_sky_nl(band.sky_mag_arcsec2, band.extinction_mag_per_airmass, zenith)))
        return dark if dark - design.sky_mag_arcsec2 >= _MOON_SUGGESTION_MAG else None


def _sensitivity_finding(
    request: ObservationRequest,
    outcome: _Outcome,
    faint_hours: float | None,
    note: str | None,
    alternatives: _Alternatives,
) -> Finding:
    requested = request.hours_requested
    goal = request.goal
    plan, typical_plan, budget, typical_budget = outcome.plan, outcome.typical_plan, outcome.budget, outcome.typical_budget
    band = outcome.sky_band
    if goal.snr is not None:
        wanted = f"{wording.snr(goal.snr)} {outcome.signal.unit}"
    else:
        wanted = f"{wording.seconds(float(goal.exposure_time_s or 0.0))} of exposure"
    design_text = _conditions_text(outcome.design, outcome.signal, band)
    typical_text = _conditions_text(outcome.typical, outcome.typical_signal, band)
    head = (
        f"{wanted} needs {wording.hours(plan.hours)} at the {design_text} "
        f"({plan.exposures} × {wording.seconds(plan.exposure_time_s)} with overheads), "
        f"{wording.hours(typical_plan.hours)} at the {typical_text}; {wording.hours(requested)} requested give "
        f"{wording.snr(budget.snr)} and {wording.snr(typical_budget.snr)}"
    )
    suggestion = None
    if plan.hours <= requested:
        level = Level.FEASIBLE
        if faint_hours is not None and faint_hours > requested:
            level = Level.MARGINAL
            head += (
                f"; at the faint end of the magnitude error it needs {wording.hours(faint_hours)} at the design conditions, "
                f"more than the {wording.hours(requested)} requested"
            )
            suggestion = f"Request {wording.hours(faint_hours)} to cover the magnitude uncertainty, or confirm the brightness."
        elif plan.hours < 0.5 * requested:
            suggestion = f"The goal needs under half the hours requested; consider asking for about {wording.hours(plan.hours)}."
    else:
        if typical_plan.hours <= requested:
            level = Level.MARGINAL
            cause = "only the typical conditions meet the goal in the hours requested: at the design conditions"
        else:
            level = Level.INFEASIBLE
            cause = "neither point meets the goal in the hours requested: even at the typical conditions"
            budget, plan = typical_budget, typical_plan
        if goal.snr is not None:
            head += (
                f"; {cause} {wording.hours(requested)} give {wording.snr(budget.snr)} against the goal "
                f"{wording.snr(goal.snr)} (it needs {wording.hours(plan.hours)})"
            )
        else:
            head += f"; {cause} it needs {wording.hours(plan.hours)} against {wording.hours(requested)} requested"
        texts = alternatives.texts(outcome)
        suggestion = "; ".join(texts)
        suggestion = suggestion[0].upper() + suggestion[1:] + "."
    if note:
        head += f"; {note}"
    figures = {
        "hours_needed": _round(outcome.plan.hours, 4),
        "hours_needed_typical": _round(outcome.typical_plan.hours, 4),
        "hours_requested": requested,
        "snr_expected": _round(outcome.budget.snr, 3),
        "snr_expected_typical": _round(outcome.typical_budget.snr, 3),
        "snr_goal": goal.snr,
        "exposures": outcome.plan.exposures,
        "exposure_time_s": _round(outcome.plan.exposure_time_s, 3),
        "exposures_in_hours_requested": outcome.budget.exposures,
        "exposure_time_s_in_hours_requested": _round(outcome.budget.exposure_time_s, 6),
        "hours_needed_faint": _round(faint_hours, 4) if faint_hours is not None else None,
        **_point_figures(outcome),
    }
    return Finding(
        check="sensitivity",
        level=level,
        message=head + ".",
        figures=figures,
        suggestion=suggestion,
        method=_sensitivity_method(outcome.design.percent),
    )


@functools.lru_cache(maxsize=16)
def _sensitivity_method(percent: float) -> str:
    """The sensitivity finding's method text (formatted once per design percentile)."""
    return (
        f"{_CCD_METHOD}; zero points Bessell (1979) / AB 3631 Jy (Oke & Gunn 1983); extinction 10^(-0.4 k X); "
        f"typical conditions: the median airmass, sky and seeing over the usable instants; design conditions: their "
        f"{wording.percentile(percent)} (moonlit sky Krisciunas & Schaefer 1991, log-normal seeing); feasible when the "
        "design conditions meet the goal in the hours requested, marginal when only the typical ones do"
    )


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
        "exposure_s": np.round(times, 3).tolist(),
        "snr": np.round(np.atleast_1d(snr), 4).tolist(),
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
    return float(f"{value:.{digits}g}")
