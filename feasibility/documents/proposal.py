"""The proposal document: who asks, for which semester, and what each observation request needs."""

from __future__ import annotations

from typing import Annotated, ClassVar, Literal

from pydantic import ConfigDict, Discriminator, Field, Tag, field_validator, model_validator

from feasibility.documents.angles import Declination, RightAscension
from feasibility.documents.base import DocumentModel
from feasibility.documents.moving_targets import EphemerisTableTarget, MajorBodyTarget, OrbitalElementsTarget, target_kind
from feasibility.documents.times import UtcDatetime

__all__ = [
    "SKY_ILLUMINATION",
    "Brightness",
    "Constraints",
    "Goal",
    "ObservationRequest",
    "Person",
    "Proposal",
    "Setup",
    "AnyTarget",
    "Target",
    "TimeWindow",
]


class _Document(DocumentModel):
    """Base of every document part: unknown fields are errors, numbers finite, text printable (see documents.base)."""


class Person(_Document):
    """The principal investigator."""

    name: str = Field(min_length=1, max_length=200)
    email: str = Field(pattern=r"^[^@\s]+@[^@\s]+\.[^@\s]+$", max_length=320)
    institution: str | None = Field(default=None, max_length=300)


class Target(_Document):
    """A sidereal target in ICRS. Right ascension in hours (sexagesimal) or degrees; declination in degrees.

    ``kind`` may be left out: a target without one is this kind (see :mod:`feasibility.documents.moving_targets`
    for the solar-system kinds).
    """

    kind: Literal["fixed"] = Field(default="fixed", description="A fixed ICRS position (the default kind).")
    name: str = Field(min_length=1, max_length=200)
    ra_deg: RightAscension = Field(
        validation_alias="ra",
        serialization_alias="ra",
        description=(
            "Right ascension: text in sexagesimal HOURS ('13:25:27.6', '13 25 27.6', '13h25m27.6s'), or degrees "
            "in [0, 360): a number, or text ending in 'd' or 'deg'. A plain number in text is degrees."
        ),
    )
    dec_deg: Declination = Field(
        validation_alias="dec",
        serialization_alias="dec",
        description="Declination in degrees, between -90 and +90: a number, or sexagesimal text ('-43:01:09', '-43d01m09s').",
    )
    pm_ra_cosdec_mas_yr: float = Field(default=0.0, ge=-20000, le=20000)
    pm_dec_mas_yr: float = Field(default=0.0, ge=-20000, le=20000)
    epoch: float = Field(default=2000.0, ge=1800, le=2200, description="Julian epoch of the position.")

    model_config = ConfigDict(extra="forbid", populate_by_name=True, str_strip_whitespace=True)


#: A target of any kind, told apart by its ``kind`` (none: fixed). The error path of a bad field is the field's own
#: (``requests[0].target.eccentricity``): :func:`feasibility.documents.messages.without_tags` leaves out the kind's tag.
AnyTarget = Annotated[
    Annotated[Target, Tag("fixed")]
    | Annotated[MajorBodyTarget, Tag("major_body")]
    | Annotated[OrbitalElementsTarget, Tag("orbital_elements")]
    | Annotated[EphemerisTableTarget, Tag("ephemeris_table")],
    Discriminator(
        target_kind,
        custom_error_type="target_kind",
        custom_error_message="target kind must be one of fixed (the default), major_body, orbital_elements or ephemeris_table",
    ),
]


class Setup(_Document):
    """The instrument setup: a filter for an imager; a grating, slit and central wavelength for a spectrograph."""

    filter: str | None = Field(default=None, min_length=1)
    grating: str | None = Field(default=None, min_length=1)
    slit_arcsec: float | None = Field(default=None, gt=0, le=30)
    central_wavelength_nm: float | None = Field(default=None, gt=0, le=1e9)


class Brightness(_Document):
    """The target's brightness in one photometric band.

    ``kind`` is ``point`` for a magnitude, ``surface`` for magnitudes per square arcsecond.
    """

    magnitude: float = Field(ge=-30, le=40)
    band: str = Field(min_length=1, max_length=20, description="Photometric band of the magnitude, e.g. V or J.")
    system: Literal["vega", "ab"] = "vega"
    kind: Literal["point", "surface"] = "point"
    error: float | None = Field(default=None, ge=0, le=5, description="Uncertainty of the magnitude.")


class Goal(_Document):
    """What the proposer wants: a signal-to-noise ratio, or a total exposure time."""

    snr: float | None = Field(default=None, gt=0, le=1e5)
    exposure_time_s: float | None = Field(default=None, gt=0, le=1e7)
    wavelength_nm: float | None = Field(default=None, gt=0, description="Where a spectrum's signal-to-noise is wanted (default: setup's central wavelength).")

    @model_validator(mode="after")
    def _exactly_one(self) -> Goal:
        if (self.snr is None) == (self.exposure_time_s is None):
            raise ValueError("give exactly one of 'snr' or 'exposure_time_s'")
        return self


#: Lunar time: the Moon's largest illuminated fraction while up for each ``sky`` (common practice: dark ≤ 0.3, grey ≤ 0.7).
SKY_ILLUMINATION: dict[str, float] = {"dark": 0.3, "grey": 0.7, "bright": 1.0}


class Constraints(_Document):
    """Observing conditions the request needs."""

    max_airmass: float = Field(default=2.0, ge=1.0, le=6.0)
    min_moon_separation_deg: float = Field(default=30.0, ge=0, le=180)
    max_moon_illumination: float | None = Field(default=None, ge=0, le=1)
    sky: Literal["dark", "grey", "bright"] | None = Field(
        default=None, description="Lunar time: dark (illumination ≤ 0.3 or Moon down), grey (≤ 0.7), bright (any)."
    )
    max_seeing_arcsec: float | None = Field(default=None, gt=0, le=10)


class TimeWindow(_Document):
    """A time-critical window: the request may only be observed between ``start`` and ``end`` (UTC)."""

    start: UtcDatetime
    end: UtcDatetime

    @model_validator(mode="after")
    def _ordered(self) -> TimeWindow:
        if self.end <= self.start:
            raise ValueError("'end' must be after 'start'")
        return self


class ObservationRequest(_Document):
    """One target with one instrument setup, a brightness, a goal, hours and constraints."""

    label: str = Field(min_length=1, max_length=80)
    target: AnyTarget
    instrument: str = Field(min_length=1)
    setup: Setup = Field(default_factory=Setup)
    brightness: Brightness
    goal: Goal
    hours_requested: float = Field(gt=0, le=2000)
    constraints: Constraints = Field(default_factory=Constraints)
    windows: list[TimeWindow] = Field(default_factory=list, max_length=200)


class Proposal(_Document):
    """What a proposer submits for one semester."""

    multiline_fields: ClassVar[frozenset[str]] = frozenset({"title"})  # a long title may be wrapped over lines

    id: str = Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
    semester: str = Field(min_length=1, max_length=20)
    title: str = Field(min_length=1, max_length=500)
    pi: Person
    requests: list[ObservationRequest] = Field(min_length=1, max_length=200)

    @field_validator("requests")
    @classmethod
    def _unique_labels(cls, requests: list[ObservationRequest]) -> list[ObservationRequest]:
        seen: set[str] = set()
        for request in requests:
            if request.label in seen:
                raise ValueError(f"request label {request.label!r} is used twice")
            seen.add(request.label)
        return requests
