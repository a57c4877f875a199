"""astropy never downloads: dates past the bundled IERS table are computed offline and logged.

Outside reference: astropy's own configuration items (astropy.utils.iers.conf,
astropy.utils.data.conf) and its AltAz transform.
"""

from __future__ import annotations

import logging
import urllib.request
from datetime import date, timedelta

import numpy as np
import pytest

from feasibility import offline


class _NoNetwork(AssertionError):
    pass


@pytest.fixture
def no_network(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    """Make every way astropy could fetch a file raise, and record the attempts."""
    import astropy.utils.data
    import astropy.utils.iers.iers

    attempts: list[str] = []

    def refuse(*args: object, **kwargs: object) -> None:
        attempts.append(repr(args[:1]))
        raise _NoNetwork("a download was attempted")

    monkeypatch.setattr(astropy.utils.data, "download_file", refuse)
    monkeypatch.setattr(astropy.utils.iers.iers, "download_file", refuse)
    monkeypatch.setattr(urllib.request, "urlopen", refuse)
    return attempts


def test_configuration_turns_downloads_off() -> None:
    from astropy.utils import iers
    from astropy.utils.data import conf as data_conf

    offline.configure_offline()
    # Reference: astropy's documented configuration items for working offline.
    assert iers.conf.auto_download is False
    assert iers.conf.auto_max_age is None
    assert iers.conf.iers_degraded_accuracy == "warn"
    assert data_conf.allow_internet is False


def test_engine_import_configures_offline() -> None:
    from astropy.utils import iers

    import feasibility.engine  # noqa: F401

    assert iers.conf.auto_download is False  # reference: astropy.utils.iers.conf


def test_altaz_past_the_bundled_table_needs_no_download(no_network: list[str]) -> None:
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord
    from astropy.time import Time

    offline.configure_offline()
    end = offline.iers_table_end_mjd()
    when = Time(end + 120.0 + np.arange(0.0, 1.0, 0.1), format="mjd", scale="utc")
    site = EarthLocation.from_geodetic(-70.0 * u.deg, -30.0 * u.deg, 2000.0 * u.m)
    with offline.log_astropy_warnings():
        altaz = SkyCoord(10.0 * u.deg, -20.0 * u.deg).transform_to(AltAz(obstime=when, location=site, pressure=0))
    assert no_network == []  # reference: astropy would call download_file here with auto_download on
    assert np.all(np.isfinite(altaz.alt.deg))


def test_sky_grid_past_the_bundled_table_logs_once(no_network: list[str], caplog: pytest.LogCaptureFixture, monkeypatch: pytest.MonkeyPatch) -> None:
    from feasibility.engine.skygrid import build_sky_grid

    monkeypatch.setattr(offline, "_logged", set())
    end = offline.iers_table_end_mjd()
    first = date(1858, 11, 17) + timedelta(days=int(end) + 60)
    with caplog.at_level(logging.WARNING, logger="feasibility.offline"):
        grid = build_sky_grid(-30.0, -70.0, 2000.0, first, first + timedelta(days=2), step_minutes=30.0)
        build_sky_grid(-30.0, -70.0, 2000.0, first, first + timedelta(days=2), step_minutes=30.0)
    assert no_network == []
    assert grid.beyond_iers_table
    assert np.all(np.isfinite(grid.basis))
    # Reference: the rotation rows are orthonormal, as any rotation's (astropy/ERFA matrices are).
    rows = grid.basis[:, :3, :]
    assert np.allclose(np.einsum("nij,nkj->nik", rows, rows), np.eye(3), atol=1e-12)
    notes = [r for r in caplog.records if "IERS" in r.getMessage()]
    assert len(notes) == 1


def test_unrelated_warnings_still_propagate() -> None:
    import warnings

    with pytest.raises(UserWarning), offline.log_astropy_warnings():
        warnings.warn("not astropy's", UserWarning, stacklevel=1)
