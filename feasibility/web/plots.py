"""Server-side plots of stored results, drawn with matplotlib as SVG text.

Every function takes what a check run stored (a request's ``series`` and
``figures``, or the semester overview's sums) and returns an SVG document, or
``None`` when the stored result lacks the series (results from older engine
versions): pages then say "no plot" instead of failing. Nothing here recomputes
the engine.

Each figure is a :class:`matplotlib.figure.Figure` of its own, never pyplot's
global state, so plots can be drawn from the web server's threads; a lock
serialises the drawing because matplotlib's text and font caches are shared.
Colours come from the Okabe & Ito (2008) colour-blind-safe palette, and every
line also differs by style or marker so that colour is never the only cue.
"""

from __future__ import annotations

import io
import math
import threading
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from datetime import date
from typing import Any

import matplotlib

matplotlib.use("Agg")  # no display; the SVG canvas is chosen by savefig(format="svg")

from matplotlib import dates as mdates  # noqa: E402  (after the backend choice)
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

from feasibility.engine.airmass import LIMIT_FORMULAS, limit_altitude  # noqa: E402

__all__ = [
    "DRAWING_LOCK",
    "INK",
    "PALETTE",
    "figures_kept",
    "instrument_hours_svg",
    "local_time_offset_hours",
    "night_curve_svg",
    "ra_demand_svg",
    "semester_hours_svg",
    "snr_curve_svg",
    "track_svg",
    "verdict_counts_svg",
]

#: Okabe & Ito (2008), "Color Universal Design": distinguishable with the common colour-vision deficiencies.
PALETTE: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
    "grey": "#8C8C8C",
}

#: One colour and one hatch per level, so bars differ by pattern as well as colour.
LEVEL_STYLE: dict[str, tuple[str, str]] = {
    "feasible": (PALETTE["green"], ""),
    "marginal": (PALETTE["orange"], "//"),
    "unchecked": (PALETTE["grey"], ".."),
    "infeasible": (PALETTE["vermillion"], "xx"),
}

_LOCK = threading.Lock()
#: Held while matplotlib draws; take it to render figures kept by :func:`figures_kept` (the PDF packet).
DRAWING_LOCK = _LOCK
_SIZE = (7.2, 3.4)
_kept = threading.local()


#: The request plots' own colours (night, semester and S/N): chosen to stay apart in lightness as well as hue,
#: and every line or area also differs by line style or hatching, so the plots read in grey or without colour.
INK: dict[str, str] = {
    "target": "#1F3A5F",  # deep blue-black: the target, the plot's main line
    "moon": "#7A4E9B",  # violet
    "limit": "#B23A48",  # brick red: the request's airmass limit
    "floor": "#4D4D4D",  # dark grey: the site's and mount's lowest altitude
    "ground": "#8A6E4B",  # earth brown: the horizon profile
    "usable": "#2E8B57",  # sea green: the usable stretch
    "twilight": "#F1E6C8",  # pale sand: the Sun less than the night's depth below the horizon
    "night": "#DCE3EC",  # pale slate: true night
    "weather": "#8FA9C9",
    "schedule": "#E0B04A",
    "lunar": "#B8A1D1",
    "hidden": "#D3D3D3",
}

#: Airmasses labelled on the night plot's right-hand scale.
_AIRMASS_TICKS = (1.0, 1.1, 1.2, 1.5, 2.0, 3.0)


def local_time_offset_hours(longitude_deg: float) -> float:
    """Local mean solar time minus UTC, in hours: the longitude (east positive) over 15° per hour.

    Mean solar time turns with the mean Sun, 360° in 24 hours, so a place 15° east
    of Greenwich has its mean noon one hour earlier in UTC (definition of local mean time).
    """
    return longitude_deg / 15.0


