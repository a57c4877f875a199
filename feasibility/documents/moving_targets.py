"""The solar-system target kinds of a proposal: a major body by name, a minor body by its osculating orbital
elements, and an ephemeris table the proposer supplies.

A target without ``kind`` is a fixed ICRS position (:class:`feasibility.documents.proposal.Target`), as every
document before these kinds existed. Angles are degrees, distances astronomical units; the orbital elements are
heliocentric, referred to the ecliptic and equinox J2000.0, and their dates are read as Terrestrial Time (the
69 s between TT and UTC move a minor body by far less than the engine's tolerance).
"""

from __future__ import annotations

from typing import Annotated, Any, ClassVar, Literal

from pydantic import BeforeValidator, Field, field_validator, model_validator

from feasibility.documents.angles import Declination, RightAscension
from feasibility.documents.base import DocumentModel
from feasibility.documents.times import UtcDatetime

__all__ = [
    "MAJOR_BODIES",
    "TARGET_KINDS",
    "EphemerisRow",
    "EphemerisTableTarget",
    "MajorBodyTarget",
    "OrbitalElementsTarget",
    "target_kind",
]

#: The major bodies by name: the planets and the Moon (astropy's built-in ephemeris, no download).
MAJOR_BODIES = ("mercury", "venus", "mars", "jupiter", "saturn", "uranus", "neptune", "moon")
#: The values of a target's ``kind``; a target without one is ``fixed``.
TARGET_KINDS = ("fixed", "major_body", "orbital_elements", "ephemeris_table")


def target_kind(value: Any) -> str | None:
    """The kind of a target, document or parsed model: its ``kind``, ``fixed`` when it has none, None when unknown."""
    kind = value.get("kind", "fixed") if isinstance(value, dict) else getattr(value, "kind", "fixed")
    return kind if isinstance(kind, str) and kind in TARGET_KINDS else None


def _lower(value: Any) -> Any:
    return value.strip().lower() if isinstance(value, str) else value


class MajorBodyTarget(DocumentModel):
    """A planet or the Moon, by name; its position comes from astropy's built-in ephemeris."""

    kind: Literal["major_body"]
    name: str = Field(min_length=1, max_length=200, description="The name shown in results.")
    body: Annotated[Literal["mercury", "venus", "mars", "jupiter", "saturn", "uranus", "neptune", "moon"], BeforeValidator(_lower)] = Field(
        description="Which body: mercury, venus, mars, jupiter, saturn, uranus, neptune or moon (any letter case)."
    )


