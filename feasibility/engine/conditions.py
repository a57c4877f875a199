"""The hand-over between the sky checks and the exposure checks.

The sky checks (visibility, moon, schedule) reduce a semester of sampled instants
to the conditions under which a request would be observed; the exposure checks
(sensitivity, instrument, atmosphere, image quality) need nothing else.
"""

from __future__ import annotations

from dataclasses import dataclass

from feasibility.documents import Instrument, Observatory, ObservationRequest

__all__ = ["Conditions", "sky_band_for", "wavelength_for"]


@dataclass(frozen=True)
class Conditions:
    """Conditions over the usable time of one request; always finite.

    When no instant qualifies, the airmass is the target's lowest over the
    semester's nights (or the request's airmass limit when it never rises) and the
    sky is the site's dark sky, so the exposure checks still give figures.
    """

    hours_observable: float
    """Hours in true night above the airmass limit, within windows, meeting the Moon constraints."""
    hours_usable: float
    """``hours_observable`` restricted to nights the instrument is mounted and the telescope open."""
    airmass_median: float
    airmass_min: float
    sky_mag_arcsec2: float
    """Median sky brightness in ``sky_band`` over the observable instants, dark sky plus moonlight (Vega mag/arcsec²)."""
    sky_band: str


def wavelength_for(request: ObservationRequest, instrument: Instrument) -> float | None:
    """The wavelength (nm) the request observes at: the filter's, or the goal's or setup's for a spectrum."""
    if instrument.kind == "imager":
        item = instrument.filter_named(request.setup.filter or "")
        return item.wavelength_nm if item is not None else None
    return request.goal.wavelength_nm or request.setup.central_wavelength_nm


def sky_band_for(request: ObservationRequest, instrument: Instrument, observatory: Observatory) -> str:
    """The climate band whose sky and extinction apply: the filter's band, else the band nearest in wavelength."""
    if instrument.kind == "imager":
        item = instrument.filter_named(request.setup.filter or "")
        if item is not None:
            return item.band
    wavelength = wavelength_for(request, instrument)
    bands = observatory.climate.bands
    if wavelength is None:
        return request.brightness.band if request.brightness.band in bands else next(iter(bands))
    return min(bands, key=lambda name: abs(bands[name].wavelength_nm - wavelength))
