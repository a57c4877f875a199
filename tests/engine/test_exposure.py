"""The exposure checks: CCD equation limits, profiles, diffraction, saturation and the findings' levels.

Each expected value names its outside reference. The observatory below is built
by hand for the tests; its numbers are only inputs, never expected values.
"""

from __future__ import annotations

import copy
import math
from typing import Any

import numpy as np
import pytest

from feasibility.documents import ObservationRequest, Observatory, parse_document
from feasibility.engine import photometry
from feasibility.engine.conditions import Conditions
from feasibility.engine.exposure_checks import (
    RAYLEIGH_FACTOR,
    atmosphere_finding,
    fraction_seeing_better,
    rayleigh_limit_rad,
    seeing_fwhm_arcsec,
)
from feasibility.engine.sensitivity import (
    APERTURE_RADIUS_FWHM,
    SATURATION_FRACTION,
    Signal,
    assess_exposure,
    ccd_snr,
    central_pixel_fraction,
    encircled_fraction_gaussian,
    exposures_for_snr,
    slit_transmission_gaussian,
)
from feasibility.results import Level

OBSERVATORY: dict[str, Any] = {
    "name": "Test Site",
    "site": {"name": "test", "latitude_deg": -30.0, "longitude_deg": -70.0, "elevation_m": 2500},
    "telescope": {"name": "test", "aperture_m": 2.0, "central_obstruction": 0.0},
    "climate": {
        "median_seeing_arcsec": 1.0,
        "bands": {
            "V": {"wavelength_nm": 550, "zero_point_jy": 3640, "sky_mag_arcsec2": 21.6, "extinction_mag_per_airmass": 0.12},
            "R": {"wavelength_nm": 640, "zero_point_jy": 3080, "sky_mag_arcsec2": 20.9, "extinction_mag_per_airmass": 0.08},
        },
    },
    "semesters": [{"name": "T", "first_night": "2027-04-01", "last_night": "2027-09-30"}],
    "instruments": [
        {
            "name": "CAM",
            "kind": "imager",
            "min_wavelength_nm": 320,
            "max_wavelength_nm": 1000,
            "throughput": 0.5,
            "filters": [{"name": "V", "band": "V", "wavelength_nm": 550, "width_nm": 88, "zero_point_jy": 3640}],
            "detector": {"read_noise_e": 5, "dark_current_e_s_pix": 0.0, "gain_e_adu": 1, "pixel_scale_arcsec": 0.3, "full_well_e": 100000},
            "min_exposure_s": 1,
            "max_exposure_s": 600,
            "overheads": {"readout_s": 20, "acquisition_s": 300, "visit_hours": 2},
        },
        {
            "name": "SPEC",
            "kind": "slit_spectrograph",
            "min_wavelength_nm": 360,
            "max_wavelength_nm": 1000,
            "throughput": 0.2,
            "gratings": [{"name": "G1", "resolving_power": 1000, "min_wavelength_nm": 400, "max_wavelength_nm": 800}],
            "slits_arcsec": [0.8, 1.0],
            "detector": {
                "read_noise_e": 3,
                "dark_current_e_s_pix": 0.0,
                "gain_e_adu": 1,
                "pixel_scale_arcsec": 0.3,
                "full_well_e": 100000,
                "slit_length_arcsec": 60,
            },
            "min_exposure_s": 1,
            "max_exposure_s": 1800,
            "overheads": {"readout_s": 30, "acquisition_s": 600, "visit_hours": 3},
        },
    ],
}

CONDITIONS = Conditions(hours_observable=200.0, hours_usable=100.0, airmass_median=1.0, airmass_min=1.0, sky_mag_arcsec2=21.6, sky_band="V")


def _observatory(**telescope: Any) -> Observatory:
    data = copy.deepcopy(OBSERVATORY)
    data["telescope"].update(telescope)
    return parse_document(Observatory, data)


def _request(**changes: Any) -> ObservationRequest:
    data: dict[str, Any] = {
        "label": "r",
        "target": {"name": "t", "ra": 150.0, "dec": -30.0},
        "instrument": "CAM",
        "setup": {"filter": "V"},
        "brightness": {"magnitude": 20.0, "band": "V"},
        "goal": {"snr": 50},
        "hours_requested": 2.0,
    }
    data.update(changes)
    return ObservationRequest.model_validate(data)


def _assess(request: ObservationRequest, observatory: Observatory | None = None, conditions: Conditions = CONDITIONS):
    observatory = observatory or _observatory()
    return assess_exposure(request, observatory, observatory.instrument_named(request.instrument), conditions)


