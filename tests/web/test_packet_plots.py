"""The meeting packet's plots: drawn once per finished run, then reused, and the same image either way.

The reference is the dashboard's own drawing functions applied to the run's stored
series and rasterised directly (:func:`packet_plots.rasterise` of the figure that
:func:`feasibility.web.plots.figures_kept` keeps); a PDF's pages are counted by its
page objects (ISO 32000-1, 7.7.3.3) and its images by its image XObjects (8.9.5).
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from typing import Any

import numpy as np
import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import select

from feasibility.store.models import CheckRun
from feasibility.web import plots
from feasibility.web.dashboard import packet_plots
from feasibility.web.dashboard.views import PLOT_KINDS, _requests_of

from .support import sign_in


@pytest.fixture(autouse=True)
def empty_store() -> Iterator[None]:
    packet_plots.clear()
    yield
    packet_plots.clear()


def _pages(pdf: bytes) -> int:
    return len(re.findall(rb"/Type\s*/Page\b", pdf))


def _images(pdf: bytes) -> int:
    return len(re.findall(rb"/Subtype\s*/Image\b", pdf))


def _first_request(app: Flask, run_id: int) -> tuple[dict[str, Any], packet_plots.RunKey | None]:
    """The run's first request as the pages read it, and the key its plots are kept under."""
    from feasibility.store.db import session_scope

    with app.app_context(), session_scope() as session:
        run = session.scalars(select(CheckRun).where(CheckRun.id == run_id)).one()
        return _requests_of(run)[0], packet_plots.run_key(session, run)


def test_plots_are_drawn_once_and_reused_unchanged(app: Flask, semester: dict[str, Any]) -> None:
    item, key = _first_request(app, semester["runs"]["SQ-2027A-001"])
    assert key is not None and key[1] == semester["runs"]["SQ-2027A-001"] and "***" not in key[0].split("@")[-1]
    kinds = [kind for kind in PLOT_KINDS if item["plots"][kind]]
    assert len(kinds) == 3  # night, semester and S/N: the engine stored every series for 001
    first = packet_plots.request_images(key, item, PLOT_KINDS)
    assert packet_plots.stats() == {"drawn": 3, "reused": 0, "kept": 3}
    again = packet_plots.request_images(key, item, PLOT_KINDS)
    assert packet_plots.stats() == {"drawn": 3, "reused": 3, "kept": 3}
    for kept, fresh, kind in zip(again, first, kinds, strict=True):
        assert kept.dtype == np.uint8 and kept.shape == fresh.shape and kept.shape[2] == 3
        assert np.array_equal(kept, fresh), kind  # PNG is lossless: the kept image is the drawn one
    # The reference: the dashboard's own drawing of the same series, rasterised directly.
    with plots.figures_kept() as figures:
        PLOT_KINDS[kinds[0]][1](item["series"], item["figures"], item["target"])
    direct = packet_plots.rasterise(figures[0])
    assert np.array_equal(direct, first[0])
    assert direct.shape[1] == round(figures[0].get_figwidth() * packet_plots.PLOT_DPI)  # the plot's width in inches at print resolution
    # Without a run id nothing is kept.
    packet_plots.request_images(None, item, PLOT_KINDS)
    assert packet_plots.stats()["kept"] == 3 and packet_plots.stats()["drawn"] == 6


def test_store_drops_the_least_recently_used(app: Flask, semester: dict[str, Any], monkeypatch: pytest.MonkeyPatch) -> None:
    item, _ = _first_request(app, semester["runs"]["SQ-2027A-001"])
    packet_plots.request_images(("store", 1, "t"), item, PLOT_KINDS)
    one_run = packet_plots.stats()["kept"]
    monkeypatch.setattr(packet_plots, "MAX_BYTES", sum(len(v) for v in packet_plots._images.values()) + 1)
    packet_plots.request_images(("store", 2, "t"), item, PLOT_KINDS)  # a second run's images push the first run's out
    assert packet_plots.stats()["kept"] <= one_run
    assert all(key[0][1] == 2 for key in packet_plots._images)
    packet_plots.request_images(("another store", 2, "t"), item, PLOT_KINDS)  # the same run id in another store: drawn, not reused
    assert packet_plots.stats()["reused"] == 0


def test_packet_again_reuses_every_plot(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    first = client.get("/semesters/2027A/packet.pdf")
    assert first.status_code == 200 and first.data.startswith(b"%PDF-")
    drawn = packet_plots.stats()["drawn"]
    assert 0 < _images(first.data) <= drawn  # each plot drawn once (identical plots may share one image object)
    again = client.get("/semesters/2027A/packet.pdf")
    assert packet_plots.stats()["drawn"] == drawn and packet_plots.stats()["reused"] == drawn
    assert _pages(again.data) == _pages(first.data) >= 1 + 4 and _images(again.data) == _images(first.data)
    report = client.get("/proposals/SQ-2027A-001/report.pdf")  # the single report reuses the packet's plots too
    assert report.status_code == 200 and packet_plots.stats()["drawn"] == drawn
