"""Hours a semester offers, held to astropy (the reference library) over a few nights."""

from __future__ import annotations

import warnings
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pytest

from feasibility.documents import Observatory, load_document
from feasibility.engine import semester_offer as offer

DATA = Path(__file__).resolve().parents[2] / "feasibility" / "data"
FIRST, LAST = date(2027, 6, 18), date(2027, 6, 21)
STEP_MIN = 2.0


@pytest.fixture(scope="module")
def observatory() -> Observatory:
    return load_document(Observatory, DATA / "observatory.yaml")


@pytest.fixture(scope="module")
def reference(observatory: Observatory) -> dict[str, np.ndarray]:
    """Night hours and meridian right ascension by astropy: AltAz of the Sun (no refraction), apparent sidereal time."""
    from astropy import units as u
    from astropy.coordinates import AltAz, EarthLocation, get_body
    from astropy.time import Time

    from feasibility.offline import configure_offline

    configure_offline()
    site = observatory.site
    location = EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg, site.elevation_m * u.m)
    n = (LAST - FIRST).days + 1
    per_night = int(24 * 60 / STEP_MIN)
    midnight = np.array([Time((FIRST + timedelta(days=k + 1)).isoformat(), scale="utc").mjd for k in range(n)]) - site.longitude_deg / 360
    offsets = -0.5 + (np.arange(per_night) + 0.5) * STEP_MIN / 1440
    mjd = (midnight[:, None] + offsets[None, :]).ravel()
    times = Time(mjd, format="mjd", scale="utc")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # dates past the bundled IERS table: astropy warns and holds UT1-UTC
        sun = get_body("sun", times, location).transform_to(AltAz(obstime=times, location=location, pressure=0))
        lst = times.sidereal_time("apparent", longitude=site.longitude_deg * u.deg).deg
    night = sun.alt.deg < -18.0
    return {
        "night_hours": night.reshape(n, per_night).sum(axis=1) * STEP_MIN / 60,
        "ra_bin": np.floor(lst[night] / 15).astype(int) % 24,
    }


def test_night_hours_match_astropy(observatory: Observatory, reference: dict[str, np.ndarray]) -> None:
    computed = offer._compute(observatory, FIRST, LAST)
    hours = np.array(computed["night_hours"]["astronomical"])
    # astropy AltAz (reference library): within two 5-minute grid steps of the engine's grid.
    assert np.allclose(hours, reference["night_hours"], atol=2 * 5 / 60)
    assert computed["nights"][0] == FIRST.isoformat() and len(hours) == 4


def test_night_hours_by_right_ascension_match_astropy(observatory: Observatory, reference: dict[str, np.ndarray]) -> None:
    computed = offer._compute(observatory, FIRST, LAST)
    weather = observatory.climate.usable_night_fraction[6]  # June nights
    expected = np.bincount(reference["ra_bin"], minlength=24) * STEP_MIN / 60 * weather
    got = np.array(computed["ra_night_hours"])
    # Totals within 2 %, each hour of right ascension within a quarter of an hour (astropy as reference).
    assert got.sum() == pytest.approx(expected.sum(), rel=0.02)
    assert np.abs(got - expected).max() < 0.25
    dark = np.array(computed["ra_dark_hours"])
    assert np.all(dark <= got + 1e-9)  # dark time is part of the night


def test_instrument_hours_follow_the_schedule(observatory: Observatory) -> None:
    from feasibility.documents import InstrumentSchedule

    computed = offer._compute(observatory, FIRST, LAST)
    schedule = InstrumentSchedule.model_validate(
        {
            "observatory": observatory.name,
            "semester": "2027A",
            "nights": [
                {"night": "2027-06-18", "instrument": "KESTREL"},
                {"night": "2027-06-19", "instrument": "OWL"},
                {"night": "2027-06-20", "status": "shutdown"},
                {"night": "2027-06-21", "instrument": "KESTREL"},
            ],
        }
    )
    hours = offer.instrument_hours_offered(computed, observatory, schedule)
    weather = observatory.climate.usable_night_fraction[6]
    astro, nautical = computed["night_hours"]["astronomical"], computed["night_hours"]["nautical"]
    assert hours["KESTREL"] == pytest.approx((astro[0] + astro[3]) * weather)
    assert hours["OWL"] == pytest.approx(nautical[1] * weather)  # OWL observes to nautical twilight (its setting)
    assert "HERON" not in hours
    assert offer.instrument_hours_offered(computed, observatory, None) == {}


def test_semester_offer_is_cached_on_disk(observatory: Observatory, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("FEASIBILITY_CACHE_DIR", str(tmp_path))
    calls: list[tuple[date, date]] = []
    original = offer._compute

    def counting(obs: Observatory, first: date, last: date) -> offer.SemesterOffer:
        calls.append((first, last))
        return original(obs, FIRST, LAST)  # a short span keeps the test fast

    monkeypatch.setattr(offer, "_compute", counting)
    monkeypatch.setattr(offer, "_memory", {})
    first = offer.semester_offer(observatory, "2027A", "hash-a")
    assert first is not None and len(calls) == 1
    assert list(tmp_path.glob("semester-offer-*.json"))
    monkeypatch.setattr(offer, "_memory", {})  # a new process: read from disk, not recomputed
    assert offer.semester_offer(observatory, "2027A", "hash-a") == first and len(calls) == 1
    assert offer.semester_offer(observatory, "1999Z", "hash-a") is None
