"""Running check runs: the idempotent body of the worker's tasks, for one run or a batch.

A batch of runs is claimed (queued → running, each run's attempt counted, a lease
taken) and their inputs read in one short transaction (one UPDATE ... RETURNING),
computed outside any transaction while one heartbeat renews their leases
(:mod:`feasibility.service.leases`), and stored (running → done, with every
request's figures and findings) in another, each run on condition that its claim
is still ours (its attempt matches). So a run executed twice, by a redelivered
message or the relay's re-send, is stored once, and a done run is never recomputed.
A single run is a batch of one.

A run whose lease is live elsewhere is not dropped: :class:`LeaseHeld` (or, for a
batch, :attr:`Batch.held`) says when to try it again (the lease's remaining time),
by which time the run is done (the message is then skipped) or its holder gone (the
run is taken over). A claim whose lease lapsed, or whose holder is a dead process
of this host, is taken over at once.

Faults while storing: a database fault that may pass (not
:func:`~feasibility.service.faults.is_lasting`) gives the batch's claims back,
retrying the release, and propagates for the caller to retry; one that will not
change, or any other error a result raises on its way to the store, has the
batch's runs stored one by one, so that only the run whose result cannot be stored
is made ``failed`` with the reason (never queued again by itself).
"""

from __future__ import annotations

import json
import logging
import time
import traceback
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Any

from sqlalchemy import Table, and_, case, insert, literal, null, or_, select, text, tuple_, update
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import make_transient_to_detached

from feasibility.documents import InstrumentSchedule, Observatory, Proposal, parse_document
from feasibility.logs import run_context
from feasibility.results import Level, ProposalResult
from feasibility.service.current import cached_document
from feasibility.service.details import compact_result
from feasibility.service.faults import is_lasting, is_passing
from feasibility.service.leases import Heartbeat, holder_is_gone, lease_length, owner_id, working_on
from feasibility.service.runtime import current_settings
from feasibility.store.db import JSONText, session_scope
from feasibility.store.models import CheckRun, FindingRow, ObservatoryVersion, ProposalVersion, RequestOutcome, ScheduleVersion, utcnow

__all__ = ["RUN_TIMEOUT", "Batch", "LeaseHeld", "check", "execute_run", "execute_runs"]

log = logging.getLogger(__name__)

#: The longest a run may compute: its heartbeat stops renewing the lease after this, so a hung
#: check is taken over. The settings' ``run_timeout_s`` decides (this is its default). Far longer than the longest check.
RUN_TIMEOUT = timedelta(minutes=15)

#: Tries, and the pause before each next one, to give a claim back after a database fault.
_RELEASE_PAUSES_S = (0.5, 1.0, 2.0, 4.0)

# The tables, for Core statements: the task body writes rows in bulk and needs none of the ORM's bookkeeping.
_RUNS: Table = CheckRun.__table__  # type: ignore[assignment]
_OUTCOMES: Table = RequestOutcome.__table__  # type: ignore[assignment]
_FINDINGS: Table = FindingRow.__table__  # type: ignore[assignment]


class LeaseHeld(Exception):
    """Another live worker holds the run's lease: try this message again in ``retry_in`` seconds."""

    def __init__(self, run_id: int, retry_in: float) -> None:
        super().__init__(f"check run {run_id} is being computed elsewhere; try again in {retry_in:.1f} s")
        self.run_id = run_id
        self.retry_in = retry_in


@dataclass
class Batch:
    """What :func:`execute_runs` did: how many runs ended each way, and the runs held elsewhere (id → seconds to wait)."""

    ended: Counter[str] = field(default_factory=Counter)
    held: dict[int, float] = field(default_factory=dict)


@dataclass
class _Claim:
    """A run claimed by us: its attempt, its proposal (for the order of storing) and its inputs."""

    run_id: int
    attempt: int
    proposal_ref: int
    inputs: tuple[Any, ...]


@dataclass
class _Failed:
    """A run that could not be computed (an engine fault, unreadable inputs): the reason stored with it."""

    reason: str


