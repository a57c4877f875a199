"""Storing submitted proposals and the check runs they need.

A submission is validated (fields, then consistency with the observatory in
force), stored as a new proposal version unless that exact content was stored
before, and given a check run against the observatory and schedule in force.
Identical content gives the existing run back, so re-submitting is harmless.

:func:`submit_many` takes any number of proposals at once: each is validated
first and answered on its own (a bad one, or one the user may not change, is its
own error), then the good ones are stored together in a few multi-row statements
(``INSERT ... ON CONFLICT DO NOTHING RETURNING`` for proposals, versions and runs,
and one look-up of what exists already), so a proposal costs the store a
fraction of a statement. :func:`submit` is the same for one proposal (four
statements for a new one).

The caller commits, then enqueues the runs (:func:`feasibility.service.dispatch.enqueue`)
whose :attr:`Submission.must_send` says so: a new run, and also a run found still
queued — its first message may never have reached the broker, and a second is
harmless (the task is idempotent). A run created here is unsent until then (or
marked sent in advance with ``mark_sent``: :func:`~feasibility.service.dispatch.marks_with_commit`),
so the relay sends it should the caller fail to.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import and_, bindparam, select
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.orm import Session, defer

from feasibility.documents import Proposal, parse_document
from feasibility.documents.loading import DocumentError, Problem, read_mapping
from feasibility.documents.proposal_problems import read_proposal
from feasibility.service import access
from feasibility.service.access import NotAllowed
from feasibility.service.current import InForce, in_force
from feasibility.service.engine_version import engine_version
from feasibility.store.hashing import document_hash
from feasibility.store.models import CheckRun, ObservatoryVersion, ProposalRecord, ProposalVersion, ScheduleVersion, User, utcnow

__all__ = ["NotAllowed", "Outcome", "Submission", "ensure_run", "submit", "submit_many", "submit_proposal"]

#: Priority of a fresh submission; re-checks use higher numbers (run later).
SUBMISSION_PRIORITY = 0

#: The name a submitted document goes by in its problems.
DOCUMENT = "proposal"


@dataclass
class Submission:
    """What a submission did: the run to wait for, and whether it is new."""

    run: CheckRun
    created: bool
    proposal_id: str
    #: The run was marked sent in this transaction (``mark_sent``): send it right after the commit with ``enqueue(..., marked=True)``.
    marked: bool = False

    @property
    def must_send(self) -> bool:
        """Whether the caller enqueues the run after commit: it is new, or it was found waiting in the queue."""
        return self.created or self.run.state == "queued"


#: One submitted document's answer: stored, or why not.
Outcome = Submission | DocumentError | NotAllowed

#: A run's inputs besides the observatory and the engine: (proposal version id, schedule key).
RunKey = tuple[int, int]


def submit_proposal(session: Session, document: dict[str, Any] | str | bytes, submitted_by: User | None, reason: str = "submitted") -> CheckRun:
    """Validate and store ``document``; the check run for it (existing or new). The caller commits."""
    return submit(session, document, submitted_by, reason=reason).run


def submit(
    session: Session,
    document: dict[str, Any] | str | bytes,
    submitted_by: User | None,
    *,
    reason: str = "submitted",
    owner: User | None = None,
    priority: int = SUBMISSION_PRIORITY,
    mark_sent: bool = False,
) -> Submission:
    """Validate and store ``document`` and make sure a check run exists for it.

    ``owner`` is the proposer a portal submits for; a proposer owns what they submit.
    Raises :class:`DocumentError` for bad input and :class:`NotAllowed` when the
    proposal id belongs to another user.
    """
    (outcome,) = submit_many(session, [document], submitted_by, reason=reason, owner=owner, priority=priority, mark_sent=mark_sent)
    if isinstance(outcome, Exception):
        raise outcome
    return outcome


def submit_many(
    session: Session,
    documents: Sequence[dict[str, Any] | str | bytes],
    submitted_by: User | None,
    *,
    reason: str = "submitted",
    owner: User | None = None,
    priority: int = SUBMISSION_PRIORITY,
    mark_sent: bool = False,
    with_results: bool = True,
) -> list[Outcome]:
    """Validate every document, then store the good ones together; each document's outcome, in their order.

    A document's outcome is its :class:`Submission`, or the :class:`DocumentError` or
    :class:`NotAllowed` that kept it out; the others are stored all the same. The same
    proposal twice is stored as it would be one after the other. ``mark_sent``: new and
    queued runs are marked sent in this transaction (they are sent right after the commit).
    ``with_results=False`` leaves found runs' results unread (the caller answers with their ids).
    Raises :class:`NotAllowed` when ``submitted_by`` may not submit at all.
    """
    if submitted_by is not None:
        access.check(submitted_by, access.SUBMIT)
    mappings = [_mapping(document) for document in documents]
    forces = in_force(session, {name for m in mappings if (name := _semester_named(m)) is not None})
    if forces is None:
        return [_without_observatory(m) for m in mappings]
    observatory = forces.observatory(session)
    outcomes: list[Any] = [m if isinstance(m, DocumentError) else _read(m, observatory) for m in mappings]
    valid = [(i, p) for i, p in enumerate(outcomes) if isinstance(p, Proposal)]
    if valid:
        schedules = _schedule_keys(session, forces, {p.semester for _, p in valid})
        stored = _Store(session, forces.observatory_id, access.takes_ownership(submitted_by, owner), submitted_by)
        for (index, _), outcome in zip(valid, stored.store([p for _, p in valid], schedules, reason, priority, mark_sent, with_results), strict=True):
            outcomes[index] = outcome
    return outcomes


def ensure_run(
    session: Session,
    version: ProposalVersion,
    observatory_row: ObservatoryVersion,
    schedule_row: ScheduleVersion | None,
    *,
    reason: str = "submitted",
    priority: int = SUBMISSION_PRIORITY,
) -> tuple[CheckRun, bool]:
    """The check run of ``version`` against these inputs and the current engine: found, or created queued.

    The unique constraint on the inputs makes this safe when two processes ask at once.
    """
    key = (version.id, schedule_row.id if schedule_row is not None else 0)
    runs, created = _ensure_runs(session, [key], observatory_row.id, {}, reason=reason, priority=priority, mark_sent=False, with_results=True)
    return runs[key], key in created


class _Store:
    """Storing validated proposals of one submitter: their records, versions and runs, each kind in one or two statements."""

    def __init__(self, session: Session, observatory_id: int, owner: User | None, submitted_by: User | None) -> None:
        self.session = session
        self.observatory_id = observatory_id
        self.owner = owner
        self.submitted_by = submitted_by

    def store(self, proposals: list[Proposal], schedules: dict[str, int], reason: str, priority: int, mark_sent: bool, with_results: bool) -> list[Outcome]:
        documents = [p.model_dump(mode="json", by_alias=True) for p in proposals]  # dumped once: stored, and hashed
        hashes = [document_hash(d) for d in documents]
        new_records = self._insert_records(proposals)
        existing, versions, runs = self._find(
            [p.id for p in proposals if p.id not in new_records], set(hashes), set(schedules.values()), with_results=with_results
        )
        refusals = access.new_version_refusals(self.session, list(existing.values()), self.submitted_by, self.owner)
        record_ids = {**new_records, **{pid: record.id for pid, record in existing.items()}}
        allowed: list[int] = []
        for i, proposal in enumerate(proposals):
            record = existing.get(proposal.id)
            if record is not None and record.id in refusals:
                continue
            if record is not None and record.semester != proposal.semester:
                record.semester = proposal.semester
            allowed.append(i)
        wanted = {(record_ids[proposals[i].id], hashes[i]): i for i in reversed(allowed)}  # each new version from its first document
        versions.update(self._insert_versions({key: (proposals[i], documents[i]) for key, i in wanted.items() if key not in versions}))
        run_keys = {i: (versions[record_ids[proposals[i].id], hashes[i]], schedules[proposals[i].semester]) for i in allowed}
        found, created = _ensure_runs(
            self.session,
            sorted(set(run_keys.values())),
            self.observatory_id,
            runs,
            reason=reason,
            priority=priority,
            mark_sent=mark_sent,
            with_results=with_results,
        )
        outcomes: list[Outcome] = []
        for i, proposal in enumerate(proposals):
            if i not in run_keys:
                outcomes.append(refusals[existing[proposal.id].id])
                continue
            key = run_keys[i]
            run = found[key]
            first = key in created
            created.discard(key)  # the same proposal again in this batch finds the run the first one made
            outcomes.append(Submission(run=run, created=first, proposal_id=proposal.id, marked=mark_sent and run.state == "queued"))
        return outcomes

    def _insert_records(self, proposals: list[Proposal]) -> dict[str, int]:
        """Insert the proposals not stored yet; their record ids by proposal id (the others' are found by :meth:`_find`)."""
        semesters = {p.id: p.semester for p in proposals}  # the last document of an id wins, as when sent one after the other
        owner_id = self.owner.id if self.owner is not None else None
        rows = [{"proposal_id": pid, "semester": semesters[pid], "owner_id": owner_id} for pid in sorted(semesters)]
        return {pid: rid for rid, pid in self.session.execute(_statement(self.session, "records"), rows)}

    def _find(
        self, proposal_ids: list[str], hashes: set[str], schedule_keys: set[int], *, with_results: bool
    ) -> tuple[dict[str, ProposalRecord], dict[tuple[int, str], int], dict[RunKey, CheckRun]]:
        """The stored proposals among ``proposal_ids``, with their versions of these contents and those versions' runs, in one query."""
        if not proposal_ids:
            return {}, {}, {}
        parameters = {
            "ids": sorted(set(proposal_ids)),
            "hashes": sorted(hashes),
            "observatory_id": self.observatory_id,
            "schedule_keys": sorted(schedule_keys),
            "engine": engine_version(),
        }
        records: dict[str, ProposalRecord] = {}
        versions: dict[tuple[int, str], int] = {}
        runs: dict[RunKey, CheckRun] = {}
        for record, version_id, content_hash, run in self.session.execute(_FIND if with_results else _FIND_WITHOUT_RESULTS, parameters):
            records[record.proposal_id] = record
            if version_id is not None:
                versions[record.id, content_hash] = version_id
            if run is not None:
                runs[run.proposal_version_id, run.schedule_key] = run
        return records, versions, runs

    def _insert_versions(self, wanted: dict[tuple[int, str], tuple[Proposal, dict[str, Any]]]) -> dict[tuple[int, str], int]:
        """Store these new versions (by record id and content hash); the ids of all of them, made now or by a concurrent submission."""
        if not wanted:
            return {}
        submitted_by = self.submitted_by.id if self.submitted_by is not None else None
        rows = [_version_row(record_id, content_hash, *wanted[record_id, content_hash], submitted_by) for record_id, content_hash in sorted(wanted)]
        ids = {(ref, content_hash): vid for vid, ref, content_hash in self.session.execute(_statement(self.session, "versions"), rows)}
        if len(ids) < len(wanted):  # stored meanwhile by a concurrent submission of the same content
            refs, contents = {ref for ref, _ in wanted}, {h for _, h in wanted}
            query = select(ProposalVersion.id, ProposalVersion.proposal_ref, ProposalVersion.content_hash).where(
                ProposalVersion.proposal_ref.in_(refs), ProposalVersion.content_hash.in_(contents)
            )
            ids.update({(ref, h): vid for vid, ref, h in self.session.execute(query) if (ref, h) in wanted})
        return ids


def _ensure_runs(
    session: Session,
    keys: Iterable[RunKey],
    observatory_id: int,
    found: dict[RunKey, CheckRun],
    *,
    reason: str,
    priority: int,
    mark_sent: bool,
    with_results: bool,
) -> tuple[dict[RunKey, CheckRun], set[RunKey]]:
    """The check runs of these inputs (``found``: those known already), the missing ones created queued; and which are new.

    One multi-row ``INSERT ... ON CONFLICT DO NOTHING RETURNING``: the unique constraint on
    the inputs makes this safe when two processes ask at once (a run made meanwhile is then read).
    A run that failed before is queued again, and counts as new (it must be enqueued).
    """
    keys = sorted(set(keys))
    runs = {key: found[key] for key in keys if key in found}
    missing = [key for key in keys if key not in runs]
    created: set[RunKey] = set()
    engine = engine_version()
    if missing:
        dispatched = utcnow() if mark_sent else None
        rows = [
            {
                "proposal_version_id": version_id,
                "observatory_version_id": observatory_id,
                "schedule_key": schedule_key,
                "schedule_version_id": schedule_key or None,
                "engine_version": engine,
                "reason": reason,
                "priority": priority,
                "state": "queued",
                "dispatched_at": dispatched,
            }
            for version_id, schedule_key in missing
        ]
        for run in session.scalars(_statement(session, "runs"), rows):
            runs[run.proposal_version_id, run.schedule_key] = run
            created.add((run.proposal_version_id, run.schedule_key))
    if len(runs) < len(keys):  # made meanwhile by a concurrent submission of the same inputs
        lost = [key for key in keys if key not in runs]
        query = select(CheckRun).where(
            CheckRun.proposal_version_id.in_({v for v, _ in lost}),
            CheckRun.observatory_version_id == observatory_id,
            CheckRun.schedule_key.in_({k for _, k in lost}),
            CheckRun.engine_version == engine,
        )
        if not with_results:
            query = query.options(defer(CheckRun.result))
        runs.update({key: run for run in session.scalars(query) if (key := (run.proposal_version_id, run.schedule_key)) in lost})
    now = utcnow()
    for key, run in runs.items():
        if key in created:
            continue
        if run.state == "failed":
            # The engine failed on these inputs before; asking again queues the run again (it must be enqueued).
            run.state, run.error, run.queued_at, run.reason, run.dispatched_at = "queued", None, now, reason, None
            created.add(key)
        if mark_sent and run.state == "queued":
            run.dispatched_at = now
    return runs, created


def _mapping(document: dict[str, Any] | str | bytes) -> dict[str, Any] | DocumentError:
    if isinstance(document, dict):
        return document
    try:
        return read_mapping(document, DOCUMENT)
    except DocumentError as error:
        return error


def _semester_named(data: dict[str, Any] | DocumentError) -> str | None:
    """The semester a document names, asked of the store with what is in force before the document is validated.

    Only plausible text (printable, short): the store refuses some (PostgreSQL any NUL), and
    anything else is asked once validated (:func:`_schedule_keys`), as a name of the observatory's.
    """
    name = data.get("semester") if isinstance(data, dict) else None
    if not isinstance(name, str):
        return None
    name = name.strip()
    return name if 0 < len(name) <= 20 and name.isprintable() else None


def _read(data: dict[str, Any], observatory: Any) -> Proposal | DocumentError:
    """The proposal, or every problem of it: schema and observatory in one answer (documents.proposal_problems)."""
    try:
        return read_proposal(data, observatory, DOCUMENT)
    except DocumentError as error:
        return error


def _without_observatory(data: dict[str, Any] | DocumentError) -> DocumentError:
    """The answer to a document while the service has no observatory: its own problems first."""
    if isinstance(data, DocumentError):
        return data
    try:
        parse_document(Proposal, data, DOCUMENT)
    except DocumentError as error:
        return error
    return DocumentError([Problem("", "the service has no observatory description yet")], DOCUMENT)


def _schedule_keys(session: Session, forces: InForce, semesters: set[str]) -> dict[str, int]:
    """Each semester's schedule key: the id of its schedule in force, 0 for none (a run's inputs name it so)."""
    known = dict(forces.schedules)
    unknown = semesters - known.keys()  # written otherwise in the document (say with spaces) than validated
    if unknown:
        more = in_force(session, unknown)
        known.update(more.schedules if more is not None else dict.fromkeys(unknown))
    return {semester: known[semester] or 0 for semester in semesters}


def _version_row(record_id: int, content_hash: str, proposal: Proposal, document: dict[str, Any], submitted_by: int | None) -> dict[str, Any]:
    requests = proposal.requests
    return {
        "proposal_ref": record_id,
        "content_hash": content_hash,
        "document": document,
        "title": proposal.title,
        "pi_name": proposal.pi.name,
        "instruments": ",".join(sorted({r.instrument for r in requests})),
        "targets": "\n".join(r.target.name for r in requests),
        "hours_requested": float(sum(r.hours_requested for r in requests)),
        "submitted_by": submitted_by,
        "submitted_at": utcnow(),
    }


def _find_query(*, with_results: bool) -> Any:
    """Stored proposals by id, each with its versions of the contents asked and their runs on the inputs asked (built once)."""
    version_of = and_(ProposalVersion.proposal_ref == ProposalRecord.id, ProposalVersion.content_hash.in_(bindparam("hashes", expanding=True)))
    run_of = and_(
        CheckRun.proposal_version_id == ProposalVersion.id,
        CheckRun.observatory_version_id == bindparam("observatory_id"),
        CheckRun.schedule_key.in_(bindparam("schedule_keys", expanding=True)),
        CheckRun.engine_version == bindparam("engine"),
    )
    query = (
        select(ProposalRecord, ProposalVersion.id, ProposalVersion.content_hash, CheckRun)
        .outerjoin(ProposalVersion, version_of)
        .outerjoin(CheckRun, run_of)
        .where(ProposalRecord.proposal_id.in_(bindparam("ids", expanding=True)))
    )
    return query if with_results else query.options(defer(CheckRun.result))


_FIND = _find_query(with_results=True)
_FIND_WITHOUT_RESULTS = _find_query(with_results=False)

#: The INSERT constructs with ON CONFLICT, per dialect.
_UPSERT: dict[str, Any] = {"postgresql": postgresql.insert, "sqlite": sqlite.insert}

#: The multi-row inserts of each kind, per dialect, built once: (table or entity, the unique columns, what they return).
_INSERTS: dict[str, tuple[Any, list[str], Any]] = {
    "records": (ProposalRecord.__table__, ["proposal_id"], (ProposalRecord.id, ProposalRecord.proposal_id)),
    "versions": (ProposalVersion.__table__, ["proposal_ref", "content_hash"], (ProposalVersion.id, ProposalVersion.proposal_ref, ProposalVersion.content_hash)),
    "runs": (CheckRun, ["proposal_version_id", "observatory_version_id", "schedule_key", "engine_version"], (CheckRun,)),
}
_built: dict[tuple[str, str], Any] = {}


def _statement(session: Session, kind: str) -> Any:
    """``INSERT ... ON CONFLICT (its unique columns) DO NOTHING RETURNING``: rows already stored are skipped, not duplicated.

    Both stores, PostgreSQL and SQLite, have it. Run with a list of rows, it is one statement
    (SQLAlchemy's "insertmanyvalues"); rows go in sorted by their unique columns, so two
    concurrent submissions take the row locks in the same order and cannot deadlock.
    """
    dialect = session.get_bind().dialect.name
    statement = _built.get((dialect, kind))
    if statement is None:
        target, unique, returned = _INSERTS[kind]
        statement = _built[dialect, kind] = _UPSERT[dialect](target).on_conflict_do_nothing(index_elements=unique).returning(*returned)
    return statement
