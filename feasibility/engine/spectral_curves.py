"""Zero point, extinction and dark sky as smooth functions of wavelength, for spectra.

Imaging takes each of these from the filter's climate band. A spectrum is
observed at one wavelength (its central or goal wavelength), and the S/N is per
resolution element λ/R around it: these curves are smooth on the scale of an
element, so their value at the wavelength stands for the element. Taking the
nearest band's values instead made the S/N jump where the nearest band changes.

Curves (all pass exactly through the site's band values at the bands' effective wavelengths)
------------------------------------------------------------------------------------------
- **Zero point** (Vega magnitude 0): the bands' zero points as f_λ ∝ f_ν / λ²,
  interpolated in ln f_λ against λ by a monotone cubic (PCHIP, see
  :mod:`~feasibility.engine.smooth_curve`), continued along the end slope beyond
  the outermost bands. The AB zero point needs no curve: f_ν = 3631 Jy at every
  wavelength (Oke & Gunn 1983), i.e. f_λ = 3631 Jy · c / λ².
- **Dark sky**: the climate's table of AB mag/arcsec² against wavelength when it
  gives one (PCHIP through it, held beyond its ends); otherwise the bands'
  dark-sky fluxes (zero point × 10^(−0.4 m)), interpolated in ln f_λ like the zero
  point. The sky is then expressed as a Vega magnitude at the wavelength, relative
  to the zero-point curve there.
- **Extinction**: the climate's table of mag/airmass against wavelength when it
  gives one (PCHIP, held beyond its ends); otherwise a published model
  k(λ) = Rayleigh + ozone + aerosol, brought onto the site's own band extinctions:

  - Rayleigh: the sea-level optical depth of Hansen & Travis (1974),
    τ = 0.008569 λ⁻⁴ (1 + 0.0113 λ⁻² + 0.00013 λ⁻⁴) (λ in µm), times the site's
    pressure over 1013.25 hPa, the pressure from the elevation by the U.S.
    Standard Atmosphere 1976 troposphere, p = 1013.25 (1 − 2.25577×10⁻⁵ h)^5.25588 hPa;
  - ozone: the Chappuis (and Huggins tail) absorption of a 300 Dobson-unit column
    (common practice for a typical column; 1 DU = 2.687×10²⁰ molecules m⁻²) with the
    cross-section of Serdyuchenko et al. (2014) at 233 K, averaged over 10 nm bins
    (as tabulated by Bruneton 2017), interpolated by PCHIP, held beyond 365–835 nm
    (below 365 nm the Huggins band rises steeply: the U-band correction carries it);
  - aerosol: a power law a (λ / 550 nm)^−1.3 (Ångström exponent 1.3, common
    practice), ``a`` the least-squares fit to what the site's bands shortward of
    1 µm leave after Rayleigh and ozone (never negative);
  - the model misses each band by a residual (water vapour, a different aerosol
    law, a different ozone column); the residuals are interpolated by PCHIP
    between the bands (held beyond them) and added, so the curve passes through
    every band value while following the model's shape between bands.

  Optical depth τ is 2.5 log10(e) τ = 1.0857 τ magnitudes.
- **Moonlight colour**: the Krisciunas & Schaefer (1991) moonlight is a V-band
  model carried to other bands with the Sun's colour (:mod:`~feasibility.engine.moonsky`).
  For a spectrum the Sun's colour (band − V) is interpolated by PCHIP between the
  climate bands that have a tabulated solar colour, held beyond them, and the
  moonlight is computed with the extinction at the wavelength.

The source's brightness is given in one band. Its flux at the wavelength assumes
zero colour between that band and the wavelength in the magnitude's own system:
a Vega-system magnitude m gives f_ν(λ) = ZP_Vega(λ) 10^(−0.4 m) (a spectrum shaped
like Vega's, as the zero-point curve draws it); an AB magnitude a flat f_ν. The
sensitivity finding says so.

All references: docs/references.md.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

from feasibility.documents import Instrument, ObservationRequest, Observatory
from feasibility.documents.observatory import Climate
from feasibility.engine.conditions import Conditions, sky_band_for, wavelength_for
from feasibility.engine.moonsky import SOLAR_COLOUR_MINUS_V, band_factor
from feasibility.engine.photometry import AB_ZERO_POINT_JY, PHOTONS_PER_JY
from feasibility.engine.smooth_curve import SmoothCurve

__all__ = [
    "AEROSOL_ANGSTROM_EXPONENT",
    "MAG_PER_OPTICAL_DEPTH",
    "OZONE_COLUMN_DU",
    "SkySetting",
    "SpectralCurves",
    "SpectrumPhotometry",
    "curves_for",
    "flux_note",
    "ozone_cross_section_m2",
    "rayleigh_optical_depth",
    "site_pressure_hpa",
    "sky_setting",
    "spectrum_photometry",
    "wavelength_label",
]

#: Magnitudes per unit optical depth: 2.5 log10(e).
MAG_PER_OPTICAL_DEPTH = 2.5 / math.log(10.0)
#: Standard sea-level pressure (hPa), the reference of the Rayleigh optical depth.
SEA_LEVEL_PRESSURE_HPA = 1013.25
#: Ozone column assumed by the extinction model (Dobson units; common practice for a typical column).
OZONE_COLUMN_DU = 300.0
#: Molecules per square metre in one Dobson unit (0.01 mm of ozone at standard temperature and pressure).
DOBSON_UNIT_PER_M2 = 2.687e20
#: Ångström exponent of the aerosol extinction (common practice for continental aerosol).
AEROSOL_ANGSTROM_EXPONENT = 1.3
#: Reference wavelength of the aerosol power law (nm).
AEROSOL_REFERENCE_NM = 550.0
#: Bands at or beyond this wavelength (nm) do not enter the aerosol fit (water-vapour absorption dominates there).
AEROSOL_FIT_LIMIT_NM = 1000.0

#: Ozone absorption cross-section (m² per molecule) at 233 K, averaged over 10 nm bins starting at 360 nm
#: (Serdyuchenko et al. 2014, as binned by Bruneton 2017); the values are placed at the bins' centres, 365-835 nm.
_OZONE_BIN_START_NM = 360.0
_OZONE_CROSS_SECTION_M2 = (
    1.18e-27,
    2.182e-28,
    2.818e-28,
    6.636e-28,
    1.527e-27,
    2.763e-27,
    5.52e-27,
    8.451e-27,
    1.582e-26,
    2.316e-26,
    3.669e-26,
    4.924e-26,
    7.752e-26,
    9.016e-26,
    1.48e-25,
    1.602e-25,
    2.139e-25,
    2.755e-25,
    3.091e-25,
    3.5e-25,
    4.266e-25,
    4.672e-25,
    4.398e-25,
    4.701e-25,
    5.019e-25,
    4.305e-25,
    3.74e-25,
    3.215e-25,
    2.662e-25,
    2.238e-25,
    1.852e-25,
    1.473e-25,
    1.209e-25,
    9.423e-26,
    7.455e-26,
    6.566e-26,
    5.105e-26,
    4.15e-26,
    4.228e-26,
    3.237e-26,
    2.451e-26,
    2.801e-26,
    2.534e-26,
    1.624e-26,
    1.465e-26,
    2.078e-26,
    1.383e-26,
    7.105e-27,
)
#: Curves built, by climate and elevation (a few observatory versions at most; the oldest is dropped beyond this).
_CURVES_KEPT = 16
_CURVES: dict[tuple[object, ...], SpectralCurves] = {}
#: The same, by the climate object itself (its id, the object kept so the id stays its own): skips building the key.
_LAST: dict[int, tuple[Climate, float, SpectralCurves]] = {}

_OZONE_CURVE = SmoothCurve([_OZONE_BIN_START_NM + 5.0 + 10.0 * i for i in range(len(_OZONE_CROSS_SECTION_M2))], _OZONE_CROSS_SECTION_M2)


@dataclass(frozen=True)
class SpectrumPhotometry:
    """What the S/N of a spectrum needs at its wavelength."""

    label: str
    """The wavelength as the findings name it, e.g. '402 nm'."""
    zero_point_jy: float
    """f_ν of Vega magnitude 0 at the wavelength (Jy)."""
    extinction_mag_per_airmass: float
    sky_mag_arcsec2: float
    """The observing conditions' sky at the wavelength, Vega mag/arcsec² relative to ``zero_point_jy``."""