def execute_run(run_id: int) -> str:
    """Compute and store check run ``run_id`` unless it is done or being computed elsewhere.

    Returns what happened: ``done``, ``failed`` (the engine raised, the inputs could not
    be read or the result could not be stored for good; the reason is stored),
    ``skipped`` (done or failed already, or no such run) or ``superseded`` (our claim was
    taken over while computing; the other worker's result stands). Raises
    :class:`LeaseHeld` when a live worker holds the run, and passing database faults
    (after giving the claim back) so the caller can retry with back-off.
    """
    batch = execute_runs([run_id])
    if batch.held:
        raise LeaseHeld(run_id, batch.held[run_id])
    return next(how for how, count in batch.ended.items() if count)


def execute_runs(run_ids: Sequence[int]) -> Batch:
    """Compute and store the check runs ``run_ids`` as :func:`execute_run` does each, claiming and storing them together.

    Runs held by a live worker elsewhere are left out and listed in :attr:`Batch.held`.
    A passing database fault gives back every claim of the batch not stored yet and
    propagates: trying the whole batch again skips the runs already done.
    """
    ids = list(dict.fromkeys(int(run_id) for run_id in run_ids))
    batch = Batch()
    if not ids:
        return batch
    with working_on(*ids):
        claims = _claim(ids, batch)
        if not claims:
            return batch
        with Heartbeat({claim.run_id: claim.attempt for claim in claims}, lease_length(), _run_timeout()) as heartbeat:
            try:
                outcomes = {}
                for claim in claims:
                    heartbeat.computing()
                    outcomes[claim.run_id] = _compute(claim)
                # A proposal's runs are stored in batch order, one a transaction, as if stored one after the other:
                # each verdict change is then recorded against the run stored just before it.
                for part in _rounds(claims):
                    batch.ended.update(_store([(claim, outcomes[claim.run_id]) for claim in part]))
            except SQLAlchemyError:
                _release(claims)
                raise
    return batch


def check(proposal: Proposal, observatory: Observatory, schedule: InstrumentSchedule | None) -> ProposalResult:
    """Call the engine (looked up at call time, so tests may replace ``feasibility.engine.check_proposal``).

    The stored result keeps no plot series (:func:`~feasibility.service.details.compact_result`),
    so the engine is asked not to compute them; pages recompute them on demand with the full call.
    """
    from feasibility import engine

    return engine.check_proposal(proposal, observatory, schedule, series=False)


def _compute(claim: _Claim) -> ProposalResult | _Failed:
    """The engine on a claimed run's inputs; an engine fault or unreadable inputs make it :class:`_Failed` (not retried forever).

    A store fault while reading the inputs that may pass propagates (the batch's claims are then given back).
    """
    with run_context(claim.run_id):
        try:
            return check(*_parse_inputs(*claim.inputs))
        except Exception as exc:
            if isinstance(exc, SQLAlchemyError) and not is_lasting(exc):
                raise
            log.exception("check run %s failed", claim.run_id)
            return _Failed(_reason(exc))


def _claim(run_ids: list[int], batch: Batch) -> list[_Claim]:
    """Claim the claimable runs of ``run_ids`` with their inputs in one UPDATE ... RETURNING; note the others in ``batch``.

    Claimable: queued, or running under a lapsed lease, or held by a dead process of
    this host. A run done, failed or missing is ``skipped``; one a live worker holds is
    noted in :attr:`Batch.held` with the seconds until its lease lapses.
    """
    now = utcnow()
    lease = lease_length()
    claim = {"state": "running", "started_at": now, "attempts": _RUNS.c.attempts + 1, "lease_expires_at": now + lease, "lease_owner": owner_id()}
    with session_scope() as session:
        if session.get_bind().dialect.name == "postgresql":
            # A claim lost in a database crash costs only a recomputation (the run is still
            # queued), so it need not wait for the WAL flush; results are committed durably.
            session.execute(text("SET LOCAL synchronous_commit = off"))
        lapsed = or_(_RUNS.c.lease_expires_at < now, and_(_RUNS.c.lease_expires_at.is_(None), _RUNS.c.started_at < now - lease))
        claimable = or_(_RUNS.c.state == "queued", and_(_RUNS.c.state == "running", lapsed))
        rows = list(session.execute(update(_RUNS).where(_RUNS.c.id.in_(run_ids), claimable).values(**claim).returning(*_CLAIMED)))
        missing = [run_id for run_id in run_ids if run_id not in {row.id for row in rows}]
        if missing:
            current = session.execute(
                select(_RUNS.c.id, _RUNS.c.state, _RUNS.c.attempts, _RUNS.c.lease_expires_at, _RUNS.c.lease_owner).where(_RUNS.c.id.in_(missing))
            ).all()
            for run in current:
                if run.state not in ("queued", "running"):
                    continue
                taken = None
                if run.state == "running" and holder_is_gone(run.lease_owner, run.id, ours=1):
                    log.info("check run %s: its holder %s is gone; taking it over", run.id, run.lease_owner)
                    taken = session.execute(
                        update(_RUNS)
                        .where(_RUNS.c.id == run.id, _RUNS.c.state == "running", _RUNS.c.attempts == run.attempts)
                        .values(**claim)
                        .returning(*_CLAIMED)
                    ).first()
                if taken is not None:
                    rows.append(taken)
                else:
                    expires = run.lease_expires_at or now
                    batch.held[run.id] = max((expires - now).total_seconds(), 0.0) + 1.0
    claimed = {row.id: row for row in rows}
    skipped = len(run_ids) - len(claimed) - len(batch.held)
    if skipped:
        batch.ended["skipped"] += skipped
    return [
        _Claim(
            row.id, row.attempts, row.proposal_ref, (row.document, row.observatory_version_id, row.observatory_hash, row.schedule_version_id, row.schedule_hash)
        )
        for row in (claimed[run_id] for run_id in run_ids if run_id in claimed)
    ]


