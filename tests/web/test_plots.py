"""The SVG plots: well-formed SVG from the real engine's series, None (no plot) when a series is missing or malformed."""

from __future__ import annotations

import copy
import threading
import xml.etree.ElementTree as ET
from typing import Any

import pytest

from feasibility.web import plots

from .support import demo_doc, engine_result, proposal_doc

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


# --- the redesigned request plots, read from the figure objects (figures_kept) -------------------------------------


def _kept_figure(draw: Any) -> Any:
    with plots.figures_kept() as figures:
        assert draw() == ""
    assert len(figures) == 1
    return figures[0]


def _by_gid(fig: Any, gid: str) -> list[Any]:
    return [artist for artist in fig.findobj() if getattr(artist, "get_gid", lambda: None)() == gid]


def test_night_limit_line_sits_at_the_limit_formulas_altitude(real_series: dict[str, Any]) -> None:
    from feasibility.engine.airmass import limit_altitude

    curve = real_series["night_curve"]
    fig = _kept_figure(lambda: plots.night_curve_svg(real_series, "t"))
    (line,) = _by_gid(fig, "airmass-limit")
    expected = limit_altitude(curve["airmass_limit"], curve["airmass_formula"])
    assert curve["airmass_formula"] == "secant"  # the demo observatory states its limits in plain sec z
    # Reference: sec z = 1/sin(alt) (plane-parallel atmosphere), so the limit's altitude is asin(1/X).
    import math

    assert expected == pytest.approx(math.degrees(math.asin(1.0 / curve["airmass_limit"])), abs=1e-9)
    assert list(line.get_ydata()) == pytest.approx([expected, expected])
    (floor,) = _by_gid(fig, "lowest-altitude")
    assert floor.get_ydata()[0] == curve["floor_altitude_deg"]


def test_night_time_axis_is_local_mean_solar_time_with_utc(real_series: dict[str, Any]) -> None:
    longitude = real_series["night_curve"]["longitude_deg"]
    # Definition of local mean solar time: the mean Sun turns 15° per hour, so local − UTC = longitude / 15 h (east positive).
    assert plots.local_time_offset_hours(longitude) == pytest.approx(longitude / 15.0)
    assert plots.local_time_offset_hours(15.0) == 1.0
    fig = _kept_figure(lambda: plots.night_curve_svg(real_series, "t"))
    ax = fig.axes[0]
    ticks, labels = ax.get_xticks(), [t.get_text() for t in ax.get_xticklabels()]
    assert len(ticks) >= 3
    for hour, label in zip(ticks, labels):
        local, utc = label.split("\n")
        local_h = int(local[:2]) + int(local[3:5]) / 60
        utc_h = int(utc[:2]) + int(utc[3:5]) / 60
        assert local_h == pytest.approx(hour % 24)
        assert ((local_h - utc_h - longitude / 15.0 + 12) % 24) - 12 == pytest.approx(0.0, abs=1 / 60)


def test_night_plot_marks_usable_stretch_moon_horizon_and_airmass_scale(real_series: dict[str, Any]) -> None:
    curve = real_series["night_curve"]
    assert any(curve["usable"]) and "horizon_alt_deg" in curve  # demo 001 is usable, the demo site has a horizon profile
    svg = _svg_text(plots.night_curve_svg(real_series, "t"))
    assert "<!-- Usable stretch -->" in svg and "<!-- Horizon profile -->" in svg
    assert "Moon " in svg and "° away -->" in svg
    fig = _kept_figure(lambda: plots.night_curve_svg(real_series, "t"))
    right = fig.axes[1]
    from feasibility.engine.airmass import airmass_secant

    for altitude, label in zip(right.get_yticks(), right.get_yticklabels()):
        assert float(airmass_secant(altitude)) == pytest.approx(float(label.get_text()), rel=1e-9)  # sec z = 1/sin(alt)


def test_never_rising_target_gets_a_message() -> None:
    # Demo site at latitude −26.4°: a star at declination +80° culminates at 90 − 26.4 − 80 < 0°, below the horizon
    # (altitude at upper culmination = 90° − |φ − δ|, spherical astronomy, e.g. Smart's Textbook on Spherical Astronomy).
    series = engine_result(proposal_doc("NR-1", dec="+80:00:00")).requests[0].series
    assert max(series["night_curve"]["target_alt_deg"]) < 0
    svg = _svg_text(plots.night_curve_svg(series, "Polar field"))
    assert "<!-- Polar field never rises above the horizon on this night -->" in svg
    assert "never rises" not in _svg_text(plots.night_curve_svg(engine_result(demo_doc("001")).requests[0].series, "t"))


def test_semester_layers_account_for_every_night_hour(real_series: dict[str, Any]) -> None:
    import numpy as np

    fig = _kept_figure(lambda: plots.semester_hours_svg(real_series))
    layers = [a for a in fig.findobj() if str(getattr(a, "get_gid", lambda: "")() or "").startswith("layer:")]
    names = [a.get_gid() for a in layers]
    assert names[0] == "layer:Usable, expected clear" and "layer:Target not visible" in names
    top = layers[-1].get_data().values  # the stack's top: the last layer's upper edge
    # The stages only ever remove hours, so the stack reaches each night's hours of true night (engine's own series).
    assert np.allclose(top, real_series["hours_night"], atol=1e-6)
    usable = np.asarray(real_series["hours_usable"]) * np.asarray(real_series["clear_fraction"])
    assert np.allclose(layers[0].get_data().values, usable, atol=1e-9)


def test_snr_plot_is_in_hours(real_series: dict[str, Any]) -> None:
    fig = _kept_figure(lambda: plots.snr_curve_svg(real_series, {}))
    (line,) = _by_gid(fig, "snr")
    assert list(line.get_xdata()) == pytest.approx([s / 3600.0 for s in real_series["snr_curve"]["exposure_s"]])
    assert fig.axes[0].get_xlabel() == "Total exposure time (hours)"
    fig.draw_without_rendering()
    (legend,) = fig.legends
    # Below the data, covering none of it (display coordinates grow upwards).
    assert legend.get_window_extent().y1 <= fig.axes[0].get_window_extent().y0


def test_track_plot_of_a_moving_target_and_none_for_a_fixed_one(real_series: dict[str, Any]) -> None:
    # Demo 008's asteroid (orbital elements with H, G): the stored track has one point a night.
    series = engine_result(demo_doc("008")).requests[1].series
    assert len(series["track"]["ra_deg"]) == len(series["nights"])
    root = _root(plots.track_svg(series))
    ids = {element.get("id") for element in root.iter()}
    assert {"track", "track-usable", "track-value"} <= ids
    assert plots.track_svg(real_series) is None  # a fixed star stores no track
    broken = copy.deepcopy(series)
    broken["track"]["ra_deg"] = broken["track"]["ra_deg"][:-1]
    assert plots.track_svg(broken) is None
