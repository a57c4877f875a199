"""Photon rates from magnitudes, checked against published zero points and astropy's unit conversions."""

from __future__ import annotations

import math

import pytest
from astropy import constants as const
from astropy import units as u

from feasibility.engine import photometry


def test_ab_zero_point_is_oke_gunn_definition() -> None:
    # Oke & Gunn (1983), REFERENCES.md: m_AB = -2.5 log10 f_nu[cgs] - 48.60, so m = 0 is 10^(-48.60/2.5) cgs = 3631 Jy.
    expected_jy = 10 ** (-48.60 / 2.5) / 1e-23
    assert photometry.flux_density_jy(0.0, "ab", zero_point_jy=999.0) == pytest.approx(expected_jy, rel=2e-4)
    # A magnitude 20 AB source: f_nu = 10^(-(20 + 48.60)/2.5) erg s^-1 cm^-2 Hz^-1 (same definition).
    assert photometry.flux_density_jy(20.0, "ab", 999.0) == pytest.approx(10 ** (-(20 + 48.60) / 2.5) / 1e-23, rel=2e-4)


def test_ab_magnitude_matches_astropy() -> None:
    # astropy as reference library: its ABmag unit.
    for magnitude in (0.0, 14.3, 25.0):
        reference = (magnitude * u.ABmag).to(u.Jy).value
        assert photometry.flux_density_jy(magnitude, "ab", 1.0) == pytest.approx(reference, rel=1e-4)


def test_vega_magnitudes_scale_bessell_zero_points() -> None:
    # Bessell (1979), REFERENCES.md: V = 0 is 3640 Jy; five magnitudes is a factor 100 (Pogson's definition).
    assert photometry.flux_density_jy(0.0, "vega", 3640.0) == pytest.approx(3640.0)
    assert photometry.flux_density_jy(5.0, "vega", 3640.0) == pytest.approx(36.40)


def test_unknown_system_is_refused() -> None:
    with pytest.raises(ValueError):
        photometry.flux_density_jy(0.0, "st", 3640.0)


def test_photons_per_jansky_is_one_over_planck() -> None:
    # Bessell (1979), REFERENCES.md: 1 Jy = 1.51e7 photons s^-1 m^-2 (dλ/λ)^-1; it is 1e-26 W m^-2 Hz^-1 / h (astropy constants).
    assert photometry.PHOTONS_PER_JY == pytest.approx(1e-26 / const.h.si.value, rel=1e-3)
    assert photometry.photon_flux(1.0, 1.0) == pytest.approx(1.51e7)


def test_v_zero_gives_about_1000_photons_per_cm2_per_angstrom() -> None:
    # Rule of thumb (common practice, REFERENCES.md): V = 0 gives about 1000 photons s^-1 cm^-2 Å^-1.
    # Bessell (1979): V zero point 3640 Jy at 0.55 µm; per Å the fractional bandwidth is 1 Å / 5500 Å.
    per_m2 = photometry.photon_flux(photometry.flux_density_jy(0.0, "vega", 3640.0), 1.0 / 5500.0)
    per_cm2 = per_m2 / 1e4
    assert per_cm2 == pytest.approx(1000.0, rel=0.05)


def test_photon_flux_matches_astropy_spectral_density() -> None:
    # astropy as reference library: convert 3640 Jy at 550 nm to photons s^-1 cm^-2 Å^-1 (PHOTLAM).
    reference = (3640 * u.Jy).to(u.photon / u.cm**2 / u.s / u.AA, equivalencies=u.spectral_density(550 * u.nm)).value
    ours = photometry.photon_flux(3640.0, 1.0 / 5500.0) / 1e4
    assert ours == pytest.approx(reference, rel=2e-3)