def night_curve_svg(series: Mapping[str, Any], target: str = "target") -> str | None:
    """Altitude of the target (and the Moon) through one representative night, with what limits it.

    Draws the request's airmass limit as an altitude (converted with the observatory's
    own limit formula when the engine stored it), the lowest altitude the site and
    mount allow, the horizon profile along the target's path, an airmass scale on the
    right, the usable stretch shaded, twilight in the background (U.S. Naval Observatory
    definitions: the Sun 18° down ends astronomical twilight), local mean solar time with
    UTC under it, and the Moon's distance at its closest during the usable stretch.
    A target that never rises gets a plain message instead of an empty night.
    """
    curve = series.get("night_curve")
    if not isinstance(curve, Mapping):
        return None
    hours = _floats(curve.get("hours_from_midnight"))
    target_alt = _floats(curve.get("target_alt_deg"))
    if not hours or len(target_alt) != len(hours):
        return None
    moon_alt = _aligned(curve.get("moon_alt_deg"), hours)
    sun_alt = _aligned(curve.get("sun_alt_deg"), hours)
    moon_sep = _aligned(curve.get("moon_separation_deg"), hours)
    horizon = _aligned(curve.get("horizon_alt_deg"), hours)
    usable = curve.get("usable")
    usable_mask = [bool(u) for u in usable] if isinstance(usable, Sequence) and len(usable) == len(hours) else []
    night = curve.get("night")
    formula = curve.get("airmass_formula") if curve.get("airmass_formula") in LIMIT_FORMULAS else "secant"
    limit = _number(curve.get("airmass_limit"))
    limit_alt = limit_altitude(limit, str(formula)) if limit is not None else None
    floor = _number(curve.get("floor_altitude_deg"))
    longitude = _number(curve.get("longitude_deg"))

    with _LOCK:
        fig, ax = _figure(size=(7.6, 3.9))
        if sun_alt:
            _shade_sky(ax, hours, sun_alt)
        if horizon:
            ax.fill_between(hours, 0.0, horizon, color=INK["ground"], alpha=0.35, hatch="\\\\", linewidth=0, label="Horizon profile", gid="horizon")
        if usable_mask and any(usable_mask):
            ax.fill_between(
                hours,
                0.0,
                90.0,
                where=usable_mask,
                step="mid",
                facecolor=INK["usable"],
                alpha=0.18,
                hatch="//",
                edgecolor=INK["usable"],
                linewidth=0,
                label="Usable stretch",
                gid="usable",
            )
        ax.plot(hours, target_alt, color=INK["target"], linewidth=2.4, label=f"Target: {_short(target)}", gid="target")
        if moon_alt:
            ax.plot(hours, moon_alt, color=INK["moon"], linewidth=1.5, linestyle="--", label="Moon", gid="moon")
        if limit_alt is not None and limit is not None:
            ax.axhline(
                limit_alt,
                color=INK["limit"],
                linewidth=1.6,
                linestyle="-.",
                gid="airmass-limit",
                label=f"Airmass limit {limit:g} ({LIMIT_FORMULAS[str(formula)]}): {limit_alt:.1f}°",
            )
        if floor is not None:
            ax.axhline(
                floor, color=INK["floor"], linewidth=1.2, linestyle=":", gid="lowest-altitude", label=f"Lowest altitude allowed (site, mount): {floor:g}°"
            )
        ax.set_ylim(0, 90)
        ax.set_xlim(min(hours), max(hours))
        ax.set_ylabel("Altitude (degrees)")
        _airmass_scale(ax, str(formula))
        _time_axis(ax, hours, longitude)
        highest = max((a for a in target_alt if not math.isnan(a)), default=-90.0)
        if moon_sep and moon_alt and highest > 0.0:
            _note_moon(ax, hours, target_alt, moon_alt, moon_sep, usable_mask)
        if highest <= 0.0:
            ax.text(
                0.5,
                0.55,
                f"{_short(target)} never rises above the horizon on this night",
                transform=ax.transAxes,
                ha="center",
                va="center",
                fontsize=11,
                color=INK["limit"],
                gid="never-rises",
                bbox={"boxstyle": "round", "facecolor": "white", "edgecolor": INK["limit"]},
            )
        elif usable_mask and not any(usable_mask):
            ax.text(
                0.5,
                0.92,
                "No usable time on this night",
                transform=ax.transAxes,
                ha="center",
                va="top",
                fontsize=10,
                color=INK["limit"],
                bbox={"boxstyle": "round", "facecolor": "white", "edgecolor": INK["limit"]},
            )
        title = "Altitude through the night"
        if isinstance(night, str) and night:
            title += f" beginning {_short(night)}"
        ax.set_title(title)
        _legend_below(fig, ax, max_cols=3)
        return _svg(fig)


