"""Photon rates from magnitudes: what a telescope and instrument collect from a source and the sky.

Magnitudes become flux densities through a zero point in janskys (the band's or
filter's for the Vega system, 3631 Jy for AB), flux densities become photon rates
per fractional bandwidth Δλ/λ, and photon rates become detected electrons through
the collecting area, the system throughput and the atmosphere's extinction.

A brightness given in a band other than the one observed is used as is: the
source is assumed to have zero colour between the two bands in the magnitude's
own system (flat f_ν for AB). The sensitivity finding says so when it happens.

References
----------
Bessell, M. S. 1979, PASP 91, 589 (zero points, 1 Jy = 1.51e7 photons s⁻¹ m⁻² (Δλ/λ)⁻¹).
Oke, J. B. & Gunn, J. E. 1983, ApJ 266, 713 (AB system, 0 mag = 3631 Jy).
"""

from __future__ import annotations

import math

__all__ = [
    "AB_ZERO_POINT_JY",
    "PHOTONS_PER_JY",
    "collecting_area_m2",
    "detected_rate",
    "extinction_factor",
    "flux_density_jy",
    "photon_flux",
    "sky_rate_per_arcsec2",
    "source_rate",
]

#: Flux density of AB magnitude 0: m_AB = -2.5 log10 f_ν[erg s⁻¹ cm⁻² Hz⁻¹] - 48.60 (Oke & Gunn 1983).
AB_ZERO_POINT_JY = 3631.0

#: Photons s⁻¹ m⁻² per unit fractional bandwidth (Δλ/λ) from a flux density of 1 Jy (Bessell 1979); it is 1e-26 / h.
PHOTONS_PER_JY = 1.51e7


def source_rate(
    magnitude: float,
    system: str,
    zero_point_jy: float,
    fractional_bandwidth: float,
    area_m2: float,
    throughput: float,
    extinction_mag_per_airmass: float,
    airmass: float,
) -> float:
    """Detected electrons per second from a source of ``magnitude`` observed through the atmosphere.

    Parameters
    ----------
    magnitude
        Apparent magnitude (or magnitude per square arcsecond, which gives a rate per square arcsecond).
    system
        ``"vega"`` (``zero_point_jy`` applies) or ``"ab"`` (3631 Jy applies).
    zero_point_jy
        Flux density of a Vega-system magnitude 0 in the observed band.
    fractional_bandwidth
        Δλ/λ of the band, or 1/R for one spectral resolution element.
    area_m2, throughput
        Collecting area and whole-system throughput (telescope, instrument, detector quantum efficiency).
    extinction_mag_per_airmass, airmass
        The atmosphere's extinction coefficient k and the airmass X; the source is dimmed by 10^(-0.4 k X).
    """
    flux = flux_density_jy(magnitude, system, zero_point_jy)
    above_atmosphere = detected_rate(flux, fractional_bandwidth, area_m2, throughput)
    return above_atmosphere * extinction_factor(extinction_mag_per_airmass, airmass)


def sky_rate_per_arcsec2(sky_mag_arcsec2: float, zero_point_jy: float, fractional_bandwidth: float, area_m2: float, throughput: float) -> float:
    """Detected electrons per second per square arcsecond from a sky of ``sky_mag_arcsec2`` (Vega).

    The sky brightness is what is seen from the ground, so no extinction applies.
    """
    flux = flux_density_jy(sky_mag_arcsec2, "vega", zero_point_jy)
    return detected_rate(flux, fractional_bandwidth, area_m2, throughput)


def flux_density_jy(magnitude: float, system: str, zero_point_jy: float) -> float:
    """Flux density (Jy) of ``magnitude`` in the Vega system (band zero point) or the AB system (3631 Jy)."""
    if system == "ab":
        zero_point_jy = AB_ZERO_POINT_JY
    elif system != "vega":
        raise ValueError(f"unknown magnitude system {system!r}")
    return zero_point_jy * 10.0 ** (-0.4 * magnitude)


def photon_flux(flux_jy: float, fractional_bandwidth: float) -> float:
    """Photons s⁻¹ m⁻² in a band of fractional width Δλ/λ from a flux density ``flux_jy`` (Bessell 1979)."""
    return flux_jy * PHOTONS_PER_JY * fractional_bandwidth


def detected_rate(flux_jy: float, fractional_bandwidth: float, area_m2: float, throughput: float) -> float:
    """Detected electrons per second above the atmosphere: photon flux × area × throughput."""
    return photon_flux(flux_jy, fractional_bandwidth) * area_m2 * throughput


def collecting_area_m2(aperture_m: float, central_obstruction: float = 0.0) -> float:
    """Clear collecting area of a primary of diameter ``aperture_m`` with a central obstruction (diameter ratio)."""
    return math.pi / 4.0 * aperture_m**2 * (1.0 - central_obstruction**2)


def extinction_factor(extinction_mag_per_airmass: float, airmass: float) -> float:
    """Fraction of light passing the atmosphere: 10^(-0.4 k X)."""
    return 10.0 ** (-0.4 * extinction_mag_per_airmass * airmass)
