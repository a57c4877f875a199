"""A check run's stored result, compact, and its details recomputed on demand.

A run stores a compact result (:func:`compact_result`): the verdicts, every
finding (check, level, message, suggestion, cause) and every request's figures.
Left out are what is bulky and can be computed again: each request's per-night
plot series, each finding's ``method`` text (the same for every run of an engine
version) and each finding's figures (the numbers behind its message; the request's
key figures are kept). They make most of a full result's size (about 100 of its
118 KB for five requests), and a page asks for them only when a person looks at
one proposal. Compact results stored before finding figures were left out keep
theirs.

:func:`full_result` gives the result as the engine returned it. A result in the
older, full form (stored before this) is returned as it is. A compact one gets
its details from the engine run again on the run's own inputs — the proposal,
observatory and schedule versions it records, which are never changed — when
this process runs the engine version that made the run (the engine is
deterministic, and each request's verdict and findings are compared before the
details are used). Otherwise, or when the recomputation differs, the compact
result is returned without series (pages then show no plot, saying why). A
small per-process cache keeps the last few recomputed details: a proposal's
page, its plots and its packet ask for the same run within seconds.
"""

from __future__ import annotations

import logging
import threading
from collections import OrderedDict
from typing import Any

from sqlalchemy import Connection, select
from sqlalchemy.orm import Session

from feasibility.documents import InstrumentSchedule, Observatory, Proposal, parse_document
from feasibility.results import ProposalResult
from feasibility.service.current import cached_document
from feasibility.service.engine_version import engine_version
from feasibility.store.models import CheckRun, ObservatoryVersion, ProposalVersion, ScheduleVersion

__all__ = ["FORM_KEY", "COMPACT", "DETAILS_CACHE_SIZE", "compact_result", "details_missing_reason", "full_result", "is_compact", "run_key", "RunKey"]

log = logging.getLogger(__name__)

#: The key marking a stored result's form, and its value for the compact form (absent: the older full form).
FORM_KEY = "form"
COMPACT = "compact"

#: Recomputed details kept per process (run id -> per request: series, and the findings' methods and figures).
DETAILS_CACHE_SIZE = 32

#: What the compact form leaves out of a :class:`ProposalResult`.
_LEFT_OUT: Any = {"requests": {"__all__": {"series": True, "findings": {"__all__": {"method", "figures"}}}}}

#: Per request: its series, and per finding its method and figures.
_Details = list[tuple[dict[str, Any], list[tuple[str | None, dict[str, Any]]]]]
_cache: OrderedDict[RunKey, _Details | None] = OrderedDict()
_cache_lock = threading.Lock()


def compact_result(result: ProposalResult) -> dict[str, Any]:
    """``result`` as stored: without plot series, method texts nor finding figures, marked compact.

    The same whether or not the engine computed the series (they are never written).
    """
    stored = result.model_dump(mode="json", exclude=_LEFT_OUT)
    stored[FORM_KEY] = COMPACT
    return stored


def is_compact(stored: Any) -> bool:
    """Whether a stored result is in the compact form (its details to be recomputed)."""
    return isinstance(stored, dict) and stored.get(FORM_KEY) == COMPACT


def full_result(session: Session, run: CheckRun) -> dict[str, Any] | None:
    """Run ``run``'s result with series, methods and finding figures (recomputed for a compact result); None when it has none.

    The answer is a new dict (the stored one is not changed) without the form marker,
    shaped as :class:`ProposalResult`. A compact result whose details cannot be
    recomputed is returned without them (see :func:`details_missing_reason`).
    """
    stored = run.result
    if not isinstance(stored, dict):
        return None
    if not is_compact(stored):
        return stored
    answer = {k: v for k, v in stored.items() if k != FORM_KEY}
    details = _details(session, run)
    if details is None:  # still shaped as a ProposalResult: findings without figures show none
        answer["requests"] = [_with_empty_figures(raw) for raw in stored.get("requests") or []]
        return answer
    requests = []
    for raw, (series, per_finding) in zip(stored.get("requests") or [], details):
        findings = [{"figures": figures, **finding, "method": method} for finding, (method, figures) in zip(raw.get("findings") or [], per_finding)]
        requests.append({**raw, "findings": findings, "series": series})
    answer["requests"] = requests
    return answer