@dataclass(frozen=True)
class SkySetting:
    """What the moonlit-sky estimate of one request needs: a climate band's values, or the curves' at a wavelength."""

    label: str
    zenith_mag_arcsec2: float
    """Dark sky at the zenith (Vega mag/arcsec² in the band, or at the wavelength)."""
    extinction_mag_per_airmass: float
    moon_factor: float
    """Factor carrying V-band moonlight to the band or wavelength (the Sun's colour)."""
    per_band: bool
    """True for a climate band's own values (their moonlight terms are cached per band), False for a wavelength."""


class SpectralCurves:
    """The site's zero-point, dark-sky, extinction and solar-colour curves (module docstring)."""

    def __init__(self, climate: Climate, elevation_m: float) -> None:
        bands = sorted(climate.bands.items(), key=lambda item: item[1].wavelength_nm)
        wavelengths = _distinct([b.wavelength_nm for _, b in bands])
        by_wavelength = {w: [b for _, b in bands if b.wavelength_nm == w] for w in wavelengths}

        def mean(values: list[float]) -> float:
            return sum(values) / len(values)

        # ln f_λ up to a constant: ln f_ν − 2 ln λ (bands sharing a wavelength are averaged).
        self._zero_point = SmoothCurve(
            wavelengths,
            [mean([math.log(b.zero_point_jy) for b in by_wavelength[w]]) - 2.0 * math.log(w) for w in wavelengths],
            beyond="slope",
        )
        if climate.dark_sky_by_wavelength:
            sky_table = climate.dark_sky_by_wavelength
            self._sky_ab: SmoothCurve | None = SmoothCurve([p.wavelength_nm for p in sky_table], [p.ab_mag_arcsec2 for p in sky_table])
        else:
            self._sky_ab = None
            self._sky = SmoothCurve(
                wavelengths,
                [
                    mean([math.log(b.zero_point_jy) - 0.4 * math.log(10.0) * b.sky_mag_arcsec2 for b in by_wavelength[w]]) - 2.0 * math.log(w)
                    for w in wavelengths
                ],
                beyond="slope",
            )

        self.pressure_hpa = site_pressure_hpa(elevation_m)
        if climate.extinction_by_wavelength:
            table = climate.extinction_by_wavelength
            self._extinction_table: SmoothCurve | None = SmoothCurve([p.wavelength_nm for p in table], [p.mag_per_airmass for p in table])
        else:
            self._extinction_table = None
            measured = [(w, mean([b.extinction_mag_per_airmass for b in by_wavelength[w]])) for w in wavelengths]
            gases = [(w, k, self._gases(w)) for w, k in measured]
            self.aerosol_mag_at_550 = _aerosol_fit([(w, k - g) for w, k, g in gases if w < AEROSOL_FIT_LIMIT_NM])
            self._residual = SmoothCurve(wavelengths, [k - g - self._aerosol(w) for w, k, g in gases])

        colours = [(b.wavelength_nm, SOLAR_COLOUR_MINUS_V[name]) for name, b in bands if name in SOLAR_COLOUR_MINUS_V]
        colour_wavelengths = _distinct([w for w, _ in colours])
        self._solar_colour = SmoothCurve(colour_wavelengths, [mean([c for w, c in colours if w == cw]) for cw in colour_wavelengths]) if colours else None

    def zero_point_jy(self, wavelength_nm: float) -> float:
        """f_ν of Vega magnitude 0 at ``wavelength_nm`` (Jy)."""
        return math.exp(self._zero_point(wavelength_nm) + 2.0 * math.log(wavelength_nm))

    def photon_flux_density(self, wavelength_nm: float, system: str = "vega") -> float:
        """Photons s⁻¹ m⁻² nm⁻¹ of magnitude 0 at ``wavelength_nm``: f_ν/(h λ) (1/h from Bessell 1979's 1.51e7)."""
        flux_jy = AB_ZERO_POINT_JY if system == "ab" else self.zero_point_jy(wavelength_nm)
        return flux_jy * PHOTONS_PER_JY / wavelength_nm

    def dark_sky_mag(self, wavelength_nm: float) -> float:
        """Dark sky at the zenith at ``wavelength_nm``, Vega mag/arcsec² relative to the zero point there."""
        if self._sky_ab is not None:
            sky_jy = AB_ZERO_POINT_JY * 10.0 ** (-0.4 * self._sky_ab(wavelength_nm))
        else:
            sky_jy = math.exp(self._sky(wavelength_nm) + 2.0 * math.log(wavelength_nm))
        return -2.5 * math.log10(sky_jy / self.zero_point_jy(wavelength_nm))

    def extinction(self, wavelength_nm: float) -> float:
        """Extinction at ``wavelength_nm`` (mag/airmass): the climate's table, or the fitted model (module docstring)."""
        if self._extinction_table is not None:
            return max(self._extinction_table(wavelength_nm), 0.0)
        model = self._gases(wavelength_nm) + self._aerosol(wavelength_nm)
        return max(model + self._residual(wavelength_nm), 0.0)

    def moon_factor(self, wavelength_nm: float) -> float:
        """Factor carrying V-band moonlight to ``wavelength_nm``: 10^(−0.4 (Sun's colour − V)); 1 without known colours."""
        if self._solar_colour is None:
            return 1.0
        return 10.0 ** (-0.4 * self._solar_colour(wavelength_nm))

    def _gases(self, wavelength_nm: float) -> float:
        """Rayleigh scattering at the site's pressure plus ozone absorption (mag/airmass)."""
        tau = rayleigh_optical_depth(wavelength_nm, self.pressure_hpa)
        tau += OZONE_COLUMN_DU * DOBSON_UNIT_PER_M2 * ozone_cross_section_m2(wavelength_nm)
        return MAG_PER_OPTICAL_DEPTH * tau

    def _aerosol(self, wavelength_nm: float) -> float:
        return self.aerosol_mag_at_550 * (wavelength_nm / AEROSOL_REFERENCE_NM) ** -AEROSOL_ANGSTROM_EXPONENT