def semester_hours_svg(series: Mapping[str, Any]) -> str | None:
    """Per night across the semester, where the night's hours go, stacked from the bottom up.

    Clear usable hours (usable hours times the month's clear fraction), then the hours
    lost to the weather, to the schedule (instrument not mounted or telescope closed),
    to the Moon's constraints, and the hours the target is not visible (below the limits,
    outside the windows). Stored results from older versions lack the night and clear
    hours: their plot starts at the visible hours and leaves the weather out.
    """
    nights = _dates(series.get("nights"))
    usable = _floats(series.get("hours_usable"))
    if not nights or len(usable) != len(nights):
        return None
    n = len(nights)
    observable = _aligned(series.get("hours_observable"), usable) or usable
    visible = _aligned(series.get("hours_visible"), usable) or observable
    night_hours = _aligned(series.get("hours_night"), usable)
    clear = _aligned(series.get("clear_fraction"), usable)
    zero = [0.0] * n
    kept = [u * c for u, c in zip(usable, clear)] if clear else usable
    layers = [
        ("Usable, expected clear" if clear else "Usable", kept, INK["usable"], ""),
        ("Lost to the weather", [u - k for u, k in zip(usable, kept)] if clear else zero, INK["weather"], "...."),
        ("Lost to the schedule", [o - u for o, u in zip(observable, usable)], INK["schedule"], "\\\\"),
        ("Lost to the Moon", [v - o for v, o in zip(visible, observable)], INK["lunar"], "xx"),
        ("Target not visible", [h - v for h, v in zip(night_hours, visible)] if night_hours else zero, INK["hidden"], "//"),
    ]
    layers = [layer for layer in layers if any(value > 0 for value in _clean(layer[1]))] or layers[:1]
    illumination = _aligned(series.get("moon_illumination"), usable)

    with _LOCK:
        fig, ax = _figure(size=(7.6, 3.9))
        edges = [float(d) - 0.5 for d in mdates.date2num(nights)]
        edges.append(edges[-1] + 1.0)
        days = [float(d.toordinal()) for d in nights]
        bottom = zero
        for label, values, colour, hatch in layers:
            values = [max(v, 0.0) for v in _clean(values)]
            top = [b + v for b, v in zip(bottom, values)]
            if all(b - a == 1.0 for a, b in zip(days, days[1:])):
                # Consecutive nights: one stepped area per layer (a single path) draws far faster than a bar per night.
                ax.stairs(
                    top,
                    edges,
                    baseline=bottom,
                    fill=True,
                    facecolor=colour,
                    edgecolor=INK["floor"],
                    hatch=hatch,
                    linewidth=0.2,
                    label=label,
                    gid=f"layer:{label}",
                )
            else:
                ax.bar(
                    nights,
                    values,
                    bottom=bottom,
                    width=1.0,
                    color=colour,
                    edgecolor=INK["floor"],
                    hatch=hatch,
                    linewidth=0.2,
                    label=label,
                    gid=f"layer:{label}",
                )
            bottom = top
        ax.xaxis_date()
        ax.set_ylabel("Hours per night")
        ax.set_ylim(0, max(max(bottom) * 1.12, 1.0))
        ax.set_title("Usable hours per night across the semester")
        handles, labels = ax.get_legend_handles_labels()
        if illumination:
            ax2 = ax.twinx()
            ax2.plot(nights, illumination, color=INK["target"], linewidth=1.0, linestyle="--", label="Moon illuminated fraction")
            ax2.set_ylim(0, 1.05)
            ax2.set_ylabel("Moon illuminated fraction")
            more_handles, more_labels = ax2.get_legend_handles_labels()
            handles += more_handles
            labels += more_labels
        fig.legend(handles, labels, loc="outside lower center", ncols=3, fontsize=8, frameon=False)
        fig.autofmt_xdate()
        return _svg(fig)


