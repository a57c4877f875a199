"""The exposure findings: instrument and sensitivity, worded from :class:`~feasibility.engine.sensitivity.ExposureMeasure`.

:mod:`feasibility.engine.sensitivity` measures (S/N, exposure plans, saturation,
the priced alternatives); this module only turns those numbers into findings:
their levels, messages, suggestions and method texts. Every number goes through
:mod:`feasibility.engine.wording`. The atmosphere and image-quality findings come
from :mod:`feasibility.engine.exposure_checks`.

Levels of the sensitivity finding: feasible when the design point meets the goal
in the hours requested (marginal if it does so only at the bright end of the
magnitude error); marginal when only the typical point does; infeasible when
neither does.
"""

from __future__ import annotations

import functools
from typing import TYPE_CHECKING

from feasibility.documents import Detector, Instrument, ObservationRequest, Observatory
from feasibility.engine import spectral_curves, wording
from feasibility.engine.exposure_checks import (
    InstrumentProblem,
    atmosphere_finding,
    image_quality_finding,
    instrument_setup_problems,
)
from feasibility.results import Finding, Level, worst

if TYPE_CHECKING:
    from feasibility.engine.sensitivity import ExposureMeasure, ObservingPoint, Signal

__all__ = ["exposure_findings", "unchecked_finding"]

_SYSTEM_NAMES = {"vega": "Vega", "ab": "AB"}
_CCD_METHOD = "CCD equation (Merline & Howell 1995; Howell, Handbook of CCD Astronomy), sky from many pixels"


def unchecked_finding(request: ObservationRequest, instrument: Instrument, gap: str | None) -> Finding:
    """The ``unchecked`` instrument finding of a setup the engine cannot evaluate.

    ``gap`` is what :func:`~feasibility.engine.sensitivity.setup_gap` found missing
    (``filter``, ``grating`` or ``slit``); None means the wavelength is missing.
    """
    setup = request.setup
    messages = {
        "filter": f"{instrument.name} has no filter {setup.filter!r}.",
        "grating": f"{instrument.name} has no grating {setup.grating!r}.",
        "slit": f"No slit width given for {instrument.name}.",
    }
    return Finding(
        check="instrument",
        level=Level.UNCHECKED,
        message=messages.get(gap or "", "No wavelength: give the setup's central wavelength or the goal's wavelength."),
        suggestion="Name a filter, grating and slit that the instrument has.",
        method="the instrument's filters, gratings and slits in the observatory description",
    )


def exposure_findings(request: ObservationRequest, observatory: Observatory, instrument: Instrument, measure: ExposureMeasure) -> list[Finding]:
    """The atmosphere, image-quality, instrument and sensitivity findings of one measured request."""
    findings = [atmosphere_finding(measure.wavelength)]
    findings.append(
        image_quality_finding(
            request,
            observatory.climate.median_seeing_arcsec,
            measure.typical.airmass,
            measure.wavelength,
            observatory.telescope.aperture_m,
            measure.hours_usable,
        )
    )
    findings.append(_instrument_finding(request, instrument, measure))
    findings.append(_sensitivity_finding(request, instrument, measure))
    return findings


