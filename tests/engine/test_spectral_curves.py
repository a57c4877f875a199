"""Wavelength curves of spectra: zero points, extinction, dark sky, and an S/N free of steps across the bands.

Each expected value names its outside reference (docs/references.md); "memory"
marks a value recalled rather than read. The demo observatory is only an input.
"""

from __future__ import annotations

import copy
import math
from typing import Any

import numpy as np
import pytest
from astropy import units as u

from feasibility.documents import DocumentError, InstrumentSchedule, Observatory, Proposal, parse_document
from feasibility.engine import check_proposal
from feasibility.engine.smooth_curve import SmoothCurve
from feasibility.engine.spectral_curves import (
    curves_for,
    ozone_cross_section_m2,
    rayleigh_optical_depth,
    site_pressure_hpa,
)

C_ANGSTROM_S = 2.99792458e18


def _f_lambda(jansky: float, wavelength_nm: float) -> float:
    """erg s⁻¹ cm⁻² Å⁻¹ from Jy, by astropy's spectral_density (reference library)."""
    return (jansky * u.Jy).to(u.erg / u.s / u.cm**2 / u.AA, equivalencies=u.spectral_density(wavelength_nm * u.nm)).value


def _observatory(demo_observatory: Observatory, **climate: Any) -> Observatory:
    data = demo_observatory.model_dump(mode="json")
    data["climate"].update(climate)
    return parse_document(Observatory, data)


# --- the curves pass through the band values ------------------------------------------------


def test_curves_pass_exactly_through_the_band_values(demo_observatory: Observatory) -> None:
    curves = curves_for(demo_observatory)
    for name, band in demo_observatory.climate.bands.items():
        w = band.wavelength_nm
        assert curves.zero_point_jy(w) == pytest.approx(band.zero_point_jy, rel=1e-12), name
        assert curves.dark_sky_mag(w) == pytest.approx(band.sky_mag_arcsec2, abs=1e-9), name
        assert curves.extinction(w) == pytest.approx(band.extinction_mag_per_airmass, abs=1e-12), name
    # The moonlight colour at each band is the band's own (moonsky.band_factor, the Sun's colour).
    from feasibility.engine.moonsky import band_factor

    for name in ("U", "B", "V", "R", "I", "J", "H", "Ks"):
        w = demo_observatory.climate.bands[name].wavelength_nm
        assert curves.moon_factor(w) == pytest.approx(band_factor(name), rel=1e-12)


def test_curves_do_not_jump_between_bands(demo_observatory: Observatory) -> None:
    curves = curves_for(demo_observatory)
    grid = np.arange(360.0, 1000.5, 0.5)
    for curve in (curves.zero_point_jy, curves.extinction, lambda w: 10 ** (-0.4 * curves.dark_sky_mag(w)), curves.moon_factor):
        values = np.array([curve(w) for w in grid])
        assert np.all(values > 0)
        assert np.max(np.abs(np.diff(values)) / values[:-1]) < 0.01  # no 1 % change within half a nanometre


# --- zero points -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("band", "f_lambda_1e9"),
    # Bessell, Castelli & Plez (1998), table A2 (memory): f_λ of Vega magnitude 0, 1e-9 erg s⁻¹ cm⁻² Å⁻¹.
    [("U", 4.175), ("B", 6.320), ("V", 3.631), ("R", 2.177), ("I", 1.126)],
)
def test_zero_points_at_band_wavelengths_match_bessell_castelli_plez(demo_observatory: Observatory, band: str, f_lambda_1e9: float) -> None:
    # The curve at the band's wavelength carries Bessell (1979)'s Jy zero point, converted to f_λ with astropy.
    # Bessell (1979) and BCP (1998) place the bands at slightly different effective wavelengths (I: 790 vs 798 nm),
    # so the two agree to a few per cent (V within 1 %), not exactly; 10 % bounds the worst (I).
    curves = curves_for(demo_observatory)
    w = demo_observatory.climate.bands[band].wavelength_nm
    tolerance = 0.01 if band == "V" else 0.10
    assert _f_lambda(curves.zero_point_jy(w), w) == pytest.approx(f_lambda_1e9 * 1e-9, rel=tolerance)