def _scalar(column: Any, condition: Any) -> Any:
    """A scalar subquery correlated to the runs table: ``column`` of the row meeting ``condition`` (NULL when none).

    In a RETURNING clause SQLite's columns are written without their table: ``condition``
    must name columns that only one of the two tables has (``id = proposal_version_id``).
    """
    return select(column).where(condition).correlate(_RUNS).scalar_subquery()


#: What a claim returns: the run, its attempt and its inputs (the proposal's JSON, the other two documents' hashes).
_CLAIMED = (
    _RUNS.c.id,
    _RUNS.c.attempts,
    _RUNS.c.observatory_version_id,
    _RUNS.c.schedule_version_id,
    _scalar(ProposalVersion.document, ProposalVersion.id == _RUNS.c.proposal_version_id).label("document"),
    _scalar(ProposalVersion.proposal_ref, ProposalVersion.id == _RUNS.c.proposal_version_id).label("proposal_ref"),
    _scalar(ObservatoryVersion.content_hash, ObservatoryVersion.id == _RUNS.c.observatory_version_id).label("observatory_hash"),
    _scalar(ScheduleVersion.content_hash, ScheduleVersion.id == _RUNS.c.schedule_version_id).label("schedule_hash"),
)


def _parse_inputs(
    document: Any, observatory_id: int, observatory_hash: str, schedule_id: int | None, schedule_hash: str | None
) -> tuple[Proposal, Observatory, InstrumentSchedule | None]:
    """Parse the claimed run's documents; versions never change, so the observatory and schedule are parsed once per process.

    Outside the claim's transaction: inputs that cannot be read fail the run (stored), they do not undo the claim.
    """
    proposal = parse_document(Proposal, document, "proposal")

    def read(model: Any, row_id: int) -> Any:
        with session_scope(read_only=True) as session:
            return session.scalar(select(model.document).where(model.id == row_id))

    observatory = cached_document(Observatory, observatory_hash, lambda: read(ObservatoryVersion, observatory_id))
    schedule = None
    if schedule_id is not None and schedule_hash is not None:
        schedule = cached_document(InstrumentSchedule, schedule_hash, lambda: read(ScheduleVersion, schedule_id))
    return proposal, observatory, schedule


def _rounds(claims: list[_Claim]) -> list[list[_Claim]]:
    """The claims cut so that no proposal has two runs in one part, in batch order (nearly always one part)."""
    rounds: list[list[_Claim]] = []
    seen: Counter[int] = Counter()
    for claim in claims:
        position = seen[claim.proposal_ref]
        seen[claim.proposal_ref] += 1
        if position == len(rounds):
            rounds.append([])
        rounds[position].append(claim)
    return rounds


