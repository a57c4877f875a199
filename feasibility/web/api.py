"""The JSON API under /api/v1: submit proposals, follow their check runs, read verdicts.

Bad input gets a 4xx JSON body naming each field path and its problem; nothing
stored before is changed by a rejected submission. The OpenAPI document is at
/api/v1/openapi.json.
"""

from __future__ import annotations

import logging
import time
from typing import Any

from flask import Blueprint, abort, current_app, request, url_for
from sqlalchemy import select
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import Session

from feasibility.documents.loading import DocumentError, Problem
from feasibility.service import access, submissions
from feasibility.service.details import full_result
from feasibility.service.dispatch import enqueue, marks_with_commit
from feasibility.service.faults import is_lasting, is_passing
from feasibility.service.submissions import NotAllowed, Outcome, Submission, submit
from feasibility.store import queries
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion, User
from feasibility.store.standing import standing_run
from feasibility.web.auth import current_user, require
from feasibility.web.bodies import problem_status, read_request_data, request_body

__all__ = ["bp", "proposal_json", "run_json"]

bp = Blueprint("api", __name__, url_prefix="/api/v1")

log = logging.getLogger(__name__)

#: How often a waiting self-check looks at the store, in seconds.
_POLL_S = 0.1


class Malformed(DocumentError):
    """A request that cannot be read at all (not JSON or YAML, bad query parameter): 400 rather than 422."""


@bp.errorhandler(DocumentError)
def _invalid(error: DocumentError) -> tuple[dict[str, Any], int]:
    return error.as_dict(), 400 if isinstance(error, Malformed) else problem_status(error)


@bp.errorhandler(NotAllowed)
def _forbidden(error: NotAllowed) -> tuple[dict[str, Any], int]:
    return {"error": "forbidden", "message": str(error)}, 403


@bp.get("/openapi.json")
def openapi() -> dict[str, Any]:
    """The OpenAPI 3 description of this API."""
    from feasibility.web.openapi import openapi_document

    return openapi_document(current_app)


@bp.get("/health")
def health() -> dict[str, Any]:
    """Liveness: the store answers; which dispatcher computes runs."""
    with session_scope(read_only=True) as session:
        session.execute(select(1))
    return {"status": "ok", "mode": current_app.extensions["feasibility.dispatch"].mode}


@bp.get("/me")
@require()
def me() -> dict[str, Any]:
    """Who the token belongs to."""
    user = current_user()
    assert user is not None
    return {"name": user.name, "role": user.role}


@bp.post("/proposals")
@require(access.SUBMIT)
def submit_one() -> tuple[dict[str, Any], int, dict[str, str]]:
    """Submit one proposal (JSON or YAML). 202 with a new run; 200 with the existing run for identical content.

    ``?wait=S`` (at most MAX_WAIT_S) waits for the verdict — a self-check — and
    returns it when ready, else the run as usual.
    """
    wait = _wait_seconds()
    user = current_user()
    owner = _on_behalf_of(user)
    body = _parse_body(_body(), "proposal")
    if not isinstance(body, dict):
        raise DocumentError([Problem("", "must be a mapping of fields at the top level")], "proposal")
    try:
        with session_scope() as session:
            # Marked sent in this transaction when its message goes to a broker right after the commit: no second transaction.
            result = submit(session, body, user, owner=owner, mark_sent=marks_with_commit())
            run_id = result.run.id
            payload = run_json(session, result.run, with_result=True, proposal_id=result.proposal_id)
    except SQLAlchemyError as exc:
        status, answer = _store_fault(exc)
        return answer, status, {"Retry-After": "5"} if status == 503 else {}
    if result.must_send:
        enqueue([run_id], marked=result.marked)  # only now that the run is committed; should the broker fail, the relay sends it
    if wait > 0 and payload["state"] in ("queued", "running"):
        payload = _wait_for(run_id, wait)
    status = 202 if result.created and payload["state"] in ("queued", "running") else 200
    return {"created": result.created, "run": payload}, status, {"Location": url_for("api.get_run", run_id=run_id)}