def test_zero_point_between_bands_matches_vega_at_5556_angstrom(demo_observatory: Observatory) -> None:
    # Vega's absolute flux at 5556 Å, about 3.44-3.46e-9 erg s⁻¹ cm⁻² Å⁻¹ (Hayes 1985; Mégessier 1995; memory):
    # a point between the V and R nodes, so it tests the interpolation, not a node.
    curves = curves_for(demo_observatory)
    assert _f_lambda(curves.zero_point_jy(555.6), 555.6) == pytest.approx(3.45e-9, rel=0.04)


@pytest.mark.parametrize("wavelength_nm", [402.0, 650.0, 900.0])
def test_ab_photon_flux_density_matches_astropy(demo_observatory: Observatory, wavelength_nm: float) -> None:
    # Oke & Gunn (1983): AB 0 mag is f_ν = 3631 Jy at every wavelength; astropy's ABmag and PHOTLAM as reference.
    reference = (0.0 * u.ABmag).to(u.photon / u.s / u.m**2 / u.nm, equivalencies=u.spectral_density(wavelength_nm * u.nm))
    assert curves_for(demo_observatory).photon_flux_density(wavelength_nm, "ab") == pytest.approx(reference.value, rel=2e-3)


def test_vega_photon_flux_density_matches_astropy_at_v(demo_observatory: Observatory) -> None:
    # Bessell (1979): V = 0 is 3640 Jy at 550 nm; astropy's spectral_density gives the photons per nm.
    reference = (3640 * u.Jy).to(u.photon / u.s / u.m**2 / u.nm, equivalencies=u.spectral_density(550 * u.nm)).value
    assert curves_for(demo_observatory).photon_flux_density(550.0) == pytest.approx(reference, rel=2e-3)


# --- extinction ------------------------------------------------------------------------------


@pytest.mark.parametrize("wavelength_nm", [400.0, 550.0, 700.0])
def test_rayleigh_optical_depth_matches_bucholtz(wavelength_nm: float) -> None:
    # Bucholtz (1995), Applied Optics 34, 2765, table 3 fit for the U.S. Standard Atmosphere at sea level
    # (coefficients read in third-party code): τ = A λ^-(B + Cλ + D/λ), λ in µm.
    um = wavelength_nm / 1000.0
    a, b, c, d = (6.50362e-3, 3.55212, 1.35579, 0.11563) if um <= 0.5 else (8.64627e-3, 3.99668, 1.10298e-3, 2.71393e-2)
    bucholtz = a * um ** -(b + c * um + d / um)
    assert rayleigh_optical_depth(wavelength_nm) == pytest.approx(bucholtz, rel=0.01)


@pytest.mark.parametrize(("elevation_m", "pressure_hpa"), [(0.0, 1013.25), (3000.0, 701.21), (5000.0, 540.48)])
def test_site_pressure_follows_the_standard_atmosphere(elevation_m: float, pressure_hpa: float) -> None:
    # U.S. Standard Atmosphere 1976 tables (memory): 1013.25 hPa at sea level, 701.21 at 3 km, 540.48 at 5 km.
    assert site_pressure_hpa(elevation_m) == pytest.approx(pressure_hpa, rel=1e-3)


def test_ozone_chappuis_peak() -> None:
    # The Chappuis band peaks near 600 nm at about 5e-21 cm² per molecule (Serdyuchenko et al. 2014, read as binned
    # by Bruneton 2017; Burrows et al. 1999 give about 5.2e-21 cm² at 603 nm at room temperature, memory).
    grid = np.arange(550.0, 650.0, 1.0)
    values = np.array([ozone_cross_section_m2(w) for w in grid])
    assert 590 <= grid[np.argmax(values)] <= 610
    assert values.max() * 1e4 == pytest.approx(5.1e-21, rel=0.05)
    assert ozone_cross_section_m2(450.0) < 0.1 * values.max()  # the band's blue wing


def test_model_from_v_alone_predicts_b_at_a_high_dry_site(demo_observatory: Observatory) -> None:
    # Krisciunas et al. (1987), PASP 99, 887: at Mauna Kea (about 4200 m, memory) B is about 0.19-0.20 and V about
    # 0.11-0.12 mag/airmass. Given V only, the model (Rayleigh at the site's pressure, ozone, aerosol) must predict B.
    data = demo_observatory.model_dump(mode="json")
    data["site"]["elevation_m"] = 4200
    data["climate"]["bands"] = {"V": dict(data["climate"]["bands"]["V"], extinction_mag_per_airmass=0.115)}
    data["instruments"] = [i for i in data["instruments"] if i["name"] == "HERON"]  # the imagers' filters name other bands
    observatory = parse_document(Observatory, data)
    assert curves_for(observatory).extinction(440.0) == pytest.approx(0.195, abs=0.015)