def curves_for(observatory: Observatory) -> SpectralCurves:
    """The observatory's curves (built once per distinct climate and elevation)."""
    climate = observatory.climate
    last = _LAST.get(id(climate))
    if last is not None and last[0] is climate and last[1] == observatory.site.elevation_m:
        return last[2]
    key = (
        observatory.site.elevation_m,
        tuple((name, b.wavelength_nm, b.zero_point_jy, b.sky_mag_arcsec2, b.extinction_mag_per_airmass) for name, b in climate.bands.items()),
        tuple((p.wavelength_nm, p.mag_per_airmass) for p in climate.extinction_by_wavelength),
        tuple((p.wavelength_nm, p.ab_mag_arcsec2) for p in climate.dark_sky_by_wavelength),
    )
    curves = _CURVES.get(key)
    if curves is None:
        if len(_CURVES) >= _CURVES_KEPT:
            _CURVES.pop(next(iter(_CURVES)))
        curves = _CURVES[key] = SpectralCurves(climate, observatory.site.elevation_m)
    if len(_LAST) >= _CURVES_KEPT:
        _LAST.clear()
    _LAST[id(climate)] = (climate, observatory.site.elevation_m, curves)
    return curves


def spectrum_photometry(observatory: Observatory, wavelength_nm: float, conditions: Conditions) -> SpectrumPhotometry:
    """Zero point, extinction and sky of a spectrum at ``wavelength_nm`` under ``conditions``.

    The conditions' sky is at the wavelength when the sky checks made them for
    this spectrum (their band is the wavelength's label). When they name a climate
    band instead, the sky is carried from that band to the wavelength by the dark
    sky's colour between the two.
    """
    curves = curves_for(observatory)
    label = wavelength_label(wavelength_nm)
    point = _point(curves, wavelength_nm)
    sky = conditions.sky_mag_arcsec2
    band = observatory.climate.bands.get(conditions.sky_band)
    if conditions.sky_band != label and band is not None:
        sky += point[2] - curves.dark_sky_mag(band.wavelength_nm)
    return SpectrumPhotometry(label, point[0], point[1], sky)


