"""The conditions a verdict must hold under: typical and design points, worst-case saturation, slit-limited resolution.

Expected values come from outside references named beside each assertion (the
CCD equation of Merline & Howell 1995 and Howell's Handbook of CCD Astronomy,
Bessell 1979 zero points, standard normal tables, Gaussian profile identities,
for spectra also Fritsch & Carlson 1980 interpolation and Bucholtz 1995 Rayleigh
scattering; see docs/references.md). The demo documents and the hand-built observatory of
test_exposure.py are only inputs.
"""

from __future__ import annotations

import copy
import math
from importlib import resources
from pathlib import Path
from typing import Any

import pytest

from feasibility.documents import Instrument, InstrumentSchedule, ObservationRequest, Observatory, Proposal, load_document, parse_document
from feasibility.engine import check_proposal, wording
from feasibility.engine.conditions import Conditions
from feasibility.engine.sensitivity import (
    assess_exposure,
    resolution_element_pixels,
    saturation_level_e,
)
from feasibility.engine.spectral_curves import curves_for
from feasibility.results import Level, RequestResult
from test_exposure import OBSERVATORY, _request  # the hand-built observatory (input only)

ARCSEC_PER_RAD = 206264.806
#: Standard normal quantiles (normal distribution tables): 80th and 10th percentiles.
Z_80 = 0.8416
Z_10 = -1.2816
#: σ(ln FWHM) of the site's seeing (common practice, exposure_checks.SEEING_LOG_SPREAD).
SEEING_SPREAD = 0.35

PROPOSALS = sorted(Path(str(resources.files("feasibility") / "data" / "proposals")).glob("*.yaml"))