# --- tables in the observatory description --------------------------------------------------


EXTINCTION_TABLE = [{"wavelength_nm": w, "mag_per_airmass": k} for w, k in [(350, 0.60), (400, 0.32), (500, 0.16), (700, 0.07), (1000, 0.03)]]
SKY_TABLE = [{"wavelength_nm": w, "ab_mag_arcsec2": m} for w, m in [(350, 22.9), (450, 22.6), (600, 21.6), (900, 20.0)]]


def test_tabulated_curves_are_used_and_passed_through(demo_observatory: Observatory) -> None:
    observatory = _observatory(demo_observatory, extinction_by_wavelength=EXTINCTION_TABLE, dark_sky_by_wavelength=SKY_TABLE)
    curves = curves_for(observatory)
    for point in EXTINCTION_TABLE:
        assert curves.extinction(point["wavelength_nm"]) == pytest.approx(point["mag_per_airmass"], abs=1e-12)
    for point in SKY_TABLE:
        w = point["wavelength_nm"]
        # AB to Vega at the wavelength: m_Vega = m_AB − 2.5 log10(3631 Jy / ZP_Vega(λ)) (Oke & Gunn 1983).
        expected = point["ab_mag_arcsec2"] - 2.5 * math.log10(3631.0 / curves.zero_point_jy(w))
        assert curves.dark_sky_mag(w) == pytest.approx(expected, abs=1e-9)
    # Imaging keeps the band values: the table changes nothing there.
    assert observatory.climate.bands["V"].extinction_mag_per_airmass == 0.12


@pytest.mark.parametrize(
    ("field", "table", "words"),
    [
        ("extinction_by_wavelength", [EXTINCTION_TABLE[1], EXTINCTION_TABLE[0]], "must increase"),
        ("extinction_by_wavelength", [EXTINCTION_TABLE[0]], "at least two"),
        ("dark_sky_by_wavelength", [SKY_TABLE[0], dict(SKY_TABLE[1], ab_mag_arcsec2=float("nan"))], "ab_mag_arcsec2"),
        ("extinction_by_wavelength", [EXTINCTION_TABLE[0], dict(EXTINCTION_TABLE[1], wavelength_nm=float("inf"))], "wavelength_nm"),
    ],
)
def test_bad_tables_are_refused_naming_the_field(demo_observatory: Observatory, field: str, table: list, words: str) -> None:
    data = demo_observatory.model_dump(mode="json")
    data["climate"][field] = table
    with pytest.raises(DocumentError) as caught:
        parse_document(Observatory, data)
    text = str(caught.value) + " ".join(p.message + " " + p.field for p in caught.value.problems)
    assert field in text and words in text


# --- the S/N of a spectrum across wavelength --------------------------------------------------


def _spectrum_proposal(wavelength_nm: float, magnitude: float = 14.5) -> Proposal:
    """A low-resolution spectrum on the demo spectrograph (R = 600), the demo proposal 007's turn-off star made brighter."""
    return parse_document(
        Proposal,
        {
            "id": "SPECTRA-1",
            "semester": "2027A",
            "title": "sweep",
            "pi": {"name": "A B", "email": "a@example.org"},
            "requests": [
                {
                    "label": "spectrum",
                    "target": {"name": "NGC 6397", "ra": "17:40:42.1", "dec": "-53:40:27"},
                    "instrument": "HERON",
                    "setup": {"grating": "R600", "slit_arcsec": 1.2, "central_wavelength_nm": wavelength_nm},
                    "brightness": {"magnitude": magnitude, "band": "V"},
                    "goal": {"snr": 50},
                    "hours_requested": 2,
                }
            ],
        },
    )