def _instrument_problems(request: ObservationRequest, instrument: Instrument, measure: ExposureMeasure) -> list[InstrumentProblem]:
    """The setup's problems, then saturation, then a goal too far for the semester's usable hours."""
    problems = instrument_setup_problems(request, instrument, measure.wavelength)
    if measure.saturated:
        safe, best = measure.safe, measure.best
        problems.append(
            InstrumentProblem(
                Level.INFEASIBLE,
                f"the brightest pixel reaches the saturation level, {wording.count(measure.level_e)} e "
                f"({_saturation_reason(instrument.detector)}), in {wording.seconds(safe)} at the best seeing "
                f"({wording.arcsec(measure.peak_signal.fwhm_arcsec)}, {wording.percentile(best.percent)}) and airmass "
                f"{wording.airmass(best.airmass)}: shorter than the shortest exposure {wording.seconds(instrument.min_exposure_s)}",
                f"The target saturates: {wording.magnitude(measure.dimming_mag or 0.0)} mag less light (a neutral-density filter "
                f"of at least that density, a narrower band or higher resolution) would make "
                f"{wording.seconds(instrument.min_exposure_s)} exposures safe; or defocus, or use a smaller telescope.",
            )
        )
    if measure.usable_budget is not None:
        problems.append(
            InstrumentProblem(
                Level.INFEASIBLE,
                f"the goal needs {wording.hours(measure.typical_plan.hours)} even at the typical conditions, but only "
                f"{wording.hours(measure.hours_usable)} are usable this semester: too faint for this telescope and instrument",
                f"Lower the S/N goal (the usable time gives {wording.snr(measure.usable_budget.snr)} "
                "at the typical conditions), bin or use a lower-resolution setup, or choose a larger telescope."
                if request.goal.snr is not None
                else "Shorten the exposure time asked for, or choose a larger telescope.",
            )
        )
    return problems


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


def _instrument_finding(request: ObservationRequest, instrument: Instrument, measure: ExposureMeasure) -> Finding:
    problems = _instrument_problems(request, instrument, measure)
    detector = instrument.detector
    best = measure.best
    figures = measure.instrument_figures(detector)
    method = (
        "instrument and grating wavelength ranges; saturation when the peak pixel (Gaussian profile, source + sky + dark) "
        f"at the {wording.percentile(best.percent)} seeing and airmass 1 reaches the smaller of the detector's "
        "linear range (a fraction of full well, common practice) and the converter's largest count × gain; spectra: "
        "resolution element = projected slit or seeing FWHM, whichever is narrower, never below the grating's sampling"
    )
    resolution = _resolution_text(measure.signal, measure.typical_signal)
    if not problems:
        message = f"{instrument.name} covers the setup; "
        suggestion = None
        if measure.safe < instrument.max_exposure_s:
            message += (
                f"single exposures stay below saturation ({wording.count(measure.level_e)} e, {_saturation_reason(detector)}) up to "
                f"{wording.seconds(measure.safe)} even at the best seeing ({wording.arcsec(measure.peak_signal.fwhm_arcsec)}, "
                f"{wording.percentile(best.percent)}) and airmass {wording.airmass(best.airmass)}, shorter than the "
                f"instrument's longest {wording.seconds(instrument.max_exposure_s)}"
            )
            suggestion = f"Keep single exposures at or below {wording.seconds(measure.safe)}; the plan here does."
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


def _resolution_text(signal: Signal, typical_signal: Signal) -> str | None:
    """For spectra: what sets the resolution element, and the resolving power at both points."""
    if signal.element_pixels is None or signal.resolving_power is None or typical_signal.resolving_power is None:
        return None
    return (
        f"resolution element {wording.pixels(typical_signal.element_pixels or 0.0)} at the typical seeing, "
        f"{wording.pixels(signal.element_pixels)} at the design seeing (the narrower of the projected slit and the "
        f"seeing image, at least the grating's sampling): resolving power {wording.count(typical_signal.resolving_power)} "
        f"and {wording.count(signal.resolving_power)}"
    )


def _unit(request: ObservationRequest, instrument: Instrument, signal: Signal, wavelength: float) -> str:
    """What the S/N refers to, e.g. 'in a 0.57" radius aperture'."""
    surface = request.brightness.kind == "surface"
    if instrument.kind == "imager":
        if surface or signal.aperture_radius_arcsec is None:
            return "per square arcsecond"
        return f"in a {wording.arcsec(signal.aperture_radius_arcsec)} radius aperture"
    if surface or signal.resolving_power is None or signal.aperture_radius_arcsec is None:
        return "per resolution element per arcsecond along the slit"
    delta = float(f"{wavelength / signal.resolving_power:.3g}")
    return f"per resolution element ({wording.nanometres(delta)}), {wording.arcsec(2.0 * signal.aperture_radius_arcsec)} extraction"