def _finding(assessment, check: str):
    return next(f for f in assessment.findings if f.check == check)


# --- the CCD equation's limiting cases ------------------------------------------------------


def test_source_limited_snr_grows_as_sqrt_time() -> None:
    # Merline & Howell (1995) CCD equation (REFERENCES.md): with no background, S/N = sqrt(N*) (Poisson statistics).
    snr = ccd_snr(100.0, 10.0, 0.0, 0.0, 0.0, np.array([1.0, 4.0, 100.0]))
    assert snr == pytest.approx([10.0, 20.0, 100.0])


def test_source_limited_snr_grows_with_aperture_diameter() -> None:
    # CCD equation, source-limited: S/N = sqrt(R t) with R ∝ collecting area ∝ D² (REFERENCES.md), hence S/N ∝ D.
    small = ccd_snr(1000.0 * photometry.collecting_area_m2(1.0), 1.0, 0.0, 0.0, 0.0, 60.0)
    large = ccd_snr(1000.0 * photometry.collecting_area_m2(4.0), 1.0, 0.0, 0.0, 0.0, 60.0)
    assert large / small == pytest.approx(4.0)


def test_background_limited_time_grows_as_snr_squared() -> None:
    # CCD equation, sky-dominated: S/N = R t / sqrt(n S t), so t = S/N² n S / R² (Merline & Howell 1995).
    signal = Signal(1.0, 1000.0, 0.0, 0.0, 20.0, 1001.0, 1.0, 0.7, 0.7, None)
    one, t_one = exposures_for_snr(signal, 10.0, 1e9)
    two, t_two = exposures_for_snr(signal, 20.0, 1e9)
    assert (one, two) == (1, 1)
    assert t_two / t_one == pytest.approx(4.0, rel=1e-3)
    assert t_one == pytest.approx(10.0**2 * 20.0 * 1000.0 / 1.0**2, rel=1e-3)


def test_read_noise_limited_regime() -> None:
    # CCD equation, read-noise-dominated: S/N = R t / sqrt(n N_exp σ_R²): linear in t for one exposure,
    # and splitting a fixed total into N exposures divides S/N by sqrt(N) (Merline & Howell 1995).
    args = (0.01, 25.0, 0.0, 0.0, 100.0)
    assert ccd_snr(*args, 200.0) / ccd_snr(*args, 100.0) == pytest.approx(2.0, rel=1e-3)
    assert ccd_snr(*args, 100.0, 1) / ccd_snr(*args, 100.0, 4) == pytest.approx(2.0, rel=1e-3)


def test_finite_background_pixels_add_noise() -> None:
    # Merline & Howell (1995): the factor (1 + n_pix / n_B) for a sky estimated from n_B pixels.
    direct = 1000.0 / math.sqrt(1000.0 + 10 * (1 + 10 / 40) * (500.0 + 0.0 + 1 * 25.0))
    assert ccd_snr(10.0, 10.0, 5.0, 0.0, 5.0, 100.0, 1, n_background=40) == pytest.approx(direct)


def test_exposures_for_snr_is_the_fewest_that_reach_the_goal() -> None:
    # The CCD equation evaluated at the returned plan reaches the goal exactly (Merline & Howell 1995),
    # and one exposure fewer at the longest allowed length falls short.
    signal = Signal(5.0, 50.0, 0.01, 10.0, 30.0, 60.0, 1.0, 0.7, 0.7, None)
    count, length = exposures_for_snr(signal, 100.0, 300.0)
    assert count > 1 and length <= 300.0
    assert signal.snr(count * length, count) == pytest.approx(100.0, rel=1e-9)
    assert signal.snr((count - 1) * 300.0, count - 1) < 100.0


# --- profiles -------------------------------------------------------------------------------


def test_gaussian_encircled_energy_identities() -> None:
    # Circular Gaussian, EE(r) = 1 - exp(-r²/2σ²): half the light within the half width at half maximum;
    # 1 - 2^-4 within one FWHM; 1 - e^-1/2 within one σ (mathematical identities).
    assert encircled_fraction_gaussian(0.5, 1.0) == pytest.approx(0.5)
    assert encircled_fraction_gaussian(1.0, 1.0) == pytest.approx(1 - 2**-4)
    sigma = 1.0 / (2 * math.sqrt(2 * math.log(2)))
    assert encircled_fraction_gaussian(sigma, 1.0) == pytest.approx(1 - math.exp(-0.5))