class OrbitalElementsTarget(DocumentModel):
    """A minor body (asteroid or comet) by osculating heliocentric elements, ecliptic and equinox J2000.0.

    Give ``perihelion_distance`` or (for an ellipse) ``semi_major_axis``; ``mean_anomaly`` (at ``epoch``, for an
    ellipse) or ``perihelion_time``. Brightness: ``absolute_magnitude`` and ``slope_parameter`` (the IAU H, G
    system of Bowell et al. 1989, for asteroids), or ``total_absolute_magnitude`` and ``total_magnitude_slope``
    (a comet's total magnitude m = M1 + 5 log Δ + K1 log r), or neither (the request's brightness is then used
    all semester). Predicted magnitudes are V.
    """

    kind: Literal["orbital_elements"]
    name: str = Field(min_length=1, max_length=200, description="The name shown in results.")
    epoch: UtcDatetime = Field(description="Osculation epoch of the elements (read as TT).")
    perihelion_distance: float | None = Field(default=None, gt=0, le=1000, description="q, astronomical units.")
    semi_major_axis: float | None = Field(default=None, gt=0, le=1000, description="a, astronomical units (ellipses only).")
    eccentricity: float = Field(ge=0, le=50, description="e: below 1 an ellipse, 1 a parabola, above 1 a hyperbola.")
    inclination: float = Field(ge=0, le=180, description="i, degrees, to the ecliptic J2000.0.")
    ascending_node_longitude: float = Field(ge=0, lt=360, description="Ω, degrees, from the equinox J2000.0.")
    perihelion_argument: float = Field(ge=0, lt=360, description="ω, degrees, from the ascending node.")
    mean_anomaly: float | None = Field(default=None, ge=-360, le=360, description="M at the epoch, degrees (ellipses only).")
    perihelion_time: UtcDatetime | None = Field(default=None, description="T, the time of perihelion passage (read as TT).")
    absolute_magnitude: float | None = Field(default=None, ge=-10, le=40, description="H of the IAU H, G system (V).")
    slope_parameter: float | None = Field(default=None, ge=-0.5, le=1.5, description="G of the IAU H, G system; 0.15 when H is given alone.")
    total_absolute_magnitude: float | None = Field(
        default=None, ge=-10, le=40, description="A comet's M1: its total V magnitude at 1 au from the Sun and the Earth."
    )
    total_magnitude_slope: float | None = Field(
        default=None, ge=0, le=40, description="A comet's K1 in m = M1 + 5 log Δ + K1 log r (K1 = 10 is common practice)."
    )

    #: Default G of the H, G system when only H is given (Bowell et al. 1989).
    default_slope: ClassVar[float] = 0.15

    @model_validator(mode="after")
    def _consistent(self) -> OrbitalElementsTarget:
        if (self.perihelion_distance is None) == (self.semi_major_axis is None):
            raise ValueError("give exactly one of 'perihelion_distance' or 'semi_major_axis'")
        if (self.mean_anomaly is None) == (self.perihelion_time is None):
            raise ValueError("give exactly one of 'mean_anomaly' or 'perihelion_time'")
        elliptic = self.eccentricity < 1.0
        if self.semi_major_axis is not None and not elliptic:
            raise ValueError(f"'semi_major_axis' needs an ellipse (eccentricity below 1, got {self.eccentricity:g}); give 'perihelion_distance'")
        if self.mean_anomaly is not None and not elliptic:
            raise ValueError(f"'mean_anomaly' needs an ellipse (eccentricity below 1, got {self.eccentricity:g}); give 'perihelion_time'")
        if self.slope_parameter is not None and self.absolute_magnitude is None:
            raise ValueError("'slope_parameter' needs 'absolute_magnitude'")
        if (self.total_absolute_magnitude is None) != (self.total_magnitude_slope is None):
            raise ValueError("give both 'total_absolute_magnitude' and 'total_magnitude_slope' (a comet's M1 and K1), or neither")
        if self.absolute_magnitude is not None and self.total_absolute_magnitude is not None:
            raise ValueError("give either 'absolute_magnitude' (asteroid H, G) or 'total_absolute_magnitude' (comet M1, K1), not both")
        return self

    @property
    def perihelion_au(self) -> float:
        """q in au, from ``perihelion_distance`` or ``semi_major_axis`` (1 − e)."""
        if self.perihelion_distance is not None:
            return self.perihelion_distance
        return float(self.semi_major_axis or 0.0) * (1.0 - self.eccentricity)

    @property
    def slope(self) -> float:
        """G, with its default."""
        return self.default_slope if self.slope_parameter is None else self.slope_parameter

    def has_brightness_law(self) -> bool:
        """Whether the target predicts its own magnitude (H, G or M1, K1)."""
        return self.absolute_magnitude is not None or self.total_absolute_magnitude is not None


class EphemerisRow(DocumentModel):
    """One row of an ephemeris table: a UTC time, the body's apparent right ascension and declination, its magnitude."""

    time: UtcDatetime
    ra_deg: RightAscension = Field(validation_alias="ra", serialization_alias="ra", description="Right ascension, as a fixed target's.")
    dec_deg: Declination = Field(validation_alias="dec", serialization_alias="dec", description="Declination, as a fixed target's.")
    magnitude: float | None = Field(default=None, ge=-30, le=40, description="Magnitude in the request's brightness band.")

    model_config = DocumentModel.model_config | {"populate_by_name": True}


class EphemerisTableTarget(DocumentModel):
    """A body whose positions the proposer supplies as an ephemeris table, interpolated between rows.

    Rows in time order, at most a few days apart for a body that moves fast; outside the table's first and last
    times the body's position is unknown and those instants do not count.
    """

    kind: Literal["ephemeris_table"]
    name: str = Field(min_length=1, max_length=200, description="The name shown in results.")
    ephemeris_table: list[EphemerisRow] = Field(min_length=2, max_length=5000, description="The rows, in time order.")

    @field_validator("ephemeris_table")
    @classmethod
    def _ordered(cls, rows: list[EphemerisRow]) -> list[EphemerisRow]:
        for index in range(1, len(rows)):
            if rows[index].time <= rows[index - 1].time:
                raise ValueError(f"row {index}'s time must be after row {index - 1}'s (rows in time order, no repeats)")
        with_magnitude = [row.magnitude is not None for row in rows]
        if any(with_magnitude) and not all(with_magnitude):
            missing = with_magnitude.index(False)
            raise ValueError(f"row {missing} has no magnitude: give a magnitude in every row or in none")
        return rows

    @property
    def span_days(self) -> float:
        """Days between the first and the last row."""
        return (self.ephemeris_table[-1].time - self.ephemeris_table[0].time).total_seconds() / 86400.0
