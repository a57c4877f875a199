"""The instrument schedule: which instrument is mounted on which night, and which nights are closed."""

from __future__ import annotations

from datetime import date
from typing import ClassVar, Literal

from pydantic import Field, field_validator, model_validator

from feasibility.documents.base import DocumentModel
from feasibility.documents.times import DocumentDate

__all__ = ["InstrumentSchedule", "ScheduledNight"]


class ScheduledNight(DocumentModel):
    """One night (named by the local date on which it begins)."""

    multiline_fields: ClassVar[frozenset[str]] = frozenset({"note"})

    night: DocumentDate
    instrument: str | None = Field(default=None, min_length=1)
    status: Literal["open", "engineering", "shutdown"] = "open"
    note: str | None = Field(default=None, max_length=500)

    @model_validator(mode="after")
    def _instrument_when_open(self) -> ScheduledNight:
        if self.status == "open" and self.instrument is None:
            raise ValueError("an open night needs an 'instrument'")
        return self


class InstrumentSchedule(DocumentModel):
    """The schedule of one semester. Nights not listed are closed."""

    observatory: str = Field(min_length=1)
    semester: str = Field(min_length=1, max_length=20)
    version: str = Field(default="1", min_length=1, max_length=40)
    nights: list[ScheduledNight] = Field(min_length=1)

    @field_validator("nights")
    @classmethod
    def _one_entry_per_night(cls, nights: list[ScheduledNight]) -> list[ScheduledNight]:
        seen: set[date] = set()
        for entry in nights:
            if entry.night in seen:
                raise ValueError(f"night {entry.night.isoformat()} is listed twice")
            seen.add(entry.night)
        return sorted(nights, key=lambda e: e.night)

    def instrument_on(self, night: date) -> str | None:
        """The instrument mounted and open on ``night``, or None when closed or not listed."""
        for entry in self.nights:
            if entry.night == night:
                return entry.instrument if entry.status == "open" else None
        return None