def test_slit_transmission_follows_normal_distribution() -> None:
    # One-dimensional normal distribution (standard tables): 68.27 % within ±1σ, 95.45 % within ±2σ.
    sigma = 1.0 / (2 * math.sqrt(2 * math.log(2)))
    assert slit_transmission_gaussian(2 * sigma, 1.0) == pytest.approx(0.6827, abs=1e-4)
    assert slit_transmission_gaussian(4 * sigma, 1.0) == pytest.approx(0.9545, abs=1e-4)
    # Small pixels: the peak pixel holds p² / (2π σ²) of the light (Gaussian peak surface density).
    assert central_pixel_fraction(0.01, 1.0) == pytest.approx(0.01**2 / (2 * math.pi * sigma**2), rel=1e-4)


def test_aperture_radius_is_the_background_limited_optimum() -> None:
    # Background-limited S/N in an aperture ∝ EE(r) / r for a Gaussian; its maximum (derived numerically here)
    # is at r = 1.585 σ = 0.673 FWHM (from memory).
    radii = np.linspace(0.2, 1.5, 13001)
    ee = 1 - np.exp(-(radii**2) * 4 * math.log(2))
    assert radii[np.argmax(ee / radii)] == pytest.approx(APERTURE_RADIUS_FWHM, rel=2e-3)


# --- seeing and diffraction -----------------------------------------------------------------


def test_rayleigh_criterion_reference_values() -> None:
    # REFERENCES.md: θ = 1.22 λ/D, exactly 1.21967; D = 0.2 m at 550 nm gives 3.36e-6 rad.
    assert RAYLEIGH_FACTOR == pytest.approx(1.21967, abs=1e-5)
    assert rayleigh_limit_rad(550.0, 0.2) == pytest.approx(3.36e-6, rel=2e-3)


def test_seeing_scales_with_airmass_and_wavelength() -> None:
    # Common practice (REFERENCES.md, Kolmogorov turbulence): FWHM ∝ X^0.6 and ∝ λ^-0.2.
    assert seeing_fwhm_arcsec(1.0, 2.0, 500.0) == pytest.approx(2**0.6)
    assert seeing_fwhm_arcsec(1.0, 1.0, 1000.0) == pytest.approx(2**-0.2)


def test_log_normal_seeing_fractions() -> None:
    # Log-normal distribution: the median splits the time in half; one σ above holds 84.13 % (normal tables).
    assert fraction_seeing_better(0.8, 0.8) == pytest.approx(0.5)
    assert fraction_seeing_better(0.8 * math.exp(0.35), 0.8) == pytest.approx(0.8413, abs=1e-4)


def test_image_quality_finer_than_diffraction_is_infeasible() -> None:
    # Rayleigh criterion (REFERENCES.md): a 2 m telescope at 550 nm resolves 1.21967 × 550e-9 / 2 rad = 0.0692".
    result = _assess(_request(constraints={"max_seeing_arcsec": 0.05}))
    finding = _finding(result, "image-quality")
    assert finding.level is Level.INFEASIBLE
    assert finding.figures["diffraction_limit_arcsec"] == pytest.approx(1.21967 * 550e-9 / 2.0 * 206264.806, rel=1e-3)
    assert "diffraction" in finding.message


def test_image_quality_levels_follow_the_seeing_distribution() -> None:
    # Common practice: median seeing or worse asked is feasible; a third of the median is met too rarely.
    assert _finding(_assess(_request(constraints={"max_seeing_arcsec": 1.5})), "image-quality").level is Level.FEASIBLE
    assert _finding(_assess(_request(constraints={"max_seeing_arcsec": 0.8})), "image-quality").level is Level.MARGINAL
    assert _finding(_assess(_request(constraints={"max_seeing_arcsec": 0.35})), "image-quality").level is Level.INFEASIBLE


# --- atmosphere -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("wavelength_nm", "level"),
    [
        (250.0, Level.INFEASIBLE),  # below the ozone cutoff, ~300 nm (REFERENCES.md, common practice)
        (310.0, Level.MARGINAL),  # inside the 300-320 nm cutoff (REFERENCES.md)
        (550.0, Level.FEASIBLE),  # visible window
        (2200.0, Level.FEASIBLE),  # K window (common practice)
        (1400.0, Level.MARGINAL),  # water-vapour band between J and H (common practice)
        (100_000.0, Level.INFEASIBLE),  # far infrared (REFERENCES.md)
        (2.1e8, Level.FEASIBLE),  # 21 cm, inside the 1 cm - 10 m radio window (REFERENCES.md)
        (3e10, Level.INFEASIBLE),  # 30 m, beyond the 10 m radio limit (REFERENCES.md)
    ],
)
def test_atmosphere_windows(wavelength_nm: float, level: Level) -> None:
    assert atmosphere_finding(wavelength_nm).level is level


