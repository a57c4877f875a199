"""The observatory description: site, telescope, climate, semesters and instruments.

One YAML file, versioned by the store. Wavelengths are in nanometres, angles in
degrees unless the field name says arcsec, times in seconds, rates per second.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

from pydantic import Field, ValidationInfo, field_validator, model_validator

from feasibility.documents.base import DocumentModel
from feasibility.documents.times import DocumentDate

__all__ = [
    "Band",
    "Climate",
    "DarkSkyPoint",
    "Detector",
    "ExtinctionPoint",
    "Filter",
    "Grating",
    "HorizonPoint",
    "Instrument",
    "Observatory",
    "Overheads",
    "Semester",
    "Site",
    "Telescope",
    "TWILIGHT_SUN_ALTITUDE_DEG",
]

#: Sun's centre altitude at the end of each twilight (U.S. Naval Observatory definitions).
TWILIGHT_SUN_ALTITUDE_DEG: dict[str, float] = {"civil": -6.0, "nautical": -12.0, "astronomical": -18.0}


class _Part(DocumentModel):
    """Base of every part: unknown fields are errors, numbers finite, text printable (see documents.base)."""


class HorizonPoint(_Part):
    """One point of the local horizon profile: the lowest usable altitude towards an azimuth (from north, east positive)."""

    azimuth_deg: float = Field(ge=0, le=360)
    altitude_deg: float = Field(ge=-5, le=90)


class Site(_Part):
    """Where the telescope stands (WGS84 geodetic; longitude east positive)."""

    name: str = Field(min_length=1)
    latitude_deg: float = Field(ge=-90, le=90)
    longitude_deg: float = Field(ge=-180, le=180)
    elevation_m: float = Field(ge=-500, le=9000)
    min_altitude_deg: float = Field(default=15.0, ge=0, le=89)
    horizon: list[HorizonPoint] = Field(default_factory=list)

    @field_validator("horizon")
    @classmethod
    def _horizon_closes(cls, horizon: list[HorizonPoint]) -> list[HorizonPoint]:
        """The profile goes once round the sky: one altitude per azimuth, and 0° and 360° (the same direction) agree."""
        by_azimuth: dict[float, float] = {}
        for point in horizon:
            azimuth = point.azimuth_deg % 360.0
            if azimuth in by_azimuth and by_azimuth[azimuth] != point.altitude_deg:
                if azimuth == 0.0:
                    raise ValueError(
                        f"azimuth 0° and 360° are the same direction but give altitudes "
                        f"{by_azimuth[azimuth]:g}° and {point.altitude_deg:g}°; give them the same altitude"
                    )
                raise ValueError(f"azimuth {point.azimuth_deg:g}° is listed twice with different altitudes")
            by_azimuth[azimuth] = point.altitude_deg
        return horizon

    def horizon_profile(self) -> tuple[list[float], list[float]]:
        """The horizon profile as (azimuths in [0, 360), altitudes), sorted by azimuth, 360° folded onto 0°."""
        folded = {p.azimuth_deg % 360.0: p.altitude_deg for p in self.horizon}
        azimuths = sorted(folded)
        return azimuths, [folded[a] for a in azimuths]


class Telescope(_Part):
    """The telescope's optics and mount limits."""

    name: str = Field(min_length=1)
    aperture_m: float = Field(gt=0, le=100)
    central_obstruction: float = Field(default=0.0, ge=0, lt=1, description="Secondary's diameter over the primary's.")
    min_altitude_deg: float = Field(default=15.0, ge=0, le=89, description="Lowest altitude the mount reaches.")
    max_altitude_deg: float = Field(default=90.0, gt=0, le=90, description="Highest altitude the mount tracks (alt-az zenith gap).")
    min_sun_separation_deg: float = Field(
        default=45.0,
        ge=0,
        le=180,
        description="Closest approach to the Sun's direction allowed by the observatory's safety rules.",
    )
    max_tracking_rate_arcsec_per_hour: float | None = Field(
        default=None,
        gt=0,
        le=1e7,
        description=(
            "Fastest non-sidereal rate the mount can follow, in arcseconds per HOUR on the sky (the motion of a "
            "solar-system body relative to the stars). Not given: not stated, and no rate is refused."
        ),
    )
    sidereal_tracking_only: bool = Field(
        default=False,
        description="True when the mount follows the stars only: a moving body trails during each exposure.",
    )


