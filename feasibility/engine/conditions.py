"""The hand-over between the sky checks and the exposure checks.

The sky checks (visibility, moon, schedule) reduce a semester of sampled instants
to the conditions under which a request would be observed; the exposure checks
(sensitivity, instrument, atmosphere, image quality) need nothing else.

A verdict is judged at two points over the usable instants: the *typical*
conditions (the median airmass and sky brightness) and the *design* conditions
(a conservative percentile of each, ``climate.design_percentile``, default 80:
the airmass that 80 % of the usable instants do not exceed, and the sky
brightness that 80 % of the moonlit usable instants do not exceed, i.e. the sky
of the lunar time the request's Moon constraints allow; the dark sky when the
Moon is never up then). The seeing at each point comes from the site's seeing distribution in
:mod:`feasibility.engine.exposure_checks`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import Instrument, ObservationRequest, Observatory

__all__ = ["Conditions", "nearest_rank", "sky_band_for", "wavelength_for"]


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
    airmass_design: float | None = None
    """Airmass at the design percentile of the usable instants (None: the median)."""
    sky_mag_arcsec2_design: float | None = None
    """Sky brightness in ``sky_band`` that the design percentile of the usable instants with the Moon up does not
    exceed (None: the median)."""

    @property
    def airmass_at_design(self) -> float:
        """The design airmass, or the median when none was measured."""
        return self.airmass_median if self.airmass_design is None else self.airmass_design

    @property
    def sky_at_design(self) -> float:
        """The design sky brightness (mag/arcsec²), or the median when none was measured."""
        return self.sky_mag_arcsec2 if self.sky_mag_arcsec2_design is None else self.sky_mag_arcsec2_design


def nearest_rank(values: NDArray[np.float64], percent: float) -> float:
    """The ``percent`` percentile of ``values`` by nearest rank (no interpolation), one partition: O(n)."""
    rank = nearest_rank_index(values.size, percent)
    return float(np.partition(values, rank)[rank])


def nearest_rank_index(size: int, percent: float) -> int:
    """Where the ``percent`` percentile by nearest rank stands among ``size`` sorted values (from 0)."""
    return min(size - 1, max(0, math.ceil(percent / 100.0 * size) - 1))


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