# --- whole assessments ----------------------------------------------------------------------


def test_source_rate_scales_with_collecting_area() -> None:
    # Common practice (REFERENCES.md): collected light ∝ aperture diameter squared.
    small = _assess(_request(), _observatory(aperture_m=1.0))
    large = _assess(_request(), _observatory(aperture_m=2.0))
    assert large.figures["source_rate_e_s"] / small.figures["source_rate_e_s"] == pytest.approx(4.0, rel=1e-3)


def test_source_rate_by_hand_from_bessell_zero_point() -> None:
    # Bessell (1979): V = 20 is 3640e-8 Jy; 1.51e7 photons s^-1 m^-2 per unit Δλ/λ; band 88/550; area π (2 m)²/4;
    # throughput 0.5; extinction 10^(-0.4 × 0.12 × 1); Gaussian encircled fraction within 0.673 FWHM.
    expected = 3640e-8 * 1.51e7 * (88 / 550) * math.pi * 0.5 * 10 ** (-0.4 * 0.12) * (1 - math.exp(-4 * math.log(2) * 0.673**2))
    assert _assess(_request()).figures["source_rate_e_s"] == pytest.approx(expected, rel=1e-3)


def test_bright_star_saturates_at_the_shortest_exposure() -> None:
    # Saturation arithmetic: the peak pixel holds (erf(p / (2√2 σ)))² of the light (Gaussian); with the
    # Bessell (1979) chain a V = 5 star gives ~1e8 e/s, so the saturation level is reached in well under 1 s.
    # Worst case (sensitivity.py): the 10th-percentile seeing of the log-normal site seeing, z = -1.2816 (normal
    # tables), at airmass 1 (no X^0.6 growth, extinction 10^(-0.4 k)); the level is the smaller of 80 % of the
    # 100,000 e full well and a 16-bit converter's 2^16 - 1 = 65,535 ADU × 1 e/ADU.
    result = _assess(_request(brightness={"magnitude": 5.0, "band": "V"}))
    finding = _finding(result, "instrument")
    assert finding.level is Level.INFEASIBLE
    assert "saturat" in (finding.suggestion or "").lower()
    seeing = 1.0 * math.exp(0.35 * -1.2816) * (550 / 500) ** -0.2
    fwhm = math.hypot(seeing, 1.029 * 550e-9 / 2.0 * 206264.806)
    total = 3640 * 10**-2 * 1.51e7 * (88 / 550) * math.pi * 0.5 * 10 ** (-0.4 * 0.12)
    peak = total * math.erf(0.3 / (2 * math.sqrt(2) * fwhm / 2.3548)) ** 2
    level = min(SATURATION_FRACTION * 100000, 65535 * 1.0)
    assert finding.figures["saturation_time_s"] == pytest.approx(level / peak, rel=5e-3)


def test_long_goals_are_split_by_the_longest_exposure() -> None:
    # Saturation/instrument arithmetic: a faint target's exposures never exceed the instrument's 600 s.
    result = _assess(_request(brightness={"magnitude": 24.0, "band": "V"}, goal={"snr": 10}, hours_requested=10))
    assert result.figures["exposure_time_s"] <= 600.0
    assert result.figures["exposures"] >= 2


def test_exposure_time_goal_adds_readout_and_acquisition() -> None:
    # Overheads by definition: 3600 s in 600 s exposures is 6 exposures, each read out in 20 s, plus one 300 s acquisition.
    result = _assess(_request(goal={"exposure_time_s": 3600}))
    assert result.figures["exposures"] == 6
    assert result.figures["hours_needed"] == pytest.approx((3600 + 6 * 20 + 300) / 3600, rel=1e-3)


@pytest.mark.parametrize(
    ("scale", "level"),
    [(2.0, Level.FEASIBLE), (0.9, Level.MARGINAL), (0.5, Level.INFEASIBLE)],
)
def test_sensitivity_levels_follow_requested_hours(scale: float, level: Level) -> None:
    # Common-practice margins documented in sensitivity.py: within the hours feasible, up to 1.25× marginal.
    needed = _assess(_request(brightness={"magnitude": 23.0, "band": "V"})).figures["hours_needed"]
    result = _assess(_request(brightness={"magnitude": 23.0, "band": "V"}, hours_requested=needed * scale))
    assert _finding(result, "sensitivity").level is level


