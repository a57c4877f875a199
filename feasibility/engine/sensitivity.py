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
- Slit spectra: per resolution element Δλ = λ/R, spanning the grating's pixels
  per resolution element; slit transmission of the Gaussian profile through the
  slit width; extraction over 1.346 FWHM along the slit.
- Seeing: the site's median (X^0.6, λ^-0.2, common practice) with the Airy FWHM
  in quadrature, or the request's image-quality limit when that is finer.
- Exposures: split by the instrument's longest exposure and by saturation (the
  peak pixel, source plus sky plus dark, stays under 80 % of full well, common
  practice for linearity); overheads add readout per exposure and acquisition
  per visit.
- Levels (common practice): hours needed within the hours requested is feasible;
  up to 25 % more (S/N within about 11 % of the goal) or within the hours only
  at the bright end of the magnitude error is marginal; beyond is infeasible.

References
----------
Merline, W. J. & Howell, S. B. 1995, Experimental Astronomy 6, 163.
Howell, S. B., *Handbook of CCD Astronomy*, Cambridge University Press.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from feasibility.documents import Instrument, Observatory, ObservationRequest
from feasibility.engine import photometry, spectral_curves
from feasibility.engine.conditions import Conditions, wavelength_for
from feasibility.engine.exposure_checks import (
    InstrumentProblem,
    atmosphere_finding,
    diffraction_fwhm_arcsec,
    image_quality_finding,
    instrument_setup_problems,
    seeing_fwhm_arcsec,
)
from feasibility.results import Finding, Level, worst

__all__ = [
    "APERTURE_RADIUS_FWHM",
    "SATURATION_FRACTION",
    "ExposureAssessment",
    "ExposurePlan",
    "Signal",
    "assess_exposure",
    "ccd_snr",
    "central_pixel_fraction",
    "encircled_fraction_gaussian",
    "exposures_for_snr",
    "slit_transmission_gaussian",
]

#: Aperture radius in FWHM: the S/N optimum for a Gaussian in the background-limited regime (1.585 σ).
APERTURE_RADIUS_FWHM = 0.673
#: Fraction of full well the peak pixel may reach (common practice: stay in the linear range).
SATURATION_FRACTION = 0.8
#: Hours needed over hours requested that is still marginal rather than infeasible (common practice here).
MARGINAL_HOURS_RATIO = 1.25
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

    def snr(self, total_s: np.ndarray | float, exposures: np.ndarray | float) -> np.ndarray | float:
        """S/N after ``exposures`` exposures summing to ``total_s`` seconds."""
        return ccd_snr(self.source_e_s, self.n_pix, self.sky_e_s_pix, self.dark_e_s_pix, self.read_noise_e, total_s, exposures)


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
    airmass = max(conditions.airmass_median, 1.0)
    findings = [atmosphere_finding(wavelength)]
    findings.append(
        image_quality_finding(
            request, climate.median_seeing_arcsec, airmass, wavelength, observatory.telescope.aperture_m, conditions.hours_usable
        )
    )
    signal, note = _signal(request, observatory, instrument, conditions, wavelength, airmass, request.brightness.magnitude)
    problems = instrument_setup_problems(request, instrument, wavelength)

    longest = min(instrument.max_exposure_s, SATURATION_FRACTION * instrument.detector.full_well_e / signal.peak_e_s_pix)
    saturated = longest < instrument.min_exposure_s
    if saturated:
        problems.append(
            InstrumentProblem(
                Level.INFEASIBLE,
                f"the brightest pixel reaches {SATURATION_FRACTION:.0%} of full well in {longest:.3g} s, "
                f"shorter than the shortest exposure {instrument.min_exposure_s:g} s",
                "The target saturates: use a neutral-density filter, a narrower band or higher resolution, "
                "defocus, or a smaller telescope.",
            )
        )
        longest = instrument.min_exposure_s

    plan = _plan_for_goal(request, instrument, signal, longest)
    budget = _plan_for_hours(request.hours_requested, instrument, signal, longest)
    if conditions.hours_usable > 0 and plan.hours > conditions.hours_usable:
        problems.append(
            InstrumentProblem(
                Level.INFEASIBLE,
                f"the goal needs {plan.hours:.3g} h but only {conditions.hours_usable:.3g} h are usable this semester: "
                "too faint for this telescope and instrument",
                "Lower the S/N goal, bin or use a lower-resolution setup, or choose a larger telescope.",
            )
        )
    findings.append(_instrument_finding(problems, instrument, signal, longest))

    faint_hours = None
    if request.brightness.error:
        faint_signal, _ = _signal(
            request, observatory, instrument, conditions, wavelength, airmass, request.brightness.magnitude + request.brightness.error
        )
        faint_hours = _plan_for_goal(request, instrument, faint_signal, longest).hours
    if saturated:
        note = "; ".join(filter(None, [note, "these figures assume shortest exposures, which saturate"]))
    findings.append(_sensitivity_finding(request, signal, plan, budget, faint_hours, note))

    figures: dict[str, Any] = {
        "hours_needed": _round(plan.hours, 4),
        "snr_expected": _round(budget.snr, 3),
        "snr_goal": request.goal.snr,
        "source_rate_e_s": _round(signal.source_e_s, 5),
        "sky_rate_e_s_pix": _round(signal.sky_e_s_pix, 5),
        "dark_e_s_pix": signal.dark_e_s_pix,
        "read_noise_e": signal.read_noise_e,
        "pixels": _round(signal.n_pix, 3),
        "exposure_time_s": _round(plan.exposure_time_s, 3),
        "exposures": plan.exposures,
        "visits": plan.visits,
        "exposure_time_s_max": _round(longest, 3),
        "seeing_arcsec": _round(signal.fwhm_arcsec, 3),
        "airmass": _round(airmass, 3),
        "wavelength_nm": wavelength,
        "aperture_radius_arcsec": _round(signal.aperture_radius_arcsec, 3),
        "enclosed_fraction": _round(signal.enclosed_fraction, 4),
        "slit_loss": None if signal.slit_transmission is None else _round(1.0 - signal.slit_transmission, 4),
    }
    return ExposureAssessment(findings, figures, {"snr_curve": _snr_curve(request, signal, plan, budget, longest)})


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


