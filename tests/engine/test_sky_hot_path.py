"""The hot path's bookkeeping: per-night counts over masks, also where some nights have no true night.

The engine counts a request's instants night by night with one ``reduceat`` per
mask (:meth:`NightSamples.per_night`); here it is held to a plain count of each
night's instants, on a grid at latitude 60° N in May and June, where nautical
night ends in May, so that some nights have no instants at all.
"""

from __future__ import annotations

import math
from datetime import UTC, date

import numpy as np
import pytest

from feasibility.engine import skygrid
from feasibility.engine.positions import target_vector

FIRST, LAST = date(2027, 5, 1), date(2027, 6, 30)


@pytest.fixture(scope="module")
def northern_grid() -> skygrid.SkyGrid:
    """May and June 2027 at latitude 60° N, sampled every 20 minutes (coarse, to build quickly)."""
    return skygrid.sky_grid(60.0, 10.0, 100.0, FIRST, LAST, step_minutes=20.0)


def test_twilights_at_60_north_in_may_and_june(northern_grid: skygrid.SkyGrid) -> None:
    # Reference (from memory: the Sun's declination is about +15° on 1 May and +23.44° at the June
    # solstice): the Sun's lowest altitude is -(90° - 60° - declination), so -15° on 1 May and -6.56°
    # at the solstice: no astronomical (-18°) night at all, nautical (-12°) night only in early May,
    # civil (-6°) night every night.
    assert northern_grid.samples(-18.0).size == 0
    nautical = northern_grid.night_hours(-12.0)
    assert nautical[0] > 0.0 and np.all(nautical[-40:] == 0.0)
    assert np.all(northern_grid.night_hours(-6.0) > 0.0)
    solstice = (date(2027, 6, 21) - FIRST).days
    lowest = np.min(northern_grid.sun_alt_deg[northern_grid.night_index == solstice])
    assert lowest == pytest.approx(-(90.0 - 60.0 - 23.44), abs=0.3)


@pytest.mark.parametrize("limit", [0.0, -12.0, -18.0])
def test_per_night_counts_match_a_plain_count(northern_grid: skygrid.SkyGrid, limit: float) -> None:
    view = northern_grid.samples(limit)
    rng = np.random.default_rng(7)
    for fraction in (0.0, 0.3, 1.0):
        chosen = rng.random(view.size) < fraction
        counts = view.per_night(chosen)
        # Reference: plain arithmetic, counting each night's chosen instants one night at a time.
        expected = [int(np.count_nonzero(chosen[view.night_index == night])) for night in range(northern_grid.n_nights)]
        assert counts.tolist() == expected
        assert counts.size == northern_grid.n_nights


def test_nights_are_contiguous_slices(northern_grid: skygrid.SkyGrid) -> None:
    view = northern_grid.samples(-12.0)
    starts = view.night_starts
    assert starts[0] == 0 and starts[-1] == view.size and np.all(np.diff(starts) >= 0)
    for night in range(northern_grid.n_nights):
        # Reference: the night index of every instant in the slice, by definition of the slice.
        assert np.all(view.night_index[starts[night] : starts[night + 1]] == night)
    assert np.any(np.diff(starts) == 0)  # nautical night ends in May at 60° N


def test_visible_hours_per_night_from_masks_match_a_direct_count(northern_grid: skygrid.SkyGrid) -> None:
    view = northern_grid.samples(-12.0)
    vector = target_vector(280.0, 38.8)  # a northern summer target, high at midnight
    limit = math.sin(math.radians(30.0))
    hours = view.per_night((view.up @ vector) >= limit) * northern_grid.step_hours
    # Reference: plain arithmetic, each night's instants with the target above 30°, one step each.
    for night in range(northern_grid.n_nights):
        up = view.up[view.night_index == night] @ vector
        assert hours[night] == pytest.approx(np.count_nonzero(up >= limit) * northern_grid.step_hours)


def test_time_windows_include_both_ends(northern_grid: skygrid.SkyGrid) -> None:
    from datetime import datetime, timedelta

    from feasibility.documents import ObservationRequest, parse_document
    from feasibility.engine.sky_checks import _in_windows

    mjd = northern_grid.samples(0.0).mjd
    unix_epoch_mjd = 40587.0

    def moment(value: float) -> str:
        return (datetime(1970, 1, 1, tzinfo=UTC) + timedelta(days=value - unix_epoch_mjd)).isoformat()

    start, end = float(mjd[100]), float(mjd[130])
    request = parse_document(
        ObservationRequest,
        {
            "label": "w",
            "target": {"name": "t", "ra": 280.0, "dec": 38.8},
            "instrument": "KESTREL",
            "setup": {"filter": "V"},
            "brightness": {"magnitude": 18.0, "band": "V"},
            "goal": {"snr": 10},
            "hours_requested": 1.0,
            "windows": [{"start": moment(start), "end": moment(end)}, {"start": moment(mjd[400] + 1e-4), "end": moment(mjd[402])}],
        },
    )
    inside = _in_windows(request, mjd)
    # Reference: plain arithmetic, an instant is inside when start <= t <= end (both ends included),
    # with the window ends as the documents carry them (datetimes to the microsecond).
    bounds = [(w.start.timestamp() / 86400.0 + unix_epoch_mjd, w.end.timestamp() / 86400.0 + unix_epoch_mjd) for w in request.windows]
    expected = np.zeros(mjd.size, dtype=bool)
    for low, high in bounds:
        expected |= (mjd >= low) & (mjd <= high)
    assert inside.tolist() == expected.tolist()
    assert np.count_nonzero(inside) >= 30