def _store(items: list[tuple[_Claim, ProposalResult | _Failed]]) -> Counter[str]:
    """Store the runs' results or failures in one transaction; if that cannot be done for good, each run on its own.

    A run alone whose result cannot be stored for good is made ``failed`` with the reason.
    """
    try:
        return _store_together(items)
    except Exception as exc:
        if isinstance(exc, SQLAlchemyError) and not is_lasting(exc):
            raise  # the store, not these results: the caller gives the claims back and retries
        if len(items) > 1:
            log.warning("check runs %s: stored together they met %s; storing them one by one", [c.run_id for c, _ in items], type(exc).__name__)
            ended: Counter[str] = Counter()
            for item in items:
                ended.update(_store([item]))
            return ended
        claim = items[0][0]
        with run_context(claim.run_id):
            log.exception("check run %s: the result cannot be stored", claim.run_id)
        return _store_together([(claim, _Failed(_reason(exc, "the result could not be stored: ")))])


def _store_together(items: list[tuple[_Claim, ProposalResult | _Failed]]) -> Counter[str]:
    """Finish the runs still claimed by us (one UPDATE), insert their request outcomes and findings (one INSERT each)
    and record verdict changes: one transaction. A run whose claim was taken over is ``superseded``, nothing of it stored.

    The result is stored compact (:func:`feasibility.service.details.compact_result`: no plot
    series, no method texts nor finding figures; pages recompute them on demand). A request row
    holds its verdict and key figures, a finding row what the lists filter and sort on (check,
    level) for findings that are not feasible; their words and figures live in the result only.
    """
    from feasibility.service.changes import record_changes

    finished = utcnow()
    stored: dict[int, dict[str, Any]] = {}
    values: dict[str, dict[int, Any]] = {"state": {}, "verdict": {}, "result": {}, "error": {}}
    for claim, outcome in items:
        run_id = claim.run_id
        if isinstance(outcome, _Failed):
            run_values: dict[str, Any] = {"state": "failed", "verdict": None, "result": None, "error": outcome.reason[:4000]}
        else:
            stored[run_id] = compact_result(outcome)
            text_form = JSONText(json.dumps(stored[run_id], separators=(",", ":"), ensure_ascii=False))
            run_values = {"state": "done", "verdict": outcome.verdict.value, "result": text_form, "error": None}
        for name, value in run_values.items():
            values[name][run_id] = value
    # Every row is made before the first statement, so that a result that cannot be written fails before any is sent.
    outcome_rows = [(run_id, _outcome_row(run_id, request), request) for run_id, result in stored.items() for request in result["requests"]]
    attempts = [(claim.run_id, claim.attempt) for claim, _ in items]
    ended: Counter[str] = Counter()
    with session_scope() as session:
        finish = (
            update(_RUNS)
            .where(tuple_(_RUNS.c.id, _RUNS.c.attempts).in_(attempts), _RUNS.c.state == "running")
            .values(
                finished_at=finished,
                lease_expires_at=None,
                lease_owner=None,
                **{name: _per_run(_RUNS.c[name], by_run) for name, by_run in values.items()},
            )
            .returning(_RUNS.c.id, _RUNS.c.proposal_version_id, _RUNS.c.reason)
        )
        rows = {row.id: row for row in session.execute(finish)}
        ended["superseded"] = len(items) - len(rows)
        ended["failed"] = sum(1 for claim, outcome in items if isinstance(outcome, _Failed) and claim.run_id in rows)
        ended["done"] = sum(1 for run_id in stored if run_id in rows)
        ours = [(run_id, row, request) for run_id, row, request in outcome_rows if run_id in rows]
        if ours:
            # One multi-row INSERT ("insertmanyvalues"); RETURNING in parameter order pairs ids with requests.
            outcome_ids = (
                session.execute(insert(_OUTCOMES).returning(_OUTCOMES.c.id, sort_by_parameter_order=True), [row for _, row, _ in ours]).scalars().all()
            )
            findings = [found for outcome_id, (_, _, request) in zip(outcome_ids, ours) for found in _finding_rows(outcome_id, request)]
            if findings:
                session.execute(insert(_FINDINGS).returning(_FINDINGS.c.id), findings)  # RETURNING: one multi-row INSERT too
        changing = [claim for claim, _ in items if claim.run_id in stored and claim.run_id in rows]
        before = _proposals_done_before(session, changing) if changing else set()
        for claim in changing:
            if claim.proposal_ref in before:
                record_changes(session, _as_loaded(session, rows[claim.run_id], values["verdict"][claim.run_id], stored[claim.run_id], finished, claim.attempt))
    return +ended