def _with_empty_figures(raw: Any) -> Any:
    """A stored request whose findings lack their figures (left out, not recomputed) given empty ones: the result's shape."""
    if not isinstance(raw, dict):
        return raw
    return {**raw, "findings": [{"figures": {}, **f} if isinstance(f, dict) else f for f in raw.get("findings") or []]}


def details_missing_reason(run: CheckRun) -> str | None:
    """Why a compact run's details cannot be recomputed here (None when they can, or the result is not compact)."""
    if not is_compact(run.result):
        return None
    if run.engine_version != engine_version():
        return f"its series are recomputed by the engine version that made it ({run.engine_version}); this service runs {engine_version()}"
    return None


#: What tells a stored run apart in a per-process cache: the store's address, the run id and its finish time.
RunKey = tuple[str, int, str]


def run_key(session: Session, run: CheckRun) -> RunKey:
    """The key of ``run`` for caches kept in this process (computed details, drawn plots).

    One process may serve several stores (tests, benchmarks) whose run ids start alike, so the
    store's address is part of it; the finish time tells apart a store recreated at the same address.
    """
    bind = session.get_bind()
    address = (bind.engine if isinstance(bind, Connection) else bind).url.render_as_string(hide_password=True)
    return (address, run.id, str(run.finished_at))


def _details(session: Session, run: CheckRun) -> _Details | None:
    """Series, methods and finding figures of each request of compact ``run``: from the cache, or the engine run again."""
    key = run_key(session, run)
    with _cache_lock:
        if key in _cache:
            _cache.move_to_end(key)
            return _cache[key]
    try:
        details = _recompute(session, run)
    except Exception:  # the stored result still stands; only its plots are missing, this time (not cached: it may pass)
        log.exception("check run %s: its details could not be recomputed", run.id)
        return None
    with _cache_lock:
        _cache[key] = details
        while len(_cache) > DETAILS_CACHE_SIZE:
            _cache.popitem(last=False)
    return details


def _recompute(session: Session, run: CheckRun) -> _Details | None:
    """The engine on the run's recorded inputs; None when the engine version differs or the answer does not match."""
    if details_missing_reason(run) is not None or run.state != "done":
        return None
    from feasibility import engine

    stored = run.result or {}
    document = session.scalars(select(ProposalVersion.document).where(ProposalVersion.id == run.proposal_version_id)).one()
    proposal = parse_document(Proposal, document, "proposal")
    observatory = _document(session, Observatory, ObservatoryVersion, run.observatory_version_id)
    schedule = _document(session, InstrumentSchedule, ScheduleVersion, run.schedule_version_id) if run.schedule_version_id else None
    again = engine.check_proposal(proposal, observatory, schedule)
    if not _same(stored, again):
        log.warning("check run %s: the engine now gives another result for its inputs; its details are not shown", run.id)
        return None
    return [
        (request.series, [(finding.method, finding.model_dump(mode="json", include={"figures"})["figures"]) for finding in request.findings])
        for request in again.requests
    ]


def _document(session: Session, kind: Any, model: Any, row_id: int) -> Any:
    """A stored observatory or schedule version as a document, parsed once per content hash and process."""
    content_hash = session.scalars(select(model.content_hash).where(model.id == row_id)).one()
    return cached_document(kind, content_hash, lambda: session.scalar(select(model.document).where(model.id == row_id)))


def _same(stored: dict[str, Any], again: ProposalResult) -> bool:
    """Whether the recomputed result has the stored verdicts, requests and findings (check and level, in order)."""
    requests = stored.get("requests") or []
    if stored.get("verdict") != again.verdict.value or len(requests) != len(again.requests):
        return False
    for raw, request in zip(requests, again.requests):
        if (raw.get("label"), raw.get("verdict")) != (request.label, request.verdict.value):
            return False
        found = [(f.get("check"), f.get("level")) for f in raw.get("findings") or []]
        if found != [(f.check, f.level.value) for f in request.findings]:
            return False
    return True
