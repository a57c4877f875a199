"""Airmass against Kasten & Young's table, Hardie's formula and sec z (shared/REFERENCES.md)."""

from __future__ import annotations

import numpy as np
import pytest

from feasibility.engine.airmass import airmass, airmass_hardie, altitude_for_airmass


def test_kasten_young_table() -> None:
    # Kasten & Young (1989) table (third-party reproduction): 10° -> 5.5841, 5° -> 10.3164.
    # Their formula fits their table to about 0.1 % at these altitudes.
    assert airmass(10.0) == pytest.approx(5.5841, rel=2e-3)
    assert airmass(5.0) == pytest.approx(10.3164, rel=2e-3)


def test_near_zenith_equals_sec_z() -> None:
    import astropy.units as u
    from astropy.coordinates import AltAz, SkyCoord

    altitudes = np.array([90.0, 75.0, 60.0, 45.0, 30.0])
    secz = SkyCoord(az=0 * u.deg, alt=altitudes * u.deg, frame=AltAz()).secz
    # Reference: astropy's AltAz.secz (plane-parallel atmosphere), good to 0.3 % down to 30° altitude.
    assert airmass(altitudes) == pytest.approx(np.asarray(secz), rel=3e-3)


def test_agrees_with_hardie_to_airmass_six() -> None:
    altitudes = np.linspace(10.0, 90.0, 81)
    # Reference: Hardie (1962), better than 0.1 % to X ≈ 6.8; the two formulae agree within 0.5 % there.
    assert airmass(altitudes) == pytest.approx(airmass_hardie(altitudes), rel=5e-3)


def test_finite_at_the_horizon_unlike_sec_z() -> None:
    # Reference: Kasten & Young (1989): the relative airmass at the horizon is about 38 (from memory, 37.9).
    assert airmass(0.0) == pytest.approx(37.92, abs=0.05)
    assert np.isnan(airmass(-1.0))
    assert airmass(90.0) == 1.0  # the fit's 0.9997 at the zenith is clipped (an airmass is at least 1)


def test_altitude_for_airmass_inverts_the_formula() -> None:
    for limit in (1.2, 1.5, 2.0, 3.0, 5.5841):
        # Reference: the formula itself; inverse read to 0.001° of altitude.
        assert airmass(altitude_for_airmass(limit)) == pytest.approx(limit, rel=1e-4)
    # Reference: sec z = 2 at 30°, and the curvature term lowers that altitude by about 0.1°.
    assert 29.8 < altitude_for_airmass(2.0) < 30.0
    assert altitude_for_airmass(1.0) == 90.0