def _proposals_done_before(session: Any, claims: list[_Claim]) -> set[int]:
    """The proposals (``proposal_ref``) of ``claims`` with a finished run besides these: only those can have a change to record.

    :func:`~feasibility.service.changes.record_changes` finds nothing to compare a
    proposal's first finished run with, so most runs of a submission burst skip it.
    One query for the batch (the claims are of distinct proposals).
    """
    query = (
        select(ProposalVersion.proposal_ref)
        .join(CheckRun, CheckRun.proposal_version_id == ProposalVersion.id)
        .where(
            ProposalVersion.proposal_ref.in_({claim.proposal_ref for claim in claims}),
            CheckRun.state == "done",
            CheckRun.id.not_in([claim.run_id for claim in claims]),
        )
        .distinct()
    )
    return set(session.scalars(query))


def _as_loaded(session: Any, row: Any, verdict: str, result: dict[str, Any], finished: Any, attempt: int) -> CheckRun:
    """The run as just written, handed to the session as loaded rather than read back."""
    run = CheckRun(
        id=row.id,
        proposal_version_id=row.proposal_version_id,
        reason=row.reason,
        state="done",
        attempts=attempt,
        verdict=verdict,
        result=result,
        error=None,
        finished_at=finished,
    )
    make_transient_to_detached(run)
    session.add(run)
    return run


def _per_run(column: Any, by_run: dict[int, Any]) -> Any:
    """A value to set on every run of the UPDATE: the one value when all runs have it, else a CASE on the run id."""
    given = list(by_run.values())
    if all(value == given[0] for value in given[1:]):
        return _bound(given[0], column)
    return case(*((_RUNS.c.id == run_id, _bound(value, column)) for run_id, value in by_run.items()))


def _bound(value: Any, column: Any) -> Any:
    """``value`` as a parameter of ``column``'s type; None as SQL NULL (not the JSON null)."""
    return null() if value is None else literal(value, column.type)


def _outcome_row(run_id: int, request: dict[str, Any]) -> dict[str, Any]:
    figures = request["figures"]
    return {
        "run_id": run_id,
        "label": request["label"],
        "instrument": request["instrument"],
        "target": request["target"],
        "verdict": request["verdict"],
        "hours_requested": _number(figures.get("hours_requested")),
        "hours_observable": _number(figures.get("hours_observable")),
        "hours_needed": _number(figures.get("hours_needed")),
        "snr_expected": _number(figures.get("snr_expected")),
    }


def _finding_rows(outcome_id: int, request: dict[str, Any]) -> list[dict[str, Any]]:
    """The finding rows of one stored request: its findings that are not feasible (the lists ask for no others), check and level."""
    return [{"outcome_id": outcome_id, "check": f["check"], "level": f["level"]} for f in request["findings"] if f["level"] != Level.FEASIBLE.value]


def _reason(exc: BaseException, prefix: str = "") -> str:
    """What is stored with a failed run: the error's type and message."""
    return prefix + "".join(traceback.format_exception_only(type(exc), exc)).strip()


def _release(claims: list[_Claim]) -> None:
    """Give our claims on runs not stored yet back to the queue after a database fault, trying a few times while the store comes back.

    If the store stays away, the claims' leases lapse (or their holder, this process, is
    seen not to be computing them) and the runs are taken over then.
    """
    attempts = [(claim.run_id, claim.attempt) for claim in claims]
    for pause in (*_RELEASE_PAUSES_S, None):
        try:
            with session_scope() as session:
                session.execute(
                    update(_RUNS)
                    .where(tuple_(_RUNS.c.id, _RUNS.c.attempts).in_(attempts), _RUNS.c.state == "running")
                    .values(state="queued", started_at=None, lease_expires_at=None, lease_owner=None)
                )
            return
        except SQLAlchemyError as exc:
            if pause is None or not is_passing(exc):
                break
            time.sleep(pause)
    log.warning("could not release check runs %s; they are taken over when their leases lapse", [claim.run_id for claim in claims])


def _run_timeout() -> timedelta:
    return timedelta(seconds=float(current_settings().run_timeout_s))


def _number(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value)