def _wait_for(run_id: int, wait: float) -> dict[str, Any]:
    """The run once done or failed, or as it is when ``wait`` seconds have passed."""
    deadline = time.monotonic() + wait
    with session_scope(read_only=True) as session:
        run = session.get_one(CheckRun, run_id)
        while run.state in ("queued", "running") and time.monotonic() < deadline:
            session.commit()  # end the snapshot so the next read sees the worker's commit
            time.sleep(_POLL_S)
            session.refresh(run)
        return run_json(session, run, with_result=True)


@bp.post("/proposals/bulk")
@require(access.SUBMIT)
def submit_many() -> dict[str, Any]:
    """Submit many proposals at once: ``{"proposals": [...]}`` or a bare list. Each item is answered on its own."""
    user = current_user()
    owner = _on_behalf_of(user)
    data = _parse_body(_body(), "bulk submission")
    items = data.get("proposals") if isinstance(data, dict) else data
    if not isinstance(items, list):
        raise DocumentError([Problem("proposals", "must be a list of proposals")], "bulk submission")
    limit = int(current_app.config["MAX_BULK"])
    if len(items) > limit:
        raise DocumentError([Problem("proposals", f"holds {len(items)} proposals; at most {limit} at once")], "bulk submission")
    answers: list[dict[str, Any] | None] = [None] * len(items)
    documents: list[tuple[int, dict[str, Any]]] = []
    for index, item in enumerate(items):
        if isinstance(item, dict):
            documents.append((index, item))
        else:
            answers[index] = {"index": index, "status": 422, **DocumentError([Problem("", "must be a mapping of fields")], "proposal").as_dict()}
    mark = marks_with_commit()
    to_send: dict[int, None] = {}
    for (index, _), outcome in zip(documents, _store_many([d for _, d in documents], user, owner, mark), strict=True):
        answers[index] = _bulk_item(index, outcome)
        if isinstance(outcome, Submission) and outcome.must_send:
            to_send[outcome.run.id] = None
    # Only now that they are committed: several runs a message (dispatch.RUNS_PER_MESSAGE). Should the broker fail, the relay sends them.
    enqueue(list(to_send), marked=mark)
    done = [a for a in answers if a is not None]
    accepted = sum(1 for a in done if a["status"] in (200, 202))
    return {"accepted": accepted, "rejected": len(done) - accepted, "items": done}


def _store_many(documents: list[dict[str, Any]], user: User | None, owner: User | None, mark: bool) -> list[Outcome | tuple[int, dict[str, Any]]]:
    """Store the documents in one transaction: each one's outcome, or the store's fault (status, answer) for each.

    Should the store refuse one of them for good (a value it cannot hold), each is stored on its own
    transaction instead, so the others are kept and that one is named.
    """
    if not documents:
        return []
    try:
        with session_scope() as session:
            return list(submissions.submit_many(session, documents, user, owner=owner, mark_sent=mark, with_results=False))
    except SQLAlchemyError as exc:
        if len(documents) > 1 and is_lasting(exc):
            return [outcome for document in documents for outcome in _store_many([document], user, owner, mark)]
        fault = _store_fault(exc)
        return [fault] * len(documents)


def _bulk_item(index: int, outcome: Outcome | tuple[int, dict[str, Any]]) -> dict[str, Any]:
    """One bulk item's answer."""
    if isinstance(outcome, Submission):
        run_id = outcome.run.id
        return {
            "index": index,
            "status": 202 if outcome.created else 200,
            "created": outcome.created,
            "run_id": run_id,
            "run": url_for("api.get_run", run_id=run_id),
        }
    if isinstance(outcome, DocumentError):
        return {"index": index, "status": 422, **outcome.as_dict()}
    if isinstance(outcome, NotAllowed):
        return {"index": index, "status": 403, "error": "forbidden", "message": str(outcome)}
    status, answer = outcome
    return {"index": index, "status": status, **answer}


