"""The engine's shortcuts against its exact per-instant path, on a few hundred random (seeded) requests.

- The search for an airmass limit that fits (``SkyProbe.visible``) thresholds the
  altitudes of the instants visible at the site's and telescope's floor, found
  once, instead of running the whole visibility mask again for every limit tried (a limit
  at or above the horizon profile's top runs its own mask, which needs no azimuth).
  Here every limit from 1.1 to 6.0 (with and without the time windows, with the
  demo site's horizon profile) is held to the per-instant path: the mask of
  :func:`feasibility.engine.sky_masks.visible_mask` over every instant, counted
  night by night. The per-instant path is itself held to astropy's ``AltAz`` in
  tests/engine/test_skygrid.py and test_sky_checks.py.
- The nights a schedule takes away are described from per-night kinds worked out
  once per schedule: held to a plain look-up of each lost night's schedule entry.
- A moving target's topocentric directions are worked out component by component from the
  segments' coefficients repeated over each segment's instants: held to the plain
  per-instant form (``cubic_at``, the site's position subtracted, ``np.linalg.norm``)
  for planets, bodies given by elements and an ephemeris table, whole view and one night.
- A track's right ascensions and declinations are rounded vectorised, going through
  Python's ``round`` only near a half: held to ``round`` itself on random values, values
  that look like halves in decimal, exact binary halves and non-finite ones.

- The plot series' hours per night come from a table of rounded multiples of the grid's step, looked up by
  each night's count of instants: held to ``np.round`` of the hours themselves.

Differences allowed: none (the shortcuts choose exactly the instants and nights
the exact path does, no grid step at a crossing may differ, and give the same floats bit for bit).
"""

from __future__ import annotations

import math
import random
from collections import Counter
from typing import Any

import numpy as np
import pytest

from feasibility.documents import InstrumentSchedule, ObservationRequest, Observatory, parse_document
from feasibility.documents.moving_targets import EphemerisTableTarget, MajorBodyTarget, OrbitalElementsTarget
from feasibility.engine import sky_findings
from feasibility.engine import wording as w
from feasibility.engine.airmass import limit_altitude
from feasibility.engine.moving import _rounded_where
from feasibility.engine.sky_checks import measure_sky, night_availability
from feasibility.engine.sky_masks import in_windows, visible_mask
from feasibility.engine.tracks import cubic_at, forget_tracks, track_for

REQUESTS = 300
LIMITS = [k / 10 for k in range(11, 61)]


def _random_request(rng: random.Random, i: int) -> ObservationRequest:
    data: dict[str, Any] = {
        "label": f"r{i}",
        "target": {"name": f"field {i}", "ra": rng.uniform(0.0, 359.9), "dec": rng.uniform(-89.0, 40.0)},
        "instrument": "KESTREL",
        "setup": {"filter": "V"},
        "brightness": {"magnitude": 18.0, "band": "V"},
        "goal": {"snr": 30},
        "hours_requested": rng.choice([1.0, 5.0, 20.0]),
        "constraints": {"max_airmass": rng.choice([1.3, 1.5, 2.0, 2.5, 3.0]), "min_moon_separation_deg": 30.0},
    }
    if rng.random() < 0.3:
        start = rng.randint(1, 25)
        data["windows"] = [{"start": f"2027-05-{start:02d}T00:00:00Z", "end": f"2027-06-{start:02d}T12:00:00Z"}]
    return parse_document(ObservationRequest, data)