def snr_curve_svg(series: Mapping[str, Any], figures: Mapping[str, Any] | None = None) -> str | None:
    """Signal-to-noise against total exposure time in hours, with the goal and the requested and needed times marked.

    ``goal_snr`` and ``requested_exposure_s`` are looked up in the curve itself,
    then in the series, then in the request's figures.
    """
    curve = series.get("snr_curve")
    if not isinstance(curve, Mapping):
        return None
    exposure = _floats(curve.get("exposure_s"))
    snr = _floats(curve.get("snr"))
    if not exposure or len(snr) != len(exposure):
        return None
    figures = figures or {}
    goal = _number(curve.get("goal_snr"), series.get("goal_snr"), figures.get("goal_snr"))
    requested = _number(curve.get("requested_exposure_s"), series.get("requested_exposure_s"), figures.get("requested_exposure_s"))
    needed = _number(curve.get("needed_exposure_s"), series.get("needed_exposure_s"))
    exposure_h = [value / 3600.0 for value in exposure]

    with _LOCK:
        fig, ax = _figure(size=(7.6, 3.9))
        ax.plot(exposure_h, snr, color=INK["target"], linewidth=2.4, label="Expected S/N", gid="snr")
        if goal is not None:
            ax.axhline(goal, color=INK["usable"], linewidth=1.5, linestyle="--", label=f"Goal S/N {goal:g}")
        if requested is not None:
            ax.axvline(requested / 3600.0, color=INK["limit"], linewidth=1.5, linestyle=":", label=f"Requested: {_duration(requested)} exposure")
        if needed is not None and (requested is None or abs(needed - requested) > 1e-6 * max(needed, 1.0)):
            ax.axvline(needed / 3600.0, color=INK["moon"], linewidth=1.3, linestyle="-.", label=f"Needed: {_duration(needed)} exposure")
        if all(value > 0 for value in exposure) and max(exposure) / min(exposure) > 50:
            ax.set_xscale("log")
        if all(value > 0 for value in snr) and max(snr) / max(min(snr), 1e-9) > 50:
            ax.set_yscale("log")
        ax.set_xlabel("Total exposure time (hours)")
        ax.set_ylabel("Signal-to-noise ratio")
        ax.set_title("Signal-to-noise against exposure time")
        _legend_below(fig, ax, max_cols=2)
        return _svg(fig)


def track_svg(series: Mapping[str, Any]) -> str | None:
    """A moving target's track: its path on the sky night by night (right ascension growing to the left, as on
    the sky) and its magnitude across the semester (or, without one, its motion in arcseconds per hour).

    ``series["track"]`` holds per night at local midnight the right ascension and declination (None where an
    ephemeris table leaves the night out), the rate and the magnitude; None for a fixed target.
    """
    track = series.get("track")
    nights = _dates(series.get("nights"))
    if not isinstance(track, Mapping) or not nights:
        return None
    ra = track.get("ra_deg")
    dec = track.get("dec_deg")
    if not isinstance(ra, list) or not isinstance(dec, list) or len(ra) != len(nights) or len(dec) != len(nights):
        return None
    known = [i for i, (a, d) in enumerate(zip(ra, dec)) if isinstance(a, (int, float)) and isinstance(d, (int, float))]
    if not known:
        return None
    ra_known = [float(ra[i]) for i in known]
    # Unwrap across 0h so a path over the equinox stays one line.
    unwrapped = [ra_known[0]]
    for value in ra_known[1:]:
        step = (value - unwrapped[-1] + 180.0) % 360.0 - 180.0
        unwrapped.append(unwrapped[-1] + step)
    usable = _aligned(series.get("hours_usable"), nights)
    magnitude = track.get("magnitude")
    values, label = (
        (magnitude, f"Magnitude ({track.get('magnitude_band') or 'request band'})")
        if isinstance(magnitude, list)
        else (track.get("rate_arcsec_per_hour"), "Motion on the sky (″/h)")
    )
    other = _aligned(values, nights)

    with _LOCK:
        fig = Figure(figsize=(7.6, 3.9), dpi=96, layout="constrained")
        sky, along = fig.subplots(1, 2)
        for ax in (sky, along):
            ax.grid(True, color="#d9d9d9", linewidth=0.6)
            ax.set_axisbelow(True)
        sky.plot(
            [value / 15.0 for value in unwrapped],
            [float(dec[i]) for i in known],
            color=INK["target"],
            linewidth=1.6,
            label="Path, one point a night",
            gid="track",
        )
        chosen = [k for k, i in enumerate(known) if usable and usable[i] > 0]
        if chosen:
            sky.plot(
                [unwrapped[k] / 15.0 for k in chosen],
                [float(dec[known[k]]) for k in chosen],
                linestyle="none",
                marker="o",
                markersize=2.5,
                color=INK["usable"],
                label="Nights with usable hours",
                gid="track-usable",
            )
        sky.annotate(nights[known[0]].isoformat(), (unwrapped[0] / 15.0, float(dec[known[0]])), fontsize=7)
        sky.annotate(nights[known[-1]].isoformat(), (unwrapped[-1] / 15.0, float(dec[known[-1]])), fontsize=7)
        sky.invert_xaxis()
        sky.set_xlabel("Right ascension (hours)")
        sky.set_ylabel("Declination (degrees)")
        sky.set_title("Path on the sky (geocentric)", fontsize=10)
        if other:
            along.plot(nights, other, color=INK["target"], linewidth=1.6, gid="track-value")
            if isinstance(magnitude, list):
                along.invert_yaxis()  # brighter up
            along.xaxis.set_major_locator(mdates.MonthLocator())
            along.xaxis.set_major_formatter(mdates.DateFormatter("%b"))
        along.set_ylabel(label)
        along.set_title("Across the semester", fontsize=10)
        _legend_below(fig, sky, max_cols=2)
        return _svg(fig)


