"""The SVG plots: well-formed SVG from stored series, None (no plot) when a series is missing or malformed."""

from __future__ import annotations

import threading
import xml.etree.ElementTree as ET
from typing import Any

from feasibility.web import plots

from .support import _series

SVG_NS = "{http://www.w3.org/2000/svg}"  # W3C SVG 1.1


def _root(svg: str | None) -> ET.Element:
    assert svg is not None
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG_NS}svg"
    return root


def test_request_plots_from_full_series() -> None:
    series = _series(3.0)
    _root(plots.night_curve_svg(series, "Invented $field$ <x>"))  # '$' is not read as mathtext, '<' is escaped by the SVG writer
    _root(plots.semester_hours_svg(series))
    _root(plots.snr_curve_svg(series, {}))


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


def test_goal_and_requested_time_are_marked() -> None:
    series = _series(3.0)
    with_marks = plots.snr_curve_svg(series, {})
    series.pop("goal_snr")
    series.pop("requested_exposure_s")
    without = plots.snr_curve_svg(series, {})
    assert with_marks is not None and without is not None
    assert with_marks.count("<path") > without.count("<path")  # two more lines (and their legend entries)
    from_figures = plots.snr_curve_svg(series, {"goal_snr": 50.0, "requested_exposure_s": 8640.0})
    assert from_figures is not None and from_figures.count("<path") == with_marks.count("<path")


def test_plots_can_be_drawn_from_several_threads() -> None:
    series = _series(2.0)
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