class Band(_Part):
    """Climate of one photometric band at the site: the dark-sky zenith brightness and the extinction."""

    sky_mag_arcsec2: float = Field(ge=5, le=30, description="Dark-sky brightness at the zenith, Vega mag per square arcsecond.")
    extinction_mag_per_airmass: float = Field(ge=0, le=5)
    wavelength_nm: float = Field(gt=0, description="Effective wavelength of the band.")
    zero_point_jy: float = Field(gt=0, description="Flux density of a Vega-system magnitude 0 in this band (Jy).")


class ExtinctionPoint(_Part):
    """One point of the site's extinction curve."""

    wavelength_nm: float = Field(gt=0, allow_inf_nan=False)
    mag_per_airmass: float = Field(ge=0, le=5, allow_inf_nan=False)


class DarkSkyPoint(_Part):
    """One point of the site's dark-sky curve: the zenith continuum at one wavelength."""

    wavelength_nm: float = Field(gt=0, allow_inf_nan=False)
    ab_mag_arcsec2: float = Field(ge=5, le=30, allow_inf_nan=False, description="AB magnitude per square arcsecond.")


class Climate(_Part):
    """The site's sky and weather statistics.

    Imaging uses the bands' values; spectra use smooth curves in wavelength, drawn
    through the optional tables below where given, else through the bands' values
    (see ``feasibility.engine.spectral_curves``).
    """

    bands: dict[str, Band] = Field(min_length=1)
    extinction_by_wavelength: list[ExtinctionPoint] = Field(default_factory=list, description="Optional extinction curve for spectra, wavelengths increasing.")
    dark_sky_by_wavelength: list[DarkSkyPoint] = Field(
        default_factory=list, description="Optional dark-sky continuum at the zenith for spectra, wavelengths increasing."
    )
    median_seeing_arcsec: float = Field(gt=0, le=10, description="Median seeing at the zenith at 500 nm.")
    usable_night_fraction: dict[int, float] = Field(
        default_factory=lambda: {month: 1.0 for month in range(1, 13)},
        description="Fraction of nights usable for observing, by calendar month (1-12).",
        json_schema_extra={
            "propertyNames": {"pattern": "^(?:[1-9]|1[0-2])$"},
            "additionalProperties": {"type": "number", "minimum": 0, "maximum": 1},
            "examples": [{"1": 0.9, "7": 0.6}],
        },
    )
    clear_after_clear: dict[int, float] = Field(
        default_factory=dict,
        description=(
            "Persistence of the weather, by calendar month (1-12): the chance that a night is usable when the night "
            "before was. Above the month's usable-night fraction, bad nights come in runs; months left out have "
            "independent nights (the chance equals the fraction). Used by the semester simulation."
        ),
    )
    seeing_log_spread: float | None = Field(
        default=None,
        gt=0,
        le=2,
        description=(
            "Spread of the site's seeing, the standard deviation of ln(FWHM) around the median (log-normal). "
            "Default: the engine's common-practice value. Used by the semester simulation."
        ),
    )
    design_percentile: float = Field(
        default=80.0,
        ge=50,
        lt=100,
        description=(
            "Percentile of airmass, sky brightness and seeing over a request's usable time at which a verdict must "
            "hold (the design conditions); the median gives the typical conditions."
        ),
    )

    @field_validator("clear_after_clear")
    @classmethod
    def _persistence_fits_fraction(cls, persistence: dict[int, float], info: ValidationInfo) -> dict[int, float]:
        """Each month's chance must fit a two-state chain with the month's usable-night fraction f.

        With a = P(clear | clear before), the stationary chain needs P(clear | cloudy before)
        b = f (1 - a) / (1 - f) to be a probability: a >= (2f - 1) / f, and a = 1 when f = 1.
        """
        fractions = info.data.get("usable_night_fraction")
        for month, chance in persistence.items():
            if not 1 <= month <= 12:
                raise ValueError(f"month {month} is not between 1 and 12")
            if not 0.0 <= chance <= 1.0:
                raise ValueError(f"month {month} has chance {chance}, not between 0 and 1")
            if fractions is None:  # the fractions themselves were refused; that error is reported
                continue
            fraction = fractions.get(month, 1.0)
            if fraction >= 1.0:
                if chance < 1.0:
                    raise ValueError(
                        f"month {month}: every night is usable (usable_night_fraction 1), so a usable night must "
                        f"follow a usable one with chance 1, got {chance:g}"
                    )
                continue
            after_cloudy = fraction * (1.0 - chance) / (1.0 - fraction)
            if after_cloudy > 1.0 + 1e-12:
                lowest = (2.0 * fraction - 1.0) / fraction
                raise ValueError(
                    f"month {month}: with usable_night_fraction {fraction:g}, chance {chance:g} would need a usable night "
                    f"after a bad one with chance {after_cloudy:.3g} (more than 1); give at least {lowest:.3f}"
                )
        return persistence

    @model_validator(mode="after")
    def _months(self) -> Climate:
        for month, fraction in self.usable_night_fraction.items():
            if not 1 <= month <= 12:
                raise ValueError(f"usable_night_fraction: month {month} is not between 1 and 12")
            if not 0.0 <= fraction <= 1.0:
                raise ValueError(f"usable_night_fraction: month {month} has fraction {fraction}, not between 0 and 1")
        curves: tuple[tuple[str, Sequence[ExtinctionPoint | DarkSkyPoint]], ...] = (
            ("extinction_by_wavelength", self.extinction_by_wavelength),
            ("dark_sky_by_wavelength", self.dark_sky_by_wavelength),
        )
        for name, points in curves:
            if len(points) == 1:
                raise ValueError(f"{name}: give at least two points, or none")
            for i, (before, after) in enumerate(zip(points, points[1:]), start=1):
                if after.wavelength_nm <= before.wavelength_nm:
                    raise ValueError(f"{name}: wavelengths must increase; point {i} ({after.wavelength_nm:g} nm) does not follow {before.wavelength_nm:g} nm")
        return self