def verdict_counts_svg(counts: Mapping[str, int]) -> str | None:
    """Horizontal bars: how many proposals have each verdict."""
    levels = [level for level in LEVEL_STYLE if level in counts]
    if not levels:
        return None
    with _LOCK:
        fig, ax = _figure(size=(7.2, 2.6))
        values = [counts[level] for level in levels]
        bars = ax.barh(levels, values, color=[LEVEL_STYLE[lv][0] for lv in levels], edgecolor=PALETTE["black"], linewidth=0.6)
        for bar, level in zip(bars, levels):
            bar.set_hatch(LEVEL_STYLE[level][1])
        for y, value in enumerate(values):
            ax.text(value, y, f" {value}", va="center", fontsize=9)
        ax.invert_yaxis()
        ax.set_xlim(0, max(max(values) * 1.15, 1))
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_xlabel("Proposals")
        ax.set_title("Proposals by verdict")
        return _svg(fig)


def instrument_hours_svg(rows: Sequence[Mapping[str, Any]]) -> str | None:
    """Grouped bars per instrument: hours requested, hours needed to reach the goals, and hours offered.

    ``rows`` are mappings with ``instrument``, ``hours_requested`` and optionally
    ``hours_needed`` and ``hours_offered``.
    """
    if not rows:
        return None
    names = [str(row["instrument"]) for row in rows]
    series = [
        ("hours_requested", "Requested", PALETTE["blue"], ""),
        ("hours_needed", "Needed for the goals", PALETTE["sky"], "//"),
        ("hours_offered", "Offered (scheduled night hours)", PALETTE["green"], ".."),
    ]
    present = [s for s in series if any(row.get(s[0]) is not None for row in rows)]
    width = 0.8 / max(len(present), 1)
    with _LOCK:
        fig, ax = _figure()
        for k, (key, label, colour, hatch) in enumerate(present):
            xs = [i + (k - (len(present) - 1) / 2) * width for i in range(len(names))]
            values = [float(row.get(key) or 0.0) for row in rows]
            bars = ax.bar(xs, values, width=width, color=colour, hatch=hatch, edgecolor=PALETTE["black"], linewidth=0.6, label=label)
            # Each bar's value written on it: requests are often tiny beside the hours offered, and must still be read.
            ax.bar_label(bars, labels=[f"{v:.3g}" if row.get(key) is not None else "" for v, row in zip(values, rows)], fontsize=7, padding=1)
        ax.margins(y=0.12)  # room above the tallest bar for its value
        ax.set_xticks(range(len(names)), [_short(n, 16) for n in names])
        ax.set_ylabel("Hours")
        ax.set_title("Requested against usable hours per instrument")
        _legend_below(fig, ax)
        return _svg(fig)