def _signal(
    request: ObservationRequest,
    observatory: Observatory,
    instrument: Instrument,
    conditions: Conditions,
    wavelength: float,
    airmass: float,
    magnitude: float,
) -> tuple[Signal, str | None]:
    """Electron rates for ``magnitude``, and a note when the brightness band is not the observed band."""
    climate, detector = observatory.climate, instrument.detector
    telescope = observatory.telescope
    area = photometry.collecting_area_m2(telescope.aperture_m, telescope.central_obstruction)
    sky_band = climate.bands[conditions.sky_band] if conditions.sky_band in climate.bands else None
    if instrument.kind == "imager":
        item = instrument.filter_named(request.setup.filter or "")
        assert item is not None  # _missing_setup ruled this out
        observed_band, zero_point = item.band, item.zero_point_jy
        bandwidth = item.width_nm / item.wavelength_nm
        throughput = item.throughput or instrument.throughput
        extinction = climate.bands[item.band].extinction_mag_per_airmass
        sky_zero_point = zero_point if sky_band is None or item.band == conditions.sky_band else sky_band.zero_point_jy
        sky_mag = conditions.sky_mag_arcsec2
    else:
        grating = instrument.grating_named(request.setup.grating or "")
        assert grating is not None
        # Zero point, extinction and sky as smooth curves at the wavelength (spectral_curves), not the nearest band's.
        spectrum = spectral_curves.spectrum_photometry(observatory, wavelength, conditions)
        observed_band, zero_point = spectrum.label, spectrum.zero_point_jy
        bandwidth = 1.0 / grating.resolving_power
        throughput = grating.throughput or instrument.throughput
        extinction = spectrum.extinction_mag_per_airmass
        sky_zero_point, sky_mag = zero_point, spectrum.sky_mag_arcsec2

    brightness = request.brightness
    note = None
    if instrument.kind != "imager":
        note = spectral_curves.flux_note(brightness.band, brightness.system, wavelength)
    elif brightness.band != observed_band:
        note = (
            f"brightness is given in {brightness.band}, not the observed band {observed_band}: "
            f"zero {brightness.band}-{observed_band} colour assumed ({_SYSTEM_NAMES[brightness.system]} system)"
        )
    rate = photometry.source_rate(
        magnitude, brightness.system, zero_point, bandwidth, area, throughput, extinction, airmass
    )
    sky_arcsec2 = photometry.sky_rate_per_arcsec2(sky_mag, sky_zero_point, bandwidth, area, throughput)
    fwhm = _delivered_fwhm(request, climate.median_seeing_arcsec, airmass, wavelength, telescope.aperture_m)
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
            unit=f"in a {radius:.2f}\" radius aperture", **common,
        )
        return signal, note

    grating = instrument.grating_named(request.setup.grating or "")
    assert grating is not None and request.setup.slit_arcsec is not None
    slit = request.setup.slit_arcsec
    per_pixel_spectral = 1.0 / grating.pixels_per_resolution_element
    sky_pix = sky_arcsec2 * slit * pixel * per_pixel_spectral
    if extended:
        signal = Signal(
            source_e_s=rate * slit, sky_e_s_pix=sky_pix, n_pix=grating.pixels_per_resolution_element / pixel,
            peak_e_s_pix=rate * slit * pixel * per_pixel_spectral + sky_pix + dark,
            aperture_radius_arcsec=None, enclosed_fraction=1.0, slit_transmission=None,
            unit="per resolution element per arcsecond along the slit", **common,
        )
        return signal, note
    transmission = slit_transmission_gaussian(slit, fwhm)
    height = 2.0 * APERTURE_RADIUS_FWHM * fwhm
    if detector.slit_length_arcsec is not None:
        height = min(height, detector.slit_length_arcsec)
    along = slit_transmission_gaussian(height, fwhm)
    signal = Signal(
        source_e_s=rate * transmission * along, sky_e_s_pix=sky_pix,
        n_pix=grating.pixels_per_resolution_element * max(height / pixel, 1.0),
        peak_e_s_pix=rate * transmission * per_pixel_spectral * slit_transmission_gaussian(pixel, fwhm) + sky_pix + dark,
        aperture_radius_arcsec=height / 2.0, enclosed_fraction=along, slit_transmission=transmission,
        unit=f"per resolution element ({wavelength / grating.resolving_power:.3g} nm), {height:.2f}\" extraction", **common,
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
    return ExposurePlan(count, length, hours, visits, float(signal.snr(count * length, count)))


def _hours_with_overheads(instrument: Instrument, count: int, length: float) -> tuple[float, int]:
    """Hours for ``count`` exposures of ``length`` s with readout each and acquisition per visit."""
    overheads = instrument.overheads
    on_sky = count * (length + overheads.readout_s)
    visits = max(1, math.ceil(on_sky / (overheads.visit_hours * 3600.0) - 1e-9))
    return (on_sky + visits * overheads.acquisition_s) / 3600.0, visits


def _instrument_finding(
    problems: list[InstrumentProblem], instrument: Instrument, signal: Signal, longest: float
) -> Finding:
    figures = {
        "saturation_time_s": _round(SATURATION_FRACTION * instrument.detector.full_well_e / signal.peak_e_s_pix, 4),
        "peak_e_s_pix": _round(signal.peak_e_s_pix, 4),
        "full_well_e": instrument.detector.full_well_e,
        "exposure_time_s_max": _round(longest, 3),
    }
    method = (
        f"instrument and grating wavelength ranges; saturation when the peak pixel (Gaussian profile, source + sky + dark) "
        f"reaches {SATURATION_FRACTION:.0%} of full well (common practice)"
    )
    if not problems:
        return Finding(
            check="instrument",
            level=Level.FEASIBLE,
            message=f"{instrument.name} covers the setup; exposures up to {longest:.4g} s stay below saturation.",
            figures=figures,
            method=method,
        )
    level = worst([p.level for p in problems])
    message = "; ".join(p.message for p in problems)
    return Finding(
        check="instrument",
        level=level,
        message=message[0].upper() + message[1:] + ".",
        figures=figures,
        suggestion=next((p.suggestion for p in problems if p.level is level and p.suggestion), None),
        method=method,
    )


def _sensitivity_finding(
    request: ObservationRequest,
    signal: Signal,
    plan: ExposurePlan,
    budget: ExposurePlan,
    faint_hours: float | None,
    note: str | None,
) -> Finding:
    requested = request.hours_requested
    ratio = plan.hours / requested
    goal = request.goal
    if goal.snr is not None:
        wanted = f"S/N {goal.snr:g} {signal.unit}"
    else:
        wanted = f"{goal.exposure_time_s:g} s of exposure"
    head = (
        f"{wanted} needs {_hours(plan.hours)} ({plan.exposures} × {plan.exposure_time_s:.4g} s with overheads); "
        f"{requested:g} h requested give S/N {budget.snr:.3g}"
    )
    suggestion = None
    if ratio <= 1.0:
        level = Level.FEASIBLE
        if faint_hours is not None and faint_hours > requested:
            level = Level.MARGINAL
            head += f"; at the faint end of the magnitude error it needs {_hours(faint_hours)}"
            suggestion = "Add time for the magnitude uncertainty, or confirm the brightness."
        elif ratio < 0.5:
            suggestion = f"The goal needs under half the hours requested; consider asking for about {plan.hours:.2g} h."
    elif ratio <= MARGINAL_HOURS_RATIO:
        level = Level.MARGINAL
        suggestion = f"Request {plan.hours:.3g} h, or accept S/N {budget.snr:.3g}."
    else:
        level = Level.INFEASIBLE
        suggestion = f"Request {plan.hours:.3g} h, lower the goal, or choose a less demanding setup."
    if note:
        head += f"; {note}"
    figures = {
        "hours_needed": _round(plan.hours, 4),
        "hours_requested": requested,
        "snr_expected": _round(budget.snr, 3),
        "snr_goal": goal.snr,
        "exposures": plan.exposures,
        "exposure_time_s": _round(plan.exposure_time_s, 3),
        "hours_needed_faint": _round(faint_hours, 4) if faint_hours is not None else None,
    }
    return Finding(
        check="sensitivity",
        level=level,
        message=head + ".",
        figures=figures,
        suggestion=suggestion,
        method=(
            f"{_CCD_METHOD}; zero points Bessell (1979) / AB 3631 Jy (Oke & Gunn 1983); extinction 10^(-0.4 k X) "
            f"at the median airmass; feasible within the hours requested, marginal up to {MARGINAL_HOURS_RATIO:g}× "
            "(common practice)"
        ),
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


def _hours(hours: float) -> str:
    if not math.isfinite(hours):
        return "unbounded time"
    return f"{hours:.3g} h"
