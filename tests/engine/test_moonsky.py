"""The moonlit sky: Krisciunas & Schaefer (1991) equations and their stated behaviour (shared/REFERENCES.md)."""

from __future__ import annotations

import numpy as np
import pytest

from feasibility.engine import moonsky


def test_equation_1_round_trip_and_anchor() -> None:
    mags = np.linspace(15.0, 23.0, 17)
    # K&S eq. 1 and its inverse.
    assert moonsky.mag_from_nanolamberts(moonsky.nanolamberts_from_mag(mags)) == pytest.approx(mags)
    # K&S eq. 1 at V = 0: B = 34.08 exp(20.7233) nL.
    assert moonsky.nanolamberts_from_mag(0.0) == pytest.approx(34.08 * np.exp(20.7233))
    # 0.92104 = 0.4 ln 10: five magnitudes are a factor 100 (Pogson's scale).
    assert moonsky.nanolamberts_from_mag(16.0) / moonsky.nanolamberts_from_mag(21.0) == pytest.approx(100.0, rel=1e-4)


def test_scattering_function_values() -> None:
    # K&S eqs. 16-19: at ρ = 90°: 10^5.36 × 1.06 + 10^(6.15 - 2.25).
    assert moonsky.scattering_function(90.0) == pytest.approx(10**5.36 * 1.06 + 10**3.9)
    # At ρ = 0° the Rayleigh term is 10^5.36 × 2.06 (the sum 1.06 + cos²ρ, not a product).
    # At ρ = 5° the Mie term is 6.2e7 ρ^-2.
    assert moonsky.scattering_function(5.0) == pytest.approx(10**5.36 * (1.06 + np.cos(np.radians(5.0)) ** 2) + 6.2e7 / 25.0)
    rho = np.linspace(1.0, 170.0, 200)
    f = moonsky.scattering_function(rho)
    # Stated behaviour: brighter nearer the Moon, falling to a minimum near 90° (where cos²ρ vanishes
    # and the Mie term is small), rising again beyond it by Rayleigh back-scattering.
    # (Each Mie branch separately: the published branches do not meet at 10°, 6.2e5 against 10^5.9.)
    assert np.all(np.diff(f[rho < 10.0]) < 0)
    assert np.all(np.diff(f[(rho >= 10.0) & (rho < 90.0)]) < 0)
    assert 85.0 < rho[np.argmin(f)] < 100.0


def test_optical_path_equation_3() -> None:
    # K&S eq. 3: X(0) = 1, X(90°) = (1 - 0.96)^-1/2 = 5.
    assert moonsky.optical_path([0.0, 90.0]) == pytest.approx([1.0, 5.0])


def test_moon_brightness_equation_20() -> None:
    # K&S eq. 20 at full moon: 10^(-0.4 × 3.84); at α = 90°: 10^(-0.4 (3.84 + 2.34 + 4e-9 × 90^4)).
    assert moonsky.moon_brightness(0.0) == pytest.approx(10 ** (-0.4 * 3.84))
    assert moonsky.moon_brightness(-90.0) == pytest.approx(10 ** (-0.4 * (3.84 + 0.026 * 90 + 4e-9 * 90**4)))


def test_dark_sky_at_zenith_is_the_site_value() -> None:
    # K&S eq. 2 at Z = 0 gives the zenith brightness back; lower down the sky brightens (van Rhijn effect).
    assert moonsky.mag_from_nanolamberts(moonsky.dark_sky_nl(21.6, 0.12, 0.0)) == pytest.approx(21.6)
    assert moonsky.mag_from_nanolamberts(moonsky.dark_sky_nl(21.6, 0.12, 60.0)) < 21.6


def _sky(separation: float = 45.0, phase: float = 0.0, moon_zenith: float = 40.0) -> float:
    return float(moonsky.sky_brightness_mag("V", 21.6, 0.172, 30.0, moon_zenith, phase, separation))


def test_moonlight_follows_the_stated_behaviour() -> None:
    # K&S: brighter (smaller mag) for smaller separation and for a fuller Moon (smaller phase angle).
    assert _sky(separation=20.0) < _sky(separation=60.0) < _sky(separation=100.0)
    assert _sky(phase=0.0) < _sky(phase=60.0) < _sky(phase=120.0)
    # No contribution when the Moon is below the horizon: the dark sky at that zenith angle.
    dark = moonsky.mag_from_nanolamberts(moonsky.dark_sky_nl(21.6, 0.172, 30.0))
    assert _sky(moon_zenith=95.0) == pytest.approx(dark)


def test_full_moon_sky_is_in_the_published_range() -> None:
    # K&S's own figures (from memory): full Moon 45° away brightens a V = 21.6 sky to about 18-19 mag/arcsec²,
    # with the model's stated 8-23 % accuracy far smaller than this window.
    assert 17.5 < _sky(separation=45.0, phase=0.0) < 19.5


def test_other_bands_carry_the_suns_colour() -> None:
    common = (30.0, 40.0, 0.0, 45.0)
    v_moon = moonsky.moonlight_nl(0.0, 45.0, 40.0, 30.0, 0.1)
    r_total = moonsky.sky_brightness_mag("R", 30.0, 0.1, *common)  # a very faint dark sky isolates the moonlight
    v_total = moonsky.sky_brightness_mag("V", 30.0, 0.1, *common)
    assert moonsky.mag_from_nanolamberts(v_moon) == pytest.approx(v_total, abs=1e-3)
    # Reference (from memory): the Sun's V - R is about 0.36 (Johnson-Cousins), so moonlight is that much brighter in R.
    assert v_total - r_total == pytest.approx(0.36, abs=0.01)


def test_cached_moon_term_gives_equation_15() -> None:
    phase, separation, moon_zenith, zenith = (
        np.array([10.0, 80.0, 30.0]),
        np.array([30.0, 60.0, 5.0]),
        np.array([20.0, 50.0, 95.0]),
        np.array([30.0, 10.0, 60.0]),
    )
    term = moonsky.moon_term(phase, moon_zenith, 0.15)
    # K&S eq. 15 split into its target-independent and target-dependent factors gives the same product.
    assert moonsky.moonlight_from_term(term, separation, zenith, 0.15) == pytest.approx(
        moonsky.scattering_function(separation)
        * moonsky.moon_brightness(phase)
        * 10 ** (-0.4 * 0.15 * moonsky.optical_path(np.minimum(moon_zenith, 90.0)))
        * (1 - 10 ** (-0.4 * 0.15 * moonsky.optical_path(zenith)))
        * (moon_zenith < 90.0)
    )


def test_tabulated_components_match_the_equations() -> None:
    rng = np.random.default_rng(3)
    altitude = rng.uniform(5.0, 90.0, 500)
    separation = rng.uniform(1.0, 179.0, 500)
    term = moonsky.moon_term(rng.uniform(0.0, 150.0, 500), rng.uniform(0.0, 89.0, 500), 0.12)
    dark, moon = moonsky.sky_components_nl(21.6, 0.12, np.sin(np.radians(altitude)), separation, term)
    # K&S eqs. 2 and 15 evaluated directly; the tables agree within 0.1 %.
    assert dark == pytest.approx(moonsky.dark_sky_nl(21.6, 0.12, 90.0 - altitude), rel=1e-3)
    assert moon == pytest.approx(moonsky.moonlight_from_term(term, separation, 90.0 - altitude, 0.12), rel=1e-3)