def test_snr_sweep_has_no_steps(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    # 360-1000 nm in 1 nm steps through the whole check (sky pass with moonlit sky at the wavelength, then exposure).
    # S/N ≥ 300 everywhere, so its 3 significant digits add at most 0.33 % to a neighbour's difference.
    snr = []
    for wavelength in range(360, 1001):
        result = check_proposal(_spectrum_proposal(float(wavelength)), demo_observatory, demo_schedule).requests[0]
        snr.append(result.figures["snr_expected"])
        assert result.figures["sky_band"] == f"{wavelength} nm"
    values = np.array(snr, dtype=float)
    assert values.min() >= 300
    steps = np.abs(np.diff(values)) / values[:-1]
    assert steps.max() < 0.02, f"largest step {steps.max():.3%} at {360 + int(np.argmax(steps))} nm"


def test_the_audited_step_at_the_u_b_boundary_is_gone(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    # The audit: S/N 80 at 402 nm against 145 at 403 nm when the nearest band switched from U to B.
    below, above = (check_proposal(_spectrum_proposal(w, 16.5), demo_observatory, demo_schedule).requests[0].figures["snr_expected"] for w in (402.0, 403.0))
    assert above / below == pytest.approx(1.0, abs=0.02)


def test_spectrum_sky_at_a_band_wavelength_equals_the_imagers(demo_observatory: Observatory) -> None:
    # At the B band's own wavelength the spectrum's moonlit sky (dark sky, extinction, Sun's colour from the curves)
    # must equal the imager's B-band sky for the same target and constraints (same K&S model, same inputs; no schedule,
    # so both instruments see the same nights).
    spectrum = _spectrum_proposal(440.0).model_dump(mode="json")
    spectrum["requests"][0]["constraints"] = {"sky": "bright"}
    imaging = copy.deepcopy(spectrum)
    imaging["requests"][0].update(instrument="KESTREL", setup={"filter": "B"})
    sky = [check_proposal(parse_document(Proposal, p), demo_observatory, None).requests[0].figures["sky_mag_arcsec2"] for p in (spectrum, imaging)]
    assert sky[0] == pytest.approx(sky[1], abs=0.005)
    assert sky[0] < demo_observatory.climate.bands["B"].sky_mag_arcsec2 - 0.1  # bright time: the Moon brightens it


# --- the smooth curve itself -----------------------------------------------------------------


def test_smooth_curve_properties() -> None:
    # Fritsch & Carlson (1980): the monotone cubic reproduces straight lines, keeps monotone data monotone and
    # never leaves the range of two neighbouring points.
    line = SmoothCurve([1.0, 2.0, 4.0, 7.0], [3.0, 5.0, 9.0, 15.0])
    assert [line(x) for x in (1.5, 3.0, 6.9)] == pytest.approx([4.0, 7.0, 14.8])
    steps = SmoothCurve([0.0, 1.0, 2.0, 3.0, 4.0], [0.0, 0.0, 1.0, 1.0, 5.0])
    values = [steps(x) for x in np.linspace(0.0, 4.0, 401)]
    assert np.all(np.diff(values) >= -1e-12)
    assert all(0.0 <= steps(x) <= 1.0 for x in np.linspace(1.0, 3.0, 201))
    held = SmoothCurve([1.0, 2.0], [1.0, 3.0])
    assert held(0.0) == 1.0 and held(9.0) == 3.0
    assert SmoothCurve([1.0, 2.0], [1.0, 3.0], beyond="slope")(3.0) == pytest.approx(5.0)
    with pytest.raises(ValueError):
        SmoothCurve([1.0, 1.0], [0.0, 1.0])


def test_spectrum_finding_states_the_zero_colour_assumption(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    result = check_proposal(_spectrum_proposal(402.0), demo_observatory, demo_schedule).requests[0]
    message = next(f.message for f in result.findings if f.check == "sensitivity")
    assert "flux at 402 nm from the V magnitude with zero colour" in message and "Vega system" in message


def test_conditions_in_a_band_are_carried_to_the_wavelength(demo_observatory: Observatory) -> None:
    # Conditions that give the sky in a climate band (not at the wavelength) move by the dark sky's colour; at the
    # band's own wavelength nothing moves, and conditions already at the wavelength are used as they are.
    from feasibility.engine.conditions import Conditions
    from feasibility.engine.spectral_curves import spectrum_photometry

    curves = curves_for(demo_observatory)
    in_v = Conditions(10.0, 10.0, 1.2, 1.1, 20.0, "V")
    assert spectrum_photometry(demo_observatory, 550.0, in_v).sky_mag_arcsec2 == pytest.approx(20.0, abs=1e-9)
    moved = spectrum_photometry(demo_observatory, 402.0, in_v).sky_mag_arcsec2
    assert moved == pytest.approx(20.0 + curves.dark_sky_mag(402.0) - 21.6, abs=1e-9)
    at_wavelength = Conditions(10.0, 10.0, 1.2, 1.1, 20.0, "402 nm")
    assert spectrum_photometry(demo_observatory, 402.0, at_wavelength).sky_mag_arcsec2 == 20.0