def ra_demand_svg(requested: Sequence[float], dark: Sequence[float] | None, night: Sequence[float] | None = None) -> str | None:
    """Requested hours per hour of right ascension (bars) against the dark and night hours offered there (lines)."""
    if len(requested) != 24:
        return None
    with _LOCK:
        fig, ax = _figure()
        centres = [h + 0.5 for h in range(24)]
        ax.bar(centres, list(requested), width=0.9, color=PALETTE["blue"], edgecolor=PALETTE["black"], linewidth=0.5, label="Requested hours")
        for values, label, colour, style in (
            (night, "Night hours offered", PALETTE["orange"], ":"),
            (dark, "Dark hours offered", PALETTE["vermillion"], "--"),
        ):
            if values is not None and len(values) == 24:
                ax.step(range(25), list(values) + [values[-1]], where="post", color=colour, linewidth=1.8, linestyle=style, label=label)
        ax.set_xlim(0, 24)
        ax.set_xticks(range(0, 25, 2))
        ax.set_xlabel("Right ascension (hours)")
        ax.set_ylabel("Hours in the semester")
        ax.set_title("Demand by right ascension")
        _legend_below(fig, ax)
        return _svg(fig)


def ra_offer_svg(requested: Sequence[float], offered: Sequence[float] | None, title: str) -> str | None:
    """Requested hours per hour of right ascension (bars) against the hours offered there (a line), for one slice of time."""
    if len(requested) != 24:
        return None
    with _LOCK:
        fig, ax = _figure()
        centres = [h + 0.5 for h in range(24)]
        ax.bar(
            centres,
            list(requested),
            width=0.9,
            color=PALETTE["blue"],
            edgecolor=PALETTE["black"],
            linewidth=0.5,
            label="Requested hours (feasible and marginal requests)",
        )
        if offered is not None and len(offered) == 24:
            ax.step(range(25), list(offered) + [offered[-1]], where="post", color=PALETTE["vermillion"], linewidth=1.8, linestyle="--", label="Hours offered")
        ax.set_xlim(0, 24)
        ax.set_xticks(range(0, 25, 2))
        ax.set_xlabel("Right ascension (hours)")
        ax.set_ylabel("Hours in the semester")
        ax.set_title(_short(title, 70))
        _legend_below(fig, ax)
        return _svg(fig)


# --- helpers -------------------------------------------------------------------------------


def _figure(size: tuple[float, float] = _SIZE) -> tuple[Figure, Any]:
    fig = Figure(figsize=size, dpi=96, layout="constrained")
    ax = fig.add_subplot()
    ax.grid(True, color="#d9d9d9", linewidth=0.6)
    ax.set_axisbelow(True)
    return fig, ax


def _legend_below(fig: Figure, ax: Any, max_cols: int = 4) -> None:
    """The legend in a row under the plot, where it hides no data."""
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        # One row when the labels fit across the figure (about 80 characters at this size), else fewer columns.
        ncols = min(len(labels), max_cols) if sum(len(label) + 6 for label in labels) <= 96 else min(len(labels), 2)
        fig.legend(handles, labels, loc="outside lower center", ncols=ncols, fontsize=8, frameon=False)


@contextmanager
def figures_kept() -> Iterator[list[Figure]]:
    """Within the block, this thread's drawing functions keep each figure they draw (in order) in the list given, and return "" (no SVG)."""
    previous = getattr(_kept, "figures", None)
    kept: list[Figure] = []
    _kept.figures = kept
    try:
        yield kept
    finally:
        _kept.figures = previous


def _svg(fig: Figure) -> str:
    kept = getattr(_kept, "figures", None)
    if kept is not None:
        kept.append(fig)
        return ""
    buffer = io.StringIO()
    fig.savefig(buffer, format="svg", metadata={"Date": None, "Creator": None})
    return buffer.getvalue()


def _shade_sky(ax: Any, hours: list[float], sun_alt: list[float]) -> None:
    """Twilight (Sun between 0° and −18°) and true night (below −18°, USNO astronomical twilight) as background bands."""
    twilight = [-18.0 < s <= 0.0 for s in sun_alt]
    if any(twilight):
        ax.fill_between(hours, 0, 90, where=twilight, color=INK["twilight"], step="mid", linewidth=0, label="Twilight")
    night = [s <= -18.0 for s in sun_alt]
    if any(night):
        ax.fill_between(hours, 0, 90, where=night, color=INK["night"], step="mid", linewidth=0, label="Night (Sun below −18°)")


def _airmass_scale(ax: Any, formula: str) -> None:
    """A right-hand scale labelling altitudes with their airmass in the limit's formula (the same rule as the limit line)."""
    right = ax.twinx()
    right.set_ylim(ax.get_ylim())
    ticks = [(limit_altitude(x, formula), x) for x in _AIRMASS_TICKS]
    right.set_yticks([alt for alt, _ in ticks], [f"{x:g}" for _, x in ticks])
    right.set_ylabel(f"Airmass ({LIMIT_FORMULAS[formula]})")
    right.grid(False)


