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

__all__ = [
    "DRAWING_LOCK",
    "PALETTE",
    "figures_kept",
    "instrument_hours_svg",
    "night_curve_svg",
    "ra_demand_svg",
    "semester_hours_svg",
    "snr_curve_svg",
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


def night_curve_svg(series: Mapping[str, Any], target: str = "target") -> str | None:
    """Altitude of the target, the Moon and the Sun through one representative night.

    Shades civil, nautical and astronomical twilight (Sun 6°, 12° and 18° below the
    horizon, U.S. Naval Observatory definitions) and marks the horizon.
    """
    curve = series.get("night_curve")
    if not isinstance(curve, Mapping):
        return None
    hours = _floats(curve.get("hours_from_midnight"))
    target_alt = _floats(curve.get("target_alt_deg"))
    if not hours or len(target_alt) != len(hours):
        return None
    moon_alt = _floats(curve.get("moon_alt_deg"))
    sun_alt = _floats(curve.get("sun_alt_deg"))
    night = curve.get("night")

    with _LOCK:
        fig, ax = _figure()
        if len(sun_alt) == len(hours):
            _shade_twilight(ax, hours, sun_alt)
        ax.plot(hours, target_alt, color=PALETTE["blue"], linewidth=2.2, label=f"Target: {_short(target)}")
        if len(moon_alt) == len(hours):
            ax.plot(hours, moon_alt, color=PALETTE["purple"], linewidth=1.6, linestyle="--", label="Moon")
        if len(sun_alt) == len(hours):
            ax.plot(hours, sun_alt, color=PALETTE["orange"], linewidth=1.4, linestyle=":", label="Sun")
        ax.axhline(0.0, color=PALETTE["black"], linewidth=0.8)
        ax.set_ylim(-30, 90)  # the Sun far below the horizon leaves the frame; the shading shows night
        ax.set_xlim(min(hours), max(hours))
        ax.set_xlabel("Hours from local midnight")
        ax.set_ylabel("Altitude (degrees)")
        title = "Altitude through the night"
        if isinstance(night, str) and night:
            title += f" beginning {_short(night)}"
        ax.set_title(title)
        _legend_below(fig, ax)
        return _svg(fig)


def semester_hours_svg(series: Mapping[str, Any]) -> str | None:
    """Hours usable per night across the semester, with the Moon's illuminated fraction on a second axis."""
    nights = _dates(series.get("nights"))
    hours = _floats(series.get("hours_usable"))
    if not nights or len(hours) != len(nights):
        return None
    illumination = _floats(series.get("moon_illumination"))

    with _LOCK:
        fig, ax = _figure()
        days = [float(n.toordinal()) for n in nights]
        if all(b - a == 1.0 for a, b in zip(days, days[1:])):
            # Consecutive nights: one stepped outline (a single path) draws and lays out far faster than a bar per night.
            edges = [float(d) for d in mdates.date2num(nights)] + [float(mdates.date2num(nights[-1])) + 1.0]
            heights = [0.0 if math.isnan(h) else h for h in hours]
            ax.stairs(heights, [e - 0.5 for e in edges], fill=True, color=PALETTE["sky"], edgecolor=PALETTE["blue"], linewidth=0.3,
                      label="Hours usable")
            ax.xaxis_date()
        else:
            ax.bar(nights, hours, width=1.0, color=PALETTE["sky"], edgecolor=PALETTE["blue"], linewidth=0.3, label="Hours usable")
        ax.set_ylabel("Hours usable per night")
        ax.set_ylim(0, max(max(hours) * 1.15, 1.0))
        ax.set_title("Usable hours per night across the semester")
        handles, labels = ax.get_legend_handles_labels()
        if len(illumination) == len(nights):
            ax2 = ax.twinx()
            ax2.plot(nights, illumination, color=PALETTE["black"], linewidth=1.2, linestyle="--", label="Moon illuminated fraction")
            ax2.set_ylim(0, 1.05)
            ax2.set_ylabel("Moon illuminated fraction")
            more_handles, more_labels = ax2.get_legend_handles_labels()
            handles += more_handles
            labels += more_labels
        fig.legend(handles, labels, loc="outside lower center", ncols=len(labels), fontsize=8, frameon=False)
        fig.autofmt_xdate()
        return _svg(fig)


def snr_curve_svg(series: Mapping[str, Any], figures: Mapping[str, Any] | None = None) -> str | None:
    """Signal-to-noise against total exposure time, with the goal and the requested time marked.

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

    with _LOCK:
        fig, ax = _figure()
        ax.plot(exposure, snr, color=PALETTE["blue"], linewidth=2.2, label="Expected S/N")
        if goal is not None:
            ax.axhline(goal, color=PALETTE["green"], linewidth=1.4, linestyle="--", label=f"Goal S/N {goal:g}")
        if requested is not None:
            ax.axvline(requested, color=PALETTE["vermillion"], linewidth=1.4, linestyle=":", label=f"Requested: {_duration(requested)} exposure")
        if needed is not None and (requested is None or abs(needed - requested) > 1e-6 * max(needed, 1.0)):
            ax.axvline(needed, color=PALETTE["black"], linewidth=1.2, linestyle="-.", label=f"Needed: {_duration(needed)} exposure")
        positive = all(value > 0 for value in exposure)
        if positive and max(exposure) / min(exposure) > 50:
            ax.set_xscale("log")
        if all(value > 0 for value in snr) and max(snr) / max(min(snr), 1e-9) > 50:
            ax.set_yscale("log")
        ax.set_xlabel("Total exposure time (s)")
        ax.set_ylabel("Signal-to-noise ratio")
        ax.set_title("Signal-to-noise against exposure time")
        _legend_below(fig, ax)
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
        ax.bar(centres, list(requested), width=0.9, color=PALETTE["blue"], edgecolor=PALETTE["black"], linewidth=0.5,
               label="Requested hours (feasible and marginal requests)")
        if offered is not None and len(offered) == 24:
            ax.step(range(25), list(offered) + [offered[-1]], where="post", color=PALETTE["vermillion"], linewidth=1.8,
                    linestyle="--", label="Hours offered")
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


def _legend_below(fig: Figure, ax: Any) -> None:
    """The legend in a row under the plot, where it hides no data."""
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        # One row when the labels fit across the figure (about 80 characters at this size), else two columns.
        ncols = min(len(labels), 4) if sum(len(label) + 6 for label in labels) <= 96 else min(len(labels), 2)
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


def _shade_twilight(ax: Any, hours: list[float], sun_alt: list[float]) -> None:
    """Shade day, twilight and night from the Sun's altitude (USNO: −6°, −12°, −18°)."""
    bands = [
        (-6.0, 90.0, "#fff4d6", "Day and civil twilight"),
        (-18.0, -6.0, "#e3ecf6", "Nautical and astronomical twilight"),
    ]
    for low, high, colour, label in bands:
        mask = [low < s <= high for s in sun_alt]
        if any(mask):
            ax.fill_between(hours, -30, 90, where=mask, color=colour, step="mid", linewidth=0, label=label)
    night = [s <= -18.0 for s in sun_alt]
    if any(night):
        ax.fill_between(hours, -30, 90, where=night, color="#cdd5df", step="mid", linewidth=0, label="Night (Sun below −18°)")


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
