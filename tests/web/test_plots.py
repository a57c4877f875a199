"""The SVG plots: well-formed SVG from the real engine's series, None (no plot) when a series is missing or malformed."""

from __future__ import annotations

import copy
import threading
import xml.etree.ElementTree as ET
from typing import Any

import pytest

from feasibility.web import plots

from .support import demo_doc, engine_result

SVG_NS = "{http://www.w3.org/2000/svg}"  # W3C SVG 1.1


def _svg_text(svg: str | None) -> str:
    _root(svg)
    assert svg is not None
    return svg


def _root(svg: str | None) -> ET.Element:
    assert svg is not None
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG_NS}svg"
    return root


@pytest.fixture(scope="module")
def real_series() -> dict[str, Any]:
    """The series the real engine computes for demo proposal 001's first request."""
    return engine_result(demo_doc("001")).requests[0].series


def _series(real_series: dict[str, Any]) -> dict[str, Any]:
    """A copy a test may change."""
    return copy.deepcopy(real_series)


def test_request_plots_from_full_series(real_series: dict[str, Any]) -> None:
    series = _series(real_series)
    night = _svg_text(plots.night_curve_svg(series, "Invented $field$ <x>"))  # '$' is not read as mathtext, '<' is escaped by the SVG writer
    assert f"<!-- Altitude through the night beginning {series['night_curve']['night']} -->" in night
    assert "<!-- Target: Invented $field$ &lt;x&gt; -->" in night  # drawn as the literal text, escaped in the note
    assert "<!-- Usable hours per night across the semester -->" in _svg_text(plots.semester_hours_svg(series))
    assert "<!-- Signal-to-noise against exposure time -->" in _svg_text(plots.snr_curve_svg(series, {}))


def test_missing_or_malformed_series_give_no_plot() -> None:
    assert plots.night_curve_svg({}) is None
    assert plots.night_curve_svg({"night_curve": {"hours_from_midnight": [1, 2], "target_alt_deg": [3]}}) is None
    assert plots.night_curve_svg({"night_curve": {"hours_from_midnight": ["a"], "target_alt_deg": ["b"]}}) is None
    assert plots.semester_hours_svg({"nights": ["2027-04-01"], "hours_usable": []}) is None
    assert plots.semester_hours_svg({"nights": ["not a date"], "hours_usable": [1.0]}) is None
    assert plots.snr_curve_svg({"snr_curve": "nonsense"}) is None
    assert plots.verdict_counts_svg({}) is None
    assert plots.instrument_hours_svg([]) is None
    assert plots.ra_demand_svg([1.0] * 23, None) is None


def test_night_curve_without_moon_or_sun_still_draws() -> None:
    series: dict[str, Any] = {"night_curve": {"hours_from_midnight": [-1.0, 0.0, 1.0], "target_alt_deg": [40.0, 50.0, 40.0]}}
    _root(plots.night_curve_svg(series))


def test_twilight_limits_are_the_usno_ones() -> None:
    # U.S. Naval Observatory: civil, nautical and astronomical twilight end with the Sun's centre 6, 12 and 18 degrees down.
    from feasibility.web.dashboard.offer import TWILIGHT_ALTITUDE

    assert TWILIGHT_ALTITUDE == {"civil": -6.0, "nautical": -12.0, "astronomical": -18.0}


def test_goal_and_requested_time_are_marked(real_series: dict[str, Any]) -> None:
    series = _series(real_series)
    curve = series["snr_curve"]
    goal, requested = curve["goal_snr"], curve["requested_exposure_s"]
    with_marks = plots.snr_curve_svg(series, {})
    assert with_marks is not None and f"Goal S/N {goal:g}" in with_marks  # demo 001 halo-V: S/N 25
    curve.pop("goal_snr")
    curve.pop("requested_exposure_s")
    without = plots.snr_curve_svg(series, {})
    assert without is not None
    assert with_marks.count("<path") > without.count("<path")  # two more lines (and their legend entries)
    from_figures = plots.snr_curve_svg(series, {"goal_snr": goal, "requested_exposure_s": requested})
    assert from_figures is not None and from_figures.count("<path") == with_marks.count("<path")


def test_plots_can_be_drawn_from_several_threads(real_series: dict[str, Any]) -> None:
    series = _series(real_series)
    errors: list[BaseException] = []

    def draw() -> None:
        try:
            _root(plots.night_curve_svg(series, "t"))
            _root(plots.ra_demand_svg([float(h) for h in range(24)], [10.0] * 24, [20.0] * 24))
        except BaseException as exc:  # noqa: BLE001 - reported below
            errors.append(exc)

    threads = [threading.Thread(target=draw) for _ in range(3)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert errors == []
