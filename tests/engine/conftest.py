"""Shared fixtures of the engine tests: the demo observatory and schedule, and a private grid cache.

The demo observatory is invented: it is only ever an input here, never an expected value.
Sky grids are cached in one temporary directory per test session, so the first
test that needs a semester's grid builds it and the rest reuse it.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from importlib import resources
from pathlib import Path

import pytest

from feasibility.documents import InstrumentSchedule, Observatory, load_document

DEMO_DATA = resources.files("feasibility") / "data"


@pytest.fixture(scope="session", autouse=True)
def grid_cache_dir(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    """A session-wide FEASIBILITY_CACHE_DIR so tests never touch the user's cache."""
    directory = tmp_path_factory.mktemp("skygrid-cache")
    previous = os.environ.get("FEASIBILITY_CACHE_DIR")
    os.environ["FEASIBILITY_CACHE_DIR"] = str(directory)
    yield directory
    if previous is None:
        os.environ.pop("FEASIBILITY_CACHE_DIR", None)
    else:
        os.environ["FEASIBILITY_CACHE_DIR"] = previous


@pytest.fixture(scope="session")
def demo_observatory() -> Observatory:
    """The invented demo observatory (input only)."""
    return load_document(Observatory, Path(str(DEMO_DATA / "observatory.yaml")))


@pytest.fixture(scope="session")
def demo_schedule() -> InstrumentSchedule:
    """The invented demo instrument schedule for 2027A (input only)."""
    return load_document(InstrumentSchedule, Path(str(DEMO_DATA / "schedule-2027A.yaml")))


@pytest.fixture(scope="session")
def grid_2027a(demo_observatory: Observatory, grid_cache_dir: Path):
    """The demo site's sky grid for semester 2027A at the engine's default 5-minute step."""
    from feasibility.engine.skygrid import sky_grid

    site = demo_observatory.site
    semester = demo_observatory.semester_named("2027A")
    assert semester is not None
    return sky_grid(site.latitude_deg, site.longitude_deg, site.elevation_m, semester.first_night, semester.last_night)


@pytest.fixture(scope="session")
def demo_site_location(demo_observatory: Observatory):
    """The demo site as an astropy EarthLocation, for the reference computations."""
    import astropy.units as u
    from astropy.coordinates import EarthLocation

    site = demo_observatory.site
    return EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg, site.elevation_m * u.m)