def _store_fault(exc: SQLAlchemyError) -> tuple[int, dict[str, Any]]:
    """A submission the store could not take: 503 when the store is away (send it again), else 422 (it never will)."""
    if is_passing(exc):
        log.warning("a submission was not stored: the store is unavailable (%s)", type(exc).__name__)
        return 503, {"error": "unavailable", "message": "the store is unavailable; nothing was stored, send the proposal again shortly"}
    if is_lasting(exc):
        reason = str(getattr(exc, "orig", exc)).strip().splitlines()[0][:300]
        problem = Problem("", f"cannot be stored: {reason}")
        return 422, DocumentError([problem], "proposal").as_dict()
    raise exc


@bp.get("/runs/<int:run_id>")
@require(access.SEE_PROPOSAL)
def get_run(run_id: int) -> dict[str, Any]:
    """A check run's state, and its result once done."""
    with session_scope(read_only=True) as session:
        run = session.get(CheckRun, run_id)
        if run is None or not _may_read(session, run.proposal_version.proposal):
            abort(404, description=f"no check run {run_id}")
        return run_json(session, run, with_result=True)


@bp.get("/proposals")
@require(access.SEE_PROPOSAL)
def list_proposals() -> dict[str, Any]:
    """Proposals the caller may read, newest first; filter by semester, verdict, instrument, failed check."""
    page = _int_arg("page", 1, 1, 1_000_000)
    per_page = _int_arg("per_page", 50, 1, 200)
    verdict = request.args.get("verdict") or None
    if verdict is not None and verdict not in ("feasible", "marginal", "unchecked", "infeasible"):
        _bad_query("verdict", "must be one of feasible, marginal, unchecked, infeasible")
    with session_scope(read_only=True) as session:
        rows, total = queries.list_proposals(
            session,
            visible=access.visible_to(current_user()),
            semester=request.args.get("semester") or None,
            verdict=verdict,
            instrument=request.args.get("instrument") or None,
            failed_check=request.args.get("failed_check") or request.args.get("check") or None,
            offset=(page - 1) * per_page,
            limit=per_page,
        )
        items = [_list_item(row) for row in rows]
    return {"items": items, "page": page, "per_page": per_page, "total": total}


@bp.get("/proposals/<proposal_id>")
@require(access.SEE_PROPOSAL)
def get_proposal(proposal_id: str) -> dict[str, Any]:
    """A proposal: its latest version, its latest run, and the verdict that stands with findings and figures."""
    with session_scope(read_only=True) as session:
        record = _readable_proposal(session, proposal_id)
        return proposal_json(session, record)


@bp.get("/proposals/<proposal_id>/runs")
@require(access.SEE_PROPOSAL)
def proposal_runs(proposal_id: str) -> dict[str, Any]:
    """The history of a proposal's check runs, newest first (results left out; follow each run's link)."""
    page = _int_arg("page", 1, 1, 1_000_000)
    per_page = _int_arg("per_page", 50, 1, 200)
    with session_scope(read_only=True) as session:
        record = _readable_proposal(session, proposal_id)
        runs = queries.runs_of(session, record, offset=(page - 1) * per_page, limit=per_page)
        return {"proposal_id": record.proposal_id, "page": page, "per_page": per_page, "items": [run_json(session, r) for r in runs]}


def run_json(session: Session, run: CheckRun, *, with_result: bool = False, proposal_id: str | None = None) -> dict[str, Any]:
    """A check run as the API shows it; ``with_result`` adds its result (findings, figures, and the series recomputed when stored compact).

    ``proposal_id``: its proposal's id when the caller knows it (a submission), so the version and proposal need not be read.
    """
    if proposal_id is None:
        proposal_id = run.proposal_version.proposal.proposal_id
    body: dict[str, Any] = {
        "id": run.id,
        "proposal_id": proposal_id,
        "proposal_version": run.proposal_version_id,
        "state": run.state,
        "reason": run.reason,
        "verdict": run.verdict,
        "attempts": run.attempts,
        "observatory_version": run.observatory_version_id,
        "schedule_version": run.schedule_version_id,
        "engine_version": run.engine_version,
        "queued_at": _iso(run.queued_at),
        "started_at": _iso(run.started_at),
        "finished_at": _iso(run.finished_at),
        "error": run.error,
        "links": {"self": f"/api/v1/runs/{run.id}", "proposal": f"/api/v1/proposals/{proposal_id}"},
    }
    if with_result and run.state == "done":
        body["result"] = full_result(session, run)
    return body