def test_bessell_jy_zero_point_matches_f_lambda_table() -> None:
    # Bessell, Castelli & Plez (1998), table A2 (memory, REFERENCES.md): V f_λ zero point 3.631e-9 erg s^-1 cm^-2 Å^-1;
    # Bessell (1979) gives 3640 Jy at 0.55 µm; the two agree to about 1 % (different effective wavelengths).
    f_lambda = (3640 * u.Jy).to(u.erg / u.s / u.cm**2 / u.AA, equivalencies=u.spectral_density(550 * u.nm)).value
    assert f_lambda == pytest.approx(3.631e-9, rel=0.02)


def test_collecting_area_grows_with_diameter_squared() -> None:
    # Common practice (REFERENCES.md): light-gathering power ∝ D²; a circle of diameter D has area π D²/4.
    assert photometry.collecting_area_m2(1.0) == pytest.approx(math.pi / 4)
    assert photometry.collecting_area_m2(8.0, 0.3) / photometry.collecting_area_m2(4.0, 0.3) == pytest.approx(4.0)
    # An obstruction of half the diameter blocks a quarter of the area (annulus area).
    assert photometry.collecting_area_m2(2.0, 0.5) == pytest.approx(math.pi * 0.75)


def test_extinction_dims_by_k_times_airmass_magnitudes() -> None:
    # Krisciunas et al. (1987), REFERENCES.md: V extinction about 0.12 mag/airmass; at airmass 2 the loss is 0.24 mag.
    factor = photometry.extinction_factor(0.12, 2.0)
    assert -2.5 * math.log10(factor) == pytest.approx(0.24)
    assert photometry.extinction_factor(0.0, 3.0) == 1.0


def test_source_rate_chain_for_v20_star() -> None:
    # Bessell (1979) zero point and photon conversion, collecting area π/4 D² (common practice), by hand:
    # V = 20 through a 20 % band on 1 m² with throughput 0.5 and no extinction.
    expected = 3640 * 1e-8 * 1.51e7 * 0.2 * 1.0 * 0.5
    assert photometry.source_rate(20.0, "vega", 3640.0, 0.2, 1.0, 0.5, 0.12, 0.0) == pytest.approx(expected)
    # The sky at 21.6 mag/arcsec² (Patat 2003, V at a dark site) gives the same chain per square arcsecond, no extinction.
    sky = photometry.sky_rate_per_arcsec2(21.6, 3640.0, 0.2, 1.0, 0.5)
    assert sky == pytest.approx(3640 * 10 ** (-0.4 * 21.6) * 1.51e7 * 0.2 * 0.5)


# Bessell (1979), REFERENCES.md: (band, zero point in Jy, wavelength in µm).
BESSELL_1979 = [("U", 1810, 0.36), ("B", 4260, 0.44), ("V", 3640, 0.55), ("R", 3080, 0.64), ("I", 2550, 0.79)]


@pytest.mark.parametrize(("band", "zero_point_jy", "wavelength_um"), BESSELL_1979)
def test_photon_rates_of_bessell_bands_match_astropy(band: str, zero_point_jy: float, wavelength_um: float) -> None:
    # Bessell (1979): 1 Jy = 1.51e7 photons s^-1 m^-2 (dλ/λ)^-1; astropy's spectral_density as reference library.
    wavelength = wavelength_um * u.um
    reference = (zero_point_jy * u.Jy).to(u.photon / u.m**2 / u.s / u.um, equivalencies=u.spectral_density(wavelength))
    ours = photometry.photon_flux(photometry.flux_density_jy(0.0, "vega", zero_point_jy), 1.0 / wavelength_um)
    assert ours == pytest.approx(reference.value, rel=2e-3)


def test_packaged_observatory_uses_bessell_zero_points() -> None:
    # The demo observatory says it uses Bessell (1979) for UBVRI; check its climate bands against the table.
    from importlib.resources import files

    from feasibility.documents import Observatory, parse_document

    observatory = parse_document(Observatory, (files("feasibility") / "data" / "observatory.yaml").read_bytes())
    for band, zero_point_jy, wavelength_um in BESSELL_1979:
        assert observatory.climate.bands[band].zero_point_jy == zero_point_jy
        assert observatory.climate.bands[band].wavelength_nm == pytest.approx(wavelength_um * 1000, abs=10)