def flux_note(band: str, system: str, wavelength_nm: float) -> str:
    """The sensitivity finding's words on how a spectrum's flux at its wavelength follows from a one-band magnitude."""
    shape = "a Vega-like spectrum" if system == "vega" else "flat f_ν"
    name = "Vega" if system == "vega" else "AB"
    return (
        f"flux at {wavelength_label(wavelength_nm)} from the {band} magnitude with zero colour between them "
        f"({name} system: {shape}); zero point, extinction and sky follow smooth curves in wavelength through the site's bands"
    )


def sky_setting(request: ObservationRequest, instrument: Instrument, observatory: Observatory) -> SkySetting:
    """The band (imaging) or wavelength (spectra) whose dark sky, extinction and moonlight colour the sky estimate uses."""
    wavelength = wavelength_for(request, instrument)
    if instrument.kind == "imager" or wavelength is None:
        band = sky_band_for(request, instrument, observatory)
        values = observatory.climate.bands[band]
        return SkySetting(band, values.sky_mag_arcsec2, values.extinction_mag_per_airmass, band_factor(band), True)
    curves = curves_for(observatory)
    _, extinction, sky, moon = _point(curves, wavelength)
    return SkySetting(wavelength_label(wavelength), sky, extinction, moon, False)


def wavelength_label(wavelength_nm: float) -> str:
    """How findings name a spectrum's wavelength, e.g. '402 nm'."""
    return f"{wavelength_nm:g} nm"


