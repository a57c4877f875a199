"""The observatory description and instrument schedules in force, and storing new versions of them.

The newest stored version is the one in force. On first start the packaged demo
observatory and its schedules are stored when the store holds none.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass
from importlib import resources
from typing import Any, TypeVar

from pydantic import BaseModel
from sqlalchemy import bindparam, func, select, text, true
from sqlalchemy.orm import Session, defer

from feasibility.documents import InstrumentSchedule, Observatory, parse_document
from feasibility.documents.consistency import schedule_problems
from feasibility.documents.loading import DocumentError
from feasibility.store.hashing import document_hash
from feasibility.store.models import ObservatoryVersion, ScheduleVersion, User

D = TypeVar("D", bound=BaseModel)

__all__ = [
    "InForce",
    "add_observatory_version",
    "add_schedule_version",
    "cached_document",
    "current_observatory",
    "current_schedule",
    "in_force",
    "observatory_of",
    "schedule_of",
    "seed_demo",
]


def current_observatory(session: Session) -> ObservatoryVersion | None:
    """The observatory description in force: the newest stored version (:func:`_newest_observatory`)."""
    query = select(ObservatoryVersion).options(defer(ObservatoryVersion.document)).where(ObservatoryVersion.id == _newest_observatory().c.id)
    return session.scalars(query).first()


def current_schedule(session: Session, semester: str) -> ScheduleVersion | None:
    """The instrument schedule in force for ``semester`` (:func:`_newest_schedules`), or None when none was uploaded."""
    newest = _newest_schedules(ScheduleVersion.semester == semester)
    query = select(ScheduleVersion).options(defer(ScheduleVersion.document)).where(ScheduleVersion.id.in_(select(newest.c.id)))
    return session.scalars(query).first()


def _newest_observatory() -> Any:
    """What is in force, for the observatory: its newest stored version (id and content hash, as a subquery)."""
    return select(ObservatoryVersion.id, ObservatoryVersion.content_hash).order_by(ObservatoryVersion.id.desc()).limit(1).subquery()


def _newest_schedules(semesters: Any) -> Any:
    """What is in force, for schedules: the newest stored version of each semester meeting ``semesters`` (semester, id)."""
    return select(ScheduleVersion.semester, func.max(ScheduleVersion.id).label("id")).where(semesters).group_by(ScheduleVersion.semester).subquery()


@dataclass(frozen=True)
class InForce:
    """The versions in force, by id: the observatory description, and the schedule of each semester asked about."""

    observatory_id: int
    observatory_hash: str
    #: Semester -> the id of its schedule in force, None when none was uploaded (every semester asked about is here).
    schedules: dict[str, int | None]

    def observatory(self, session: Session) -> Observatory:
        """The observatory description as a document: parsed once per content hash and process, its JSON read only then."""
        query = select(ObservatoryVersion.document).where(ObservatoryVersion.id == self.observatory_id)
        return cached_document(Observatory, self.observatory_hash, lambda: session.scalar(query))


def in_force(session: Session, semesters: Iterable[str]) -> InForce | None:
    """The ids of the observatory in force and of each semester's schedule in force, in one statement; None without an observatory.

    What :func:`current_observatory` and :func:`current_schedule` say, for a submission: ids and
    the observatory's hash only (stored versions never change, so the parsed observatory is kept per
    hash), and one round trip for any number of semesters.
    """
    asked = sorted(set(semesters))
    rows = session.execute(_IN_FORCE, {"semesters": asked}).all()
    if not rows:
        return None
    schedules: dict[str, int | None] = dict.fromkeys(asked)
    schedules.update({semester: schedule_id for _, _, semester, schedule_id in rows if semester is not None})
    return InForce(observatory_id=rows[0][0], observatory_hash=rows[0][1], schedules=schedules)


def _in_force_query() -> Any:
    """The newest observatory version joined to the newest schedule version of each semester asked (built once)."""
    observatory = _newest_observatory()
    schedules = _newest_schedules(ScheduleVersion.semester.in_(bindparam("semesters", expanding=True)))
    return select(observatory.c.id, observatory.c.content_hash, schedules.c.semester, schedules.c.id).select_from(observatory.outerjoin(schedules, true()))


def observatory_of(version: ObservatoryVersion) -> Observatory:
    """The stored observatory description as a document (parsed once per content hash and process).

    The ``document`` column is loaded on first access only, so a cached
    observatory costs no transfer of its JSON.
    """
    return cached_document(Observatory, version.content_hash, lambda: version.document)


def schedule_of(version: ScheduleVersion | None) -> InstrumentSchedule | None:
    """The stored schedule as a document, or None."""
    if version is None:
        return None
    return cached_document(InstrumentSchedule, version.content_hash, lambda: version.document)


def cached_document(model: type[D], content_hash: str, load: Callable[[], Any]) -> D:
    """The document of ``model`` with this content hash, parsed once per process; ``load()`` gives its JSON on a miss.

    Stored versions are never changed, and the same hash is the same content in any store,
    so the parsed document can be kept for the life of the process.
    """
    key = (model.__name__, content_hash)
    parsed = _parsed.get(key)
    if parsed is None:
        parsed = _parsed[key] = parse_document(model, load(), model.__name__.lower())
    return parsed  # type: ignore[return-value]


def add_observatory_version(session: Session, observatory: Observatory, uploaded_by: User | None = None) -> ObservatoryVersion:
    """Store ``observatory`` as the version in force, unless it equals the one in force already."""
    digest = document_hash(observatory)
    now = current_observatory(session)
    if now is not None and now.content_hash == digest:
        return now
    version = ObservatoryVersion(
        name=observatory.name,
        version_label=observatory.version,
        content_hash=digest,
        document=observatory.model_dump(mode="json", by_alias=True),
        uploaded_by=uploaded_by.id if uploaded_by else None,
    )
    session.add(version)
    session.flush()
    return version


def add_schedule_version(session: Session, schedule: InstrumentSchedule, uploaded_by: User | None = None) -> ScheduleVersion:
    """Store ``schedule`` as the one in force for its semester; checked against the observatory in force."""
    observatory_row = current_observatory(session)
    if observatory_row is not None:
        problems = schedule_problems(schedule, observatory_of(observatory_row))
        if problems:
            raise DocumentError(problems, "schedule")
    digest = document_hash(schedule)
    now = current_schedule(session, schedule.semester)
    if now is not None and now.content_hash == digest:
        return now
    version = ScheduleVersion(
        semester=schedule.semester,
        version_label=schedule.version,
        content_hash=digest,
        document=schedule.model_dump(mode="json", by_alias=True),
        uploaded_by=uploaded_by.id if uploaded_by else None,
    )
    session.add(version)
    session.flush()
    return version


def seed_demo(session: Session) -> bool:
    """Store the packaged demo observatory and schedules when the store has no observatory yet.

    Returns True when something was stored. On PostgreSQL a transaction-level
    advisory lock keeps several starting processes from seeding twice.
    """
    if session.get_bind().dialect.name == "postgresql":
        session.execute(text("SELECT pg_advisory_xact_lock(7020311)"))
    if current_observatory(session) is not None:
        return False
    data = resources.files("feasibility") / "data"
    observatory = parse_document(Observatory, (data / "observatory.yaml").read_bytes(), "observatory.yaml")
    add_observatory_version(session, observatory)
    for item in sorted(data.iterdir(), key=lambda p: p.name):
        if item.name.startswith("schedule-") and item.name.endswith(".yaml"):
            add_schedule_version(session, parse_document(InstrumentSchedule, item.read_bytes(), item.name))
    return True


_IN_FORCE = _in_force_query()

#: Parsed documents by (kind, content hash): the same hash is the same document, in any store.
_parsed: dict[tuple[str, str], object] = {}