def _time_axis(ax: Any, hours: list[float], longitude: float | None) -> None:
    """Whole hours of local mean solar time, with UTC under each when the site's longitude is known.

    The engine counts ``hours_from_midnight`` from local mean midnight (the site's longitude), so the
    local clock reading is the hour itself and UTC is it minus :func:`local_time_offset_hours`.
    """
    ticks = [float(h) for h in range(math.ceil(min(hours)), math.floor(max(hours)) + 1)]
    if len(ticks) > 8:
        ticks = [t for t in ticks if int(t) % 2 == 0]
    if longitude is None:
        ax.set_xticks(ticks, [_clock(t) for t in ticks])
        ax.set_xlabel("Local time (hours from local midnight)")
        return
    offset = local_time_offset_hours(longitude)
    ax.set_xticks(ticks, [f"{_clock(t)}\n{_clock(t - offset)} UTC" for t in ticks])
    sign = "+" if offset >= 0 else "−"
    ax.set_xlabel(f"Local mean solar time (UTC {sign}{_clock(abs(offset))}, longitude {longitude:g}°) and UTC")


def _note_moon(ax: Any, hours: list[float], target_alt: list[float], moon_alt: list[float], moon_sep: list[float], usable: list[bool]) -> None:
    """Write the Moon's distance where it matters: its closest approach while the Moon is up, within the usable stretch if any."""
    chosen = [i for i in range(len(hours)) if (usable[i] if usable and any(usable) else target_alt[i] > 0) and moon_alt[i] > 0]
    chosen = [i for i in chosen if not math.isnan(moon_sep[i])]
    if not chosen:
        where = "during the usable stretch" if usable and any(usable) else "while the target is up"
        ax.text(0.99, 0.97, f"Moon below the horizon {where}", transform=ax.transAxes, ha="right", va="top", fontsize=8, gid="moon-note")
        return
    i = min(chosen, key=lambda k: moon_sep[k])
    ax.annotate(
        f"Moon {moon_sep[i]:.0f}° away",
        xy=(hours[i], target_alt[i]),
        xytext=(0, 14),
        textcoords="offset points",
        ha="center",
        fontsize=8,
        color=INK["moon"],
        gid="moon-note",
        arrowprops={"arrowstyle": "-", "color": INK["moon"], "linewidth": 0.8},
        bbox={"boxstyle": "round,pad=0.2", "facecolor": "white", "edgecolor": INK["moon"], "linewidth": 0.6},
    )


def _clock(hours: float) -> str:
    """Hours as a 24-hour clock reading, HH:MM (wrapping past midnight)."""
    minutes = round(hours * 60.0) % (24 * 60)
    return f"{minutes // 60:02d}:{minutes % 60:02d}"


def _aligned(values: object, like: Sequence[object]) -> list[float]:
    """``values`` as floats when they are as many as ``like``, else [] (an older or malformed series)."""
    out = _floats(values)
    return out if len(out) == len(like) else []


def _clean(values: list[float]) -> list[float]:
    return [0.0 if math.isnan(v) else v for v in values]


def _floats(values: object) -> list[float]:
    if not isinstance(values, Sequence) or isinstance(values, (str, bytes)):
        return []
    out: list[float] = []
    for value in values:
        if value is None:
            out.append(math.nan)
        elif isinstance(value, (int, float)) and not isinstance(value, bool):
            out.append(float(value))
        else:
            return []
    return out


def _dates(values: object) -> list[date]:
    if not isinstance(values, Sequence) or isinstance(values, (str, bytes)):
        return []
    try:
        return [date.fromisoformat(str(value)[:10]) for value in values]
    except ValueError:
        return []


def _number(*candidates: object) -> float | None:
    for value in candidates:
        if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
            return float(value)
    return None


def _duration(seconds: float) -> str:
    return f"{seconds / 3600:.3g} h" if seconds >= 3600 else f"{seconds:.3g} s"


def _short(text: str, limit: int = 40) -> str:
    """Shorten user text for a label, and escape ``$`` so matplotlib never reads it as mathtext."""
    text = str(text)
    text = text if len(text) <= limit else text[: limit - 1] + "…"
    return text.replace("$", r"\$")
