"""The site's horizon profile: validated as one closed curve round the sky, interpolated periodically."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest

from feasibility.documents import DocumentError, Observatory, parse_document
from feasibility.engine.horizon import horizon_altitude


def _with_horizon(base: Observatory, points: list[dict[str, float]], **site: float) -> Observatory:
    data = base.model_dump(mode="json")
    data["site"].update(horizon=points, **site)
    data["telescope"].update(min_altitude_deg=0.0, max_altitude_deg=90.0)
    return parse_document(Observatory, data)


def _problems(base: Observatory, points: list[dict[str, float]]) -> dict[str, str]:
    data = copy.deepcopy(base.model_dump(mode="json"))
    data["site"]["horizon"] = points
    with pytest.raises(DocumentError) as caught:
        parse_document(Observatory, data)
    return {p.field: p.message for p in caught.value.problems}


def test_zero_and_360_must_agree(demo_observatory: Observatory) -> None:
    problems = _problems(
        demo_observatory, [{"azimuth_deg": 0, "altitude_deg": 40}, {"azimuth_deg": 180, "altitude_deg": 5}, {"azimuth_deg": 360, "altitude_deg": 5}]
    )
    assert "site.horizon" in problems, problems
    assert "0°" in problems["site.horizon"] and "360°" in problems["site.horizon"]


def test_azimuth_outside_0_to_360_is_named(demo_observatory: Observatory) -> None:
    problems = _problems(demo_observatory, [{"azimuth_deg": 400, "altitude_deg": 10}])
    assert "site.horizon[0].azimuth_deg" in problems, problems
    assert "360" in problems["site.horizon[0].azimuth_deg"]


def test_one_altitude_per_azimuth(demo_observatory: Observatory) -> None:
    problems = _problems(demo_observatory, [{"azimuth_deg": 90, "altitude_deg": 10}, {"azimuth_deg": 90, "altitude_deg": 20}])
    assert "listed twice" in problems["site.horizon"]


def test_profile_wraps_from_the_last_point_to_the_first(demo_observatory: Observatory) -> None:
    # The audit's profile with 360° made to agree with 0°: 0° → 40°, 180° → 5°, 360° → 40°.
    site = _with_horizon(
        demo_observatory, [{"azimuth_deg": 0, "altitude_deg": 40}, {"azimuth_deg": 180, "altitude_deg": 5}, {"azimuth_deg": 360, "altitude_deg": 40}]
    ).site
    # Reference: linear interpolation by hand, 40 + (5 − 40) × 90/180 = 22.5 at 90°; 5 + 35 × 90/180 = 22.5 at 270°.
    assert horizon_altitude(site, [1.0, 90.0, 179.0, 270.0, 359.0]) == pytest.approx([40 - 35 / 180, 22.5, 5 + 35 / 180, 22.5, 40 - 35 / 180])
    # Without a 0° point the profile still wraps: 90° → 20°, 270° → 10°; at 0° (90° from either point) the mean.
    site = _with_horizon(demo_observatory, [{"azimuth_deg": 90, "altitude_deg": 20}, {"azimuth_deg": 270, "altitude_deg": 10}]).site
    assert horizon_altitude(site, [0.0, 180.0, 360.0]) == pytest.approx([15.0, 15.0, 15.0])


def _piecewise(points: list[tuple[float, float]], azimuth: float) -> float:
    """Reference: the profile by hand, walking the segments (the last one wraps to the first point + 360°)."""
    ordered = sorted(points)
    ring = ordered + [(ordered[0][0] + 360.0, ordered[0][1])]
    a = azimuth % 360.0
    if a < ordered[0][0]:
        a += 360.0
    for (a0, h0), (a1, h1) in zip(ring, ring[1:]):
        if a0 <= a <= a1:
            return h0 + (h1 - h0) * (a - a0) / (a1 - a0)
    raise AssertionError(azimuth)


def test_asymmetric_profile_against_a_direct_count(grid_2027a, demo_observatory: Observatory) -> None:
    from feasibility.documents import ObservationRequest
    from feasibility.engine.airmass import limit_altitude
    from feasibility.engine.positions import target_vector
    from feasibility.engine.sky_checks import measure_sky, night_availability

    points = [(20.0, 35.0), (110.0, 8.0), (200.0, 45.0), (300.0, 12.0)]  # no 0° point: the last segment wraps
    observatory = _with_horizon(demo_observatory, [{"azimuth_deg": a, "altitude_deg": h} for a, h in points], min_altitude_deg=0.0)
    request = parse_document(
        ObservationRequest,
        {
            "label": "r",
            "target": {"name": "t", "ra": "17:45:36", "dec": "-29:00:00"},
            "instrument": "KESTREL",
            "setup": {"filter": "V"},
            "brightness": {"magnitude": 18.0, "band": "V"},
            "goal": {"snr": 50},
            "hours_requested": 5.0,
            "constraints": {"max_airmass": 5.0, "min_moon_separation_deg": 0.0},
        },
    )
    instrument = observatory.instrument_named("KESTREL")
    weather = np.ones(grid_2027a.n_nights)
    sky = measure_sky(request, observatory, instrument, grid_2027a, night_availability(grid_2027a, "KESTREL", None), weather, False)

    view = grid_2027a.samples(-18.0)
    vector = target_vector(266.4, -29.0, at_jyear=2027.5)
    altitude = np.degrees(np.arcsin(np.clip(view.up @ vector, -1, 1)))
    azimuth = np.degrees(np.arctan2(view.east @ vector, view.north @ vector)) % 360.0
    floor = np.array([_piecewise(points, a) for a in azimuth])
    lowest = limit_altitude(5.0, observatory.airmass_limit_formula)
    direct = np.count_nonzero((altitude >= lowest) & (altitude >= floor)) * grid_2027a.step_hours
    # Reference: a direct count over the grid's instants with the profile evaluated segment by segment.
    assert sky.visible.sum() == pytest.approx(direct, abs=2 * grid_2027a.step_hours)
    # The profile matters here: with a flat 8° floor (its lowest point) there would be more hours.
    flat = np.count_nonzero(altitude >= max(lowest, 8.0)) * grid_2027a.step_hours
    assert direct < flat - 10.0
    assert math.isfinite(sky.visible.sum())