def proposal_json(session: Session, record: ProposalRecord) -> dict[str, Any]:
    """A proposal with its latest version's summary, latest run and standing verdict."""
    version = queries.latest_version(session, record)
    latest = queries.latest_run(session, record)
    done = standing_run(session, record)
    return {
        "proposal_id": record.proposal_id,
        "semester": record.semester,
        **_version_summary(version),
        "versions": len(record.versions),
        "latest_run": run_json(session, latest) if latest is not None else None,
        "verdict": done.verdict if done is not None else None,
        "result": run_json(session, done, with_result=True) if done is not None else None,
    }


def _list_item(row: queries.ProposalRow) -> dict[str, Any]:
    run = row.run
    return {
        "proposal_id": row.proposal.proposal_id,
        "semester": row.proposal.semester,
        **_version_summary(row.version),
        "verdict": run.verdict if run is not None else None,
        "run_id": run.id if run is not None else None,
        "links": {"self": f"/api/v1/proposals/{row.proposal.proposal_id}"},
    }


def _version_summary(version: ProposalVersion) -> dict[str, Any]:
    return {
        "version": version.id,
        "title": version.title,
        "pi": version.pi_name,
        "instruments": [i for i in version.instruments.split(",") if i],
        "hours_requested": version.hours_requested,
        "submitted_at": _iso(version.submitted_at),
    }


def _readable_proposal(session: Session, proposal_id: str) -> ProposalRecord:
    record = session.scalar(select(ProposalRecord).where(ProposalRecord.proposal_id == proposal_id))
    if record is None or not _may_read(session, record):
        abort(404, description=f"no proposal {proposal_id!r}")
    return record


def _may_read(session: Session, record: ProposalRecord) -> bool:
    return access.may_see(session, current_user(), record)


def _on_behalf_of(user: User | None) -> User | None:
    """A portal names the proposer it submits for with ``?on_behalf_of=NAME`` (an existing proposer)."""
    name = request.args.get("on_behalf_of")
    if not name:
        return None
    if not access.may(user, access.SUBMIT_ON_BEHALF):
        abort(403, description=f"only {access.roles_text(access.SUBMIT_ON_BEHALF)} submits on behalf of a proposer")
    with session_scope(read_only=True) as session:
        owner = session.scalar(select(User).where(User.name == name))
    if owner is None or not access.may(owner, access.OWN_PROPOSALS):
        _bad_query("on_behalf_of", f"no proposer named {name!r}")
    return owner


def _body() -> bytes:
    data = request_body("proposal")  # a body over MAX_CONTENT_LENGTH is a 413 here
    if not data.strip():
        raise Malformed([Problem("", "the request body is empty; send the proposal as JSON or YAML")], "proposal")
    return data


def _parse_body(data: bytes, document: str) -> Any:
    """JSON or YAML, read safely (feasibility.documents.reading: bounded size, depth and numbers)."""
    return read_request_data(data, document)


def _wait_seconds() -> float:
    raw = request.args.get("wait")
    if raw is None:
        return 0.0
    limit = float(current_app.config["MAX_WAIT_S"])
    try:
        wait = float(raw)
    except ValueError:
        _bad_query("wait", "must be a number of seconds")
    if not 0 <= wait <= limit:
        _bad_query("wait", f"must be between 0 and {limit:g} seconds")
    return wait


def _int_arg(name: str, default: int, low: int, high: int) -> int:
    raw = request.args.get(name)
    if raw is None:
        return default
    try:
        value = int(raw)
    except ValueError:
        _bad_query(name, "must be a whole number")
    if not low <= value <= high:
        _bad_query(name, f"must be between {low} and {high}")
    return value


def _bad_query(field: str, problem: str) -> Any:
    raise Malformed([Problem(field, problem)], "query")


def _iso(moment: Any) -> str | None:
    if moment is None:
        return None
    return str(moment.isoformat())