class Semester(_Part):
    """A semester: its name and first and last night (the local date on which each night begins)."""

    name: str = Field(min_length=1, max_length=20)
    first_night: DocumentDate
    last_night: DocumentDate

    @model_validator(mode="after")
    def _ordered(self) -> Semester:
        if self.last_night < self.first_night:
            raise ValueError("'last_night' is before 'first_night'")
        if (self.last_night - self.first_night).days > 400:
            raise ValueError("a semester longer than 400 nights is not supported")
        return self


class Filter(_Part):
    """An imager's filter. ``band`` names the climate band whose sky and extinction apply."""

    name: str = Field(min_length=1)
    band: str = Field(min_length=1)
    wavelength_nm: float = Field(gt=0)
    width_nm: float = Field(gt=0)
    zero_point_jy: float = Field(gt=0, description="Flux density of a Vega-system magnitude 0 through this filter (Jy).")
    throughput: float | None = Field(default=None, gt=0, le=1, description="Overrides the instrument's throughput.")


class Grating(_Part):
    """A spectrograph's grating (or grism)."""

    name: str = Field(min_length=1)
    resolving_power: float = Field(gt=0)
    min_wavelength_nm: float = Field(gt=0)
    max_wavelength_nm: float = Field(gt=0)
    pixels_per_resolution_element: float = Field(default=2.5, gt=0, le=20)
    throughput: float | None = Field(default=None, gt=0, le=1)

    @model_validator(mode="after")
    def _range(self) -> Grating:
        if self.max_wavelength_nm <= self.min_wavelength_nm:
            raise ValueError("'max_wavelength_nm' must exceed 'min_wavelength_nm'")
        return self


class Detector(_Part):
    """The detector's noise, scale and well."""

    read_noise_e: float = Field(ge=0)
    dark_current_e_s_pix: float = Field(ge=0)
    gain_e_adu: float = Field(gt=0)
    pixel_scale_arcsec: float = Field(gt=0)
    full_well_e: float = Field(gt=0)
    slit_length_arcsec: float | None = Field(default=None, gt=0)
    adc_bits: int = Field(default=16, ge=8, le=32, description="Bit depth of the analogue-to-digital converter.")
    linearity_fraction: float = Field(default=0.8, gt=0, le=1, description="Fraction of full well up to which the detector stays linear.")