def test_snr_expected_in_requested_hours_meets_goal_when_feasible() -> None:
    # CCD equation: more hours than needed give at least the goal's S/N.
    result = _assess(_request(hours_requested=5))
    assert result.figures["snr_expected"] >= 50


def test_magnitude_error_can_make_a_request_marginal() -> None:
    # Pogson: one magnitude fainter is 2.512× less light; if only the nominal brightness fits the hours, flag it.
    needed = _assess(_request(brightness={"magnitude": 23.0, "band": "V"})).figures["hours_needed"]
    result = _assess(_request(brightness={"magnitude": 23.0, "band": "V", "error": 1.0}, hours_requested=needed * 1.01))
    assert _finding(result, "sensitivity").level is Level.MARGINAL


def test_far_too_faint_is_an_instrument_problem() -> None:
    # A V = 30 point source on a 2 m telescope needs far more than the 100 usable hours (CCD equation, sky-limited).
    result = _assess(_request(brightness={"magnitude": 30.0, "band": "V"}))
    assert _finding(result, "instrument").level is Level.INFEASIBLE
    assert result.figures["hours_needed"] > 100


def test_brightness_in_another_band_is_noted() -> None:
    result = _assess(_request(brightness={"magnitude": 20.0, "band": "R"}))
    assert "colour" in _finding(result, "sensitivity").message


def test_unknown_filter_is_unchecked() -> None:
    result = _assess(_request(setup={"filter": "Z"}))
    assert [f.level for f in result.findings] == [Level.UNCHECKED]


def test_spectrum_outside_grating_and_below_ozone_cutoff() -> None:
    # REFERENCES.md: the ground cannot observe below ~300 nm; the grating covers 400-800 nm only.
    request = _request(
        instrument="SPEC",
        setup={"grating": "G1", "slit_arcsec": 1.0, "central_wavelength_nm": 290},
        brightness={"magnitude": 15.0, "band": "V"},
    )
    result = _assess(request)
    assert _finding(result, "atmosphere").level is Level.INFEASIBLE
    assert _finding(result, "instrument").level is Level.INFEASIBLE


def test_spectrum_slit_loss_and_resolution_element() -> None:
    # A centred Gaussian through a slit one FWHM wide passes erf(sqrt(ln 2)) = 76.1 % (normal distribution tables).
    request = _request(
        instrument="SPEC",
        setup={"grating": "G1", "slit_arcsec": 0.8, "central_wavelength_nm": 600},
        brightness={"magnitude": 17.0, "band": "V"},
        constraints={"max_seeing_arcsec": 0.8},
    )
    result = _assess(request, conditions=Conditions(200.0, 100.0, 1.0, 1.0, 20.9, "R"))
    assert result.figures["seeing_arcsec"] == pytest.approx(0.8)
    assert result.figures["slit_loss"] == pytest.approx(1 - 0.7610, abs=1e-3)
    curve = result.series["snr_curve"]
    assert len(curve["exposure_s"]) == len(curve["snr"]) and np.all(np.diff(curve["snr"]) > 0)


def test_ab_magnitudes_use_3631_jy() -> None:
    # Oke & Gunn (1983): AB 0 mag = 3631 Jy; Bessell (1979): Vega V 0 mag = 3640 Jy. Same magnitude, rates in that ratio.
    vega = _assess(_request(brightness={"magnitude": 20.0, "band": "V", "system": "vega"}))
    ab = _assess(_request(brightness={"magnitude": 20.0, "band": "V", "system": "ab"}))
    assert ab.figures["source_rate_e_s"] / vega.figures["source_rate_e_s"] == pytest.approx(3631 / 3640, rel=1e-3)


def test_surface_brightness_is_per_square_arcsecond() -> None:
    # Bessell (1979) chain for 22 mag/arcsec² over one square arcsecond (no aperture loss); the sky per pixel is the
    # site's 21.6 mag/arcsec² (Patat 2003) times the pixel's 0.09 arcsec², unextinguished.
    result = _assess(_request(brightness={"magnitude": 22.0, "band": "V", "kind": "surface"}))
    chain = 3640 * 1.51e7 * (88 / 550) * math.pi * 0.5
    assert result.figures["source_rate_e_s"] == pytest.approx(chain * 10 ** (-0.4 * 22.0) * 10 ** (-0.4 * 0.12), rel=1e-3)
    assert result.figures["sky_rate_e_s_pix"] == pytest.approx(chain * 10 ** (-0.4 * 21.6) * 0.09, rel=1e-3)
    assert result.figures["pixels"] == pytest.approx(1 / 0.09, rel=1e-3)