def rayleigh_optical_depth(wavelength_nm: float, pressure_hpa: float = SEA_LEVEL_PRESSURE_HPA) -> float:
    """Zenith Rayleigh optical depth at ``pressure_hpa`` (Hansen & Travis 1974, scaled by pressure)."""
    um2 = (wavelength_nm / 1000.0) ** -2
    return 0.008569 * um2 * um2 * (1.0 + 0.0113 * um2 + 0.00013 * um2 * um2) * pressure_hpa / SEA_LEVEL_PRESSURE_HPA


def site_pressure_hpa(elevation_m: float) -> float:
    """Mean pressure at ``elevation_m`` (U.S. Standard Atmosphere 1976, troposphere)."""
    return SEA_LEVEL_PRESSURE_HPA * (1.0 - 2.25577e-5 * min(elevation_m, 11000.0)) ** 5.25588


def ozone_cross_section_m2(wavelength_nm: float) -> float:
    """Ozone absorption cross-section (m²) at ``wavelength_nm`` (Serdyuchenko et al. 2014 at 233 K, 10 nm bins)."""
    return _OZONE_CURVE(wavelength_nm)


# --- helpers -------------------------------------------------------------------------------


@functools.lru_cache(maxsize=4096)
def _point(curves: SpectralCurves, wavelength_nm: float) -> tuple[float, float, float, float]:
    """Zero point (Jy), extinction, dark sky and moonlight factor at one wavelength (cached: spectra repeat wavelengths)."""
    return (
        curves.zero_point_jy(wavelength_nm),
        curves.extinction(wavelength_nm),
        curves.dark_sky_mag(wavelength_nm),
        curves.moon_factor(wavelength_nm),
    )


def _aerosol_fit(residuals: list[tuple[float, float]]) -> float:
    """Least-squares amplitude at 550 nm of the aerosol power law through (wavelength, extinction left) pairs; ≥ 0."""
    shapes = [(w / AEROSOL_REFERENCE_NM) ** -AEROSOL_ANGSTROM_EXPONENT for w, _ in residuals]
    norm = sum(s * s for s in shapes)
    if norm == 0.0:
        return 0.0
    return max(0.0, sum(s * r for s, (_, r) in zip(shapes, residuals)) / norm)


def _distinct(values: list[float]) -> list[float]:
    """Sorted distinct values."""
    return sorted(set(values))
