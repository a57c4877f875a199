"""The documents the service reads: proposals, observatory descriptions and instrument schedules.

Each is a pydantic model; :mod:`feasibility.documents.loading` reads them from
JSON or YAML and turns every validation problem into a :class:`DocumentError`
that names the field path.
"""

from feasibility.documents.loading import DocumentError, load_document, parse_document
from feasibility.documents.observatory import (
    Band,
    Climate,
    Detector,
    Filter,
    Grating,
    HorizonPoint,
    Instrument,
    Observatory,
    Overheads,
    Semester,
    Site,
    Telescope,
)
from feasibility.documents.proposal import (
    Brightness,
    Constraints,
    Goal,
    ObservationRequest,
    Person,
    Proposal,
    Setup,
    Target,
    TimeWindow,
)
from feasibility.documents.schedule import InstrumentSchedule, ScheduledNight

__all__ = [
    "Band",
    "Brightness",
    "Climate",
    "Constraints",
    "Detector",
    "DocumentError",
    "Filter",
    "Goal",
    "Grating",
    "HorizonPoint",
    "Instrument",
    "InstrumentSchedule",
    "Observatory",
    "ObservationRequest",
    "Overheads",
    "Person",
    "Proposal",
    "ScheduledNight",
    "Semester",
    "Setup",
    "Site",
    "Target",
    "Telescope",
    "TimeWindow",
    "load_document",
    "parse_document",
]