def _band_note(request: ObservationRequest, instrument: Instrument, measure: ExposureMeasure) -> str | None:
    """A note when the brightness is given in another band than the one observed (or carried to a spectrum's wavelength)."""
    brightness = request.brightness
    if instrument.kind != "imager":
        return spectral_curves.flux_note(brightness.band, brightness.system, measure.wavelength)
    if brightness.band != measure.observed_band:
        return (
            f"brightness is given in {brightness.band}, not the observed band {measure.observed_band}: "
            f"zero {brightness.band}-{measure.observed_band} colour assumed ({_SYSTEM_NAMES[brightness.system]} system)"
        )
    return None


def _conditions_text(point: ObservingPoint, signal: Signal, band: str) -> str:
    """E.g. 'design conditions (80th percentile: airmass 1.45, sky 21.20 mag/arcsec² in V, seeing 1.02")'."""
    which = "median" if point.name == "typical" else wording.percentile(point.percent)
    return (
        f"{point.name} conditions ({which}: airmass {wording.airmass(point.airmass)}, "
        f"sky {wording.magnitude(point.sky_mag_arcsec2)} mag/arcsec² in {band}, seeing {wording.arcsec(signal.fwhm_arcsec)})"
    )


def _alternative_texts(request: ObservationRequest, measure: ExposureMeasure) -> list[str]:
    """'request 2.5 h', 'accept S/N 22 in 2.0 h', 'airmass limit 1.30: at most 1.8 h', 'dark time ...: S/N 24 in 2.0 h'."""
    requested = request.hours_requested
    texts = [f"request {wording.hours(measure.plan.hours)}"]
    if request.goal.snr is not None:
        texts.append(f"accept {wording.snr(measure.budget.snr)} in {wording.hours(requested)}")
    alternatives = measure.alternatives
    if alternatives is not None and alternatives.airmass_limit is not None:
        # The design airmass of a tighter limit is at most the limit: an upper bound on the hours.
        change = alternatives.airmass_limit
        texts.append(f"airmass limit {wording.airmass(change.value)}: at most {wording.hours(change.hours)} (fewer hours observable)")
    if alternatives is not None and alternatives.moon_free_sky is not None:
        change = alternatives.moon_free_sky
        texts.append(
            f"dark time with the Moon down (sky {wording.magnitude(change.value)} mag/arcsec²): {wording.snr(change.snr)} "
            f"in {wording.hours(requested)}, {wording.hours(change.hours)} for the goal"
        )
    return texts


def _sensitivity_finding(request: ObservationRequest, instrument: Instrument, measure: ExposureMeasure) -> Finding:
    requested = request.hours_requested
    goal = request.goal
    plan, typical_plan, budget, typical_budget = measure.plan, measure.typical_plan, measure.budget, measure.typical_budget
    faint_hours = measure.faint_hours
    band = measure.sky_band
    if goal.snr is not None:
        wanted = f"{wording.snr(goal.snr)} {_unit(request, instrument, measure.signal, measure.wavelength)}"
    else:
        wanted = f"{wording.seconds(float(goal.exposure_time_s or 0.0))} of exposure"
    design_text = _conditions_text(measure.design, measure.signal, band)
    typical_text = _conditions_text(measure.typical, measure.typical_signal, band)
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
        suggestion = "; ".join(_alternative_texts(request, measure))
        suggestion = suggestion[0].upper() + suggestion[1:] + "."
    note = _band_note(request, instrument, measure)
    if measure.saturated:
        note = "; ".join(filter(None, [note, "these figures assume shortest exposures, which saturate"]))
    if note:
        head += f"; {note}"
    return Finding(
        check="sensitivity",
        level=level,
        message=head + ".",
        figures=measure.sensitivity_figures(request),
        suggestion=suggestion,
        method=_sensitivity_method(measure.design.percent),
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
