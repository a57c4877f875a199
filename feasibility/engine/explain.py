"""The threshold and a computed suggestion for the atmosphere and image-quality findings.

Those two findings are made in :mod:`feasibility.engine.exposure_checks`; this
module adds, when one is not feasible, the threshold it missed with both numbers
and a suggestion with a figure computed from the same rules (the transmission
windows, the log-normal seeing), so every failing finding explains itself.
"""

from __future__ import annotations

import math

from feasibility.engine import wording as w
from feasibility.engine.exposure_checks import (
    _ATMOSPHERE,
    SEEING_INFEASIBLE_FRACTION,
    SEEING_MARGINAL_FRACTION,
)
from feasibility.results import Finding, Level

__all__ = ["explain_conditions", "nearest_transmitted_nm"]


def explain_conditions(findings: list[Finding], hours_usable: float) -> None:
    """Add threshold and computed suggestion to failing atmosphere and image-quality findings (in place)."""
    for finding in findings:
        if finding.level not in (Level.MARGINAL, Level.INFEASIBLE):
            continue
        if finding.check == "atmosphere":
            _explain_atmosphere(finding)
        elif finding.check == "image-quality":
            _explain_image_quality(finding, hours_usable)


def nearest_transmitted_nm(wavelength_nm: float) -> float | None:
    """The wavelength nearest ``wavelength_nm`` that lies in no blocked or difficult band (an edge of a window)."""
    edges = {edge for low, high, _, _ in _ATMOSPHERE for edge in (low, high) if math.isfinite(edge)}
    clear = [edge for edge in edges if not any(low <= edge < high for low, high, _, _ in _ATMOSPHERE)]
    return min(clear, key=lambda edge: abs(edge - wavelength_nm), default=None)


def _explain_atmosphere(finding: Finding) -> None:
    wavelength = finding.figures.get("wavelength_nm")
    if not isinstance(wavelength, (int, float)):
        return
    band = next(((low, high) for low, high, _, _ in _ATMOSPHERE if low <= wavelength < high), None)
    if band is None:
        return
    low, high = band
    upper = w.nanometres(high) if math.isfinite(high) else "beyond"
    finding.message += f" Missed: {w.nanometres(wavelength)} lies in the {w.nanometres(low)}–{upper} band."
    nearest = nearest_transmitted_nm(wavelength)
    if nearest is not None:
        finding.figures["nearest_transmitted_nm"] = nearest
        finding.suggestion = f"The nearest wavelength in an atmospheric window is {w.nanometres(nearest)}. " + (finding.suggestion or "")


def _explain_image_quality(finding: Finding, hours_usable: float) -> None:
    figures = finding.figures
    limit, median = figures.get("max_seeing_arcsec"), figures.get("seeing_median_arcsec")
    diffraction, share = figures.get("diffraction_limit_arcsec"), figures.get("seeing_fraction")
    if not isinstance(limit, (int, float)) or not isinstance(median, (int, float)):
        return
    if isinstance(diffraction, (int, float)) and limit < diffraction:
        finding.message += f" Missed: {w.arcsec(limit)} asked < {w.arcsec(diffraction)}, the diffraction limit."
    elif isinstance(share, (int, float)):
        needed = SEEING_MARGINAL_FRACTION if finding.level is Level.MARGINAL else SEEING_INFEASIBLE_FRACTION
        finding.message += (
            f" Missed: {w.arcsec(limit)} or better {w.percent(share)} of the time < {w.percent(needed)} "
            f"{'to be feasible' if finding.level is Level.MARGINAL else 'to be possible at all'}."
        )
    # The limit met half the time is the median delivered image (log-normal seeing): the threshold for feasible.
    figures["max_seeing_feasible_arcsec"] = median
    finding.suggestion = (
        f"A limit of {w.arcsec(median)} (the median delivered at this airmass) would be met "
        f"{w.percent(SEEING_MARGINAL_FRACTION)} of the time ({w.hours(SEEING_MARGINAL_FRACTION * hours_usable)} of the "
        f"{w.hours(hours_usable)} usable). " + (finding.suggestion or "")
    ).strip()
