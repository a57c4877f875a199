"""How numbers read in findings: one format per kind of figure, the same in the CLI, the JSON messages and the pages.

Findings carry their raw figures in ``figures``; the message and suggestion are
text for a reader, and every number in them goes through one of these functions
so that the same quantity never reads three ways (4.72e+04, 47250.0 h, ...).
"""

from __future__ import annotations

import math

__all__ = [
    "airmass",
    "arcsec",
    "count",
    "degrees",
    "fraction",
    "hours",
    "magnitude",
    "nanometres",
    "percent",
    "percentile",
    "pixels",
    "ratio",
    "seconds",
    "snr",
]


def hours(value: float) -> str:
    """Hours: one decimal below 100 h, whole hours above, thousands separated ("1.5 h", "236 h", "47,250 h").

    The value is first cut to four significant digits, as results store their hour figures
    (201,812 h reads "201,800 h"; 29.6500001 h reads as the stored 29.65 does), so a quantity
    reads the same whether it is formatted from the exact value or from the stored figure.
    """
    if not math.isfinite(value):
        return "unbounded h" if value > 0 else "– h"
    value = float(f"{value:.4g}")
    if abs(value) < 0.05 and value != 0:
        return f"{value * 60:.0f} min"
    if abs(value) < 100:
        return f"{value:.1f} h"
    if abs(value) >= 10_000:
        value = float(f"{value:.4g}")
    return f"{value:,.0f} h"


def snr(value: float) -> str:
    """Signal-to-noise: whole numbers from 10 up, one decimal below ("S/N 4.7", "S/N 25", "S/N 1,250")."""
    if not math.isfinite(value):
        return "S/N –"
    return f"S/N {value:.1f}" if abs(value) < 10 else f"S/N {value:,.0f}"


def seconds(value: float) -> str:
    """Exposure times: "0.8 s", "12 s", "1,800 s"; two significant figures below 0.1 s ("0.00019 s")."""
    if not math.isfinite(value):
        return "– s"
    if 0 < abs(value) < 0.1:
        return f"{value:.2g} s"
    return f"{value:.1f} s" if abs(value) < 10 else f"{value:,.0f} s"


def degrees(value: float) -> str:
    """Angles on the sky in degrees, one decimal: "32.5°"."""
    return f"{value:.1f}°"


def arcsec(value: float) -> str:
    """Angles in arcseconds, two decimals: "0.85\"" (seeing, slits, image quality)."""
    return f'{value:.2f}"'


def rate(value: float) -> str:
    """A motion on the sky in arcseconds per hour, one decimal: "35.2″/h"."""
    return f"{value:,.1f}″/h"


def airmass(value: float) -> str:
    """Airmass, two decimals: "1.60"."""
    return f"{value:.2f}"


def magnitude(value: float) -> str:
    """Magnitudes and surface brightness, two decimals: "21.48"."""
    return f"{value:.2f}"


def nanometres(value: float) -> str:
    """Wavelengths: "402 nm", "402.5 nm"."""
    return f"{value:g} nm" if abs(value) < 1e5 else f"{value:.0f} nm"


def ratio(value: float) -> str:
    """A ratio or factor, two significant figures: "1.3×"."""
    return f"{value:.2g}×" if abs(value) < 10 else f"{value:.0f}×"


def count(value: float, noun: str | None = None) -> str:
    """Whole quantities, thousands separated ("104,856"); with a noun, counted: "1 night", "12 nights"."""
    if not math.isfinite(value):
        return "–" if noun is None else f"– {noun}s"
    text = f"{value:,.0f}"
    if noun is None:
        return text
    return f"{text} {noun}" if value == 1 else f"{text} {noun}s"


def pixels(value: float) -> str:
    """Sizes on the detector in pixels, one decimal: "5.7 pixels"."""
    return f"{value:.1f} pixels"


def percentile(value: float) -> str:
    """A percentile as an ordinal: "80th percentile", "10th percentile", "82.5th percentile"."""
    text = f"{value:g}"
    whole = int(value) if float(value).is_integer() else None
    if whole is not None and whole % 100 not in (11, 12, 13) and whole % 10 in (1, 2, 3):
        return f"{text}{ {1: 'st', 2: 'nd', 3: 'rd'}[whole % 10] } percentile"
    return f"{text}th percentile"


def fraction(value: float) -> str:
    """A fraction between 0 and 1 (the Moon's illumination, a share of nights), two decimals: "0.30"."""
    return f"{value:.2f}"


def percent(value: float) -> str:
    """A share in per cent, whole numbers ("26 %"), "under 1 %" for a small non-zero share."""
    if 0.0 < value < 0.005:
        return "under 1 %"
    return f"{100 * value:.0f} %"
