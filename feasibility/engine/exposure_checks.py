"""The checks beside the signal-to-noise estimate: atmosphere, image quality and the instrument's setup.

Each check returns a :class:`~feasibility.results.Finding` (or, for the instrument,
a list of problems the sensitivity module merges with its own saturation and
faintness problems into one finding).

Methods
-------
- Atmosphere: fixed transmission windows by wavelength (common practice): the
  ozone cutoff near 300-320 nm, strong water-vapour bands in the near and mid
  infrared, the opaque far infrared, sub-millimetre windows that depend on water
  vapour, radio from about 1 cm to 10 m, and the ionosphere beyond.
- Image quality: the site's median zenith seeing at 500 nm scaled to the target's
  airmass (X^0.6) and wavelength (λ^-0.2) (both common practice, Kolmogorov
  turbulence), spread log-normally with σ(ln FWHM) = 0.35 (common practice), and
  the telescope's diffraction limit θ = 1.21967 λ/D (Rayleigh criterion).
- Seeing percentiles (the design and best-case conditions of the sensitivity and
  saturation checks) come from the same log-normal distribution:
  FWHM_p = median × exp(σ z_p), z_p the standard normal quantile.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from statistics import NormalDist

from feasibility.documents import Instrument, ObservationRequest
from feasibility.results import Figure, Finding, Level

__all__ = [
    "AIRY_FWHM_FACTOR",
    "RAYLEIGH_FACTOR",
    "SEEING_LOG_SPREAD",
    "InstrumentProblem",
    "atmosphere_finding",
    "diffraction_fwhm_arcsec",
    "fraction_seeing_better",
    "image_quality_finding",
    "instrument_setup_problems",
    "rayleigh_limit_rad",
    "seeing_fwhm_arcsec",
    "seeing_percentile_arcsec",
]

#: First zero of the Bessel function J1 divided by π: θ = 1.21967 λ/D (Rayleigh criterion).
RAYLEIGH_FACTOR = 3.8317059702075125 / math.pi
#: FWHM of the Airy pattern in units of λ/D (from memory; 1.029 λ/D).
AIRY_FWHM_FACTOR = 1.029
#: Spread of the site's seeing, the standard deviation of ln(FWHM) (common practice, 0.3-0.4 at good sites).
SEEING_LOG_SPREAD = 0.35
#: Seeing exponents with airmass and wavelength (common practice, Kolmogorov turbulence).
SEEING_AIRMASS_EXPONENT = 0.6
SEEING_WAVELENGTH_EXPONENT = -0.2
#: Wavelength at which the site's median seeing is quoted (nm).
SEEING_REFERENCE_NM = 500.0
#: Fraction of time with good enough seeing below which a request is infeasible, and below which it is marginal.
SEEING_INFEASIBLE_FRACTION = 0.10
SEEING_MARGINAL_FRACTION = 0.50

RAD_TO_ARCSEC = 180.0 / math.pi * 3600.0


@dataclass(frozen=True)
class InstrumentProblem:
    """One instrument problem: how bad, what, and what to do about it."""

    level: Level
    message: str
    suggestion: str | None = None


# (shortest nm, longest nm, level, reason): gaps in the ground's transmission (common practice).
_ATMOSPHERE: list[tuple[float, float, Level, str]] = [
    (0.0, 300.0, Level.INFEASIBLE, "ozone absorbs all light shortward of about 300 nm"),
    (300.0, 320.0, Level.MARGINAL, "this is the ozone cutoff: transmission is low and falls steeply to the blue"),
    (1340.0, 1450.0, Level.MARGINAL, "strong water-vapour absorption (between the J and H windows)"),
    (1800.0, 1950.0, Level.MARGINAL, "strong water-vapour absorption (between the H and K windows)"),
    (2550.0, 2850.0, Level.INFEASIBLE, "water vapour and carbon dioxide make the sky opaque between the K and L windows"),
    (5500.0, 7500.0, Level.INFEASIBLE, "water vapour makes the sky opaque between the M and N windows"),
    (25_000.0, 350_000.0, Level.INFEASIBLE, "the far infrared does not reach the ground"),
    (350_000.0, 10_000_000.0, Level.MARGINAL, "sub-millimetre windows open only in very dry conditions"),
    (1.0e10, math.inf, Level.INFEASIBLE, "the ionosphere reflects radio waves longer than about 10 m"),
]


def atmosphere_finding(wavelength_nm: float) -> Finding:
    """Can ``wavelength_nm`` be observed from the ground at all (common-practice transmission windows)?"""
    figures: dict[str, Figure] = {"wavelength_nm": round(wavelength_nm, 3)}
    method = "ground transmission windows by wavelength (common practice: ozone cutoff, water-vapour bands, far infrared, ionosphere)"
    for low, high, level, reason in _ATMOSPHERE:
        if low <= wavelength_nm < high:
            suggestion = (
                "Observe at a wavelength the atmosphere transmits, or from space."
                if level is Level.INFEASIBLE
                else "Expect large, variable extinction; consider a wavelength inside an atmospheric window."
            )
            return Finding(
                check="atmosphere",
                level=level,
                message=f"{wavelength_nm:g} nm: {reason}.",
                figures=figures,
                suggestion=suggestion,
                method=method,
            )
    return Finding(
        check="atmosphere",
        level=Level.FEASIBLE,
        message=f"{wavelength_nm:g} nm lies in an atmospheric window.",
        figures=figures,
        method=method,
    )


def image_quality_finding(
    request: ObservationRequest,
    median_seeing_arcsec: float,
    airmass: float,
    wavelength_nm: float,
    aperture_m: float,
    hours_usable: float,
) -> Finding:
    """Can the site's seeing and the telescope's diffraction limit deliver the requested image quality?"""
    natural = seeing_fwhm_arcsec(median_seeing_arcsec, airmass, wavelength_nm)
    diffraction = diffraction_fwhm_arcsec(wavelength_nm, aperture_m)
    rayleigh = rayleigh_limit_rad(wavelength_nm, aperture_m) * RAD_TO_ARCSEC
    delivered = math.hypot(natural, diffraction)
    figures: dict[str, Figure] = {
        "seeing_median_arcsec": round(delivered, 3),
        "diffraction_limit_arcsec": round(rayleigh, 4),
        "max_seeing_arcsec": request.constraints.max_seeing_arcsec,
        "seeing_fraction": None,
    }
    method = _image_quality_method(median_seeing_arcsec)
    limit = request.constraints.max_seeing_arcsec
    if limit is None:
        return Finding(
            check="image-quality",
            level=Level.FEASIBLE,
            message=f'No image-quality limit asked; expect {delivered:.2f}" FWHM at airmass {airmass:.2f}.',
            figures=figures,
            method=method,
        )
    if limit < rayleigh:
        return Finding(
            check="image-quality",
            level=Level.INFEASIBLE,
            message=(f'Requested image quality {limit:g}" is finer than the telescope\'s diffraction limit {rayleigh:.3f}" at {wavelength_nm:g} nm.'),
            figures=figures,
            suggestion="Relax the image-quality limit to at least the diffraction limit, or use a larger telescope.",
            method=method,
        )
    fraction = fraction_seeing_better(limit, natural, diffraction)
    figures["seeing_fraction"] = round(fraction, 4)
    figures["hours_with_seeing"] = round(hours_usable * fraction, 2)
    share = f"{100 * fraction:.0f}% of the time"
    if fraction < SEEING_INFEASIBLE_FRACTION:
        level, text = Level.INFEASIBLE, f'the site delivers {limit:g}" or better only {share}'
        suggestion = f'Relax the image-quality limit towards the expected {delivered:.2f}".'
    elif fraction < SEEING_MARGINAL_FRACTION:
        level, text = Level.MARGINAL, f'better than the median: the site delivers {limit:g}" or better {share}'
        suggestion = "Expect the request to wait for good seeing; relaxing the limit makes scheduling easier."
    else:
        level, text = Level.FEASIBLE, f'the site delivers {limit:g}" or better {share}'
        suggestion = None
    return Finding(
        check="image-quality",
        level=level,
        message=f'Image quality {limit:g}" asked, median {delivered:.2f}" at airmass {airmass:.2f}: {text}.',
        figures=figures,
        suggestion=suggestion,
        method=method,
    )


def instrument_setup_problems(request: ObservationRequest, instrument: Instrument, wavelength_nm: float) -> list[InstrumentProblem]:
    """Is the requested wavelength within the instrument's range and, for a spectrum, the grating's coverage?"""
    problems: list[InstrumentProblem] = []
    if not instrument.min_wavelength_nm <= wavelength_nm <= instrument.max_wavelength_nm:
        problems.append(
            InstrumentProblem(
                Level.INFEASIBLE,
                f"{wavelength_nm:g} nm is outside {instrument.name}'s range {instrument.min_wavelength_nm:g}-{instrument.max_wavelength_nm:g} nm",
                "Choose an instrument that covers this wavelength.",
            )
        )
    if instrument.kind == "slit_spectrograph":
        grating = instrument.grating_named(request.setup.grating or "")
        if grating is not None and not grating.min_wavelength_nm <= wavelength_nm <= grating.max_wavelength_nm:
            problems.append(
                InstrumentProblem(
                    Level.INFEASIBLE,
                    f"{wavelength_nm:g} nm is outside grating {grating.name}'s coverage {grating.min_wavelength_nm:g}-{grating.max_wavelength_nm:g} nm",
                    "Choose a grating or central wavelength that covers the wavelength of interest.",
                )
            )
    return problems


def seeing_fwhm_arcsec(median_zenith_500nm_arcsec: float, airmass: float, wavelength_nm: float) -> float:
    """Seeing FWHM at ``airmass`` and ``wavelength_nm`` from the zenith value at 500 nm (X^0.6, λ^-0.2; common practice)."""
    return median_zenith_500nm_arcsec * airmass**SEEING_AIRMASS_EXPONENT * (wavelength_nm / SEEING_REFERENCE_NM) ** SEEING_WAVELENGTH_EXPONENT


@functools.lru_cache(maxsize=64)
@functools.lru_cache(maxsize=256)  # a site's median and a few percentiles: the normal quantile costs microseconds
def seeing_percentile_arcsec(median_arcsec: float, percent: float) -> float:
    """The seeing that ``percent`` % of the time does not exceed: log-normal, σ(ln FWHM) = ``SEEING_LOG_SPREAD``."""
    return median_arcsec * math.exp(SEEING_LOG_SPREAD * NormalDist().inv_cdf(percent / 100.0))


def rayleigh_limit_rad(wavelength_nm: float, aperture_m: float) -> float:
    """Rayleigh criterion θ = 1.21967 λ/D in radians."""
    return RAYLEIGH_FACTOR * wavelength_nm * 1e-9 / aperture_m


def diffraction_fwhm_arcsec(wavelength_nm: float, aperture_m: float) -> float:
    """FWHM of the Airy pattern, 1.029 λ/D, in arcseconds (from memory)."""
    return AIRY_FWHM_FACTOR * wavelength_nm * 1e-9 / aperture_m * RAD_TO_ARCSEC


def fraction_seeing_better(limit_arcsec: float, median_arcsec: float, diffraction_arcsec: float = 0.0) -> float:
    """Fraction of time the delivered FWHM (seeing ⊕ diffraction) is at most ``limit_arcsec``; log-normal seeing."""
    if limit_arcsec <= diffraction_arcsec:
        return 0.0
    seeing_limit = math.sqrt(limit_arcsec**2 - diffraction_arcsec**2)
    z = math.log(seeing_limit / median_arcsec) / SEEING_LOG_SPREAD
    return 0.5 * (1.0 + math.erf(z / math.sqrt(2.0)))


@functools.lru_cache(maxsize=64)
def _image_quality_method(median_seeing_arcsec: float) -> str:
    """The image-quality finding's method text (formatted once per site seeing)."""
    return (
        f'median seeing {median_seeing_arcsec:g}" at zenith and 500 nm × X^0.6 × (λ/500 nm)^-0.2 (common practice), '
        f"log-normal spread σ(ln FWHM) = {SEEING_LOG_SPREAD} (common practice); Airy FWHM 1.029 λ/D added in quadrature; "
        "diffraction limit 1.21967 λ/D (Rayleigh criterion)"
    )
