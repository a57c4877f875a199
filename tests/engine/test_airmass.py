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


# --- the formulae airmass limits are stated in (docs/references.md) -------------------------------

from feasibility.engine.airmass import (  # noqa: E402
    LIMIT_FORMULAS,
    airmass_by,
    airmass_secant,
    airmass_young,
    limit_airmass,
    limit_altitude,
)


def test_secant_limit_is_exact() -> None:
    # Reference: sec z = 1 / sin(altitude); sec z = 2 at 30°, 1.5 at 41.81°, 1.2 at 56.44° (trigonometry).
    assert limit_altitude(2.0, "secant") == pytest.approx(30.0, abs=1e-9)
    assert limit_altitude(1.5, "secant") == pytest.approx(41.8103149, abs=1e-6)
    assert limit_altitude(1.2, "secant") == pytest.approx(56.4426902, abs=1e-6)
    assert airmass_secant(30.0) == pytest.approx(2.0)


def test_hardie_formula_against_the_published_polynomial() -> None:
    # Reference: Hardie (1962): X = sec z − 0.0018167(sec z − 1) − 0.002875(sec z − 1)² − 0.0008083(sec z − 1)³,
    # evaluated by hand at sec z = 2 (altitude 30°): 2 − 0.0018167 − 0.002875 − 0.0008083 = 1.9945.
    assert airmass_by("hardie-1962", 30.0) == pytest.approx(1.9945, abs=1e-4)
    # ... and at sec z = 3 (altitude 19.47°): 3 − 0.0036334 − 0.0115 − 0.0064664 = 2.9784.
    assert airmass_by("hardie-1962", np.degrees(np.arcsin(1 / 3))) == pytest.approx(2.9784, abs=1e-4)


def test_kasten_young_limit_formula_is_their_table() -> None:
    # Reference: Kasten & Young (1989), their table: altitude 10° → 5.5841, 5° → 10.3164 (formula within 0.2 %).
    assert airmass_by("kasten-young-1989", 10.0) == pytest.approx(5.5841, rel=2e-3)
    assert airmass_by("kasten-young-1989", 5.0) == pytest.approx(10.3164, rel=2e-3)
    # The inversion lands on their tabulated altitudes for their tabulated airmasses, within 0.05°.
    assert limit_altitude(5.5841, "kasten-young-1989") == pytest.approx(10.0, abs=0.05)


def test_young_1994_formula() -> None:
    # Reference: Young (1994), Applied Optics 33, 1108, the rational form in cos z (coefficients as reproduced,
    # docs/references.md). At the zenith (cos z = 1): 1.1604647 / 1.1604643 = 1.0000004.
    assert airmass_young(90.0) == pytest.approx(1.0000004, abs=1e-6)
    # At the horizon (cos z = 0): 0.0096467 / 0.000303978 = 31.735 (the formula's own limit; Young quotes
    # about 31.7 there, from memory).
    assert airmass_young(0.0) == pytest.approx(31.735, abs=1e-3)
    # Near the zenith it is sec z (plane-parallel limit): within 0.1 % down to 60°; the curvature lowers it below.
    altitudes = np.array([80.0, 70.0, 60.0])
    assert airmass_young(altitudes) == pytest.approx(airmass_secant(altitudes), rel=1e-3)
    assert airmass_young(30.0) < airmass_secant(30.0)
    # And it follows Hardie's polynomial (better than 0.1 % to X ≈ 6.8) within 0.5 % to X ≈ 3 (Young's formula
    # takes the true zenith angle, Hardie's the refracted one, so they part lower down).
    altitudes = np.linspace(20.0, 90.0, 15)
    assert airmass_young(altitudes) == pytest.approx(airmass_hardie(altitudes), rel=5e-3)


@pytest.mark.parametrize("formula", sorted(LIMIT_FORMULAS))
@pytest.mark.parametrize("limit", [1.05, 1.3, 1.6, 2.0, 2.5, 3.0, 4.5, 6.0])
def test_limit_inversion_round_trips(formula: str, limit: float) -> None:
    # Reference: the formula itself; the bisection stops at 1e-9° of altitude.
    altitude = limit_altitude(limit, formula)
    assert airmass_by(formula, altitude) == pytest.approx(limit, rel=1e-7)
    assert limit_airmass(altitude, formula) == pytest.approx(limit, rel=1e-7)
    assert limit_altitude(1.0, formula) == 90.0


def test_conventions_differ_where_it_matters() -> None:
    # At airmass 2 the physical formula reaches the limit 0.1° lower than sec z (curvature term): a target that
    # culminates between the two altitudes is in or out depending on the stated convention.
    assert 0.05 < limit_altitude(2.0, "secant") - limit_altitude(2.0, "kasten-young-1989") < 0.15