@pytest.fixture(scope="module")
def measured(grid_2027a, demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> list[tuple[ObservationRequest, Any]]:
    rng = random.Random(20270)
    instrument = demo_observatory.instrument_named("KESTREL")
    assert instrument is not None
    weather = np.array([demo_observatory.climate.usable_night_fraction.get(int(m), 1.0) for m in grid_2027a.night_months])
    available = night_availability(grid_2027a, instrument.name, demo_schedule)
    out = []
    for i in range(REQUESTS):
        request = _random_request(rng, i)
        out.append((request, measure_sky(request, demo_observatory, instrument, grid_2027a, available, weather, True)))
    return out


def test_the_airmass_limit_search_matches_the_per_instant_path(measured, demo_observatory: Observatory) -> None:
    assert demo_observatory.site.horizon  # the demo site's horizon profile takes part
    compared = differing = 0
    for request, sky in measured:
        probe = sky.probe
        view = probe.view
        sin_alt = view.up @ probe.vector  # the exact per-instant product
        for windows in (True, False):
            for limit in LIMITS:
                min_alt = max(limit_altitude(limit, probe.formula), probe.floor_alt)
                mask = visible_mask(
                    view,
                    probe.vector,
                    sin_alt,
                    min_alt,
                    probe.max_alt,
                    demo_observatory.site,
                    in_windows(request.windows, view.mjd) if windows and request.windows else None,
                )
                exact = view.per_night(mask) * probe.step_hours
                fast = probe.visible(limit, windows=windows)
                compared += 1
                differing += int(not np.array_equal(fast.per_night, exact))
                assert fast.total == float(exact.sum())
                assert fast.clear == float(exact @ probe.weather)
    assert compared == REQUESTS * 2 * len(LIMITS)
    assert differing == 0  # not even one grid step at a crossing


def test_the_suggested_airmass_limit_is_the_first_that_fits(measured) -> None:
    """The search (galloping up from the smallest limit, then bisecting) names the limit a plain scan over every
    candidate finds first, with the same hours, and says so when even the largest does not fit."""
    searched = 0
    for _, sky in measured:
        probe = sky.probe
        if not probe.airmass_binds(sky.airmass_limit) or not math.isfinite(sky.lowest_airmass):
            continue
        needed = sky.hours_requested
        candidates = [k / 10 for k in range(math.floor(sky.airmass_limit * 10 + 1), 61)]
        candidates = [c for c in candidates if probe.airmass_binds(c) or c == candidates[0]]
        first = next((c for c in candidates if sky_findings._fits(probe.visible(c), needed, sky.has_windows)), None)
        text = sky_findings._airmass_that_fits(sky, probe, needed)
        if first is not None:
            assert text == f"airmass limit {w.airmass(first)} would give {sky_findings._gives(probe.visible(first))}"
        elif probe.visible(candidates[-1]).total > sky.total_visible:
            assert text is not None and text.startswith(f"even airmass limit {w.airmass(candidates[-1])} ")
        else:
            assert text is None
        searched += 1
    assert searched > 50


def test_the_request_limit_matches_the_measured_visible_hours(measured) -> None:
    for _, sky in measured:
        assert np.array_equal(sky.probe.visible().per_night, sky.visible)


def test_hours_series_from_counts_match_rounding_the_hours(measured) -> None:
    """The plot series' hours looked up by count of instants are ``np.round(hours, 3)`` itself, float for float."""
    for _, sky in measured:
        expected = np.round(np.stack([sky.visible, sky.usable, sky.observable]), 3).tolist()
        assert sky.instants is not None
        assert sky.hours_series() == expected
        assert all(type(value) is float for row in sky.hours_series() for value in row)


def test_nights_lost_to_the_schedule_match_a_plain_look_up(measured, demo_schedule: InstrumentSchedule) -> None:
    entries = {entry.night: entry for entry in demo_schedule.nights}
    described = 0
    for _, sky in measured:
        text = sky_findings._nights_lost(sky, demo_schedule)
        wanted = sky.window_night_mask if sky.has_windows and sky.window_night_mask is not None else sky.observable > 0.0
        lost = np.flatnonzero(wanted & ~sky.available)
        if not lost.size:
            assert text is None
            continue
        kinds: Counter[str] = Counter()
        for index in lost:  # reference: each lost night's own schedule entry
            entry = entries.get(sky.nights[index])
            if entry is None:
                kinds["closed nights (not in the schedule)"] += 1
            elif entry.status != "open":
                kinds[f"{entry.status} nights" + (f" ({entry.note})" if entry.note else "")] += 1
            else:
                kinds[f"nights with {entry.instrument}"] += 1
        assert text is not None
        assert text.endswith(": " + ", ".join(f"{count} {kind}" for kind, count in kinds.most_common()))
        described += 1
    assert described > REQUESTS // 4


def _moving_targets() -> list[MajorBodyTarget | OrbitalElementsTarget | EphemerisTableTarget]:
    rows = [{"time": f"2027-{m:02d}-{d:02d}T00:00:00Z", "ra": 100.0 + m + d / 30, "dec": -20.0 + m, "magnitude": 17.0} for m in range(4, 8) for d in (1, 15)]
    return [
        MajorBodyTarget(kind="major_body", name="Moon", body="moon"),
        MajorBodyTarget(kind="major_body", name="Mars", body="mars"),
        OrbitalElementsTarget.model_validate(
            {
                "kind": "orbital_elements",
                "name": "near body",
                "epoch": "2027-06-01",
                "semi_major_axis": 1.1,
                "eccentricity": 0.2,
                "inclination": 5.0,
                "ascending_node_longitude": 40.0,
                "perihelion_argument": 120.0,
                "mean_anomaly": 10.0,
            }
        ),
        EphemerisTableTarget.model_validate({"kind": "ephemeris_table", "name": "table body", "ephemeris_table": rows}),
    ]


@pytest.mark.parametrize("target", _moving_targets(), ids=lambda t: t.kind + ":" + t.name)
def test_moving_directions_match_the_per_instant_form(target, grid_2027a) -> None:
    forget_tracks()
    track = track_for(target, grid_2027a)
    for view in (grid_2027a.samples(-18.0), grid_2027a.samples(0.0)):
        night = grid_2027a.n_nights // 3
        for start, stop in ((0, view.size), (int(view.night_starts[night]), int(view.night_starts[night + 1]))):
            mjd, up = view.mjd[start:stop], view.up[start:stop]
            position = cubic_at(track.mjd, track.position, mjd)  # the plain per-instant form
            if track.parallax:
                offset = track.site_offset
                position = position - (offset[0] * view.east[start:stop] + offset[1] * view.north[start:stop] + offset[2] * up)
            exact = position / np.linalg.norm(position, axis=-1, keepdims=True)
            known = track.known_at(mjd)
            exact[~known] = -up[~known]
            assert np.array_equal(track.directions(view, start, stop), exact)


def test_rounded_track_figures_match_python_round() -> None:
    rng = np.random.default_rng(2027)
    values = np.concatenate(
        [
            rng.uniform(-90.0, 360.0, 200_000),
            np.round(rng.uniform(-90.0, 360.0, 20_000), 4),  # decimal halves at 3 digits, as near as binary gets
            np.array([0.0625, 0.1875, -0.0, 1e-9, -1e-9, np.nan, np.inf, -np.inf]),  # exact binary halves, zeros, non-finite
        ]
    )
    keep = rng.random(values.size) > 0.1
    for digits in (2, 3):
        got = _rounded_where(values, digits, keep)
        expected = [round(float(x), digits) if k else None for x, k in zip(values, keep)]
        same = [a is None and b is None or a == b and math.copysign(1.0, a) == math.copysign(1.0, b) or a != a and b != b for a, b in zip(got, expected)]
        assert all(same)
