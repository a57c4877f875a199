"""Template filters: numbers, times, figure names and levels as reviewers read them."""

from __future__ import annotations

import math
from datetime import UTC, datetime
from typing import Any

from flask import Flask

__all__ = ["LEVEL_WORDS", "figure_name", "figure_value", "hours", "init_app", "when"]

#: What each level means, in a few words (shown beside the level's name and symbol).
LEVEL_WORDS: dict[str, str] = {
    "feasible": "can be done as asked",
    "marginal": "can be done, with a risk or change to note",
    "unchecked": "could not be evaluated",
    "infeasible": "cannot be done as asked",
}


def init_app(app: Flask) -> None:
    """Register the filters on ``app``'s Jinja environment."""
    app.jinja_env.filters.update(
        hours=hours,
        when=when,
        figure_name=figure_name,
        figure_value=figure_value,
    )
    app.jinja_env.globals["LEVEL_WORDS"] = LEVEL_WORDS


def hours(value: Any) -> str:
    """Hours with one decimal, or a dash."""
    if not isinstance(value, (int, float)) or isinstance(value, bool) or math.isnan(value):
        return "—"
    return f"{value:,.1f}"


def when(value: datetime | None) -> str:
    """A stored time (timezone-aware, as the store gives it) as ``2027-04-02 21:05 UTC``."""
    if value is None:
        return "—"
    return value.astimezone(UTC).strftime("%Y-%m-%d %H:%M UTC")


def figure_name(key: str) -> str:
    """``hours_observable`` → ``hours observable``; ``snr_expected`` → ``S/N expected``; unit suffixes spelled out."""
    words = str(key).split("_")
    units = {"s": "(s)", "deg": "(°)", "arcsec": "(″)", "nm": "(nm)", "h": "(h)", "pix": "per pixel", "e": "(e⁻)", "mag": "(mag)"}
    out = []
    for word in words:
        if word == "snr":
            out.append("S/N")
        elif word in units and out:
            out.append(units[word])
        else:
            out.append(word)
    return " ".join(out)


def figure_value(value: Any) -> str:
    """A figure for reading: four significant digits, lists shortened, booleans as yes/no."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        if math.isnan(value):
            return "—"
        if value != 0 and (abs(value) >= 1e6 or abs(value) < 1e-3):
            return f"{value:.4g}"
        return f"{value:,.4g}" if abs(value) >= 1000 else f"{value:.4g}"
    if isinstance(value, (list, tuple)):
        shown = ", ".join(figure_value(v) for v in value[:6])
        return f"{shown}, … ({len(value)} values)" if len(value) > 6 else shown
    if isinstance(value, dict):
        return ", ".join(f"{figure_name(k)}: {figure_value(v)}" for k, v in list(value.items())[:6])
    return str(value)