class Overheads(_Part):
    """Time spent not collecting light."""

    readout_s: float = Field(ge=0, description="Per exposure.")
    acquisition_s: float = Field(ge=0, description="Per visit (pointing, acquisition, set-up).")
    visit_hours: float = Field(default=1.0, gt=0, le=24, description="Longest single visit before re-acquiring.")


class Instrument(_Part):
    """One instrument: an imager or a slit spectrograph."""

    name: str = Field(min_length=1)
    kind: Literal["imager", "slit_spectrograph"]
    twilight: Literal["civil", "nautical", "astronomical"] = "astronomical"
    min_wavelength_nm: float = Field(gt=0)
    max_wavelength_nm: float = Field(gt=0)
    filters: list[Filter] = Field(default_factory=list)
    gratings: list[Grating] = Field(default_factory=list)
    slits_arcsec: list[float] = Field(default_factory=list)
    detector: Detector
    throughput: float = Field(gt=0, le=1, description="Whole system, atmosphere excluded: telescope, instrument and detector.")
    min_exposure_s: float = Field(gt=0)
    max_exposure_s: float = Field(gt=0)
    overheads: Overheads

    @model_validator(mode="after")
    def _consistent(self) -> Instrument:
        if self.max_exposure_s < self.min_exposure_s:
            raise ValueError("'max_exposure_s' is shorter than 'min_exposure_s'")
        if self.max_wavelength_nm <= self.min_wavelength_nm:
            raise ValueError("'max_wavelength_nm' must exceed 'min_wavelength_nm'")
        if self.kind == "imager" and not self.filters:
            raise ValueError("an imager needs at least one filter")
        if self.kind == "slit_spectrograph" and not (self.gratings and self.slits_arcsec):
            raise ValueError("a slit spectrograph needs at least one grating and one slit width")
        return self

    def filter_named(self, name: str) -> Filter | None:
        """The filter called ``name`` (case-insensitive), or None."""
        return next((f for f in self.filters if f.name.lower() == name.lower()), None)

    def grating_named(self, name: str) -> Grating | None:
        """The grating called ``name`` (case-insensitive), or None."""
        return next((g for g in self.gratings if g.name.lower() == name.lower()), None)


class Observatory(_Part):
    """The whole observatory description."""

    name: str = Field(min_length=1)
    version: str = Field(default="1", min_length=1, max_length=40)
    site: Site
    telescope: Telescope
    climate: Climate
    semesters: list[Semester] = Field(min_length=1)
    instruments: list[Instrument] = Field(min_length=1)
    airmass_limit_formula: Literal["secant", "hardie-1962", "kasten-young-1989", "young-1994"] = Field(
        default="secant",
        description=(
            "The formula the observatory's airmass LIMITS are stated in (a request's max_airmass): plain sec z "
            "(the usual convention), Hardie (1962), Kasten & Young (1989) or Young (1994). Extinction and seeing "
            "always use the physical airmass (Kasten & Young 1989)."
        ),
    )

    @model_validator(mode="after")
    def _unique_names(self) -> Observatory:
        for kind, names in (("semester", [s.name for s in self.semesters]), ("instrument", [i.name for i in self.instruments])):
            duplicates = {n for n in names if names.count(n) > 1}
            if duplicates:
                raise ValueError(f"{kind} names used twice: {sorted(duplicates)}")
        for instrument in self.instruments:
            for item in instrument.filters:
                if item.band not in self.climate.bands:
                    raise ValueError(f"instrument {instrument.name!r} filter {item.name!r} names band {item.band!r}, which climate.bands does not define")
        return self

    def semester_named(self, name: str) -> Semester | None:
        """The semester called ``name``, or None."""
        return next((s for s in self.semesters if s.name == name), None)

    def instrument_named(self, name: str) -> Instrument | None:
        """The instrument called ``name`` (case-insensitive), or None."""
        return next((i for i in self.instruments if i.name.lower() == name.lower()), None)