@pytest.fixture(scope="module")
def demo_results(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> list[tuple[ObservationRequest, RequestResult]]:
    """Every demo request with its result from the real engine on the demo observatory."""
    pairs = []
    for path in PROPOSALS:
        proposal = load_document(Proposal, path)
        result = check_proposal(proposal, demo_observatory, demo_schedule)
        pairs.extend(zip(proposal.requests, result.requests))
    return pairs


def _observatory(**changes: Any) -> Observatory:
    data = copy.deepcopy(OBSERVATORY)
    for path, value in changes.items():
        *parents, last = path.split(".")
        node: Any = data
        for key in parents:
            node = node[int(key)] if key.isdigit() else node[key]
        node[last] = value
    return parse_document(Observatory, data)


def _finding(result: Any, check: str):
    return next(f for f in result.findings if f.check == check)


# --- the design point against the published CCD equation ---------------------------------------


def _ccd_snr_by_hand(observatory: Observatory, instrument: Instrument, request: ObservationRequest, figures: dict[str, Any]) -> float:
    """S/N of an imaging request at its design conditions, written out from the published equations.

    CCD equation (Merline & Howell 1995; Howell, Handbook of CCD Astronomy), sky from many pixels:
    S/N = N* / sqrt(N* + n_pix (N_S + N_D + N_exp N_R²)). Photons: f_ν = F0 10^(-0.4 m) with Bessell (1979) zero
    points, 1 Jy = 1.51e7 photons s⁻¹ m⁻² (Δλ/λ)⁻¹ (Bessell 1979), extinction 10^(-0.4 k X). Seeing: the site's
    median × exp(σ z₈₀) (log-normal, common practice) × X^0.6 × (λ/500 nm)^-0.2 (common practice), Airy FWHM
    1.029 λ/D in quadrature. Aperture radius 0.673 FWHM, Gaussian encircled energy 1 − exp(−r²/2σ²).
    """
    item = instrument.filter_named(request.setup.filter or "")
    assert item is not None
    band = observatory.climate.bands[item.band]
    telescope, detector = observatory.telescope, instrument.detector
    airmass, sky = figures["airmass_design"], figures["sky_mag_arcsec2_design"]
    seeing = observatory.climate.median_seeing_arcsec * math.exp(SEEING_SPREAD * Z_80) * airmass**0.6 * (item.wavelength_nm / 500) ** -0.2
    diffraction = 1.029 * item.wavelength_nm * 1e-9 / telescope.aperture_m * ARCSEC_PER_RAD
    fwhm = math.hypot(seeing, diffraction)
    if request.constraints.max_seeing_arcsec is not None:
        fwhm = max(min(fwhm, request.constraints.max_seeing_arcsec), diffraction)
    area = math.pi / 4 * telescope.aperture_m**2 * (1 - telescope.central_obstruction**2)
    throughput = item.throughput or instrument.throughput
    per_jy = 1.51e7 * (item.width_nm / item.wavelength_nm) * area * throughput
    zero_point = 3631.0 if request.brightness.system == "ab" else item.zero_point_jy
    rate = zero_point * 10 ** (-0.4 * request.brightness.magnitude) * per_jy * 10 ** (-0.4 * band.extinction_mag_per_airmass * airmass)
    pixel = detector.pixel_scale_arcsec
    if request.brightness.kind == "surface":
        enclosed, n_pix = 1.0, 1.0 / pixel**2
    else:
        sigma = fwhm / (2 * math.sqrt(2 * math.log(2)))
        radius = 0.673 * fwhm
        enclosed, n_pix = 1 - math.exp(-(radius**2) / (2 * sigma**2)), math.pi * radius**2 / pixel**2
    sky_pix = item.zero_point_jy * 10 ** (-0.4 * sky) * per_jy * pixel**2
    count, length = figures["exposures_in_hours_requested"], figures["exposure_time_s_in_hours_requested"]
    t = count * length
    source = rate * enclosed * t
    noise = math.sqrt(source + n_pix * (sky_pix * t + detector.dark_current_e_s_pix * t + count * detector.read_noise_e**2))
    return source / noise


def test_design_snr_of_demo_imaging_matches_the_ccd_equation(
    demo_observatory: Observatory, demo_results: list[tuple[ObservationRequest, RequestResult]]
) -> None:
    checked = 0
    for request, result in demo_results:
        instrument = demo_observatory.instrument_named(request.instrument)
        if instrument is None or instrument.kind != "imager" or request.goal.snr is None or result.verdict is Level.UNCHECKED:
            continue
        figures = _finding(result, "sensitivity").figures
        motion = next((f.figures for f in result.findings if f.check == "motion"), {})
        if motion.get("magnitude_used") is not None:  # a moving body: the magnitude its ephemeris gives on the usable nights
            brightness = request.brightness.model_copy(update={"magnitude": motion["magnitude_used"], "band": motion["magnitude_band"]})
            request = request.model_copy(update={"brightness": brightness})
        expected = _ccd_snr_by_hand(demo_observatory, instrument, request, figures)
        # Merline & Howell (1995) / Howell, Handbook of CCD Astronomy: the CCD equation at the same conditions.
        assert figures["snr_expected"] == pytest.approx(expected, rel=0.02), request.label
        checked += 1
    assert checked >= 8  # every imaging request of the demo proposals with an S/N goal


#: Bessell (1979): Jy of a Vega 0-magnitude star (docs/references.md, "Photometry and zero points").
BESSELL_1979_JY = {"U": 1810.0, "B": 4260.0, "V": 3640.0, "R": 3080.0, "I": 2550.0}


def _pchip_ln_f_lambda(wavelength_nm: float, nodes: list[tuple[float, float]]) -> float:
    """Zero point (Jy) at ``wavelength_nm`` by monotone cubic Hermite interpolation of ln f_λ (f_λ ∝ f_ν/λ²) through
    ``nodes`` (wavelength, Jy), written out from Fritsch & Carlson (1980) with the interior slopes of Fritsch & Butland
    (1984) (weighted harmonic mean of the neighbouring secants). Only interior intervals: no end-slope rule needed."""
    xs = [w for w, _ in nodes]
    ys = [math.log(jy) - 2 * math.log(w) for w, jy in nodes]
    i = next(k for k in range(1, len(xs) - 2) if xs[k] <= wavelength_nm <= xs[k + 1])
    secant = [(ys[k + 1] - ys[k]) / (xs[k + 1] - xs[k]) for k in range(len(xs) - 1)]

    def slope(k: int) -> float:
        h0, h1 = xs[k] - xs[k - 1], xs[k + 1] - xs[k]
        if secant[k - 1] * secant[k] <= 0:
            return 0.0
        w1, w2 = 2 * h1 + h0, h1 + 2 * h0
        return (w1 + w2) / (w1 / secant[k - 1] + w2 / secant[k])

    h = xs[i + 1] - xs[i]
    t = (wavelength_nm - xs[i]) / h
    y = (2 * t**3 - 3 * t**2 + 1) * ys[i] + (t**3 - 2 * t**2 + t) * h * slope(i) + (-2 * t**3 + 3 * t**2) * ys[i + 1] + (t**3 - t**2) * h * slope(i + 1)
    return math.exp(y + 2 * math.log(wavelength_nm))


def _spectrum_snr_by_hand(
    observatory: Observatory, instrument: Instrument, request: ObservationRequest, figures: dict[str, Any], extinction: float
) -> tuple[float, float]:
    """S/N per resolution element of a slit spectrum of a point source at its design conditions, and the element's pixels.

    CCD equation (Merline & Howell 1995; Howell, Handbook of CCD Astronomy) as for imaging, over the element's pixels
    along the dispersion times the extraction height along the slit. Photons per grating element Δλ = λ/R: f_ν (Δλ/λ)
    × 1.51e7 (Bessell 1979), f_ν from the Bessell (1979) zero points interpolated in ln f_λ (PCHIP, as
    docs/references.md and spectral_curves.py document). Seeing as for imaging at the central wavelength. Slit: a
    centred Gaussian passes erf(w / (2√2 σ)) of its light through a slit of width w, and erf(h / (2√2 σ)) within an
    extraction of height h = 2 × 0.673 FWHM along it (Gaussian identities). Element: the projected slit or the image,
    whichever is narrower, never below the grating's sampling (docs/references.md, "Optics and spectra").
    """
    setup, telescope, detector = request.setup, observatory.telescope, instrument.detector
    grating = instrument.grating_named(setup.grating or "")
    assert grating is not None and setup.slit_arcsec is not None and setup.central_wavelength_nm is not None
    wavelength, slit, pixel = setup.central_wavelength_nm, setup.slit_arcsec, detector.pixel_scale_arcsec
    airmass, sky = figures["airmass_design"], figures["sky_mag_arcsec2_design"]
    seeing = observatory.climate.median_seeing_arcsec * math.exp(SEEING_SPREAD * Z_80) * airmass**0.6 * (wavelength / 500) ** -0.2
    diffraction = 1.029 * wavelength * 1e-9 / telescope.aperture_m * ARCSEC_PER_RAD
    fwhm = math.hypot(seeing, diffraction)
    if request.constraints.max_seeing_arcsec is not None:
        fwhm = max(min(fwhm, request.constraints.max_seeing_arcsec), diffraction)
    sigma = fwhm / (2 * math.sqrt(2 * math.log(2)))
    sampling = grating.pixels_per_resolution_element
    element = max(sampling, min(slit, fwhm) / pixel)
    height = 2 * 0.673 * fwhm
    if detector.slit_length_arcsec is not None:
        height = min(height, detector.slit_length_arcsec)
    # Bessell (1979) zero points at the site's band wavelengths, interpolated to the central wavelength.
    bands = sorted((b.wavelength_nm, BESSELL_1979_JY[name]) for name, b in observatory.climate.bands.items() if name in BESSELL_1979_JY)
    zero_point = 3631.0 if request.brightness.system == "ab" else _pchip_ln_f_lambda(wavelength, bands)
    sky_zero_point = _pchip_ln_f_lambda(wavelength, bands)  # the sky figure is a Vega magnitude at the wavelength
    area = math.pi / 4 * telescope.aperture_m**2 * (1 - telescope.central_obstruction**2)
    throughput = grating.throughput or instrument.throughput
    per_jy = 1.51e7 / grating.resolving_power * area * throughput  # e s⁻¹ Jy⁻¹ in one grating element
    rate = zero_point * 10 ** (-0.4 * request.brightness.magnitude) * per_jy * 10 ** (-0.4 * extinction * airmass)
    source_rate = rate * math.erf(slit / (2 * math.sqrt(2) * sigma)) * math.erf(height / (2 * math.sqrt(2) * sigma)) * element / sampling
    sky_pix = sky_zero_point * 10 ** (-0.4 * sky) * per_jy * slit * pixel / sampling  # a pixel sees the whole slit width
    n_pix = element * max(height / pixel, 1.0)
    count, length = figures["exposures_in_hours_requested"], figures["exposure_time_s_in_hours_requested"]
    t = count * length
    source = source_rate * t
    noise = math.sqrt(source + n_pix * (sky_pix * t + detector.dark_current_e_s_pix * t + count * detector.read_noise_e**2))
    return source / noise, element


def test_design_snr_of_demo_spectra_matches_the_ccd_equation(
    demo_observatory: Observatory, demo_results: list[tuple[ObservationRequest, RequestResult]]
) -> None:
    checked = 0
    climate = demo_observatory.climate
    for request, result in demo_results:
        instrument = demo_observatory.instrument_named(request.instrument)
        if instrument is None or instrument.kind != "slit_spectrograph" or request.goal.snr is None or result.verdict is Level.UNCHECKED:
            continue
        wavelength = request.setup.central_wavelength_nm
        assert wavelength is not None and request.brightness.kind != "surface"
        if not instrument.min_wavelength_nm <= wavelength <= instrument.max_wavelength_nm:
            # Outside the instrument (feige110-uv, 290 nm): the instrument finding says infeasible, and the zero point
            # there is an extrapolation beyond the bluest published band, not a published value.
            assert _finding(result, "instrument").level is Level.INFEASIBLE, request.label
            continue
        for name, jy in BESSELL_1979_JY.items():
            assert climate.bands[name].zero_point_jy == jy  # the demo's zero points are Bessell (1979)'s
        # The design sky is the sky at the central wavelength (not carried from a band).
        assert result.figures["sky_band"] == f"{wavelength:g} nm", request.label
        # Extinction at the wavelength: the documented model (spectral_curves.py: Rayleigh + ozone + aerosol, through
        # the site's band extinctions), checked first against published bounds: (1) between the site's extinctions of
        # the bands either side (Krisciunas et al. 1987-like values; extinction changes monotonically between B and R);
        # (2) above the Rayleigh optical depth alone, Bucholtz (1995) at the site's pressure (U.S. Standard Atmosphere
        # 1976), × 1.0857 mag; (3) within 0.02 mag/airmass of a power law through the two bands (common practice; the
        # ozone Chappuis band, about 0.04 mag at its 600 nm peak for 300 DU, bends it). Then the test uses that value.
        extinction = curves_for(demo_observatory).extinction(wavelength)
        nodes = sorted((b.wavelength_nm, b.extinction_mag_per_airmass) for n, b in climate.bands.items() if n in BESSELL_1979_JY)
        (w1, k1), (w2, k2) = next((a, b) for a, b in zip(nodes, nodes[1:]) if a[0] <= wavelength <= b[0])
        assert min(k1, k2) <= extinction <= max(k1, k2), request.label
        um = wavelength / 1000
        a, b, c, d = (6.50362e-3, 3.55212, 1.35579, 0.11563) if um <= 0.5 else (8.64627e-3, 3.99668, 1.10298e-3, 2.71393e-2)
        pressure = 1013.25 * (1 - 2.25577e-5 * demo_observatory.site.elevation_m) ** 5.25588
        assert extinction > 1.0857 * a * um ** -(b + c * um + d / um) * pressure / 1013.25, request.label
        power_law = k1 * (wavelength / w1) ** (math.log(k2 / k1) / math.log(w2 / w1))
        assert extinction == pytest.approx(power_law, abs=0.02), request.label

        figures = _finding(result, "sensitivity").figures
        expected, element = _spectrum_snr_by_hand(demo_observatory, instrument, request, figures, extinction)
        # Geometry (docs/references.md, "Optics and spectra"): the element at the design seeing.
        assert result.figures["resolution_element_pixels"] == pytest.approx(element, rel=2e-3), request.label
        # Merline & Howell (1995) / Howell, Handbook of CCD Astronomy: the CCD equation per resolution element.
        assert figures["snr_expected"] == pytest.approx(expected, rel=0.02), request.label
        checked += 1
    assert checked >= 2  # rgb-spectra (520 nm, R2500) and turnoff-spectra (600 nm, R600)


def test_design_conditions_are_never_better_than_typical(demo_results: list[tuple[ObservationRequest, RequestResult]]) -> None:
    # Percentiles are ordered: the 80th percentile of airmass, sky brightness and seeing is never below the median
    # (order statistics), so the design point never needs fewer hours nor reaches a higher S/N (CCD equation).
    for request, result in demo_results:
        if result.verdict is Level.UNCHECKED:
            continue
        f = result.figures
        assert f["airmass_design"] >= f["airmass_typical"], request.label
        assert f["sky_mag_arcsec2_design"] <= f["sky_mag_arcsec2_typical"], request.label  # brighter sky, fewer magnitudes
        assert f["seeing_design_arcsec"] >= f["seeing_typical_arcsec"], request.label
        assert f["hours_needed"] >= f["hours_needed_typical"], request.label
        assert f["snr_expected"] <= f["snr_expected_typical"], request.label


def test_higher_design_percentile_is_more_conservative(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    # Order statistics: a higher percentile of the same airmass, sky and seeing samples is never better.
    proposal = load_document(Proposal, PROPOSALS[0])
    hours = []
    for percent in (60.0, 80.0, 95.0):
        climate = demo_observatory.climate.model_copy(update={"design_percentile": percent})
        observatory = demo_observatory.model_copy(update={"climate": climate})
        request = check_proposal(proposal, observatory, demo_schedule).requests[0]
        hours.append((request.figures["airmass_design"], -request.figures["sky_mag_arcsec2_design"], request.figures["hours_needed"]))
        assert request.figures["design_percentile"] == percent
    assert hours[0] <= hours[1] <= hours[2] and all(a <= b for x, y in zip(hours, hours[1:]) for a, b in zip(x, y))


def test_design_seeing_is_the_log_normal_percentile() -> None:
    # Log-normal seeing (common practice): the 80th percentile is median × exp(σ z₈₀), z₈₀ = 0.8416 (normal tables);
    # at airmass 1 and 500 nm only the Airy FWHM 1.029 λ/D (2 m) is added in quadrature.
    conditions = Conditions(200.0, 100.0, 1.0, 1.0, 21.6, "V", airmass_design=1.0, sky_mag_arcsec2_design=21.6)
    observatory = _observatory()
    request = _request()
    figures = assess_exposure(request, observatory, observatory.instrument_named("CAM"), conditions).figures
    diffraction = 1.029 * 550e-9 / 2.0 * ARCSEC_PER_RAD
    natural = 1.0 * (550 / 500) ** -0.2
    assert figures["seeing_typical_arcsec"] == pytest.approx(math.hypot(natural, diffraction), rel=2e-3)
    assert figures["seeing_design_arcsec"] == pytest.approx(math.hypot(natural * math.exp(0.35 * Z_80), diffraction), rel=2e-3)


# --- levels and messages ----------------------------------------------------------------------------


def test_marginal_when_only_the_typical_point_meets_the_goal() -> None:
    # Levels (sensitivity.py): the requested hours lie between what the typical and the design conditions need.
    observatory = _observatory()
    conditions = Conditions(200.0, 100.0, 1.1, 1.0, 21.6, "V", airmass_design=1.5, sky_mag_arcsec2_design=20.6)
    instrument = observatory.instrument_named("CAM")
    probe = assess_exposure(_request(brightness={"magnitude": 23.0, "band": "V"}), observatory, instrument, conditions).figures
    typical, design = probe["hours_needed_typical"], probe["hours_needed"]
    assert typical < design
    for hours, level in (((typical + design) / 2, Level.MARGINAL), (design * 1.01, Level.FEASIBLE), (typical * 0.9, Level.INFEASIBLE)):
        request = _request(brightness={"magnitude": 23.0, "band": "V"}, hours_requested=round(hours, 3))
        result = assess_exposure(request, observatory, instrument, conditions)
        finding = _finding(result, "sensitivity")
        assert finding.level is level, (hours, finding.message)
        # The conditions used are named with their numbers (wording.py formats).
        assert "airmass 1.50" in finding.message and "airmass 1.10" in finding.message
        assert "sky 20.60 mag/arcsec²" in finding.message and "80th percentile" in finding.message
        if level is not Level.FEASIBLE:
            figures = finding.figures
            # The threshold missed, both numbers, and a suggestion computed by the engine with its figure.
            missed = figures["snr_expected"] if level is Level.MARGINAL else figures["snr_expected_typical"]
            assert f"give {wording.snr(missed)} against the goal S/N 50" in finding.message
            assert finding.suggestion is not None
            assert f"Request {wording.hours(figures['hours_needed'])}" in finding.suggestion
            assert f"accept {wording.snr(figures['snr_expected'])} in {wording.hours(hours)}" in finding.suggestion.replace(
                wording.hours(round(hours, 3)), wording.hours(hours)
            )
            assert "airmass limit 1.10: at most" in finding.suggestion  # the typical airmass rounded up to 0.1
            assert "dark time with the Moon down" in finding.suggestion  # the design sky is 1 mag brighter than dark


# --- saturation at the worst case --------------------------------------------------------------------


def test_saturation_level_is_the_linear_range_or_the_converter() -> None:
    # A 16-bit converter counts to 2^16 - 1 = 65,535 ADU; × gain gives electrons. Common practice: 80 % of full well.
    observatory = _observatory()
    camera = observatory.instrument_named("CAM")
    assert camera is not None
    assert saturation_level_e(camera.detector) == 65535.0  # gain 1: the converter, below 0.8 × 100,000 e
    assert saturation_level_e(camera.detector.model_copy(update={"gain_e_adu": 2.0})) == pytest.approx(80000.0)
    assert saturation_level_e(camera.detector.model_copy(update={"gain_e_adu": 2.0, "adc_bits": 14})) == 16383 * 2.0
    assert saturation_level_e(camera.detector.model_copy(update={"gain_e_adu": 2.0, "linearity_fraction": 0.5})) == 50000.0


def test_saturation_peak_is_the_analytic_gaussian_peak() -> None:
    # A circular Gaussian's central surface brightness is F / (2π σ²) (Gaussian identity); a pixel much smaller than
    # the FWHM holds that times its area. Worst case: 10th-percentile seeing, z₁₀ = -1.2816 (normal tables), airmass 1.
    observatory = _observatory(**{"instruments.0.detector.pixel_scale_arcsec": 0.02, "telescope.aperture_m": 20.0})
    camera = observatory.instrument_named("CAM")
    request = _request(brightness={"magnitude": 12.0, "band": "V"})
    conditions = Conditions(200.0, 100.0, 1.3, 1.0, 21.6, "V", airmass_design=1.6, sky_mag_arcsec2_design=21.0)
    result = assess_exposure(request, observatory, camera, conditions)
    finding = _finding(result, "instrument")
    natural = 1.0 * math.exp(0.35 * Z_10) * (550 / 500) ** -0.2  # airmass 1: no X^0.6 growth
    fwhm = math.hypot(natural, 1.029 * 550e-9 / 20.0 * ARCSEC_PER_RAD)
    sigma = fwhm / (2 * math.sqrt(2 * math.log(2)))
    # Bessell (1979): V = 12 through the 88 nm filter on a clear 20 m aperture, throughput 0.5, extinction at X = 1.
    total = 3640 * 10 ** (-0.4 * 12.0) * 1.51e7 * (88 / 550) * math.pi / 4 * 20.0**2 * 0.5 * 10 ** (-0.4 * 0.12)
    sky = 3640 * 10 ** (-0.4 * 21.0) * 1.51e7 * (88 / 550) * math.pi / 4 * 20.0**2 * 0.5 * 0.02**2
    peak = total / (2 * math.pi * sigma**2) * 0.02**2 + sky
    assert finding.figures["saturation_seeing_arcsec"] == pytest.approx(fwhm, rel=1e-3)
    assert finding.figures["peak_e_s_pix"] == pytest.approx(peak, rel=2e-3)
    safe = 65535.0 / peak
    assert finding.figures["saturation_time_s"] == pytest.approx(safe, rel=2e-3)
    # The safe exposure is reported, suggested, and the plan keeps to it.
    assert result.figures["exposure_time_s_max"] == pytest.approx(min(600.0, safe), rel=2e-3)
    if safe < 600.0:
        assert wording.seconds(finding.figures["saturation_time_s"]) in (finding.suggestion or "")
    assert result.figures["exposure_time_s"] <= result.figures["exposure_time_s_max"] * (1 + 1e-9)


def test_demo_saturation_is_checked_at_better_seeing_than_the_median(demo_results: list[tuple[ObservationRequest, RequestResult]]) -> None:
    # Log-normal seeing: the 10th percentile is exp(0.35 × -1.2816) = 0.64 of the median (normal tables), so the
    # worst-case peak of a seeing-limited star is higher and its safe exposure shorter than at the median.
    by_label = {request.label: result for request, result in demo_results}
    ks = _finding(by_label["gc-Ks"], "instrument").figures
    assert ks["saturation_seeing_arcsec"] < by_label["gc-Ks"].figures["seeing_typical_arcsec"]
    spica = _finding(by_label["spica-V"], "instrument")
    assert spica.level is Level.INFEASIBLE and "65,535 ADU" in spica.message  # KESTREL: 65,535 × 1.6 e < 0.8 × 150,000 e


# --- the slit and the resolution element ---------------------------------------------------------------


def test_resolution_element_is_the_slit_or_the_seeing_whichever_is_narrower() -> None:
    # Geometry: a 2.0" slit at 0.35"/pixel projects to 2.0 / 0.35 = 5.71 pixels; a 0.9" image inside it to 2.57 pixels;
    # neither below the grating's 2.5-pixel sampling. A uniformly filled slit (surface brightness) spans the slit.
    assert resolution_element_pixels(2.0, 3.0, 0.35, 2.5) == pytest.approx(2.0 / 0.35)
    assert resolution_element_pixels(2.0, 0.9, 0.35, 2.5) == pytest.approx(0.9 / 0.35)
    assert resolution_element_pixels(0.5, 0.9, 0.35, 2.5) == pytest.approx(2.5)
    assert resolution_element_pixels(2.0, 0.9, 0.35, 2.5, filled=True) == pytest.approx(2.0 / 0.35)


def test_wide_slit_lowers_the_resolving_power_and_widens_the_element() -> None:
    # R = λ/Δλ (definition): the grating's R = 1000 holds at its 2.5-pixel sampling; an element of n pixels has
    # Δλ n/2.5 times wider, so R × 2.5 / n. With seeing worse than the 1.0" slit (design seeing, 0.3"/pixel) the
    # element is the slit's 3.33 pixels; the S/N counts n pixels along the dispersion times the extraction height.
    observatory = _observatory()
    spec = observatory.instrument_named("SPEC")
    request = _request(
        instrument="SPEC",
        setup={"grating": "G1", "slit_arcsec": 1.0, "central_wavelength_nm": 600},
        brightness={"magnitude": 17.0, "band": "V"},
    )
    conditions = Conditions(200.0, 100.0, 1.2, 1.0, 20.9, "R", airmass_design=1.5, sky_mag_arcsec2_design=20.5)
    result = assess_exposure(request, observatory, spec, conditions)
    figures = result.figures
    element = 1.0 / 0.3
    assert figures["resolution_element_pixels"] == pytest.approx(element, rel=1e-3)  # figures keep 4 digits
    assert figures["resolving_power"] == pytest.approx(1000 * 2.5 / element, rel=1e-3)
    height = 2 * 0.673 * figures["seeing_arcsec"]  # extraction over 1.346 FWHM along the slit
    assert figures["pixels"] == pytest.approx(element * height / 0.3, rel=2e-3)
    message = _finding(result, "instrument").message
    assert f"resolving power {wording.count(figures['resolving_power_typical'])} and {wording.count(figures['resolving_power'])}" in message
    # A narrow slit keeps the grating's sampling.
    narrow = assess_exposure(request.model_copy(update={"setup": request.setup.model_copy(update={"slit_arcsec": 0.5})}), observatory, spec, conditions).figures
    assert narrow["resolution_element_pixels"] == pytest.approx(2.5) and narrow["resolving_power"] == pytest.approx(1000)
